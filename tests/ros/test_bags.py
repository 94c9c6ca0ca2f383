"""ROS bags as recordings: the three rosbags formats and an independently written MCAP."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.ingest import read_recording
from noisecal.ingest.ros_bag import BagSource, RosInput
from noisecal.ingest.ros_messages import covariance_matrix, quaternion_to_rpy

from .bags import FORMATS, T0, imu_data, write_bag

pytest.importorskip("rosbags")


@pytest.fixture(scope="module")
def data():
    return imu_data()


@pytest.fixture(scope="module")
def bags(tmp_path_factory, data):
    root = tmp_path_factory.mktemp("bags")
    return {fmt: write_bag(root / fmt.replace("-", "_"), fmt, data) for fmt in FORMATS}


@pytest.mark.parametrize("fmt", FORMATS)
def test_stamps_exact_and_values_as_written(bags, data, fmt):
    """Time is header.stamp to the nanosecond (never the record time) and every field
    comes back as written, whichever writer made the bag: rosbags' ROS 1, ROS 2
    sqlite3 and ROS 2 MCAP writers, and the mcap + mcap-ros2-support libraries
    (a reference implementation independent of the reader). REP 145: header.stamp is
    the measurement time."""
    src = BagSource(bags[fmt], "/imu")
    assert src._time.dtype == np.int64
    np.testing.assert_array_equal(src._time, data.stamps)
    rec = read_recording(RosInput(str(bags[fmt]), "/imu"))
    np.testing.assert_array_equal(np.round(rec.time * 1e9).astype(np.int64),
                                  data.stamps - T0)
    assert abs(rec.start_time - T0 / 1e9) < 1e-6
    for k, a in enumerate("xyz"):
        np.testing.assert_array_equal(rec.channel(f"angular_velocity.{a}"), data.gyro[:, k])
        np.testing.assert_array_equal(rec.channel(f"linear_acceleration.{a}"), data.accel[:, k])
    assert rec.unit_of("angular_velocity.x") == "rad/s"
    assert rec.unit_of("linear_acceleration.z") == "m/s**2"
    # Stamps are regular: no jitter, though the record time jitters by periods.
    assert rec.jitter < 1e-9 and abs(rec.period - 5_000_017e-9) < 1e-12
    assert rec.source.format == {"ros1": "ros1-bag", "ros2-sqlite3": "ros2-sqlite3"}.get(
        fmt, "ros2-mcap")


def test_record_minus_stamp_delay_reported(bags, data):
    """The record-minus-stamp delay (transport latency) is reported from the bag's record
    times, not used as time. Common practice, no source."""
    rec = read_recording(RosInput(str(bags["ros2-mcap"]), "/imu"))
    d = (data.recorded - data.stamps) / 1e9
    line = next(n for n in rec.source.notes if n.startswith("record time minus"))
    assert f"median {np.median(d):.6g} s" in line
    assert f"{d.min():.6g} … {d.max():.6g} s" in line
    assert any("header.stamp (the measurement instant)" in n for n in rec.source.notes)
    # A bag of one topic needs no --topic.
    alone = read_recording(bags["ros2-mcap"])
    assert alone.channels == rec.channels and alone.source.sha256 == rec.source.sha256


def test_orientation_as_roll_pitch_yaw(bags, data):
    """Quaternions become roll, pitch, yaw (REP 103 fixed axes X-Y-Z), yaw unwrapped near
    ±π; checked against scipy's Rotation ('xyz' extrinsic = roll, pitch, yaw)."""
    from scipy.spatial.transform import Rotation

    rec = read_recording(RosInput(str(bags["ros1"]), "/imu"))
    ref = Rotation.from_quat(data.quat).as_euler("xyz")
    np.testing.assert_allclose(rec.channel("orientation.roll"), ref[:, 0], atol=1e-12)
    np.testing.assert_allclose(rec.channel("orientation.pitch"), ref[:, 1], atol=1e-12)
    yaw = rec.channel("orientation.yaw")
    np.testing.assert_allclose(np.angle(np.exp(1j * (yaw - ref[:, 2]))), 0.0, atol=1e-12)
    assert np.max(np.abs(np.diff(yaw))) < 1.0  # unwrapped across ±π


