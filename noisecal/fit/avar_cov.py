"""Exact covariance of overlapping Allan variance estimates, and replicates drawn from it.

The overlapping AVAR at averaging factor m is a quadratic form in the phase
x (x = τ0·cumsum(y)): Â(m) = Σ_i z_m(i)² / (2 m² τ0² M) with
z_m(i) = x(i+2m) − 2x(i+m) + x(i) and M terms. For Gaussian noise

    Cov(Σ_i z_a(i)², Σ_j z_b(j)²) = 2 Σ_l n(l) c_ab(l)² + 4 μ_a μ_b Σ_l n(l) c_ab(l),

where c_ab(l) = Cov(z_a(i), z_b(i+l)), n(l) counts the pairs (i, j) with
j − i = l, and μ is the deterministic part of z (a rate ramp). Because the
second differences have zero-sum weights, c_ab(l) needs only each term's
*generalised* autocovariance G of the phase, defined up to a polynomial of
degree 3 in the lag t (which the two second differences annihilate):

    c_ab(l) = Σ_{p∈{0,a,2a}} Σ_{q∈{0,b,2b}} w_p w_q G((l + q − p)·τ0),  w = (1, −2, 1).

======================  =============================================  =================
term (coefficient)      G(t), modulo polynomials of degree ≤ 3         Allan variance
======================  =============================================  =================
quantization (Q²)       Q² at t = 0, else 0 (white phase)              3Q²/τ²
white noise (N²)        −N²|t|/2 (phase a Brownian motion)             N²/τ
bias instability (B²)   (B²/2π) t² ln|t| (flicker rate)                (2 ln2/π) B²
random walk (K²)        K²|t|³/12 (phase an integrated random walk)    K²τ/3
AR(1) part (h, C, T)    −h|t| − C (e^(−u) − 1 + u − u²/2), u = |t|/T   see below
======================  =============================================  =================

The AR(1)-shaped parts are the discrete processes the bootstrap simulation makes
(:meth:`NoiseModel.exponential_parts`): Gauss–Markov point samples of σ² and
correlation time T (h → σ²T, C → σ²T² for T ≫ τ0, the continuous Annex C form),
and white noise through the one-pole low-pass of the band-limit column, which
then replaces the white row. The expressions reproduce each term's Allan
variance (c_aa(0)/(2a²τ0²), checked in the tests) and, for one power-law noise,
the EDF of Greenhall's algorithm (``allantools.edf_greenhall``, m ≥ 64; at m = 1
the exact value is lower, also tested).

White, random walk and quantization give c_ab(l) = 0 outside −2b < l < 2a
(there every argument has one sign and G is a polynomial); flicker and
Gauss–Markov leave tails, summed to 64(a + b) lags (flicker) or 40 correlation
times, within the record. The sums run over the
exact integer lags where pieces are short and by Gauss–Legendre with the
Euler–Maclaurin end terms where they are long, on pieces split at every kink
of c (lags p − q) and of n (0 and M_b − M_a). Separate runs of a gapped
record are taken as independent.

The replicates keep each point's marginal as a scaled chi-square of ν =
2·mean²/var degrees of freedom and join them by a Gaussian copula with the
covariance's correlation matrix.

References
----------
C. A. Greenhall, W. J. Riley, "Uncertainty of stability variances based on
finite differences", 35th PTTI Meeting (2003): the generalised autocovariance
form of the EDF. IEEE Std 952-1997, Annex C: the terms' Allan variances.
G. Matheron, "The intrinsic random functions and their applications", Adv.
Appl. Probab. 5 (1973): generalised covariances of processes with stationary
increments.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import _native
from .._native import fit_calls

W = np.array([1.0, -2.0, 1.0])
"""Second-difference weights."""

SHORT = 16
"""Pieces up to this many lags are summed lag by lag; longer ones by quadrature (the
lag-by-lag sum over every lag agrees to 2e-5 with every term present)."""

GL_NODES = 8
"""Gauss–Legendre nodes per long piece (c² is a polynomial of degree ≤ 7 times n,
or smooth with a logarithm at one end)."""

FLICKER_REACH = 64
"""Flicker tail: summed up to this many (a + b) lags beyond the core. Past it c falls
as 1/l², so Σ n c² misses a part of order 64⁻³ (below 1e-5); Σ n c (the ramp's
cross term only) misses about 1/64 of the flicker share."""

FLICKER_EXACT = 16
"""Beyond this many (a + b) lags the flicker tail takes the leading term of its
expansion, −2c(aτ0)²(bτ0)²/t² (relative error of order 16⁻²)."""

OU_REACH = 40.0
"""Gauss–Markov tail: summed up to this many correlation times (e⁻⁴⁰ beyond)."""


@dataclass(frozen=True)
class NoiseModel:
    """The terms whose Allan-point covariance is computed (SI, unit u of the rate).

    Attributes
    ----------
    q2, n2, b2, k2, r2 : float
        Squared IEEE Std 952 coefficients (negatives count as 0).
    low_pass : float
        Time constant of a one-pole low-pass on the white noise, s (0: none).
    gm : (sigma, corr_time), optional
        First-order Gauss–Markov term.
    """

    q2: float = 0.0
    n2: float = 0.0
    b2: float = 0.0
    k2: float = 0.0
    r2: float = 0.0
    low_pass: float = 0.0
    gm: tuple[float, float] | None = None

    @classmethod
    def from_terms(cls, c2, low_pass: float = 0.0, gm=None) -> "NoiseModel":
        """From [Q², N², B², K², R²] (negative entries count as 0)."""
        q2, n2, b2, k2, r2 = (max(float(v), 0.0) for v in c2)
        return cls(q2, n2, b2, k2, r2, float(low_pass), gm)

    def exponential_parts(self, period: float) -> list[tuple[float, float, float]]:
        """Each AR(1)-shaped part as (h, C, T): G(t) = −h|t| − C·E(|t|/T) modulo
        polynomials, E(u) = e^(−u) − 1 + u − u²/2.

        The parts are the discrete processes the bootstrap's simulation makes
        (:class:`noisecal.fit.simulate.RateModel`), exact at the sample instants:
        white noise through the one-pole low-pass y_k = a·y_(k−1) + (1 − a)·w_k
        (a from :func:`noisecal.fit.simulate.pole_for`), whose samples have
        autocovariance γ0·a^|j|, and Gauss–Markov point samples of
        autocovariance σ²φ^|j|, φ = e^(−τ0/T). A stationary sequence of
        autocovariance γ0·r^|j| integrates to a phase of generalised
        autocovariance −(τ0γ0/2)·(1 + r)/(1 − r)·|t| − τ0²γ0·r/(1 − r)²·r^|l|.
        """
        out = []
        if self.n2 > 0 and self.low_pass > 0:
            from .simulate import pole_for

            a = pole_for(period, self.low_pass)
            if a > 0:
                C = period * self.n2 * a / (1.0 - a * a)
                T = -period / np.log(a)
                out.append((0.5 * self.n2 - C / T, C, T))
        if self.gm is not None and self.gm[0] > 0:
            s2, T = float(self.gm[0]) ** 2, float(self.gm[1])
            x = 0.5 * period / T
            # h − C/T = σ²τ0·(coth x − x/sinh²x)/2, whose leading terms cancel.
            f = (x / 3.0 - 2.0 * x ** 3 / 45.0 + 6.0 * x ** 5 / 945.0 if x < 0.05
                 else 0.5 * (1.0 / np.tanh(x) - x / np.sinh(x) ** 2))
            C = period ** 2 * s2 / (4.0 * np.sinh(x) ** 2)
            out.append((s2 * period * f, C, T))
        return out


def _e_tail(u: np.ndarray) -> np.ndarray:
    """e^(−u) − 1 + u − u²/2 for u ≥ 0, accurate where it is of order u³."""
    u = np.asarray(u, dtype=np.float64)
    out = np.empty_like(u)
    small = u < 0.5
    v = u[small]
    # Alternating series from u³: 12 terms leave < 1e-16 relative at u = 0.5.
    term = -v ** 3 / 6.0
    acc = term.copy()
    for k in range(4, 16):
        term = -term * v / k
        acc += term
    out[small] = acc
    w = u[~small]
    out[~small] = np.exp(-w) - 1.0 + w - 0.5 * w * w
    return out


def _g_compact(model: NoiseModel, t: np.ndarray, parts: list) -> np.ndarray:
    """Generalised autocovariance of the phase at lags t (s), every term but
    quantization (which lives on lag 0 only); ``parts`` are the model's
    :meth:`NoiseModel.exponential_parts`."""
    a = np.abs(t)
    g = np.zeros_like(a)
    if model.n2 > 0 and model.low_pass <= 0:
        g -= 0.5 * model.n2 * a
    if model.k2 > 0:
        g += model.k2 / 12.0 * a ** 3
    if model.b2 > 0:
        with np.errstate(divide="ignore", invalid="ignore"):
            g += model.b2 / (2.0 * np.pi) * np.where(a > 0, a * a * np.log(np.where(a > 0, a, 1.0)), 0.0)
    for h, C, T in parts:
        g -= h * a + C * _e_tail(a / T)
    return g


def _c_smooth(model: NoiseModel, lags: np.ndarray, a: np.ndarray, b: np.ndarray,
              period: float) -> np.ndarray:
    """c_ab(l) without quantization, by the nine-term sum where −2b < l < 2a and
    by the flicker and Gauss–Markov tails elsewhere (the other terms vanish there).

    ``lags``, ``a`` and ``b`` are arrays of one shape (one node each).
    """
    out = np.zeros(lags.shape[0])
    tail = (lags >= 2 * a) | (lags <= -2 * b)
    if model.b2 > 0 and np.any(tail):
        far = tail & (np.abs(lags) > FLICKER_EXACT * (a + b))
        near = tail & ~far
        if np.any(near):
            out[near] += _nine(NoiseModel(b2=model.b2), lags[near], a[near], b[near], period)
        if np.any(far):
            # Leading term: (aτ0)²(bτ0)² G(t), G = −2c/t² for G = c t² ln|t|.
            af, bf = a[far], b[far]
            t = (lags[far] + bf - af) * period
            out[far] -= 2.0 * model.b2 / (2.0 * np.pi) * (af * bf) ** 2 * period ** 4 / (t * t)
    if np.any(tail):
        lt, at, bt = lags[tail], a[tail], b[tail]
        for _, C, T in model.exponential_parts(period):
            ea = -np.expm1(-at * period / T)
            eb = -np.expm1(-bt * period / T)
            # Every argument of one sign: only the exponential survives, in closed form.
            expo = np.where(lt > 0, (2.0 * at - lt), (lt + 2.0 * bt)) * period / T
            out[tail] -= C * np.exp(np.minimum(expo, 0.0)) * (ea * eb) ** 2
    inside = ~tail
    if np.any(inside):
        out[inside] += _nine(model, lags[inside], a[inside], b[inside], period)
    return out


def _nine(model: NoiseModel, lags: np.ndarray, a: np.ndarray, b: np.ndarray,
          period: float) -> np.ndarray:
    """Σ_p Σ_q w_p w_q G((l + q − p)τ0) without quantization (exact at any lag)."""
    out = np.zeros(lags.shape[0])
    parts = model.exponential_parts(period)
    for wp, fp in zip(W, (0, 1, 2)):
        for wq, fq in zip(W, (0, 1, 2)):
            out += wp * wq * _g_compact(model, (lags + fq * b - fp * a) * period, parts)
    return out


def _delta_lags(a: int, b: int) -> dict:
    """Quantization: lag → Σ w_p w_q over the (p, q) with l = p − q."""
    out: dict = {}
    for wp, fp in zip(W, (0, 1, 2)):
        for wq, fq in zip(W, (0, 1, 2)):
            lag = fp * a - fq * b
            out[lag] = out.get(lag, 0.0) + wp * wq
    return out


def _geometric(start: float, stop: float, first: float = 1.0) -> np.ndarray:
    """Cut points whose distance from ``start`` doubles from ``first``, towards ``stop``."""
    first = max(first, 1.0)
    span = abs(stop - start)
    if span <= first:
        return np.empty(0)
    steps = first * 2.0 ** np.arange(int(np.log2(span / first)) + 1)
    steps = steps[steps < span]
    return np.rint(start + np.sign(stop - start) * steps)


_GL = np.polynomial.legendre.leggauss(GL_NODES)


def _nodes(edges: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lags and weights with Σ w·f(l) ≈ Σ of f over every integer lag from
    edges[0] to edges[-1] (inclusive) for a continuous f, exact lag by lag on
    pieces up to ``SHORT`` long, Gauss–Legendre with the Euler–Maclaurin end
    terms on longer ones."""
    u, v = edges[:-1], edges[1:]
    size = v - u
    short = size <= SHORT
    parts_l, parts_w = [], []
    if np.any(short):
        us, ss = u[short], size[short]
        idx = np.repeat(np.arange(us.shape[0]), ss)
        offs = np.arange(idx.shape[0]) - np.repeat(np.cumsum(ss) - ss, ss)
        parts_l.append((us[idx] + offs).astype(np.float64))
        parts_w.append(np.ones(idx.shape[0]))
    if np.any(~short):
        ul, vl = u[~short].astype(np.float64), v[~short].astype(np.float64)
        x, w = _GL
        half = 0.5 * (vl - ul)
        # Σ_{l=u}^{v−1} f = ∫_u^v f + (f(u) − f(v))/2 + O(f').
        parts_l += [(ul[:, None] + half[:, None] * (x + 1.0)).ravel(), ul, vl]
        parts_w += [(half[:, None] * w).ravel(), np.full(ul.shape, 0.5),
                    np.full(ul.shape, -0.5)]
    parts_l.append(np.array([float(edges[-1])]))
    parts_w.append(np.ones(1))
    return np.concatenate(parts_l), np.concatenate(parts_w)


