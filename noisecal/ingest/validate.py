"""Validation of streamed blocks into SI columns, and the recording's summary.

Checks, in order: the header (before any data), finite values and strictly
increasing timestamps block by block (or an explicit repair), then measures
the sample period, jitter, gaps and saturated runs in blocks, so no step
needs a second full-size copy of a column.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..types import Gap, SaturatedRun
from .header import Header
from .sink import MemorySink

GAP_FACTOR = 1.5
"""A step longer than this many nominal periods is a gap (common practice, no source)."""

SATURATION_MIN_RUN = 5
"""Consecutive samples at a channel's extreme that count as clipping."""

SI_LIMIT = 1e100
"""Largest magnitude of a value in SI accepted; beyond it squares and sums in the
analysis lose range (common practice, no source)."""

SI_FLOOR = 1e-100
"""A channel whose largest magnitude in SI is non-zero but below this is refused:
its variances would underflow to zero (common practice, no source)."""

MIN_STEP_S = 1e-12
"""Shortest timestamp step accepted once in seconds (1 ps): shorter steps are
rounding, not sampling, and would make the rate infinite."""

REPAIRS = ("sort", "drop")
SUMMARY_BLOCK = 1 << 18
PERIOD_SAMPLE = 1 << 18
"""Steps used for the median period: all of them up to this count, else an even spread."""


def _order_error(source, row: int, step, count: int):
    what = "repeats" if step == 0 else "goes backwards from"
    raise InputError(
        f"{source.path}, {source.locate(row)}: timestamp {what} the previous one "
        f"({count} such step(s) in this block); fix the log or pass --repair sort "
        "(sort, drop repeats) or --repair drop (drop out-of-order rows)")


def stream(source, header: Header, sink, repair: str | None = None, progress=None):
    """Validate and convert every block of ``source`` into ``sink``.

    Parameters
    ----------
    source
        A CSV, Parquet or npz source (``blocks``, ``locate``, ``path``).
    header : Header
        The parsed header.
    sink : MemorySink or NpySink
        Receives relative time (s) and SI columns; its ``extremes`` list (when it
        has one) receives ``(first row, end row, minima, maxima)`` of each
        block's SI columns (arrays, shape (c,)) for :func:`summarize`, and is
        emptied if they are not known for every block (a repair).
    repair : {None, "sort", "drop"}
        With a repair, out-of-order timestamps are allowed here and mended in
        :func:`apply_repair` (the sink must then be a MemorySink).
    progress : callable, optional
        Passed to the source's block reader.

    Returns
    -------
    start_time : float
        First timestamp in the file, s.
    """
    path = source.path
    rows = 0
    t0 = None
    last = None
    rel_last = None
    peak = np.zeros(len(header.names))
    known = repair is None
    extremes = getattr(sink, "extremes", None)
    for time, cols in source.blocks(header.time_integer, progress):
        if time.shape[0] == 0:
            continue
        if len(cols) != len(header.names):
            raise InputError(f"{path}: {len(cols) + 1} columns where the header has "
                             f"{len(header.names) + 1}")
        time = exact_time(source, time, rows)
        if t0 is None:
            t0 = time[0]
        quick = _quick_block(time, cols, header, t0, last, rel_last) if repair is None else None
        if quick is not None:
            rel, si, low, high = quick
            np.maximum(peak, np.maximum(np.abs(low), np.abs(high)), out=peak)
            if extremes is not None and known:
                extremes.append((rows, rows + time.shape[0], low, high))
        else:
            rel, si = _checked_block(source, header, time, cols, t0, last, rel_last, rows,
                                     repair, peak)
            known = False
            if extremes is not None:
                extremes.clear()
        last = time[-1]
        rel_last = rel[-1]
        sink.append(rel, si)
        rows += time.shape[0]
    for name, unit, top in zip(header.names, header.source_units, peak):
        if 0 < top < SI_FLOOR:
            raise InputError(f"{path}, column {name!r}: every value is below {SI_FLOOR:g} "
                             f"in SI (largest {top:.3g}); check the unit [{unit}] or rescale "
                             "the column")
    return float(t0) * header.time_scale


