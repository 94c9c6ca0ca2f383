"""noisecal batch: a manifest's rows on Dask workers, results as each job alone, resume,
the history written once per run by the client.

The reference for every number is the same job run alone in this process with the same
seed (a batch must not change a result; common practice, no source). Dask start-up takes
seconds, so one local cluster serves the tests that need a cluster but not the default
one, and one batch run on the default local cluster serves the checks of its outcome.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import yaml

pytest.importorskip("distributed")

import noisecal  # noqa: E402
from noisecal.api import batch, recheck  # noqa: E402
from noisecal.export import yaml_block  # noqa: E402
from noisecal import history  # noqa: E402
from noisecal.cli import main  # noqa: E402
from noisecal.jobs.batch import STAGING, read_manifest  # noqa: E402
from tests.camera.test_targets import _write as _write_targets  # noqa: E402
from tests.conftest import rate_csv  # noqa: E402
from tests.motion.test_job import write_pair  # noqa: E402

ROOT = Path(__file__).resolve().parents[2]
GOOD = 8
"""Static rows that must succeed: units U0..U7, seed k+1, 20 replicates."""


def _good_recording(folder: Path, k: int, scale: float = 1.0) -> Path:
    y = np.random.default_rng(100 + k).normal(0.0, 1e-3 * (1 + 0.1 * k) * scale, 2048)
    return rate_csv(folder / f"u{k}.csv", y, 0.01)


ENCODER = ("encoder_ticks.csv", "encoder_truth.csv", "encoder_config.yaml")
"""The committed odometry demo (tools/make_drive_recordings.py), small enough to rerun."""


def _make_fleet(root: Path) -> Path:
    """Recordings and a manifest: 8 static rows, a motion, an odometry, a re-check
    (against a baseline block made here from the odometry demo) and a targets row, 5
    bad rows."""
    data = root / "data"
    data.mkdir()
    rows = [["job", "recording", "unit", "sensor", "truth", "config", "baseline",
             "options", "camera", "survey"]]
    for k in range(GOOD):
        _good_recording(data, k)
        rows.append(["static", f"u{k}.csv", f"U{k}", "imu", "", "", "", f"reps=20 seed={k + 1}"])
    drive = data / "drive"
    drive.mkdir()
    write_pair(drive)
    rows.append(["motion", "drive/sensor.csv", "M1", "line", "drive/truth.csv", "", "",
                 "seed=2"])
    enc = data / "enc"
    enc.mkdir()
    for name in ENCODER:
        shutil.copy(ROOT / "recordings" / name, enc / name)
    noisecal.odometry(enc / ENCODER[0], truth=enc / ENCODER[1],
                      config=enc / ENCODER[2]).write(enc / "baseline.yaml")
    rows.append(["odometry", "enc/encoder_ticks.csv", "O1", "wheels", "enc/encoder_truth.csv",
                 "enc/encoder_config.yaml", "", "max_offset=0.5"])
    rows.append(["recheck", "enc/encoder_ticks.csv", "O1", "wheels", "enc/encoder_truth.csv",
                 "", "enc/baseline.yaml", "tolerance=1.5"])
    (data / "short.csv").write_text("time [s],gyro_x [rad/s]\n0,1\n0.01,2\n0.02,3\n")
    (data / "badunit.csv").write_text("time [s],gyro_x [zorks]\n"
                                      + "".join(f"{i / 100},{i}\n" for i in range(50)))
    rows += [["static", "short.csv", "B1", "imu", "", "", "", ""],     # too short
             ["static", "nowhere.csv", "B2", "imu", "", "", "", ""],   # missing file
             ["static", "u0.csv", "B3", "imu", "", "", "", "reps=many"],  # bad option value
             ["motion", "u0.csv", "B4", "imu", "", "", "", ""],        # motion without truth
             ["static", "badunit.csv", "B5", "imu", "", "", "", ""]]   # unknown unit
    cam = data / "cam"
    cam.mkdir()
    _write_targets(cam)  # the yard demo's camera and survey, its first detections
    rows.append(["targets", "cam/det.csv", "T1", "front_cam", "", "", "", "seed=3",
                 "cam/cam.yaml", "cam/survey.csv"])
    with open(data / "fleet.csv", "w", newline="") as fh:
        csv.writer(fh).writerows([r + [""] * (10 - len(r)) for r in rows])
    return data / "fleet.csv"


BAD = {"B1": "the longest run without gaps has 3 samples", "B2": "no such file",
       "B3": "reps='many' is not a whole number", "B4": "a motion row needs truth",
       "B5": "zorks"}
"""Each bad row's unit and a fragment of its one-line error."""


