"""ROS message layouts: which fields are channels, their units, their covariance arrays.

One table serves the bag reader, the reader of CSV exports and the ROS
parameter file. Units follow the message definitions and REP 103 (SI: m,
m/s, rad, rad/s, m/s², T, Pa); latitude and longitude are in degrees as
``sensor_msgs/NavSatFix`` defines them. An orientation quaternion becomes
roll, pitch and yaw (REP 103: fixed axes X, Y, Z, i.e. Z-Y-X intrinsic), the
angles a noise model is fitted to.

Covariance arrays are row-major (``msg.covariance[3 * i + j]`` is element
(i, j)); a 3×3 block is over x, y, z (or rotation about X, Y, Z), a 6×6 block
over x, y, z, rotation about X, Y, Z. "Not provided" conventions read here:
−1 in element 0 (``sensor_msgs/Imu``), all zeros ("unknown"), any NaN, and a
``position_covariance_type`` of 0 (``sensor_msgs/NavSatFix``).

References
----------
REP 103, "Standard Units of Measure and Coordinate Conventions".
REP 145, "Conventions for IMU Sensor Drivers" (``header.stamp`` is the
measurement time; ``*_stddev`` parameters).
Message definitions sensor_msgs/Imu, nav_msgs/Odometry,
geometry_msgs/PoseWithCovariance, geometry_msgs/TwistWithCovariance,
sensor_msgs/NavSatFix (value from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

XYZ = ("x", "y", "z")
RPY = ("roll", "pitch", "yaw")


@dataclass(frozen=True)
class Covariance:
    """A covariance array of a message and the channels its rows stand for.

    Attributes
    ----------
    field : str
        Field path of the array in the message, e.g. ``"angular_velocity_covariance"``.
    rows : tuple of str, length k
        Channel of each row/column, in the message's order (k = 3 or 6).
    """

    field: str
    rows: tuple

    @property
    def size(self) -> int:
        return len(self.rows)


@dataclass(frozen=True)
class Layout:
    """What noisecal reads from one message type.

    Attributes
    ----------
    fields : tuple of (str, str)
        (field path, unit) of each numeric channel read as is.
    quaternions : tuple of str
        Field paths of orientation quaternions read as roll, pitch, yaw [rad]
        (channels ``<path>.roll``, ``.pitch``, ``.yaw``).
    covariances : tuple of Covariance
        The message's covariance arrays.
    header : bool
        Whether the message has a ``header`` (its stamp is the time).
    provided : str or None
        Covariance whose "not provided" marker also means the quaternion is
        not provided (``sensor_msgs/Imu``: orientation_covariance[0] = −1).
    """

    fields: tuple
    quaternions: tuple = ()
    covariances: tuple = ()
    header: bool = True
    provided: str | None = None


def _vec(prefix: str, unit: str) -> tuple:
    return tuple((f"{prefix}.{a}", unit) for a in XYZ)


def _pose(prefix: str) -> tuple:
    return _vec(f"{prefix}.position", "m")


def _pose_rows(prefix: str) -> tuple:
    return (tuple(f"{prefix}.position.{a}" for a in XYZ)
            + tuple(f"{prefix}.orientation.{a}" for a in RPY))


def _twist(prefix: str) -> tuple:
    return _vec(f"{prefix}.linear", "m/s") + _vec(f"{prefix}.angular", "rad/s")


def _twist_rows(prefix: str) -> tuple:
    return (tuple(f"{prefix}.linear.{a}" for a in XYZ)
            + tuple(f"{prefix}.angular.{a}" for a in XYZ))


LAYOUTS = {
    "sensor_msgs/msg/Imu": Layout(
        fields=_vec("angular_velocity", "rad/s") + _vec("linear_acceleration", "m/s^2"),
        quaternions=("orientation",),
        covariances=(
            Covariance("orientation_covariance", tuple(f"orientation.{a}" for a in RPY)),
            Covariance("angular_velocity_covariance",
                       tuple(f"angular_velocity.{a}" for a in XYZ)),
            Covariance("linear_acceleration_covariance",
                       tuple(f"linear_acceleration.{a}" for a in XYZ))),
        provided="orientation_covariance"),
    "nav_msgs/msg/Odometry": Layout(
        fields=_pose("pose.pose") + _twist("twist.twist"),
        quaternions=("pose.pose.orientation",),
        covariances=(Covariance("pose.covariance", _pose_rows("pose.pose")),
                     Covariance("twist.covariance", _twist_rows("twist.twist")))),
    "geometry_msgs/msg/PoseStamped": Layout(fields=_pose("pose"),
                                            quaternions=("pose.orientation",)),
    "geometry_msgs/msg/PoseWithCovarianceStamped": Layout(
        fields=_pose("pose.pose"), quaternions=("pose.pose.orientation",),
        covariances=(Covariance("pose.covariance", _pose_rows("pose.pose")),)),
    "geometry_msgs/msg/TwistStamped": Layout(fields=_twist("twist")),
    "geometry_msgs/msg/TwistWithCovarianceStamped": Layout(
        fields=_twist("twist.twist"),
        covariances=(Covariance("twist.covariance", _twist_rows("twist.twist")),)),
    "sensor_msgs/msg/NavSatFix": Layout(
        fields=(("latitude", "deg"), ("longitude", "deg"), ("altitude", "m")),
        covariances=(Covariance("position_covariance", ("east", "north", "up")),)),
    "sensor_msgs/msg/Range": Layout(fields=(("range", "m"),)),
    "sensor_msgs/msg/MagneticField": Layout(
        fields=_vec("magnetic_field", "T"),
        covariances=(Covariance("magnetic_field_covariance",
                                tuple(f"magnetic_field.{a}" for a in XYZ)),)),
    "sensor_msgs/msg/FluidPressure": Layout(fields=(("fluid_pressure", "Pa"),)),
    "sensor_msgs/msg/Temperature": Layout(fields=(("temperature", "degC"),)),
    "std_msgs/msg/Float64": Layout(fields=(("data", "1"),), header=False),
    "std_msgs/msg/Float32": Layout(fields=(("data", "1"),), header=False),
}
"""Message types read, by their ROS 2 name (a ROS 1 ``pkg/Type`` maps to ``pkg/msg/Type``)."""


def normal_type(name: str) -> str:
    """``pkg/msg/Type`` for ``pkg/Type``, ``pkg/msg/Type`` or ``pkg::msg::Type``."""
    parts = [p for p in name.replace("::", "/").strip().split("/") if p]
    if len(parts) == 2:
        parts = [parts[0], "msg", parts[1]]
    return "/".join(parts)


def channels_of(layout: Layout, quaternions: bool = True) -> list:
    """(channel, unit) of every channel a message of ``layout`` gives."""
    out = list(layout.fields)
    if quaternions:
        for q in layout.quaternions:
            out.extend((f"{q}.{a}", "rad") for a in RPY)
    return out


def quaternion_to_rpy(x, y, z, w):
    """Roll, pitch, yaw (rad) of unit quaternions (REP 103 fixed axes X, Y, Z).

    Parameters
    ----------
    x, y, z, w : ndarray, shape (n,)
        Quaternion components (normalised here).

    Returns
    -------
    roll, pitch, yaw : ndarray, shape (n,)
        Angles, rad; roll and yaw unwrapped along the samples, so a sensor
        at rest near ±π gives a continuous series.

    References
    ----------
    The Z-Y-X (yaw-pitch-roll) Euler angles of a rotation, common practice, no source.
    """
    q = np.stack([np.asarray(v, float) for v in (x, y, z, w)])
    q = q / np.linalg.norm(q, axis=0)
    x, y, z, w = q
    roll = np.arctan2(2.0 * (w * x + y * z), 1.0 - 2.0 * (x * x + y * y))
    pitch = np.arcsin(np.clip(2.0 * (w * y - z * x), -1.0, 1.0))
    yaw = np.arctan2(2.0 * (w * z + x * y), 1.0 - 2.0 * (y * y + z * z))
    return np.unwrap(roll), pitch, np.unwrap(yaw)


def covariance_matrix(values, size: int, kind: int | None = None):
    """A message's flat covariance array as a matrix, or why it holds none.

    Parameters
    ----------
    values : array_like, shape (size * size,)
        The array as stored (row-major).
    size : int
        Rows of the matrix (3 or 6).
    kind : int, optional
        ``position_covariance_type`` of a ``sensor_msgs/NavSatFix`` (0 = unknown).

    Returns
    -------
    matrix : ndarray, shape (size, size), or None
        Row-major reshape: ``matrix[i, j] == values[size * i + j]``.
    state : str
        ``"provided"``, ``"not provided"`` (−1 in element 0, or any NaN) or
        ``"unknown"`` (all zeros, or a covariance type of 0).
    """
    a = np.asarray(values, dtype=float).reshape(-1)
    if a.shape != (size * size,):
        raise ValueError(f"covariance of {a.shape[0]} elements where {size * size} are expected")
    if np.isnan(a).any() or a[0] == -1.0:
        return None, "not provided"
    if not a.any() or kind == 0:
        return None, "unknown"
    return a.reshape(size, size), "provided"
