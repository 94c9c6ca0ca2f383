"""The committed demo bag (tools/make_demo_bag.py documents its invented true values)."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
import yaml

pytest.importorskip("rosbags")

ROOT = Path(__file__).resolve().parents[2]
BAG = ROOT / "recordings" / "bench_imu_ros2"
GYRO = [f"angular_velocity.{a}" for a in "xyz"]


def test_demo_bag_recovers_the_documented_truth(tmp_path, run_cli):
    """Gyro white noise 4.363e-5 rad/s/√Hz inside each 95 % interval; the transport delay
    (1.5 ms + exponential of mean 0.6 ms: median 1.5 + 0.6 ln 2 = 1.916 ms) reported;
    the parameter file's per-sample variance inside R's interval around N²·50 = 9.52e-8."""
    out = tmp_path / "imu.yaml"
    status, _, err = run_cli("static", BAG, "--topic", "/imu/data", "--channels",
                             ",".join(GYRO), "--reps", "20", "-o", out, "--quiet")
    assert status == 0, err
    doc = yaml.safe_load(out.read_text())
    assert doc["recording"]["samples"] == 36000 and doc["recording"]["rate_hz"] == 50
    for ch in GYRO:
        lo, hi = doc["channels"][ch]["white_noise"]["ci95"]
        assert lo <= 4.363e-5 <= hi, ch
    note = next(n for n in doc["recording"]["notes"] if n.startswith("record time minus"))
    median = float(re.search(r"median ([0-9.e-]+) s", note).group(1))
    assert abs(median - (1.5e-3 + 0.6e-3 * math.log(2))) < 0.05e-3
    assert "the driver's orientation_covariance: not provided" in doc["recording"]["notes"]
    R = doc["filter"]
    cov = np.reshape(R["ros_covariance"]["angular_velocity_covariance"], (3, 3))
    low, high = np.diag(R["R_ci95"]["low"]), np.diag(R["R_ci95"]["high"])
    assert np.all(low <= 4.363e-5 ** 2 * 50) and np.all(4.363e-5 ** 2 * 50 <= high)
    assert np.all((low <= np.diag(cov)) & (np.diag(cov) <= high))
    status, _, err = run_cli("static", BAG, "-o", tmp_path / "x.yaml")
    assert status == 2 and "/battery_voltage (std_msgs/msg/Float64)" in err