def _quick_block(time, cols, header: Header, t0, last, rel_last):
    """A block's SI columns when it passes every check, found by reductions; else None.

    The same checks as :func:`_checked_block`, in a few passes without
    temporaries: times strictly increasing with finite ends are all finite;
    an affine map with rounding is monotonic, so a column's extremes in SI
    are its extremes converted, and a NaN makes a column's max NaN. None
    sends the block through the full checks, which name the first bad row.

    Returns
    -------
    (rel, si, low, high) or None
        Relative time (s), SI columns (a column already in SI is passed on as
        is), and each column's smallest and largest value in SI.
    """
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        if time.dtype.kind == "f" and not (np.isfinite(time[0]) and np.isfinite(time[-1])):
            return None
        # The step from the previous block as np.diff takes it (int64 wraps alike).
        if last is not None and not np.subtract(time[:1], last)[0] > 0:
            return None
        if time.shape[0] > 1 and not np.diff(time).min() > 0:
            return None
        rel = (time - t0).astype(np.float64) * header.time_scale
        if not (np.isfinite(rel[0]) and np.isfinite(rel[-1])):
            return None
        if rel_last is not None and not rel[0] - rel_last >= MIN_STEP_S:
            return None
        if rel.shape[0] > 1 and not np.diff(rel).min() >= MIN_STEP_S:
            return None
        si, low, high = [], np.empty(len(cols)), np.empty(len(cols))
        for i, (c, s, o) in enumerate(zip(cols, header.scale, header.offset)):
            hi, lo = c.max(), c.min()
            if not (np.isfinite(hi) and np.isfinite(lo)):
                return None
            ends = np.array([hi, lo], dtype=np.float64) * s
            if o:
                ends = ends + o
            if not np.max(np.abs(ends)) <= SI_LIMIT:
                return None
            low[i], high[i] = ends.min(), ends.max()  # a negative scale swaps them
            if s == 1.0 and not o and c.dtype == np.float64:
                si.append(c)
            else:
                si.append(c * s + o if o else c * s)
    return rel, si, low, high


def _checked_block(source, header: Header, time, cols, t0, last, rel_last, rows, repair,
                   peak):
    """A block's relative time and SI columns after every check, one at a time;
    raises the error naming the first bad row. Updates ``peak`` in place."""
    path = source.path
    if time.dtype.kind == "f" and not np.isfinite(time).all():
        row = rows + int(np.flatnonzero(~np.isfinite(time))[0])
        raise InputError(f"{path}, {source.locate(row)}, column 'time': not a finite "
                         "number; fix or remove the row")
    for name, col in zip(header.names, cols):
        finite = np.isfinite(col)
        if not finite.all():
            row = rows + int(np.flatnonzero(~finite)[0])
            raise InputError(f"{path}, {source.locate(row)}, column {name!r}: "
                             f"{col[row - rows]} is not a finite number; remove the row "
                             "(the gap will be detected) or fix the logger")
    steps = np.diff(time) if last is None else np.diff(np.concatenate([[last], time]))
    bad = np.flatnonzero(steps <= 0)
    if bad.size and repair is None:
        first = int(bad[0])
        _order_error(source, rows + first + (1 if last is None else 0), steps[first], bad.size)
    # Relative time before scaling keeps integer nanoseconds exact.
    with np.errstate(over="ignore", invalid="ignore"):
        rel = (time - t0).astype(np.float64) * header.time_scale
    _check_seconds(source, rel, rel_last, rows, repair)
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        si = [c * s + o if o else c * s
              for c, s, o in zip(cols, header.scale, header.offset)]
    for i, (name, col, unit) in enumerate(zip(header.names, si, header.source_units)):
        peak[i] = max(peak[i], _check_si(source, name, unit, col, rows))
    return rel, si


