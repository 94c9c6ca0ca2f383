"""Equivalent degrees of freedom of the difference-based stability variances.

The algorithm of Greenhall & Riley (2003) for the Allan, Hadamard and first-difference
variances (difference order d = 1, 2, 3), overlapping or not, modified or not, under a
power-law noise S_y(f) ∝ f^alpha. The estimator is a mean of M squared filter outputs
z_n of the phase; its EDF follows from the generalised autocovariance of z (Eqs. 7–9),
summed exactly over at most ``J_MAX`` lags (Eq. 10) or, for many lags, from the paper's
large-M expansions (Tables 1–3).

Only numpy is needed: this module is what a run pays for its intervals, and the run
should not load a statistics library for it.

Differences from the allantools 2024.6 function ``edf_greenhall``, which computes the
same algorithm and is the reference the tests hold this module to:

* White PM, unmodified, ceil(M/S) ≤ d (fewer than d + 1 distinct lags between terms):
  allantools raises ``NotImplementedError``; here the exact finite sum (case 4 of the
  algorithm, see :func:`edf_greenhall`), which a brute-force covariance of the terms
  confirms.
* alpha = −4, unmodified, many terms: allantools' Table 2 lookup refuses the alpha = −4
  row it holds; here the row is used (its values are the integrals of Eq. 10's limit,
  checked by the tests).
* Flicker PM (alpha = 1), unmodified, with a large filter factor F: the second
  difference in Eq. 8 of t² ln|t| at spacing 1/F loses about log10(F²) digits when
  evaluated as written (allantools' EDF: relative errors up to ~1e-16·F², measured
  3e-10 at F = 1e3 and 3e-4 to 6e-4 at F = 3.3e6 against 60-digit arithmetic); here it
  is evaluated in a cancellation-free form, good to ~1e-15 at any F.

References
----------
C. A. Greenhall, W. J. Riley, "Uncertainty of stability variances based on finite
differences", Proc. 35th Precise Time and Time Interval Meeting (2003), pp. 267–280.
W. J. Riley, *Handbook of Frequency Stability Analysis*, NIST SP 1065 (2008), §5.3.
"""

from __future__ import annotations

import math

import numpy as np

J_MAX = 100
"""Most lags summed exactly before the large-M expansions take over (the paper's Jmax)."""

ALPHAS = (2, 1, 0, -1, -2, -3, -4)
"""Noise exponents the algorithm covers: white PM (2) to random-run FM (−4)."""

# Large-M coefficients (a0, a1): 1/edf ≈ (1/r)(a0 − a1/r), r = M/S. Keys alpha, then
# d = 1, 2, 3; None where alpha + 2d ≤ 1 (the variance does not converge). Table 1 is
# for the modified variances (F = 1), Table 2 for the unmodified ones in the limit
# F → ∞. Both are ∫ρ(t)² dt and ∫|t|ρ(t)² dt over |t| ≤ d + 1 with ρ the normalised
# Eq. 9 (the tests recompute them by quadrature).
_TABLE1 = {
    2: ((2 / 3, 1 / 3), (7 / 9, 1 / 2), (22 / 25, 2 / 3)),
    1: ((0.840, 0.345), (0.997, 0.616), (1.141, 0.843)),
    0: ((1.079, 0.368), (1.033, 0.607), (1.184, 0.848)),
    -1: (None, (1.048, 0.534), (1.180, 0.816)),
    -2: (None, (1.302, 0.535), (1.175, 0.777)),
    -3: (None, None, (1.194, 0.703)),
    -4: (None, None, (1.489, 0.702)),
}
_TABLE2 = {
    2: ((3 / 2, 1 / 2), (35 / 18, 1.0), (231 / 100, 3 / 2)),
    1: ((78.6, 25.2), (790.0, 410.0), (9950.0, 6520.0)),
    0: ((2 / 3, 1 / 6), (2 / 3, 1 / 3), (7 / 9, 1 / 2)),
    -1: (None, (0.852, 0.375), (0.997, 0.617)),
    -2: (None, (1.079, 0.368), (1.033, 0.607)),
    -3: (None, None, (1.053, 0.553)),
    -4: (None, None, (1.302, 0.535)),
}
# Table 3: flicker PM, unmodified: sz(0, m, 1, d) ≈ b0 + b1·ln m, d = 1, 2, 3.
_TABLE3 = ((6.0, 4.0), (15.23, 12.0), (47.8, 40.0))


def _sw(t: np.ndarray, alpha: int) -> np.ndarray:
    """Generalised autocovariance of the phase for S_y ∝ f^alpha, Eq. (7).

    Up to a factor that cancels in every EDF: |t|^(3−alpha) for even alpha,
    t^(3−alpha)·ln|t| (0 at t = 0) for odd alpha. ``alpha = 3`` (ln|t|) serves the
    F → ∞ limit of flicker PM, Eq. (8).
    """
    p = 3 - alpha
    a = np.abs(t)
    if alpha % 2 == 0:
        return a ** p
    with np.errstate(divide="ignore", invalid="ignore"):
        out = a ** p * np.log(a)
    return np.where(a == 0.0, 0.0, out)


