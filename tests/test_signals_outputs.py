"""Hostile and unlucky conditions around a run's outputs: outputs that would replace a
file the run reads, two runs racing for one output, a full disk, signals, a closed
pipe, ``-o -`` and names with control characters. Exit statuses and leftovers are
checked on the command line in a subprocess, as a user or a script sees them."""

from __future__ import annotations

import errno
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import yaml

from noisecal import history
from noisecal.errors import OutputError
from noisecal.export import atomic
from tests.conftest import rate_csv, sha

ROOT = Path(__file__).resolve().parents[1]


def _rec(folder: Path, name: str = "r.csv", n: int = 4096, seed: int = 1) -> Path:
    y = np.random.default_rng(seed).normal(size=n) * 1e-3
    return rate_csv(folder / name, y, 0.01)


def _env(tmp_path, **extra) -> dict:
    env = dict(os.environ, PYTHONPATH=str(ROOT), NOISECAL_CACHE=str(tmp_path / "cache"))
    env.update(extra)
    return env


def _start(tmp_path, *args, env=None, **kw) -> subprocess.Popen:
    """``noisecal ARGS`` as its own process, in ``tmp_path``."""
    # A shell's background job starts with SIGINT ignored (and Python then installs no
    # Ctrl-C handler): the child gets the default back, as from a terminal.
    kw.setdefault("preexec_fn", lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    return subprocess.Popen([sys.executable, "-m", "noisecal.cli", *map(str, args)],
                            cwd=tmp_path, env=env or _env(tmp_path), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, **kw)


def _cli(tmp_path, *args, env=None):
    """Run ``noisecal ARGS``; return (status, stdout, stderr) as text."""
    p = _start(tmp_path, *args, env=env)
    out, err = p.communicate(timeout=120)
    return p.returncode, out.decode("utf-8", "replace"), err.decode("utf-8", "replace")


def _one_line_error(err: str) -> None:
    assert "Traceback" not in err
    assert len(err.strip().splitlines()) == 1, err


def _files(folder: Path) -> set:
    return {p.name for p in folder.iterdir() if p.name != "cache"}


STATIC = ("static", "r.csv", "--reps", 20, "--quiet")


# --------------------------------------------------------------------------------------
# Outputs against inputs, checked before any work


@pytest.mark.parametrize("flag", ["-o", "--plot"])
@pytest.mark.parametrize("existing", [True, False])
def test_output_onto_the_database_refused(tmp_path, flag, existing):
    """-o or --plot naming the --db (existing or about to be created): one line, exit
    2, the database unchanged and nothing written."""
    _rec(tmp_path)
    db = tmp_path / ("h.yaml" if flag == "-o" else "h.png")
    if existing:
        history.record_run(db, "SN-1", "g", "static", "a" * 64, "t", [])
    before = sha(db) if existing else None
    outs = ["-o", db] if flag == "-o" else ["-o", "o.yaml", "--plot", db]
    status, _, err = _cli(tmp_path, *STATIC, *outs, "--unit", "SN-1", "--db", db.name)
    assert status == 2 and "reads" in err, err
    _one_line_error(err)
    assert (sha(db) if existing else db.exists()) == (before if existing else False)
    assert not (tmp_path / "o.yaml").exists()


def test_recheck_output_onto_a_provenance_side_file_refused(tmp_path):
    """recheck -o (even with --overwrite) onto the map the baseline's provenance names
    is refused before any work; the map is left as it was."""
    (tmp_path / "map.yaml").write_text("channels: {}\n")
    before = sha(tmp_path / "map.yaml")
    (tmp_path / "base.yaml").write_text("layout: noisecal.motion/1\nprovenance:\n"
                                        "  map: map.yaml\n")
    _rec(tmp_path)
    status, _, err = _cli(tmp_path, "recheck", "base.yaml", "r.csv", "-o", "map.yaml",
                          "--overwrite")
    assert status == 2 and "reads" in err and "map.yaml" in err, err
    _one_line_error(err)
    assert sha(tmp_path / "map.yaml") == before


def test_output_an_existing_folder_refused_before_the_analysis(tmp_path):
    """-o naming a folder: one line naming it as a folder, exit 2, no traceback."""
    _rec(tmp_path)
    (tmp_path / "out.yaml").mkdir()
    status, _, err = _cli(tmp_path, *STATIC, "-o", "out.yaml")
    assert status == 2 and "folder" in err, err
    _one_line_error(err)
    assert _files(tmp_path) == {"r.csv", "out.yaml"}


def test_bad_db_refused_before_the_outputs(tmp_path):
    """A --db that is not a database: exit 2 before the analysis, no output written."""
    _rec(tmp_path)
    (tmp_path / "notes.db").write_text("not a database\n")
    status, _, err = _cli(tmp_path, *STATIC, "-o", "o.yaml", "--unit", "SN", "--db",
                          "notes.db")
    assert status == 2 and "not an SQLite database" in err, err
    _one_line_error(err)
    assert _files(tmp_path) == {"r.csv", "notes.db"}


def test_negative_seed_is_one_line(tmp_path):
    _rec(tmp_path)
    status, _, err = _cli(tmp_path, *STATIC, "-o", "o.yaml", "--seed", "-1")
    assert status == 2 and "--seed" in err, err
    _one_line_error(err)
    assert _files(tmp_path) == {"r.csv"}


# --------------------------------------------------------------------------------------
# Exclusive, all-or-nothing outputs


def test_staged_outputs_refuse_a_name_that_appeared_and_take_back_the_rest(tmp_path):
    """When one output's name appears while the run works, the run's other output
    (already put in place) is removed again, the newcomer is left alone, and no
    temporary file stays."""
    a, b = tmp_path / "a.yaml", tmp_path / "a.png"
    with pytest.raises(OutputError, match="appeared"):
        with atomic.Staged() as staged:
            staged.text(a, "mine\n")
            staged.text(b, "mine too\n")
            b.write_text("another run's\n")
            staged.commit()
    assert not a.exists() and b.read_text() == "another run's\n"
    assert _files(tmp_path) == {"a.png"}


def test_staged_outputs_interrupted_leave_nothing(tmp_path):
    """Ctrl-C (or a signal) while waiting to commit, e.g. on the history lock: the
    outputs are not in place and the temporary files are gone."""
    class Interrupt:
        def __enter__(self):
            raise KeyboardInterrupt

        def __exit__(self, *exc):
            return False

    with pytest.raises(KeyboardInterrupt):
        with atomic.Staged() as staged:
            staged.text(tmp_path / "a.yaml", "x\n")
            staged.commit(Interrupt())
    assert _files(tmp_path) == set()
    atomic._temporary(tmp_path / "b.yaml")
    atomic.remove_leftovers()
    assert _files(tmp_path) == set()


def test_disk_full_is_one_line_and_leaves_nothing(tmp_path, run_cli, monkeypatch):
    """ENOSPC while writing the YAML: one line saying the disk is full, exit 2, no
    output, no temporary file, and the run not stored."""
    rec = _rec(tmp_path)

    def full(fd):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(atomic.os, "fsync", full)
    db = tmp_path / "h.db"
    status, _, err = run_cli("static", rec, "-o", tmp_path / "o.yaml", "--reps", 20,
                             "--quiet", "--unit", "SN", "--db", db)
    assert status == 2 and "disk is full" in err, err
    _one_line_error(err)
    assert _files(tmp_path) <= {"r.csv", "h.db"}
    assert not db.exists() or history.runs_of(db, "SN") == []


def test_two_runs_racing_for_one_output(tmp_path):
    """Two runs writing the same -o at once: one writes it (exit 0), the other says it
    appeared or exists (exit 2); never both 0, no temporary file left."""
    _rec(tmp_path)
    env = _env(tmp_path)
    procs = [_start(tmp_path, *STATIC, "-o", "o.yaml", env=env) for _ in range(2)]
    results = [(p.wait(timeout=120), p.stderr.read().decode()) for p in procs]
    for p in procs:
        p.stdout.close()
        p.stderr.close()
    assert sorted(s for s, _ in results) == [0, 2], results
    loser = next(e for s, e in results if s == 2)
    assert "appeared" in loser or "already exists" in loser
    assert _files(tmp_path) == {"r.csv", "o.yaml", "o.png"}


def test_two_runs_racing_for_a_new_database(tmp_path):
    """Two runs storing into a database that does not exist yet: both stored, the
    schema made once, integrity ok. Their serial has an escape sequence and a
    newline: printed escaped, no raw control character reaches the terminal."""
    _rec(tmp_path)
    env = _env(tmp_path)
    serial = "SN\x1b[2J\nEVIL"
    procs = [_start(tmp_path, *STATIC, "-o", f"o{k}.yaml", "--unit", serial, "--db", "new.db",
                    env=env) for k in range(2)]
    outs = [p.communicate(timeout=120) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], outs
    assert len(history.runs_of(tmp_path / "new.db", serial)) == 2
    assert history.integrity(tmp_path / "new.db") == "ok"
    for out, _ in outs:
        assert b"\x1b" not in out and b"unit SN\\x1b[2J\\nEVIL in new.db" in out


# --------------------------------------------------------------------------------------
# Standard output, names


def test_output_to_stdout(tmp_path, run_cli):
    """-o - writes the YAML block alone on stdout (the summary goes to stderr) and no
    plot unless --plot names one."""
    _rec(tmp_path)
    status, out, err = _cli(tmp_path, *STATIC, "-o", "-")
    assert status == 0, err
    assert yaml.safe_load(out)["layout"] == "noisecal.static/2"
    assert "white_noise" in err
    assert _files(tmp_path) == {"r.csv"}
    status, out, err = run_cli(*STATIC[:1], tmp_path / "r.csv", *STATIC[2:], "-o", "-",
                               "--plot", tmp_path / "p.png")
    assert status == 0 and (tmp_path / "p.png").stat().st_size > 1000, err
    assert yaml.safe_load(out)["layout"] == "noisecal.static/2"
    assert _files(tmp_path) == {"r.csv", "p.png"}


def test_control_characters_in_an_error_are_shown_escaped(tmp_path):
    status, out, err = _cli(tmp_path, "inspect", "a\x1b[31m\nb.csv")
    assert status == 2 and "\x1b" not in err and "a\\x1b[31m\\nb.csv" in err, err
    _one_line_error(err)


def test_closed_stdout_ends_quietly_with_141(tmp_path):
    """``noisecal history … | head -1``: the table is cut short; the run ends with
    status 141 (128 + SIGPIPE, never 1, a re-check's 'changed') and no traceback."""
    db = tmp_path / "h.db"
    con = history.connect(db)
    con.execute("BEGIN")
    con.executemany("INSERT INTO runs (unit, sensor, job, date, input_sha256, tool_version)"
                    " VALUES (?, ?, ?, ?, ?, ?)",
                    [("SN", "g", "static", f"2026-01-01T00:00:{k % 60:02d}", "a" * 64, "t")
                     for k in range(3000)])
    con.execute("COMMIT")
    con.close()
    p = _start(tmp_path, "history", "SN", "--db", db)
    assert p.stdout.readline().startswith(b"unit SN")
    p.stdout.close()
    assert p.wait(timeout=60) == 141
    err = p.stderr.read().decode()
    p.stderr.close()
    assert "Traceback" not in err and "Error" not in err, err


# --------------------------------------------------------------------------------------
# Signals


def _wait_until_open(pid: int, path: Path, timeout: float = 60) -> None:
    """Poll /proc until process ``pid`` has ``path`` open."""
    target = str(path.resolve())
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        try:
            fds = os.listdir(f"/proc/{pid}/fd")
        except FileNotFoundError:
            return
        for fd in fds:
            try:
                if os.readlink(f"/proc/{pid}/fd/{fd}") == target:
                    return
            except OSError:
                pass
        time.sleep(0.05)
    raise AssertionError(f"{path} never opened")


@pytest.mark.skipif(not Path("/proc/self/fd").is_dir(), reason="needs /proc")
@pytest.mark.parametrize("sig", [signal.SIGTERM,
                                 pytest.param(signal.SIGHUP, marks=pytest.mark.slow),
                                 pytest.param(signal.SIGINT, marks=pytest.mark.slow)])
def test_signal_while_waiting_for_the_history_lock(tmp_path, sig):
    """SIGTERM, SIGHUP and Ctrl-C while the run waits for another writer's lock: exit
    128 + n at once (not after the wait), one line, nothing written or stored."""
    _rec(tmp_path)
    db = tmp_path / "h.db"
    history.record_run(db, "SN", "g", "static", "a" * 64, "t", [])
    holder = sqlite3.connect(db, isolation_level=None)
    holder.execute("BEGIN IMMEDIATE")
    try:
        p = _start(tmp_path, *STATIC, "-o", "o.yaml", "--unit", "SN", "--db", db,
                   env=_env(tmp_path, NOISECAL_DB_WAIT="60"))
        _wait_until_open(p.pid, db)
        time.sleep(0.5)
        p.send_signal(sig)
        out, err = p.communicate(timeout=20)
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    assert p.returncode == 128 + sig, err
    assert "nothing was written" in err.decode()
    _one_line_error(err.decode())
    assert _files(tmp_path) <= {"r.csv", "h.db", "h.db-wal", "h.db-shm"}
    assert len(history.runs_of(db, "SN")) == 1


def test_sigterm_during_the_analysis_leaves_nothing(tmp_path):
    """SIGTERM while the analysis runs (once the recording is cached): exit 143, one
    line, no output and no temporary file."""
    rec = _rec(tmp_path, n=2 ** 16)
    # Replicates enough for the analysis to outlast the wait below (about 1 s here).
    p = _start(tmp_path, "static", rec.name, "-o", "o.yaml", "--reps", 30000, "--quiet")
    deadline = time.monotonic() + 60
    while not list((tmp_path / "cache").rglob("meta.json")):
        assert time.monotonic() < deadline and p.poll() is None, "the run never cached"
        time.sleep(0.05)
    time.sleep(0.5)
    p.send_signal(signal.SIGTERM)
    out, err = p.communicate(timeout=30)
    assert p.returncode == 143, err
    _one_line_error(err.decode())
    assert _files(tmp_path) == {"r.csv"}