def _cli(*args) -> tuple:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in args])
    return status, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def first_batch(tmp_path_factory):
    """The fleet run once through the command line on the default local cluster
    (two worker processes: the machine's cores are shared)."""
    root = tmp_path_factory.mktemp("fleet")
    manifest = _make_fleet(root)
    named = os.environ.pop("NOISECAL_SCHEDULER", None)  # the default cluster, not a named one
    try:
        status, out, err = _cli("batch", manifest, "-o", root / "out", "--workers", 2,
                                "--quiet")
    finally:
        if named is not None:
            os.environ["NOISECAL_SCHEDULER"] = named
    return root, manifest, status, out, err


@pytest.fixture(scope="module")
def cluster():
    """One local Dask cluster (two processes) for the tests that name a scheduler."""
    import logging

    from distributed import LocalCluster

    c = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                     dashboard_address=":0", silence_logs=logging.ERROR)
    try:
        yield c.scheduler_address
    finally:
        c.close()


@pytest.fixture
def copy_of_first(first_batch, tmp_path):
    """A copy of the first batch's folder (data, outputs, history) to change freely."""
    root, manifest, *_ = first_batch
    shutil.copytree(root, tmp_path / "fleet")
    return tmp_path / "fleet"


def _alone(manifest: Path, k: int):
    """Row U<k> run alone: the static job through the Python API, same seed."""
    return noisecal.static(manifest.parent / f"u{k}.csv", reps=20, seed=k + 1)


def _doc(path: Path) -> dict:
    return yaml.safe_load(path.read_text(encoding="utf-8"))


def _runs(db: Path, unit: str) -> list:
    return history.runs_of(db, unit)


@pytest.fixture(scope="module")
def alone(first_batch):
    """Each good row's job run alone in this process: unit → (result, YAML content)."""
    root, manifest, *_ = first_batch
    out = {}
    for k in range(GOOD):
        res = _alone(manifest, k)
        out[f"U{k}"] = (res, yaml.safe_load(res._render()))
    res = noisecal.motion(manifest.parent / "drive" / "sensor.csv",
                          truth=manifest.parent / "drive" / "truth.csv", seed=2)
    out["M1"] = (res, yaml.safe_load(res._render()))
    enc = manifest.parent / "enc"
    res = noisecal.odometry(enc / ENCODER[0], truth=enc / ENCODER[1], config=enc / ENCODER[2],
                            max_offset=0.5)
    out["O1"] = (res, yaml.safe_load(res._render()))
    res = recheck(enc / "baseline.yaml", enc / ENCODER[0], truth=enc / ENCODER[1],
                  tolerance=1.5)
    out["R1"] = (res, yaml.safe_load(yaml_block.render(res.sections)))
    cam = manifest.parent / "cam"
    res = noisecal.targets(cam / "det.csv", survey=cam / "survey.csv", camera=cam / "cam.yaml",
                           seed=3)
    out["T1"] = (res, yaml.safe_load(res._render()))
    return out


def _content(doc: dict) -> dict:
    """A block without what differs between two runs of the same job (date, command,
    paths as written) and the checksum over them."""
    return {k: v for k, v in doc.items() if k not in ("provenance", "checksum")}


def _assert_same_as_alone(alone: dict, out: Path) -> None:
    for k in range(GOOD):
        batch = _doc(out / f"U{k}" / "imu.static.yaml")
        for section in ("channels", "filter"):
            assert batch[section] == alone[f"U{k}"][1][section], (k, section)
    batch = _doc(out / "M1" / "line.motion.yaml")
    for section in ("alignment", "measurement"):
        assert batch[section] == alone["M1"][1][section], section
    assert _content(_doc(out / "M1" / "line.motion.yaml")) == _content(alone["M1"][1])
    assert _content(_doc(out / "O1" / "wheels.odometry.yaml")) == _content(alone["O1"][1])
    rechecked = _doc(out / "O1" / "wheels.recheck.yaml")
    assert rechecked["verdict"] == alone["R1"][0].verdict
    assert _content(rechecked) == _content(alone["R1"][1])
    assert _content(_doc(out / "T1" / "front_cam.targets.yaml")) == _content(alone["T1"][1])


