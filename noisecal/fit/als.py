"""Q and R from a time-invariant filter's innovations: autocovariance least squares.

A filter x̂⁻_{k+1} = Phi (x̂⁻_k + L ν_k), ν_k = z_k − H x̂⁻_k, running on
x_{k+1} = Phi x_k + w_k (Cov Q), z_k = H x_k + v_k (Cov R) has the estimation
error e_{k+1} = Ā e_k + w_k − Phi L v_k with Ā = Phi (I − L H), and

    C_0 = H P Hᵀ + R,   C_j = H Ā^j P Hᵀ − H Ā^(j−1) Phi L R   (j ≥ 1),
    P = Ā P Āᵀ + Q + Phi L R Lᵀ Phiᵀ,

linear in (Q, R) whatever gain L the filter used. With Q = Σ θ_i Q_i (one term
per noise source of the model) and R = diag(θ_r), the stacked autocovariances are
𝒜 θ; ALS takes the θ ≥ 0 (so Q, R ⪰ 0) nearest the sample autocovariances in
least squares. Q and R are identifiable when every direction 𝒜 cannot see leaves
Q and R unchanged (𝒜 of full column rank: each source as well).

References
----------
B. J. Odelson, M. R. Rajamani, J. B. Rawlings, "A new autocovariance
least-squares method for estimating noise covariances", Automatica 42(2),
303–308, 2006. M. R. Rajamani, J. B. Rawlings, "Estimation of the disturbance
structure from data using semidefinite programming and optimal weighting",
Automatica 45(1), 142–148, 2009 (uniqueness conditions). R. K. Mehra, "On the
identification of variances and adaptive Kalman filtering", IEEE TAC 15(2), 1970.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_discrete_are, solve_discrete_lyapunov
from scipy.optimize import nnls

from ..errors import AnalysisError


def kalman_gain(Phi: np.ndarray, H: np.ndarray, Q: np.ndarray, R: np.ndarray):
    """Steady-state gain and prior covariance of the filter that used Q and R.

    Returns
    -------
    L : ndarray, shape (n, m)
        Update gain: x̂⁺ = x̂⁻ + L ν.
    P : ndarray, shape (n, n)
        Steady-state prior covariance.
    S : ndarray, shape (m, m)
        Steady-state innovation covariance H P Hᵀ + R.
    """
    P = solve_discrete_are(Phi.T, H.T, Q, R)
    S = H @ P @ H.T + R
    return np.linalg.solve(S.T, (P @ H.T).T).T, P, S


def theoretical(Phi, H, L, Q, R, lags: int) -> np.ndarray:
    """Innovation autocovariances C_0 … C_{lags−1} of a filter with gain L.

    Parameters
    ----------
    Phi : ndarray, shape (n, n)
    H : ndarray, shape (m, n)
    L : ndarray, shape (n, m)
        The filter's gain.
    Q, R : ndarray, shapes (n, n), (m, m)
        The true noise covariances.
    lags : int

    Returns
    -------
    ndarray, shape (lags, m, m)
        C_j = E[ν_{k+j} ν_kᵀ].
    """
    Ab = Phi - Phi @ L @ H
    AL = Phi @ L
    P = solve_discrete_lyapunov(Ab, Q + AL @ R @ AL.T)
    out = np.empty((lags, H.shape[0], H.shape[0]))
    out[0] = H @ P @ H.T + R
    power = np.eye(Phi.shape[0])
    for j in range(1, lags):
        out[j] = H @ power @ (Ab @ P @ H.T - AL @ R)
        power = power @ Ab
    return out


def sample_autocovariances(nus: list, lags: int) -> np.ndarray:
    """Ĉ_j = Σ_k ν_{k+j} ν_kᵀ / Σ (K_r − j), runs pooled; shape (lags, m, m)."""
    m = nus[0].shape[1]
    acc = np.zeros((lags, m, m))
    cnt = np.zeros(lags)
    for nu in nus:
        K = nu.shape[0]
        for j in range(lags):
            if K > j:
                acc[j] += nu[j:].T @ nu[:K - j]
                cnt[j] += K - j
    return acc / cnt[:, None, None]


@dataclass(frozen=True)
class AlsFit:
    """An ALS estimate with its bootstrap intervals and identifiability.

    Attributes
    ----------
    theta : ndarray, shape (p,)
        Source densities (for the Q terms' unit matrices) then R variances.
    Q, R : ndarray, shapes (n, n), (m, m)
        Estimated discrete Q and R.
    Q_low, Q_high, R_low, R_high : ndarray
        Element-wise intervals at ``level`` (parametric bootstrap).
    theta_low, theta_high : ndarray, shape (p,)
    lags : int
    rank : int
        Column rank of 𝒜 (of p).
    identifiable : bool
        Q and R are determined by the autocovariances.
    sources_identifiable : ndarray of bool, shape (p,)
        Each θ is determined (False where two sources drive Q alike).
    reps, seed : int
    level : float
    residual : float
        Relative least-squares residual ‖𝒜θ − b‖/‖b‖.
    draws : ndarray, shape (reps, p)
        The bootstrap replicates' θ.
    """

    theta: np.ndarray
    Q: np.ndarray
    R: np.ndarray
    Q_low: np.ndarray
    Q_high: np.ndarray
    R_low: np.ndarray
    R_high: np.ndarray
    theta_low: np.ndarray
    theta_high: np.ndarray
    lags: int
    rank: int
    identifiable: bool
    sources_identifiable: np.ndarray
    reps: int
    seed: int
    level: float
    residual: float
    draws: np.ndarray


def design(Phi, H, L, Q_terms: np.ndarray, lags: int) -> np.ndarray:
    """The ALS matrix 𝒜: stacked autocovariances of each unknown at unit value.

    Parameters
    ----------
    Q_terms : ndarray, shape (s, n, n)
        Q per unit of each source's density.

    Returns
    -------
    ndarray, shape (lags·m·m, s + m)
        Columns: the sources, then R's diagonal.
    """
    m = H.shape[0]
    cols = []
    zero_r = np.zeros((m, m))
    for Qi in Q_terms:
        cols.append(theoretical(Phi, H, L, Qi, zero_r, lags).ravel())
    for r in range(m):
        Rr = np.zeros((m, m))
        Rr[r, r] = 1.0
        cols.append(theoretical(Phi, H, L, np.zeros_like(Phi), Rr, lags).ravel())
    return np.column_stack(cols)


def _solve(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """min ‖Aθ − b‖ with θ ≥ 0, columns scaled to unit norm first (Q and R differ
    by orders of magnitude)."""
    norms = np.linalg.norm(A, axis=0)
    norms[norms == 0] = 1.0
    theta, _ = nnls(A / norms, b, maxiter=50 * A.shape[1])
    return theta / norms


def identifiability(A: np.ndarray, Q_terms: np.ndarray, m: int):
    """Column rank of 𝒜, whether Q and R are determined, and which θ are.

    Returns
    -------
    rank : int
    identifiable : bool
    each : ndarray of bool, shape (p,)
    """
    norms = np.linalg.norm(A, axis=0)
    norms = np.where(norms > 0, norms, 1.0)
    _, sv, vt = np.linalg.svd(A / norms, full_matrices=True)
    tol = max(A.shape) * np.finfo(float).eps * 1e3 * (sv[0] if sv.size else 1.0)
    rank = int(np.sum(sv > tol))
    p = A.shape[1]
    null = vt[rank:].T  # directions 𝒜 cannot see, in column-scaled coordinates
    if null.shape[1] == 0:
        return rank, True, np.ones(p, bool)
    s_ = Q_terms.shape[0]
    M = np.zeros((Q_terms[0].size + m * m, p))
    for i in range(s_):
        M[:Q_terms[0].size, i] = Q_terms[i].ravel()
    for r in range(m):
        M[Q_terms[0].size + r * m + r, s_ + r] = 1.0
    Mn = M / norms
    # Q and R are determined when what 𝒜 cannot see changes neither of them.
    ident = np.linalg.norm(Mn @ null) <= 1e-6 * np.linalg.norm(Mn, axis=0).max()
    each = np.all(np.abs(null) <= 1e-6, axis=1)
    return rank, bool(ident), each


def simulate_innovations(Phi, H, L, Q, R, lengths: list, reps: int,
                         rng: np.random.Generator, burn: int = 200) -> list:
    """Innovation sequences of the filter with gain L under noise Q, R.

    Returns
    -------
    list (reps) of list (runs) of ndarray, shape (K_r, m)
    """
    n, m = Phi.shape[0], H.shape[0]
    Ab = Phi - Phi @ L @ H
    AL = Phi @ L

    def sqrt_psd(X):
        w, V = np.linalg.eigh(0.5 * (X + X.T))
        return V * np.sqrt(np.clip(w, 0, None))

    sq, sr = sqrt_psd(Q), sqrt_psd(R)
    P = solve_discrete_lyapunov(Ab, Q + AL @ R @ AL.T)
    sp = sqrt_psd(P)
    out = [[None] * len(lengths) for _ in range(reps)]
    for ri, K in enumerate(lengths):
        # Start in the stationary error distribution: no burn-in needed.
        e = rng.standard_normal((reps, n)) @ sp.T
        nu = np.empty((K, reps, m))
        for k in range(K):
            v = rng.standard_normal((reps, m)) @ sr.T
            nu[k] = e @ H.T + v
            e = e @ Ab.T + rng.standard_normal((reps, n)) @ sq.T - v @ AL.T
        for b in range(reps):
            out[b][ri] = nu[:, b, :]
    return out


def als(nus: list, Phi: np.ndarray, H: np.ndarray, L: np.ndarray, Q_terms: np.ndarray,
        lags: int, reps: int = 200, seed: int = 1, level: float = 0.95) -> AlsFit:
    """Estimate Q and R from innovations by ALS, with bootstrap intervals.

    Parameters
    ----------
    nus : list of ndarray, each shape (K_r, m)
        Innovations of each run, SI (steady state: leave out the start-up).
    Phi : ndarray, shape (n, n)
    H : ndarray, shape (m, n)
    L : ndarray, shape (n, m)
        The gain the filter ran with.
    Q_terms : ndarray, shape (s, n, n)
        Q per unit density of each noise source (structure of Q).
    lags : int
        Autocovariance lags used (C_0 … C_{lags−1}).
    reps : int
        Parametric bootstrap replicates: innovations simulated from the estimate
        through the same filter, re-estimated.
    seed : int
    level : float

    Returns
    -------
    AlsFit

    References
    ----------
    Odelson, Rajamani & Rawlings (2006); Rajamani & Rawlings (2009).
    """
    m = H.shape[0]
    Ab = Phi - Phi @ L @ H
    rho = float(np.abs(np.linalg.eigvals(Ab)).max())
    if not rho < 1:
        raise AnalysisError(f"the filter's error dynamics Phi (I - L H) are not stable "
                            f"(spectral radius {rho:.4g}); ALS needs a stable "
                            "time-invariant filter: check Phi, H and filter_used")
    A = design(Phi, H, L, Q_terms, lags)
    b = sample_autocovariances(nus, lags).ravel()
    theta = _solve(A, b)
    resid = float(np.linalg.norm(A @ theta - b) / max(np.linalg.norm(b), 1e-300))
    rank, ident, each = identifiability(A, Q_terms, m)
    s = Q_terms.shape[0]

    def mats(th):
        return np.einsum("s,sij->ij", th[:s], Q_terms), np.diag(th[s:])

    Q, R = mats(theta)
    rng = np.random.default_rng(seed)
    lengths = [nu.shape[0] for nu in nus]
    thetas = np.empty((reps, theta.shape[0]))
    done = 0
    chunk = max(1, int(4e7 // (8 * m * max(lengths) * len(lengths) + 1)))
    while done < reps:
        todo = min(chunk, reps - done)
        for sims in simulate_innovations(Phi, H, L, Q, R, lengths, todo, rng):
            thetas[done] = _solve(A, sample_autocovariances(sims, lags).ravel())
            done += 1
    a = (1 - level) / 2
    th_lo, th_hi = np.quantile(thetas, [a, 1 - a], axis=0)
    qs = np.einsum("bs,sij->bij", thetas[:, :s], Q_terms)
    rs = np.einsum("br,rj->brj", thetas[:, s:], np.eye(m)) * np.eye(m)
    q_lo, q_hi = np.quantile(qs, [a, 1 - a], axis=0)
    r_lo, r_hi = np.quantile(rs, [a, 1 - a], axis=0)
    return AlsFit(theta, Q, R, q_lo, q_hi, r_lo, r_hi, th_lo, th_hi, lags, rank, ident,
                  each, reps, seed, level, resid, thetas)


def default_lags(Phi, H, L, steps: int) -> int:
    """Lags until the error dynamics have decayed to 1 % (at least 5, at most 50 and a
    twentieth of the steps)."""
    rho = float(np.abs(np.linalg.eigvals(Phi - Phi @ L @ H)).max())
    want = 5 if rho <= 1e-3 else int(np.ceil(np.log(0.01) / np.log(min(rho, 0.999))))
    return int(max(5, min(want, 50, max(5, steps // 20))))