def _counts(lags: np.ndarray, Ma, Mb) -> np.ndarray:
    """n(l): pairs (i, j), 0 ≤ i < Ma, 0 ≤ j < Mb, with j − i = l."""
    return np.clip(np.minimum(Ma, Mb - lags) - np.maximum(0.0, -lags), 0.0, None)


def _pair_edges(model: NoiseModel, a: int, b: int, Ma: int, Mb: int,
                period: float) -> np.ndarray | None:
    """Piece edges over the lags where c_ab may be non-zero, split at every kink of c
    and n and graded towards the kinks of c where a short correlation time bends it."""
    lo, hi = -(Ma - 1), Mb - 1
    reach = 0.0
    if model.b2 > 0:
        reach = FLICKER_REACH * (a + b)
    ou = model.exponential_parts(period)
    for _, _, T in ou:
        reach = max(reach, OU_REACH * T / period)
    u, v = max(lo, int(-2 * b - reach)), min(hi, int(2 * a + reach))
    if v <= u:
        return np.array([u]) if v == u else None
    kinks = np.array([0, -b, -2 * b, a, a - b, a - 2 * b, 2 * a, 2 * a - b, 2 * a - 2 * b],
                     dtype=np.float64)
    parts = [kinks, np.array([0.0, Mb - Ma])]
    if reach > 0:
        parts += [_geometric(2 * a, v), _geometric(-2 * b, u)]
    for _, _, T in ou:
        lag_T = T / period
        if lag_T * 2 ** 6 > 1 and lag_T < 4 * (a + b):
            # Graded towards each kink: e^(−|t|/T) bends within a few T of it.
            steps = lag_T * 2.0 ** np.arange(4)
            parts.append((kinks[:, None] + np.concatenate([steps, -steps])).ravel())
    cuts = np.rint(np.concatenate(parts))
    inner = np.unique(cuts[(cuts > u) & (cuts < v)]).astype(np.int64)
    return np.concatenate([[u], inner, [v]]).astype(np.int64)


