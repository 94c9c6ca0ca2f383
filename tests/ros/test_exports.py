"""ROS CSV exports and Parquet timestamp columns as recordings."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.errors import InputError
from noisecal.ingest import read_recording
from noisecal.ingest.ros_bag import RosInput

from .bags import T0, imu_data, ros2_export_csv, rostopic_csv, write_bag


@pytest.fixture(scope="module")
def data():
    return imu_data(n=400, seed=4)


def _ns(rec):
    return np.round(rec.time * 1e9).astype(np.int64)


@pytest.mark.parametrize("style", ["ros2", "rostopic"])
def test_export_reads_as_the_bag_does(tmp_path, data, style):
    """Both export header styles give the bag's channels, units and exact stamps:
    sec and nanosec merged as integers (a float of 1.7e18 ns would be off by
    hundreds of ns), rows sorted by stamp. Header styles: ROS 2 field paths and
    rostopic echo -p (common practice, no source)."""
    write = ros2_export_csv if style == "ros2" else rostopic_csv
    csv = write(tmp_path / "imu.csv", data)
    bag = write_bag(tmp_path / "b", "ros2-sqlite3", data)
    a = read_recording(csv, use_cache=False)
    b = read_recording(RosInput(str(bag), "/imu"))
    assert a.channels == b.channels and a.units == b.units
    np.testing.assert_array_equal(_ns(a), data.stamps - T0)
    for ch in a.channels:
        np.testing.assert_array_equal(a.channel(ch), b.channel(ch))
    assert a.source.format == "ros-csv"
    assert any("sensor_msgs/Imu field names" in n for n in a.source.notes)
    if style == "rostopic":
        d = (data.recorded - data.stamps) / 1e9
        assert any(f"median {np.median(d):.6g} s" in n for n in a.source.notes)
        assert any("angular_velocity_covariance: diagonal 1e-06, 5e-06, 9e-06" in n
                   for n in a.source.notes)


def test_export_with_type_takes_its_units(tmp_path):
    """--type nav_msgs/msg/Odometry: positions in m, speeds in m/s, rates in rad/s
    (REP 103); the quaternion becomes roll, pitch, yaw."""
    n = 50
    stamps = T0 + np.arange(n, dtype=np.int64) * 20_000_000
    cells = ["header.stamp.sec", "header.stamp.nanosec", "header.frame_id", "child_frame_id",
             "pose.pose.position.x", "pose.pose.position.y", "pose.pose.orientation.x",
             "pose.pose.orientation.y", "pose.pose.orientation.z", "pose.pose.orientation.w",
             "twist.twist.linear.x", "twist.twist.angular.z"]
    rows = [",".join(cells)]
    for k, s in enumerate(stamps):
        yaw = 0.01 * k
        rows.append(",".join(map(str, [s // 10**9, s % 10**9, "odom", "base", 0.1 * k, 0.0,
                                       0.0, 0.0, np.sin(yaw / 2), np.cos(yaw / 2), 0.1,
                                       0.01])))
    csv = tmp_path / "odom.csv"
    csv.write_text("\n".join(rows) + "\n")
    with pytest.raises(InputError, match=r"--type .*time = header.stamp.sec \* 1000000000"):
        read_recording(csv, use_cache=False)
    rec = read_recording(RosInput(str(csv), None, "nav_msgs/Odometry"), use_cache=False)
    assert dict(zip(rec.channels, rec.units)) == {
        "pose.pose.position.x": "m", "pose.pose.position.y": "m",
        "twist.twist.linear.x": "m/s", "twist.twist.angular.z": "rad/s",
        "pose.pose.orientation.roll": "rad", "pose.pose.orientation.pitch": "rad",
        "pose.pose.orientation.yaw": "rad"}
    np.testing.assert_allclose(rec.channel("pose.pose.orientation.yaw"), 0.01 * np.arange(n),
                               atol=1e-12)
    with pytest.raises(InputError, match="not a numeric field of sensor_msgs/msg/Imu"):
        read_recording(RosInput(str(csv), None, "sensor_msgs/Imu"), use_cache=False)


def test_bad_nanoseconds_named(tmp_path):
    """A nanosec field outside 0 … 999999999 is refused with its row."""
    csv = tmp_path / "x.csv"
    csv.write_text("header.stamp.sec,header.stamp.nanosec,angular_velocity.x\n"
                   "1,0,0.1\n1,1000000000,0.2\n2,0,0.3\n")
    with pytest.raises(InputError, match="data row 2.*nanosec"):
        read_recording(csv, use_cache=False)


@pytest.mark.parametrize("tz", [None, "UTC"])
def test_parquet_datetime_index_is_the_time(tmp_path, tz):
    """A pandas datetime index (stored last, as Arrow timestamp[ns]) is read as the time
    in exact nanoseconds; pandas is the independent writer here."""
    pd = pytest.importorskip("pandas")
    ns = T0 + np.cumsum(np.r_[0, np.full(2999, 10_000_003)])
    t = pd.to_datetime(ns, unit="ns", utc=tz is not None)
    y = np.random.default_rng(2).normal(size=3000)
    pd.DataFrame({"gyro_x [deg/s]": y}, index=pd.Index(t, name="stamp")).to_parquet(
        tmp_path / "r.parquet")
    for cache in (False, True, True):
        rec = read_recording(tmp_path / "r.parquet", use_cache=cache)
        np.testing.assert_array_equal(_ns(rec), ns - ns[0])
        np.testing.assert_allclose(rec.channel("gyro_x"), np.deg2rad(y), rtol=1e-15)
    pd.DataFrame({"a": t, "b": t, "x [m]": y}).to_parquet(tmp_path / "two.parquet")
    with pytest.raises(InputError, match="2 timestamp columns"):
        read_recording(tmp_path / "two.parquet", use_cache=False)
