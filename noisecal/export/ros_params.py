"""A job's measurement noise as a ROS 2 parameter file, in the layouts the messages carry.

``noisecal static … --as ros`` (and ``motion``) writes::

    <node>:
      ros__parameters:
        angular_velocity_covariance: [9 floats, row-major]
        linear_acceleration_covariance: [...]
        angular_velocity_stddev: 0.0012
        ...

Covariance arrays are the per-sample measurement covariance R for the filter
step (static: R = N²/dt; motion: the gated residual covariance), SI (REP 103),
row-major as ``sensor_msgs/Imu`` (3×3) and ``nav_msgs/Odometry`` /
``geometry_msgs/*WithCovariance`` (6×6) define them. An array is written only
when every row of it was characterised: an unmeasured variance is never
written as a number (a zero would claim a perfect sensor). The REP 145 driver
parameters ``*_stddev`` are one number per quantity: the square root of the
largest variance on the array's diagonal (the conservative axis).

Channels are matched to message rows by their field paths (a bag's channels,
``angular_velocity.x``), or by SI unit and an axis suffix (``gyro_x [deg/s]``
→ ``angular_velocity``; ``accel_z [g]`` → ``linear_acceleration``; ``roll``,
``pitch``, ``yaw`` in rad → ``orientation``).

References
----------
REP 103 (units, covariance layouts); REP 145 (``*_stddev`` driver parameters,
value from memory); the ROS 2 parameter file format (``<node>: ros__parameters:``,
common practice, no source).
"""

from __future__ import annotations

import math
import re

import numpy as np
import yaml

from .. import __version__
from ..errors import InputError
from ..ingest.ros_messages import LAYOUTS, RPY, XYZ

_AXIS = re.compile(r"(?:^|[._\-\s])(?P<axis>x|y|z|roll|pitch|yaw)$", re.IGNORECASE)
_BY_UNIT = {"rad/s": "angular_velocity", "m/s**2": "linear_acceleration", "T": "magnetic_field"}
STDDEV = {"angular_velocity_covariance": "angular_velocity_stddev",
          "linear_acceleration_covariance": "linear_acceleration_stddev",
          "orientation_covariance": "orientation_stddev",
          "magnetic_field_covariance": "magnetic_field_stddev"}
"""Covariance array → its REP 145 standard-deviation parameter."""

_NODE = re.compile(r"^/?[A-Za-z_][A-Za-z0-9_]*(/[A-Za-z_][A-Za-z0-9_]*)*$")


def _specs() -> list:
    """Every distinct covariance layout (field name, rows), messages in table order."""
    seen, out = set(), []
    for layout in LAYOUTS.values():
        for spec in layout.covariances:
            key = (spec.field, spec.rows)
            if key not in seen and spec.field != "position_covariance":
                seen.add(key)
                out.append(spec)
    return out


_POSE = re.compile(r"(?:^|\.)(?P<part>position|orientation|linear|angular)\."
                   r"(?P<axis>x|y|z|roll|pitch|yaw)$")
_PARTS = {("position", "m"): "pose.pose.position", ("orientation", "rad"): "pose.pose.orientation",
          ("linear", "m/s"): "twist.twist.linear", ("angular", "rad/s"): "twist.twist.angular"}


def _row_name(channel: str, unit: str) -> str | None:
    """The message row a channel stands for: its field path (a pose or twist of any
    message maps to the ``*WithCovariance`` rows), or unit + axis suffix."""
    for spec in _specs():
        if channel in spec.rows:
            return channel
    m = _POSE.search(channel)
    if m and (m.group("part"), unit) in _PARTS:
        row = f"{_PARTS[(m.group('part'), unit)]}.{m.group('axis')}"
        return row if any(row in spec.rows for spec in _specs()) else None
    m = _AXIS.search(channel)
    if not m:
        return None
    axis = m.group("axis").lower()
    if axis in XYZ and unit in _BY_UNIT:
        return f"{_BY_UNIT[unit]}.{axis}"
    if axis in RPY and unit == "rad":
        return f"orientation.{axis}"
    return None


