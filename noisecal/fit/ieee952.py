"""IEEE Std 952 noise terms fitted jointly to an Allan variance curve.

The Allan variance of the five terms is linear in their squared coefficients
c = [Q², N², B², K², R²] (see :func:`noisecal.fit.simulate.basis`). Which
terms the curve needs is decided once, as a model selection over every subset
of terms (:func:`select_structure`: weighted NNLS per subset, chi-square
deviance plus a per-term penalty calibrated for correlated overlapping
points); the intervals then come from a parametric bootstrap *within* that
structure, so a needed term is never turned into a bound because a collinear
term (random walk and ramp at the longest taus) stands in for it in some
replicates. Terms left out are upper bounds.

Real sensors low-pass their output before sampling, which pulls the curve
below N²/τ at short taus. Beyond a few filter time constants the deficit is a
quantization-shaped term of negative sign (:func:`basis6`, the band-limit
column); closer in, the curve follows no power law, and those taus are left
out of the fit (:func:`usable_from`), which says so.

References
----------
IEEE Std 952-1997, Annex C. N. El-Sheimy, H. Hou, X. Niu, "Analysis and
modeling of inertial sensors using Allan variance", IEEE Trans. Instrum.
Meas. 57(1), 2008. C. L. Lawson, R. J. Hanson, *Solving Least Squares
Problems* (1974), NNLS. B. Efron, R. Tibshirani, *An Introduction to the
Bootstrap* (1993), parametric bootstrap and pivotal intervals.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .. import _native
from .._native import fit_calls
from ..analysis.allan import deviation
from ..analysis.residuals import chi2_ppf
from ..types import AllanCurve, Estimate
from ..units import derived_unit
from .simulate import TERM_NAMES, RateModel, basis

FULL_SIM_MAX = 2 ** 16
"""Longest record simulated sample for sample; longer ones are simulated decimated."""

REWEIGHT_PASSES = 3

def weighted_nnls(A: np.ndarray, avar: np.ndarray, nu: np.ndarray,
                  passes: int = REWEIGHT_PASSES) -> np.ndarray:
    """Non-negative coefficients of ``A @ c ≈ avar`` with model-based weights.

    Parameters
    ----------
    A : ndarray, shape (k, p)
        Basis (Allan variance per unit coefficient).
    avar : ndarray, shape (k,)
        Measured Allan variance.
    nu : ndarray, shape (k,)
        Equivalent degrees of freedom of each point.
    passes : int
        Reweighting passes after the first fit (weights from observed values).

    Returns
    -------
    c : ndarray, shape (p,)
    """
    if _native.enabled():
        compiled = fit_calls.weighted_nnls
    else:
        from .select_kernel import weighted_nnls as compiled

    c = np.zeros(A.shape[1])
    compiled(np.ascontiguousarray(A, dtype=np.float64),
             np.ascontiguousarray(avar, dtype=np.float64),
             np.ascontiguousarray(nu, dtype=np.float64), int(passes), c)
    return c


def weighted_nnls_reference(A: np.ndarray, avar: np.ndarray, nu: np.ndarray,
                            passes: int = REWEIGHT_PASSES) -> np.ndarray:
    """:func:`weighted_nnls` with scipy's NNLS (the specification the compiled
    path is tested against). Parameters and result as there."""
    from scipy.optimize import nnls

    scale = np.sqrt(nu / 2.0)
    ref = avar
    c = np.zeros(A.shape[1])
    col = np.max(np.abs(A), axis=0)
    col[col == 0] = 1.0
    for _ in range(passes + 1):
        w = scale / ref
        sol, _ = nnls(A * w[:, None] / col, avar * w)
        c = sol / col
        model = A @ c
        ref = np.where(model > 0, model, avar)
    return c


COLUMNS = TERM_NAMES + ("band_limit",)
"""Columns of the fit: the five terms and the band-limit correction (−3/τ² per unit)."""

PENALTY = 6.0
"""Deviance a term must save to enter the model (see :func:`select_structure`)."""

BAND_LIMIT_PENALTY = 2.0
"""Deviance the band-limit correction must save (AIC's 2): it is a nuisance every
real sensor has, not a reported term, and a weak low-pass left unmodelled biases N
by about its interval's width (measured: −1.2 % through a 40 Hz Butterworth at
100 Hz)."""

NEAR_TIE = 2.0
"""Criterion difference below which another structure is reported as a near tie."""

RANDOM_WALK_BAND = 4.0
"""Criterion margin within which bias random walk takes the place of bias instability
in an otherwise equal structure. On short records a random walk's first rise, seen at
the last few (low-EDF) points, is fitted about as well by a flat floor: with the tie
band alone, 8.5 % of 2^14-sample white + random-walk records chose bias instability
instead; a real floor shows over several octaves and rarely needs the margin (0.75 %
of white + bias-instability records fall inside it). Where the data cannot tell, the
random walk is the filter's safer model: its Q keeps the bias estimate open."""

