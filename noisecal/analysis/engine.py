"""Compiled sums of squared phase differences: one pass per tau, taus in parallel.

The reference path in :mod:`noisecal.analysis.allan` forms the difference
terms with numpy (four passes over memory per tau). Here each tau is one
fused loop reading the phase at two to four offsets, the taus are spread
over the cores (one thread per core, the GIL released), and each sum is accumulated in blocks of
4096 terms (vectorised within a block) so its rounding error stays that of a
blocked sum.

The results equal the reference path to rounding (tested ≤ 1e-9 relative).

Every kernel the static job calls also exists in C (:mod:`noisecal._native`,
``engine.c``): where that library is built, the public functions here call it
and numba is never imported; otherwise (or with ``NOISECAL_NATIVE=0``) the numba
kernels below run, with the same results to rounding (tested ≤ 1e-12 relative,
the same noise types).
"""

from __future__ import annotations


import numpy as np
from .. import _native
from .._jit import njit
from .._native import engine_calls

_BLOCK = 4096
KIND_CODE = {"adev": 0, "oadev": 1, "hdev": 2, "ohdev": 3, "mdev": 4}


@njit(cache=True, nogil=True)
def _integrate(y, mean, period, x):
    acc = 0.0
    x[0] = 0.0
    for i in range(y.shape[0]):
        acc += (y[i] - mean) * period
        x[i + 1] = acc
    return x


def integrate(y: np.ndarray, period: float) -> np.ndarray:
    """Phase of rate samples in one pass: x[0] = 0, x[i+1] = Σ (y − mean)·period.

    Parameters
    ----------
    y : ndarray, shape (n,)
    period : float

    Returns
    -------
    x : ndarray, shape (n + 1,)
        Same numbers as ``cumsum((y - mean) * period)`` without its two
        full-size temporaries.
    """
    y = np.asarray(y, dtype=np.float64)
    if _native.enabled():
        y = np.ascontiguousarray(y)
        return engine_calls.integrate(y, float(np.mean(y)), float(period),
                                      np.empty(y.shape[0] + 1))
    return _integrate(y, float(np.mean(y)), float(period), np.empty(y.shape[0] + 1))


@njit(cache=True, nogil=True)
def _sum_one(x, m, code):
    nx = x.shape[0]
    if code == 4:  # modified Allan: running sum of m second differences
        count = nx - 3 * m + 1
        if count < 1:
            return 0.0, 0
        s = 0.0
        comp = 0.0
        for i in range(m):
            s += _second(x, i, m)
        total = 0.0
        block = 0.0
        k = 0
        for j in range(count):
            v = (s + comp) / m
            block += v * v
            k += 1
            if k == _BLOCK:
                total += block
                block = 0.0
                k = 0
            if j + 1 < count:
                add = _second(x, j + m, m)
                sub = -_second(x, j, m)
                # Neumaier-compensated running sum: no drift over 10^8 steps.
                for term in (add, sub):
                    t = s + term
                    if abs(s) >= abs(term):
                        comp += (s - t) + term
                    else:
                        comp += (term - t) + s
                    s = t
        return total + block, count
    third = code == 2 or code == 3
    span = 3 * m if third else 2 * m
    if nx - span < 1:
        return 0.0, 0
    if code == 1:
        return _sum_overlapping2(x, m, nx - span), nx - span
    if code == 3:
        return _sum_overlapping3(x, m, nx - span), nx - span
    stride = m
    total = 0.0
    block = 0.0
    k = 0
    count = 0
    for i in range(0, nx - span, stride):
        d = _third(x, i, m) if third else _second(x, i, m)
        block += d * d
        count += 1
        k += 1
        if k == _BLOCK:
            total += block
            block = 0.0
            k = 0
    return total + block, count


@njit(cache=True, nogil=True, inline="always")
def _second(x, i, m):
    return x[i + 2 * m] - 2.0 * x[i + m] + x[i]