def exact_time(source, time: np.ndarray, rows: int) -> np.ndarray:
    """A block's time column in a type whose differences are exact.

    Integers of any width are widened to int64 before any difference is taken
    (int16/int32 steps would wrap); unsigned values beyond int64 and boolean
    columns are refused; floats narrower than float64 are widened.

    Parameters
    ----------
    source
        The source (``path``, ``locate``), for messages.
    time : ndarray, shape (m,)
        The block's time column as read.
    rows : int
        Rows before this block.

    Returns
    -------
    ndarray, shape (m,)
        int64 or float64.
    """
    kind = time.dtype.kind
    if kind == "b" or kind not in "iuf":
        raise InputError(f"{source.path}, column 'time': values of type {time.dtype}; store "
                         "the time as integers or floating-point numbers")
    if kind == "u" and time.dtype.itemsize == 8:
        over = np.flatnonzero(time > np.iinfo(np.int64).max)
        if over.size:
            raise InputError(f"{source.path}, {source.locate(rows + int(over[0]))}, column "
                             f"'time': {time[over[0]]} is beyond the signed 64-bit range; "
                             "store times relative to an epoch that fits")
    if kind in "iu":
        return time.astype(np.int64, copy=False)
    return time.astype(np.float64, copy=False)


def _check_seconds(source, rel, rel_last, rows, repair) -> None:
    """Refuse times that overflow, or stop increasing, once converted to seconds."""
    bad = np.flatnonzero(~np.isfinite(rel))
    if bad.size:
        raise InputError(f"{source.path}, {source.locate(rows + int(bad[0]))}, column 'time': "
                         "overflows once converted to seconds; check the time unit")
    if repair is not None:
        return
    steps = np.diff(rel) if rel_last is None else np.diff(np.concatenate([[rel_last], rel]))
    bad = np.flatnonzero(~(steps >= MIN_STEP_S))
    if bad.size:
        row = rows + int(bad[0]) + (1 if rel_last is None else 0)
        raise InputError(f"{source.path}, {source.locate(row)}, column 'time': "
                         f"{steps[bad[0]]:.3g} s after the previous timestamp once converted "
                         f"to seconds (under {MIN_STEP_S:g} s, or a span beyond 64 bits); "
                         "check the time unit")


def _check_si(source, name, unit, col, rows) -> float:
    """Refuse SI values that overflowed or passed :data:`SI_LIMIT`; the block's peak."""
    if col.shape[0] == 0:
        return 0.0
    with np.errstate(invalid="ignore"):
        bad = np.flatnonzero(~(np.abs(col) <= SI_LIMIT))
    if bad.size:
        raise InputError(f"{source.path}, {source.locate(rows + int(bad[0]))}, column "
                         f"{name!r}: {col[bad[0]]:.6g} in SI is beyond {SI_LIMIT:g} (or "
                         f"overflows) after conversion from [{unit}]; check the value and "
                         "the unit")
    return float(np.max(np.abs(col)))


def apply_repair(time: np.ndarray, cols: list, repair: str):
    """Sort (dropping repeats) or drop out-of-order rows.

    Returns
    -------
    time, cols, note, shift
        Repaired columns (time restarting at 0), the repair's note (None if
        nothing was needed) and the shift of the first kept sample, s.
    """
    step = np.diff(time)
    if not np.any(step <= 0):
        return time, cols, None, 0.0
    if repair == "sort":
        order = np.argsort(time, kind="stable")
        keep = np.concatenate([[True], np.diff(time[order]) > 0])
        note = (f"sorted by time ({int(np.count_nonzero(step < 0))} backward step(s)); dropped "
                f"{int(np.count_nonzero(~keep))} row(s) with a repeated timestamp")
        index = order[keep]
    else:
        running = np.maximum.accumulate(time)
        keep = np.concatenate([[True], time[1:] > running[:-1]])
        note = f"dropped {int(np.count_nonzero(~keep))} row(s) not later than the rows before them"
        index = np.flatnonzero(keep)
    time = time[index]
    return time - time[0], [c[index] for c in cols], note, float(time[0])


def _steps(time: np.ndarray):
    """Timestamp steps in blocks: yields (offset of the block's first step, steps)."""
    n = time.shape[0]
    for a in range(0, n - 1, SUMMARY_BLOCK):
        b = min(n, a + SUMMARY_BLOCK + 1)
        yield a, np.diff(np.asarray(time[a:b]))


