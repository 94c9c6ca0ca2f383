"""The C deviation-engine kernels against the numba kernels they stand in for."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal import _native
from noisecal.analysis import engine

from . import requires_native

pytestmark = requires_native


def test_integrate_equals_numba_and_cumsum():
    """Reference: numpy's cumsum of (y − mean)·period (independent library), and the
    numba kernel, on 100 001 samples."""
    from noisecal._native import engine_calls

    y = np.random.default_rng(1).normal(3.0, 1.0, 100_001)
    m = float(np.mean(y))
    got = engine_calls.integrate(y, m, 0.01, np.empty(y.shape[0] + 1))
    ref = np.concatenate([[0.0], np.cumsum((y - m) * 0.01)])
    numba_x = engine._integrate(y, m, 0.01, np.empty(y.shape[0] + 1))
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(got, numba_x)


def test_a_strided_or_wrong_typed_array_is_refused():
    """ctypes passes a bare address: a view or an int array would be misread, so the
    call refuses it (common practice, no source)."""
    from noisecal._native import engine_calls

    y = np.ones(20)
    with pytest.raises(TypeError):
        engine_calls.integrate(y[::2], 1.0, 0.1, np.empty(11))
    with pytest.raises(TypeError):
        engine_calls.integrate(np.ones(10, dtype=np.int64), 1.0, 0.1, np.empty(11))


# --- Every kernel of the static job: C against numba -------------------------
#
# The numba kernels are called through their dispatchers (``engine._name``), so
# both sides run on the same inputs whatever NOISECAL_NATIVE says. Sizes sit on
# the edges of the 4096-term blocks, at one sample, odd, and with factors near
# n/3 and n/2, where the Hadamard and Allan term counts run out.

def _calls():
    from noisecal._native import engine_calls

    return engine_calls


def _factors(nx):
    cand = {1, 2, 3, 5, 7, 64, 4095, 4096, 4097, (nx - 1) // 3, (nx - 1) // 3 + 1,
            nx // 3, (nx - 1) // 2, nx // 2 - 1}
    return np.array(sorted(m for m in cand if m >= 1 and nx - 2 * m >= 1), dtype=np.int64)


@pytest.mark.parametrize("nx", [3, 4, 4097, 4098, 4099, 8193, 12_291, 30_001])
def test_overlapping_tiles_equal_numba(nx):
    """Per-tile sums ≤ 1e-12 relative to the numba kernel (which reassociates too,
    so not bit for bit; common practice, no source), and their totals to the
    squared second and third differences summed by numpy (independent library)."""
    calls = _calls()
    rng = np.random.default_rng(nx)
    x = np.cumsum(rng.standard_normal(nx)) + 0.3 * rng.standard_normal(nx)
    ms = _factors(nx)
    allan = rng.random(ms.shape[0]) < 0.75
    allan[0] = True
    hadamard = (rng.random(ms.shape[0]) < 0.75) & (nx - 3 * ms >= 1)
    tiles = max(1, -(-(nx - 2) // engine._BLOCK))
    got_a, got_h = np.zeros((tiles, ms.shape[0])), np.zeros((tiles, ms.shape[0]))
    ref_a, ref_h = np.zeros_like(got_a), np.zeros_like(got_h)
    calls.overlapping_tiles(x, ms, allan, hadamard, 0, tiles, got_a, got_h)
    engine._overlapping_tiles(x, ms, allan, hadamard, 0, tiles, ref_a, ref_h)
    np.testing.assert_allclose(got_a, ref_a, rtol=1e-12, atol=0)
    np.testing.assert_allclose(got_h, ref_h, rtol=1e-12, atol=0)
    assert np.all((got_a != 0) == (ref_a != 0)) and np.all((got_h != 0) == (ref_h != 0))
    tot_a, tot_h = calls.tile_totals(got_a), calls.tile_totals(got_h)
    np.testing.assert_array_equal(tot_a, engine._tile_totals(got_a))
    np.testing.assert_array_equal(tot_h, engine._tile_totals(got_h))
    for j, m in enumerate(ms):
        d2 = x[2 * m:] - 2.0 * x[m:-m] + x[:-2 * m]
        if allan[j]:
            np.testing.assert_allclose(tot_a[j], np.sum(d2 * d2), rtol=1e-11)
        if hadamard[j]:
            d3 = x[3 * m:] - 3.0 * x[2 * m:-m] + 3.0 * x[m:-2 * m] - x[:-3 * m]
            np.testing.assert_allclose(tot_h[j], np.sum(d3 * d3), rtol=1e-11)


def test_tile_ranges_on_threads_equal_one_call():
    """Disjoint tile ranges summed on threads at once equal one call over all tiles,
    bit for bit (the C kernel keeps no state; common practice, no source)."""
    from concurrent.futures import ThreadPoolExecutor

    calls = _calls()
    nx = 200_001
    x = np.cumsum(np.random.default_rng(3).standard_normal(nx))
    ms = np.array([1, 2, 10, 1000, 30_000, 66_666, 100_000], dtype=np.int64)
    allan = np.ones(ms.shape[0], dtype=bool)
    hadamard = nx - 3 * ms >= 1
    tiles = -(-(nx - 2) // engine._BLOCK)
    one_a, one_h = np.zeros((tiles, ms.shape[0])), np.zeros((tiles, ms.shape[0]))
    calls.overlapping_tiles(x, ms, allan, hadamard, 0, tiles, one_a, one_h)
    many_a, many_h = np.zeros_like(one_a), np.zeros_like(one_h)
    cuts = np.linspace(0, tiles, 8).astype(int)
    with ThreadPoolExecutor(4) as pool:
        list(pool.map(lambda ab: calls.overlapping_tiles(x, ms, allan, hadamard, ab[0], ab[1],
                                                         many_a, many_h),
                      zip(cuts[:-1], cuts[1:])))
    np.testing.assert_array_equal(many_a, one_a)
    np.testing.assert_array_equal(many_h, one_h)


def test_tile_arguments_are_checked():
    """A factor that leaves no term, or a tile range past the buffers, would read or
    write outside the arrays: refused (common practice, no source)."""
    calls = _calls()
    x = np.zeros(100)
    ms = np.array([10, 60], dtype=np.int64)
    flags = np.ones(2, dtype=bool)
    out = np.zeros((1, 2))
    with pytest.raises(ValueError):
        calls.overlapping_tiles(x, ms, flags, np.zeros(2, dtype=bool), 0, 1, out, out.copy())
    with pytest.raises(ValueError):
        calls.overlapping_tiles(x, ms[:1], flags[:1], flags[:1], 0, 2, out[:, :1].copy(),
                                out[:, :1].copy())


def _noisy(n, seed):
    # White, flicker-like and random-walk parts, so alpha changes along the taus.
    rng = np.random.default_rng(seed)
    white = rng.standard_normal(n)
    walk = np.cumsum(rng.standard_normal(n)) * 0.003
    return 2.0 + white + walk


@pytest.mark.parametrize("n", [1, 99, 100, 4095, 4096, 4097, 100_001])
def test_noise_id_lag1_equals_numba(n):
    """The same alpha as the numba kernel at every factor (99 where too few block
    means fit), and the alphas of white (0) and random-walk (−2) samples (Riley &
    Greenhall 2004, lag-1 autocorrelation method; value from memory)."""
    calls = _calls()
    y = _noisy(n, n)
    for m in [1, 2, 3, 7, 40, 333, 1000]:
        for dmax in (0, 2):
            got = calls.noise_id_lag1(y, m, dmax, 100, 1 << 20)
            assert got == engine._noise_id_lag1(y, m, dmax, 100, 1 << 20), (m, dmax)
    if n >= 100_000:
        rng = np.random.default_rng(8)
        assert calls.noise_id_lag1(rng.standard_normal(n), 4, 2, 100, 1 << 20) == 0
        assert calls.noise_id_lag1(np.cumsum(rng.standard_normal(n)), 4, 2, 100,
                                   1 << 20) == -2


@pytest.mark.parametrize("ms", [[1, 2, 4, 8, 16, 32, 64, 128, 256, 512, 1024, 2048],
                                [3, 6, 18, 36, 108, 1080], [2, 4097 * 2], [5]])
@pytest.mark.parametrize("n", [1, 4097, 100_001])
def test_noise_ids_chain_equals_numba(ms, n):
    """The same alphas as the numba chain kernel, including where the block means
    run out (99) and with few blocks used (common practice, no source)."""
    calls = _calls()
    y = _noisy(n, 11)
    ms = np.array(ms, dtype=np.int64)
    for max_blocks in (1 << 20, 5_000):
        got = calls.noise_ids_chain(y, ms, 2, 100, max_blocks)
        np.testing.assert_array_equal(got, engine._noise_ids_chain(y, ms, 2, 100, max_blocks))


def test_noise_ids_chain_refuses_a_broken_chain():
    """Block sums are built from the previous factor's: a factor that is not a
    multiple of the one before has none (common practice, no source)."""
    with pytest.raises(ValueError):
        _calls().noise_ids_chain(np.ones(1000), np.array([2, 3], dtype=np.int64), 2, 10, 100)


@pytest.mark.parametrize("nper, rows, step", [(16, 1, 8), (4096, 7, 2048), (4097, 3, 2049),
                                              (33, 5, 1)])
def test_detrended_equals_numba_and_scipy(nper, rows, step):
    """Bit for bit the numba kernel (sequential sums in both); ≤ 1e-12 scipy.signal's
    linear detrend times the window (independent library)."""
    from scipy.signal import detrend

    calls = _calls()
    x = np.random.default_rng(nper).standard_normal(rows * step + nper + 5) + 7.0
    t = np.arange(nper) - (nper - 1) / 2.0
    tt = float(t @ t)
    win = 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(nper) / nper)
    got = calls.detrended(x, 7.0, 3, step, t, tt, win, np.empty((rows, nper)))
    ref = np.empty((rows, nper))
    engine._detrended(x, 7.0, 3, step, t, tt, win, ref)
    np.testing.assert_array_equal(got, ref)
    segs = np.stack([x[3 + r * step:3 + r * step + nper] - 7.0 for r in range(rows)])
    np.testing.assert_allclose(got, detrend(segs, axis=1, type="linear") * win,
                               rtol=0, atol=1e-12 * np.abs(segs).max())
    with pytest.raises(ValueError):
        calls.detrended(x, 7.0, x.shape[0] - nper + 1, step, t, tt, win, np.empty((1, nper)))


@pytest.mark.parametrize("rows, bins", [(1, 1), (3, 257), (128, 2049), (5, 300)])
def test_add_power_equals_numba_and_numpy(rows, bins):
    """Bit for bit the numba kernel; ≤ 1e-13 numpy's Σ|X|² (independent library)."""
    calls = _calls()
    rng = np.random.default_rng(bins)
    spec = rng.standard_normal((rows, bins)) + 1j * rng.standard_normal((rows, bins))
    start = rng.random(bins)
    got = calls.add_power(spec, start.copy())
    ref = start.copy()
    engine._add_power(spec, ref)
    np.testing.assert_array_equal(got, ref)
    np.testing.assert_allclose(got, start + np.sum(np.abs(spec) ** 2, axis=0), rtol=1e-13)


