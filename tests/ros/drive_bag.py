"""A drive in one bag: a pose sensor (/pose, 25 Hz, 0.03 s late, known noise) and its truth
(/truth, 50 Hz), both geometry_msgs/msg/PoseStamped, written with rosbags."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..motion.sim import pose

SIGMA = (0.02, 0.03, 0.05, 0.01, 0.01, 0.02)
"""Sensor noise of x, y, z [m], roll, pitch, yaw [rad]."""
LATENCY = 0.03
T0 = 1_700_000_000_000_000_000


def _msg(ts, t_ns: int, x, y, z, roll, pitch, yaw):
    T = ts.types
    cr, sr, cp, sp = np.cos(roll / 2), np.sin(roll / 2), np.cos(pitch / 2), np.sin(pitch / 2)
    cy, sy = np.cos(yaw / 2), np.sin(yaw / 2)
    q = T["geometry_msgs/msg/Quaternion"](sr * cp * cy - cr * sp * sy, cr * sp * cy + sr * cp * sy,
                                          cr * cp * sy - sr * sp * cy, cr * cp * cy + sr * sp * sy)
    h = T["std_msgs/msg/Header"](T["builtin_interfaces/msg/Time"](t_ns // 10**9, t_ns % 10**9),
                                 "map")
    return T["geometry_msgs/msg/PoseStamped"](
        h, T["geometry_msgs/msg/Pose"](T["geometry_msgs/msg/Point"](x, y, z), q))


def _attitude(t):
    return 0.5 + 0.2 * np.sin(t / 3), 0.05 * np.sin(t / 2), 0.05 * np.cos(t / 5)


def write_drive(path: Path, seconds: float = 30.0, seed: int = 3) -> Path:
    from rosbags.rosbag2 import StoragePlugin, Writer
    from rosbags.typesys import Stores, get_typestore

    ts = get_typestore(Stores.ROS2_HUMBLE)
    rng = np.random.default_rng(seed)
    msgs = []
    with Writer(path, version=9, storage_plugin=StoragePlugin.MCAP) as w:
        ct = w.add_connection("/truth", "geometry_msgs/msg/PoseStamped", typestore=ts)
        cs = w.add_connection("/pose", "geometry_msgs/msg/PoseStamped", typestore=ts)
        for k in range(int(seconds * 50)):
            t = k * 0.02
            x, y, yaw, _ = pose(t)
            stamp = T0 + k * 20_000_000
            msgs.append((stamp + 1_000_000, ct, _msg(ts, stamp, x, y, *_attitude(t), yaw)))
        for k in range(int((seconds - 2) * 25)):
            t = 1 + k * 0.04
            x, y, yaw, _ = pose(t - LATENCY)
            z, roll, pitch = _attitude(t - LATENCY)
            e = rng.normal(0, SIGMA)
            stamp = T0 + int(round(t * 1e9))
            msgs.append((stamp + int(rng.integers(1_000_000, 9_000_000)), cs,
                         _msg(ts, stamp, x + e[0], y + e[1], z + e[2], roll + e[3],
                              pitch + e[4], yaw + e[5])))
        for rec, c, m in sorted(msgs, key=lambda item: item[0]):
            w.write(c, rec, ts.serialize_cdr(m, c.msgtype))
    return path