def test_local_batch_gives_each_job_alone_results(first_batch, alone):
    """Every good row's YAML block equals the one its job writes run alone with the
    same seed (reference: the job alone; common practice, no source), and its PNG is
    beside it."""
    root, manifest, status, out, err = first_batch
    assert status == 1, err  # some rows failed
    _assert_same_as_alone(alone, root / "out")
    for k in range(GOOD):
        assert (root / "out" / f"U{k}" / "imu.static.png").stat().st_size > 5000


def test_bad_rows_are_reported_in_one_line_and_the_others_done(first_batch):
    """Each bad row is named with its manifest line and its one-line error, nothing is
    written for it, no traceback; the summary counts 12 done and 5 failed."""
    root, manifest, status, out, err = first_batch
    text = out + err
    assert "Traceback" not in text
    assert "17 rows on local (2 workers): 12 done, 0 unchanged (skipped), 5 failed" in text
    lines = [ln for ln in text.splitlines() if ln.startswith("  ")]
    for unit, fragment in BAD.items():
        line = next(ln for ln in lines if fragment in ln)
        assert f"{manifest}, line" in line
        assert not (root / "out" / unit).exists()
    assert not list((root / "out").glob(f"{STAGING}*"))


def test_history_holds_every_run_once(first_batch, alone):
    """One run per good row in the history, stored by the client with the numbers of
    the YAML block; none for a bad row."""
    root, manifest, *_ = first_batch
    db = root / "out" / "history.db"
    assert history.integrity(db) == "ok"
    for k in range(GOOD):
        runs = _runs(db, f"U{k}")
        assert len(runs) == 1 and runs[0]["job"] == "static" and runs[0]["sensor"] == "imu"
        stored = {(p.channel, p.name): (p.value, p.lower, p.upper, p.is_bound)
                  for p in runs[0]["parameters"]}
        for p in alone[f"U{k}"][0].parameters():
            e = p.estimate
            want = ((None, None, e.upper, True) if not e.resolved
                    else (e.value, e.lower, e.upper, False))
            assert stored[(p.channel, p.name)] == want, p.name
    assert len(_runs(db, "M1")) == 1
    assert sorted(r["job"] for r in _runs(db, "O1")) == ["motion --odometry", "recheck"]
    con = sqlite3.connect(db)
    try:
        units = [u for (u,) in con.execute("SELECT unit FROM runs ORDER BY unit")]
    finally:
        con.close()
    assert units == sorted(["M1", "O1", "O1", "T1"] + [f"U{k}" for k in range(GOOD)])


def test_rerun_skips_unchanged_rows_and_redoes_a_changed_input(copy_of_first, cluster):
    """A second batch on a named scheduler keeps every finished run (same run ids, no
    new history row); a recording whose content changed is run again and stored as
    a new run; the bad rows fail again."""
    root = copy_of_first
    manifest, out = root / "data" / "fleet.csv", root / "out"
    db = out / "history.db"
    before = {f"U{k}": _runs(db, f"U{k}")[0]["run"] for k in range(GOOD)}
    _good_recording(root / "data", 3, scale=2.0)  # new content, same path
    res = batch(manifest, output=out, scheduler=cluster)
    by_unit = {r.row.unit: r for r in res.rows if r.row is not None}
    for k in range(GOOD):
        r = by_unit[f"U{k}"]
        if k == 3:
            assert r.status == "done" and r.run_id not in before.values()
        else:
            assert r.status == "unchanged" and r.run_id == before[f"U{k}"]
    assert by_unit["M1"].status == "unchanged"
    assert [r.status for r in res.rows if r.row is not None and r.row.unit == "O1"] == [
        "unchanged", "unchanged"]
    assert res.count("failed") == 5 and res.exit_status == 1
    assert [len(_runs(db, f"U{k}")) for k in range(GOOD)] == [1, 1, 1, 2, 1, 1, 1, 1]
    again = _doc(out / "U3" / "imu.static.yaml")["channels"]
    alone = yaml.safe_load(noisecal.static(root / "data" / "u3.csv", reps=20,
                                           seed=4)._render())["channels"]
    assert again == alone