@pytest.mark.parametrize("absolute", [False, True])
@pytest.mark.parametrize("n, cap", [(1, 4), (4097, 10_000), (50_001, 600), (50_001, 5)])
def test_bracket_equals_numba(absolute, n, cap):
    """Counts below / inside / NaN and the copied values equal the numba kernel's,
    with NaNs among the values and a buffer too small (common practice, no source);
    the counts equal numpy's comparisons (independent library)."""
    calls = _calls()
    rng = np.random.default_rng(n + cap)
    v = rng.standard_normal(n)
    v[rng.random(n) < 0.01] = np.nan
    lo, hi = -0.05, 0.08
    got_buf, ref_buf = np.full(cap + 1, -1.0), np.full(cap + 1, -1.0)
    got = calls.bracket(v, 0.01, absolute, lo, hi, got_buf)
    ref = engine._bracket(v, 0.01, absolute, lo, hi, ref_buf)
    assert got == tuple(int(c) for c in ref)
    np.testing.assert_array_equal(got_buf, ref_buf)
    w = np.abs(v - 0.01) if absolute else v
    assert got == (int(np.sum(w < lo)), int(np.sum((w >= lo) & (w <= hi))),
                   int(np.sum(np.isnan(w))))
    inside = w[(w >= lo) & (w <= hi)]
    k = min(inside.shape[0], cap)
    np.testing.assert_array_equal(got_buf[:k], inside[:k])


