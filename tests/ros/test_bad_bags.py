"""A missing topic, a wrong type, a truncated bag: one line on stderr, exit 2, nothing written."""

from __future__ import annotations

import shutil

import pytest

from .bags import imu_data, write_bag

pytest.importorskip("rosbags")


def _one_line(status, out, err, *words):
    assert status == 2, (out, err)
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("noisecal: error: "), err
    assert "Traceback" not in err
    for w in words:
        assert w in lines[0], (w, lines[0])


@pytest.fixture(scope="module")
def two_topics(tmp_path_factory):
    d = imu_data(n=200)
    items = [(int(t), (lambda ts, v=float(k): ts.types["std_msgs/msg/Float64"](v)))
             for k, t in enumerate(d.recorded[:10])]
    root = tmp_path_factory.mktemp("two")
    return write_bag(root / "b", "ros2-mcap", d,
                     extra=[("/level", "std_msgs/msg/Float64", items),
                            ("/cam/info", "sensor_msgs/msg/CameraInfo", [])])


def test_missing_topic_lists_the_topics(two_topics, tmp_path, run_cli):
    """No --topic, or one not in the bag: the topics and their types are listed
    (common practice, no source)."""
    out = tmp_path / "o.yaml"
    _one_line(*run_cli("static", two_topics, "-o", out), "--topic",
              "/imu (sensor_msgs/msg/Imu)", "/level (std_msgs/msg/Float64)")
    _one_line(*run_cli("static", two_topics, "--topic", "/gyro", "-o", out), "'/gyro'",
              "/imu (sensor_msgs/msg/Imu)")
    _one_line(*run_cli("inspect", two_topics, "--topic", "/gyro"), "no topic")
    assert not out.exists()


def test_wrong_type(two_topics, tmp_path, run_cli):
    """--type naming another type than the topic's, or a topic of a type noisecal does not
    read, is refused in one line."""
    out = tmp_path / "o.yaml"
    _one_line(*run_cli("static", two_topics, "--topic", "/imu", "--type",
                       "nav_msgs/Odometry", "-o", out), "sensor_msgs/msg/Imu",
              "nav_msgs/msg/Odometry")
    _one_line(*run_cli("static", two_topics, "--topic", "/cam/info", "-o", out),
              "sensor_msgs/msg/CameraInfo", "not one noisecal reads")
    assert not out.exists()


def test_topic_on_a_csv_is_refused(tmp_path, run_cli):
    """--topic names a bag's topic; on a plain CSV it is an error, not ignored."""
    csv = tmp_path / "r.csv"
    csv.write_text("time [s],x [m]\n0,1\n1,2\n2,3\n")
    _one_line(*run_cli("inspect", csv, "--topic", "/imu"), "--topic applies to ROS bags")


@pytest.mark.parametrize("fmt", ["ros1", "ros2-sqlite3", "ros2-mcap", "mcap-lib"])
def test_truncated_bag(tmp_path, run_cli, fmt):
    """A bag cut off (a copy stopped half-way, a recorder killed) gives one line and
    exit 2 whichever format, and nothing is written (common practice, no source)."""
    bag = write_bag(tmp_path / "b", fmt, imu_data(n=400))
    if bag.is_dir():
        cut = tmp_path / "cut"
        shutil.copytree(bag, cut)
        data = next(p for p in cut.iterdir() if p.suffix in (".db3", ".mcap"))
    else:
        cut = tmp_path / f"cut{bag.suffix}"
        shutil.copy(bag, cut)
        data = cut
    raw = data.read_bytes()
    data.write_bytes(raw[: len(raw) // 2])
    out = tmp_path / "o.yaml"
    _one_line(*run_cli("static", cut, "--topic", "/imu", "-o", out), "cannot be read")
    assert not out.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(["cut", bag.name] if bag.is_dir()
                                                                else [cut.name, bag.name])
