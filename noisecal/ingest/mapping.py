"""The measurement map: which truth quantity each sensor channel measures.

A YAML file of noisecal's own layout::

    measures:                 # sensor channel: truth channel or derived quantity
      lateral_offset: path.offset
      heading_error: path.heading
    pose: {x: x, y: y, yaw: yaw}        # truth channels of the planar pose
    path: [[0, 0], [40, 0], [40, 25]]   # reference polyline, m, truth frame
    beacons: {B1: [12.5, 3.0]}          # beacon positions, m, truth frame
    covariate: speed                    # optional

Derived quantities: ``path.offset`` (signed distance to the polyline, left of
its direction positive, m), ``path.heading`` (yaw minus the segment's
direction, rad), ``beacon.<id>.range`` (m), ``beacon.<id>.bearing`` (from
the platform's heading, counter-clockwise, rad), ``speed`` (m/s) and
``turn_rate`` (rad/s). Anything else names a truth channel. Without a map, a
sensor channel measures the truth channel of the same name.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from .yaml_file import read_yaml

KEYS = {"measures", "pose", "path", "beacons", "covariate"}


@dataclass(frozen=True)
class MeasurementMap:
    """What each sensor channel measures.

    Attributes
    ----------
    measures : dict of str → str
        Sensor channel → truth channel or derived quantity.
    pose : dict
        ``{"x", "y", "yaw"}`` → truth channel names.
    path : ndarray, shape (k, 2) or None
        Reference polyline, m.
    beacons : dict of str → ndarray, shape (2,)
    covariate : str or None
    source : str
        Path of the map file, or ``"(same names)"``.
    """

    measures: dict
    pose: dict = field(default_factory=lambda: {"x": "x", "y": "y", "yaw": "yaw"})
    path: np.ndarray | None = None
    beacons: dict = field(default_factory=dict)
    covariate: str | None = None
    source: str = "(same names)"


def same_names(sensor_channels, truth_channels, covariate=None) -> MeasurementMap:
    """The default map: every sensor channel that the truth also has."""
    common = {c: c for c in sensor_channels if c in truth_channels}
    if not common:
        raise InputError("the sensor and truth recordings share no channel name; give "
                         "--map MAP.yaml saying which truth quantity each sensor channel "
                         f"measures (sensor: {', '.join(sensor_channels)}; truth: "
                         f"{', '.join(truth_channels)})")
    return MeasurementMap(common, covariate=covariate)


def _points(value, where, shape_text):
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{where}: not a list of numbers; write {shape_text}") from None
    if not np.isfinite(arr).all():
        raise InputError(f"{where}: contains a value that is not a finite number")
    return arr


def read_map(path: str | Path, covariate: str | None = None) -> MeasurementMap:
    """Read and check a measurement map file.

    Raises
    ------
    InputError
        Unreadable YAML, unknown keys, a derived quantity without what it needs.
    """
    path = Path(path)
    data = read_yaml(path, "map file")
    if not isinstance(data, dict) or "measures" not in data:
        raise InputError(f"{path}: a map needs a 'measures:' mapping of sensor channel to "
                         "truth quantity, e.g. 'measures: {offset: path.offset}'")
    unknown = set(data) - KEYS
    if unknown:
        raise InputError(f"{path}: unknown key(s) {', '.join(sorted(map(repr, unknown)))}; "
                         f"the keys are "
                         f"{', '.join(sorted(KEYS))}")
    measures = data["measures"]
    if not isinstance(measures, dict) or not measures or \
            not all(isinstance(k, str) and isinstance(v, str) for k, v in measures.items()):
        raise InputError(f"{path}: 'measures' must map sensor channel names to truth "
                         "quantity names (text)")
    pose = {"x": "x", "y": "y", "yaw": "yaw"}
    if "pose" in data:
        if not isinstance(data["pose"], dict) or set(data["pose"]) - set(pose):
            raise InputError(f"{path}: 'pose' maps x, y and yaw to truth channel names")
        pose.update({k: str(v) for k, v in data["pose"].items()})
    poly = None
    if "path" in data:
        poly = _points(data["path"], f"{path}: 'path'", "[[x, y], [x, y], ...] in m")
        if poly.ndim != 2 or poly.shape[1] != 2 or poly.shape[0] < 2:
            raise InputError(f"{path}: 'path' needs at least two [x, y] points, m")
        if np.any(np.hypot(*np.diff(poly, axis=0).T) == 0):
            raise InputError(f"{path}: 'path' repeats a point; remove the zero-length segment")
    beacons = {}
    if not isinstance(data.get("beacons") or {}, dict):
        raise InputError(f"{path}: 'beacons' maps beacon ids to [x, y] positions, m, e.g. "
                         "'beacons: {B1: [12.5, 3.0]}'")
    for name, xy in (data.get("beacons") or {}).items():
        arr = _points(xy, f"{path}: beacon {name!r}", "[x, y] in m")
        if arr.shape != (2,):
            raise InputError(f"{path}: beacon {name!r} needs [x, y], m")
        beacons[str(name)] = arr
    cov = covariate or data.get("covariate")
    mapping = MeasurementMap(dict(measures), pose, poly, beacons,
                             None if cov is None else str(cov), str(path))
    for quantity in list(mapping.measures.values()) + ([mapping.covariate] if cov else []):
        check_quantity(mapping, quantity, str(path))
    return mapping


def check_quantity(mapping: MeasurementMap, quantity: str, where: str) -> None:
    """Refuse a derived quantity the map cannot compute."""
    if quantity.startswith("path.") and quantity not in ("path.offset", "path.heading"):
        raise InputError(f"{where}: {quantity!r} is not known; use path.offset or path.heading")
    if quantity.startswith("path.") and mapping.path is None:
        raise InputError(f"{where}: {quantity!r} needs a 'path:' polyline in the map")
    if quantity.startswith("beacon."):
        parts = quantity.split(".")
        if len(parts) != 3 or parts[2] not in ("range", "bearing"):
            raise InputError(f"{where}: {quantity!r}: write beacon.<id>.range or "
                             "beacon.<id>.bearing")
        if parts[1] not in mapping.beacons:
            raise InputError(f"{where}: beacon {parts[1]!r} is not in the map's 'beacons:'")


@dataclass(frozen=True)
class OdometryConfig:
    """How to read odometry from a recording, and which truth channels are the pose.

    Attributes
    ----------
    kind : {"encoders", "increments"}
    channels : dict
        encoders: ``left``, ``right`` (cumulative counts); increments: ``dx``,
        ``dy`` (m) and ``dyaw`` (rad), each row's motion in the previous row's frame.
    ticks_per_rev, wheel_radius_m, track_width_m : float or None
        Encoder geometry (encoders only).
    window_s : float or None
        Comparison window, s (encoders; increments use one row per window).
    pose : dict
        Truth channels ``x``, ``y``, ``yaw``.
    source : str
    """

    kind: str
    channels: dict
    ticks_per_rev: float | None
    wheel_radius_m: float | None
    track_width_m: float | None
    window_s: float | None
    pose: dict
    source: str


def _positive(data, key, where):
    value = data.get(key)
    if not isinstance(value, (int, float)) or isinstance(value, bool):
        raise InputError(f"{where}: '{key}' must be a positive number")
    try:
        value = float(value)  # an integer beyond float range overflows here
    except OverflowError:
        value = float("inf")
    if not np.isfinite(value) or value <= 0:
        raise InputError(f"{where}: '{key}' must be a positive finite number")
    return value


def read_odometry_config(path: str | Path) -> OdometryConfig:
    """Read and check an odometry config file (noisecal's own layout)::

        encoders: {left: left_ticks, right: right_ticks, ticks_per_rev: 4096,
                   wheel_radius_m: 0.16, track_width_m: 0.62}
        window_s: 0.5
        pose: {x: x, y: y, yaw: yaw}

    or ``increments: {dx: odo_dx, dy: odo_dy, dyaw: odo_dyaw}`` instead of
    ``encoders``.
    """
    path = Path(path)
    where = str(path)
    data = read_yaml(path, "odometry config")
    if not isinstance(data, dict) or ("encoders" in data) == ("increments" in data):
        raise InputError(f"{path}: an odometry config has exactly one of 'encoders:' "
                         "(left, right, ticks_per_rev, wheel_radius_m, track_width_m) or "
                         "'increments:' (dx, dy, dyaw)")
    unknown = set(data) - {"encoders", "increments", "window_s", "pose"}
    if unknown:
        raise InputError(f"{path}: unknown key(s) {', '.join(sorted(map(repr, unknown)))}; "
                         "the keys are encoders or increments, window_s and pose")
    pose = {"x": "x", "y": "y", "yaw": "yaw"}
    if "pose" in data:
        if not isinstance(data["pose"], dict) or set(data["pose"]) - set(pose):
            raise InputError(f"{path}: 'pose' maps x, y and yaw to truth channel names")
        pose.update({k: str(v) for k, v in data["pose"].items()})
    if "encoders" in data:
        enc = data["encoders"]
        if not isinstance(enc, dict):
            raise InputError(f"{path}: 'encoders' must be a mapping")
        for key in ("left", "right"):
            if not isinstance(enc.get(key), str):
                raise InputError(f"{where}: encoders need '{key}': the channel of cumulative "
                                 "counts")
        window = _positive(data, "window_s", where) if "window_s" in data else 0.5
        return OdometryConfig("encoders", {"left": enc["left"], "right": enc["right"]},
                              _positive(enc, "ticks_per_rev", where),
                              _positive(enc, "wheel_radius_m", where),
                              _positive(enc, "track_width_m", where), window, pose, where)
    inc = data["increments"]
    if not isinstance(inc, dict) or not all(isinstance(inc.get(k), str)
                                            for k in ("dx", "dy", "dyaw")):
        raise InputError(f"{path}: 'increments' names the channels dx, dy (m) and dyaw (rad)")
    return OdometryConfig("increments", {k: inc[k] for k in ("dx", "dy", "dyaw")}, None, None,
                          None, None, pose, where)
