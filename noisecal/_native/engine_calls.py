"""Python faces of the C deviation-engine kernels (``engine.c``): the same arguments
as the numba kernels of :mod:`noisecal.analysis.engine` they stand in for."""

from __future__ import annotations

import numpy as np

from . import F64, I64, P, function, ptr


def integrate(y: np.ndarray, mean: float, period: float, x: np.ndarray) -> np.ndarray:
    """Phase of ``y`` into ``x`` (shape (n + 1,)): see ``engine._integrate``."""
    if x.shape[0] != y.shape[0] + 1:
        raise ValueError("phase buffer must hold n + 1 values")
    function("nc_integrate", [P, I64, F64, F64, P])(ptr(y), y.shape[0], float(mean),
                                                    float(period), ptr(x))
    return x


def _flags(a: np.ndarray, k: int, name: str) -> np.ndarray:
    a = np.ascontiguousarray(a)
    if a.shape != (k,):
        raise ValueError(f"{name} must hold one flag per factor ({k})")
    if a.dtype == np.bool_:
        return a.view(np.uint8)
    return a if a.dtype == np.uint8 else (a != 0).astype(np.uint8)


def overlapping_tiles(x: np.ndarray, ms: np.ndarray, allan: np.ndarray,
                      hadamard: np.ndarray, t0: int, t1: int, out_a: np.ndarray,
                      out_h: np.ndarray) -> None:
    """Per-tile overlapping Allan and Hadamard sums: see ``engine._overlapping_tiles``.

    Safe to call from several threads at once on disjoint tile ranges (the C
    kernel keeps no state and writes only rows ``t0 … t1 - 1``).

    Parameters
    ----------
    x : ndarray of float64, shape (nx,)
        Phase, u·s.
    ms : ndarray of int64, shape (k,)
        Averaging factors, each with nx − 2m ≥ 1.
    allan, hadamard : ndarray of bool, shape (k,)
        Which sums to form per factor (a Hadamard flag needs nx − 3m ≥ 1);
        passed to C as uint8.
    t0, t1 : int
        Tile range (tiles of 4096 terms from term 0).
    out_a, out_h : ndarray of float64, shape (tiles, k)
        Σ (second difference)² and Σ (third difference)² per tile and factor,
        u²·s²; rows ``t0 … t1 - 1`` are written.
    """
    k = ms.shape[0]
    nx = x.shape[0]
    if out_a.shape != out_h.shape or out_a.ndim != 2 or out_a.shape[1] != k:
        raise ValueError("tile sums must be arrays of shape (tiles, factors)")
    if not 0 <= t0 <= t1 <= out_a.shape[0]:
        raise ValueError(f"tile range {t0}..{t1} outside 0..{out_a.shape[0]}")
    a = _flags(allan, k, "allan")
    h = _flags(hadamard, k, "hadamard")
    if k and (ms.min() < 1 or np.any(nx - 2 * ms < 1) or np.any(h & (nx - 3 * ms < 1))):
        raise ValueError("every factor must leave a term in the phase")
    function("nc_overlapping_tiles", [P, I64, P, I64, P, P, I64, I64, P, P])(
        ptr(x), nx, ptr(ms, np.int64), k, ptr(a, np.uint8), ptr(h, np.uint8),
        int(t0), int(t1), ptr(out_a), ptr(out_h))


def tile_totals(out: np.ndarray) -> np.ndarray:
    """Column sums of per-tile sums, tiles added in order: see ``engine._tile_totals``.

    Parameters
    ----------
    out : ndarray of float64, shape (tiles, k)

    Returns
    -------
    ndarray of float64, shape (k,)
    """
    if out.ndim != 2:
        raise ValueError("tile sums must be a 2-D array")
    total = np.empty(out.shape[1])
    function("nc_tile_totals", [P, I64, I64, P])(ptr(out), out.shape[0], out.shape[1],
                                                 ptr(total))
    return total