MIN_POINTS = 5
"""Fewest Allan points the fit keeps when short taus are left out."""


def basis6(taus: np.ndarray) -> np.ndarray:
    """The five term columns of :func:`basis` and the band-limit column −3/τ².

    White noise through a low-pass of equivalent first-order time constant T
    has, once τ is several T, the Allan variance N²/τ − 3N²T/(2τ²): a
    quantization-shaped term of negative sign (common practice, no source;
    checked against a one-pole filter's exact Allan variance in
    tests/fit/test_real_sensors.py). Its coefficient
    c_L = N²T/2 gives T = 2c_L/N². The quantization and band-limit columns are
    never in one model.

    Parameters
    ----------
    taus : ndarray, shape (k,)
        Averaging times, s.

    Returns
    -------
    A : ndarray, shape (k, 6)
    """
    A = basis(taus)
    return np.column_stack([A, -A[:, 0]])


def structures() -> list[tuple[int, ...]]:
    """Every candidate set of columns of :data:`COLUMNS`.

    Any non-empty subset of the five terms, and each subset holding
    quantization and white noise again with the band-limit column in place of
    quantization.
    """
    out = []
    for bits in range(1, 1 << 5):
        cols = tuple(i for i in range(5) if bits >> i & 1)
        out.append(cols)
        if 0 in cols and 1 in cols:
            out.append(tuple(sorted(set(cols) - {0} | {5})))
    return out


def fit_structure(A: np.ndarray, avar: np.ndarray, nu: np.ndarray,
                  cols: tuple[int, ...]) -> np.ndarray:
    """Weighted NNLS on the columns ``cols`` of ``A``, zero elsewhere.

    Parameters
    ----------
    A : ndarray, shape (k, p)
    avar, nu : ndarray, shape (k,)
    cols : tuple of int

    Returns
    -------
    c : ndarray, shape (p,)
    """
    c = np.zeros(A.shape[1])
    idx = list(cols)
    c[idx] = weighted_nnls(A[:, idx], avar, nu)
    return c


def signed(c6: np.ndarray) -> np.ndarray:
    """Five-term coefficients with the band-limit column folded into a negative Q².

    Parameters
    ----------
    c6 : ndarray, shape (..., 6)

    Returns
    -------
    ndarray, shape (..., 5)
    """
    c6 = np.asarray(c6, dtype=np.float64)
    c = c6[..., :5].copy()
    c[..., 0] -= c6[..., 5]
    return c


@dataclass(frozen=True)
class Selection:
    """The model structure chosen for a curve.

    Attributes
    ----------
    cols : tuple of int
        Chosen columns of :data:`COLUMNS`.
    c6 : ndarray, shape (6,)
        Coefficients of the chosen model.
    criterion : float
        Its deviance plus ``PENALTY`` per term column (``BAND_LIMIT_PENALTY`` for
        the band-limit column).
    ranked : list of (tuple of int, float)
        Every structure whose fit keeps all its columns, with its criterion,
        best first.
    """

    cols: tuple
    c6: np.ndarray
    criterion: float
    ranked: list

    def _rivals(self, margin: float):
        """Other structures whose criterion is within ``margin`` of the chosen one (or of
        ``RANDOM_WALK_BAND`` for the bias-instability swap the random walk displaced)."""
        swap = _instability_for_walk(self.cols)
        return [(c, v) for c, v in self.ranked
                if c != self.cols and abs(v - self.criterion) < (
                    max(margin, RANDOM_WALK_BAND) if c == swap else margin)]

    def swappable(self, margin: float = NEAR_TIE) -> dict:
        """Chosen columns that another column can replace within ``margin``.

        Returns
        -------
        dict of int to set of int
            Chosen column → the columns that stand in for it in a structure of
            the same size scoring within ``margin``: the data resolve that
            part of the curve but not which of these terms makes it.
        """
        chosen = set(self.cols)
        out = {}
        for cols, crit in self._rivals(margin):
            other = set(cols)
            if len(other) == len(chosen) and len(other ^ chosen) == 2:
                (lost,), (gained,) = chosen - other, other - chosen
                out.setdefault(lost, set()).add(gained)
        return out

    def near_ties(self, margin: float = NEAR_TIE) -> list[str]:
        """Plain sentences for structures that score within ``margin`` of the chosen one."""
        chosen = set(self.cols)
        out = []
        for cols, crit in self._rivals(margin):
            other = set(cols)
            gained, lost = sorted(other - chosen), sorted(chosen - other)
            if set(gained) | set(lost) == {5}:
                continue  # the band-limit nuisance column alone: not a question of terms
            if gained and lost:
                what = (f"{' + '.join(COLUMNS[i] for i in gained)} in place of "
                        f"{' + '.join(COLUMNS[i] for i in lost)}")
            elif gained:
                what = f"adding {' + '.join(COLUMNS[i] for i in gained)}"
            else:
                what = f"without {' + '.join(COLUMNS[i] for i in lost)}"
            out.append(f"{what} fits almost as well (criterion {crit - self.criterion:+.2f} "
                       f"against the chosen model; a term enters only if it saves "
                       f"{PENALTY:g} of deviance)")
        return out


