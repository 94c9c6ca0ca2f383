"""Van Loan discretisation and the filter job against independent references."""

from __future__ import annotations

import numpy as np
import pytest
import yaml
from scipy.integrate import quad_vec
from scipy.linalg import expm

from noisecal.model.discretize import draw, van_loan
from noisecal.model.spec import read_model
from noisecal.jobs.filter import discretise
from noisecal.types import Estimate

from .blocks import est, static_block


def test_against_numerical_integral_and_block_exponential():
    """Q equals the integral of e^(Fs) G Qc G^T e^(F^T s) over [0, dt] by adaptive
    quadrature (scipy.integrate.quad_vec), and Phi equals scipy.linalg.expm(F dt);
    the block form expm([[-F, GQcG^T], [0, F^T]] dt) written out here gives the same
    (Van Loan 1978, Theorem 1)."""
    rng = np.random.default_rng(4)
    F = rng.normal(size=(3, 3))
    G = rng.normal(size=(3, 2))
    A = rng.normal(size=(2, 2))
    Qc = A @ A.T
    dt = 0.37
    Phi, Q = van_loan(F, G, Qc, dt)
    integral, _ = quad_vec(lambda s: expm(F * s) @ G @ Qc @ G.T @ expm(F.T * s), 0, dt,
                           epsabs=1e-13, epsrel=1e-11)
    assert np.allclose(Phi, expm(F * dt), rtol=1e-12, atol=1e-13)
    assert np.allclose(Q, integral, rtol=1e-8, atol=1e-12)
    M = np.block([[-F, G @ Qc @ G.T], [np.zeros((3, 3)), F.T]]) * dt
    E = expm(M)
    assert np.allclose(E[3:, 3:].T @ E[:3, 3:], Q, rtol=1e-10, atol=1e-14)


def test_filterpy_docstring_example():
    """filterpy.common.van_loan_discretization docstring (from R. G. Brown, Introduction
    to Random Signals and Applied Kalman Filtering, 4th ed., p. 126-7): F=[[0,1],[-1,0]],
    G=[[0],[2]], dt=0.1 -> Phi=[[0.99500417, 0.09983342], [-0.09983342, 0.99500417]],
    Q=[[0.00133067, 0.01993342], [0.01993342, 0.39866933]]; and filterpy itself."""
    F = np.array([[0, 1], [-1, 0]], float)
    G = np.array([[0.0], [2.0]])
    Phi, Q = van_loan(F, G, np.eye(1), 0.1)
    assert np.allclose(Phi, [[0.99500417, 0.09983342], [-0.09983342, 0.99500417]],
                       atol=5e-9)
    assert np.allclose(Q, [[0.00133067, 0.01993342], [0.01993342, 0.39866933]], atol=5e-9)
    common = pytest.importorskip("filterpy.common")
    phi_ref, q_ref = common.van_loan_discretization(F, G, 0.1)
    assert np.allclose(Phi, phi_ref, rtol=1e-12)
    assert np.allclose(Q, q_ref, rtol=1e-10)


def test_white_noise_acceleration_is_the_continuous_model(tmp_path):
    """Constant-velocity model with white acceleration of density q:
    Q = q [[dt^3/3, dt^2/2], [dt^2/2, dt]] (Bar-Shalom, Li & Kirubarajan 2001, the
    continuous white-noise acceleration model; from memory). filterpy's
    Q_discrete_white_noise is the piecewise-constant model, var*[[dt^4/4, dt^3/2], ...],
    which the result must not be."""
    q, dt = 0.09, 0.25
    model = tmp_path / "cv.yaml"
    model.write_text(f"states: [p, v]\ndt: {dt}\nF: [[0, 1], [0, 0]]\nnoise:\n"
                     f"  - G: [0, 1]\n    density: {float(np.sqrt(q))!r}\n"
                     "measurements:\n  - {name: p, H: [1, 0], variance: 1.0}\n")
    res = discretise(read_model(model), draws=200, seed=1)
    want = q * np.array([[dt ** 3 / 3, dt ** 2 / 2], [dt ** 2 / 2, dt]])
    assert np.allclose(res.matrices["Q"], want, rtol=1e-12)
    assert np.allclose(res.matrices["Phi"], [[1, dt], [0, 1]])
    common = pytest.importorskip("filterpy.common")
    piecewise = common.Q_discrete_white_noise(2, dt, var=q * dt)  # same velocity variance
    assert not np.allclose(res.matrices["Q"], piecewise, rtol=0.05)


