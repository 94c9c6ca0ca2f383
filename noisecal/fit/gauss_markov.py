"""First-order Gauss–Markov approximation of a sensor bias.

A filter that carries the bias as a first-order Gauss–Markov state needs its
stationary std sigma and correlation time T. They are fitted to the same
Allan variance curve as the IEEE terms, with white noise and quantization
beside the Gauss–Markov term: for each T on a log grid the model is linear in
[Q², N², sigma²] (weighted NNLS), and the T of least weighted misfit wins.
Intervals come from a parametric bootstrap of the fitted Gauss–Markov model
itself (white + quantization + Gauss–Markov), refitted the same way.

References
----------
IEEE Std 952-1997, Annex C (Allan variance of exponentially correlated noise).
R. G. Brown, P. Y. C. Hwang, *Introduction to Random Signals and Applied
Kalman Filtering* (discrete first-order Gauss–Markov).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from ..types import AllanCurve, Estimate
from ..units import derived_unit
from .ieee952 import pivot_interval, replicate_curves, weighted_nnls
from .select_kernel import nnls
from .simulate import RateModel, basis, gm_avar

GRID_POINTS = 32


def _fit_one(taus: np.ndarray, avar: np.ndarray, nu: np.ndarray, grid: np.ndarray):
    """(c2 of quantization and white, sigma, T) of least weighted misfit over the T grid."""
    base = basis(taus)[:, :2]
    best = (np.inf, np.zeros(2), 0.0, float(grid[0]))
    w0 = np.sqrt(nu / 2.0)
    for T in grid:
        A = np.column_stack([base, gm_avar(taus, 1.0, T)])
        c = weighted_nnls(A, avar, nu, passes=1)
        model = A @ c
        ref = np.where(model > 0, model, avar)
        cost = float(np.sum((w0 * (avar - model) / ref) ** 2))
        if cost < best[0]:
            best = (cost, c[:2], float(np.sqrt(c[2])), float(T))
    return best[1], best[2], best[3]


@njit(cache=True, nogil=True)
def _fit_many_kernel(base, gm_cols, sims, nu, out):
    k = base.shape[0]
    w0 = np.sqrt(nu / 2.0)
    A = np.empty((k, 3))
    A[:, :2] = base
    x = np.zeros(3)
    col = np.empty(3)
    for r in range(sims.shape[0]):
        avar = sims[r]
        best = np.inf
        out[r, 0], out[r, 1] = 0.0, gm_cols[0, 0]
        for g in range(gm_cols.shape[0]):
            A[:, 2] = gm_cols[g, 1:]
            for j in range(3):
                col[j] = np.max(np.abs(A[:, j]))
                if col[j] == 0.0:
                    col[j] = 1.0
            ref = avar.copy()
            c = np.zeros(3)
            for _ in range(2):  # weighted_nnls with passes=1
                w = w0 / ref
                M = A * w[:, None] / col[None, :]
                nnls(M, avar * w, x)
                c = x / col
                model = A @ c
                for i in range(k):
                    ref[i] = model[i] if model[i] > 0 else avar[i]
            model = A @ c
            cost = 0.0
            for i in range(k):
                rr = model[i] if model[i] > 0 else avar[i]
                e = w0[i] * (avar[i] - model[i]) / rr
                cost += e * e
            if cost < best:
                best = cost
                out[r, 0] = np.sqrt(c[2])
                out[r, 1] = gm_cols[g, 0]
    return out


def _fit_many(taus: np.ndarray, sims: np.ndarray, nu: np.ndarray,
              grid: np.ndarray) -> np.ndarray:
    """``_fit_one(taus, s, nu, grid)[1:]`` for every row of ``sims``, compiled.

    Parameters
    ----------
    taus : ndarray, shape (k,)
        s.
    sims : ndarray, shape (reps, k)
        Replicate Allan variances, u².
    nu : ndarray, shape (k,)
    grid : ndarray, shape (g,)
        Correlation times tried, s.

    Returns
    -------
    ndarray, shape (reps, 2)
        Sigma (u) and correlation time (s) of each replicate. The same numbers
        as the scipy path to rounding (Lawson–Hanson NNLS,
        :func:`noisecal.fit.select_kernel.nnls`; tested against ``_fit_one``).
    """
    gm_cols = np.array([np.concatenate([[T], gm_avar(taus, 1.0, T)]) for T in grid])
    out = np.empty((sims.shape[0], 2))
    return _fit_many_kernel(np.ascontiguousarray(basis(taus)[:, :2]), gm_cols,
                            np.ascontiguousarray(sims, dtype=np.float64),
                            np.asarray(nu, dtype=np.float64), out)


def fit_gauss_markov(curve: AllanCurve, period: float, segments: list[tuple[int, int]],
                     reps: int = 200, seed: int = 0, level: float = 0.95,
                     progress=None) -> dict:
    """Gauss–Markov sigma and correlation time with bootstrap intervals.

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
        Bootstrap seed.
    level : float
    progress : callable, optional

    Returns
    -------
    dict
        ``sigma`` and ``correlation_time`` Estimates; empty when the curve
        shows no resolvable correlated bias (sigma not kept from zero).
    """
    taus = curve.taus
    grid = np.logspace(np.log10(taus[0]), np.log10(taus[-1] * 10.0), GRID_POINTS)
    c2, sigma, T = _fit_one(taus, curve.dev ** 2, curve.edf, grid)
    if sigma <= 0:
        return {}
    full = np.array([c2[0], c2[1], 0.0, 0.0, 0.0])
    sims = replicate_curves(
        RateModel(full, gm=(sigma, T)),
        lambda t: basis(t) @ full + gm_avar(t, sigma, T),
        period, curve.m, segments, reps, seed, progress)
    boot = _fit_many(taus, sims, curve.edf, grid)
    ci_s = pivot_interval(sigma, boot[:, 0], level)
    ci_t = pivot_interval(T, boot[:, 1], level)
    if ci_s is None or ci_t is None:
        return {}
    method = (f"white + quantization + Gauss–Markov fitted to overlapping AVAR; "
              f"interval by parametric bootstrap of that model ({reps} replicates, "
              f"seed {seed}), log pivot")
    return {
        "sigma": Estimate(sigma, ci_s[0], ci_s[1], derived_unit(curve.unit, "bias_instability"),
                          method, level),
        "correlation_time": Estimate(T, ci_t[0], ci_t[1], "s", method, level),
    }
