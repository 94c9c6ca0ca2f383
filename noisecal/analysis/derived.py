"""Truth quantities a sensor measures: channels, or derived from the planar pose.

Every function returns a :class:`~noisecal.analysis.align.TruthSeries` on the
truth's own timestamps (absolute s), angles unwrapped so interpolation
between samples never crosses ±π the long way round.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..types import Recording
from .align import TruthSeries, wrap

_WORK = 1 << 21
"""Pose-segment pairs per block of the nearest-segment search (bounds its memory)."""


def _abs_time(rec: Recording) -> np.ndarray:
    return rec.start_time + np.asarray(rec.time)


def gaps(rec: Recording) -> list:
    """Absolute (start, end) times of the recording's gaps, s."""
    t = _abs_time(rec)
    return [(float(t[g.index - 1]), float(t[g.index])) for g in rec.gaps]


def _channel(rec: Recording, name: str, where: str) -> tuple[np.ndarray, str]:
    if name not in rec.channels:
        raise InputError(f"{where}: the truth recording {rec.source.path} has no channel "
                         f"{name!r}; its channels are {', '.join(rec.channels)}")
    return np.asarray(rec.channel(name), dtype=float), rec.unit_of(name)


def _pose(rec: Recording, pose: dict, where: str):
    x, ux = _channel(rec, pose["x"], where)
    y, uy = _channel(rec, pose["y"], where)
    yaw, uyaw = _channel(rec, pose["yaw"], where)
    if ux != "m" or uy != "m" or uyaw != "rad":
        raise InputError(f"{where}: the truth pose must be x, y in a length unit and yaw in an "
                         f"angle unit; found [{ux}], [{uy}], [{uyaw}]")
    return x, y, np.unwrap(yaw)


def path_relative(x: np.ndarray, y: np.ndarray, yaw: np.ndarray, path: np.ndarray):
    """Signed offset from and heading relative to the nearest polyline segment.

    Parameters
    ----------
    x, y, yaw : ndarray, shape (m,)
        Planar pose, m and rad.
    path : ndarray, shape (k, 2)
        Polyline vertices, m.

    Returns
    -------
    offset : ndarray, shape (m,)
        Distance to the nearest segment, m, positive left of its direction.
    heading : ndarray, shape (m,)
        yaw minus the segment's direction, wrapped to ±π.
    """
    a, b = path[:-1], path[1:]
    d = b - a
    length2 = np.sum(d * d, axis=1)
    direction = np.arctan2(d[:, 1], d[:, 0])
    offset = np.empty_like(x)
    heading = np.empty_like(x)
    chunk = max(64, _WORK // a.shape[0])
    for s in range(0, x.shape[0], chunk):
        p = np.column_stack([x[s:s + chunk], y[s:s + chunk]])
        rel = p[:, None, :] - a[None, :, :]
        u = np.clip(np.einsum("mkj,kj->mk", rel, d) / length2, 0.0, 1.0)
        near = a[None] + u[..., None] * d[None]
        dist2 = np.sum((p[:, None, :] - near) ** 2, axis=2)
        k = np.argmin(dist2, axis=1)
        rows = np.arange(p.shape[0])
        cross = d[k, 0] * rel[rows, k, 1] - d[k, 1] * rel[rows, k, 0]
        offset[s:s + chunk] = np.sign(cross) * np.sqrt(dist2[rows, k])
        heading[s:s + chunk] = wrap(yaw[s:s + chunk] - direction[k])
    return offset, heading


def truth_series(rec: Recording, mapping, quantity: str, where: str) -> tuple[TruthSeries, str]:
    """The truth quantity named in a map, with its SI unit.

    Parameters
    ----------
    rec : Recording
        The truth recording.
    mapping : MeasurementMap
    quantity : str
        A truth channel or a derived quantity (see :mod:`noisecal.ingest.mapping`).
    where : str
        Location for error messages.
    """
    t = _abs_time(rec)
    holes = gaps(rec)
    if quantity in ("path.offset", "path.heading"):
        x, y, yaw = _pose(rec, mapping.pose, where)
        offset, heading = path_relative(x, y, yaw, mapping.path)
        if quantity == "path.offset":
            return TruthSeries(t, offset, False, holes), "m"
        return TruthSeries(t, np.unwrap(heading), True, holes), "rad"
    if quantity.startswith("beacon."):
        _, name, kind = quantity.split(".")
        x, y, yaw = _pose(rec, mapping.pose, where)
        bx, by = mapping.beacons[name]
        if kind == "range":
            return TruthSeries(t, np.hypot(bx - x, by - y), False, holes), "m"
        bearing = np.unwrap(wrap(np.arctan2(by - y, bx - x) - yaw))
        return TruthSeries(t, bearing, True, holes), "rad"
    if quantity == "speed":
        x, y, _ = _pose(rec, mapping.pose, where)
        return TruthSeries(t, np.hypot(np.gradient(x, t), np.gradient(y, t)), False, holes), "m/s"
    if quantity == "turn_rate":
        _, _, yaw = _pose(rec, mapping.pose, where)
        return TruthSeries(t, np.gradient(yaw, t), False, holes), "rad/s"
    values, unit = _channel(rec, quantity, where)
    if unit == "rad":
        return TruthSeries(t, np.unwrap(values), True, holes), unit
    return TruthSeries(t, values, False, holes), unit


def rate_series(rec: Recording, pose: dict, span: float, where: str):
    """Speed and turn rate of the truth as centred differences over ``span`` seconds.

    Compared with a sensor's own rates over the same span (e.g. from encoder
    counts), both sides then carry the same smoothing, and the alignment sees
    no difference in their response to acceleration.

    Returns
    -------
    speed, turn_rate : TruthSeries
        m/s and rad/s at the truth's sample times (ends trimmed by span/2).
    """
    t = _abs_time(rec)
    x, y, yaw = _pose(rec, pose, where)
    h = 0.5 * span
    keep = (t - h >= t[0]) & (t + h <= t[-1])
    tk = t[keep]

    def diff(v):
        return (np.interp(tk + h, t, v) - np.interp(tk - h, t, v)) / span

    holes = gaps(rec)
    return (TruthSeries(tk, np.hypot(diff(x), diff(y)), False, holes),
            TruthSeries(tk, diff(yaw), False, holes))