def avar_covariance(model: NoiseModel, m: np.ndarray, period: float,
                    lengths) -> tuple[np.ndarray, np.ndarray]:
    """Mean and covariance of the overlapping AVAR estimates at factors ``m`` (compiled).

    The lag sums of :func:`avar_covariance_reference` one pair at a time in a
    compiled kernel that releases the GIL; the same pieces, nodes and weights, so
    the same numbers to rounding (tested). Parameters and result as there.
    """
    m = np.asarray(m, dtype=np.int64)
    k = m.shape[0]
    runs, mult = run_groups(lengths)
    total = np.zeros(k)
    for L, count in zip(runs, mult):
        total += count * np.maximum(L + 1 - 2 * m, 0)
    ramp = np.sqrt(max(model.r2, 0.0)) * (m * period) ** 2
    parts = np.array(model.exponential_parts(period), dtype=np.float64).reshape(-1, 3)
    white = 0.5 * model.n2 if model.n2 > 0 and model.low_pass <= 0 else 0.0
    sums = np.zeros((k, k))
    kernel = fit_calls.sums_kernel if _native.enabled() else _sums_kernel
    kernel(m.astype(np.float64), runs.astype(np.float64), mult.astype(np.float64),
           float(period), white, float(model.k2), float(model.b2), float(model.q2),
           ramp, parts, _GL[0], _GL[1], float(SHORT), float(FLICKER_EXACT),
           float(FLICKER_REACH), float(OU_REACH), sums)
    return _mean_cov(model, m, period, total, ramp, sums)