def neighbours(cols: tuple[int, ...]) -> list[tuple[int, ...]]:
    """The structure ``cols``, each with one column fewer, and each with one term more.

    The bootstrap replicates choose among these, so the intervals carry the
    variability of the selection itself (a replicate that drops or adds a
    term moves the others), at a tenth of the cost of every structure.
    """
    chosen = set(cols)
    out = [tuple(cols)]
    for c in cols:
        if len(chosen) > 1:
            out.append(tuple(sorted(chosen - {c})))
    for c in range(5):
        if c not in chosen and not (c == 0 and 5 in chosen):
            out.append(tuple(sorted(chosen | {c})))
    return out


def select_structure(A: np.ndarray, avar: np.ndarray, nu: np.ndarray,
                     penalty: float = PENALTY, band_limit: bool = True,
                     candidates: list | None = None) -> Selection:
    """The structure of least deviance plus ``penalty`` per term (the simplest of
    those within ``NEAR_TIE`` of the least, and of equally simple ones, one
    without the ramp).

    Each structure of :func:`structures` is fitted by weighted NNLS and
    scored by the chi-square deviance of :func:`misfit`; a structure whose fit
    sets one of its own columns to zero is the smaller structure and is
    skipped. The deviance treats the points as independent, while overlapping
    Allan points are positively correlated, which inflates the deviance a
    spurious term saves: the penalty is therefore set by simulation rather than
    taken from a criterion for independent data (AIC's 2, the chi-square
    test's 3.84). tests/fit/test_selection.py measures the false-resolution
    rate of absent terms and the resolution power of present ones.

    Parameters
    ----------
    A : ndarray, shape (k, 6)
        :func:`basis6` at the fitted taus.
    avar, nu : ndarray, shape (k,)
        Allan variance and EDF of each point.
    penalty : float
    band_limit : bool
        Whether structures with the band-limit column are candidates.
    candidates : list of tuple of int, optional
        The structures to choose from (default :func:`structures`).

    Returns
    -------
    Selection
    """
    ranked, fits = [], {}
    for cols in candidates or structures():
        if 5 in cols and not band_limit:
            continue
        c = fit_structure(A, avar, nu, cols)
        if np.any(c[list(cols)] <= 0):
            continue
        fits[cols] = c
        cost = penalty * len(cols) + (BAND_LIMIT_PENALTY - penalty) * (5 in cols)
        ranked.append((cols, misfit(A, avar, nu, c) + cost))
    if not ranked:  # cannot happen for a positive curve; kept for a clear fallback
        c = np.zeros(A.shape[1])
        c[1] = float(np.median(avar / A[:, 1]))
        return Selection((1,), c, misfit(A, avar, nu, c), [((1,), misfit(A, avar, nu, c))])
    ranked.sort(key=lambda r: r[1])
    # Among the structures tied with the best, the one with fewest terms: a flat floor
    # plus a ramp can mimic a random walk's rise and win by a hair.
    tied = [r for r in ranked if r[1] < ranked[0][1] + NEAR_TIE]
    # (The band-limit nuisance column does not count as a term here.) Between equally
    # simple tied models, one without the ramp: a random walk's Q lets a filter follow
    # a slow rise, a ramp (deterministic, usually a temperature drift) gives it none.
    best, crit = min(tied, key=lambda r: (len(set(r[0]) - {5}), 4 in r[0], r[1]))
    walk = _walk_for_instability(best)
    scores = dict(ranked)
    if walk in scores and scores[walk] < crit + RANDOM_WALK_BAND:
        best, crit = walk, scores[walk]
    return Selection(best, fits[best], crit, ranked)