@njit(cache=True, nogil=True, inline="always")
def _third(x, i, m):
    return x[i + 3 * m] - 3.0 * x[i + 2 * m] + 3.0 * x[i + m] - x[i]


def _overlapping(third: bool):
    """A blocked sum of squared overlapping second (or third) differences.

    Each block reads the phase through one slice per offset (i, i+m, i+2m,
    i+3m), so the inner loop indexes plain arrays and LLVM vectorises it;
    ``reassoc`` lets it keep several SIMD partial sums within a block (blocks
    are still added in order, so the error stays that of a blocked sum), and
    ``contract`` allows fused multiply-adds. Measured on 34.56 M samples: 4x
    faster than the scalar loop, within 1 to 2.5 reduction passes per tau.
    """

    @njit(cache=True, nogil=True, fastmath={"reassoc", "contract"}, error_model="numpy")
    def summed(x, m, count):
        total = 0.0
        for start in range(0, count, _BLOCK):
            stop = min(count, start + _BLOCK)
            a0 = x[start:stop]
            a1 = x[start + m:stop + m]
            a2 = x[start + 2 * m:stop + 2 * m]
            acc = 0.0
            if third:
                a3 = x[start + 3 * m:stop + 3 * m]
                for i in range(stop - start):
                    d = a3[i] - 3.0 * a2[i] + 3.0 * a1[i] - a0[i]
                    acc += d * d
            else:
                for i in range(stop - start):
                    d = a2[i] - 2.0 * a1[i] + a0[i]
                    acc += d * d
            total += acc
        return total

    return summed


_sum_overlapping2 = _overlapping(False)
_sum_overlapping3 = _overlapping(True)


@njit(cache=True, nogil=True)
def _sum_many(x, ms, code):
    sums = np.zeros(ms.shape[0])
    counts = np.zeros(ms.shape[0], dtype=np.int64)
    for j in range(ms.shape[0]):
        s, c = _sum_one(x, ms[j], code)
        sums[j] = s
        counts[j] = c
    return sums, counts


@njit(cache=True, nogil=True, fastmath={"reassoc", "contract"}, error_model="numpy")
def _overlapping_tiles(x, ms, allan, hadamard, t0, t1, out_a, out_h):
    """Tiles ``t0 … t1 - 1`` of ``_BLOCK`` terms: every factor's sums over each tile.

    The tile's phase stays in cache while all the factors read it (one pass over
    memory instead of one per factor), and where both forms are asked at one
    factor the Allan and Hadamard terms share their loads. Tiles start where
    the per-factor kernels start their blocks and are summed as those blocks
    are, so the sums are ``_sum_overlapping2``/``3``'s to rounding (bit for bit
    where LLVM vectorises the loops alike, as on the machines measured).
    """
    nx = x.shape[0]
    for t in range(t0, t1):
        i0 = t * _BLOCK
        end = i0 + _BLOCK
        for j in range(ms.shape[0]):
            m = ms[j]
            count_a = nx - 2 * m
            count_h = nx - 3 * m
            sa = 0.0
            sh = 0.0
            start = i0
            if hadamard[j] and min(end, count_h) > i0:
                stop = min(end, count_h)
                a0 = x[i0:stop]
                a1 = x[i0 + m:stop + m]
                a2 = x[i0 + 2 * m:stop + 2 * m]
                a3 = x[i0 + 3 * m:stop + 3 * m]
                # Both forms in one loop over a full tile; the tile with the last
                # Hadamard term sums its Allan terms on their own, as one loop.
                if allan[j] and stop == end:
                    for i in range(_BLOCK):
                        d = a2[i] - 2.0 * a1[i] + a0[i]
                        sa += d * d
                        h = a3[i] - 3.0 * a2[i] + 3.0 * a1[i] - a0[i]
                        sh += h * h
                    start = end
                else:
                    for i in range(stop - i0):
                        h = a3[i] - 3.0 * a2[i] + 3.0 * a1[i] - a0[i]
                        sh += h * h
            stop = min(end, count_a)
            if allan[j] and stop > start:
                a0 = x[start:stop]
                a1 = x[start + m:stop + m]
                a2 = x[start + 2 * m:stop + 2 * m]
                acc = 0.0
                for i in range(stop - start):
                    d = a2[i] - 2.0 * a1[i] + a0[i]
                    acc += d * d
                sa += acc
            out_a[t, j] = sa
            out_h[t, j] = sh


