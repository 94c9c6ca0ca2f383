"""Reports made once per test session: every job through ``--report``, a toy result of a
job the renderer does not know (hostile names and notes), and a unit's history."""

from __future__ import annotations

import io
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from noisecal import history
from noisecal.cli import main
from noisecal.jobs.result import JobResult, Parameter
from noisecal.types import Estimate
from tests.motion.sim import drive

ROOT = Path(__file__).resolve().parents[2]

HOSTILE = 'x"><script>window.__pwned = 1</script>\n\'<b>bold</b> & "quoted"'
"""A serial, channel name and note that would be markup if not escaped."""

# A hand-made result with known numbers: the renderer must show exactly these.
TOY_PARAMETERS = (
    Parameter("gyro_x", "white_noise",
              Estimate(1.234e-05, 1.1e-05, 1.4e-05, "rad/s/Hz^0.5", "toy method",
                       tau_range=(0.5, 64.0)), {}),
    Parameter("gyro_x", "bias_random_walk",
              Estimate.bound(3.2e-07, "rad/s*Hz^0.5", "toy bound"), {}),
    Parameter(HOSTILE, "sigma", Estimate(0.5678, 0.5, 0.61, "m", "toy"), {}),
)
TOY_SECTIONS = {
    "layout": "toy/1",
    "provenance": {"tool": "noisecal 0.1.0", "job": "toy", "command": "noisecal toy in.csv",
                   "date": "2026-05-04T03:02:01+00:00",
                   "input": {"path": "in.csv", "sha256": "ab" * 32, "size_bytes": 123456},
                   "seed": 42},
    "numbers": {"exact": 0.1234567890123, "matrix": [[1.5e-09, 0.0], [0.0, 2.25e-08]],
                "list": [{"tau_s": 0.25, "side": "above"}]},
    "notes": [HOSTILE, "second note"],
    "model_check": {"consistent": False, "likely_cause": "a toy cause", "advice": "a toy advice"},
}


def _toy_png() -> bytes:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3, 2))
    FigureCanvasAgg(fig)
    fig.subplots().plot([0, 1], [1, 0])
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=60)
    return buf.getvalue()


@dataclass(frozen=True)
class ToyResult(JobResult):
    """A job result of a kind the renderer has no special case for (a future job)."""

    sections: dict

    def parameters(self):
        return list(TOY_PARAMETERS)

    def _summary(self):
        return "toy summary\n" + HOSTILE

    def _render(self, out=None):
        return ""

    def report_figures(self):
        return [("toy figure", "a toy caption", _toy_png())]


def static_csv(path: Path, seed: int, scale: float = 1.0) -> Path:
    """Two channels at 100 Hz, white noise of known level: gyro in deg/s, accel in g."""
    rng = np.random.default_rng(seed)
    n = 8192
    t = np.arange(n) * 0.01
    gyro = rng.normal(0.0, 0.05 * scale, n)          # deg/s
    accel = 1.0 + rng.normal(0.0, 2e-3, n)           # g
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("time [s],gyro_x [deg/s],accel_z [g]\n")
        np.savetxt(fh, np.column_stack([t, gyro, accel]), delimiter=",", fmt="%.10g")
    return path


def _motion_pair(folder: Path):
    t, values, truth, _, _ = drive(5, duration=60.0)
    sensor, truth_path = folder / "sensor.csv", folder / "truth.csv"
    with open(sensor, "w") as fh:
        # The sensor in its own units (mm, deg): the report shows them beside SI.
        fh.write("time [s],y [mm],yaw [deg]\n")
        np.savetxt(fh, np.column_stack([t, values[:, 0] * 1e3, np.degrees(values[:, 1])]),
                   delimiter=",", fmt="%.7f")
    with open(truth_path, "w") as fh:
        fh.write("time [s],y [m],yaw [rad]\n")
        np.savetxt(fh, np.column_stack([truth[0].time, truth[0].values, truth[1].values]),
                   delimiter=",", fmt="%.7f")
    return sensor, truth_path


def _cli(*args) -> int:
    return main([str(a) for a in args])


@pytest.fixture(scope="session")
def made(tmp_path_factory):
    """Every report, written once: name → path (and the runs' YAML blocks)."""
    d = tmp_path_factory.mktemp("reports")
    out = {}
    base = static_csv(d / "bench.csv", 1)
    assert _cli("static", base, "-o", d / "static.yaml", "--reps", 20, "--quiet",
                "--report", d / "static.html", "--unit", "SN-1", "--db", d / "h.db") == 0
    out["static"] = d / "static.html"
    new = static_csv(d / "bench2.csv", 2, scale=1.02)
    status = _cli("recheck", d / "static.yaml", new, "-o", d / "recheck.yaml",
                  "--report", d / "recheck.html", "--unit", "SN-1", "--db", d / "h.db")
    assert status in (0, 1, 3)
    out["recheck"] = d / "recheck.html"
    sensor, truth = _motion_pair(d)
    assert _cli("motion", sensor, "--truth", truth, "-o", d / "motion.yaml", "--quiet",
                "--report", d / "motion.html") == 0
    out["motion"] = d / "motion.html"
    rec = ROOT / "recordings"
    assert _cli("motion", rec / "encoder_ticks.csv", "--truth", rec / "encoder_truth.csv",
                "--odometry", rec / "encoder_config.yaml", "-o", d / "odometry.yaml",
                "--quiet", "--report", d / "odometry.html") == 0
    out["odometry"] = d / "odometry.html"
    from tests.camera.sim import session

    from noisecal.jobs.targets import analyse

    cam, survey, det = session(4, targets=12, frames=40)
    res = analyse(cam, survey, det, "ray", 0.997, 1, "noisecal targets (simulated)")
    out["targets"] = res.report(d / "targets.html")
    out["toy"] = ToyResult(TOY_SECTIONS).report(d / "toy.html")
    db = d / "unit.db"
    for date, verdict, n, bound in (("2026-01-10T08:00:00+00:00", None, 1.0e-4, False),
                                    ("2026-03-15T08:00:00+00:00", "consistent", 1.1e-4, False),
                                    ("2026-06-20T08:00:00+00:00", "changed", 2.0e-4, True)):
        history.record_run(db, HOSTILE, "imu", "recheck" if verdict else "static", "cd" * 32,
                           "noisecal 0.1.0",
                           [history.Parameter("gyro_x", "white_noise", n, 0.9 * n, 1.1 * n,
                                              "rad/s/Hz^0.5"),
                            history.Parameter("gyro_x", "bias_random_walk", None, None,
                                              3e-6 if bound else 2e-6, "rad/s*Hz^0.5", True),
                            history.Parameter("accel_z", "white_noise", 4.5e-4, 4.0e-4,
                                              5.0e-4, "m/s**2/Hz^0.5")],
                           verdict, date=date)
    assert _cli("report", HOSTILE, "--db", db, "-o", d / "unit.html") == 0
    out["unit"] = d / "unit.html"
    out["folder"] = d
    return out


def chromium_paths():
    """(browser, driver) paths of Debian's chromium and chromium-driver, or a reason."""
    browser = next((p for p in ("/usr/bin/chromium", "/usr/bin/chromium-browser")
                    if os.path.exists(p)), None)
    driver = next((p for p in ("/usr/bin/chromedriver",) if os.path.exists(p)), None)
    return browser, driver