def covariance_arrays(order, units, R) -> tuple[dict, list]:
    """R over ``order`` as the ROS messages' flat row-major covariance arrays.

    Parameters
    ----------
    order : sequence of str, length c
        Channel of each row of R.
    units : sequence of str, length c
        SI unit of each channel.
    R : ndarray, shape (c, c)
        Measurement covariance, SI.

    Returns
    -------
    arrays : dict of str to list of float
        Field name (``angular_velocity_covariance``, ``pose.covariance``, …) →
        9 or 36 floats, ``array[k * i + j] == R[row_i, row_j]``.
    missing : list of str
        Arrays some but not all of whose rows were characterised, with the rows
        lacking (not written).
    """
    R = np.asarray(R, dtype=float)
    where = {}
    for i, (ch, u) in enumerate(zip(order, units)):
        row = _row_name(str(ch), str(u))
        if row is not None and row not in where:
            where[row] = i
    arrays, missing = {}, []
    for spec in _specs():
        have = [where.get(r) for r in spec.rows]
        if all(h is None for h in have):
            continue
        if any(h is None for h in have):
            lack = [r for r, h in zip(spec.rows, have) if h is None]
            missing.append(f"{spec.field} (no {', '.join(lack)})")
            continue
        idx = np.array(have)
        arrays[spec.field] = [float(v) for v in R[np.ix_(idx, idx)].reshape(-1)]
    return arrays, missing


def parameters(order, units, R) -> tuple[dict, list]:
    """The ``ros__parameters`` mapping: covariance arrays and REP 145 stddevs.

    Returns
    -------
    params : dict
        Flat parameter name → float list or float; an array's name is its
        message field with ``_`` for ``.`` (``pose.covariance`` → ``pose_covariance``).
    missing : list of str
        Arrays not written (see :func:`covariance_arrays`).
    """
    arrays, missing = covariance_arrays(order, units, R)
    # A parameter name has no dots (they nest namespaces): pose.covariance → pose_covariance.
    params = {field.replace(".", "_"): values for field, values in arrays.items()}
    for field, values in arrays.items():
        name = STDDEV.get(field)
        if name is not None:
            k = int(round(math.sqrt(len(values))))
            params[name] = float(math.sqrt(max(values[i * (k + 1)] for i in range(k))))
    return params, missing


def check_node(node: str) -> str:
    """A ROS node name (``imu_driver``, ``/ns/imu``), or a one-line error."""
    if not isinstance(node, str) or not _NODE.match(node):
        raise InputError(f"--node {node!r}: not a ROS node name; use letters, digits and "
                         "underscores, e.g. imu_driver")
    return node


class _Dumper(yaml.SafeDumper):
    """Flow-style float lists, block mappings."""


_Dumper.add_representer(list, lambda d, data: d.represent_sequence(
    "tag:yaml.org,2002:seq", data, flow_style=True))


def render(job: str, order, units, R, node: str, provenance: dict, what: str) -> str:
    """The parameter file's text.

    Parameters
    ----------
    job : str
        ``static`` or ``motion``.
    order, units, R
        As for :func:`covariance_arrays`.
    node : str
        Node name the parameters are for.
    provenance : dict
        ``input`` (path), ``sha256``, ``command``, ``date`` (shown as comments).
    what : str
        One line on what R is (e.g. ``R = N^2/dt for dt = 0.01 s``).

    Raises
    ------
    InputError
        When no channel maps onto a message covariance array (nothing to write).
    """
    params, missing = parameters(order, units, R)
    if not params:
        raise InputError(
            f"--as ros: no channel of {', '.join(order)} maps onto a ROS message's "
            "covariance array; name them by their field paths (angular_velocity.x, …) or "
            "as gyro_x [rad/s], accel_x [m/s^2] …, and characterise all three axes")
    lines = [f"# noisecal {job} noise as ROS 2 parameters (noisecal {__version__})",
             f"# input: {provenance.get('input')} (sha256 {provenance.get('sha256')})",
             f"# command: {provenance.get('command')}",
             f"# date: {provenance.get('date')}",
             f"# Covariances: {what}; SI (REP 103), row-major as the messages define them.",
             "# *_stddev (REP 145): square root of the largest variance on the diagonal.",
             "# A starting point for tuning, not a certification: confirm on the real system."]
    for m in missing:
        lines.append(f"# not written, not every row characterised: {m}")
    body = {node.lstrip("/"): {"ros__parameters": params}}
    lines.append(yaml.dump(body, Dumper=_Dumper, sort_keys=False, default_flow_style=False,
                           width=4096).rstrip())
    return "\n".join(lines) + "\n"


def render_result(result, node: str) -> str:
    """The parameter file of a static or motion job's result."""
    prov = result.sections.get("provenance", {})
    info = {"input": (prov.get("input") or prov.get("sensor") or {}).get("path"),
            "sha256": (prov.get("input") or prov.get("sensor") or {}).get("sha256"),
            "command": prov.get("command"), "date": prov.get("date")}
    if hasattr(result, "block"):
        fb = result.block
        return render("static", fb.order, fb.units, fb.R, node, info,
                      f"R = N^2/dt per sample for dt = {fb.dt:.6g} s")
    m = result.model
    return render("motion", m.order, m.units, m.R, node, info,
                  "R, the covariance of the residuals inside the chi-square gate")