def _mean_cov(model: NoiseModel, m: np.ndarray, period: float, total: np.ndarray,
              ramp: np.ndarray, sums: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean and covariance of the AVAR points from the pair sums (upper triangle of
    ``sums``), the pooled term counts ``total`` and the ramp's second differences."""
    k = m.shape[0]
    sums = np.triu(sums) + np.triu(sums, 1).T
    scale = 2.0 * (m * period) ** 2 * np.where(total > 0, total, np.nan)
    cov = sums / np.outer(scale, scale)
    mf = m.astype(np.float64)
    zero = _c_smooth(model, np.zeros(k), mf, mf, period) + model.q2 * 6.0
    mean = np.where(total > 0, (zero + ramp ** 2) / (2.0 * (m * period) ** 2), np.nan)
    return mean, cov


MAX_RUN_GROUPS = 32
"""Distinct run lengths summed one by one; more are grouped (see :func:`run_groups`)."""


def run_groups(lengths) -> tuple[np.ndarray, np.ndarray]:
    """Distinct run lengths and how many runs have each.

    A record broken into many runs of different lengths would cost one pass per
    length; beyond ``MAX_RUN_GROUPS`` distinct lengths the runs are grouped on a
    ratio-√2 grid and each group summed as its count of runs of the group's mean
    length (the sums are close to linear in the length once it is several times the
    longest factor; total sample count kept).

    Returns
    -------
    runs : ndarray of int, shape (g,)
    counts : ndarray of int, shape (g,)
    """
    runs, mult = np.unique(np.asarray(lengths, dtype=np.int64), return_counts=True)
    if runs.shape[0] <= MAX_RUN_GROUPS:
        return runs, mult
    key = np.floor(2.0 * np.log2(np.maximum(runs, 1))).astype(np.int64)
    groups, inverse = np.unique(key, return_inverse=True)
    count = np.bincount(inverse, weights=mult)
    mean = np.bincount(inverse, weights=mult * runs) / count
    return np.rint(mean).astype(np.int64), count.astype(np.int64)


def avar_covariance_reference(model: NoiseModel, m: np.ndarray, period: float,
                              lengths) -> tuple[np.ndarray, np.ndarray]:
    """Mean and covariance of the overlapping AVAR estimates at factors ``m`` (numpy).

    Parameters
    ----------
    model : NoiseModel
    m : ndarray of int, shape (k,)
        Averaging factors.
    period : float
        Sample period τ0, s.
    lengths : sequence of int
        Samples in each run without gaps (the estimate pools the runs'
        second differences, as :func:`noisecal.analysis.allan.deviation` does).

    Returns
    -------
    mean : ndarray, shape (k,)
        Expected AVAR, u².
    cov : ndarray, shape (k, k)
        Covariance of the estimates, u⁴. Points no run can form get NaN.
    """
    m = np.asarray(m, dtype=np.int64)
    k = m.shape[0]
    runs, mult = run_groups(lengths)
    total = np.zeros(k)
    ramp = np.sqrt(max(model.r2, 0.0)) * (m * period) ** 2
    lag_parts, w_parts, pairs, deltas = [], [], [], []
    for L, count in zip(runs, mult):
        M = L + 1 - 2 * m
        total += count * np.maximum(M, 0)
        for i in range(k):
            for j in range(i, k):
                if M[i] <= 0 or M[j] <= 0:
                    continue
                a, b, Ma, Mb = int(m[i]), int(m[j]), int(M[i]), int(M[j])
                edges = _pair_edges(model, a, b, Ma, Mb, period)
                if edges is None:
                    continue
                lags, w = (_nodes(edges) if edges.shape[0] > 1
                           else (edges.astype(np.float64), np.ones(1)))
                if model.q2 > 0:
                    deltas += [(len(pairs), lag, weight)
                               for lag, weight in _delta_lags(a, b).items()
                               if -(Ma - 1) <= lag <= Mb - 1 and weight != 0.0]
                lag_parts.append(lags)
                w_parts.append(w * count)
                pairs.append((i, j, count, a, b, Ma, Mb))
    P = np.array(pairs, dtype=np.float64).reshape(-1, 7)
    sizes = np.array([x.shape[0] for x in lag_parts])
    pid = np.repeat(np.arange(len(pairs)), sizes)
    lags = np.concatenate(lag_parts)
    w = np.concatenate(w_parts)
    n = _counts(lags, P[pid, 5], P[pid, 6])
    c = _c_smooth(model, lags, P[pid, 3], P[pid, 4], period)
    s2 = np.bincount(pid, w * n * c * c, minlength=len(pairs))
    s1 = np.bincount(pid, w * n * c, minlength=len(pairs))
    if deltas:
        # Quantization's deltas at their lags: (c_s + d)² − c_s² = 2 c_s d + d².
        q = np.array([d[0] for d in deltas])
        lag_d = np.array([float(d[1]) for d in deltas])
        dval = model.q2 * np.array([d[2] for d in deltas])
        nl = P[q, 2] * _counts(lag_d, P[q, 5], P[q, 6])
        cs = _c_smooth(model, lag_d, P[q, 3], P[q, 4], period)
        np.add.at(s2, q, nl * (2.0 * cs * dval + dval * dval))
        np.add.at(s1, q, nl * dval)
    index = P[:, :2].astype(np.int64)
    sums = np.zeros((k, k))
    np.add.at(sums, (index[:, 0], index[:, 1]),
              2.0 * s2 + 4.0 * ramp[index[:, 0]] * ramp[index[:, 1]] * s1)
    return _mean_cov(model, m, period, total, ramp, sums)


def correlated_chi2(mean: np.ndarray, cov: np.ndarray, reps: int,
                    rng: np.random.Generator) -> np.ndarray:
    """Replicate AVAR curves: scaled chi-square marginals joined by a Gaussian copula.

    Each point k is mean_k·χ²(ν_k)/ν_k with ν_k = 2·mean_k²/cov_kk (its
    exact mean and variance); the copula takes the correlation matrix of
    ``cov``.

    Parameters
    ----------
    mean : ndarray, shape (k,)
    cov : ndarray, shape (k, k)
    reps : int
    rng : numpy.random.Generator

    Returns
    -------
    avar : ndarray, shape (reps, k)
    """
    from ..analysis import special  # scipy.special's functions, without its import

    sd = np.sqrt(np.diag(cov))
    corr = cov / np.outer(sd, sd)
    np.fill_diagonal(corr, 1.0)
    # Quadrature leaves the matrix positive definite to ~1e-8 at worst; clip the
    # spectrum rather than fail on a tiny negative eigenvalue.
    vals, vecs = np.linalg.eigh(corr)
    root = vecs * np.sqrt(np.clip(vals, 1e-12, None))
    z = rng.standard_normal((reps, mean.shape[0])) @ root.T
    z /= np.sqrt(np.sum(root * root, axis=1))
    nu = 2.0 * mean ** 2 / sd ** 2
    # Upper tail from the complement keeps its quantiles accurate.
    # Each draw only on its own side (the other side's value was discarded).
    shape = np.broadcast_to(nu / 2.0, z.shape)
    neg = z <= 0.0
    g = np.empty_like(z)
    g[neg] = special.gammaincinv(shape[neg], special.ndtr(z[neg]))
    g[~neg] = special.gammainccinv(shape[~neg], special.ndtr(-z[~neg]))
    return mean * g * 2.0 / nu


def replicate_avar(c2, period: float, m: np.ndarray, segments, reps: int, seed: int,
                   low_pass: float = 0.0, gm=None) -> np.ndarray:
    """Bootstrap replicates of an octave AVAR curve from the fitted terms, drawn
    from the exact covariance (:func:`avar_covariance`, :func:`correlated_chi2`).

    Parameters
    ----------
    c2 : ndarray, shape (5,)
        [Q², N², B², K², R²], SI (negatives count as 0).
    period : float
        s.
    m : ndarray of int, shape (k,)
    segments : list of (start, stop)
        The record's runs without gaps.
    reps, seed : int
    low_pass : float
        Band-limit time constant of the white noise, s.
    gm : (sigma, corr_time), optional

    Returns
    -------
    avar : ndarray, shape (reps, k)
    """
    model = NoiseModel.from_terms(c2, low_pass, gm)
    mean, cov = avar_covariance(model, m, period, [b - a for a, b in segments])
    return correlated_chi2(mean, cov, reps, np.random.default_rng(seed))


# ---------------------------------------------------------------------------
# Compiled path: the same sums, one pair at a time without temporaries.

from .._jit import njit  # noqa: E402


@njit(cache=True, nogil=True)
def _e_tail_1(u):
    if u < 0.5:
        term = -u * u * u / 6.0
        acc = term
        for k in range(4, 16):
            term = -term * u / k
            acc += term
        return acc
    return np.exp(-u) - 1.0 + u - 0.5 * u * u


@njit(cache=True, nogil=True)
def _g_1(t, white, k2, b2, parts):
    a = abs(t)
    g = -white * a
    if k2 > 0.0:
        g += k2 / 12.0 * a * a * a
    if b2 > 0.0 and a > 0.0:
        g += b2 / (2.0 * np.pi) * a * a * np.log(a)
    for e in range(parts.shape[0]):
        g -= parts[e, 0] * a + parts[e, 1] * _e_tail_1(a / parts[e, 2])
    return g


@njit(cache=True, nogil=True)
def _nine_1(lag, a, b, period, white, k2, b2, parts):
    out = 0.0
    for fp in range(3):
        wp = 1.0 if fp != 1 else -2.0
        for fq in range(3):
            wq = 1.0 if fq != 1 else -2.0
            out += wp * wq * _g_1((lag + fq * b - fp * a) * period, white, k2, b2, parts)
    return out


@njit(cache=True, nogil=True)
def _c_1(lag, a, b, period, white, k2, b2, parts, far_factor):
    """:func:`_c_smooth` at one lag."""
    if lag < 2.0 * a and lag > -2.0 * b:
        return _nine_1(lag, a, b, period, white, k2, b2, parts)
    out = 0.0
    if b2 > 0.0:
        if abs(lag) > far_factor * (a + b):
            t = (lag + b - a) * period
            out -= 2.0 * b2 / (2.0 * np.pi) * (a * b) ** 2 * period ** 4 / (t * t)
        else:
            out += _nine_1(lag, a, b, period, 0.0, 0.0, b2, parts[:0])
    for e in range(parts.shape[0]):
        C, T = parts[e, 1], parts[e, 2]
        ea = -np.expm1(-a * period / T)
        eb = -np.expm1(-b * period / T)
        expo = ((2.0 * a - lag) if lag > 0 else (lag + 2.0 * b)) * period / T
        out -= C * np.exp(min(expo, 0.0)) * (ea * eb) ** 2
    return out


@njit(cache=True, nogil=True)
def _count_1(lag, Ma, Mb):
    v = min(Ma, Mb - lag) - max(0.0, -lag)
    return v if v > 0.0 else 0.0


@njit(cache=True, nogil=True)
def _pair_1(a, b, Ma, Mb, period, white, k2, b2, q2, parts, gl_x, gl_w, short,
            far_factor, flicker_reach, ou_reach, cuts):
    """(Σ n c², Σ n c) of one pair of factors and one run (``cuts``: workspace)."""
    lo, hi = -(Ma - 1.0), Mb - 1.0
    if hi < lo:
        return 0.0, 0.0
    reach = flicker_reach * (a + b) if b2 > 0.0 else 0.0
    for e in range(parts.shape[0]):
        reach = max(reach, ou_reach * parts[e, 2] / period)
    u = max(lo, np.floor(-2.0 * b - reach))
    v = min(hi, np.floor(2.0 * a + reach))
    kinks = np.array([0.0, -b, -2.0 * b, a, a - b, a - 2.0 * b, 2.0 * a, 2.0 * a - b,
                      2.0 * a - 2.0 * b])
    n = 0
    for x in kinks:
        cuts[n] = x
        n += 1
    cuts[n] = Mb - Ma
    cuts[n + 1] = -2.0 * b
    cuts[n + 2] = 2.0 * a
    n += 3
    if reach > 0.0:
        step = 1.0
        while step < v - 2.0 * a:
            cuts[n] = np.rint(2.0 * a + step)
            n += 1
            step *= 2.0
        step = 1.0
        while step < -2.0 * b - u:
            cuts[n] = np.rint(-2.0 * b - step)
            n += 1
            step *= 2.0
    for e in range(parts.shape[0]):
        lag_T = parts[e, 2] / period
        if lag_T * 64.0 > 1.0 and lag_T < 4.0 * (a + b):
            for x in kinks:
                s = lag_T
                for _ in range(4):
                    cuts[n] = np.rint(x + s)
                    cuts[n + 1] = np.rint(x - s)
                    n += 2
                    s *= 2.0
    if v < u:
        return 0.0, 0.0
    edges = np.sort(cuts[:n])
    s2 = 0.0
    s1 = 0.0
    start = u
    done = False
    i = 0
    while not done:
        # Next edge strictly beyond start (or v).
        while i < n and edges[i] <= start:
            i += 1
        stop = v
        if i < n and edges[i] < v:
            stop = edges[i]
        if stop <= start:
            break
        size = stop - start
        if size <= short:
            lag = start
            while lag < stop:
                c = _c_1(lag, a, b, period, white, k2, b2, parts, far_factor)
                nl = _count_1(lag, Ma, Mb)
                s2 += nl * c * c
                s1 += nl * c
                lag += 1.0
        else:
            half = 0.5 * size
            for g in range(gl_x.shape[0]):
                lag = start + half * (gl_x[g] + 1.0)
                c = _c_1(lag, a, b, period, white, k2, b2, parts, far_factor)
                nl = _count_1(lag, Ma, Mb)
                s2 += half * gl_w[g] * nl * c * c
                s1 += half * gl_w[g] * nl * c
            for lag, wt in ((start, 0.5), (stop, -0.5)):
                c = _c_1(lag, a, b, period, white, k2, b2, parts, far_factor)
                nl = _count_1(lag, Ma, Mb)
                s2 += wt * nl * c * c
                s1 += wt * nl * c
        start = stop
        done = stop >= v
    c = _c_1(v, a, b, period, white, k2, b2, parts, far_factor)
    nl = _count_1(v, Ma, Mb)
    s2 += nl * c * c
    s1 += nl * c
    if q2 > 0.0:
        # Quantization's deltas at lags p − q: (c_s + d)² − c_s² = 2 c_s d + d².
        for fp in range(3):
            for fq in range(3):
                lag = fp * a - fq * b
                # Each distinct lag once, with the summed weight of its (p, q).
                first = True
                wsum = 0.0
                for gp in range(3):
                    for gq in range(3):
                        if gp * a - gq * b == lag:
                            if gp * 3 + gq < fp * 3 + fq:
                                first = False
                            wsum += (1.0 if gp != 1 else -2.0) * (1.0 if gq != 1 else -2.0)
                if not first or wsum == 0.0 or lag < lo or lag > hi:
                    continue
                d = q2 * wsum
                cs = _c_1(lag, a, b, period, white, k2, b2, parts, far_factor)
                nl = _count_1(lag, Ma, Mb)
                s2 += nl * (2.0 * cs * d + d * d)
                s1 += nl * d
    return s2, s1


@njit(cache=True, nogil=True)
def _sums_kernel(m, runs, mult, period, white, k2, b2, q2, ramp, parts, gl_x, gl_w, short,
                 far_factor, flicker_reach, ou_reach, sums):
    k = m.shape[0]
    cuts = np.empty(512)
    for r in range(runs.shape[0]):
        for i in range(k):
            Ma = runs[r] + 1.0 - 2.0 * m[i]
            if Ma <= 0:
                continue
            for j in range(i, k):
                Mb = runs[r] + 1.0 - 2.0 * m[j]
                if Mb <= 0:
                    continue
                s2, s1 = _pair_1(m[i], m[j], Ma, Mb, period, white, k2, b2, q2, parts,
                                 gl_x, gl_w, short, far_factor, flicker_reach, ou_reach,
                                 cuts)
                sums[i, j] += mult[r] * (2.0 * s2 + 4.0 * ramp[i] * ramp[j] * s1)
    return sums
