"""Discrete Phi and Q of a linear model by Van Loan's method; intervals by Monte Carlo.

For dx/dt = F x + G w with white w of spectral density Qc (u²/Hz), the exact
discretisation over a step dt is

    Phi = e^(F dt),   Q = ∫_0^dt e^(F s) G Qc Gᵀ e^(Fᵀ s) ds,

both read off the exponential of one block matrix (Van Loan 1978):

    expm([[−F, G Qc Gᵀ], [0, Fᵀ]] · dt) = [[·, Phi⁻¹ Q], [0, Phiᵀ]].

References
----------
C. F. Van Loan, "Computing integrals involving the matrix exponential",
IEEE Trans. Automatic Control 23(3), 395–403, 1978.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy.linalg import expm

from ..types import Estimate


def van_loan(F: np.ndarray, G: np.ndarray, Qc: np.ndarray, dt: float):
    """Exact discretisation of a linear time-invariant model driven by white noise.

    Parameters
    ----------
    F : ndarray, shape (n, n)
        Continuous-time dynamics, 1/s.
    G : ndarray, shape (n, s)
        Noise input matrix.
    Qc : ndarray, shape (s, s)
        Intensity of the white noise w, E[w(t) w(s)ᵀ] = Qc δ(t − s) (two-sided spectral
        density, u²/Hz), symmetric positive semidefinite.
    dt : float
        Step, s.

    Returns
    -------
    Phi : ndarray, shape (n, n)
        Transition matrix e^(F dt).
    Q : ndarray, shape (n, n)
        Covariance of the noise accumulated over one step (symmetric).

    References
    ----------
    Van Loan (1978), Theorem 1.
    """
    F = np.atleast_2d(np.asarray(F, float))
    G = np.asarray(G, float).reshape(F.shape[0], -1)
    Qc = np.atleast_2d(np.asarray(Qc, float))
    n = F.shape[0]
    M = np.zeros((2 * n, 2 * n))
    M[:n, :n] = -F
    M[:n, n:] = G @ Qc @ G.T
    M[n:, n:] = F.T
    E = expm(M * dt)
    Phi = E[n:, n:].T
    Q = Phi @ E[:n, n:]
    return Phi, 0.5 * (Q + Q.T)


def source_terms(model, amplitudes: np.ndarray, taus: np.ndarray | None = None):
    """Phi and the per-source discrete covariances for given source values.

    Parameters
    ----------
    model : FilterModel
        A linear model (continuous or discrete form).
    amplitudes : ndarray, shape (s,)
        Amplitude of each source (density, √variance or Gauss–Markov σ), SI.
    taus : ndarray, shape (s,), optional
        Gauss–Markov correlation times, s (NaN for other sources).

    Returns
    -------
    Phi : ndarray, shape (n, n)
    Qs : ndarray, shape (s, n, n)
        Each source's contribution to Q; Q = Qs.sum(0).
    F : ndarray, shape (n, n) or None
        Continuous dynamics with the Gauss–Markov entries set.
    qc : ndarray, shape (s,)
        Continuous density of each source, u²/Hz (discrete variance for the discrete form).
    """
    s = len(model.sources)
    taus = np.full(s, np.nan) if taus is None else taus
    qc = np.empty(s)
    dt = model.dt
    if model.form == "continuous":
        F = model.F.copy()
        for i, src in enumerate(model.sources):
            if src.kind == "gauss_markov":
                k = int(np.flatnonzero(src.g)[0])
                g = src.g[k]
                F[k, k] = -1.0 / taus[i]
                # Stationary variance sigma^2 of the state needs density 2 sigma^2 / T.
                qc[i] = 2.0 * amplitudes[i] ** 2 / taus[i] / g ** 2
            else:
                qc[i] = amplitudes[i] ** 2
        Qs = np.empty((s, F.shape[0], F.shape[0]))
        Phi = None
        for i, src in enumerate(model.sources):
            Phi, Qs[i] = van_loan(F, src.g[:, None], np.array([[qc[i]]]), dt)
        if Phi is None:
            Phi = expm(F * dt)
        return Phi, Qs, F, qc
    Phi = model.Phi.copy()
    Qs = np.empty((s, Phi.shape[0], Phi.shape[0]))
    for i, src in enumerate(model.sources):
        g = src.g
        if src.kind == "gauss_markov":
            k = int(np.flatnonzero(g)[0])
            Phi[k, k] = np.exp(-dt / taus[i])
            var = amplitudes[i] ** 2 * -np.expm1(-2 * dt / taus[i]) / g[k] ** 2
            qc[i] = 2.0 * amplitudes[i] ** 2 / taus[i] / g[k] ** 2
        elif src.kind == "variance":
            var = amplitudes[i] ** 2
            qc[i] = np.nan
        else:
            # Discrete form: the white noise integrated over the step, variance q dt.
            var = amplitudes[i] ** 2 * dt
            qc[i] = amplitudes[i] ** 2
        Qs[i] = var * np.outer(g, g)
    return Phi, Qs, None, qc


def _point(e: Estimate) -> float:
    """The value a matrix is built from: the estimate, or the bound where unresolved."""
    return float(e.value if e.resolved else e.upper)


def draw(e: Estimate, rng: np.random.Generator, size: int) -> np.ndarray:
    """Draws of a positive quantity spread as its interval says.

    A resolved estimate: log-normal on each side of the value, each side's spread
    matching its interval end at ``e.level``. An upper bound: uniform on
    [0, bound]. A number given without an interval: that number.

    Parameters
    ----------
    e : Estimate
    rng : numpy Generator
    size : int

    Returns
    -------
    ndarray, shape (size,)
    """
    from scipy.stats import norm

    if not e.resolved:
        return rng.uniform(0.0, e.upper, size)
    if e.lower == e.upper or e.value <= 0:
        return np.full(size, float(e.value))
    zq = norm.ppf(0.5 + e.level / 2)
    lo = np.log(e.value / max(e.lower, e.value * 1e-12)) / zq
    hi = np.log(max(e.upper, e.value) / e.value) / zq
    z = rng.standard_normal(size)
    return e.value * np.exp(np.where(z < 0, z * lo, z * hi))


def monte_carlo(model, draws: int = 2000, seed: int = 1, level: float = 0.95):
    """Phi and Q at the point values, and element-wise intervals of Phi, Q and R.

    The sources' amplitudes (and Gauss–Markov times) are drawn independently,
    each spread as its interval says (:func:`draw`); Phi and Q are recomputed
    for every draw and the interval of each element is the central ``level``
    range of its draws, widened where needed to hold the point value (an upper
    bound's point is the bound itself).

    Parameters
    ----------
    model : FilterModel
        Linear model (continuous or discrete form).
    draws : int
    seed : int
    level : float

    Returns
    -------
    dict
        ``Phi``, ``Phi_low``, ``Phi_high``, ``Q``, ``Q_low``, ``Q_high`` (n, n);
        ``R``, ``R_low``, ``R_high`` (m, m); ``F`` (continuous form, n × n);
        ``qc`` (s,) and ``qc_low``, ``qc_high``; ``Qs`` (s, n, n).
    """
    rng = np.random.default_rng(seed)
    src = model.sources
    amp0 = np.array([_point(s.amplitude) for s in src])
    tau0 = np.array([_point(s.tau) if s.tau is not None else np.nan for s in src])
    Phi, Qs, F, qc = source_terms(model, amp0, tau0)
    amps = np.column_stack([draw(s.amplitude, rng, draws) for s in src])
    taus = np.column_stack([draw(s.tau, rng, draws) if s.tau is not None
                            else np.full(draws, np.nan) for s in src])
    # Only Gauss-Markov times change Phi; other sources scale their own Q term.
    gm = np.array([s.kind == "gauss_markov" for s in src])
    phis = np.empty((draws,) + Phi.shape)
    qs = np.empty((draws,) + Phi.shape)
    qcs = np.empty((draws, len(src)))
    if gm.any():
        for d in range(draws):
            p, q, _, c = source_terms(model, amps[d], taus[d])
            phis[d], qs[d], qcs[d] = p, q.sum(0), c
    else:
        with np.errstate(invalid="ignore", divide="ignore"):
            scale = np.where(amp0 > 0, (amps / np.where(amp0 > 0, amp0, 1.0)) ** 2, 0.0)
        phis[:] = Phi
        qs[:] = np.einsum("ds,sij->dij", scale, Qs)
        qcs[:] = qc * scale
    a = (1 - level) / 2
    Q = Qs.sum(0)
    out = {"Phi": Phi, "Q": Q, "Qs": Qs, "F": F, "qc": qc}
    for key, point, sims in (("Phi", Phi, phis), ("Q", Q, qs), ("qc", qc, qcs)):
        with warnings.catch_warnings():  # a variance source has no density: NaN column
            warnings.simplefilter("ignore", RuntimeWarning)
            lo, hi = np.nanquantile(sims, [a, 1 - a], axis=0)
        out[f"{key}_low"] = np.fmin(lo, point)
        out[f"{key}_high"] = np.fmax(hi, point)
    sig0 = np.array([_point(mm.sigma) for mm in model.measurements])
    sigs = np.column_stack([draw(mm.sigma, rng, draws) for mm in model.measurements])
    out["R"] = np.diag(sig0 ** 2)
    lo, hi = np.quantile(sigs ** 2, [a, 1 - a], axis=0)
    out["R_low"] = np.diag(np.fmin(lo, sig0 ** 2))
    out["R_high"] = np.diag(np.fmax(hi, sig0 ** 2))
    out["draws"], out["seed"], out["level"] = draws, seed, level
    return out


def linearised(model, jac: dict, draws: int = 2000, seed: int = 1, level: float = 0.95):
    """Phi, Q and R of a nonlinear model linearised at its operating point.

    Q = L Qw Lᵀ and R = M Rv Mᵀ, where w holds each source's mean over the step
    (Var = q/dt for a density q, the variance itself for a ``variance`` source)
    and Rv = diag(σ_j²). Intervals as in :func:`monte_carlo`.

    Parameters
    ----------
    model : FilterModel
        The Python form.
    jac : dict of str to Jacobian
        ``F``, ``L``, ``H``, ``M`` (:func:`noisecal.model.jacobian.model_jacobians`).
    draws, seed, level
        As in :func:`monte_carlo`.

    Returns
    -------
    dict
        As :func:`monte_carlo` (Phi is F, without an interval), plus ``H``.
    """
    rng = np.random.default_rng(seed)
    L, M = jac["L"].J, jac["M"].J
    dt = model.dt

    def wvar(amp, src):
        return amp ** 2 if src.kind == "variance" else amp ** 2 / dt

    amp0 = np.array([_point(s.amplitude) for s in model.sources])
    var0 = np.array([wvar(a, s) for a, s in zip(amp0, model.sources)])
    Qs = np.einsum("is,js,s->sij", L, L, var0)
    amps = np.column_stack([draw(s.amplitude, rng, draws) for s in model.sources])
    var = np.column_stack([wvar(amps[:, i], s) for i, s in enumerate(model.sources)])
    qs = np.einsum("is,js,ds->dij", L, L, var)
    sig0 = np.array([_point(mm.sigma) for mm in model.measurements])
    sigs = np.column_stack([draw(mm.sigma, rng, draws) for mm in model.measurements])
    R = (M * sig0 ** 2) @ M.T
    rs = np.einsum("is,js,ds->dij", M, M, sigs ** 2)
    a = (1 - level) / 2
    Q = Qs.sum(0)
    qc = np.array([a0 ** 2 if s.kind != "variance" else np.nan
                   for a0, s in zip(amp0, model.sources)])
    qcs = amps ** 2
    out = {"Phi": jac["F"].J, "Phi_low": jac["F"].J, "Phi_high": jac["F"].J, "Q": Q, "Qs": Qs,
           "F": None, "qc": qc, "R": R, "H": jac["H"].J,
           # What an EKF that re-linearises every step takes: the noise-space covariances.
           "Qw": np.diag(var0), "Rv": np.diag(sig0 ** 2)}
    wlo, whi = np.quantile(var, [a, 1 - a], axis=0)
    vlo, vhi = np.quantile(sigs ** 2, [a, 1 - a], axis=0)
    out["Qw_low"], out["Qw_high"] = np.diag(np.fmin(wlo, var0)), np.diag(np.fmax(whi, var0))
    out["Rv_low"], out["Rv_high"] = (np.diag(np.fmin(vlo, sig0 ** 2)),
                                     np.diag(np.fmax(vhi, sig0 ** 2)))
    for key, point, sims in (("Q", Q, qs), ("R", R, rs), ("qc", qc, qcs)):
        lo, hi = np.nanquantile(sims, [a, 1 - a], axis=0)
        out[f"{key}_low"] = np.fmin(lo, point)
        out[f"{key}_high"] = np.fmax(hi, point)
    out["draws"], out["seed"], out["level"] = draws, seed, level
    return out