def _sx_flicker_pm(t: np.ndarray, f: float) -> np.ndarray:
    """Eq. (8) for alpha = 1 and finite F without its cancellation.

    With h = 1/F and u = h/t, F²[2w(t) − w(t−h) − w(t+h)] for w = t² ln|t| equals
    −2 ln|t| − (1/u² + 1)·ln(1 − u²) − 4·atanh(u)/u, whose terms stay O(1) as F grows
    (the form as written subtracts numbers F² times larger than the result). Used for
    |t| ≥ 2h; nearer 0 the direct form has nothing to cancel.
    """
    h = 1.0 / f
    a = np.abs(t)
    far = a >= 2.0 * h
    out = np.empty_like(a)
    if far.any():
        af = a[far]
        u = h / af
        out[far] = (-2.0 * np.log(af) - (1.0 / (u * u) + 1.0) * np.log1p(-u * u)
                    - 4.0 * np.arctanh(u) / u)
    near = ~far
    if near.any():
        an = a[near]
        out[near] = f * f * (2.0 * _sw(an, 1) - _sw(an - h, 1) - _sw(an + h, 1))
    return out


def _sx(t: np.ndarray, f: float, alpha: int) -> np.ndarray:
    """Generalised autocovariance of the phase averaged over 1/F, Eq. (8).

    F = 1 for the modified variances, F = m for the unmodified ones; F = ∞ is the
    limit sw of alpha + 2.
    """
    if math.isinf(f):
        return _sw(t, alpha + 2)
    if alpha == 1:
        return _sx_flicker_pm(t, f)
    h = 1.0 / f
    return f * f * (2.0 * _sw(t, alpha) - _sw(t - h, alpha) - _sw(t + h, alpha))


def _binomial_weights(d: int) -> np.ndarray:
    """(−1)^k·C(2d, d+k), k = −d … d: the d-th difference applied twice."""
    return np.array([(-1) ** abs(k) * math.comb(2 * d, d + k) for k in range(-d, d + 1)],
                    dtype=np.float64)


def _sz(t: np.ndarray, f: float, alpha: int, d: int) -> np.ndarray:
    """Autocovariance of the filter outputs z at lag t (in units of tau), Eq. (9).

    Parameters
    ----------
    t : ndarray, shape (k,)
        Lags in units of tau = m·tau0.
    f : float
        Filter factor F (1, m or ∞).
    alpha, d : int
        Noise exponent and difference order.

    Returns
    -------
    ndarray, shape (k,)
    """
    t = np.asarray(t, dtype=np.float64)
    k = np.arange(-d, d + 1, dtype=np.float64)
    return _sx(t[:, None] + k[None, :], f, alpha) @ _binomial_weights(d)


def _basic_sum(j_count: int, m_terms: float, s: float, f: float, alpha: int,
               d: int) -> tuple[float, float]:
    """BasicSum of Eq. (10) and sz(0)².

    BasicSum = sz(0)² + 2·Σ_{j=1}^{J−1} (1 − j/M)·sz(j/S)² + (1 − J/M)·sz(J/S)².

    Returns
    -------
    basic_sum, sz0_squared : float
    """
    j = np.arange(j_count + 1, dtype=np.float64)
    z2 = _sz(j / s, f, alpha, d) ** 2
    w = 2.0 * (1.0 - j / m_terms)
    w[0] = 1.0
    w[-1] = 1.0 - j_count / m_terms
    return float(w @ z2), float(z2[0])


def _large_m(table: dict, alpha: int, d: int, r: float) -> float:
    """(1/r)(a0 − a1/r) with the table's coefficients: 1/edf for many terms."""
    coef = table[alpha][d - 1]
    if coef is None:
        raise ValueError(f"no coefficients for alpha = {alpha}, d = {d}")
    a0, a1 = coef
    return (a0 - a1 / r) / r


def _white_pm_unmodified(d: int, m_terms: int, r: float) -> float:
    """1/edf for white PM, unmodified (case 4), exact.

    For white PM the terms are correlated only at lags k·tau, |k| ≤ d, with
    correlation ρ_k = (−1)^k C(2d, d−k)/C(2d, d); a lag k·tau exists between
    (1 − |k|/r)·M pairs when |k| < r. Hence 1/edf = (1/M)·Σ_{|k| < min(d+1, K)}
    (1 − |k|/r)·ρ_k², K = ceil(r); for K > d this is (1/M)(a0 − a1/r) with
    a0 = C(4d, 2d)/C(2d, d)² and a1 = d/2.
    """
    k_count = math.ceil(r)
    if k_count > d:
        a0 = math.comb(4 * d, 2 * d) / math.comb(2 * d, d) ** 2
        return (a0 - (d / 2.0) / r) / m_terms
    centre = math.comb(2 * d, d)
    total = 1.0
    for k in range(1, k_count):
        total += 2.0 * (1.0 - k / r) * (math.comb(2 * d, d - k) / centre) ** 2
    return total / m_terms