def test_a_stamp_whose_run_never_reached_the_history_is_redone(copy_of_first, cluster):
    """A batch stopped after putting a row's stamp in place but before its history
    transaction committed (simulated by removing that run) runs the row again: the
    history then holds it once."""
    root = copy_of_first
    manifest, out = root / "data" / "fleet.csv", root / "out"
    db = out / "history.db"
    con = sqlite3.connect(db)
    try:
        run = con.execute("SELECT id FROM runs WHERE unit = 'U5'").fetchone()[0]
        con.execute("PRAGMA foreign_keys=ON")
        con.execute("DELETE FROM runs WHERE id = ?", (run,))
        con.commit()
    finally:
        con.close()
    res = batch(manifest, output=out, scheduler=cluster)
    by_unit = {r.row.unit: r.status for r in res.rows if r.row is not None}
    assert by_unit["U5"] == "done"
    assert all(by_unit[f"U{k}"] == "unchanged" for k in range(GOOD) if k != 5)
    assert len(_runs(db, "U5")) == 1


def _interruptible_manifest(root: Path) -> Path:
    data = root / "data"
    data.mkdir()
    rows = ["job,recording,unit,sensor,options"]
    for k in range(GOOD):
        _good_recording(data, k)
        rows.append(f"static,u{k}.csv,U{k},imu,reps=60 seed={k + 1}")
    (data / "fleet.csv").write_text("\n".join(rows) + "\n")
    return data / "fleet.csv"


def _stop(proc: subprocess.Popen, sig=signal.SIGTERM, wait: float = 60.0) -> None:
    """Stop a process this test started (then its process group, if it lingers)."""
    if proc.poll() is None:
        proc.send_signal(sig)
        try:
            proc.wait(wait)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(10)