@pytest.mark.parametrize("n", [0, 1, 4097, 100_001])
def test_beyond_equals_numba_and_numpy(n):
    """Indices equal numpy's flatnonzero(|v| > limit) (independent library) and the
    numba kernel's, none found included."""
    calls = _calls()
    v = np.random.default_rng(n).standard_normal(n)
    for limit in (2.5, 100.0, -1.0):
        got = calls.beyond(v, limit)
        np.testing.assert_array_equal(got, np.flatnonzero(np.abs(v) > limit))
        np.testing.assert_array_equal(got, engine._beyond(v, limit))
        assert got.dtype == np.int64


# --- End to end: the public functions with the C kernels ---------------------

def _record(n=120_001, seed=5):
    rng = np.random.default_rng(seed)
    return 0.2 + rng.standard_normal(n) + np.cumsum(rng.standard_normal(n)) * 2e-3


@pytest.mark.parametrize("kind, name", [("oadev", "oadev"), ("ohdev", "ohdev")])
def test_deviation_equals_allantools_and_numba(kind, name, monkeypatch):
    """Reference library: allantools' oadev / ohdev (≤ 1e-9 relative, the same term
    counts); and the same call with the numba kernels (NOISECAL_NATIVE=0)."""
    import allantools

    from noisecal.analysis.allan import deviation, factor_grid

    y = _record()
    m = factor_grid(y.shape[0], kind, "dense", per_decade=10)
    _, expected, _, count = getattr(allantools, name)(y, rate=100.0, data_type="freq",
                                                      taus=m / 100.0)
    monkeypatch.setenv("NOISECAL_NATIVE", "1")
    assert _native.enabled()
    dev, n_terms = deviation(y, 0.01, m, kind)
    np.testing.assert_allclose(dev, expected, rtol=1e-9)
    np.testing.assert_array_equal(n_terms, count)
    monkeypatch.setenv("NOISECAL_NATIVE", "0")
    assert not _native.enabled()
    ref, ref_terms = deviation(y, 0.01, m, kind)
    np.testing.assert_allclose(dev, ref, rtol=1e-12)
    np.testing.assert_array_equal(n_terms, ref_terms)


