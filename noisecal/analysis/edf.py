"""Noise identification, equivalent degrees of freedom and deviation intervals.

References
----------
W. J. Riley, C. A. Greenhall, "Power law noise identification using the lag 1
autocorrelation", 18th European Frequency and Time Forum (2004).
C. A. Greenhall, W. J. Riley, "Uncertainty of stability variances based on
finite differences", 35th PTTI Meeting (2003) — computed by
:mod:`noisecal.analysis.greenhall` (tested against ``allantools.edf_greenhall``).
NIST SP 1065 (2008), section 5.3: chi-square confidence intervals; section 5.6 and
Table 7: few-cluster noise identification and the total variance EDF.
"""

from __future__ import annotations

import functools

import numpy as np

from .greenhall import edf_greenhall

MIN_BLOCKS = 100
"""Fewest cluster averages for the lag-1 method; Riley & Greenhall (2004) name 30 as
the least, but with 30–100 the identification of white noise fails often enough to
spoil interval coverage (measured: 92 % instead of 95 % at 64 averages)."""


MAX_BLOCKS = 1 << 20
"""Cluster averages used at most (the first ones): the lag-1 estimate is then good to
about 0.001, and a day at 400 Hz would otherwise cost gigabytes per tau."""


def _lag1(z: np.ndarray) -> float:
    z = z - z.mean()
    den = float(np.dot(z, z))
    return float(np.dot(z[:-1], z[1:]) / den) if den > 0 else 0.0


def noise_id_lag1(y: np.ndarray, m: int, dmax: int = 2) -> int | None:
    """Power-law exponent alpha of rate data at averaging factor m (compiled).

    The one-pass kernel :func:`noisecal.analysis.engine.noise_id_lag1` (11-15x
    faster); :func:`noise_id_lag1_reference` is the numpy path the tests hold it to.
    Parameters and result as there.
    """
    from .engine import noise_id_lag1 as compiled

    return compiled(np.asarray(y, dtype=np.float64), int(m), int(dmax), MIN_BLOCKS,
                    MAX_BLOCKS)


def noise_ids_lag1(y: np.ndarray, ms: np.ndarray, dmax: int = 2) -> list:
    """:func:`noise_id_lag1` at several factors (compiled; one pass over the samples
    for an octave grid, see :func:`noisecal.analysis.engine.noise_ids_lag1`).

    Returns
    -------
    list of (int or None)
        Per factor, as :func:`noise_id_lag1`.
    """
    from .engine import noise_ids_lag1 as compiled

    return compiled(np.asarray(y, dtype=np.float64), np.asarray(ms, dtype=np.int64),
                    int(dmax), MIN_BLOCKS, MAX_BLOCKS)