def _walk_for_instability(cols: tuple) -> tuple | None:
    """``cols`` with bias random walk in place of bias instability (None if not that shape)."""
    if 2 in cols and 3 not in cols:
        return tuple(sorted(set(cols) - {2} | {3}))
    return None


def _instability_for_walk(cols: tuple) -> tuple | None:
    """``cols`` with bias instability in place of bias random walk (None if not that shape)."""
    if 3 in cols and 2 not in cols:
        return tuple(sorted(set(cols) - {3} | {2}))
    return None


HOLD_LEVEL = 0.99
"""Per-point level at which the model must hold at the first two fitted points (two
points at 95 % would reject clean data one time in ten)."""


def _holds(A: np.ndarray, avar: np.ndarray, nu: np.ndarray, s: int, c6: np.ndarray) -> bool:
    """Whether the model lies inside the ``HOLD_LEVEL`` chi-square intervals of points s, s+1."""
    j = slice(s, s + 2)
    a = 1.0 - HOLD_LEVEL
    top, bottom = chi2_ppf(np.array([[1.0 - a / 2.0], [a / 2.0]]), nu[j][None, :])
    lo, hi = avar[j] * nu[j] / top, avar[j] * nu[j] / bottom
    model = A[j] @ c6
    return bool(np.all((model >= lo) & (model <= hi)))


def band_limited(cols) -> list[tuple[int, ...]]:
    """The structures among ``cols`` that keep the band-limit column."""
    return [c for c in cols if 5 in c]


def _with_band_limit(A: np.ndarray, avar: np.ndarray, nu: np.ndarray) -> Selection:
    """The selection among structures with the band-limit column (the curve has shown
    a low-pass); every structure when none of those keeps the column positive.

    Past the left-out taus the low-pass's deficit is small but not gone: without its
    column a flat floor can take its place and pull N down. Measured on white noise
    and a weak random walk through a 2nd-order 5 Hz Butterworth at 100 Hz (150 records
    of 300 000 samples): with every structure open, 5 records chose white noise and
    bias instability without the column, N 4.7 % low and outside its interval (N's
    coverage 92.7 %); with the column kept, 95.3 %.
    """
    sel = select_structure(A, avar, nu, candidates=band_limited(structures()))
    return sel if 5 in sel.cols else select_structure(A, avar, nu)


def usable_from(A: np.ndarray, avar: np.ndarray, nu: np.ndarray) -> tuple[int, Selection]:
    """First Allan point from which the term model holds, and the selection there.

    The five terms alone are tried on every point first; where the model does
    not hold at the first two points (``HOLD_LEVEL`` chi-square intervals), the
    band-limit column is allowed as well. A sensor's low-pass makes the
    shortest points fall below any sum of the terms, and close to its time
    constant below the band-limit form too, so those points are then left out
    one by one until the model holds again, plus one octave of margin. At
    least ``MIN_POINTS`` points are kept. Clean data thus never get the
    band-limit column, whose collinearity with white noise would only widen N.

    Parameters
    ----------
    A : ndarray, shape (k, 6)
    avar, nu : ndarray, shape (k,)
        Allan variance and EDF of each point.

    Returns
    -------
    start : int
    selection : Selection
        Selected on the points ``start:``.
    """
    k = avar.shape[0]
    sel = select_structure(A, avar, nu, band_limit=False)
    if _holds(A, avar, nu, 0, sel.c6):
        return 0, sel
    first = None
    for s in range(max(1, k - MIN_POINTS + 1)):
        sel = select_structure(A[s:], avar[s:], nu[s:])
        first = first or (s, sel)
        if _holds(A, avar, nu, s, sel.c6):
            if s == 0:
                return s, sel
            # One octave of margin: just past the departure the curve still carries
            # the low-pass's non-power-law part, too small to see in one point but
            # enough to bias N by its interval's width when points have large EDF.
            s = min(s + 1, k - MIN_POINTS)
            return s, _with_band_limit(A[s:], avar[s:], nu[s:])
    # No start makes the model hold at its first points: keep every point and let
    # the model check say so.
    return first


