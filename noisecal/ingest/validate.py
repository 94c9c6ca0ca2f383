"""Validation of a raw table into a :class:`~noisecal.types.Recording`.

Checks, in order: header cells and units, the time column, finite values,
strictly increasing timestamps (or an explicit repair), then measures the
sample period, jitter, gaps and saturated runs.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..types import Gap, Recording, SaturatedRun, Source
from ..units import split_header, time_scale, to_si
from .table import RawTable

GAP_FACTOR = 1.5
"""A step longer than this many nominal periods is a gap (common practice, no source)."""

SATURATION_MIN_RUN = 5
"""Consecutive samples at a channel's extreme that count as clipping."""

REPAIRS = ("sort", "drop")


def _check_time_order(time: np.ndarray, raw: RawTable, path: str, repair: str | None):
    """Return (order index, repair note) or raise on bad ordering without repair."""
    step = np.diff(time)
    bad = np.flatnonzero(step <= 0)
    if bad.size == 0:
        return None, None
    if repair is None:
        row = int(bad[0]) + 1
        what = "repeats" if step[bad[0]] == 0 else "goes backwards from"
        raise InputError(
            f"{path}, {raw.locate(row)}: timestamp {what} the previous one "
            f"({bad.size} such step(s) in the file); fix the log or pass "
            "--repair sort (sort, drop repeats) or --repair drop (drop out-of-order rows)")
    if repair == "sort":
        order = np.argsort(time, kind="stable")
        sorted_t = time[order]
        keep = np.concatenate([[True], np.diff(sorted_t) > 0])
        out_of_order = int(np.count_nonzero(step < 0))
        note = (f"sorted by time ({out_of_order} backward step(s)); dropped "
                f"{int(np.count_nonzero(~keep))} row(s) with a repeated timestamp")
        return order[keep], note
    running = np.maximum.accumulate(time)
    keep = np.concatenate([[True], time[1:] > running[:-1]])
    note = f"dropped {int(np.count_nonzero(~keep))} row(s) not later than the rows before them"
    return np.flatnonzero(keep), note


def _saturated_runs(name: str, t: np.ndarray, y: np.ndarray) -> list[SaturatedRun]:
    runs = []
    for extreme in {float(np.max(y)), float(np.min(y))}:
        at = y == extreme
        if np.count_nonzero(at) < SATURATION_MIN_RUN:
            continue
        edges = np.diff(np.concatenate([[0], at.astype(np.int8), [0]]))
        starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
        for a, b in zip(starts, stops):
            if b - a >= SATURATION_MIN_RUN:
                runs.append(SaturatedRun(name, float(t[a]), int(b - a), extreme))
    return sorted(runs, key=lambda r: r.start_s)


def build_recording(raw: RawTable, source: Source, repair: str | None = None,
                    min_samples: int = 3) -> Recording:
    """Validate a raw table and convert it to SI.

    Parameters
    ----------
    raw : RawTable
        Columns as read.
    source : Source
        Provenance of the file (repairs are added to it).
    repair : {None, "sort", "drop"}
        What to do with timestamps that are not strictly increasing: None
        refuses them; ``sort`` sorts and drops repeated timestamps; ``drop``
        drops rows not later than all rows before them.
    min_samples : int
        Fewest samples accepted.

    Returns
    -------
    Recording
    """
    path = source.path
    names, units = [], []
    for col, cell in enumerate(raw.headers):
        name, unit = split_header(str(cell), f"{path}, column {col + 1}")
        names.append(name)
        units.append(unit)
    if names[0].lower() != "time":
        raise InputError(f"{path}: the first column is {raw.headers[0]!r}, not the time; "
                         "put a 'time [s]' or 'time [ns]' column first")
    seen = set()
    for name in names[1:]:
        if name in seen or name.lower() == "time":
            raise InputError(f"{path}: channel name {name!r} appears twice; "
                             "give each column its own name")
        seen.add(name)
    scale = time_scale(units[0], f"{path}, column 'time'")
    time = raw.time
    n = time.shape[0]
    if n < min_samples:
        raise InputError(f"{path}: {n} sample(s); at least {min_samples} are needed")
    if time.dtype.kind == "f" and not np.isfinite(time).all():
        row = int(np.flatnonzero(~np.isfinite(time))[0])
        raise InputError(f"{path}, {raw.locate(row)}, column 'time': not a finite "
                         "number; fix or remove the row")
    for name, col in zip(names[1:], raw.columns):
        finite = np.isfinite(col)
        if not finite.all():
            row = int(np.flatnonzero(~finite)[0])
            raise InputError(f"{path}, {raw.locate(row)}, column {name!r}: "
                             f"{col[row]} is not a finite number; remove the row "
                             "(the gap will be detected) or fix the logger")
    order, note = _check_time_order(time, raw, path, repair)
    columns = raw.columns
    if order is not None:
        time = time[order]
        columns = [c[order] for c in columns]
        if time.shape[0] < min_samples:
            raise InputError(f"{path}: only {time.shape[0]} sample(s) left after the "
                             f"repair; at least {min_samples} are needed")
    # Relative time first, then scale: keeps integer nanoseconds exact.
    rel = (time - time[0]).astype(np.float64) * scale
    start = float(time[0]) * scale
    si_cols, si_units = [], []
    for name, unit, col in zip(names[1:], units[1:], columns):
        values, si_unit = to_si(col, unit, f"{path}, column {name!r}")
        si_cols.append(values)
        si_units.append(si_unit)
    step = np.diff(rel)
    period = float(np.median(step))
    is_gap = step > GAP_FACTOR * period
    gaps = tuple(
        Gap(start_s=float(rel[i]), length_s=float(step[i] - period),
            missing=int(round(step[i] / period)) - 1, index=int(i + 1))
        for i in np.flatnonzero(is_gap))
    regular = step[~is_gap]
    jitter = float(np.std(regular)) if regular.size > 1 else 0.0
    saturated = []
    for name, values in zip(names[1:], si_cols):
        saturated.extend(_saturated_runs(name, rel, values))
    repairs = source.repairs + ((f"--repair {repair}: {note}",) if note else ())
    src = Source(source.path, source.sha256, source.size_bytes, raw.format, repairs)
    return Recording(time=rel, start_time=start, samples=np.column_stack(si_cols),
                     channels=tuple(names[1:]), units=tuple(si_units),
                     source_units=tuple(units[1:]), period=period, jitter=jitter,
                     gaps=gaps, saturated=tuple(saturated), source=src)