def edf_greenhall(alpha: int, d: int, m: int, n: int, overlapping: bool = False,
                  modified: bool = False) -> float:
    """Equivalent degrees of freedom of a d-th difference variance estimate.

    Parameters
    ----------
    alpha : int
        Noise exponent, S_y(f) ∝ f^alpha: 2 white PM, 1 flicker PM, 0 white FM,
        −1 flicker FM, −2 random-walk FM, −3 flicker walk FM, −4 random-run FM.
        Needs alpha + 2d > 1 (the variance converges).
    d : int
        Difference order of the phase: 1 first difference, 2 Allan, 3 Hadamard.
    m : int
        Averaging factor, tau = m·tau0 (≥ 1).
    n : int
        Phase points of the contiguous run (rate samples + 1).
    overlapping : bool
        Terms at every sample (stride S = m) instead of every tau (S = 1).
    modified : bool
        Phase averaged over tau before differencing (filter factor F = 1 instead of m).

    Returns
    -------
    edf : float
        Chi-square degrees of freedom ν: ν·s²/σ² ≈ χ²(ν) for the estimate s².

    Raises
    ------
    ValueError
        alpha, d or m outside the algorithm's range, or a run too short for one
        term (n < m/F + m·d phase points).

    Notes
    -----
    With L = m/F + m·d, M = 1 + floor(S(N − L)/m) terms, J = min(M, (d+1)S),
    r = M/S and ``J_MAX`` = 100, the cases of the paper:

    1. Modified (F = 1), every alpha: J ≤ J_MAX: BasicSum(J, M, S, 1)/(M·sz(0)²);
       else r > d + 1: Table 1; else with m' = J_MAX/r: BasicSum(J_MAX, J_MAX, m',
       1)/(J_MAX·sz(0)²).
    2. Unmodified, alpha ≤ 0: J ≤ J_MAX: as 1 with F = m if m(d + 1) ≤ J_MAX, else
       F = ∞; else r > d + 1: Table 2; else BasicSum(J_MAX, J_MAX, m', ∞)/(J_MAX·sz(0)²).
    3. Unmodified, alpha = 1: J ≤ J_MAX: BasicSum(J, M, S, m)/(M·sz(0)²); else
       r > d + 1: Table 2 over (b0 + b1 ln m)² (Table 3); else
       BasicSum(J_MAX, J_MAX, m', m')/(J_MAX·(b0 + b1 ln m)²).
    4. Unmodified, alpha = 2: exact, see :func:`_white_pm_unmodified`.

    The boundary between the table and the m' sum is taken as r > d + 1, as
    allantools 2024.6 takes it.

    References
    ----------
    C. A. Greenhall, W. J. Riley, "Uncertainty of stability variances based on
    finite differences", Proc. 35th PTTI Meeting (2003): Eqs. (7)–(10), the case
    list and Tables 1–3.
    """
    alpha, d, m, n = int(alpha), int(d), int(m), int(n)
    if d not in (1, 2, 3):
        raise ValueError(f"difference order d = {d}: use 1, 2 or 3")
    if alpha not in ALPHAS or alpha + 2 * d <= 1:
        raise ValueError(f"alpha = {alpha} with d = {d}: the algorithm needs "
                         f"-4 <= alpha <= 2 and alpha + 2d > 1")
    if m < 1:
        raise ValueError(f"averaging factor m = {m}: use m >= 1")
    f = 1 if modified else m
    s = m if overlapping else 1
    span = m // f + m * d          # L, phase points one term spans
    m_terms = 1 + (s * (n - span)) // m
    if m_terms < 1:
        raise ValueError(f"{n} phase points are fewer than the {span} one term "
                         f"spans at m = {m}, d = {d}")
    j_count = min(m_terms, (d + 1) * s)
    r = m_terms / s

    if f == 1 and modified:
        if j_count <= J_MAX:
            total, z0 = _basic_sum(j_count, m_terms, s, 1.0, alpha, d)
            return m_terms * z0 / total
        if r > d + 1:
            return 1.0 / _large_m(_TABLE1, alpha, d, r)
        total, z0 = _basic_sum(J_MAX, J_MAX, J_MAX / r, 1.0, alpha, d)
        return J_MAX * z0 / total
    if alpha <= 0:
        if j_count <= J_MAX:
            fe = float(m) if m * (d + 1) <= J_MAX else math.inf
            total, z0 = _basic_sum(j_count, m_terms, s, fe, alpha, d)
            return m_terms * z0 / total
        if r > d + 1:
            return 1.0 / _large_m(_TABLE2, alpha, d, r)
        total, z0 = _basic_sum(J_MAX, J_MAX, J_MAX / r, math.inf, alpha, d)
        return J_MAX * z0 / total
    if alpha == 1:
        if j_count <= J_MAX:
            total, z0 = _basic_sum(j_count, m_terms, s, float(m), 1, d)
            return m_terms * z0 / total
        b0, b1 = _TABLE3[d - 1]
        norm = (b0 + b1 * math.log(m)) ** 2
        if r > d + 1:
            return norm / _large_m(_TABLE2, 1, d, r)
        mp = J_MAX / r
        total, _ = _basic_sum(J_MAX, J_MAX, mp, mp, 1, d)
        return J_MAX * norm / total
    return 1.0 / _white_pm_unmodified(d, m_terms, r)