PARALLEL_MIN = 1 << 18
"""Shorter runs are summed in the calling thread: threads would cost more than they save."""

_POOL = None


def _pool():
    global _POOL
    if _POOL is None:
        from concurrent.futures import ThreadPoolExecutor

        from ..paths import threads

        _POOL = ThreadPoolExecutor(max_workers=threads(),
                                   thread_name_prefix="noisecal-engine")
    return _POOL


def sum_squares(x: np.ndarray, m: np.ndarray, kind: str) -> tuple[np.ndarray, np.ndarray]:
    """Sums of squared difference terms of one contiguous phase run, per factor.

    Long runs spread the work over one thread per core; the kernels release
    the GIL. Plain Python threads (not numba's parallel layer) keep Ctrl-C
    safe: it reaches the main thread while the workers finish their share.
    The overlapping forms go through :func:`overlapping_sums` (all factors in
    one pass over memory).

    Parameters
    ----------
    x : ndarray, shape (nx,)
        Phase of one segment (rate integrated, u·s).
    m : ndarray of int, shape (k,)
        Averaging factors.
    kind : {"adev", "oadev", "hdev", "ohdev", "mdev"}

    Returns
    -------
    sums : ndarray, shape (k,)
        Σ term² (for ``mdev`` the terms are the means of m second differences).
    counts : ndarray of int, shape (k,)
        Terms in each sum.
    """
    if kind == "oadev":
        return overlapping_sums(x, m, np.empty(0, dtype=np.int64))[:2]
    if kind == "ohdev":
        return overlapping_sums(x, np.empty(0, dtype=np.int64), m)[2:]
    x = np.ascontiguousarray(x, dtype=np.float64)
    ms = np.asarray(m, dtype=np.int64)
    code = KIND_CODE[kind]
    from ..paths import threads

    workers = threads()
    if x.shape[0] < PARALLEL_MIN or workers == 1 or ms.shape[0] < 2:
        return _sum_many(x, np.ascontiguousarray(ms), code)
    # Deal the taus out in order of work so each thread gets a similar share.
    order = np.argsort(ms)
    groups = [order[i::workers] for i in range(workers)]
    futures = [_pool().submit(_sum_many, x, np.ascontiguousarray(ms[g]), code) for g in groups]
    sums = np.empty(ms.shape[0])
    counts = np.empty(ms.shape[0], dtype=np.int64)
    for g, fut in zip(groups, futures):
        s, c = fut.result()
        sums[g] = s
        counts[g] = c
    return sums, counts


