"""Exact covariance of overlapping Allan points (noisecal.fit.avar_cov).

Held to: the IEEE Std 952 Annex C Allan variances of each term; Greenhall's EDF
algorithm as allantools implements it (``allantools.edf_greenhall``); a
closed form derived by hand; and the spread of Allan points of simulated records.
"""

from __future__ import annotations

import allantools
import numpy as np
import pytest

import noisecal.fit.avar_cov as AC
from noisecal.analysis.allan import deviation
from noisecal.fit.simulate import RateModel, basis, simulate_rate

PERIOD = 0.01


@pytest.mark.parametrize("column", range(5))
def test_mean_is_each_terms_annex_c_allan_variance(column):
    """E[AVAR] of each term alone is its IEEE Std 952-1997 Annex C expression
    (3Q²/τ², N²/τ, (2 ln2/π)B², K²τ/3, R²τ²/2)."""
    c2 = np.zeros(5)
    c2[column] = [1e-8, 1e-6, 1e-7, 1e-6, 1e-8][column]
    m = 2 ** np.arange(12)
    mean, _ = AC.avar_covariance(AC.NoiseModel.from_terms(c2), m, PERIOD, [2 ** 14])
    np.testing.assert_allclose(mean, basis(m * PERIOD) @ c2, rtol=1e-9)


def test_white_noise_at_one_sample_has_the_hand_derived_edf():
    """White rate noise, τ = τ0: consecutive first differences correlate by −1/2, so
    with c0 = E z², Var Σz² = 2c0²(M + 2(M − 1)/4) and ν = 2(Mc0)²/Var = M²/(M + (M − 1)/2)
    ≈ 2M/3 (derived by hand; common practice, no source)."""
    M = 4095
    mean, cov = AC.avar_covariance(AC.NoiseModel(n2=1.0), np.array([1]), 1.0, [M + 1])
    nu = 2 * mean[0] ** 2 / cov[0, 0]
    assert nu == pytest.approx(M ** 2 / (M + (M - 1) / 2), rel=1e-9)


@pytest.mark.parametrize("alpha, c2", [(0, [0, 1e-6, 0, 0, 0]), (-1, [0, 0, 1e-6, 0, 0]),
                                       (-2, [0, 0, 0, 1e-6, 0]), (2, [1e-8, 0, 0, 0, 0])])
def test_edf_agrees_with_greenhalls_algorithm(alpha, c2):
    """ν = 2·mean²/var of one power-law noise against Greenhall & Riley (2003),
    allantools.edf_greenhall, at m ≥ 64 (at the shortest taus allantools' figure
    departs from the exact one: 3205 against 2M/3 = 2730 for white noise at m = 1, 3 %
    at m = 32)."""
    n = 2 ** 13
    m = 2 ** np.arange(6, 12)
    mean, cov = AC.avar_covariance(AC.NoiseModel.from_terms(c2), m, PERIOD, [n])
    nu = 2 * mean ** 2 / np.diag(cov)
    ref = [allantools.edf_greenhall(alpha=alpha, d=2, m=int(k), N=n + 1, overlapping=True,
                                    modified=False) for k in m]
    np.testing.assert_allclose(nu, ref, rtol=0.01)


def _simulated(model: RateModel, n, m, segments, runs, seed):
    rng = np.random.default_rng(seed)
    return np.array([deviation(model(PERIOD, n, rng), PERIOD, m, "oadev", segments)[0] ** 2
                     for _ in range(runs)])


@pytest.mark.parametrize("case", ["mixture", "gaps", "low_pass", "gauss_markov"])
def test_covariance_is_that_of_simulated_records(case):
    """Mean, variance and neighbour correlation of the Allan points of 800 simulated
    records against the exact values: within four standard errors (variance: with the
    points' own kurtosis); neighbour correlations within 0.08. Common practice, no
    source."""
    n, segments = 4096, None
    model = RateModel(np.array([1e-9, 1e-6, 1e-7, 1e-6, 1e-8]))
    if case == "gaps":
        segments = [(0, 1500), (1500, 2600), (2600, 4096)]
    if case == "low_pass":
        model = RateModel(np.array([0, 1e-6, 0, 1e-6, 0]), low_pass=0.05)
    if case == "gauss_markov":
        model = RateModel(np.array([1e-9, 1e-6, 0, 0, 0]), gm=(3e-3, 2.0))
    m = 2 ** np.arange(8)
    sims = _simulated(model, n, m, segments or [(0, n)], 800, seed=7)
    runs = [b - a for a, b in segments] if segments else [n]
    exact = AC.NoiseModel.from_terms(model.c2, model.low_pass, model.gm)
    mean, cov = AC.avar_covariance(exact, m, PERIOD, runs)
    r = sims.shape[0]
    assert np.all(np.abs(sims.mean(0) - mean) <= 4 * np.sqrt(np.diag(cov) / r))
    z = (sims - sims.mean(0)) / sims.std(0)
    kurt = np.maximum(np.mean(z ** 4, axis=0) - 3.0, 0.0)
    se_log_var = np.sqrt((2 + kurt) / r)
    assert np.all(np.abs(np.log(sims.var(0) / np.diag(cov))) <= 4 * se_log_var)
    sd = np.sqrt(np.diag(cov))
    drawn = np.corrcoef(sims.T)
    np.testing.assert_allclose(np.diag(drawn, 1), np.diag(cov / np.outer(sd, sd), 1), atol=0.08)


