"""Statistics of a running filter's innovations: NIS, NEES, whiteness.

For a consistent linear-Gaussian filter the innovation ν_k (dimension m) is
zero-mean, white, with covariance S_k, so NIS_k = ν_kᵀ S_k⁻¹ ν_k is χ²(m); with
truth, NEES_k = (x_k − x̂_k)ᵀ P_k⁻¹ (x_k − x̂_k) is χ²(n). The average of K
independent such values, times K, is χ²(K·m): its two-sided acceptance band is
[χ²_{Km}(α/2)/K, χ²_{Km}(1−α/2)/K]. The innovations whitened by S_k's Cholesky
factor are independent N(0, 1) components, whose sample autocorrelations at
lags ≥ 1 lie within ±z_{1−α/2}/√K.

References
----------
Y. Bar-Shalom, X. R. Li, T. Kirubarajan, *Estimation with Applications to
Tracking and Navigation*, Wiley 2001, §5.4 (consistency tests: NIS, NEES,
time-averaged and ensemble bands, whiteness). G. M. Ljung, G. E. P. Box, "On a
measure of lack of fit in time series models", Biometrika 65(2), 1978.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import ndtri

from .residuals import acf, chi2_ppf, effective_size, ljung_box


def normalised_squares(e: np.ndarray, cov: np.ndarray):
    """eᵀ C⁻¹ e per step, and e whitened by C's Cholesky factor.

    Parameters
    ----------
    e : ndarray, shape (K, d)
        Innovations (or estimation errors), SI.
    cov : ndarray, shape (K, d, d)
        Their covariances as the filter states them.

    Returns
    -------
    q : ndarray, shape (K,)
        Normalised squares (NIS or NEES).
    white : ndarray, shape (K, d)
        L_k⁻¹ e_k with C_k = L_k L_kᵀ: N(0, I) for a consistent filter.

    Raises
    ------
    numpy.linalg.LinAlgError
        A covariance that is not positive definite.
    """
    chol = np.linalg.cholesky(cov)
    white = np.linalg.solve(chol, e[..., None])[..., 0]
    return np.einsum("kd,kd->k", white, white), white


def chi2_band(dof: int, count: float, level: float = 0.95) -> tuple[float, float]:
    """Two-sided band of the average of ``count`` independent χ²(dof) values
    (``count`` may be an effective, non-integer number).

    Returns
    -------
    (low, high) : float
        χ²_{count·dof}(α/2)/count and χ²_{count·dof}(1−α/2)/count, α = 1 − level.
    """
    a = (1 - level) / 2
    k = count * dof
    return float(chi2_ppf(a, k) / count), float(chi2_ppf(1 - a, k) / count)


@dataclass(frozen=True)
class ChiSquareTest:
    """A normalised-square test (NIS or NEES).

    Attributes
    ----------
    kind : str
        ``"NIS"`` or ``"NEES"``.
    dof : int
        Degrees of freedom of one value (m or n).
    steps : int
        Values averaged (all runs together).
    effective : float
        Independent values they are worth: ``steps`` for NIS (white under the
        hypothesis), Geyer's effective size for NEES (estimation errors are
        correlated over steps even in a consistent filter).
    runs : int
    mean : float
        Average of the values (its expectation is ``dof``).
    band : tuple of float
        Acceptance band of ``mean`` at ``level`` (time average over all steps).
    level : float
    verdict : str
        ``"within"``, ``"above"`` or ``"below"`` the band.
    scale : tuple of float
        Ratio mean/dof with its interval: how much larger the actual spread is
        than the filter's (1 = right), (value, low, high).
    gate : float
        χ²_dof(level) per-step gate.
    outside_fraction : float
        Fraction of steps above ``gate`` (``1 − level`` expected).
    run_band : tuple of float or None
        With several runs: band of the ensemble average at one step.
    run_outside_fraction : float or None
        Fraction of steps whose ensemble average lies outside ``run_band``.
    """

    kind: str
    dof: int
    steps: int
    effective: float
    runs: int
    mean: float
    band: tuple
    level: float
    verdict: str
    scale: tuple
    gate: float
    outside_fraction: float
    run_band: tuple | None = None
    run_outside_fraction: float | None = None


def chi_square_test(values: list, dof: int, kind: str = "NIS",
                    level: float = 0.95, correlated: bool = False) -> ChiSquareTest:
    """The time-averaged (and, for several runs, ensemble) test of NIS or NEES values.

    Parameters
    ----------
    values : list of ndarray, each shape (K_r,)
        Per-step values of each run.
    dof : int
        m for NIS, n for NEES.
    kind : str
    level : float
        Two-sided level of the bands, e.g. 0.95.
    correlated : bool
        The values are correlated over steps under the hypothesis (NEES): the
        time-averaged band uses their effective number (Geyer's initial positive
        sequence, :func:`noisecal.analysis.residuals.effective_size`).

    Returns
    -------
    ChiSquareTest

    References
    ----------
    Bar-Shalom, Li & Kirubarajan (2001), §5.4.2 (time-average and N-run bands).
    """
    allv = np.concatenate(values)
    steps = allv.shape[0]
    k = sum(effective_size(v) for v in values) if correlated else float(steps)
    mean = float(allv.mean())
    lo, hi = chi2_band(dof, k, level)
    verdict = "above" if mean > hi else "below" if mean < lo else "within"
    a = (1 - level) / 2
    # If values are c * chi2(dof), mean*K*dof/chi2 quantiles bound c.
    sc = (mean / dof, mean * k / chi2_ppf(1 - a, k * dof),
          mean * k / chi2_ppf(a, k * dof))
    gate = float(chi2_ppf(level, dof))
    run_band = run_out = None
    if len(values) > 1:
        shortest = min(v.shape[0] for v in values)
        ens = np.mean([v[:shortest] for v in values], axis=0)
        run_band = chi2_band(dof, len(values), level)
        run_out = float(np.mean((ens < run_band[0]) | (ens > run_band[1])))
    return ChiSquareTest(kind, dof, steps, float(k), len(values), mean, (lo, hi), level,
                         verdict,
                         tuple(float(x) for x in sc), gate, float(np.mean(allv > gate)),
                         run_band, run_out)


@dataclass(frozen=True)
class Whiteness:
    """Whiteness of the whitened innovations.

    Attributes
    ----------
    lags : int
        Lags tested (1 … lags).
    acf : ndarray, shape (d, lags)
        Sample autocorrelation of each whitened component at lags 1 … lags
        (runs pooled by averaging their ACFs, weighted by length).
    band : float
        ± z_{1−α/2}/√K: the band of one autocorrelation of white noise.
    outside_fraction : float
        Fraction of (component, lag) pairs outside the band (α expected).
    ljung_box_p : ndarray, shape (d,)
        Ljung–Box p-value of each component (first run, or the longest).
    p_value : float
        Bonferroni-combined p-value over components: min(1, d · min p).
    white : bool
        ``p_value`` at or above 1 − level.
    lag1 : float
        Mean lag-1 autocorrelation over components (its sign gives the direction).
    """

    lags: int
    acf: np.ndarray
    band: float
    outside_fraction: float
    ljung_box_p: np.ndarray
    p_value: float
    white: bool
    lag1: float


def whiteness(white_runs: list, lags: int, level: float = 0.95) -> Whiteness:
    """Autocorrelation and Ljung–Box test of whitened innovations.

    Parameters
    ----------
    white_runs : list of ndarray, each shape (K_r, d)
        Whitened innovations of each run (:func:`normalised_squares`).
    lags : int
        Largest lag tested.
    level : float

    Returns
    -------
    Whiteness

    References
    ----------
    Bar-Shalom et al. (2001), §5.4.2 (whiteness test); Ljung & Box (1978).
    """
    d = white_runs[0].shape[1]
    lengths = np.array([w.shape[0] for w in white_runs], float)
    k = lengths.sum()
    rho = np.zeros((d, lags))
    for w, n in zip(white_runs, lengths):
        for c in range(d):
            # Zero-mean by hypothesis: a mean left in counts against whiteness.
            x = w[:, c]
            full = np.correlate(x, x, "full")[x.shape[0] - 1: x.shape[0] + lags] \
                if x.shape[0] <= 4096 else _acf_uncentred(x, lags)
            rho[c] += n * (full[1:] / full[0] if full[0] > 0 else 0.0)
    rho /= k
    z = ndtri(0.5 + level / 2)  # normal quantile
    band = float(z / np.sqrt(k))
    longest = white_runs[int(np.argmax(lengths))]
    ps = np.array([ljung_box(longest[:, c], lags)[1] for c in range(d)])
    p = float(min(1.0, d * ps.min()))
    return Whiteness(lags, rho, band, float(np.mean(np.abs(rho) > band)), ps, p,
                     p >= 1 - level, float(rho[:, 0].mean()))


def _acf_uncentred(x: np.ndarray, lags: int) -> np.ndarray:
    """Σ x_k x_{k+j} for j = 0 … lags, by FFT."""
    n = x.shape[0]
    size = 1 << int(np.ceil(np.log2(2 * n)))
    f = np.fft.rfft(x, size)
    return np.fft.irfft(f * np.conj(f), size)[: lags + 1]


__all__ = ["normalised_squares", "chi2_band", "chi_square_test", "ChiSquareTest",
           "whiteness", "Whiteness", "acf"]