def overlapping_sums(x: np.ndarray, m_allan: np.ndarray,
                     m_hadamard: np.ndarray) -> tuple[np.ndarray, ...]:
    """Overlapping Allan and Hadamard sums of one phase run, all factors in one pass.

    The run is cut into tiles of ``_BLOCK`` terms; each tile is read once from
    memory for every factor (the factors' sums were memory-bound one pass per
    factor), and a factor asked in both forms shares its loads. Threads take
    contiguous ranges of tiles; the per-tile sums are added in tile order, so
    the result does not depend on the thread count and equals the per-factor
    blocked sums (bit for bit as measured). Measured on 2.88 M samples (72 Allan and 57
    Hadamard factors of the static job): 3x less CPU time than one pass per
    factor.

    Parameters
    ----------
    x : ndarray, shape (nx,)
        Phase of one segment, u·s.
    m_allan, m_hadamard : ndarray of int, shape (ka,), (kh,)
        Factors of the overlapping Allan and Hadamard sums (either may be empty).

    Returns
    -------
    sums_a, counts_a : ndarray, shape (ka,)
        Σ (second difference)² and term counts (nx − 2m, or 0).
    sums_h, counts_h : ndarray, shape (kh,)
        Σ (third difference)² and term counts (nx − 3m, or 0).
    """
    x = np.ascontiguousarray(x, dtype=np.float64)
    ma = np.asarray(m_allan, dtype=np.int64)
    mh = np.asarray(m_hadamard, dtype=np.int64)
    nx = x.shape[0]
    ms = np.unique(np.concatenate([ma, mh]))
    ms = ms[nx - 2 * ms >= 1]
    allan = np.isin(ms, ma)
    hadamard = np.isin(ms, mh) & (nx - 3 * ms >= 1)
    tiles = max(1, -(-(nx - 2) // _BLOCK))
    out_a = np.zeros((tiles, ms.shape[0]))
    out_h = np.zeros((tiles, ms.shape[0]))
    from ..paths import threads

    workers = min(threads(), tiles)
    native = _native.enabled()
    tile_pass = engine_calls.overlapping_tiles if native else _overlapping_tiles
    totals = engine_calls.tile_totals if native else _tile_totals
    if ms.shape[0]:
        if nx < PARALLEL_MIN or workers == 1:
            tile_pass(x, ms, allan, hadamard, 0, tiles, out_a, out_h)
        else:
            cuts = np.linspace(0, tiles, workers + 1).astype(np.int64)
            futures = [_pool().submit(tile_pass, x, ms, allan, hadamard,
                                      int(a), int(b), out_a, out_h)
                       for a, b in zip(cuts[:-1], cuts[1:])]
            for fut in futures:
                fut.result()
    tot_a, tot_h = totals(out_a), totals(out_h)

    column = {int(v): k for k, v in enumerate(ms)}

    def pick(want, totals, span):
        counts = np.maximum(nx - span * want, 0).astype(np.int64)
        sums = np.array([totals[column[int(v)]] if c > 0 else 0.0
                         for v, c in zip(want, counts)], dtype=np.float64)
        return sums, counts

    return (*pick(ma, tot_a, 2), *pick(mh, tot_h, 3))


@njit(cache=True, nogil=True)
def _tile_totals(out):
    # Tile sums added in order: the blocked sum of the per-factor kernels.
    total = np.zeros(out.shape[1])
    for t in range(out.shape[0]):
        for j in range(out.shape[1]):
            total[j] += out[t, j]
    return total


# --- Batched bootstrap records ---------------------------------------------
#
# A parametric bootstrap simulates hundreds of short records of known terms and
# takes the overlapping Allan variance of each. Done one record at a time in
# numpy, each term costs a Python call, a temporary and a pass over memory;
# here one compiled call simulates and reduces a whole chunk of records,
# drawing normals from the numpy Generator it is given (numba's Generator
# support reproduces numpy's streams), so every chunk keeps a seed.

RECORD_PARAMS = ("period", "white_sd", "quant_sd", "step_sd", "ramp", "gm_phi",
                 "gm_sd0", "gm_sdw", "pole")
"""Order of the float parameters of one simulated record (see :func:`oavar_records`)."""


@njit(cache=True, nogil=True)
def _simulate_record(rng, y, p, extra):
    period, white_sd, quant_sd, step_sd = p[0], p[1], p[2], p[3]
    ramp, gm_phi, gm_sd0, gm_sdw, pole = p[4], p[5], p[6], p[7], p[8]
    has_extra = extra.shape[0] > 0
    prev_q = quant_sd * rng.standard_normal() if quant_sd > 0.0 else 0.0
    g = gm_sd0 * rng.standard_normal() if gm_sd0 > 0.0 else 0.0
    walk = 0.0
    f = 0.0
    for j in range(y.shape[0]):
        v = 0.0
        if white_sd > 0.0:
            v += white_sd * rng.standard_normal()
        if quant_sd > 0.0:
            q = quant_sd * rng.standard_normal()
            v += (q - prev_q) / period
            prev_q = q
        if step_sd > 0.0:
            s = step_sd * rng.standard_normal()
            v += walk + 0.5 * s
            walk += s
        if ramp != 0.0:
            v += ramp * j
        if gm_sd0 > 0.0:
            if j > 0:
                g = gm_phi * g + gm_sdw * rng.standard_normal()
            v += g
        if has_extra:
            v += extra[j]
        if pole > 0.0:
            f = (1.0 - pole) * v + pole * f
            v = f
        y[j] = v


@njit(cache=True, nogil=True)
def oavar_records(rng, params, length, starts, stops, ms, extra, out):
    """Simulate ``out.shape[0]`` records and write their overlapping AVAR into ``out``.

    Parameters
    ----------
    rng : numpy.random.Generator
        Source of every normal draw (one Generator per chunk, used by one thread).
    params : ndarray, shape (9,)
        ``RECORD_PARAMS``: sample period (s); standard deviations of the white
        draw per sample (white noise merged with the random walk's
        Brownian-bridge part, which is independent white), of the quantization
        phase, of the random-walk step; ramp per sample; Gauss–Markov
        coefficient, initial and driving standard deviations; pole of a
        first-order low-pass of DC gain 1 (0: none).
    length : int
        Samples per record.
    starts, stops : ndarray of int, shape (s,)
        Contiguous runs (gap layout); terms never span two runs.
    ms : ndarray of int, shape (k,)
        Averaging factors.
    extra : ndarray, shape (r, length) or (r, 0)
        Samples added to each record (flicker noise made by FFT outside), or none.
    out : ndarray, shape (r, k)
        Allan variance, unit u²; NaN where no term fits.
    """
    y = np.empty(length)
    x = np.empty(length + 1)
    k = ms.shape[0]
    sums = np.zeros(k)
    counts = np.zeros(k, dtype=np.int64)
    period = params[0]
    for r in range(out.shape[0]):
        _simulate_record(rng, y, params, extra[r])
        sums[:] = 0.0
        counts[:] = 0
        for s in range(starts.shape[0]):
            a, b = starts[s], stops[s]
            nx = b - a + 1
            seg = y[a:b]
            _integrate(seg, np.mean(seg), period, x[:nx])
            for j in range(k):
                c = nx - 2 * ms[j]
                if c >= 1:
                    sums[j] += _sum_overlapping2(x[:nx], ms[j], c)
                    counts[j] += c
        for j in range(k):
            tau = ms[j] * period
            out[r, j] = sums[j] / (2.0 * tau * tau * counts[j]) if counts[j] > 0 else np.nan
    return out


@njit(cache=True, nogil=True)
def fill_normals(rng, out):
    """Standard normal draws from ``rng`` into ``out`` (1-D), without the GIL.

    numba's Generator runs numpy's ziggurat on the same stream, about 2.5x
    faster here than ``rng.standard_normal`` on a large array.
    """
    for i in range(out.shape[0]):
        out[i] = rng.standard_normal()
    return out


@njit(cache=True, nogil=True, fastmath={"reassoc", "contract"}, error_model="numpy")
def _alpha_of_means(z, dmax):
    """Alpha of block means ``z`` (overwritten): detrend, then lag-1 and difference.

    The sums are reassociated (several partial sums, vectorised): the sequential
    ones were latency-bound, ~4 cycles per mean, over a million means per tau.
    """
    blocks = z.shape[0]
    # Least-squares line through (k, z_k), in closed form about the centre.
    tc = (blocks - 1) / 2.0
    zm = 0.0
    for k in range(blocks):
        zm += z[k]
    zm /= blocks
    sxy = 0.0
    sxx = 0.0
    for k in range(blocks):
        sxy += (k - tc) * (z[k] - zm)
        sxx += (k - tc) * (k - tc)
    slope = sxy / sxx
    for k in range(blocks):
        z[k] -= zm + slope * (k - tc)
    d = 0
    count = blocks
    while True:
        mean = 0.0
        for k in range(count):
            mean += z[k]
        mean /= count
        den = 0.0
        num = 0.0
        for k in range(count - 1):
            den += (z[k] - mean) * (z[k] - mean)
            num += (z[k] - mean) * (z[k + 1] - mean)
        den += (z[count - 1] - mean) * (z[count - 1] - mean)
        r1 = num / den if den > 0 else 0.0
        rho = r1 / (1.0 + r1) if r1 > -1.0 else -1.0
        if rho < 0.25 or d >= dmax:
            return int(-np.rint(2.0 * rho)) - 2 * d
        for k in range(count - 1):
            z[k] = z[k + 1] - z[k]
        count -= 1
        d += 1


@njit(cache=True, nogil=True)
def _noise_id_lag1(y, m, dmax, min_blocks, max_blocks):
    blocks = min(y.shape[0] // m, max_blocks)
    if blocks < min_blocks:
        return 99
    z = np.empty(blocks)
    for k in range(blocks):
        s = 0.0
        for i in range(k * m, (k + 1) * m):
            s += y[i]
        z[k] = s / m
    return _alpha_of_means(z, dmax)


@njit(cache=True, nogil=True)
def _noise_ids_chain(y, ms, dmax, min_blocks, max_blocks):
    out = np.full(ms.shape[0], 99, dtype=np.int64)
    # Block sums of one factor from those of the factor before (a divisor of it):
    # one pass over the samples for all the factors.
    sums = y
    at = 1
    for j in range(ms.shape[0]):
        ratio = ms[j] // at
        if ratio > 1:
            nxt = np.empty(sums.shape[0] // ratio)
            if ratio == 2:  # the octave step, vectorised; same sum as the loop below
                for q in range(nxt.shape[0]):
                    nxt[q] = (0.0 + sums[2 * q]) + sums[2 * q + 1]
            else:
                for q in range(nxt.shape[0]):
                    s = 0.0
                    for i in range(q * ratio, (q + 1) * ratio):
                        s += sums[i]
                    nxt[q] = s
            sums = nxt
            at = ms[j]
        blocks = min(sums.shape[0], max_blocks)
        if blocks < min_blocks:
            break
        out[j] = _alpha_of_means(sums[:blocks] / ms[j], dmax)
    return out


def noise_id_lag1(y: np.ndarray, m: int, dmax: int, min_blocks: int,
                  max_blocks: int) -> int | None:
    """Lag-1 noise identification in one compiled pass (``edf.noise_id_lag1``'s method).

    The block means, the linear detrend (closed form instead of ``np.polyfit``) and
    the differencing loop of Riley & Greenhall (2004) without temporaries: 11-15x
    faster than the numpy version on 2.88 M samples (20 octave taus, same
    process); the same alpha (tested).

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples of one contiguous segment.
    m : int
        Averaging factor.
    dmax : int
        Most differencing steps.
    min_blocks, max_blocks : int
        Fewest block means to decide on (else None), most used (the first ones).

    Returns
    -------
    alpha : int or None
    """
    y = np.ascontiguousarray(y, dtype=np.float64)
    kernel = engine_calls.noise_id_lag1 if _native.enabled() else _noise_id_lag1
    a = kernel(y, int(m), int(dmax), int(min_blocks), int(max_blocks))
    return None if a == 99 else int(a)


def noise_ids_lag1(y: np.ndarray, ms: np.ndarray, dmax: int, min_blocks: int,
                   max_blocks: int) -> list:
    """:func:`noise_id_lag1` at several factors, in one pass over the samples.

    Where each factor divides the next (an octave grid), a factor's block sums
    are those of the factor before added in groups, so the samples are read
    once, not once per factor (the block means then differ from one pass per
    factor only by the order of their additions). Other grids go factor by
    factor.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples of one contiguous segment.
    ms : ndarray of int, shape (k,)
        Averaging factors.
    dmax, min_blocks, max_blocks : int
        As in :func:`noise_id_lag1`.

    Returns
    -------
    list of (int or None), length k
    """
    y = np.ascontiguousarray(y, dtype=np.float64)
    ms = np.asarray(ms, dtype=np.int64)
    chain = (ms.shape[0] > 1 and ms[0] >= 1 and bool(np.all(np.diff(ms) > 0))
             and bool(np.all(ms[1:] % ms[:-1] == 0)))
    if not chain:
        return [noise_id_lag1(y, int(m), dmax, min_blocks, max_blocks) for m in ms]
    ms = np.ascontiguousarray(ms)
    kernel = engine_calls.noise_ids_chain if _native.enabled() else _noise_ids_chain
    out = kernel(y, ms, int(dmax), int(min_blocks), int(max_blocks))
    return [None if a == 99 else int(a) for a in out]


WELCH_CHUNK = 128
"""Segments transformed at once by :func:`welch_linear` (4 MiB of samples at 4096)."""


def welch_linear(x: np.ndarray, fs: float, nperseg: int,
                 centre: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """``scipy.signal.welch(x, fs, nperseg=nperseg, detrend="linear")``, batched.

    Hann window (periodic), half-overlapping segments, a least-squares line
    taken off each segment in closed form, one-sided density scaling, mean
    over segments: scipy's defaults, with the segments detrended and
    transformed ``WELCH_CHUNK`` at a time instead of one ``detrend`` call per
    segment (most of scipy's time here): 2.6-4x faster on 2^21 samples, same
    process; the detrend, window and power sum are compiled loops (a further
    3x less CPU time: no BLAS threads, no temporaries). Same numbers to
    rounding (tested against scipy).

    Parameters
    ----------
    x : ndarray, shape (n,)
        Samples, unit u (n ≥ nperseg).
    fs : float
        Sample rate, Hz.
    nperseg : int
        Segment length.
    centre : float
        Subtracted from every sample first (as ``x - centre`` would be, without
        that copy), u.

    Returns
    -------
    freq : ndarray, shape (nperseg // 2 + 1,)
        Hz.
    psd : ndarray, shape (nperseg // 2 + 1,)
        u²/Hz.
    """
    # numpy's FFT, not scipy.fft: the same pocketfft and numbers, and scipy.fft
    # loads scipy.special.
    x = np.ascontiguousarray(x, dtype=np.float64)
    step = nperseg - nperseg // 2
    count = (x.shape[0] - nperseg) // step + 1
    win = 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(nperseg) / nperseg)
    t = np.arange(nperseg) - (nperseg - 1) / 2.0
    tt = float(t @ t)
    acc = np.zeros(nperseg // 2 + 1)
    block = np.empty((min(WELCH_CHUNK, count), nperseg))
    native = _native.enabled()
    detrend = engine_calls.detrended if native else _detrended
    add_power = engine_calls.add_power if native else _add_power
    for a in range(0, count, WELCH_CHUNK):
        rows = min(WELCH_CHUNK, count - a)
        detrend(x, float(centre), a * step, step, t, tt, win, block[:rows])
        add_power(np.fft.rfft(block[:rows], axis=1), acc)
    psd = acc / (count * fs * float(win @ win))
    psd[1:-1 if nperseg % 2 == 0 else None] *= 2.0
    return np.fft.rfftfreq(nperseg, 1.0 / fs), psd


@njit(cache=True, nogil=True)
def _detrended(x, centre, start, step, t, tt, win, out):
    # Segments from ``start``, each less its least-squares line, times the window:
    # one pass, no BLAS (its threads idle-spin, doubling the CPU time).
    n = out.shape[1]
    for r in range(out.shape[0]):
        a = start + r * step
        s = 0.0
        st = 0.0
        for i in range(n):
            v = x[a + i] - centre
            s += v
            st += v * t[i]
        mean = s / n
        slope = st / tt
        for i in range(n):
            out[r, i] = ((x[a + i] - centre) - (mean + slope * t[i])) * win[i]


@njit(cache=True, nogil=True)
def _add_power(spec, acc):
    # |X|² summed over the chunk's segments, then added: numpy's order.
    chunk = np.zeros(acc.shape[0])
    for r in range(spec.shape[0]):
        for k in range(spec.shape[1]):
            c = spec[r, k]
            chunk[k] += c.real * c.real + c.imag * c.imag
    for k in range(acc.shape[0]):
        acc[k] += chunk[k]


# --- Exact medians by one counting pass ---------------------------------------

_SAMPLE = 8192
"""Values a median's bracket is chosen from (a strided sample)."""

_MARGIN = 0.035
"""Half-width of the bracket in rank (over six standard errors of the sample median)."""


@njit(cache=True, nogil=True)
def _bracket(v, centre, absolute, lo, hi, buf):
    # Branch-free: the side a value falls on is a coin toss near the median.
    below = 0
    inside = 0
    nan = 0
    cap = buf.shape[0] - 1
    for i in range(v.shape[0]):
        w = abs(v[i] - centre) if absolute else v[i]
        below += w < lo
        nan += w != w
        buf[min(inside, cap)] = w
        inside += (w >= lo) & (w <= hi)
    return below, inside, nan


def median_select(v: np.ndarray, centre: float | None = None) -> float:
    """``np.median(v)``, or ``np.median(np.abs(v - centre))``, in one counting pass.

    A strided sample brackets the middle ranks; one compiled pass counts the
    values below the bracket and copies those inside it, and ``np.median``'s
    own partition and mean run on that copy. When the middle ranks fall outside
    the bracket, a value is NaN or the copy would be too large, ``np.median``
    runs on the whole array instead, so the result is always numpy's, bit for
    bit. About 10x faster than ``np.median`` on 2^21 values.

    Parameters
    ----------
    v : ndarray, shape (n,)
        Values (not modified).
    centre : float, optional
        Take the median of ``|v - centre|`` (a median absolute deviation)
        without forming that array.

    Returns
    -------
    float
    """
    v = np.ascontiguousarray(v, dtype=np.float64)
    size = v.shape[0]
    absolute = centre is not None
    c = float(centre) if absolute else 0.0

    def whole():
        return float(np.median(np.abs(v - c) if absolute else v))

    if size < 4 * _SAMPLE:
        return whole()
    sample = v[::size // _SAMPLE]
    sample = np.sort(np.abs(sample - c) if absolute else sample)
    s = sample.shape[0]
    lo = sample[max(0, int(s * (0.5 - _MARGIN)))]
    hi = sample[min(s - 1, int(s * (0.5 + _MARGIN)) + 1)]
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return whole()
    cap = int(size * 4 * _MARGIN) + 16
    buf = np.empty(cap + 1)
    kernel = engine_calls.bracket if _native.enabled() else _bracket
    below, inside, nan = kernel(v, c, absolute, lo, hi, buf)
    half = size // 2
    ranks = [half - 1, half] if size % 2 == 0 else [half]
    if nan or not (below <= ranks[0] and ranks[-1] < below + inside):
        return whole()
    if inside > cap:
        # Too many to copy: only a bracket of one repeated value may stand.
        return float(np.mean(np.full(len(ranks), lo))) if lo == hi else whole()
    part = np.partition(buf[:inside], [r - below for r in ranks])
    return float(np.mean(part[ranks[0] - below:ranks[-1] - below + 1]))


@njit(cache=True, nogil=True)
def _beyond(v, limit):
    count = 0
    for i in range(v.shape[0]):
        if abs(v[i]) > limit:
            count += 1
    out = np.empty(count, dtype=np.int64)
    if count:
        k = 0
        for i in range(v.shape[0]):
            if abs(v[i]) > limit:
                out[k] = i
                k += 1
    return out


def beyond(v: np.ndarray, limit: float) -> np.ndarray:
    """``np.flatnonzero(np.abs(v) > limit)`` in one pass without temporaries.

    Parameters
    ----------
    v : ndarray, shape (n,)
    limit : float

    Returns
    -------
    ndarray of int, shape (k,)
    """
    v = np.ascontiguousarray(v, dtype=np.float64)
    if _native.enabled():
        return engine_calls.beyond(v, float(limit))
    return _beyond(v, float(limit))
