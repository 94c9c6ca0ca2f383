"""Autocovariance least squares: exact recovery, identifiability, intervals."""

from __future__ import annotations

import numpy as np
import pytest
import yaml
from scipy.linalg import solve_discrete_are, solve_discrete_lyapunov

from noisecal.fit.als import _solve, design, identifiability, theoretical

from . import sim
from .blocks import write_log

pytest.importorskip("filterpy")


def _augmented_autocovariances(Phi, H, L, Q, R, lags):
    """Innovation autocovariances from the joint system s = [x; x_prior_estimate],
    its stationary covariance by scipy.linalg.solve_discrete_lyapunov, written out
    here on its own: nu_k = [H, -H] s_k + v_k, s_{k+1} = A s_k + [w_k; Phi L v_k]
    (linear systems algebra; the route differs from the error recursion in fit/als)."""
    n = Phi.shape[0]
    A = np.block([[Phi, np.zeros((n, n))], [Phi @ L @ H, Phi - Phi @ L @ H]])
    B = np.vstack([np.zeros((n, H.shape[0])), Phi @ L])
    Qs = np.block([[Q, np.zeros((n, n))], [np.zeros((n, n)), B[n:] @ R @ B[n:].T]])
    Sigma = solve_discrete_lyapunov(A, Qs)
    D = np.hstack([H, -H])
    out = [D @ Sigma @ D.T + R]
    Aj = np.eye(2 * n)
    for _ in range(1, lags):
        out.append(D @ (A @ Aj) @ Sigma @ D.T + D @ Aj @ B @ R)
        Aj = A @ Aj
    return np.array(out)


def _stable_system():
    Phi = np.array([[0.9, 0.2], [-0.1, 0.7]])
    H = np.array([[1.0, 0.0], [0.5, 1.0]])
    Q_terms = np.array([np.outer([1.0, 0.0], [1.0, 0.0]), np.outer([0.3, 1.0], [0.3, 1.0])])
    return Phi, H, Q_terms


def test_exact_recovery_from_exact_autocovariances():
    """With exact autocovariances (joint-system Lyapunov, scipy.linalg) of a filter that
    used wrong Q and R (gain by scipy.linalg.solve_discrete_are), ALS returns the true
    densities and variances to 1e-8 (Odelson, Rajamani & Rawlings 2006: the estimate
    is exact when the autocovariances are)."""
    Phi, H, Q_terms = _stable_system()
    theta = np.array([0.3, 0.05, 0.02, 0.08])
    Q = np.einsum("s,sij->ij", theta[:2], Q_terms)
    R = np.diag(theta[2:])
    P = solve_discrete_are(Phi.T, H.T, 0.2 * Q + 0.01 * np.eye(2), 3.0 * R)
    L = P @ H.T @ np.linalg.inv(H @ P @ H.T + 3.0 * R)
    exact = _augmented_autocovariances(Phi, H, L, Q, R, 8)
    assert np.allclose(theoretical(Phi, H, L, Q, R, 8), exact, rtol=1e-10, atol=1e-13)
    A = design(Phi, H, L, Q_terms, 8)
    assert np.allclose(_solve(A, exact.ravel()), theta, rtol=1e-8, atol=1e-12)
    rank, ident, each = identifiability(A, Q_terms, 2)
    assert rank == 4 and ident and each.all()


def test_unidentifiable_cases_are_stated():
    """Phi = 0 (a white state): the innovations see only Q + R, so neither is
    determined; two sources entering alike: Q is determined but not their split
    (Rajamani & Rawlings 2009, uniqueness needs full column rank)."""
    H = np.eye(1)
    Q_terms = np.array([np.eye(1)])
    A = design(np.zeros((1, 1)), H, np.array([[0.5]]), Q_terms, 5)
    rank, ident, _ = identifiability(A, Q_terms, 1)
    assert rank == 1 and not ident
    Phi, H, Q_terms = _stable_system()
    twins = np.array([Q_terms[0], Q_terms[0], Q_terms[1]])
    L = np.array([[0.3, 0.0], [0.0, 0.3]])
    A = design(Phi, H, L, twins, 8)
    rank, ident, each = identifiability(A, twins, 2)
    assert rank == 4 and ident and list(each) == [False, False, True, True, True]


def _fixed_gain_log(tmp_path, q_true, r_true, q_used, r_used, steps, seed, name="log"):
    """filterpy running the steady-state gain of (q_used, r_used) on a simulated target."""
    P = solve_discrete_are(sim.PHI.T, sim.H.T, q_used * sim.Q_UNIT, np.array([[r_used]]))
    S = float((sim.H @ P @ sim.H.T)[0, 0] + r_used)
    K = P @ sim.H.T / S
    x, z = sim.truth(q_true, r_true, steps, np.random.default_rng(seed))
    nu, Ss, _, _ = sim.run_filterpy(z, q_used, r_used, steady_gain=(K, S))
    return write_log(tmp_path / f"{name}.csv", ["p"], "m", nu[:, None], Ss[:, None, None])