def noise_id_lag1_reference(y: np.ndarray, m: int, dmax: int = 2) -> int | None:
    """Power-law exponent alpha of rate data at averaging factor m.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples of one contiguous segment.
    m : int
        Averaging factor.
    dmax : int
        Most differencing steps (2 for Allan forms, 3 for Hadamard).

    Returns
    -------
    alpha : int or None
        S_y(f) ∝ f^alpha: 2 white PM, 1 flicker PM, 0 white FM, −1 flicker FM,
        −2 random-walk FM, …; None when fewer than ``MIN_BLOCKS`` averages.
        At most the first ``MAX_BLOCKS`` averages are used.
    """
    blocks = min(y.shape[0] // m, MAX_BLOCKS)
    if blocks < MIN_BLOCKS:
        return None
    z = np.asarray(y[:blocks * m]).reshape(blocks, m).mean(axis=1)
    t = np.arange(blocks, dtype=np.float64)
    z = z - np.polyval(np.polyfit(t, z, 1), t)
    d = 0
    while True:
        r1 = _lag1(z)
        rho = r1 / (1.0 + r1) if r1 > -1.0 else -1.0
        if rho < 0.25 or d >= dmax:
            return int(-round(2.0 * rho) - 2 * d)
        z = np.diff(z)
        d += 1


ALPHA_MIN_EDF = -3
"""Lowest alpha an EDF is taken at: flicker walk FM. The Greenhall–Riley algorithm also
covers random-run FM (alpha = -4, d = 3; :mod:`noisecal.analysis.greenhall` computes it),
but a Hadamard point identified as -4 keeps the -3 EDF, as before: taking -4 would
change the Hadamard intervals, and the coverage tests were run with -3."""


def clamp_alpha(alpha: int, d: int) -> int:
    """Keep alpha where the d-th difference variance converges (alpha + 2d > 1), at
    most 2 and at least ``ALPHA_MIN_EDF``."""
    # Plain min/max: np.clip on a scalar costs ~10 µs, and this runs per tau and type.
    return int(min(max(int(alpha), max(2 - 2 * int(d), ALPHA_MIN_EDF)), 2))


def candidate_alphas(d: int) -> np.ndarray:
    """Noise exponents an EDF is taken over when the type cannot be identified.

    Parameters
    ----------
    d : int
        Difference order (2 Allan forms and total, 3 Hadamard).

    Returns
    -------
    alphas : ndarray of int, shape (k,)
        White PM (2) down to the lowest exponent at which the estimator converges,
        at least ``ALPHA_MIN_EDF``: −2 (random-walk FM) for Allan forms, −3 (flicker
        walk FM) for Hadamard forms.
    """
    return np.arange(2, max(2 - 2 * d, ALPHA_MIN_EDF) - 1, -1)


def edf(alpha: int, d: int, m: int, n_phase: int, overlapping: bool, modified: bool) -> float:
    """Greenhall–Riley equivalent degrees of freedom for one contiguous run.

    Parameters
    ----------
    alpha : int
        Noise exponent, clamped to the convergent range.
    d : int
        Difference order (2 Allan, 3 Hadamard).
    m : int
        Averaging factor.
    n_phase : int
        Phase points in the run (rate samples + 1).
    overlapping, modified : bool
        Estimator form.
    """
    return _edf(clamp_alpha(alpha, d), int(d), int(m), int(n_phase), bool(overlapping),
                bool(modified))


@functools.lru_cache(maxsize=1 << 14)
def _edf(alpha: int, d: int, m: int, n_phase: int, overlapping: bool, modified: bool) -> float:
    # Cached: the channels of a recording share their runs and taus, and the dense
    # grids repeat the octave's shortest taus (an EDF costs 10-40 µs).
    try:
        value = edf_greenhall(alpha, d, m, n_phase, overlapping, modified)
    except ValueError:  # a run shorter than one term: fall back to the term count
        value = float("nan")
    if not np.isfinite(value) or value <= 0:
        value = max(1.0, (n_phase - 1) / m - (d - 1))
    return value


_TOTVAR_TABLE = {0: (1.50, 0.0), -1: (1.17, 0.22), -2: (0.93, 0.36)}
"""NIST SP 1065 (2008) Table 7: TOTVAR EDF = b·T/tau − c for white, flicker and
random-walk FM (Howe & Greenhall)."""


def edf_total(alpha: int, m: int, n_phase: int) -> float:
    """Equivalent degrees of freedom of the total variance for one contiguous run.

    Parameters
    ----------
    alpha : int
        Noise exponent, clamped to 2 … −2.
    m : int
        Averaging factor.
    n_phase : int
        Phase points in the run (rate samples + 1); T/tau = (n_phase − 1)/m.

    Returns
    -------
    nu : float
        b·T/tau − c (NIST SP 1065 Table 7) for alpha = 0, −1, −2. For white and
        flicker PM (alpha = 2, 1), where the table has no entry, the simple AVAR
        approximations of SP 1065 Table 5 with N phase points, as the reference
        total-deviation tables do. At least 1.

    References
    ----------
    D. A. Howe, C. A. Greenhall, "Total variance: a progress report on a new frequency
    stability characterization", 29th PTTI Meeting (1997).
    W. J. Riley, NIST SP 1065 (2008), Tables 5 and 7.
    """
    alpha = int(np.clip(alpha, -2, 2))
    n = float(n_phase)
    if alpha in _TOTVAR_TABLE:
        b, c = _TOTVAR_TABLE[alpha]
        value = b * (n - 1.0) / m - c
    elif alpha == 2:
        value = (n + 1.0) * (n - 2.0 * m) / (2.0 * (n - m))
    else:
        a = (n - 1.0) / (2.0 * m)
        b = (2.0 * m + 1.0) * (n - 1.0) / 4.0
        value = float(np.exp(np.sqrt(max(np.log(a), 0.0) * np.log(b))))
    return max(1.0, float(value))


def estimator_edf(alpha: int, kind: str, m: int, n_phase: int) -> float:
    """EDF of one contiguous run for the estimator ``kind`` and noise exponent alpha.

    Parameters
    ----------
    alpha : int
        Noise exponent.
    kind : str
        ``"adev"``, ``"oadev"``, ``"mdev"``, ``"hdev"``, ``"ohdev"`` or ``"totdev"``.
    m : int
        Averaging factor.
    n_phase : int
        Phase points in the run.
    """
    if kind == "totdev":
        return edf_total(alpha, m, n_phase)
    d = 3 if kind in ("hdev", "ohdev") else 2
    return edf(alpha, d, m, n_phase, kind in ("oadev", "ohdev", "mdev"), kind == "mdev")


def conservative_edf(kind: str, m: int, run_lengths: np.ndarray,
                     weights: np.ndarray) -> tuple[int, float]:
    """Smallest pooled EDF over the noise types the estimator admits.

    Used where the noise type cannot be identified (fewer than ``MIN_BLOCKS``
    cluster averages): the interval is then valid whichever power-law type the
    data hold, instead of borrowing a type identified at another tau.

    Parameters
    ----------
    kind : str
        Estimator, see :func:`estimator_edf`.
    m : int
        Averaging factor.
    run_lengths : ndarray of int, shape (s,)
        Phase points of each contiguous run that contributes terms.
    weights : ndarray, shape (s,)
        Terms each run contributes.

    Returns
    -------
    alpha : int
        The exponent that gives the smallest EDF (usually random-walk FM, −2,
        or −3 for Hadamard forms).
    nu : float
        That EDF.

    References
    ----------
    NIST SP 1065 (2008), section 5.6: noise identification needs enough averages;
    C. A. Greenhall, W. J. Riley (2003) for the EDF of each type.
    """
    d = 3 if kind in ("hdev", "ohdev") else 2
    best_alpha, best = 0, np.inf
    for a in candidate_alphas(d):
        nu = pooled_edf(int(a), kind, m, run_lengths, weights)
        if nu < best:
            best_alpha, best = int(a), nu
    return best_alpha, float(best)


def pooled_edf(alpha: int, kind: str, m: int, run_lengths: np.ndarray,
               weights: np.ndarray) -> float:
    """EDF of a count-weighted mean of independent per-run variance estimates.

    Parameters
    ----------
    alpha : int
        Noise exponent.
    kind : str
        Estimator.
    m : int
        Averaging factor.
    run_lengths : ndarray of int, shape (s,)
        Phase points of each run.
    weights : ndarray, shape (s,)
        Terms of each run (the weights of the mean).

    Returns
    -------
    nu : float
        (Σw)² / Σ(w²/ν_i): a weighted mean of independent scaled chi-squares.
    """
    run_lengths = np.asarray(run_lengths, dtype=np.int64)
    weights = np.asarray(weights, dtype=np.float64)
    lengths, w2 = _length_groups(run_lengths, weights)
    inv = sum(v / estimator_edf(alpha, kind, m, int(n)) for n, v in zip(lengths, w2))
    return float(np.sum(weights) ** 2 / inv)


MAX_EDF_LENGTHS = 32
"""Distinct run lengths whose EDFs are computed one by one in :func:`pooled_edf`."""


def _length_groups(run_lengths: np.ndarray, weights: np.ndarray):
    """Run lengths to evaluate and the summed squared weights each stands for.

    A record broken into hundreds of runs of different lengths would need an EDF per
    length, tau and noise type: about 65 000 for 600 runs of a 400 000-sample record
    (12 s at a millisecond each as allantools computed them, over a second still at
    10-40 µs). Beyond ``MAX_EDF_LENGTHS`` distinct lengths the runs are
    grouped on a ratio-2^(1/8) grid and each group takes the EDF at its
    weight-averaged length (an EDF grows about in proportion to the run's length,
    so a 9 % wide group moves the pooled EDF by far less than that).
    """
    if run_lengths.shape[0] == 1:  # one run (no gaps), the common case: no sorting
        return run_lengths, weights * weights
    distinct, inverse = np.unique(run_lengths, return_inverse=True)
    if distinct.shape[0] <= MAX_EDF_LENGTHS:
        return distinct, np.bincount(inverse, weights=weights * weights)
    key = np.floor(8.0 * np.log2(np.maximum(run_lengths, 1))).astype(np.int64)
    _, group = np.unique(key, return_inverse=True)
    w2 = np.bincount(group, weights=weights * weights)
    mean = np.bincount(group, weights=weights * run_lengths) / np.maximum(
        np.bincount(group, weights=weights), 1e-300)
    return np.rint(mean).astype(np.int64), w2


def chi2_interval(dev: np.ndarray, nu: np.ndarray, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """Interval of a deviation with EDF nu: sigma²·nu/chi²(nu, 1∓a/2) (NIST SP 1065).

    Parameters
    ----------
    dev : ndarray, shape (k,)
        Deviations.
    nu : ndarray, shape (k,)
        Equivalent degrees of freedom.
    level : float
        Two-sided confidence level.

    Returns
    -------
    lower, upper : ndarray, shape (k,)
    """
    a = 1.0 - level
    from .residuals import chi2_ppf

    # Both quantiles in one call: the same numbers, half the per-call overhead.
    nu = np.asarray(nu, dtype=float)
    top, bottom = chi2_ppf(np.array([1.0 - a / 2.0, a / 2.0]).reshape((2,) + (1,) * nu.ndim),
                           nu)
    return dev * np.sqrt(nu / top), dev * np.sqrt(nu / bottom)