def test_allan_curves_equal_allantools_and_numba(monkeypatch):
    """The static job's three curves: deviations ≤ 1e-9 allantools' oadev / ohdev
    (reference library) with its term counts, and every number (deviations, noise
    types, EDFs, intervals) equal to the numba kernels' run (NOISECAL_NATIVE=0):
    ≤ 1e-12, noise types identical."""
    import allantools

    from noisecal.analysis.allan import allan_curves

    y = _record(300_001, 9)
    specs = [("oadev", "octave", None), ("oadev", "dense", 0), ("ohdev", "dense", 0)]
    runs = {}
    for flag in ("1", "0"):
        monkeypatch.setenv("NOISECAL_NATIVE", flag)
        runs[flag] = allan_curves(y, 0.0025, "rad/s", specs)
    for got, ref, (kind, _, _) in zip(runs["1"], runs["0"], specs):
        np.testing.assert_allclose(got.dev, ref.dev, rtol=1e-12)
        np.testing.assert_array_equal(got.alpha, ref.alpha)
        np.testing.assert_array_equal(got.identified, ref.identified)
        np.testing.assert_allclose(got.edf, ref.edf, rtol=1e-12)
        np.testing.assert_allclose(got.lower, ref.lower, rtol=1e-12)
        _, expected, _, count = getattr(allantools, kind)(y, rate=400.0, data_type="freq",
                                                          taus=got.m * 0.0025)
        np.testing.assert_allclose(got.dev, expected, rtol=1e-9)
        np.testing.assert_array_equal(got.n_terms, count)
        assert got.m.shape[0] > 10


