"""Discrete-time Q and R from noise terms."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.fit.discrete import filter_block
from noisecal.fit.simulate import gauss_markov
from noisecal.types import ChannelModel, Estimate


def model(name, n, k, gm=None, unit="rad/s"):
    terms = {"white_noise": n, "bias_random_walk": k}
    return ChannelModel(name, unit, terms, gm or {}, None, np.zeros(5), 0)


def est(v, lo, hi, unit="x"):
    return Estimate(v, lo, hi, unit, "test")


def test_white_noise_and_random_walk_discretisation():
    """R = N²/dt, Q_input = N²·dt, Q_bias = K²·dt (references: white-noise and
    random-walk discretisation, common practice, no source)."""
    fb = filter_block([model("a", est(2e-3, 1e-3, 3e-3), est(1e-5, 5e-6, 2e-5)),
                       model("b", est(4e-3, 3e-3, 5e-3), est(2e-5, 1e-5, 3e-5))], dt=0.02)
    assert fb.order == ("a", "b")
    np.testing.assert_allclose(np.diag(fb.R), [2e-3 ** 2 / 0.02, 4e-3 ** 2 / 0.02])
    np.testing.assert_allclose(np.diag(fb.R_low), [1e-3 ** 2 / 0.02, 3e-3 ** 2 / 0.02])
    np.testing.assert_allclose(np.diag(fb.Q_input_high), [3e-3 ** 2 * 0.02, 5e-3 ** 2 * 0.02])
    np.testing.assert_allclose(np.diag(fb.Q_bias), [1e-10 * 0.02, 4e-10 * 0.02])
    assert fb.R[0, 1] == 0 and fb.Q_bias[1, 0] == 0
    assert fb.Q_bias_is_bound == (False, False)


def test_unresolved_random_walk_uses_its_bound_and_says_so():
    """A bound K gives Q_bias = bound²·dt, flagged, with interval [0, bound²·dt]."""
    fb = filter_block([model("a", est(2e-3, 1e-3, 3e-3), Estimate.bound(5e-5, "x", "b"))], 0.1)
    assert fb.Q_bias_is_bound == (True,)
    assert fb.Q_bias[0, 0] == pytest.approx(5e-5 ** 2 * 0.1)
    assert fb.Q_bias_low[0, 0] == 0
    assert any("upper bound" in note for note in fb.notes)


def test_integrated_white_noise_matches_monte_carlo():
    """Q_input = N²·dt is the variance of white rate noise integrated over dt
    (common practice, no source), checked against a Monte Carlo integral at 100×
    the filter rate."""
    N, dt, sub = 3e-3, 0.05, 100
    fb = filter_block([model("a", est(N, N, N), est(1e-9, 1e-9, 1e-9))], dt)
    rng = np.random.default_rng(0)
    h = dt / sub
    rate = rng.standard_normal((20000, sub)) * N / np.sqrt(h)
    increments = rate.sum(axis=1) * h
    assert increments.var() == pytest.approx(fb.Q_input[0, 0], rel=0.04)


def test_gauss_markov_discrete_noise_matches_simulation():
    """First-order Gauss–Markov: phi = exp(−dt/T), q = sigma²(1 − exp(−2dt/T))
    (Brown & Hwang, from memory), against simulated samples of the process."""
    sigma, T, dt = 0.2, 3.0, 0.1
    gm = {"sigma": est(sigma, sigma, sigma), "correlation_time": est(T, T, T, "s")}
    fb = filter_block([model("a", est(1e-3, 1e-3, 1e-3), est(1e-9, 1e-9, 1e-9), gm)], dt)
    x = gauss_markov(400_000, dt, sigma, T, np.random.default_rng(1))
    phi = np.dot(x[1:], x[:-1]) / np.dot(x[:-1], x[:-1])
    assert fb.gm_phi[0] == pytest.approx(phi, abs=3e-3)
    assert fb.gm_q[0] == pytest.approx(np.var(x[1:] - fb.gm_phi[0] * x[:-1]), rel=0.02)
    assert x.std() == pytest.approx(sigma, rel=0.05)


def test_bad_time_step_is_refused():
    from noisecal.errors import AnalysisError

    with pytest.raises(AnalysisError):
        filter_block([model("a", est(1, 1, 1), est(1, 1, 1))], dt=0.0)