def summarize(time: np.ndarray, cols: list, names: tuple, extremes: list | None = None):
    """Period, jitter, gaps and saturated runs of validated columns.

    ``extremes`` (from :func:`stream`: each block's rows and its columns'
    minima and maxima) lets the search for clipped runs read only the blocks
    holding a column's extreme value; without it every value is read.

    Returns
    -------
    period : float
        Median step, s (of an even spread of ``PERIOD_SAMPLE`` steps on long records).
    jitter : float
        Standard deviation of the steps outside gaps, s.
    gaps : tuple of Gap
    saturated : tuple of SaturatedRun
    """
    n = time.shape[0]
    if n - 1 <= PERIOD_SAMPLE:
        sample = np.diff(np.asarray(time))
    else:
        # In place: a few arrays of PERIOD_SAMPLE at a time, not twice as many.
        idx = np.linspace(0, n - 2, PERIOD_SAMPLE).astype(np.int64)
        before = np.asarray(time[idx])
        idx += 1
        sample = np.asarray(time[idx])
        del idx
        sample -= before
        del before
    period = float(np.median(sample, overwrite_input=True))
    del sample
    gaps, count, s1, s2 = [], 0, 0.0, 0.0
    for a, step in _steps(time):
        is_gap = step > GAP_FACTOR * period
        where = np.flatnonzero(is_gap)
        for i in where:
            gaps.append(Gap(start_s=float(time[a + i]), length_s=float(step[i] - period),
                            missing=int(round(step[i] / period)) - 1, index=int(a + i + 1)))
        dev = step[~is_gap] if where.size else step  # a fresh array: changed in place
        dev -= period
        count += dev.shape[0]
        s1 += float(dev.sum())
        s2 += float(np.dot(dev, dev))
    jitter = float(np.sqrt(max(s2 / count - (s1 / count) ** 2, 0.0))) if count > 1 else 0.0
    saturated = []
    for i, (name, col) in enumerate(zip(names, cols)):
        blocks = None
        if extremes:
            blocks = [(a, b, low[i], high[i]) for a, b, low, high in extremes]
        saturated.extend(_saturated_runs(name, time, col, blocks))
    return period, jitter, tuple(gaps), tuple(saturated)


def _saturated_runs(name: str, t: np.ndarray, y: np.ndarray, blocks=None) -> list:
    if blocks is None:
        n = y.shape[0]
        blocks = [(a, min(a + SUMMARY_BLOCK, n), float(np.min(y[a:a + SUMMARY_BLOCK])),
                   float(np.max(y[a:a + SUMMARY_BLOCK]))) for a in range(0, n, SUMMARY_BLOCK)]
    runs = []
    top, bottom = max(b[3] for b in blocks), min(b[2] for b in blocks)
    for extreme in {float(top), float(bottom)}:
        # Only a block whose own extreme is the column's can hold the value.
        spans = [(a, b) for a, b, low, high in blocks if low == extreme or high == extreme]
        hits = np.concatenate([a + np.flatnonzero(np.asarray(y[a:b]) == extreme)
                               for a, b in spans])
        if hits.size < SATURATION_MIN_RUN:
            continue
        breaks = np.flatnonzero(np.diff(hits) != 1)
        starts = np.concatenate([[0], breaks + 1])
        stops = np.concatenate([breaks + 1, [hits.size]])
        for a, b in zip(starts, stops):
            if b - a >= SATURATION_MIN_RUN:
                runs.append(SaturatedRun(name, float(t[hits[a]]), int(b - a), extreme))
    return sorted(runs, key=lambda r: r.start_s)


def read_into_memory(source, header: Header, repair: str | None, progress=None):
    """Stream a source into memory, repairing timestamps if asked."""
    sink = MemorySink(len(header.names))
    start = stream(source, header, sink, repair, progress)
    time, cols = sink.finish()
    note = None
    if repair is not None:
        time, cols, note, shift = apply_repair(time, cols, repair)
        start += shift
    return start, time, cols, note
