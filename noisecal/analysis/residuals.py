"""Statistics of residuals against ground truth: correlation, robust scatter, tests.

Everything here describes data; turning it into R, a gate or a noise law is
:mod:`noisecal.fit.measurement`'s job.

References
----------
G. M. Ljung, G. E. P. Box, "On a measure of lack of fit in time series models",
Biometrika 65(2), 1978.
P. J. Rousseeuw, K. Van Driessen, "A fast algorithm for the minimum covariance
determinant estimator", Technometrics 41(3), 1999.
P. J. Rousseeuw, C. Croux, "Alternatives to the median absolute deviation",
JASA 88, 1993 (MAD consistency factor 1.4826).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .special import gammainc, gammaincc, gammaincinv

MAD_TO_SIGMA = 1.482602218505602
"""1 / Φ⁻¹(3/4): MAD → σ for Gaussian data (Rousseeuw & Croux 1993)."""


def acf(r: np.ndarray, nlags: int) -> np.ndarray:
    """Sample autocorrelation of a series, lags 0 … nlags (biased estimator).

    Parameters
    ----------
    r : ndarray, shape (n,)
    nlags : int

    Returns
    -------
    rho : ndarray, shape (nlags + 1,)
        ``rho[0] == 1``; the same estimator as ``statsmodels.tsa.stattools.acf``.
    """
    x = np.asarray(r, dtype=float) - np.mean(r)
    n = x.shape[0]
    size = 1 << int(np.ceil(np.log2(2 * n)))
    f = np.fft.rfft(x, size)
    full = np.fft.irfft(f * np.conj(f), size)[: nlags + 1]
    if not full[0] > 0:  # a constant series: no correlation to speak of
        return np.concatenate([[1.0], np.zeros(nlags)])
    return full / full[0]


def ljung_box(r: np.ndarray, lags: int) -> tuple[float, float]:
    """Ljung–Box portmanteau statistic and its chi-square p-value.

    Q = n (n + 2) Σ_{k=1}^{h} ρ_k² / (n − k), compared with χ²(h).

    Returns
    -------
    q : float
    p_value : float
    """
    n = np.asarray(r).shape[0]
    rho = acf(r, lags)[1:]
    q = float(n * (n + 2) * np.sum(rho ** 2 / (n - np.arange(1, lags + 1))))
    return q, float(gammaincc(lags / 2.0, q / 2.0))  # chi-square survival function


def effective_size(r: np.ndarray, max_lag: int | None = None) -> float:
    """Effective number of independent samples of a correlated series.

    n_eff = n / (1 + 2 Σ ρ_k), the sum running over Geyer's initial positive
    sequence (pairs of lags summed while positive), so noise at long lags
    does not enter.

    Parameters
    ----------
    r : ndarray, shape (n,)
    max_lag : int, optional
        Longest lag considered (default min(n // 4, 2000)).

    Returns
    -------
    float
        Between 1 and n.
    """
    n = np.asarray(r).shape[0]
    lags = max_lag or max(2, min(n // 4, 2000))
    rho = acf(r, lags)
    total = 0.0
    for k in range(1, lags - 1, 2):
        pair = rho[k] + rho[k + 1]
        if pair <= 0:
            break
        total += pair
    return float(np.clip(n / (1.0 + 2.0 * total), 1.0, n))


@dataclass(frozen=True)
class RobustScatter:
    """Robust location and scatter of multivariate residuals.

    Attributes
    ----------
    location : ndarray, shape (p,)
    scatter : ndarray, shape (p, p)
        Consistent for Gaussian data (reweighted MCD).
    distances : ndarray, shape (n,)
        Squared Mahalanobis distance of each sample under (location, scatter).
    support : ndarray of bool, shape (n,)
        Samples kept by the final reweighting step.
    """

    location: np.ndarray
    scatter: np.ndarray
    distances: np.ndarray
    support: np.ndarray


def chi2_ppf(p, k):
    """Quantile ``p`` of the chi-square law with ``k`` degrees of freedom.

    ``2·P⁻¹(k/2, p)`` with P the regularised lower incomplete gamma function, which
    is what scipy.stats.chi2.ppf computes, from :mod:`noisecal.analysis.special`:
    neither scipy.stats nor scipy.special (tenths of a second to import) for a quantile.
    """
    return 2.0 * gammaincinv(np.asarray(k, dtype=float) / 2.0, p)


def mahalanobis2(x: np.ndarray, loc: np.ndarray, cov: np.ndarray) -> np.ndarray:
    """Squared Mahalanobis distance of each row of x (n, p) from loc under cov, (n,)."""
    diff = x - loc
    sol = np.linalg.solve(cov, diff.T).T
    return np.einsum("ij,ij->i", diff, sol)


def _c_steps(x, subset, h, max_iter=50):
    det_old = np.inf
    for _ in range(max_iter):
        loc = x[subset].mean(axis=0)
        cov = np.cov(x[subset], rowvar=False).reshape(x.shape[1], x.shape[1])
        det = np.linalg.det(cov)
        if det <= 0 or not np.isfinite(det):
            return loc, cov, np.inf
        d2 = mahalanobis2(x, loc, cov)
        subset = np.argpartition(d2, h - 1)[:h]
        if det >= det_old * (1 - 1e-12):
            break
        det_old = det
    return loc, cov, det


def min_cov_det(x: np.ndarray, support_fraction: float = 0.75, seed: int = 0,
                starts: int = 20) -> RobustScatter:
    """Reweighted minimum covariance determinant estimate.

    Concentration steps (Rousseeuw & Van Driessen 1999) from a deterministic
    start (the h samples nearest the coordinate-wise median in MAD units) and
    ``starts`` random (p + 1)-subsets; the subset of smallest determinant is
    scaled to consistency at the Gaussian, then reweighted with the samples
    inside the 97.5 % chi-square contour.

    Parameters
    ----------
    x : ndarray, shape (n, p)
        Residuals (n > 2p).
    support_fraction : float
        h / n of the raw MCD subset (0.5 gives the highest breakdown; 0.75 is
        more efficient and resists up to 25 % outliers).
    seed : int
        Seed of the random starts.
    starts : int
        Random starting subsets.

    Returns
    -------
    RobustScatter
    """
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    n, p = x.shape
    h = int(np.ceil(support_fraction * n))
    med = np.median(x, axis=0)
    mad = MAD_TO_SIGMA * np.median(np.abs(x - med), axis=0)
    mad[mad == 0] = 1.0
    z2 = np.sum(((x - med) / mad) ** 2, axis=1)
    best = _c_steps(x, np.argpartition(z2, h - 1)[:h], h)
    rng = np.random.default_rng(seed)
    for _ in range(starts):
        cand = _c_steps(x, rng.choice(n, size=p + 1, replace=False), h, max_iter=3)
        if cand[2] < best[2]:
            cand = _c_steps(x, np.argpartition(mahalanobis2(x, cand[0], cand[1]), h - 1)[:h], h)
            if cand[2] < best[2]:
                best = cand
    loc, cov, _ = best
    # Consistency at the Gaussian: the h smallest distances are a truncated chi-square.
    d2 = mahalanobis2(x, loc, cov)
    cov = cov * np.median(d2) / chi2_ppf(0.5, p)
    d2 = mahalanobis2(x, loc, cov)
    keep = d2 <= chi2_ppf(0.975, p)
    loc = x[keep].mean(axis=0)
    cov = np.cov(x[keep], rowvar=False).reshape(p, p) / truncation_factor(0.975, p)
    return RobustScatter(loc, cov, mahalanobis2(x, loc, cov), keep)


def truncation_factor(probability: float, p: int) -> float:
    """Variance ratio of a p-dimensional Gaussian cut at its ``probability`` contour.

    The samples inside the contour χ²_p(probability) have covariance c·Σ with
    c = P(χ²_{p+2} ≤ γ) / P(χ²_p ≤ γ); dividing by c restores Σ.
    """
    gamma = chi2_ppf(probability, p)
    return float(gammainc((p + 2) / 2.0, gamma / 2.0) / probability)  # chi-square CDF


@dataclass(frozen=True)
class Shape:
    """Normality and tail checks of one residual channel.

    Attributes
    ----------
    jarque_bera, jarque_bera_p : float
    anderson_darling : float
        A² against the normal with fitted mean and variance.
    anderson_darling_p : float
        Its p-value (interpolated from scipy's tables, so clipped to 0.01 … 0.15
        on older scipy releases, given there as the 5 % verdict 0.01 or 0.15).
    excess_kurtosis : float
    student_t_dof : float
        Degrees of freedom of a Student-t fitted by maximum likelihood
        (large: Gaussian-like tails; below ~10: heavy tails).
    """

    jarque_bera: float
    jarque_bera_p: float
    anderson_darling: float
    anderson_darling_p: float
    excess_kurtosis: float
    student_t_dof: float


def shape(r: np.ndarray) -> Shape:
    """Normality (Jarque–Bera, Anderson–Darling) and tails (kurtosis, Student-t ν)."""
    from scipy import stats  # here: the only user of scipy.stats in this module

    r = np.asarray(r, dtype=float)
    jb = stats.jarque_bera(r)
    try:
        ad = stats.anderson(r, dist="norm", method="interpolate")
        ad_p = float(ad.pvalue)
    except TypeError:  # scipy < 1.17: critical values only
        ad = stats.anderson(r, dist="norm")
        crit = float(ad.critical_values[list(ad.significance_level).index(5.0)])
        ad_p = 0.01 if ad.statistic > crit else 0.15
    sample = r if r.shape[0] <= 20000 else r[:: int(np.ceil(r.shape[0] / 20000))]
    dof = float(stats.t.fit(sample)[0])
    return Shape(float(jb.statistic), float(jb.pvalue), float(ad.statistic), ad_p,
                 float(stats.kurtosis(r)), dof)
