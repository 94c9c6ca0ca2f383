"""The bootstrap's replicate curves have the distribution of simulated records.

``replicate_curves`` with a ``RateModel`` draws, by default, from the Allan
points' exact covariance (``avar_cov.replicate_avar``), or with
``how="simulated"`` simulates records in compiled batches
(``simulate.replicate_avar``); ``replicate_curves_reference`` is the
one-record-at-a-time simulation both are held to. They draw different random
numbers, so they are compared as distributions over seeded replicates: per tau,
a two-sample Kolmogorov–Smirnov test (Bonferroni over the taus) and the mean and
spread within four standard errors, and the bootstrap intervals they lead to
over seeds. Common practice, no source.

The low-passed model is compared on a record the reference simulates sample
for sample: its two-level scheme for long records centres the short taus on the
terms without the low-pass.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from noisecal.fit.gauss_markov import _fit_many, _fit_one
from noisecal.fit.ieee952 import (pivot_interval, replicate_curves,
                                  replicate_curves_reference, weighted_nnls)
from noisecal.fit.simulate import RateModel, basis, gm_avar, one_pole, simulate_rate

PERIOD = 0.01
M = 2 ** np.arange(16)

MODELS = {
    # two-level scheme (n > 2**16): white + random walk
    "white_walk_long": (RateModel(np.array([0, 1e-6, 0, 4e-9, 0])), 2 ** 20, None),
    # every IEEE term, long record (flicker by FFT, quantization, ramp)
    "all_terms_long": (RateModel(np.array([1e-9, 1e-6, 1e-7, 4e-9, 1e-11])), 2 ** 19, None),
    # Gauss–Markov behind a one-pole low-pass, long record
    "gm_low_pass": (RateModel(np.array([0, 1e-6, 0, 0, 0]), gm=(2e-4, 5.0), low_pass=0.03),
                    2 ** 16, None),
    # whole-record scheme with a gap layout
    "gaps_short": (RateModel(np.array([0, 1e-6, 1e-7, 4e-9, 0])), 40_000,
                   [(0, 12_000), (12_000, 31_000), (31_000, 40_000)]),
}


def expected_of(model: RateModel):
    def expected(t):
        avar = basis(t) @ np.maximum(model.c2, 0.0)
        return avar + (gm_avar(t, *model.gm) if model.gm else 0.0)
    return expected


def pair(name, reps, seed, how="exact"):
    model, n, segments = MODELS[name]
    segments = segments or [(0, n)]
    m = M[M < max(b - a for a, b in segments) // 4]
    args = (expected_of(model), PERIOD, m, segments, reps)
    fast = replicate_curves(model, *args, seed, how=how)
    ref = replicate_curves_reference(model, *args, seed + 10_000)
    return fast, ref


def assert_same_distribution(fast, ref, alpha=1e-3):
    k = fast.shape[1]
    ks = [stats.ks_2samp(fast[:, j], ref[:, j]).pvalue for j in range(k)]
    assert min(ks) >= alpha / k, ks
    r = fast.shape[0]
    se_mean = np.sqrt((fast.var(0) + ref.var(0)) / r)
    assert np.all(np.abs(fast.mean(0) - ref.mean(0)) <= 4 * se_mean)
    # Standard error of log(sd) with each point's own kurtosis (skewed at long taus).
    kurt = np.maximum(stats.kurtosis(np.vstack([fast, ref]), axis=0), 0.0)
    se_log_sd = np.sqrt(2 * (2 + kurt) / (4 * r))
    assert np.all(np.abs(np.log(fast.std(0) / ref.std(0))) <= 4 * se_log_sd)


@pytest.mark.parametrize("how", ["exact", "simulated"])
@pytest.mark.parametrize("name", list(MODELS))
def test_replicates_have_the_reference_distribution(name, how):
    fast, ref = pair(name, 300, seed=11, how=how)
    assert fast.shape == ref.shape
    assert np.all(np.isfinite(fast)) and np.all(fast >= 0)
    assert_same_distribution(fast, ref)


def test_the_comparison_can_fail():
    """A 15 % scale error at every tau, or the random walk left out, is caught."""
    fast, ref = pair("white_walk_long", 300, seed=12)
    with pytest.raises(AssertionError):
        assert_same_distribution(fast * 1.15, ref)
    model, n, _ = MODELS["white_walk_long"]
    m = M[M < n // 4]
    no_walk = RateModel(np.array([0, 1e-6, 0, 0, 0]))
    wrong = replicate_curves(no_walk, expected_of(no_walk), PERIOD, m, [(0, n)], 300, 12)
    with pytest.raises(AssertionError):
        assert_same_distribution(wrong, ref)


def test_seeded_and_independent_of_chunking():
    """Same seed, same replicates; another seed, others; the first replicates do not
    depend on how many are asked for beyond their chunk."""
    model, n, _ = MODELS["all_terms_long"]
    m = M[M < n // 4]
    run = lambda reps, seed: replicate_curves(model, expected_of(model), PERIOD, m,
                                              [(0, n)], reps, seed)
    a, b, c = run(40, 5), run(40, 5), run(48, 5)
    np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(a, c[:40])
    assert not np.array_equal(a, run(40, 6))


def white_walk_intervals(sims, curve_avar, nu, taus):
    A = basis(taus)[:, [1, 3]]
    c = weighted_nnls(A, curve_avar, nu)
    boot = np.array([weighted_nnls(A, s, nu) for s in sims])
    return [pivot_interval(c[i], boot[:, i]) for i in range(2)]


@pytest.mark.parametrize("seeds", [pytest.param(4, id="4-seeds"),
                                   pytest.param(24, id="24-seeds", marks=pytest.mark.slow)])
def test_intervals_over_seeds_match_the_reference(seeds):
    """The white-noise and random-walk intervals made from each replicate set agree over
    seeds: mean log width within four standard errors of the seed-to-seed spread."""
    model, n, _ = MODELS["white_walk_long"]
    m = M[M < n // 4]
    taus = m * PERIOD
    avar = expected_of(model)(taus)
    nu = np.maximum(n / m * 0.7, 2.0)
    widths = {"fast": [], "ref": []}
    for seed in range(seeds):
        fast, ref = pair("white_walk_long", 200, seed=100 + seed)
        for key, sims in (("fast", fast), ("ref", ref)):
            ci = white_walk_intervals(sims, avar, nu, taus)
            widths[key].append([np.log(hi / lo) for lo, hi in ci])
    f, r = np.array(widths["fast"]), np.array(widths["ref"])
    se = np.sqrt((f.var(0, ddof=1) + r.var(0, ddof=1)) / f.shape[0])
    assert np.all(np.abs(f.mean(0) - r.mean(0)) <= 4 * se + 1e-12), (f.mean(0), r.mean(0))


def test_compiled_gauss_markov_refit_equals_the_scipy_one():
    """The replicate refit of the Gauss–Markov bootstrap (NNLS of three columns by
    active sets, compiled) gives the numbers of ``_fit_one`` (scipy NNLS)."""
    model, n, _ = MODELS["gm_low_pass"]
    model = RateModel(model.c2, gm=model.gm)
    m = M[M < n // 4]
    taus = m * PERIOD
    sims = replicate_curves(model, expected_of(model), PERIOD, m, [(0, n)], 60, 3)
    nu = np.maximum(n / m * 0.7, 2.0)
    grid = np.logspace(np.log10(taus[0]), np.log10(taus[-1] * 10.0), 32)
    fast = _fit_many(taus, sims, nu, grid)
    ref = np.array([_fit_one(taus, s, nu, grid)[1:] for s in sims])
    np.testing.assert_allclose(fast, ref, rtol=1e-8)


def test_rate_model_is_the_fit_terms_simulation():
    """RateModel(c2, low_pass=T) simulates what fit_terms' replicates carry: the terms,
    then ``one_pole`` at the record's period (same draws, same numbers)."""
    c2 = np.array([1e-9, 1e-6, 1e-7, 4e-9, 0.0])
    for period in (0.01, 0.64):
        got = RateModel(c2, low_pass=0.05)(period, 5000, np.random.default_rng(4))
        want = one_pole(simulate_rate(c2, period, 5000, np.random.default_rng(4)), period, 0.05)
        np.testing.assert_allclose(got, want, rtol=1e-12, atol=0)