@dataclass(frozen=True)
class TermFit:
    """Point fit and bootstrap replicates of the five squared coefficients.

    Attributes
    ----------
    c2 : ndarray, shape (5,)
        Fitted [Q², N², B², K², R²], SI. Q² is negative when the band-limit
        column was chosen (−c_L, see :func:`basis6`).
    replicates : ndarray, shape (reps, 5)
        The fit of each bootstrap replicate, which chooses among the chosen
        structure's :func:`neighbours` (zero where it leaves a term out).
    replicate_avar : ndarray, shape (reps, k)
        The replicate curves (Allan variance at the fit taus).
    seed : int
    used : ndarray of bool, shape (k,)
        Points of the curve the terms were fitted to.
    selection : Selection
        The chosen structure and its competitors.
    deviance : float
        Deviance of the fit over the used points.
    replicate_deviance : ndarray, shape (reps,)
        The same on each replicate: the reference distribution of the model check.
    """

    c2: np.ndarray
    replicates: np.ndarray
    replicate_avar: np.ndarray
    seed: int
    used: np.ndarray = None
    selection: Selection = None
    deviance: float = float("nan")
    replicate_deviance: np.ndarray = None

    @property
    def band_limit_time(self) -> float:
        """Equivalent first-order time constant of the sensor's low-pass, s (0 if none)."""
        if self.c2[0] >= 0 or self.c2[1] <= 0:
            return 0.0
        return float(-2.0 * self.c2[0] / self.c2[1])


REPLICATES = "exact"
"""How the parametric bootstraps draw replicate curves of a :class:`RateModel`:
``"exact"`` from the Allan points' exact covariance (:mod:`noisecal.fit.avar_cov`),
``"simulated"`` by simulating records (:func:`noisecal.fit.simulate.replicate_avar`)."""


def replicate_curves(simulate, expected, period: float, m: np.ndarray,
                     segments: list[tuple[int, int]], reps: int, seed: int,
                     progress=None, how: str | None = None) -> np.ndarray:
    """Allan variance curves of records drawn from a fitted model.

    When ``simulate`` is a :class:`noisecal.fit.simulate.RateModel` the
    replicates are drawn, by default (``how`` = :data:`REPLICATES`,
    ``"exact"``), from the exact covariance of the overlapping Allan points
    under that model with chi-square marginals
    (:func:`noisecal.fit.avar_cov.replicate_avar`: milliseconds, exact for
    records of any length and gap layout); with ``how="simulated"`` records
    are simulated in compiled batches (:func:`noisecal.fit.simulate.replicate_avar`:
    the two-level scheme of :func:`replicate_curves_reference`). Any other
    callable takes :func:`replicate_curves_reference`. Parameters and result
    as there.
    """
    from .simulate import RateModel, replicate_avar

    if isinstance(simulate, RateModel):
        if (how or REPLICATES) == "exact":
            from .avar_cov import replicate_avar as exact

            out = exact(simulate.c2, period, m, segments, reps, seed,
                        low_pass=simulate.low_pass, gm=simulate.gm)
            if progress:
                progress(reps)
            return out
        return replicate_avar(simulate, expected, period, m, segments, reps, seed,
                              progress, full_max=FULL_SIM_MAX)
    return replicate_curves_reference(simulate, expected, period, m, segments, reps, seed,
                                      progress)


