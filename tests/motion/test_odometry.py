"""Odometry motion model: kinematics, quantization, α recovery, slip, the job."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import yaml

from noisecal.fit.odometry import decompose, encoder_pose, fit_odometry, quantization

ROOT = Path(__file__).resolve().parents[2]
ALPHA = np.array([0.02, 5e-4, 1e-3, 2e-3])


def sample_motion_model_odometry(odo: np.ndarray, alpha, rng) -> np.ndarray:
    """Thrun, Burgard & Fox, *Probabilistic Robotics* (2005), Table 5.6: the true
    motion drawn given the odometry's (δrot1, δtrans, δrot2), variance form."""
    a1, a2, a3, a4 = alpha
    r1, t, r2 = odo.T
    return np.column_stack([
        r1 - rng.normal(0, np.sqrt(a1 * r1 ** 2 + a2 * t ** 2)),
        t - rng.normal(0, np.sqrt(a3 * t ** 2 + a4 * (r1 ** 2 + r2 ** 2))),
        r2 - rng.normal(0, np.sqrt(a1 * r2 ** 2 + a2 * t ** 2))])


def odometry_reports(rng, n=600):
    """Odometry motions of a platform that drives, curves and turns on the spot."""
    kind = rng.integers(0, 3, n)
    trans = np.where(kind == 2, 0.0, rng.uniform(0.05, 0.6, n))
    rot = np.where(kind == 0, 0.0, rng.uniform(-0.4, 0.4, n))
    return np.column_stack([rot, trans, np.where(kind == 2, rng.uniform(-0.3, 0.3, n), rot)])


def test_decompose_round_trip():
    """Composing (δrot1, δtrans, δrot2) from a pose and decomposing the result gives
    them back (odometry motion model, Thrun et al. 2005, eq. 5.37–5.39)."""
    rng = np.random.default_rng(1)
    m = odometry_reports(rng, 200)
    m[m[:, 1] == 0, 0] = 0.0
    th0 = rng.uniform(-np.pi, np.pi, 200)
    x1 = 1.0 + m[:, 1] * np.cos(th0 + m[:, 0])
    y1 = -2.0 + m[:, 1] * np.sin(th0 + m[:, 0])
    got = np.column_stack(decompose(np.full(200, 1.0), np.full(200, -2.0), th0, x1, y1,
                                    th0 + m[:, 0] + m[:, 2]))
    np.testing.assert_allclose(got, m, atol=1e-12)


def test_encoder_pose_on_a_circle():
    """Differential drive: wheels at constant speeds v_l, v_r move the platform on a
    circle of radius b/2 · (v_r + v_l)/(v_r − v_l) (common practice, no source)."""
    b, r, tpr = 0.6, 0.1, 1e9  # so many counts that quantization vanishes
    per_tick = 2 * np.pi * r / tpr
    steps = 2000
    left = np.arange(steps + 1) * 0.001 / per_tick
    right = np.arange(steps + 1) * 0.002 / per_tick
    x, y, th = encoder_pose(left, right, tpr, r, b)
    radius = b / 2 * (0.002 + 0.001) / (0.002 - 0.001)
    np.testing.assert_allclose(np.hypot(x, y - radius), radius, rtol=1e-6)
    assert th[-1] == pytest.approx(steps * 0.001 / b, rel=1e-9)


def test_quantization_is_q_squared_over_twelve():
    """A wheel counted in ticks of q errs, at each reading, by a uniform error of
    variance q²/12 (Widrow & Kollár, *Quantization Noise*, 2008); a window's wheel
    distance, from two readings far apart, by 2·q²/12; the translation (mean of two
    wheels moving independently) by q²/12 — the floor the fit adds."""
    rng = np.random.default_rng(2)
    tpr, r, b = 512, 0.1, 0.5
    q = quantization(tpr, r, b)
    per_tick = q["tick_m"]
    left = np.cumsum(rng.uniform(0.01, 0.02, 200_001))
    right = np.cumsum(rng.uniform(0.01, 0.02, 200_001))
    ticks_l = np.floor(left / per_tick + rng.uniform())
    ticks_r = np.floor(right / per_tick + rng.uniform())
    k = 10
    wheel = np.diff(ticks_l[::k]) * per_tick - np.diff(left[::k])
    assert np.var(wheel) == pytest.approx(2 * per_tick ** 2 / 12, rel=0.03)
    trans = 0.5 * ((np.diff(ticks_l[::k]) + np.diff(ticks_r[::k])) * per_tick -
                   np.diff(left[::k]) - np.diff(right[::k]))
    assert np.var(trans) == pytest.approx(q["translation_variance_m2"], rel=0.03)


