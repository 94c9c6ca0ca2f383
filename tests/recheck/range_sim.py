"""Simulated range sensor whose noise grows with range, σ² = a + b·r², against the
truth pose of a platform weaving about a beacon (for re-check tests)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

TRUTH_HZ, SENSOR_HZ = 50.0, 25.0
A, B = 0.05 ** 2, 0.02 ** 2
"""The law's true coefficients: m² and m²/m² (σ 0.21 m at 10 m, 0.60 m at 30 m)."""
BEACON = (0.0, 0.0)


def _pose(t, near, far, period):
    """Platform pose (x, y, yaw) weaving between ranges near and far of the beacon."""
    mid, amp = (near + far) / 2, (far - near) / 2
    r = mid + amp * np.sin(2 * np.pi * t / period)
    ang = 0.05 * t + 0.3 * np.sin(2 * np.pi * t / (0.7 * period))
    x, y = r * np.cos(ang), r * np.sin(ang)
    yaw = np.unwrap(np.arctan2(np.gradient(y, t), np.gradient(x, t)))
    return x, y, yaw


def write_drive(folder: Path, seed: int, near: float = 5.0, far: float = 15.0,
                duration: float = 120.0, scale: float = 1.0, latency: float = 0.05,
                outliers: float = 0.01, name: str = "drive"):
    """Write ``<name>_sensor.csv`` (range [m]) and ``<name>_truth.csv`` (x, y [m], yaw
    [rad]) into folder; the sensor's σ is ``scale`` × the law's at every range.

    Returns
    -------
    sensor, truth : Path
    """
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    period = float(rng.uniform(35, 60))
    tt = np.arange(0.0, duration, 1 / TRUTH_HZ)
    x, y, yaw = _pose(tt, near, far, period)
    truth = folder / f"{name}_truth.csv"
    with open(truth, "w") as fh:
        fh.write("time [s],x [m],y [m],yaw [rad]\n")
        np.savetxt(fh, np.column_stack([tt, x, y, yaw]), delimiter=",", fmt="%.6f")
    ts = np.arange(2.0, duration - 2.0, 1 / SENSOR_HZ) + rng.uniform(0, 1 / SENSOR_HZ)
    sx, sy, _ = _pose(ts - latency, near, far, period)
    r = np.hypot(sx - BEACON[0], sy - BEACON[1])
    e = rng.standard_normal(ts.shape[0]) * scale * np.sqrt(A + B * r * r)
    bad = rng.random(ts.shape[0]) < outliers
    e[bad] += rng.choice([-1, 1], bad.sum()) * rng.uniform(8, 20, bad.sum()) * np.sqrt(A + B * r[bad] ** 2)
    sensor = folder / f"{name}_sensor.csv"
    with open(sensor, "w") as fh:
        fh.write("time [s],range [m]\n")
        np.savetxt(fh, np.column_stack([ts, r + e]), delimiter=",", fmt="%.6f")
    return sensor, truth


def write_map(folder: Path, covariate: bool = False) -> Path:
    """The measurement map: range measures the beacon's range (optionally its covariate)."""
    path = folder / "map.yaml"
    path.write_text("measures: {range: beacon.B1.range}\n"
                    f"beacons: {{B1: [{BEACON[0]}, {BEACON[1]}]}}\n"
                    + ("covariate: beacon.B1.range\n" if covariate else ""))
    return path