def test_gauss_markov_from_a_static_block(tmp_path):
    """First-order Gauss-Markov with std sigma and correlation time T: phi = e^(-dt/T),
    discrete variance sigma^2 (1 - e^(-2dt/T)) (Brown & Hwang, Introduction to Random
    Signals and Applied Kalman Filtering; from memory)."""
    sigma, T, dt = 3.0e-4, 45.0, 0.5
    static_block(tmp_path / "imu.yaml", {"gyro_z": {
        "white_noise": est(2e-4), "gauss_markov": {"sigma": est(sigma, 2.5e-4, 3.6e-4),
                                                   "correlation_time": est(T, 30.0, 70.0, "s")}}})
    (tmp_path / "m.yaml").write_text(
        "states: [heading, gm_bias]\ndt: 0.5\nF: [[0, -1], [0, 0]]\nnoise:\n"
        "  - G: [1, 0]\n    from: {file: imu.yaml, channel: gyro_z, term: white_noise}\n"
        "  - G: [0, 1]\n    from: {file: imu.yaml, channel: gyro_z, term: gauss_markov}\n"
        "measurements:\n  - {name: heading, H: [1, 0], variance: 1.0e-4}\n")
    res = discretise(read_model(tmp_path / "m.yaml"), draws=400, seed=2)
    mx = res.matrices
    assert mx["Phi"][1, 1] == pytest.approx(np.exp(-dt / T), rel=1e-12)
    assert mx["F"][1, 1] == pytest.approx(-1 / T)
    assert mx["Qs"][1][1, 1] == pytest.approx(sigma ** 2 * (1 - np.exp(-2 * dt / T)), rel=1e-10)
    # The interval grows with sigma and falls with T: the corners bound it.
    lo = 2.5e-4 ** 2 * (1 - np.exp(-2 * dt / 70.0))
    hi = 3.6e-4 ** 2 * (1 - np.exp(-2 * dt / 30.0))
    assert lo <= mx["Q_low"][1, 1] < mx["Q"][1, 1] < mx["Q_high"][1, 1] <= hi
    assert mx["Phi_low"][1, 1] < mx["Phi"][1, 1] < mx["Phi_high"][1, 1]


def test_interval_maps_the_density_interval(tmp_path):
    """Q is linear in the density q = N^2, so its interval ends are the ends of N's
    interval squared times Q per unit density (a monotone map keeps quantiles; common
    practice, no source). Monte Carlo quantiles: within 3 %."""
    static_block(tmp_path / "imu.yaml", {"gyro_x": {
        "white_noise": est(4.0e-5, 3.5e-5, 4.8e-5), "bias_random_walk": est(1e-6)}})
    (tmp_path / "m.yaml").write_text(
        "states: [angle, bias]\ndt: 0.01\nF: [[0, -1], [0, 0]]\nnoise:\n"
        "  - G: [1, 0]\n    from: {file: imu.yaml, channel: gyro_x, term: white_noise}\n"
        "  - G: [0, 1]\n    density: 1.0e-12\n"
        "measurements:\n  - {name: pos, H: [1, 0], variance: 4.0e-4}\n")
    res = discretise(read_model(tmp_path / "m.yaml"), draws=4000, seed=3)
    mx = res.matrices
    unit = mx["Qs"][0][0, 0] / 4.0e-5 ** 2
    assert mx["Q"][0, 0] == pytest.approx(4.0e-5 ** 2 * 0.01, rel=1e-6)  # N^2 dt, F dt small
    assert mx["Q_low"][0, 0] == pytest.approx(3.5e-5 ** 2 * unit, rel=0.03)
    assert mx["Q_high"][0, 0] == pytest.approx(4.8e-5 ** 2 * unit, rel=0.03)
    # Never the sigma^2/dt confusion: R is the variance given, Q is density * dt.
    assert mx["R"][0, 0] == 4.0e-4


def test_draws_match_the_interval():
    """The split log-normal puts level/2 of its mass on each side between the value and
    the interval ends (scipy.stats.norm quantiles; common practice, no source)."""
    e = Estimate(2.0, 1.5, 3.0, "", "x")
    d = draw(e, np.random.default_rng(0), 200_000)
    assert np.mean(d < 1.5) == pytest.approx(0.025, abs=0.002)
    assert np.mean(d > 3.0) == pytest.approx(0.025, abs=0.002)
    assert np.median(d) == pytest.approx(2.0, rel=0.01)


def test_bound_is_used_and_flagged(tmp_path, run_cli):
    """A term that is only an upper bound is used at the bound and flagged (the
    conservative choice; common practice, no source)."""
    static_block(tmp_path / "imu.yaml", {"gyro_x": {
        "white_noise": est(4e-5), "bias_random_walk": Estimate.bound(2e-6, "", "not resolved")}})
    (tmp_path / "m.yaml").write_text(
        "states: [angle, bias]\ndt: 0.1\nF: [[0, -1], [0, 0]]\nnoise:\n"
        "  - G: [1, 0]\n    from: {file: imu.yaml, channel: gyro_x, term: white_noise}\n"
        "  - G: [0, 1]\n    from: {file: imu.yaml, channel: gyro_x, term: bias_random_walk}\n"
        "measurements:\n  - {name: angle, H: [1, 0], variance: 1.0e-4}\n")
    status, out, err = run_cli("filter", tmp_path / "m.yaml", "-o", tmp_path / "q.yaml")
    assert status == 0, err
    doc = yaml.safe_load((tmp_path / "q.yaml").read_text())
    f = doc["filter"]
    # Q_bias = K^2 dt at the bound (F couples it only to the angle).
    assert f["Q"][1][1] == pytest.approx((2e-6) ** 2 * 0.1, rel=1e-5)
    assert f["Q_ci95"]["low"][1][1] < f["Q"][1][1] <= f["Q_ci95"]["high"][1][1]
    assert f["from_bound"] and "upper bound" in f["from_bound"][0]
    assert doc["noise"]["gyro_x.bias_random_walk"]["from_bound"] is True
    assert "flag" in out
