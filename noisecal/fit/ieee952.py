"""IEEE Std 952 noise terms fitted jointly to an Allan variance curve.

The Allan variance of the five terms is linear in their squared coefficients
c = [Q², N², B², K², R²] (see :func:`noisecal.fit.simulate.basis`). They are
fitted by non-negative least squares, each point weighted by its standard
error sqrt(2/ν)·AVAR with the variance taken from the model itself (three
reweighting passes), so no term region has to be picked by hand: a term takes
the taus where it explains the curve. Intervals come from a parametric
bootstrap of the whole procedure; a term that the bootstrap cannot keep away
from zero, or without which the curve fits about as well (random walk and
ramp can stand in for each other at the longest taus), is reported as an
upper bound instead of a number.

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
from scipy import optimize, stats

from ..analysis.allan import deviation
from ..types import AllanCurve, Estimate
from ..units import derived_unit
from .simulate import TERM_NAMES, basis, simulate_rate

FULL_SIM_MAX = 2 ** 16
"""Longest record simulated sample for sample; longer ones are simulated decimated."""

REWEIGHT_PASSES = 3

MIN_SHARE = 0.2
"""A term must explain this fraction of the Allan variance at some tau to stay in the model.

Terms below it are set to zero and the rest refitted; without this pruning the
bootstrap would simulate spurious small terms and widen every interval.
"""


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
    scale = np.sqrt(nu / 2.0)
    ref = avar
    c = np.zeros(A.shape[1])
    col = np.max(np.abs(A), axis=0)
    col[col == 0] = 1.0
    for _ in range(passes + 1):
        w = scale / ref
        sol, _ = optimize.nnls(A * w[:, None] / col, avar * w)
        c = sol / col
        model = A @ c
        ref = np.where(model > 0, model, avar)
    return c


def fit_model(A: np.ndarray, avar: np.ndarray, nu: np.ndarray) -> np.ndarray:
    """The fitting procedure applied to data and to every bootstrap replicate.

    Weighted NNLS over all terms, then terms that never reach ``MIN_SHARE`` of
    the model are dropped and the others refitted.

    Parameters
    ----------
    A : ndarray, shape (k, p)
    avar : ndarray, shape (k,)
    nu : ndarray, shape (k,)

    Returns
    -------
    c : ndarray, shape (p,)
    """
    c = weighted_nnls(A, avar, nu)
    model = A @ c
    share = (A * c) / np.where(model > 0, model, 1.0)[:, None]
    keep = share.max(axis=0) >= MIN_SHARE
    if keep.all() or not keep.any():
        return c
    out = np.zeros_like(c)
    out[keep] = weighted_nnls(A[:, keep], avar, nu)
    return out


@dataclass(frozen=True)
class TermFit:
    """Point fit and bootstrap replicates of the five squared coefficients.

    Attributes
    ----------
    c2 : ndarray, shape (5,)
        Fitted [Q², N², B², K², R²], SI.
    replicates : ndarray, shape (reps, 5)
        The same fit on each bootstrap replicate.
    replicate_avar : ndarray, shape (reps, k)
        The replicate curves (Allan variance at the fit taus).
    seed : int
    """

    c2: np.ndarray
    replicates: np.ndarray
    replicate_avar: np.ndarray
    seed: int


def replicate_curves(simulate, expected, period: float, m: np.ndarray,
                     segments: list[tuple[int, int]], reps: int, seed: int,
                     progress=None) -> np.ndarray:
    """Allan variance curves of records simulated from a fitted model.

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