def coverage(runs: int, first_seed: int) -> dict:
    hits = np.zeros(4)
    for s in range(runs):
        rng = np.random.default_rng(first_seed + s)
        odo = odometry_reports(rng)
        true = sample_motion_model_odometry(odo, ALPHA, rng)
        m = fit_odometry(odo, true, np.arange(odo.shape[0]) * 0.2, 0.2)
        for i in range(4):
            e = m.alpha[f"alpha{i + 1}"]
            hits[i] += (e.lower <= ALPHA[i] <= e.upper) if e.resolved else ALPHA[i] <= e.upper
    result = hits / runs
    print(f"alpha coverage over {runs} runs: {result}")
    return result


def test_alpha_coverage_fast_set():
    """α1…α4 of odometry drawn by Thrun et al.'s sample_motion_model_odometry
    (Table 5.6) are covered by their 95 % intervals in at least 85 % of 60 seeded
    runs (tripwire; binomial standard error 2.8 %)."""
    assert np.all(coverage(60, 100) >= 0.85)


@pytest.mark.slow
def test_alpha_coverage_slow_set():
    """400 seeded runs: each α's 95 % interval covers 93–97 %."""
    cov = coverage(400, 10_000)
    assert np.all((cov >= 0.93) & (cov <= 0.97)), cov


def test_slip_is_found_and_left_out():
    """Windows where the wheels turn twice as far as the platform moves are flagged
    as one slip episode and do not inflate α3 (common practice, no source)."""
    rng = np.random.default_rng(3)
    odo = odometry_reports(rng)
    odo[300:306, 1] = 0.5
    true = sample_motion_model_odometry(odo, ALPHA, rng)
    true[300:306, 1] = 0.25
    m = fit_odometry(odo, true, np.arange(odo.shape[0]) * 0.2, 0.2)
    assert np.flatnonzero(m.slip).tolist() == list(range(300, 306))
    assert len(m.episodes) == 1 and m.episodes[0]["start_s"] == pytest.approx(60.0)
    a3 = m.alpha["alpha3"]
    assert a3.lower <= ALPHA[2] <= a3.upper


def test_demo_encoder_run(tmp_path, run_cli):
    """The committed encoder run (tools/make_drive_recordings.py documents its
    truth: α = 0.010, 4.0e-4, 9.0e-4, 4.0e-4; 20 ms latency; slip at 60–62 s and
    150–152 s): every α and the latency inside their intervals, both slips found."""
    out = tmp_path / "enc.yaml"
    rec = ROOT / "recordings"
    status, _, stderr = run_cli("motion", rec / "encoder_ticks.csv", "--truth",
                                rec / "encoder_truth.csv", "--odometry",
                                rec / "encoder_config.yaml", "-o", out, "--quiet")
    assert status == 0, stderr
    doc = yaml.safe_load(out.read_text())
    odo = doc["odometry"]
    for key, truth in zip(("alpha1", "alpha2", "alpha3", "alpha4"), (0.010, 4e-4, 9e-4, 4e-4)):
        e = odo[key]
        assert (e["ci95"][0] <= truth <= e["ci95"][1]) if "ci95" in e else \
            truth <= e["upper_bound"], (key, e)
    lo, hi = doc["alignment"]["time_offset"]["ci95"]
    assert lo <= 0.020 <= hi
    starts = [e["start_s"] for e in odo["slip"]["episodes"]]
    assert len(starts) == 2 and abs(starts[0] - 60) < 1 and abs(starts[1] - 150) < 1
    Q = np.array(odo["step"]["Q_pose"])
    assert Q.shape == (3, 3) and np.allclose(Q, Q.T) and np.all(np.linalg.eigvalsh(Q) >= 0)
    assert (tmp_path / "enc.png").stat().st_size > 10_000


@pytest.mark.parametrize("config, expect", [
    ("encoders: {left: l, right: r, ticks_per_rev: 0, wheel_radius_m: 0.1, "
     "track_width_m: 0.5}\n", "'ticks_per_rev' must be a positive finite number"),
    ("increments: {dx: a}\n", "names the channels dx, dy"),
    ("window_s: 0.5\n", "exactly one of 'encoders:'"),
])
def test_bad_config(tmp_path, run_cli, config, expect):
    cfg = tmp_path / "odo.yaml"
    cfg.write_text(config)
    rec = ROOT / "recordings"
    status, _, stderr = run_cli("motion", rec / "encoder_ticks.csv", "--truth",
                                rec / "encoder_truth.csv", "--odometry", cfg, "-o",
                                tmp_path / "o.yaml", "--quiet")
    assert status == 2 and len(stderr.strip().splitlines()) == 1 and expect in stderr, stderr
    assert not (tmp_path / "o.yaml").exists()