def test_the_comparison_can_fail():
    """The same check rejects a model missing its random walk."""
    n, m = 4096, 2 ** np.arange(8)
    sims = _simulated(RateModel(np.array([0, 1e-6, 0, 1e-6, 0])), n, m, [(0, n)], 600, 8)
    mean, cov = AC.avar_covariance(AC.NoiseModel(n2=1e-6), m, PERIOD, [n])
    assert np.any(np.abs(sims.mean(0) - mean) > 4 * np.sqrt(np.diag(cov) / 600))


def test_quadrature_equals_the_lag_by_lag_sum(monkeypatch):
    """Gauss–Legendre pieces give the sum over every lag to 1e-3 (every term, a
    low-pass and a Gauss–Markov term)."""
    m = 2 ** np.arange(11)
    model = AC.NoiseModel(q2=1e-9, n2=1e-6, b2=1e-7, k2=1e-6, r2=1e-8, low_pass=0.04,
                          gm=(1e-3, 3.0))
    _, quad = AC.avar_covariance(model, m, PERIOD, [2 ** 13])
    monkeypatch.setattr(AC, "SHORT", 10 ** 9)
    _, full = AC.avar_covariance(model, m, PERIOD, [2 ** 13])
    np.testing.assert_allclose(quad, full, rtol=1e-3)


def test_replicates_keep_mean_variance_and_correlation():
    """The chi-square marginals joined by a Gaussian copula keep each point's mean
    and variance (1 %) and the correlations (0.03) over 100 000 draws."""
    m = 2 ** np.arange(10)
    mean, cov = AC.avar_covariance(AC.NoiseModel(n2=1e-6, k2=1e-6), m, PERIOD, [4096])
    draws = AC.correlated_chi2(mean, cov, 100_000, np.random.default_rng(0))
    assert np.all(draws > 0)
    np.testing.assert_allclose(draws.mean(0), mean, rtol=0.01)
    np.testing.assert_allclose(draws.var(0), np.diag(cov), rtol=0.04)
    sd = np.sqrt(np.diag(cov))
    np.testing.assert_allclose(np.corrcoef(draws.T), cov / np.outer(sd, sd), atol=0.03)


@pytest.mark.parametrize("lengths", [[2 ** 15], [9000, 9000, 14768]])
def test_compiled_sums_equal_the_numpy_reference(lengths):
    """The compiled kernel and the numpy reference path give the same covariance
    (1e-4; they round the tail's reach differently) for every term together."""
    model = AC.NoiseModel(q2=1e-9, n2=1e-6, b2=1e-7, k2=1e-6, r2=1e-8, gm=(1e-3, 3.0))
    m = 2 ** np.arange(12)
    mean, cov = AC.avar_covariance(model, m, PERIOD, lengths)
    ref_mean, ref_cov = AC.avar_covariance_reference(model, m, PERIOD, lengths)
    np.testing.assert_allclose(mean, ref_mean, rtol=1e-12)
    np.testing.assert_allclose(cov, ref_cov, rtol=1e-4)


def test_many_runs_are_grouped_without_changing_the_covariance(monkeypatch):
    """A record broken into 200 runs of random lengths: grouping the run lengths keeps
    the covariance within 1 % of summing every run (common practice, no source)."""
    rng = np.random.default_rng(0)
    lengths = rng.integers(300, 5000, 200)
    m = 2 ** np.arange(8)
    model = AC.NoiseModel(n2=1e-6, b2=1e-8, k2=1e-6)
    mean, cov = AC.avar_covariance(model, m, PERIOD, lengths)
    monkeypatch.setattr(AC, "MAX_RUN_GROUPS", 10 ** 9)
    ref_mean, ref_cov = AC.avar_covariance(model, m, PERIOD, lengths)
    np.testing.assert_allclose(mean, ref_mean, rtol=1e-12)
    np.testing.assert_allclose(cov, ref_cov, rtol=0.01)
