"""Arrays in memory as a Recording: the Python API's way in without a file.

The same checks as a file's: equal lengths, finite numbers, a unit per
channel (converted to SI once, here), times increasing; the provenance is the
SHA-256 of the arrays' bytes (time and channels, in order).
"""

from __future__ import annotations

import hashlib

import numpy as np

from ..types import Recording, Source
from ..units import to_si
from .validate import summarize


def _error(param: str, value, text: str):
    from ..jobs.result import ParameterError

    return ParameterError(param, value, text)


def read_arrays(columns, period: float | None = None, units: dict | None = None,
                time=None) -> Recording:
    """A Recording from channel arrays.

    Parameters
    ----------
    columns : mapping of str to array_like, each shape (n,)
        Channel name → samples in the unit ``units[name]``.
    period : float, optional
        Sample period, s (samples evenly spaced from 0). Give this or ``time``.
    units : mapping of str to str
        Unit of each channel, e.g. ``{"gyro_x": "deg/s"}`` (pint spelling; ``g``
        is standard gravity).
    time : array_like, shape (n,), optional
        Sample times, s, increasing.

    Returns
    -------
    Recording
    """
    if not hasattr(columns, "items") or not len(columns):
        raise _error("columns", type(columns).__name__, "give a mapping of channel name to "
                     "a 1-D array, e.g. {'gyro_x': y}")
    units = dict(units or {})
    missing = [k for k in columns if k not in units]
    if missing:
        raise _error("units", units, f"no unit for {', '.join(map(str, missing))}; e.g. "
                     f"units={{'{missing[0]}': 'rad/s'}}")
    names, cols, si_units, src_units = [], [], [], []
    n = None
    for name, values in columns.items():
        a = np.asarray(values)
        if a.ndim != 1 or not (np.issubdtype(a.dtype, np.number) and a.dtype != np.complex128):
            raise _error("columns", name, f"must be a 1-D array of real numbers, got shape "
                         f"{a.shape} of {a.dtype}")
        if n is None:
            n = a.shape[0]
        elif a.shape[0] != n:
            raise _error("columns", name, f"has {a.shape[0]} samples, the first channel {n}")
        if not np.all(np.isfinite(a)):
            bad = int(np.flatnonzero(~np.isfinite(a))[0])
            raise _error("columns", name, f"sample {bad} is not finite; remove or fill it")
        values_si, unit_si = to_si(a.astype(np.float64), str(units[name]),
                                   f"units[{name!r}]")
        if not np.all(np.isfinite(values_si)):
            raise _error("units", units[name], f"{name} overflows in SI; check the unit")
        names.append(str(name))
        cols.append(np.ascontiguousarray(values_si))
        si_units.append(unit_si)
        src_units.append(str(units[name]))
    if n < 3:
        raise _error("columns", n, "at least 3 samples are needed")
    if time is None:
        if period is None or not (np.isfinite(period) and period > 0):
            raise _error("period", period, "give the sample period in seconds (or time=)")
        t = np.arange(n, dtype=np.float64) * float(period)
    else:
        t = np.asarray(time, dtype=np.float64)
        if t.shape != (n,) or not np.all(np.isfinite(t)):
            raise _error("time", f"shape {t.shape}", f"give {n} finite times in seconds")
        step = np.diff(t)
        if np.any(step <= 0):
            raise _error("time", f"index {int(np.flatnonzero(step <= 0)[0]) + 1}",
                         "times must increase")
    start = float(t[0])
    t = t - start
    digest = hashlib.sha256()
    for a in [t] + cols:
        digest.update(np.ascontiguousarray(a).tobytes())
    p, jitter, gaps, saturated = summarize(t, cols, tuple(names))
    if time is None:
        p, jitter = float(period), 0.0  # exact, not the median of rounded steps
    size = int(8 * n * (1 + len(cols)))
    return Recording(time=t, start_time=start, columns=tuple(cols), channels=tuple(names),
                     units=tuple(si_units), source_units=tuple(src_units), period=p,
                     jitter=jitter, gaps=gaps, saturated=saturated,
                     source=Source("<arrays>", digest.hexdigest(), size, "arrays"))