def replicate_curves_reference(simulate, expected, period: float, m: np.ndarray,
                               segments: list[tuple[int, int]], reps: int, seed: int,
                               progress=None) -> np.ndarray:
    """Allan variance curves of records simulated from a fitted model (reference path).

    One record at a time in numpy; the specification the batched path is
    tested against.

    Records up to ``FULL_SIM_MAX`` samples are simulated sample for sample
    with the recording's gap layout. Longer records are simulated at two
    levels: short taus (m < 4d) from a fine record of ``FULL_SIM_MAX``
    samples whose deviations from the model are scaled by sqrt(terms there /
    terms in the real record), long taus from a record at period d·tau0 (d a
    power of two) over the full duration. Each term is generated from its
    continuous coefficient, so the coarse record keeps the Allan variance at
    taus ≥ 4d·tau0; the gap layout is not reproduced at this level.

    Parameters
    ----------
    simulate : callable
        ``simulate(period, n, rng)`` → rate samples, shape (n,).
    expected : callable
        ``expected(taus)`` → model Allan variance, shape (k,).
    period : float
        Sample period, s.
    m : ndarray of int, shape (k,)
        Averaging factors of the fit grid (powers of two).
    segments : list of (start, stop)
        Gap layout of the real record.
    reps : int
        Number of replicates.
    seed : int
        Seed of the replicates.
    progress : callable, optional
        Called with 1 after each replicate.

    Returns
    -------
    avar : ndarray, shape (reps, k)
    """
    rng = np.random.default_rng(seed)
    n = int(sum(b - a for a, b in segments))
    out = np.empty((reps, m.shape[0]))
    if n <= FULL_SIM_MAX:
        for r in range(reps):
            dev, _ = deviation(simulate(period, n, rng), period, m, "oadev", segments)
            out[r] = dev ** 2
            if progress:
                progress(1)
        return out
    d = 2 ** int(np.ceil(np.log2(n / FULL_SIM_MAX)))
    fine = m < 4 * d
    coarse_m = m[~fine] // d
    model = expected(m[fine] * period)
    length = FULL_SIM_MAX
    ratio = np.sqrt(np.maximum(length + 1 - 2 * m[fine], 1) / (n + 1 - 2 * m[fine]))
    for r in range(reps):
        dev, _ = deviation(simulate(period, length, rng), period, m[fine], "oadev")
        out[r, fine] = model + (dev ** 2 - model) * ratio
        devc, _ = deviation(simulate(period * d, n // d, rng), period * d, coarse_m, "oadev")
        out[r, ~fine] = devc ** 2
        if progress:
            progress(1)
    return np.maximum(out, 0.0)


TERM_ALPHA = (2, 0, -1, -2, -2, 0)
"""Power-law exponent of each column's rate noise (S_y ∝ f^alpha): quantization is
white phase, white noise white rate, bias instability flicker, random walk random
walk; the ramp is deterministic and counted as random walk (the smallest EDF of the
others), the band-limit correction belongs to white noise."""

MIX_SHARE = 0.2
"""A term with at least this share of the model at a tau sets that point's EDF."""


def mixture_edf(curve: AllanCurve, segments: list[tuple[int, int]], c6: np.ndarray) -> np.ndarray:
    """EDF of each point for the fitted mixture of noise types.

    The curve's EDF takes one noise type per tau; where two terms share a tau
    (the corner between white noise and random walk, say) the estimate's
    spread is that of the less stable type, so each point gets the smallest
    EDF among the types holding at least ``MIX_SHARE`` of the model there
    (and never more than the curve's own).

    Returns
    -------
    nu : ndarray, shape (k,)
    """
    from ..analysis.allan import term_count
    from ..analysis.edf import pooled_edf

    A = basis6(curve.taus)
    model = A @ c6
    share = A * c6 / np.where(model > 0, model, np.inf)[:, None]
    lengths = np.array([b - a for a, b in segments]) + 1
    nu = np.array(curve.edf, dtype=np.float64)
    for j, m in enumerate(curve.m):
        alphas = {TERM_ALPHA[i] for i in range(6) if share[j, i] >= MIX_SHARE}
        alphas.discard(int(curve.alpha[j]))
        weights = np.array([term_count(int(n), int(m), "oadev") for n in lengths], float)
        ok = weights > 0
        for a in alphas:
            nu[j] = min(nu[j], pooled_edf(a, "oadev", int(m), lengths[ok], weights[ok]))
    return nu


def fit_terms(curve: AllanCurve, period: float, segments: list[tuple[int, int]],
              reps: int = 200, seed: int = 0, progress=None) -> TermFit:
    """Select the terms an overlapping-ADEV curve needs, fit them and bootstrap the fit.

    Parameters
    ----------
    curve : AllanCurve
        Overlapping Allan deviation on an octave grid.
    period : float
        Sample period, s.
    segments : list of (start, stop)
        Gap layout of the record.
    reps : int
        Bootstrap replicates.
    seed : int
        Seed of the bootstrap.
    progress : callable, optional

    Returns
    -------
    TermFit
    """
    A = basis6(curve.taus)
    avar = curve.dev ** 2
    start, sel = usable_from(A, avar, curve.edf)
    # Select again with each point's EDF for the mixture the first selection found.
    nu = mixture_edf(curve, segments, sel.c6)
    start, sel = usable_from(A, avar, nu)
    used = np.arange(avar.shape[0]) >= start
    c2 = signed(sel.c6)
    truth = np.maximum(c2, 0.0)
    # Replicates carry the fitted low-pass, so the band-limit column sees its own kind.
    lag = 2.0 * sel.c6[5] / sel.c6[1] if sel.c6[5] > 0 else 0.0
    sims = replicate_curves(RateModel(truth, low_pass=lag), lambda t: basis6(t) @ sel.c6,
                            period, curve.m, segments, reps, seed, progress)
    near = neighbours(sel.cols)
    if not used[0] and 5 in sel.cols:
        # The data's selection kept the band-limit column; so do the replicates'.
        near = band_limited(near)
    boot6, dev_rep = select_replicates(A[used], sims[:, used], nu[used], near)
    return TermFit(c2=c2, replicates=signed(boot6), replicate_avar=sims, seed=seed,
                   used=used, selection=sel, deviance=misfit(A[used], avar[used], nu[used], sel.c6),
                   replicate_deviance=dev_rep)


def select_replicates(A: np.ndarray, sims: np.ndarray, nu: np.ndarray,
                      candidates: list) -> tuple[np.ndarray, np.ndarray]:
    """:func:`select_structure` among ``candidates`` on every replicate, and the
    chosen fit's deviance (:func:`misfit`), in compiled code
    (:func:`noisecal.fit.select_kernel.select_many`).

    Parameters
    ----------
    A : ndarray, shape (k, 6)
    sims : ndarray, shape (reps, k)
    nu : ndarray, shape (k,)
    candidates : list of tuple of int

    Returns
    -------
    c6 : ndarray, shape (reps, 6)
    deviance : ndarray, shape (reps,)
    """
    if _native.enabled():
        select_many = fit_calls.select_many
    else:
        from .select_kernel import select_many

    cands = np.zeros((len(candidates), 6), dtype=bool)
    for i, cols in enumerate(candidates):
        cands[i, list(cols)] = True
    index = {tuple(c): i for i, c in enumerate(candidates)}
    walk_of = np.array([index.get(_walk_for_instability(tuple(c)) or (), -1)
                        for c in candidates], dtype=np.int64)
    out = np.empty((sims.shape[0], 6))
    dev = np.empty(sims.shape[0])
    select_many(np.ascontiguousarray(A, dtype=np.float64),
                np.ascontiguousarray(sims, dtype=np.float64),
                np.ascontiguousarray(nu, dtype=np.float64), cands, walk_of, PENALTY,
                BAND_LIMIT_PENALTY, NEAR_TIE, RANDOM_WALK_BAND, REWEIGHT_PASSES, out, dev)
    return out, dev


def harrell_davis(values: np.ndarray, probs) -> np.ndarray:
    """Harrell–Davis quantiles: Beta-weighted means of all order statistics.

    With 200 replicates a 2.5 % quantile read off one order statistic is noisy
    enough to cost the interval about 2 points of coverage (measured: 92 % with
    plain quantiles, 96 % with 600 replicates); the Harrell–Davis estimate uses
    every replicate. F. E. Harrell, C. E. Davis, Biometrika 69(3), 1982.
    """
    from ..analysis import special  # scipy.special's functions, without its import

    x = np.sort(np.asarray(values, dtype=np.float64))
    n = x.shape[0]
    edges = np.arange(n + 1) / n
    p = np.asarray(probs, dtype=np.float64)[:, None]
    cdf = special.betainc(p * (n + 1), (1.0 - p) * (n + 1), edges)  # all probs at once
    return np.array([float(np.dot(w, x)) for w in np.diff(cdf, axis=1)])


def pivot_interval(estimate: float, replicates: np.ndarray, level: float = 0.95):
    """Log-pivot bootstrap interval: [θ̂²/q_hi, θ̂²/q_lo] for a scale parameter.

    For an estimator whose ratio to the truth has a fixed distribution (a
    chi-square-like variance), the replicate ratios θ*/θ̂ stand for θ̂/θ.
    Returns None when a/2 or more of the replicates are zero (the term is then
    not resolved); the quantiles are Harrell–Davis estimates.
    """
    a = 1.0 - level
    # Resolution is decided on the replicates themselves: a term set to zero in
    # a/2 of them or more is not kept from zero (smoothing would hide that).
    if estimate <= 0 or np.mean(replicates <= 0) >= a / 2.0:
        return None
    q_lo, q_hi = harrell_davis(replicates, [a / 2.0, 1.0 - a / 2.0])
    if q_lo <= 0:
        return None
    return estimate * estimate / q_hi, estimate * estimate / q_lo


def misfit(A: np.ndarray, avar: np.ndarray, nu: np.ndarray, c: np.ndarray) -> float:
    """Deviance of a model for chi-square distributed points (AVAR·ν/σ² ~ χ²(ν)).

    D = Σ ν [(avar − model)/model − log(avar/model)]: twice the negative
    log-likelihood up to a constant, so a difference of D between nested fits
    is a likelihood-ratio statistic. A model that overshoots the noisy longest
    taus pays the log term, which a weighted square would not charge.
    """
    model = np.maximum(A @ c, 1e-300)
    ratio = avar / model
    return float(np.sum(nu * (ratio - 1.0 - np.log(ratio))))


def term_bound(curve: AllanCurve, column: int, level: float = 0.95,
               used: np.ndarray | None = None) -> tuple[float, float]:
    """Upper bound of one squared coefficient and the tau that sets it.

    The term alone must stay below the curve's upper confidence limit at every
    used tau; the per-point limits are taken at 1 − (1 − level)/k (Bonferroni
    over the k points), so the bound holds with at least ``level`` overall.
    Taus left out of the fit (a band limit) do not set bounds: the low-pass
    lowers the curve there below what the terms alone would give.
    """
    used = np.ones(curve.taus.shape[0], bool) if used is None else used
    taus, dev, nu = curve.taus[used], curve.dev[used], curve.edf[used]
    a = (1.0 - level) / taus.shape[0]
    avar_hi = dev ** 2 * nu / chi2_ppf(a, nu)
    per = avar_hi / basis(taus)[:, column]
    j = int(np.argmin(per))
    return float(per[j]), float(taus[j])


def selected_interval(estimate: float, replicates: np.ndarray, level: float = 0.95):
    """Interval of a squared coefficient the selection kept.

    The log pivot of :func:`pivot_interval` where the replicates keep the term
    from zero; otherwise (a needed term that a collinear one can stand in for
    in some replicates) the basic bootstrap interval on the square-root scale,
    [2θ̂ − θ*_hi, 2θ̂ − θ*_lo] clipped at zero — Efron & Tibshirani (1993), §13.4.
    """
    ci = pivot_interval(estimate, replicates, level)
    if ci is not None:
        return ci, "log pivot"
    a = 1.0 - level
    root = np.sqrt(np.maximum(replicates, 0.0))
    lo, hi = harrell_davis(root, [a / 2.0, 1.0 - a / 2.0])
    theta = np.sqrt(estimate)
    return (max(0.0, 2 * theta - hi) ** 2, (2 * theta - lo) ** 2), "basic (square-root scale)"


def term_estimates(fit: TermFit, curve: AllanCurve, level: float = 0.95) -> dict:
    """Estimates (value, interval, unit, constraining taus) of the five terms.

    Returns
    -------
    dict of str to Estimate
        Keyed by ``TERM_NAMES``; terms the selection left out are upper bounds.
    """
    used = fit.used
    taus = curve.taus[used]
    A = basis(taus)
    model = A @ np.maximum(fit.c2, 0.0)
    out = {}
    reps = fit.replicates.shape[0]
    chosen = set(fit.selection.cols)
    swaps = fit.selection.swappable()
    for i, name in enumerate(TERM_NAMES):
        unit = derived_unit(curve.unit, name)
        if i not in chosen:
            bound, tau = term_bound(curve, i, level, used)
            if i == 0 and 5 in chosen:
                why = ("the band-limit term was chosen at short taus: the sensor's low-pass, "
                       "under which quantization cannot be seen")
            else:
                why = "the model selection leaves it out"
            out[name] = Estimate.bound(
                np.sqrt(bound), unit, level=level, tau_range=(tau, tau),
                method=(f"not resolved ({why}): the term alone stays under the curve's "
                        f"{level:.0%} simultaneous chi-square limit at every fitted tau"))
            continue
        (lo, hi), how = selected_interval(fit.c2[i], fit.replicates[:, i], level)
        tie = (f"; near tie: {' or '.join(COLUMNS[j] for j in sorted(swaps[i]))} in its place "
               f"fits within {NEAR_TIE:g} of the criterion (chosen: fewer terms, no ramp where a "
               f"random walk fits as well, a random walk over bias instability within "
               f"{RANDOM_WALK_BAND:g}, else the lower criterion)" if i in swaps else "")
        share = A[:, i] * fit.c2[i] / model
        hold = taus[share >= 0.5]
        tau_range = ((float(hold.min()), float(hold.max())) if hold.size
                     else (float(taus[np.argmax(share)]),) * 2)
        out[name] = Estimate(
            float(np.sqrt(fit.c2[i])), float(np.sqrt(lo)), float(np.sqrt(hi)), unit,
            method=(f"selected by deviance + {PENALTY:g} per term; weighted NNLS on "
                    f"overlapping AVAR at tau >= {taus[0]:.3g} s; interval by parametric "
                    f"bootstrap within the selected terms ({reps} replicates, seed "
                    f"{fit.seed}), {how}{tie}"),
            level=level, tau_range=tau_range)
    return out
