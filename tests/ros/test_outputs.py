"""From a bag to the numbers and files a filter reads: the same estimates as from a CSV of
the same data, ROS 2 parameter files that parse back to the same numbers, covariance
arrays in the blocks, values in the input's units."""

from __future__ import annotations

import math

import numpy as np
import pytest
import yaml

import noisecal
from noisecal.export import yaml_block
from noisecal.export.ros_params import covariance_arrays

from .bags import T0, imu_data, write_bag

pytest.importorskip("rosbags")

GYRO = [f"angular_velocity.{a}" for a in "xyz"]


@pytest.fixture(scope="module")
def same_data(tmp_path_factory):
    """One bench recording as a ROS 2 MCAP bag and as a CSV of the same numbers."""
    root = tmp_path_factory.mktemp("same")
    d = imu_data(n=2100, seed=7, gyro_sigma=0.004)
    bag = write_bag(root / "bench", "ros2-mcap", d)
    csv = root / "bench.csv"
    with open(csv, "w") as fh:
        fh.write("time [ns]," + ",".join(f"{c} [rad/s]" for c in GYRO) + "\n")
        for s, g in zip(d.stamps, d.gyro):
            fh.write(f"{s}," + ",".join(repr(float(v)) for v in g) + "\n")
    from_bag = noisecal.static(noisecal.read(bag, topic="/imu"), channels=GYRO, reps=20, seed=5)
    from_csv = noisecal.static(noisecal.read(csv, cache=False), channels=GYRO, reps=20, seed=5)
    return root, bag, from_bag, from_csv


def test_bag_gives_the_numbers_a_csv_gives(same_data):
    """Static job: every term from the bag equals the term from a CSV of the same data,
    value, interval and unit (the CSV path is the project's long-tested reader)."""
    _, _, a, b = same_data
    pa, pb = a.parameters(), b.parameters()
    assert [(p.channel, p.name) for p in pa] == [(p.channel, p.name) for p in pb]
    for x, y in zip(pa, pb):
        assert x.estimate == y.estimate, (x.channel, x.name)
    np.testing.assert_array_equal(a.block.R, b.block.R)
    # White noise near the simulated one: N = sigma * sqrt(period) (common practice, no source).
    n = a.estimate("angular_velocity.x", "white_noise")
    assert n.lower < 0.004 * math.sqrt(5_000_017e-9) < n.upper


def test_parameter_file_parses_back(same_data):
    """The ROS 2 parameter file (``<node>: ros__parameters:``) loads with a YAML parser to
    the very floats of R = N^2/dt, row-major 3×3 (sensor_msgs/Imu), and the REP 145
    stddev is the root of the largest variance (REP 145, value from memory)."""
    _, _, res, _ = same_data
    text = noisecal.ros_parameters(res, node="imu_driver")
    doc = yaml.safe_load(text)
    assert list(doc) == ["imu_driver"] and list(doc["imu_driver"]) == ["ros__parameters"]
    params = doc["imu_driver"]["ros__parameters"]
    cov = params["angular_velocity_covariance"]
    assert len(cov) == 9 and all(type(v) is float for v in cov)
    np.testing.assert_array_equal(np.reshape(cov, (3, 3)), res.block.R)
    assert params["angular_velocity_stddev"] == math.sqrt(max(np.diag(res.block.R)))
    assert "linear_acceleration_covariance" not in params
    assert "A starting point" in text
    with pytest.raises(noisecal.ParameterError, match="node"):
        noisecal.ros_parameters(res, node="bad name")


def test_block_carries_the_arrays(same_data):
    """The static block carries filter.ros_covariance, the same R rounded like the block's
    matrices; the statistic is spelled out."""
    _, _, res, _ = same_data
    doc = yaml.safe_load(res._render())
    arr = doc["filter"]["ros_covariance"]["angular_velocity_covariance"]
    np.testing.assert_allclose(np.reshape(arr, (3, 3)), res.block.R, rtol=1e-5)
    assert doc["layout"] == "noisecal.static/2"
    assert doc["channels"]["angular_velocity.x"]["allan_points"]["kind"] == \
        "overlapping_allan_deviation"
    assert any(n.startswith("topic /imu") for n in doc["recording"]["notes"])


def test_cli_as_ros(same_data, run_cli):
    """noisecal static BAG --topic … --as ros writes the parameter file at -o."""
    root, bag, res, _ = same_data
    out = root / "imu_params.yaml"
    status, _, err = run_cli("static", bag, "--topic", "/imu", "--channels", ",".join(GYRO),
                             "--reps", "20", "--seed", "5", "--as", "ros", "--node", "imu",
                             "-o", out, "--quiet")
    assert status == 0, err
    params = yaml.safe_load(out.read_text())["imu"]["ros__parameters"]
    np.testing.assert_array_equal(np.reshape(params["angular_velocity_covariance"], (3, 3)),
                                  res.block.R)
    with pytest.raises(SystemExit) as stop:  # argparse: checked before any work
        run_cli("static", bag, "--topic", "/imu", "--node", "bad name", "-o", root / "x.yaml")
    assert stop.value.code == 2 and not (root / "x.yaml").exists()


