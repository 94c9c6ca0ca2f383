"""The compiled lag-1 noise identification names the same type as the numpy one
(``edf.noise_id_lag1_reference``; the identification itself is checked against allantools in test_allan.py)."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.analysis import edf, engine
from noisecal.fit.simulate import simulate_rate


@pytest.mark.parametrize("c2", [[1e-8, 0, 0, 0, 0], [0, 1e-6, 0, 0, 0], [0, 0, 1e-6, 0, 0],
                                [0, 0, 0, 1e-8, 0], [0, 1e-6, 0, 1e-7, 0]])
def test_same_alpha_as_numpy(c2):
    period, n = 0.01, 300_000
    for seed in range(3):
        y = simulate_rate(np.array(c2, float), period, n, np.random.default_rng(seed)) + 1.0
        for m in 2 ** np.arange(12):
            for dmax in (2, 3):
                want = edf.noise_id_lag1_reference(y, int(m), dmax=dmax)
                got = engine.noise_id_lag1(y, int(m), dmax, edf.MIN_BLOCKS, edf.MAX_BLOCKS)
                assert got == want, (c2, seed, m, dmax, got, want)


def test_too_few_blocks_and_block_cap():
    y = np.random.default_rng(1).standard_normal(5000)
    assert engine.noise_id_lag1(y, 64, 2, edf.MIN_BLOCKS, edf.MAX_BLOCKS) is None
    # With the cap the first blocks are used, as in the numpy version.
    assert engine.noise_id_lag1(y, 1, 2, 100, 1000) == engine.noise_id_lag1(y[:1000], 1, 2,
                                                                              100, 10 ** 9)


@pytest.mark.parametrize("c2", [[1e-8, 0, 0, 0, 0], [0, 1e-6, 0, 0, 0], [0, 0, 1e-6, 0, 0],
                                [0, 0, 0, 1e-8, 0], [0, 1e-6, 0, 1e-7, 0]])
def test_octave_batch_same_alpha_as_numpy(c2):
    """The one-pass octave batch (block sums built from the previous factor's) names
    the numpy reference's type at every factor; a grid that is no chain of divisors
    goes factor by factor and agrees too."""
    period, n = 0.01, 300_000
    for seed in range(3):
        y = simulate_rate(np.array(c2, float), period, n, np.random.default_rng(seed)) + 1.0
        for ms in (2 ** np.arange(12), 3 * 2 ** np.arange(10), np.array([1, 3, 10, 30, 100])):
            for dmax in (2, 3):
                want = [edf.noise_id_lag1_reference(y, int(m), dmax=dmax) for m in ms]
                got = engine.noise_ids_lag1(y, ms, dmax, edf.MIN_BLOCKS, edf.MAX_BLOCKS)
                assert got == want, (c2, seed, list(ms), dmax, got, want)


def test_octave_batch_block_cap_and_too_few_blocks():
    """The cap takes the first blocks and factors with too few give None, as factor by
    factor."""
    y = np.random.default_rng(2).standard_normal(5000)
    ms = 2 ** np.arange(8)
    assert engine.noise_ids_lag1(y, ms, 2, 100, 1000) == [
        engine.noise_id_lag1(y, int(m), 2, 100, 1000) for m in ms]
    assert engine.noise_ids_lag1(y, ms, 2, 100, 1000)[-1] is None