def test_recovers_q_and_r_within_intervals(tmp_path, run_cli):
    """filterpy's fixed-gain filter with Q 20x too small and R 3x too large on a
    target with q = 0.5 m^2/s^3, R = 0.04 m^2: the ALS intervals hold the truth (one
    seeded run here; coverage over seeds in the slow suite), the estimate is within
    25 % of it, and the log is flagged (Odelson et al. 2006)."""
    log = _fixed_gain_log(tmp_path, 0.5, 0.04, 0.5 / 20, 0.12, 6000, 21)
    (tmp_path / "m.yaml").write_text(sim.model_text(0.5 / 20, 0.12))
    status, out, err = run_cli("consistency", log, "--model", tmp_path / "m.yaml",
                               "-o", tmp_path / "c.yaml", "--estimate", "--reps", "100")
    assert status == 1, err
    est = yaml.safe_load((tmp_path / "c.yaml").read_text())["estimate"]
    q = est["sources"]["accel"]
    assert q["ci"][0] <= 0.5 <= q["ci"][1] and q["q"] == pytest.approx(0.5, rel=0.25)
    assert est["R_ci"]["low"][0][0] <= 0.04 <= est["R_ci"]["high"][0][0]
    assert est["R"][0][0] == pytest.approx(0.04, rel=0.25)
    Qtrue = 0.5 * sim.Q_UNIT
    assert np.all(np.array(est["Q_ci"]["low"]) <= Qtrue + 1e-15)
    assert np.all(Qtrue <= np.array(est["Q_ci"]["high"]) + 1e-15)
    assert est["identifiability"]["identifiable"] is True


def test_estimate_needs_filter_used(tmp_path, run_cli):
    """--estimate without filter_used in the model: one line, status 2."""
    log = _fixed_gain_log(tmp_path, 0.5, 0.04, 0.5, 0.04, 300, 1)
    text = sim.model_text(0.5, 0.04)
    (tmp_path / "m.yaml").write_text(text[:text.index("filter_used")])
    status, _, err = run_cli("consistency", log, "--model", tmp_path / "m.yaml",
                             "-o", tmp_path / "c.yaml", "--estimate")
    assert status == 2 and "filter_used" in err and err.count("\n") == 1


@pytest.mark.slow
def test_interval_coverage(tmp_path):
    """Coverage of the 95 % ALS intervals of q and R over 100 seeded filterpy runs
    (fixed gain from Q 10x too small, R 2x too large; 3000 steps): each at least
    88 % (binomial 99.9 % lower limit for 95 % is about 88 %)."""
    from noisecal.api import consistency

    (tmp_path / "m.yaml").write_text(sim.model_text(0.05, 0.08))
    hit_q = hit_r = 0
    runs = 100
    for seed in range(runs):
        log = _fixed_gain_log(tmp_path, 0.5, 0.04, 0.05, 0.08, 3000, 500 + seed, f"l{seed}")
        fit = consistency(str(log), model=tmp_path / "m.yaml", estimate=True, reps=200,
                          seed=seed).als_fit
        hit_q += fit.theta_low[0] <= 0.5 <= fit.theta_high[0]
        hit_r += fit.theta_low[1] <= 0.04 <= fit.theta_high[1]
    print(f"ALS coverage: q {hit_q}/{runs}, R {hit_r}/{runs}")
    assert hit_q >= 88 and hit_r >= 88


def test_time_varying_log_is_trimmed_to_steady_state(tmp_path):
    """A filter that starts from a large P (filterpy's time-varying KalmanFilter): the
    steps before its S settles at the steady state of the model's filter_used are left
    out of ALS, and the estimate still holds q = 0.5 and R = 0.04 (Odelson et al. 2006
    assume a steady-state gain)."""
    from noisecal.api import consistency

    x, z = sim.truth(0.5, 0.04, 6000, np.random.default_rng(8))
    nu, S, _, _ = sim.run_filterpy(z, 0.05, 0.08)
    log = write_log(tmp_path / "tv.csv", ["p"], "m", nu[:, None], S[:, None, None])
    (tmp_path / "m.yaml").write_text(sim.model_text(0.05, 0.08))
    res = consistency(str(log), model=tmp_path / "m.yaml", estimate=True, reps=100)
    start = res.sections["estimate"]["identifiability"]["steady_state_from_step"][0]
    assert 1 <= start < 200
    fit = res.als_fit
    assert fit.theta_low[0] <= 0.5 <= fit.theta_high[0]
    assert fit.theta_low[1] <= 0.04 <= fit.theta_high[1]
