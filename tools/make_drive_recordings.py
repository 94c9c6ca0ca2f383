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
own σ, so ρ = 0.30 at every speed.

Second scenario, the encoder run: the same rover drives six 30 m orchard rows
joined by U-turns, with slow stretches, logging its wheel encoders (1024 counts
per revolution, wheel radius 0.16 m, track 0.62 m) at 50 Hz, against a truth
pose at 50 Hz (0.2 mm, 0.01 deg noise). Encoder timestamps are 20 ms late.
The rover's true speed and turn rate vary smoothly; the odometry's motion
over each 0.5 s window differs from the true one by the odometry motion model
(Thrun, Burgard & Fox 2005, ch. 5; variances at the odometry's own motion) with

    alpha1 = 0.010 rad²/rad², alpha2 = 4.0e-4 rad²/m², alpha3 = 9.0e-4 m²/m²,
    alpha4 = 4.0e-4 m²/rad²

except in two slip episodes (wet grass: the wheels turn 30 % more than the
rover moves) at 60–62 s and 150–152 s. Within a window the odometry follows the
true sub-steps, bent just enough to give that window's motion. The counts add
quantization of
q = 0.98 mm per wheel (q²/12 = 8.0e-8 m² per window translation).

Run: ``python tools/make_drive_recordings.py``.
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


ENC_HZ, WINDOW_S = 50.0, 0.5
TICKS_PER_REV, RADIUS_M, TRACK_M = 1024, 0.16, 0.62
ALPHA = (0.010, 4.0e-4, 9.0e-4, 4.0e-4)
ENC_LATENCY_S = 0.020
SLIPS_S = ((60.0, 62.0), (150.0, 152.0))


def _segments():
    """(seconds, speed m/s, turn rate rad/s) of the run: rows, slow ends, U-turns."""
    plan = [(3.0, 0.3, 0.0)]
    for row in range(6):
        side = 1 if row % 2 == 0 else -1
        plan += [(21.0, 1.2, 0.0), (4.0, 0.25, 0.0), (np.pi / 0.6, 0.5, side * 0.6),
                 (2.0, 0.3, 0.0)]
    return plan


def _profile(t):
    """Smooth speed (m/s) and turn rate (rad/s) at times t: each segment's values,
    blended into the next over 1 s by a raised cosine. Returns (speed, turn, end)."""
    plan = _segments()
    starts = np.concatenate([[0.0], np.cumsum([d for d, _, _ in plan])])
    speed = np.full_like(t, plan[0][1])
    turn = np.full_like(t, plan[0][2])
    for i in range(1, len(plan)):
        u = np.clip((t - starts[i] + 0.5) / 1.0, 0.0, 1.0)
        blend = 0.5 - 0.5 * np.cos(np.pi * u)
        speed += blend * (plan[i][1] - plan[i - 1][1])
        turn += blend * (plan[i][2] - plan[i - 1][2])
    return speed, turn, float(starts[-1])


def _window_motion(dth, ds):
    """(rot1, trans, rot2) of a window from its sub-steps (midpoint integration)."""
    theta = np.concatenate([[0.0], np.cumsum(dth)])
    mid = theta[:-1] + 0.5 * dth
    x, y = np.sum(ds * np.cos(mid)), np.sum(ds * np.sin(mid))
    trans = np.hypot(x, y)
    rot1 = np.arctan2(y, x) if trans > 1e-9 else 0.0
    return np.array([rot1, trans, theta[-1] - rot1])


def _variances(m):
    a1, a2, a3, a4 = ALPHA
    return np.array([a1 * m[0] ** 2 + a2 * m[1] ** 2,
                     a3 * m[1] ** 2 + a4 * (m[0] ** 2 + m[2] ** 2),
                     a1 * m[2] ** 2 + a2 * m[1] ** 2])


def _odometry_steps(dth, ds, target):
    """The true sub-steps bent (rotation offset and slope, length scale) until the
    window's motion equals ``target`` (three Newton steps suffice)."""
    k = dth.shape[0]
    ramp = (np.arange(k) - 0.5 * (k - 1)) / k
    p = np.zeros(3)

    def steps(q):
        return dth + q[0] / k + q[1] * ramp / k, ds * (1.0 + q[2])

    for _ in range(6):
        f = _window_motion(*steps(p)) - target
        J = np.empty((3, 3))
        for j in range(3):
            h = np.zeros(3)
            h[j] = 1e-7
            J[:, j] = (_window_motion(*steps(p + h)) - target - f) / 1e-7
        p = p - np.linalg.solve(J, f)
    return steps(p)


def make_encoder_run(folder: Path) -> None:
    rng = np.random.default_rng(SEED + 1)
    k = int(round(WINDOW_S * ENC_HZ))
    _, _, end = _profile(np.zeros(1))
    n_win = int(end / WINDOW_S)
    tau = np.arange(n_win * k + 1) / ENC_HZ
    mid = tau[:-1] + 0.5 / ENC_HZ
    speed, turn, _ = _profile(mid)
    ds_true = speed / ENC_HZ
    dth_true = turn / ENC_HZ
    ds_odo = np.empty_like(ds_true)
    dth_odo = np.empty_like(dth_true)
    for w in range(n_win):
        sl = slice(w * k, (w + 1) * k)
        true = _window_motion(dth_true[sl], ds_true[sl])
        # Odometry motion δo with δo − δtrue ~ N(0, var(δo)): the model's variances
        # are those of the odometry's own motion, so solve the fixed point.
        z = rng.standard_normal(3)
        odo = true.copy()
        for _ in range(20):
            odo = true + z * np.sqrt(_variances(odo))
        t0 = w * WINDOW_S
        if any(a <= t0 < b for a, b in SLIPS_S):
            odo[1] = true[1] * 1.3
        dth_odo[sl], ds_odo[sl] = _odometry_steps(dth_true[sl], ds_true[sl], odo)
    theta = np.concatenate([[0.0], np.cumsum(dth_true)])
    heading = theta[:-1] + 0.5 * dth_true
    tx = np.concatenate([[0.0], np.cumsum(ds_true * np.cos(heading))])
    ty = np.concatenate([[0.0], np.cumsum(ds_true * np.sin(heading))])
    left = np.concatenate([[0.0], np.cumsum(ds_odo - 0.5 * TRACK_M * dth_odo)])
    right = np.concatenate([[0.0], np.cumsum(ds_odo + 0.5 * TRACK_M * dth_odo)])
    per_tick = 2 * np.pi * RADIUS_M / TICKS_PER_REV
    offset = rng.uniform(0, 1, 2)  # where the first count edge falls
    lt = np.floor(left / per_tick + offset[0]).astype(int)
    rt = np.floor(right / per_tick + offset[1]).astype(int)
    with open(folder / "encoder_ticks.csv", "w") as fh:
        fh.write("# Invented demo data (tools/make_drive_recordings.py): wheel encoders of\n")
        fh.write("# the Marten-3 rover, 50 Hz, cumulative counts.\n")
        fh.write("time [s],left_ticks [1],right_ticks [1]\n")
        for row in zip(EPOCH + 1000.0 + tau + ENC_LATENCY_S, lt, rt):
            fh.write(f"{row[0]:.4f},{row[1]},{row[2]}\n")
    with open(folder / "encoder_truth.csv", "w") as fh:
        fh.write("# Invented demo data (tools/make_drive_recordings.py): truth pose of the\n")
        fh.write("# Marten-3 rover during the encoder run, 50 Hz.\n")
        fh.write("time [s],x [m],y [m],yaw [rad]\n")
        noisy = (tx + rng.normal(0, 2e-4, tx.shape), ty + rng.normal(0, 2e-4, ty.shape),
                 theta + rng.normal(0, 0.01 * DEG, theta.shape))
        for row in zip(EPOCH + 1000.0 + tau, *noisy):
            fh.write(f"{row[0]:.4f},{row[1]:.5f},{row[2]:.5f},{row[3]:.6f}\n")
    (folder / "encoder_config.yaml").write_text(
        "# Wheel odometry of the Marten-3 rover (invented demo).\n"
        "encoders: {left: left_ticks, right: right_ticks, ticks_per_rev: 1024,\n"
        "           wheel_radius_m: 0.16, track_width_m: 0.62}\n"
        "window_s: 0.5\n"
        "pose: {x: x, y: y, yaw: yaw}\n")
    print(f"encoder run: {n_win} windows of {WINDOW_S} s, {lt.shape[0]} encoder samples")


def main() -> None:
    folder = Path(__file__).resolve().parent.parent / "recordings"
    folder.mkdir(exist_ok=True)
    make_drive(folder)
    make_encoder_run(folder)


if __name__ == "__main__":
    main()
