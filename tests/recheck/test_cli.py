"""The recheck and history commands end to end: exit statuses, jobs, files."""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import yaml

from noisecal.fit.simulate import simulate_rate
from tests.conftest import rate_csv

ROOT = Path(__file__).resolve().parents[2]
REC = ROOT / "recordings"


def _rate(tmp_path, name, seed, n=2 ** 14, scale=1.0):
    y = simulate_rate(np.array([0, (1e-3 * scale) ** 2, 0, 0, 0]), 0.1, n,
                      np.random.default_rng(seed))
    return rate_csv(tmp_path / name, y, 0.1)


def test_exit_statuses_and_history(tmp_path, run_cli):
    """static --unit stores a run; recheck exits 0 for the same noise and 1 for white
    noise ×1.3, writes its block and the side-by-side Allan plot, and stores its run
    with the verdict; history prints both and exports one CSV row per run and
    parameter with a run column."""
    db = tmp_path / "h.db"
    base = tmp_path / "base.yaml"
    status, _, err = run_cli("static", _rate(tmp_path, "a.csv", 1), "-o", base, "--reps", 40,
                             "--quiet", "--unit", "SN-42", "--db", db)
    assert status == 0, err
    status, out, err = run_cli("recheck", base, _rate(tmp_path, "b.csv", 2), "-o",
                               tmp_path / "r.yaml", "--unit", "SN-42", "--db", db)
    assert status == 0, err
    doc = yaml.safe_load((tmp_path / "r.yaml").read_text())
    assert doc["verdict"] == "consistent" and doc["exit_status"] == 0
    assert doc["parameters"]["gyro_x"]["white_noise"]["verdict"] == "consistent"
    assert (tmp_path / "r.png").stat().st_size > 5000
    status, out, _ = run_cli("recheck", base, _rate(tmp_path, "c.csv", 3, scale=1.3))
    assert status == 1 and "CHANGED" in out
    status, out, _ = run_cli("history", "SN-42", "--db", db, "--export", "csv", "-o",
                             tmp_path / "h.csv", "--plot", tmp_path / "h.png")
    assert status == 0 and "verdict consistent" in out
    rows = list(csv.DictReader((tmp_path / "h.csv").open()))
    assert {r["run"] for r in rows} == {"1", "2"} and len(rows) == 10
    assert (tmp_path / "h.png").stat().st_size > 5000


def test_too_short_exits_three(tmp_path, run_cli):
    base = tmp_path / "base.yaml"
    y = simulate_rate(np.array([0, 1e-6, 0, 4e-8, 0]), 0.1, 2 ** 16, np.random.default_rng(5))
    assert run_cli("static", rate_csv(tmp_path / "long.csv", y, 0.1), "-o", base, "--reps", 40,
                   "--quiet")[0] == 0
    short = simulate_rate(np.array([0, 1e-6, 0, 4e-8, 0]), 0.1, 1500, np.random.default_rng(6))
    status, out, _ = run_cli("recheck", base, rate_csv(tmp_path / "short.csv", short, 0.1))
    assert status == 3 and "INCONCLUSIVE" in out and "× longer" in out and " 1× " not in out


def test_motion_and_targets_baselines(tmp_path, run_cli):
    """A motion and a camera baseline re-checked against their own recordings (the
    demo's): the job is re-run from the provenance with its settings; the motion block
    is consistent, the camera block consistent at a tolerance its 30 targets can
    decide."""
    m = tmp_path / "m.yaml"
    assert run_cli("motion", REC / "drive_linesensor.csv", "--truth", REC / "drive_truth.csv",
                   "--map", REC / "drive_map.yaml", "-o", m, "--quiet")[0] == 0
    status, out, err = run_cli("recheck", m, REC / "drive_linesensor.csv", "--truth",
                               REC / "drive_truth.csv")
    assert status == 0, out + err
    c = tmp_path / "c.yaml"
    assert run_cli("targets", REC / "yard_detections.csv", "--survey", REC / "yard_survey.csv",
                   "--camera", REC / "yard_camera.yaml", "-o", c)[0] == 0
    # 30 targets cannot pin σ_u to 25 %: inconclusive, and more targets is the remedy.
    status, out, err = run_cli("recheck", c, REC / "yard_detections.csv")
    assert status == 3 and "more targets" in out, out + err
    status, out, err = run_cli("recheck", c, REC / "yard_detections.csv", "--tolerance", 2)
    assert status == 0, out + err


def test_bad_baselines_exit_two(tmp_path, run_cli):
    bad = tmp_path / "bad.yaml"
    bad.write_text("layout: something-else\n")
    status, _, err = run_cli("recheck", bad, _rate(tmp_path, "a.csv", 1))
    assert status == 2 and "not a noisecal block" in err and len(err.strip().splitlines()) == 1
    status, _, err = run_cli("recheck", tmp_path / "missing.yaml", _rate(tmp_path, "b.csv", 1))
    assert status == 2 and "no such baseline" in err
    lim = tmp_path / "lim.yaml"
    lim.write_text("limits: {gyro_x: {white_noise: 3}}\n")
    base = tmp_path / "base.yaml"
    run_cli("static", _rate(tmp_path, "c.csv", 1), "-o", base, "--reps", 40, "--quiet")
    status, _, err = run_cli("recheck", base, _rate(tmp_path, "d.csv", 2), "--limits", lim)
    assert status == 2 and "must be {max: number}" in err


def test_odometry_baseline(tmp_path, run_cli):
    """An odometry baseline re-checked on its own encoder run: the α are variance
    coefficients, so the tolerance applies to √α; α4, pinned only by the turns, is
    inconclusive at the default tolerance and consistent at a loose one."""
    o = tmp_path / "o.yaml"
    assert run_cli("motion", REC / "encoder_ticks.csv", "--truth", REC / "encoder_truth.csv",
                   "--odometry", REC / "encoder_config.yaml", "-o", o, "--quiet")[0] == 0
    args = ("recheck", o, REC / "encoder_ticks.csv", "--truth", REC / "encoder_truth.csv")
    status, out, err = run_cli(*args)
    assert status == 3 and "alpha4: inconclusive" in out, out + err
    assert "alpha3: consistent" in out
    status, out, err = run_cli(*args, "--tolerance", 6)
    assert status == 0, out + err
