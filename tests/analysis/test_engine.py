"""The compiled deviation engine against the reference path and allantools."""

from __future__ import annotations

import allantools
import numpy as np
import pytest

from noisecal.analysis.allan import deviation, factor_grid


@pytest.mark.parametrize("kind", ["adev", "oadev", "mdev", "hdev", "ohdev"])
@pytest.mark.parametrize("n", [997, 10_001, 65_537, 300_001])
def test_engine_equals_reference_path_with_gaps(kind, n):
    """Same numbers as the numpy reference path (≤ 1e-9 relative, common practice,
    no source), odd lengths and gaps included."""
    rng = np.random.default_rng(n)
    y = rng.standard_normal(n) + np.cumsum(rng.standard_normal(n)) * 0.01 + 5.0
    segments = [(0, n // 3), (n // 3 + 7, n // 2), (n // 2, n)]
    m = factor_grid(n // 2, kind, "dense", per_decade=10)
    fast, c_fast = deviation(y, 0.01, m, kind, segments, engine="compiled")
    ref, c_ref = deviation(y, 0.01, m, kind, segments, engine="reference")
    np.testing.assert_array_equal(c_fast, c_ref)
    ok = c_ref > 0
    np.testing.assert_allclose(fast[ok], ref[ok], rtol=1e-9)


@pytest.mark.parametrize("kind, ref", [("oadev", allantools.oadev), ("mdev", allantools.mdev),
                                       ("ohdev", allantools.ohdev)])
def test_engine_equals_allantools(kind, ref):
    """Reference library: allantools on 200 001 samples, ten taus per decade, ≤ 1e-9."""
    y = np.random.default_rng(4).standard_normal(200_001)
    m = factor_grid(y.shape[0], kind, "dense", per_decade=10)
    _, expected, _, n = ref(y, rate=100.0, data_type="freq", taus=m / 100.0)
    mine, count = deviation(y, 0.01, m, kind)
    np.testing.assert_allclose(mine, expected, rtol=1e-9)
    np.testing.assert_array_equal(count, n)


@pytest.mark.parametrize("threads", ["1", "2"])
@pytest.mark.parametrize("nx", [9, 4097, 300_001, 1_000_003])
def test_one_pass_sums_equal_per_factor_sums(threads, nx, monkeypatch):
    """All factors in one tiled pass give the per-factor kernels' sums whatever the
    thread count, Allan and Hadamard factors overlapping or not (common practice, no
    source: same terms, same blocks, same order of addition; bit for bit where the
    compiler vectorises both loops alike, as measured here, hence 1e-13)."""
    from noisecal.analysis import engine

    monkeypatch.setenv("NOISECAL_THREADS", threads)
    x = np.cumsum(np.random.default_rng(nx).standard_normal(nx))
    ma = np.unique(np.r_[2 ** np.arange(20), factor_grid(nx, "oadev", "dense")])
    mh = factor_grid(nx, "ohdev", "dense")[::2]
    sa, ca, sh, ch = engine.overlapping_sums(x, ma, mh)
    ra, rca = engine._sum_many(x, ma, engine.KIND_CODE["oadev"])
    rh, rch = engine._sum_many(x, mh, engine.KIND_CODE["ohdev"])
    np.testing.assert_array_equal(ca, rca)
    np.testing.assert_array_equal(ch, rch)
    np.testing.assert_allclose(sa, ra, rtol=1e-13, atol=0)
    np.testing.assert_allclose(sh, rh, rtol=1e-13, atol=0)