def test_median_welch_and_spikes_equal_numba(monkeypatch):
    """median_select, welch_linear and beyond with the C kernels: numpy's median
    and scipy.signal.welch (independent libraries), and the numba run's numbers."""
    from scipy.signal import welch

    y = _record(2 ** 18 + 3, 2)
    d = np.diff(y)
    out = {}
    for flag in ("1", "0"):
        monkeypatch.setenv("NOISECAL_NATIVE", flag)
        out[flag] = (engine.median_select(d), engine.median_select(d, centre=0.1),
                     engine.welch_linear(y, 400.0, 4096, centre=0.2)[1],
                     engine.beyond(d, 3.0))
    got, ref = out["1"], out["0"]
    assert got[0] == ref[0] == float(np.median(d))
    assert got[1] == ref[1] == float(np.median(np.abs(d - 0.1)))
    np.testing.assert_array_equal(got[2], ref[2])
    np.testing.assert_allclose(got[2], welch(y - 0.2, 400.0, nperseg=4096,
                                             detrend="linear")[1], rtol=1e-9)
    np.testing.assert_array_equal(got[3], ref[3])


def test_a_run_on_the_c_kernels_does_not_import_numba(tmp_path):
    """The point of the C kernels: a fresh process computing the static job's curves
    (deviations, noise identification, spectrum, medians) never imports numba
    (common practice, no source)."""
    import subprocess
    import sys

    code = (
        "import sys, numpy as np\n"
        "from noisecal.analysis.allan import allan_curves\n"
        "from noisecal.analysis import engine\n"
        "y = np.random.default_rng(1).standard_normal(300_001)\n"
        "allan_curves(y, 0.0025, 'rad/s', [('oadev', 'octave', None), "
        "('oadev', 'dense', 0), ('ohdev', 'dense', 0)])\n"
        "engine.welch_linear(y, 400.0, 4096); engine.median_select(y, centre=0.0)\n"
        "engine.beyond(y, 3.0)\n"
        "print('numba' in sys.modules)\n")
    env = {k: v for k, v in __import__("os").environ.items() if k != "NOISECAL_NATIVE"}
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env, cwd=tmp_path, timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == "False"


def test_a_library_older_than_its_sources_is_not_loaded_and_says_so(tmp_path, monkeypatch):
    """A stale build would run old code: it is refused, with a warning naming the newer
    source and how to rebuild, and the numba kernels run (common practice, no source)."""
    import os
    import shutil

    from noisecal import _native

    folder = tmp_path / "_native"
    folder.mkdir()
    lib = _native._path()
    shutil.copy(lib, folder / lib.name)
    (folder / "engine.c").write_text("/* edited */\n")
    old = lib.stat().st_mtime - 100
    os.utime(folder / lib.name, (old, old))
    monkeypatch.setattr(_native, "_FOLDER", folder)
    monkeypatch.setattr(_native, "_STATE", {})
    with pytest.warns(RuntimeWarning, match="older than engine.c"):
        assert _native.library() is None
    monkeypatch.setattr(_native, "_STATE", {})
    os.utime(folder / lib.name, None)
    assert _native.library() is not None