def test_six_by_six_arrays_row_major():
    """A pose R over x, y, z, roll, pitch, yaw in any channel order lands in the
    36-element array at [6 i + j] in the message's order (geometry_msgs/PoseWithCovariance,
    value from memory); an array with an uncharacterised row is not written."""
    rows = ["pose.position.x", "pose.position.y", "pose.position.z",
            "pose.orientation.roll", "pose.orientation.pitch", "pose.orientation.yaw"]
    units = ["m", "m", "m", "rad", "rad", "rad"]
    perm = [5, 0, 3, 1, 4, 2]
    A = np.arange(36.0).reshape(6, 6)
    R = A + A.T
    order = [rows[p] for p in perm]
    Rp = R[np.ix_(perm, perm)]
    arrays, missing = covariance_arrays(order, [units[p] for p in perm], Rp)
    assert list(arrays) == ["pose.covariance"] and not missing
    i, j = np.indices((6, 6))
    np.testing.assert_array_equal(np.asarray(arrays["pose.covariance"])[6 * i + j], R)
    arrays, missing = covariance_arrays(rows[:5], units[:5], R[:5, :5])
    assert arrays == {} and missing == ["pose.covariance (no pose.pose.orientation.yaw)"]


def test_units_customary_beside_si(tmp_path, run_cli):
    """--units customary: a [deg/s] channel's white noise also in deg/s/Hz^0.5, the SI
    value times 180/pi (unit arithmetic, common practice, no source); SI unchanged."""
    rng = np.random.default_rng(3)
    csv = tmp_path / "r.csv"
    y = rng.normal(0.0, 0.2, 2048)
    with open(csv, "w") as fh:
        fh.write("time [s],gyro_x [deg/s]\n")
        for k, v in enumerate(y):
            fh.write(f"{k * 0.01:.2f},{float(v)!r}\n")
    out = tmp_path / "s.yaml"
    status, _, err = run_cli("static", csv, "--reps", "20", "--units", "customary", "-o", out,
                             "--quiet")
    assert status == 0, err
    n = yaml.safe_load(out.read_text())["channels"]["gyro_x"]["white_noise"]
    c = n["in_input_units"]
    assert n["unit"] == "rad/s/Hz^0.5" and c["unit"] == "deg/s/Hz^0.5"
    assert c["value"] == pytest.approx(n["value"] * 180 / math.pi, rel=1e-12)
    assert c["ci95"] == pytest.approx([v * 180 / math.pi for v in n["ci95"]], rel=1e-12)
    assert yaml_block.verify(yaml.safe_load(out.read_text())) == "ok"


def test_motion_from_one_bag_two_topics(tmp_path, run_cli):
    """motion BAG --topic /pose --truth-topic /truth: both read from the same bag by their
    stamps; the 0.03 s sensor latency is found and the 6×6 pose.covariance written
    (REP 145 stamps; geometry_msgs/PoseWithCovariance layout, value from memory)."""
    from .drive_bag import write_drive

    bag = write_drive(tmp_path / "drive", seconds=30.0)
    out = tmp_path / "m.yaml"
    status, _, err = run_cli("motion", bag, "--topic", "/pose", "--truth-topic", "/truth",
                             "--as", "ros", "--node", "localization", "-o", out,
                             "--plot", tmp_path / "m.png", "--quiet")
    assert status == 0, err
    params = yaml.safe_load(out.read_text())["localization"]["ros__parameters"]
    cov = np.reshape(params["pose_covariance"], (6, 6))
    np.testing.assert_allclose(np.sqrt(np.diag(cov)), [0.02, 0.03, 0.05, 0.01, 0.01, 0.02],
                               rtol=0.15)
    np.testing.assert_array_equal(cov, cov.T)
    status, _, err = run_cli("motion", bag, "--topic", "/pose", "-o", tmp_path / "n.yaml")
    assert status == 2 and "--truth-topic" in err


def test_allan_points_sidecar(tmp_path, run_cli):
    """--allan-points sidecar: the tables leave the block for OUT.allan.yaml, equal to the
    inline ones; the block names the file and its SHA-256, a re-check reads the pair, and
    an edited side file is refused in one line (common practice, no source)."""
    rng = np.random.default_rng(11)
    csv = tmp_path / "r.csv"
    with open(csv, "w") as fh:
        fh.write("time [s],gyro_x [rad/s]\n")
        for k, v in enumerate(rng.normal(0.0, 1e-3, 2048)):
            fh.write(f"{k * 0.01:.2f},{float(v)!r}\n")
    common = ("--reps", "20", "--seed", "2", "--quiet")
    assert run_cli("static", csv, "-o", tmp_path / "inline.yaml", *common)[0] == 0
    status, _, err = run_cli("static", csv, "-o", tmp_path / "short.yaml",
                             "--allan-points", "sidecar", *common)
    assert status == 0, err
    inline = yaml.safe_load((tmp_path / "inline.yaml").read_text())
    short = yaml.safe_load((tmp_path / "short.yaml").read_text())
    side = yaml.safe_load((tmp_path / "short.allan.yaml").read_text())
    assert "allan_points" not in short["channels"]["gyro_x"]
    assert side["channels"]["gyro_x"] == inline["channels"]["gyro_x"]["allan_points"]
    ref = short["provenance"]["allan_points_file"]
    assert ref["path"] == "short.allan.yaml"
    import hashlib

    assert ref["sha256"] == hashlib.sha256((tmp_path / "short.allan.yaml").read_bytes()
                                           ).hexdigest()
    assert yaml_block.verify(short) == "ok"
    lines = lambda p: len((tmp_path / p).read_text().splitlines())  # noqa: E731
    assert lines("short.yaml") <= lines("inline.yaml") - 8  # one table: 9 lines
    status, out, err = run_cli("recheck", tmp_path / "short.yaml", csv)
    assert status in (0, 1, 3) and "re-check (static)" in out, err
    (tmp_path / "short.allan.yaml").write_text(
        (tmp_path / "short.allan.yaml").read_text() + "# edited\n")
    status, _, err = run_cli("recheck", tmp_path / "short.yaml", csv)
    assert status == 2 and len(err.strip().splitlines()) == 1 and "SHA-256" in err
