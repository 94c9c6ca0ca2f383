"""Make the demo ROS 2 bag recordings/bench_imu_ros2/ (invented data, fixed seed).

Scenario (invented): the fictional NC-40 IMU of the "Marten-3" orchard rover
(see tools/make_demo_recordings.py), this time logged through the rover's ROS 2
driver: ``ros2 bag record`` into MCAP storage, 12 min at rest on the workshop
bench, 50 Hz on ``/imu/data`` (``sensor_msgs/msg/Imu``). The driver stamps each
message with the sample instant (REP 145); the bag records it after a transport
delay of 1.5 ms plus an exponential 0.6 ms (mean), drawn independently of the
samples. Its orientation is not provided (``orientation_covariance[0] = -1``);
it fills ``angular_velocity_covariance`` with a datasheet guess (diagonal 1e-6
(rad/s)²) and leaves ``linear_acceleration_covariance`` all zeros (unknown).
A second topic, ``/battery_voltage`` (``std_msgs/msg/Float64``, 1 Hz), is there
so that a topic must be chosen.

True noise terms (SI; the data are simulated from exactly these, white noise
plus bias random walk, no low-pass):

=============  ====================  =====================
channel        white noise N         bias random walk K
=============  ====================  =====================
gyro x/y/z     4.363e-5 rad/s/√Hz    1.212e-6 rad/s·√Hz
               (0.15 deg/√h)         (15 deg/h/√h)
accel x/y/z    5.0e-4 m/s²/√Hz       9.2e-6 m/s²·√Hz
               (0.03 m/s/√h)
=============  ====================  =====================

Per-sample R at 50 Hz is N²·50: 9.52e-8 (rad/s)² for the gyros, 1.25e-5
(m/s²)² for the accelerometers. Values are stored at the unit's output
resolution, 2^-17 rad/s and 2^-13 m/s² (under 0.01 % of N²). Stamps start at
2026-06-01T08:00:00.000000123 UTC. Run: ``python tools/make_demo_bag.py``.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np

from noisecal.fit.simulate import simulate_rate

SEED = 20261202
RATE_HZ = 50.0
MINUTES = 12.0
T0_NS = 1_780_300_800_000_000_123
GYRO = np.array([0.0, 4.363e-5 ** 2, 0.0, 1.212e-6 ** 2, 0.0])
ACCEL = np.array([0.0, 5.0e-4 ** 2, 0.0, 9.2e-6 ** 2, 0.0])
GYRO_OFFSET = (3.7e-4, -2.3e-4, 6.1e-5)          # rad/s: turn-on bias + Earth's rate
ACCEL_OFFSET = (0.0402, -0.0265, 9.8183)         # m/s²: tilt of the bench + gravity
GYRO_LSB = 2.0 ** -17
ACCEL_LSB = 2.0 ** -13
TOPIC = "/imu/data"


def make_bag(path: Path) -> Path:
    from rosbags.rosbag2 import StoragePlugin, Writer
    from rosbags.rosbag2.enums import CompressionFormat, CompressionMode
    from rosbags.typesys import Stores, get_typestore

    rng = np.random.default_rng(SEED)
    period = 1.0 / RATE_HZ
    n = int(MINUTES * 60 * RATE_HZ)
    stamps = T0_NS + np.arange(n, dtype=np.int64) * int(round(period * 1e9))
    delay = 1_500_000 + np.round(rng.exponential(600_000, n)).astype(np.int64)
    gyro = np.column_stack([np.round((simulate_rate(GYRO, period, n, rng) + o) / GYRO_LSB)
                            * GYRO_LSB for o in GYRO_OFFSET])
    accel = np.column_stack([np.round((simulate_rate(ACCEL, period, n, rng) + o) / ACCEL_LSB)
                             * ACCEL_LSB for o in ACCEL_OFFSET])
    ts = get_typestore(Stores.ROS2_HUMBLE)
    T = ts.types
    imu, vec = T["sensor_msgs/msg/Imu"], T["geometry_msgs/msg/Vector3"]
    no_orientation = np.r_[-1.0, np.zeros(8)]
    datasheet = np.diag([1e-6] * 3).ravel()
    # Written in a scratch folder under the final name (the storage file takes the
    # folder's name), then moved in place.
    scratch = path.parent / f".{path.name}.part"
    shutil.rmtree(scratch, ignore_errors=True)
    scratch.mkdir(parents=True)
    tmp = scratch / path.name
    writer = Writer(tmp, version=9, storage_plugin=StoragePlugin.MCAP)
    # MCAP chunks compressed with zstd, as ros2 bag record --storage-preset-profile does.
    writer.set_compression(CompressionMode.STORAGE, CompressionFormat.ZSTD)
    with writer:
        c_imu = writer.add_connection(TOPIC, imu.__msgtype__, typestore=ts)
        c_bat = writer.add_connection("/battery_voltage", "std_msgs/msg/Float64", typestore=ts)
        battery = iter(range(n))
        for i in range(n):
            s = int(stamps[i])
            header = T["std_msgs/msg/Header"](T["builtin_interfaces/msg/Time"](
                s // 10**9, s % 10**9), "imu_link")
            msg = imu(header, T["geometry_msgs/msg/Quaternion"](0.0, 0.0, 0.0, 1.0),
                      no_orientation, vec(*map(float, gyro[i])), datasheet,
                      vec(*map(float, accel[i])), np.zeros(9))
            writer.write(c_imu, s + int(delay[i]), ts.serialize_cdr(msg, imu.__msgtype__))
            if i % int(RATE_HZ) == 0:
                volts = 12.6 - 0.2 * next(battery) / n + 0.01 * rng.standard_normal()
                writer.write(c_bat, s + int(delay[i]) + 250_000, ts.serialize_cdr(
                    T["std_msgs/msg/Float64"](float(volts)), "std_msgs/msg/Float64"))
    shutil.rmtree(path, ignore_errors=True)
    tmp.rename(path)
    scratch.rmdir()
    return path


if __name__ == "__main__":
    out = Path(__file__).resolve().parent.parent / "recordings" / "bench_imu_ros2"
    make_bag(out)
    size = sum(p.stat().st_size for p in out.iterdir())
    print(f"wrote {out} ({size / 1e6:.2f} MB)")
