"""Make the motion demo recordings in recordings/ (invented data, fixed seed).

Scenario (invented): the "Marten-3" orchard rover follows a painted guide line
down the 400 m service lane of the fictional "Kestrel Yard" test site. A
downward-looking line sensor, the fictional "LG-7", reports the rover's
lateral offset from the line (mm, left positive) and its heading relative to
the line (deg) at 30 Hz. A tracking total station with an inertial unit gives
the truth pose (x, y in m, yaw in rad) at 50 Hz, on the same clock. The rover
weaves gently about the line while its speed runs from 0.3 to 2 m/s and back.

True values (the data are simulated from exactly these):

======================  =============================================================
sensor latency          45 ms (a sample stamped t saw the line at t − 0.045 s)
lateral_offset noise    σ² = (6 mm)² + (8 mm per m/s)²·v²  (v: speed; 6.0 mm at rest,
                        13.4 mm at 1.5 m/s)
heading_error noise     σ = 0.50 deg, first-order Gauss–Markov, correlation time 0.15 s
correlation             0.30 between the two (at equal speed)
outliers                2.0 % of the samples in bursts of 1–3 (a tar seam read as
                        the line): offset jumps of 50–150 mm, heading of 2–8 deg
bias                    offset +1.5 mm (sensor mounted off centre), heading 0
truth noise             1 mm in x and y, 0.02 deg in yaw (small beside the sensor's)
======================  =============================================================

The offset noise's correlation with heading noise is drawn at each sample's
own σ, so ρ = 0.30 at every speed. Run: ``python tools/make_drive_recordings.py``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

SEED = 20261202
DEG = np.pi / 180.0
EPOCH = 1_794_400_000.0  # an epoch start in November 2026, s
LANE_M = 400.0
SENSOR_HZ, TRUTH_HZ = 30.0, 50.0
LATENCY_S = 0.045
SIGMA0_M, SLOPE_M_PER_MPS = 0.006, 0.008
SIGMA_HEADING = 0.50 * DEG
TAU_HEADING_S = 0.15
RHO = 0.30
OUTLIER_RATE = 0.02
BIAS_OFFSET_M = 0.0015


def trajectory(t: np.ndarray):
    """The rover's true pose along the lane: x, y (m), yaw (rad), speed (m/s)."""
    duration = t[-1] - t[0]
    u = (t - t[0]) / duration
    speed = 0.3 + 1.7 * np.sin(np.pi * u) ** 2
    # Integrate the speed on the fine grid for the distance along the lane.
    dist = np.concatenate([[0.0], np.cumsum(0.5 * (speed[1:] + speed[:-1]) * np.diff(t))])
    y = 0.18 * np.sin(2 * np.pi * dist / 23.0) + 0.07 * np.sin(2 * np.pi * dist / 7.3 + 1.0)
    slope = np.gradient(y, dist)
    x = dist
    yaw = np.arctan(slope)
    return x, y, yaw, speed


def make_drive(folder: Path) -> None:
    rng = np.random.default_rng(SEED)
    # Fine time grid for the truth path: 1 kHz, long enough to cover the lane.
    duration = 400.0
    fine_t = np.arange(0.0, duration, 1e-3)
    x, y, yaw, speed = trajectory(fine_t)
    keep = x <= LANE_M
    fine_t, x, y, yaw, speed = fine_t[keep], x[keep], y[keep], yaw[keep], speed[keep]
    end = fine_t[-1]

    tt = np.arange(0.0, end, 1.0 / TRUTH_HZ)
    tx = np.interp(tt, fine_t, x) + rng.normal(0, 0.001, tt.shape)
    ty = np.interp(tt, fine_t, y) + rng.normal(0, 0.001, tt.shape)
    tyaw = np.interp(tt, fine_t, yaw) + rng.normal(0, 0.02 * DEG, tt.shape)
    with open(folder / "drive_truth.csv", "w") as fh:
        fh.write("# Invented demo data (tools/make_drive_recordings.py): truth pose of the\n")
        fh.write("# Marten-3 rover on the Kestrel Yard service lane, 50 Hz.\n")
        fh.write("time [s],x [m],y [m],yaw [rad]\n")
        for row in zip(EPOCH + tt, tx, ty, tyaw):
            fh.write(f"{row[0]:.4f},{row[1]:.5f},{row[2]:.5f},{row[3]:.6f}\n")

    ts = np.arange(0.5, end - 0.5, 1.0 / SENSOR_HZ)
    seen = ts - LATENCY_S  # the instant each sample saw the line
    sy = np.interp(seen, fine_t, y)
    syaw = np.interp(seen, fine_t, yaw)
    v = np.interp(seen, fine_t, speed)
    n = ts.shape[0]
    # Heading noise: AR(1) at the sensor rate, stationary σ.
    phi = np.exp(-1.0 / SENSOR_HZ / TAU_HEADING_S)
    w = rng.standard_normal(n)
    g = np.empty(n)
    g[0] = w[0]
    for i in range(1, n):
        g[i] = phi * g[i - 1] + np.sqrt(1 - phi ** 2) * w[i]
    # Offset noise correlated with heading noise at ρ, scaled by its speed law.
    e = RHO * g + np.sqrt(1 - RHO ** 2) * rng.standard_normal(n)
    sigma_off = np.sqrt(SIGMA0_M ** 2 + (SLOPE_M_PER_MPS * v) ** 2)
    offset = sy + BIAS_OFFSET_M + sigma_off * e
    heading = syaw + SIGMA_HEADING * g
    bad = np.zeros(n, bool)
    starts = np.flatnonzero(rng.random(n) < OUTLIER_RATE / 2.0)
    for s in starts:
        bad[s:s + rng.integers(1, 4)] = True
    k = np.count_nonzero(bad)
    offset[bad] += rng.choice([-1, 1], k) * rng.uniform(0.05, 0.15, k)
    heading[bad] += rng.choice([-1, 1], k) * rng.uniform(2, 8, k) * DEG
    with open(folder / "drive_linesensor.csv", "w") as fh:
        fh.write("# Invented demo data (tools/make_drive_recordings.py): LG-7 line sensor\n")
        fh.write(f"# on the Marten-3 rover, 30 Hz; {k} of {n} samples are outliers.\n")
        fh.write("time [s],lateral_offset [mm],heading_error [deg]\n")
        for row in zip(EPOCH + ts, offset * 1e3, heading / DEG):
            fh.write(f"{row[0]:.4f},{row[1]:.3f},{row[2]:.4f}\n")
    (folder / "drive_map.yaml").write_text(
        "# Measurement map of the LG-7 line sensor (invented demo).\n"
        "measures:\n"
        "  lateral_offset: path.offset\n"
        "  heading_error: path.heading\n"
        "pose: {x: x, y: y, yaw: yaw}\n"
        f"path: [[0, 0], [{LANE_M:g}, 0]]   # the painted line, m\n"
        "covariate: speed\n")
    print(f"drive: {n} sensor samples ({k} outliers, {k / n:.2%}), {tt.shape[0]} truth samples")


def main() -> None:
    folder = Path(__file__).resolve().parent.parent / "recordings"
    folder.mkdir(exist_ok=True)
    make_drive(folder)


if __name__ == "__main__":
    main()
