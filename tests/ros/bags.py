"""Bags written for the tests: rosbags' writers (ROS 1, ROS 2 sqlite3, ROS 2 MCAP) and,
independently, the mcap + mcap-ros2-support libraries (a bare ``.mcap``).

Stamps are integer nanoseconds with odd digits (so a float on the way would show);
the record time is the stamp plus a delay drawn independently of it, up to three
sample periods, so the record order is not the stamp order.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

T0 = 1_700_000_123_456_789_013
"""First header.stamp, ns since the epoch."""
PERIOD_NS = 5_000_017
"""Stamp step, ns (about 200 Hz)."""
FORMATS = ("ros1", "ros2-sqlite3", "ros2-mcap", "mcap-lib")

IMU_MSGDEF = """std_msgs/Header header
geometry_msgs/Quaternion orientation
float64[9] orientation_covariance
geometry_msgs/Vector3 angular_velocity
float64[9] angular_velocity_covariance
geometry_msgs/Vector3 linear_acceleration
float64[9] linear_acceleration_covariance
================================================================================
MSG: std_msgs/Header
builtin_interfaces/Time stamp
string frame_id
================================================================================
MSG: builtin_interfaces/Time
int32 sec
uint32 nanosec
================================================================================
MSG: geometry_msgs/Quaternion
float64 x 0
float64 y 0
float64 z 0
float64 w 1
================================================================================
MSG: geometry_msgs/Vector3
float64 x
float64 y
float64 z
"""
"""sensor_msgs/msg/Imu as a ROS 2 recorder stores it (written out by hand, not generated)."""


@dataclass
class ImuData:
    """What a test bag holds, in stamp order.

    Attributes
    ----------
    stamps : ndarray of int64, shape (n,)
    recorded : ndarray of int64, shape (n,)
        Record time of each message.
    gyro, accel : ndarray, shape (n, 3)
        rad/s and m/s².
    quat : ndarray, shape (n, 4)
        x, y, z, w.
    covariances : dict of str to ndarray, shape (9,)
    """

    stamps: np.ndarray
    recorded: np.ndarray
    gyro: np.ndarray
    accel: np.ndarray
    quat: np.ndarray
    covariances: dict


def imu_data(n: int = 1500, seed: int = 0, gyro_sigma: float = 0.01,
             covariances: dict | None = None) -> ImuData:
    rng = np.random.default_rng(seed)
    stamps = T0 + np.arange(n, dtype=np.int64) * PERIOD_NS
    recorded = stamps + rng.integers(200_000, 3 * PERIOD_NS, n)
    gyro = rng.normal(0.0, gyro_sigma, (n, 3))
    accel = rng.normal(0.0, 0.05, (n, 3)) + [0.0, 0.0, 9.81]
    # A small, changing attitude: yaw about 3 rad (near the wrap), roll, pitch small.
    yaw = 3.1 + rng.normal(0.0, 0.05, n)
    roll = rng.normal(0.0, 0.01, n)
    pitch = rng.normal(0.0, 0.01, n)
    cr, sr, cp, sp, cy, sy = (np.cos(roll / 2), np.sin(roll / 2), np.cos(pitch / 2),
                              np.sin(pitch / 2), np.cos(yaw / 2), np.sin(yaw / 2))
    quat = np.column_stack([sr * cp * cy - cr * sp * sy, cr * sp * cy + sr * cp * sy,
                            cr * cp * sy - sr * sp * cy, cr * cp * cy + sr * sp * sy])
    cov = {"orientation_covariance": np.diag([1e-4, 2e-4, 3e-4]).ravel(),
           "angular_velocity_covariance": np.arange(1.0, 10.0) * 1e-6,
           "linear_acceleration_covariance": np.zeros(9)}
    cov.update(covariances or {})
    return ImuData(stamps, recorded, gyro, accel, quat, cov)


def _record_order(d: ImuData) -> np.ndarray:
    return np.argsort(d.recorded, kind="stable")


def _rosbags_imu(ts, d: ImuData, i: int):
    t = ts.types
    s = int(d.stamps[i])
    header = t["std_msgs/msg/Header"]
    stamp = t["builtin_interfaces/msg/Time"](s // 10**9, s % 10**9)
    extra = {"seq": int(i)} if "seq" in header.__dataclass_fields__ else {}  # ROS 1
    return t["sensor_msgs/msg/Imu"](
        header(stamp=stamp, frame_id="imu", **extra),
        t["geometry_msgs/msg/Quaternion"](*map(float, d.quat[i])),
        np.asarray(d.covariances["orientation_covariance"], float),
        t["geometry_msgs/msg/Vector3"](*map(float, d.gyro[i])),
        np.asarray(d.covariances["angular_velocity_covariance"], float),
        t["geometry_msgs/msg/Vector3"](*map(float, d.accel[i])),
        np.asarray(d.covariances["linear_acceleration_covariance"], float))


def write_bag(path: Path, fmt: str, d: ImuData, topic: str = "/imu", extra=None) -> Path:
    """Write ``d`` on ``topic`` in format ``fmt``; returns the bag's path.

    ``extra`` : optional list of (topic, msgtype, [(record ns, rosbags message), …]).
    """
    if fmt == "mcap-lib":
        return _write_mcap_lib(path.with_suffix(".mcap"), d, topic)
    from rosbags.typesys import Stores, get_typestore

    if fmt == "ros1":
        from rosbags.rosbag1 import Writer

        ts = get_typestore(Stores.ROS1_NOETIC)
        path = path.with_suffix(".bag")
        writer, ser = Writer(path), ts.serialize_ros1
        open_kw = {}
    else:
        from rosbags.rosbag2 import StoragePlugin, Writer

        ts = get_typestore(Stores.ROS2_HUMBLE)
        plugin = StoragePlugin.MCAP if fmt == "ros2-mcap" else StoragePlugin.SQLITE3
        writer, ser = Writer(path, version=9, storage_plugin=plugin), ts.serialize_cdr
        open_kw = {}
    with writer:
        conn = writer.add_connection(topic, "sensor_msgs/msg/Imu", typestore=ts, **open_kw)
        for i in _record_order(d):
            writer.write(conn, int(d.recorded[i]), ser(_rosbags_imu(ts, d, i),
                                                       "sensor_msgs/msg/Imu"))
        for name, msgtype, items in extra or ():
            c = writer.add_connection(name, msgtype, typestore=ts)
            for rec_ns, make in items:
                writer.write(c, int(rec_ns), ser(make(ts), msgtype))
    return path


def _write_mcap_lib(path: Path, d: ImuData, topic: str) -> Path:
    from mcap_ros2.writer import Writer

    with open(path, "wb") as fh:
        writer = Writer(fh)
        schema = writer.register_msgdef("sensor_msgs/msg/Imu", IMU_MSGDEF)
        for i in _record_order(d):
            s = int(d.stamps[i])
            vec = lambda v: {"x": float(v[0]), "y": float(v[1]), "z": float(v[2])}  # noqa: E731
            cov = {k: [float(v) for v in a] for k, a in d.covariances.items()}
            msg = {"header": {"stamp": {"sec": s // 10**9, "nanosec": s % 10**9},
                              "frame_id": "imu"},
                   "orientation": dict(zip("xyzw", map(float, d.quat[i]))),
                   "angular_velocity": vec(d.gyro[i]),
                   "linear_acceleration": vec(d.accel[i]), **cov}
            writer.write_message(topic, schema, msg, log_time=int(d.recorded[i]),
                                 publish_time=int(d.recorded[i]))
        writer.finish()
    return path


def ros2_export_csv(path: Path, d: ImuData) -> Path:
    """The same messages as a ROS 2 field-path CSV export (stamp split in sec, nanosec)."""
    cells = (["header.stamp.sec", "header.stamp.nanosec", "header.frame_id"]
             + [f"orientation.{a}" for a in "xyzw"]
             + [f"angular_velocity.{a}" for a in "xyz"]
             + [f"linear_acceleration.{a}" for a in "xyz"])
    lines = [",".join(cells)]
    for i in _record_order(d):
        s = int(d.stamps[i])
        vals = [repr(float(v)) for v in (*d.quat[i], *d.gyro[i], *d.accel[i])]
        lines.append(",".join([str(s // 10**9), str(s % 10**9), "imu"] + vals))
    path.write_text("\n".join(lines) + "\n")
    return path


def rostopic_csv(path: Path, d: ImuData) -> Path:
    """The same messages as ``rostopic echo -p`` writes them (ROS 1)."""
    cells = (["%time", "field.header.seq", "field.header.stamp", "field.header.frame_id"]
             + [f"field.orientation.{a}" for a in "xyzw"]
             + [f"field.orientation_covariance{k}" for k in range(9)]
             + [f"field.angular_velocity.{a}" for a in "xyz"]
             + [f"field.angular_velocity_covariance{k}" for k in range(9)]
             + [f"field.linear_acceleration.{a}" for a in "xyz"]
             + [f"field.linear_acceleration_covariance{k}" for k in range(9)])
    lines = [",".join(cells)]
    c = d.covariances
    for seq, i in enumerate(_record_order(d)):
        vals = [repr(float(v)) for v in (*d.quat[i], *c["orientation_covariance"], *d.gyro[i],
                                         *c["angular_velocity_covariance"], *d.accel[i],
                                         *c["linear_acceleration_covariance"])]
        lines.append(",".join([str(int(d.recorded[i])), str(seq), str(int(d.stamps[i])), "imu"]
                              + vals))
    path.write_text("\n".join(lines) + "\n")
    return path
