"""The counting-pass median and threshold scan give numpy's results bit for bit."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.analysis.engine import beyond, median_select


def _cases():
    rng = np.random.default_rng(7)
    aliased = rng.standard_normal(2 ** 18 - 1)
    aliased[::(2 ** 18 - 1) // 8192] = 1e9  # the strided sample sees only these
    return {
        "aliased": aliased,
        "odd normal": rng.standard_normal(2 ** 18 - 1),
        "even normal": rng.standard_normal(2 ** 18),
        "quantized": np.round(rng.standard_normal(300_000) * 2.0),
        "sorted": np.sort(rng.standard_normal(100_001)),
        "periodic": np.tile(np.arange(10.0), 40_000),
        "cauchy": rng.standard_t(1, 200_000),
        "all equal": np.full(70_000, 3.0),
        "with nan": np.r_[rng.standard_normal(50_000), np.nan],
        "short": rng.standard_normal(101),
    }


@pytest.mark.parametrize("name", list(_cases()))
@pytest.mark.parametrize("centre", [None, 0.3])
def test_median_select_is_numpys_median(name, centre):
    """Reference: ``np.median`` (and ``np.median(np.abs(v - c))``), exact equality;
    ties, NaN, even lengths and a bracket the sample misses included."""
    v = _cases()[name]
    before = v.copy()
    want = np.median(v if centre is None else np.abs(v - centre))
    got = median_select(v, centre)
    assert got == want or (np.isnan(got) and np.isnan(want))
    np.testing.assert_array_equal(v, before)


def test_beyond_is_flatnonzero():
    """Reference: ``np.flatnonzero(np.abs(v) > limit)``."""
    v = np.random.default_rng(3).standard_normal(100_000)
    for limit in (0.0, 2.5, 10.0):
        np.testing.assert_array_equal(beyond(v, limit), np.flatnonzero(np.abs(v) > limit))
