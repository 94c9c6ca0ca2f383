"""The history database: transactions, concurrency, a killed writer, migration, names."""

from __future__ import annotations

import os
import re
import sqlite3
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from noisecal import history
from noisecal.history import Parameter, record_run, runs_of

ROOT = Path(__file__).resolve().parents[2]
PARAMS = [Parameter("gyro_x", "white_noise", 4.4e-5, 4.3e-5, 4.5e-5, "rad/s/Hz^0.5"),
          Parameter("gyro_x", "bias_random_walk", None, None, 2e-6, "rad/s*Hz^0.5", True)]

WRITER = textwrap.dedent("""
    import sys
    from noisecal.history import Parameter, record_run
    db, tag, count = sys.argv[1], sys.argv[2], int(sys.argv[3])
    for i in range(count):
        record_run(db, "SN-7", "gyro", "static", f"{tag}-{i}", "noisecal test",
                   [Parameter("gyro_x", "white_noise", float(i), None, None, "u")] * 50)
""")


def test_round_trip_and_filters(tmp_path):
    db = tmp_path / "h.db"
    record_run(db, "SN-1", "NC-40", "static", "a" * 64, "noisecal t", PARAMS,
               date="2026-01-05T10:00:00+00:00")
    record_run(db, "SN-1", "NC-40", "recheck", "b" * 64, "noisecal t", PARAMS, "consistent",
               date="2026-03-05T10:00:00+00:00")
    runs = runs_of(db, "SN-1")
    assert [r["job"] for r in runs] == ["static", "recheck"]
    assert runs[1]["verdict"] == "consistent"
    assert runs[0]["parameters"] == PARAMS
    assert len(runs_of(db, "SN-1", since="2026-02-01")) == 1
    only = runs_of(db, "SN-1", param="gyro_x.white_noise")
    assert all(len(r["parameters"]) == 1 for r in only)
    assert history.integrity(db) == "ok"


def test_two_writers_at_once_lose_nothing(tmp_path):
    """Two processes writing 40 runs each into one database at the same time: all 80
    runs with all their parameters are there and SQLite's integrity check passes
    (WAL journal, one BEGIN IMMEDIATE transaction per run)."""
    db = tmp_path / "h.db"
    history.connect(db).close()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    procs = [subprocess.Popen([sys.executable, "-c", WRITER, str(db), tag, "40"], env=env)
             for tag in ("a", "b")]
    assert [p.wait(timeout=120) for p in procs] == [0, 0]
    runs = runs_of(db, "SN-7")
    assert len(runs) == 80 and all(len(r["parameters"]) == 50 for r in runs)
    assert {r["input_sha256"] for r in runs} == {f"{t}-{i}" for t in "ab" for i in range(40)}
    assert history.integrity(db) == "ok"


def test_writer_killed_mid_transaction_loses_nothing(tmp_path):
    """A writer killed (SIGKILL) inside its transaction, after inserting a run and part
    of its parameters: the database keeps every earlier run, holds no trace of the
    killed one, and passes the integrity check."""
    db = tmp_path / "h.db"
    record_run(db, "SN-9", "gyro", "static", "before", "noisecal t", PARAMS)
    code = textwrap.dedent(f"""
        import os, signal
        from noisecal.history import connect
        con = connect({str(db)!r})
        con.execute("BEGIN IMMEDIATE")
        rid = con.execute("INSERT INTO runs (unit, sensor, job, date, input_sha256, "
                          "tool_version) VALUES (?, ?, ?, ?, ?, ?)",
                          ("SN-9", "gyro", "static", "d", "killed", "t")).lastrowid
        for i in range(1000):
            con.execute("INSERT INTO parameters (run_id, channel, name, value, unit) "
                        "VALUES (?, 'x', 'y', ?, 'u')", (rid, float(i)))
        os.kill(os.getpid(), signal.SIGKILL)
    """)
    proc = subprocess.run([sys.executable, "-c", code], env=dict(os.environ, PYTHONPATH=str(ROOT)))
    assert proc.returncode == -9
    runs = runs_of(db, "SN-9")
    assert [r["input_sha256"] for r in runs] == ["before"]
    assert history.integrity(db) == "ok"
    record_run(db, "SN-9", "gyro", "static", "after", "noisecal t", PARAMS)
    assert [r["input_sha256"] for r in runs_of(db, "SN-9")] == ["before", "after"]


def test_migration_from_the_first_schema(tmp_path):
    """A database made with schema version 1 (no verdict, no bound flag) opens, is
    migrated to the current version in place, and keeps its runs."""
    db = tmp_path / "old.db"
    con = sqlite3.connect(db)
    for statement in history.SCHEMA_V1:
        con.execute(statement)
    con.execute("PRAGMA user_version = 1")
    con.execute("INSERT INTO runs (unit, sensor, job, date, input_sha256, tool_version) "
                "VALUES ('SN-2', 'gyro', 'static', '2025-06-01T00:00:00+00:00', 'old', 'v0')")
    con.execute("INSERT INTO parameters (run_id, channel, name, value, lower, upper, unit) "
                "VALUES (1, 'gyro_x', 'white_noise', 1.0, 0.9, 1.1, 'u')")
    con.commit()
    con.close()
    runs = runs_of(db, "SN-2")
    assert runs[0]["input_sha256"] == "old" and runs[0]["verdict"] is None
    assert runs[0]["parameters"][0].is_bound is False
    con = history.connect(db)
    assert con.execute("PRAGMA user_version").fetchone()[0] == history.VERSION
    con.close()
    record_run(db, "SN-2", "gyro", "recheck", "new", "v1", PARAMS, "changed")
    assert [r["verdict"] for r in runs_of(db, "SN-2")] == [None, "changed"]


def test_sql_takes_only_bound_parameters():
    """No statement in the history module is built from text: every execute() gets a
    literal string, and values travel as parameters (common practice, no source).
    The one formatted statement sets PRAGMA user_version from an int we own."""
    source = (ROOT / "noisecal" / "history.py").read_text()
    calls = re.findall(r"execute(?:many)?\(\s*(f?)\"", source)
    assert calls and calls.count("f") == 1
    assert 'f"PRAGMA user_version = {int(target)}"' in source


NASTY = ["SN-'; DROP TABLE runs; --", 'sensor "quoted"\nsecond line', "<b>bold</b> &amp;",
         "tab\there\x1b[31mred"]


@pytest.mark.parametrize("name", NASTY)
def test_names_with_quotes_newlines_markup(tmp_path, name, run_cli):
    """Unit and sensor names with quotes, newlines, markup or terminal escapes are
    stored as given and printed without acting on them (one line per row)."""
    db = tmp_path / "h.db"
    record_run(db, name, name, "static", "x", "t", PARAMS)
    runs = runs_of(db, name)
    assert runs[0]["sensor"] == name and len(runs) == 1
    status, out, err = run_cli("history", name, "--db", db)
    assert status == 0, err
    assert "\x1b" not in out and all("\n" not in line for line in out.splitlines())
    assert history.printable(name) in out
    assert history.integrity(db) == "ok"
