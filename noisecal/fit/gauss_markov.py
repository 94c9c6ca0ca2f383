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

from .. import _native
from .._jit import njit
from .._native import fit_calls

from ..types import AllanCurve, Estimate
from ..units import derived_unit
from .ieee952 import pivot_interval, replicate_curves, weighted_nnls
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
def _nnls3(G, h, x):
    """Exact NNLS from the normal equations of at most three columns: the least
    objective over the active sets whose unconstrained solution is positive (the NNLS
    optimum is one of them). No allocation: called millions of times."""
    p = G.shape[0]
    best = 0.0
    x[:] = 0.0
    z0 = z1 = z2 = 0.0
    for mask in range(1, 1 << p):
        i0 = mask & 1
        i1 = (mask >> 1) & 1
        i2 = (mask >> 2) & 1 if p > 2 else 0
        q = i0 + i1 + i2
        # The chosen columns' indices, in order.
        a = 0 if i0 else (1 if i1 else 2)
        b = (1 if (i0 and i1) else 2) if q > 1 else -1
        c = 2 if q == 3 else -1
        if q == 1:
            if G[a, a] <= 0.0:
                continue
            za, zb, zc = h[a] / G[a, a], 0.0, 0.0
        elif q == 2:
            det = G[a, a] * G[b, b] - G[a, b] * G[b, a]
            if det <= 0.0:
                continue
            za = (G[b, b] * h[a] - G[a, b] * h[b]) / det
            zb = (G[a, a] * h[b] - G[b, a] * h[a]) / det
            zc = 0.0
        else:
            c00, c01, c02 = G[0, 0], G[0, 1], G[0, 2]
            c11, c12, c22 = G[1, 1], G[1, 2], G[2, 2]
            m00 = c11 * c22 - c12 * c12
            m01 = c02 * c12 - c01 * c22
            m02 = c01 * c12 - c02 * c11
            det = c00 * m00 + c01 * m01 + c02 * m02
            if det <= 0.0:
                continue
            m11 = c00 * c22 - c02 * c02
            m12 = c01 * c02 - c00 * c12
            m22 = c00 * c11 - c01 * c01
            za = (m00 * h[0] + m01 * h[1] + m02 * h[2]) / det
            zb = (m01 * h[0] + m11 * h[1] + m12 * h[2]) / det
            zc = (m02 * h[0] + m12 * h[1] + m22 * h[2]) / det
        if za <= 0.0 or (q > 1 and zb <= 0.0) or (q > 2 and zc <= 0.0):
            continue
        z0 = z1 = z2 = 0.0
        for idx, val in ((a, za), (b, zb), (c, zc)):
            if idx == 0:
                z0 = val
            elif idx == 1:
                z1 = val
            elif idx == 2:
                z2 = val
        # Objective less ||b||²: x'Gx − 2h'x.
        obj = (z0 * (G[0, 0] * z0 + 2.0 * G[0, 1] * z1 - 2.0 * h[0])
               + z1 * (G[1, 1] * z1 - 2.0 * h[1]))
        if p > 2:
            obj += z2 * (G[2, 2] * z2 + 2.0 * G[0, 2] * z0 + 2.0 * G[1, 2] * z1 - 2.0 * h[2])
        if obj < best:
            best = obj
            x[0] = z0
            x[1] = z1
            if p > 2:
                x[2] = z2
    return x


@njit(cache=True, nogil=True)
def _fit_many_kernel(base, gm_cols, sims, nu, out):
    k = base.shape[0]
    w0 = np.sqrt(nu / 2.0)
    A = np.empty((k, 3))
    A[:, :2] = base
    x = np.zeros(3)
    c = np.zeros(3)
    col = np.empty(3)
    G = np.empty((3, 3))
    h = np.empty(3)
    ref = np.empty(k)
    wv = np.empty(k)
    for r in range(sims.shape[0]):
        avar = sims[r]
        best = np.inf
        out[r, 0], out[r, 1] = 0.0, gm_cols[0, 0]
        for g in range(gm_cols.shape[0]):
            A[:, 2] = gm_cols[g, 1:]
            for j in range(3):
                mx = 0.0
                for i in range(k):
                    mx = max(mx, abs(A[i, j]))
                col[j] = mx if mx != 0.0 else 1.0
            for i in range(k):
                ref[i] = avar[i]
            for _ in range(2):  # weighted_nnls with passes=1
                for i in range(k):
                    wv[i] = w0[i] / ref[i]
                for a in range(3):
                    s = 0.0
                    for i in range(k):
                        s += A[i, a] * wv[i] * wv[i] * avar[i]
                    h[a] = s / col[a]
                    for b in range(a, 3):
                        s = 0.0
                        for i in range(k):
                            s += A[i, a] * A[i, b] * wv[i] * wv[i]
                        G[a, b] = s / (col[a] * col[b])
                        G[b, a] = G[a, b]
                _nnls3(G, h, x)
                for j in range(3):
                    c[j] = x[j] / col[j]
                for i in range(k):
                    mdl = A[i, 0] * c[0] + A[i, 1] * c[1] + A[i, 2] * c[2]
                    ref[i] = mdl if mdl > 0 else avar[i]
            cost = 0.0
            for i in range(k):
                mdl = A[i, 0] * c[0] + A[i, 1] * c[1] + A[i, 2] * c[2]
                rr = mdl if mdl > 0 else avar[i]
                e = w0[i] * (avar[i] - mdl) / rr
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
        as the scipy path to rounding (NNLS of three columns solved exactly by its
        active sets from the normal equations, :func:`_nnls3`; tested against
        ``_fit_one``).
    """
    gm_cols = np.array([np.concatenate([[T], gm_avar(taus, 1.0, T)]) for T in grid])
    out = np.empty((sims.shape[0], 2))
    kernel = fit_calls.gm_fit_many if _native.enabled() else _fit_many_kernel
    return kernel(np.ascontiguousarray(basis(taus)[:, :2]), gm_cols,
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