def test_interrupted_batch_resumes_without_redoing_finished_rows(tmp_path, cluster):
    """A batch (its own process, on the shared cluster) stopped by SIGTERM after its
    first stored runs: it exits 143 without a traceback; the rerun keeps those runs
    (reported unchanged, same ids), runs the rest, and the history ends with every row
    once."""
    manifest = _interruptible_manifest(tmp_path)
    out = tmp_path / "out"
    db = out / "history.db"
    exe = Path(sys.executable).parent / "noisecal"
    proc = subprocess.Popen([str(exe), "batch", str(manifest), "-o", str(out),
                             "--scheduler", cluster, "--quiet"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, start_new_session=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    try:
        deadline = time.monotonic() + 120
        stored = 0
        while time.monotonic() < deadline and proc.poll() is None:
            if db.exists():
                try:
                    con = sqlite3.connect(f"{db.resolve().as_uri()}?mode=ro", uri=True)
                    stored = con.execute("SELECT count(*) FROM runs").fetchone()[0]
                    con.close()
                except sqlite3.Error:
                    stored = 0
            if stored >= 2:
                break
            time.sleep(0.05)
        assert stored >= 2, "the batch stored no runs in time"
    finally:
        _stop(proc)
    err = proc.stderr.read().decode()
    assert proc.returncode == 128 + signal.SIGTERM, err
    assert "Traceback" not in err and "run the same command again" in err
    con = sqlite3.connect(db)
    try:
        first = dict(con.execute("SELECT unit, id FROM runs").fetchall())
    finally:
        con.close()
    assert 2 <= len(first) < GOOD  # a real interruption: some rows left to do
    res = batch(manifest, output=out, scheduler=cluster)
    assert res.exit_status == 0
    for r in res.rows:
        if r.row.unit in first:
            assert r.status == "unchanged" and r.run_id == first[r.row.unit]
        else:
            assert r.status == "done"
    assert [len(_runs(db, f"U{k}")) for k in range(GOOD)] == [1] * GOOD
    assert not list(out.glob(f"{STAGING}*"))


def test_external_scheduler_and_worker_give_the_same_results(first_batch, alone, tmp_path):
    """The same manifest through a `dask scheduler` and a `dask worker` started here on
    the loopback address (this venv's programs): the same blocks as each job alone,
    the same failures, one run per good row."""
    root, manifest, *_ = first_batch
    bindir = Path(sys.executable).parent
    info = tmp_path / "scheduler.json"
    procs = []
    try:
        procs.append(subprocess.Popen(
            [str(bindir / "dask"), "scheduler", "--host", "127.0.0.1", "--port", "0",
             "--dashboard-address", "127.0.0.1:0", "--scheduler-file", str(info)],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True))
        deadline = time.monotonic() + 60
        while not info.exists() and time.monotonic() < deadline:
            assert procs[0].poll() is None, "dask scheduler ended"
            time.sleep(0.1)
        address = json.loads(info.read_text())["address"]
        assert address.startswith("tcp://127.0.0.1:")
        procs.append(subprocess.Popen(
            [str(bindir / "dask"), "worker", address, "--host", "127.0.0.1", "--nthreads",
             "1", "--nworkers", "1", "--no-nanny", "--no-dashboard"],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True))
        out = tmp_path / "out"
        status, text, err = _cli("batch", manifest, "-o", out, "--scheduler", address,
                                 "--quiet")
        assert status == 1, err
        assert f"17 rows on {address}: 12 done, 0 unchanged (skipped), 5 failed" in text
        _assert_same_as_alone(alone, out)
        for k in range(GOOD):
            assert len(_runs(out / "history.db", f"U{k}")) == 1
    finally:
        for p in reversed(procs):
            _stop(p, signal.SIGTERM, 20)
    assert all(p.returncode is not None for p in procs)


def test_yaml_manifest_reads_as_the_csv(tmp_path):
    """A YAML manifest with the same rows gives the same rows (paths relative to it,
    options typed), and manifest-level mistakes are one line with status 2."""
    (tmp_path / "a.csv").write_text("x")
    (tmp_path / "t.csv").write_text("x")
    (tmp_path / "m.csv").write_text(
        "job,recording,unit,sensor,truth,options\n"
        "static,a.csv,U1,imu,,\"reps=40 seed=3 channels=gyro_x,gyro_y\"\n"
        "motion,a.csv,U2,line,t.csv,gate=0.99 max_offset=0.5\n")
    (tmp_path / "m.yaml").write_text(
        "rows:\n"
        "  - {job: static, recording: a.csv, unit: U1, sensor: imu,\n"
        "     options: {reps: 40, seed: 3, channels: [gyro_x, gyro_y]}}\n"
        "  - {job: motion, recording: a.csv, unit: U2, sensor: line, truth: t.csv,\n"
        "     options: {gate: 0.99, max_offset: 0.5}}\n")
    a, b = read_manifest(tmp_path / "m.csv"), read_manifest(tmp_path / "m.yaml")
    strip = [(r.job, r.unit, r.sensor, r.recording, r.files, r.options) for r in a]
    assert strip == [(r.job, r.unit, r.sensor, r.recording, r.files, r.options) for r in b]
    assert a[0].options == {"reps": 40, "seed": 3, "channels": ["gyro_x", "gyro_y"]}
    assert a[1].files == {"truth": str((tmp_path / "t.csv").resolve())}
    (tmp_path / "bad.csv").write_text("job,recording,unit,sensor,colour\n")
    status, out, err = _cli("batch", tmp_path / "bad.csv", "-o", tmp_path / "o")
    assert status == 2 and "unknown column 'colour'" in err and len(err.splitlines()) == 1
    assert not (tmp_path / "o").exists() or not any((tmp_path / "o").iterdir())


def test_manifest_rows_refused_before_any_work(tmp_path):
    """Unsafe serials, unknown options, duplicate outputs and a file column the job
    does not read are each the row's one-line error."""
    (tmp_path / "m.csv").write_text(
        "job,recording,unit,sensor,truth,options\n"
        "static,a.csv,../up,imu,,\n"
        "static,a.csv,U1,imu,,gate=0.9\n"
        "static,a.csv,U2,imu,,\n"
        "static,b.csv,U2,imu,,\n"
        "static,a.csv,U3,imu,t.csv,\n"
        "fly,a.csv,U4,imu,,\n")
    rows = read_manifest(tmp_path / "m.csv")
    messages = [getattr(r, "message", None) for r in rows]
    assert "cannot name a folder" in messages[0]
    assert "gate is not an option of static" in messages[1]
    assert messages[2] is None and "the same unit, sensor and job as" in messages[3]
    assert "does not read a truth file" in messages[4]
    assert "is not one of static, motion" in messages[5]


def test_an_unusable_scheduler_is_one_line_and_nothing_written(first_batch, tmp_path):
    """A scheduler address that cannot be used: status 2, one line naming the option,
    no output folder, no history database left behind."""
    root, manifest, *_ = first_batch
    out = tmp_path / "never"
    status, text, err = _cli("batch", manifest, "-o", out, "--scheduler",
                             "tcp://127.0.0.1:notaport")
    assert status == 2 and err.startswith("noisecal: error: --scheduler tcp://127.0.0.1:")
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not out.exists()