def noise_id_lag1(y: np.ndarray, m: int, dmax: int, min_blocks: int,
                  max_blocks: int) -> int:
    """Lag-1 noise identification at one factor: see ``engine._noise_id_lag1``.

    Parameters
    ----------
    y : ndarray of float64, shape (n,)
        Rate samples, unit u.
    m : int
        Averaging factor (≥ 1).
    dmax, min_blocks, max_blocks : int
        Most differencing steps; fewest block means to decide on; most used.

    Returns
    -------
    int
        Power-law exponent alpha, or 99 when fewer than ``min_blocks`` means fit.
    """
    if m < 1:
        raise ValueError("averaging factor must be at least 1")
    blocks = max(0, min(y.shape[0] // m, max_blocks))
    z = np.empty(max(1, blocks))
    return int(function("nc_noise_id_lag1", [P, I64, I64, I64, I64, I64, P], I64)(
        ptr(y), y.shape[0], int(m), int(dmax), int(min_blocks), int(max_blocks), ptr(z)))


def noise_ids_chain(y: np.ndarray, ms: np.ndarray, dmax: int, min_blocks: int,
                    max_blocks: int) -> np.ndarray:
    """Lag-1 noise identification at a chain of factors: see ``engine._noise_ids_chain``.

    Parameters
    ----------
    y : ndarray of float64, shape (n,)
        Rate samples, unit u.
    ms : ndarray of int64, shape (k,)
        Increasing factors, each a multiple of the one before, ``ms[0] ≥ 1``.
    dmax, min_blocks, max_blocks : int
        As in :func:`noise_id_lag1`.

    Returns
    -------
    ndarray of int64, shape (k,)
        Alpha per factor, 99 where too few block means fit.
    """
    k = ms.shape[0]
    if k and (ms[0] < 1 or np.any(ms[1:] <= ms[:-1]) or np.any(ms[1:] % ms[:-1])):
        raise ValueError("factors must increase, each a multiple of the one before")
    n = y.shape[0]
    out = np.empty(k, dtype=np.int64)
    sums = np.empty(max(1, n // 2))
    z = np.empty(max(1, min(n, max_blocks)))
    function("nc_noise_ids_chain", [P, I64, P, I64, I64, I64, I64, P, P, P])(
        ptr(y), n, ptr(ms, np.int64), k, int(dmax), int(min_blocks), int(max_blocks),
        ptr(sums), ptr(z), ptr(out, np.int64))
    return out


def detrended(x: np.ndarray, centre: float, start: int, step: int, t: np.ndarray,
              tt: float, win: np.ndarray, out: np.ndarray) -> np.ndarray:
    """Detrended, windowed segments of ``x``: see ``engine._detrended``.

    Parameters
    ----------
    x : ndarray of float64, shape (N,)
        Samples, unit u.
    centre : float
        Subtracted from every sample, u.
    start, step : int
        First sample of the first segment; samples between segment starts.
    t : ndarray of float64, shape (n,)
        Centred abscissae of one segment (samples).
    tt : float
        ``t @ t``.
    win : ndarray of float64, shape (n,)
        Window.
    out : ndarray of float64, shape (rows, n)
        Written: each segment less its least-squares line, times ``win``, u.

    Returns
    -------
    out
    """
    rows, n = out.shape
    if t.shape != (n,) or win.shape != (n,):
        raise ValueError("abscissae and window must have one value per segment sample")
    if rows and (start < 0 or step < 0 or start + (rows - 1) * step + n > x.shape[0]):
        raise ValueError("segments run past the end of the samples")
    function("nc_detrended", [P, F64, I64, I64, P, F64, P, I64, I64, P])(
        ptr(x), float(centre), int(start), int(step), ptr(t), float(tt), ptr(win),
        rows, n, ptr(out))
    return out


def add_power(spec: np.ndarray, acc: np.ndarray) -> np.ndarray:
    """Add ``Σ_rows |spec|²`` to ``acc``: see ``engine._add_power``.

    Parameters
    ----------
    spec : ndarray of complex128, shape (rows, bins)
        Spectra (passed to C as float64 (re, im) pairs).
    acc : ndarray of float64, shape (bins,)
        Accumulated power, updated in place.

    Returns
    -------
    acc
    """
    if spec.ndim != 2 or acc.shape != (spec.shape[1],):
        raise ValueError("power accumulator must have one value per frequency bin")
    if spec.dtype != np.complex128 or not spec.flags.c_contiguous:
        raise TypeError("spectra must be a C-contiguous complex128 array")
    function("nc_add_power", [P, I64, I64, P])(ptr(spec.view(np.float64)), spec.shape[0],
                                               spec.shape[1], ptr(acc))
    return acc


def bracket(v: np.ndarray, centre: float, absolute: bool, lo: float, hi: float,
            buf: np.ndarray) -> tuple[int, int, int]:
    """Count below / inside a bracket and copy the inside: see ``engine._bracket``.

    Parameters
    ----------
    v : ndarray of float64, shape (n,)
        Values.
    centre : float
        Taken off before the absolute value when ``absolute``.
    absolute : bool
        Bracket ``|v - centre|`` instead of ``v``.
    lo, hi : float
        Bracket, inclusive.
    buf : ndarray of float64, shape (cap + 1,)
        Receives the values inside, in order, while they fit.

    Returns
    -------
    below, inside, nan : int
        Values below ``lo``, inside ``[lo, hi]``, and NaN.
    """
    if buf.ndim != 1 or buf.shape[0] < 1:
        raise ValueError("bracket buffer must hold at least one value")
    counts = np.zeros(3, dtype=np.int64)
    function("nc_bracket", [P, I64, F64, I64, F64, F64, P, I64, P])(
        ptr(v), v.shape[0], float(centre), int(bool(absolute)), float(lo), float(hi),
        ptr(buf), buf.shape[0] - 1, ptr(counts, np.int64))
    return int(counts[0]), int(counts[1]), int(counts[2])


def beyond(v: np.ndarray, limit: float) -> np.ndarray:
    """Indices of ``|v| > limit``: see ``engine._beyond``.

    Parameters
    ----------
    v : ndarray of float64, shape (n,)
    limit : float

    Returns
    -------
    ndarray of int64, shape (count,)
    """
    n = v.shape[0]
    p = ptr(v)
    count = function("nc_beyond_count", [P, I64, F64], I64)(p, n, float(limit))
    out = np.empty(count, dtype=np.int64)
    if count:
        function("nc_beyond_fill", [P, I64, F64, P])(p, n, float(limit),
                                                    ptr(out, np.int64))
    return out