def fit_terms(curve: AllanCurve, period: float, segments: list[tuple[int, int]],
              reps: int = 200, seed: int = 0, progress=None) -> TermFit:
    """Fit the five terms to an overlapping-ADEV curve and bootstrap the fit.

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
    A = basis(curve.taus)
    c2 = fit_model(A, curve.dev ** 2, curve.edf)
    sims = replicate_curves(lambda p, n, rng: simulate_rate(c2, p, n, rng),
                            lambda t: basis(t) @ c2, period, curve.m, segments, reps,
                            seed, progress)
    boot = np.array([fit_model(A, s, curve.edf) for s in sims])
    return TermFit(c2=c2, replicates=boot, replicate_avar=sims, seed=seed)


def harrell_davis(values: np.ndarray, probs) -> np.ndarray:
    """Harrell–Davis quantiles: Beta-weighted means of all order statistics.

    With 200 replicates a 2.5 % quantile read off one order statistic is noisy
    enough to cost the interval about 2 points of coverage (measured: 92 % with
    plain quantiles, 96 % with 600 replicates); the Harrell–Davis estimate uses
    every replicate. F. E. Harrell, C. E. Davis, Biometrika 69(3), 1982.
    """
    from scipy import stats

    x = np.sort(np.asarray(values, dtype=np.float64))
    n = x.shape[0]
    edges = np.arange(n + 1) / n
    out = []
    for p in probs:
        cdf = stats.beta.cdf(edges, p * (n + 1), (1.0 - p) * (n + 1))
        out.append(float(np.dot(np.diff(cdf), x)))
    return np.array(out)


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


NEEDED = 3.84
"""Deviance increase (chi-square, 1 degree of freedom, 95 %) that makes a term needed."""


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


def needed(A: np.ndarray, avar: np.ndarray, nu: np.ndarray, c: np.ndarray, column: int) -> bool:
    """Whether the curve needs term ``column``: refitting without it must raise the
    deviance by at least ``NEEDED`` (a likelihood-ratio test; the points are
    correlated, so it is a guard rather than an exact 5 % test). Random walk and ramp can stand in for each
    other at the longest taus; then neither is needed and both become bounds."""
    keep = np.arange(A.shape[1]) != column
    without = np.zeros_like(c)
    without[keep] = fit_model(A[:, keep], avar, nu)
    return misfit(A, avar, nu, without) - misfit(A, avar, nu, c) >= NEEDED


def term_bound(curve: AllanCurve, column: int, level: float = 0.95) -> tuple[float, float]:
    """Upper bound of one squared coefficient and the tau that sets it.

    The term alone must stay below the curve's upper confidence limit at every
    tau; the per-point limits are taken at 1 − (1 − level)/k (Bonferroni over
    the k points), so the bound holds with at least ``level`` overall.
    """
    k = curve.taus.shape[0]
    a = (1.0 - level) / k
    avar_hi = curve.dev ** 2 * curve.edf / stats.chi2.ppf(a, curve.edf)
    per = avar_hi / basis(curve.taus)[:, column]
    j = int(np.argmin(per))
    return float(per[j]), float(curve.taus[j])


def term_estimates(fit: TermFit, curve: AllanCurve, level: float = 0.95) -> dict:
    """Estimates (value, 95 % interval, unit, constraining taus) of the five terms.

    Returns
    -------
    dict of str to Estimate
        Keyed by ``TERM_NAMES``; unresolved terms are upper bounds.
    """
    A = basis(curve.taus)
    model = A @ fit.c2
    out = {}
    reps = fit.replicates.shape[0]
    avar = curve.dev ** 2
    for i, name in enumerate(TERM_NAMES):
        unit = derived_unit(curve.unit, name)
        ci = pivot_interval(fit.c2[i], fit.replicates[:, i], level)
        if ci is not None and not needed(A, avar, curve.edf, fit.c2, i):
            ci = None
        if ci is None:
            bound, tau = term_bound(curve, i, level)
            out[name] = Estimate.bound(
                np.sqrt(bound), unit, level=level, tau_range=(tau, tau),
                method=("not resolved (the bootstrap does not keep it from zero, or the "
                        "curve fits as well without it): the term alone stays under the "
                        f"curve's {level:.0%} simultaneous chi-square limit at every tau"))
            continue
        share = A[:, i] * fit.c2[i] / model
        hold = curve.taus[share >= 0.5]
        tau_range = ((float(hold.min()), float(hold.max())) if hold.size
                     else (float(curve.taus[np.argmax(share)]),) * 2)
        out[name] = Estimate(
            float(np.sqrt(fit.c2[i])), float(np.sqrt(ci[0])), float(np.sqrt(ci[1])), unit,
            method=(f"weighted NNLS on overlapping AVAR; interval by parametric bootstrap "
                    f"({reps} replicates, seed {fit.seed}), log pivot"),
            level=level, tau_range=tau_range)
    return out
