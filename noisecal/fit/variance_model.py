"""Variances linear in known regressors, fitted by Gaussian maximum likelihood.

Zero-mean errors e_i with variance v_i = a_i · θ (a_i ≥ 0 known, θ ≥ 0): the
covariate law σ² = a + b·x² and the odometry model's α1…α4 are both of this
form. Intervals come from the Fisher information, I = ½ Σ a_i a_iᵀ / v_i².
"""

from __future__ import annotations

import numpy as np
from scipy.special import ndtri

from ..types import Estimate


def fit(e2: np.ndarray, A: np.ndarray, info_scale: float = 1.0,
        known: np.ndarray | None = None):
    """Maximum-likelihood θ and its covariance.

    Parameters
    ----------
    e2 : ndarray, shape (n,)
        Squared errors.
    A : ndarray, shape (n, k)
        Non-negative regressors of each error's variance.
    info_scale : float
        Factor on the Fisher information (n_eff / n for correlated errors).
    known : ndarray, shape (n,), optional
        A known part of each variance, added to A·θ (e.g. quantization).

    Returns
    -------
    theta : ndarray, shape (k,)
    cov : ndarray, shape (k, k)
    """
    from scipy import optimize  # here, not at import: only the fit uses it

    e2 = np.asarray(e2, dtype=float)
    A = np.asarray(A, dtype=float)
    c = np.zeros_like(e2) if known is None else np.asarray(known, dtype=float)
    scale = float(np.mean(e2)) or 1.0
    floor = 1e-12 * scale

    def nll(theta):
        v = np.maximum(A @ theta + c, floor)
        return 0.5 * np.sum(np.log(v) + e2 / v)

    def grad(theta):
        v = np.maximum(A @ theta + c, floor)
        return 0.5 * A.T @ (1 / v - e2 / v ** 2)

    # Start from least squares of e² on A (its expectation), clipped positive.
    start = np.linalg.lstsq(A, np.maximum(e2 - c, 0.0), rcond=None)[0]
    start = np.maximum(start, 1e-3 * np.abs(start).max() + 1e-300)
    res = optimize.minimize(nll, start, jac=grad, method="L-BFGS-B",
                            bounds=[(0.0, None)] * A.shape[1],
                            options={"maxiter": 2000, "ftol": 1e-14, "gtol": 1e-12})
    theta = res.x
    v = np.maximum(A @ theta + c, floor)
    W = A / v[:, None]
    cov = np.linalg.pinv(0.5 * W.T @ W * info_scale)
    return theta, cov


def estimates(theta: np.ndarray, cov: np.ndarray, names, units, method: str,
              level: float = 0.95) -> dict:
    """Estimates of θ's components; a bound where the interval reaches zero."""
    z = ndtri(0.5 + level / 2)  # normal quantile
    out = {}
    for j, (name, unit) in enumerate(zip(names, units)):
        se = float(np.sqrt(max(cov[j, j], 0.0)))
        lo, hi = theta[j] - z * se, theta[j] + z * se
        if lo <= 0:
            out[name] = Estimate.bound(max(hi, 0.0), unit, method + " (upper bound: the "
                                       "interval reaches zero)", level)
        else:
            out[name] = Estimate(float(theta[j]), float(lo), float(hi), unit, method, level)
    return out