def test_covariance_arrays_row_major():
    """Covariance arrays reshape row-major: element (i, j) is msg.covariance[k*i + j]
    (sensor_msgs/Imu 3×3, nav_msgs/Odometry 6×6; message definitions, value from memory)."""
    for k in (3, 6):
        m, state = covariance_matrix(np.arange(k * k, dtype=float) + 1.0, k)
        assert state == "provided"
        i, j = np.indices((k, k))
        np.testing.assert_array_equal(m, k * i + j + 1.0)
    assert covariance_matrix([-1.0] + [0.0] * 8, 3) == (None, "not provided")
    assert covariance_matrix([0.0] * 9, 3) == (None, "unknown")
    assert covariance_matrix([np.nan] * 36, 6) == (None, "not provided")
    assert covariance_matrix([1.0] * 9, 3, kind=0) == (None, "unknown")


@pytest.mark.parametrize("fmt", ["ros1", "mcap-lib"])
def test_driver_covariances_read_with_conventions(tmp_path, fmt):
    """The driver's arrays as written: a matrix where provided, -1 in element 0 = not
    provided (then no orientation channels), all zeros = unknown, NaN = not provided
    (sensor_msgs/Imu definition, value from memory)."""
    d = imu_data(n=50, covariances={"orientation_covariance": np.r_[-1.0, np.zeros(8)],
                                    "linear_acceleration_covariance": np.full(9, np.nan)})
    src = BagSource(write_bag(tmp_path / "b", fmt, d), "/imu")
    m, state = src.covariances["angular_velocity_covariance"]
    assert state == "provided"
    np.testing.assert_array_equal(m, (np.arange(1.0, 10.0) * 1e-6).reshape(3, 3))
    assert m[0, 1] == 2e-6 and m[1, 0] == 4e-6  # row-major, not column-major
    assert src.covariances["orientation_covariance"] == (None, "not provided")
    assert src.covariances["linear_acceleration_covariance"] == (None, "not provided")
    assert not any(h.startswith("orientation.") for h in src.headers)
    d = imu_data(n=50)
    src = BagSource(write_bag(tmp_path / "c", fmt, d), "/imu")
    assert src.covariances["linear_acceleration_covariance"] == (None, "unknown")
    np.testing.assert_array_equal(src.covariances["orientation_covariance"][0],
                                  np.diag([1e-4, 2e-4, 3e-4]))


def test_quaternion_identity_and_quarter_turn():
    """Identity → zeros; a quarter turn about Z (w = x... = cos/sin of π/4) → yaw π/2
    (common practice, no source)."""
    r, p, y = quaternion_to_rpy([0, 0], [0, 0], [0, np.sin(np.pi / 4)], [1, np.cos(np.pi / 4)])
    np.testing.assert_allclose([r[1], p[1], y[1]], [0, 0, np.pi / 2], atol=1e-15)
    np.testing.assert_allclose([r[0], p[0], y[0]], 0.0, atol=1e-15)


def test_header_less_message_uses_record_time_and_says_so(tmp_path):
    """std_msgs/Float64 has no header: the record time is the time, with a note."""
    d = imu_data(n=20)
    rec_ns = T0 + np.arange(30, dtype=np.int64) * 10_000_000
    items = [(int(t), (lambda ts, v=float(k): ts.types["std_msgs/msg/Float64"](v)))
             for k, t in enumerate(rec_ns)]
    bag = write_bag(tmp_path / "f", "ros2-sqlite3", d,
                    extra=[("/level", "std_msgs/msg/Float64", items)])
    rec = read_recording(RosInput(str(bag), "/level"))
    np.testing.assert_array_equal(np.round(rec.time * 1e9).astype(np.int64), rec_ns - rec_ns[0])
    np.testing.assert_array_equal(rec.channel("data"), np.arange(30.0))
    assert any("no header: the bag's record time" in n for n in rec.source.notes)


def test_ros2_bag_without_stored_definitions(tmp_path, data):
    """A ROS 2 sqlite3 bag whose message definitions are not stored (rosbag2 before
    Iron stored none) reads with the standard definitions: same stamps and values as
    the bag with them (common practice, no source: sensor_msgs/Imu is the same message
    in every ROS 2 distribution)."""
    import sqlite3

    bag = write_bag(tmp_path / "humble", "ros2-sqlite3", data)
    for db in bag.glob("*.db3"):
        con = sqlite3.connect(db)
        con.execute("DELETE FROM message_definitions")
        con.commit()
        con.close()
    src = BagSource(bag, "/imu")
    np.testing.assert_array_equal(src._time, data.stamps)
    rec = read_recording(RosInput(str(bag), "/imu"))
    np.testing.assert_array_equal(rec.channel("angular_velocity.y"), data.gyro[:, 1])
    assert any("definitions" in n for n in rec.source.notes), rec.source.notes
