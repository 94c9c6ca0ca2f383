"""First-order Gauss–Markov approximation of a sensor bias.

A filter that carries the bias as a first-order Gauss–Markov state needs its
stationary std sigma and correlation time T. They are fitted to the same
Allan variance curve as the IEEE terms, with white noise and quantization
beside the Gauss–Markov term: for each T on a log grid the model is linear in
[Q², N², sigma²] (weighted NNLS), and the T of least weighted misfit wins.
Intervals come from refitting the bootstrap replicate curves of
:mod:`noisecal.fit.ieee952`.

References
----------
IEEE Std 952-1997, Annex C (Allan variance of exponentially correlated noise).
R. G. Brown, P. Y. C. Hwang, *Introduction to Random Signals and Applied
Kalman Filtering* (discrete first-order Gauss–Markov).
"""

from __future__ import annotations

import numpy as np

from ..types import AllanCurve, Estimate
from ..units import derived_unit
from .ieee952 import TermFit, pivot_interval, weighted_nnls
from .simulate import basis, gm_avar

GRID_POINTS = 48


def _fit_one(taus: np.ndarray, avar: np.ndarray, nu: np.ndarray, grid: np.ndarray):
    base = basis(taus)[:, :2]
    best = (np.inf, 0.0, float(grid[0]))
    w0 = np.sqrt(nu / 2.0)
    for T in grid:
        A = np.column_stack([base, gm_avar(taus, 1.0, T)])
        c = weighted_nnls(A, avar, nu, passes=1)
        model = A @ c
        ref = np.where(model > 0, model, avar)
        cost = float(np.sum((w0 * (avar - model) / ref) ** 2))
        if cost < best[0]:
            best = (cost, float(np.sqrt(c[2])), float(T))
    return best[1], best[2]


def fit_gauss_markov(curve: AllanCurve, terms: TermFit, level: float = 0.95) -> dict:
    """Gauss–Markov sigma and correlation time with bootstrap intervals.

    Parameters
    ----------
    curve : AllanCurve
        The overlapping Allan deviation the IEEE terms were fitted to.
    terms : TermFit
        Holds the bootstrap replicate curves.
    level : float

    Returns
    -------
    dict
        ``sigma`` and ``correlation_time`` Estimates; empty when the curve
        shows no resolvable correlated bias (sigma not kept from zero).
    """
    taus = curve.taus
    grid = np.logspace(np.log10(taus[0]), np.log10(taus[-1] * 10.0), GRID_POINTS)
    sigma, T = _fit_one(taus, curve.dev ** 2, curve.edf, grid)
    if sigma <= 0:
        return {}
    boot = np.array([_fit_one(taus, s, curve.edf, grid) for s in terms.replicate_avar])
    ci_s = pivot_interval(sigma, boot[:, 0], level)
    ci_t = pivot_interval(T, boot[:, 1], level)
    if ci_s is None or ci_t is None:
        return {}
    method = (f"white + quantization + Gauss–Markov fitted to overlapping AVAR; "
              f"interval by parametric bootstrap ({boot.shape[0]} replicates, seed {terms.seed})")
    return {
        "sigma": Estimate(sigma, ci_s[0], ci_s[1], derived_unit(curve.unit, "bias_instability"),
                          method, level),
        "correlation_time": Estimate(T, ci_t[0], ci_t[1], "s", method, level),
    }
