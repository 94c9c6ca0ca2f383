"""The history database under hostile and unlucky conditions: another program's
SQLite file, a newer schema, a damaged file, a lock held by another writer, a
read-only file, and many first writers of a new database at once."""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from noisecal import history
from noisecal.errors import InputError
from noisecal.history import Parameter, record_run, runs_of
from tests.conftest import sha

ROOT = Path(__file__).resolve().parents[2]
P = [Parameter("gyro_x", "white_noise", 1.0, 0.9, 1.1, "u")]


def _foreign(path: Path) -> Path:
    """An SQLite file of another program, in the default (rollback) journal mode."""
    con = sqlite3.connect(path)
    con.execute("CREATE TABLE notes (id INTEGER PRIMARY KEY, text TEXT)")
    con.execute("INSERT INTO notes (text) VALUES ('keep me')")
    con.commit()
    con.close()
    return path


def _journal_files(path: Path) -> list:
    return [p for p in (Path(f"{path}-wal"), Path(f"{path}-shm"), Path(f"{path}-journal"))
            if p.exists()]


def test_foreign_sqlite_file_left_byte_identical(tmp_path, run_cli):
    """Another program's SQLite file given as --db: refused with its own message, by a
    store and by the history command, and left byte-identical (never switched to WAL,
    no journal files made)."""
    db = _foreign(tmp_path / "other.db")
    before = sha(db)
    with pytest.raises(InputError, match="another program"):
        record_run(db, "SN", "g", "static", "a" * 64, "t", P)
    status, _, err = run_cli("history", "SN", "--db", db)
    assert status == 2 and "another program" in err and len(err.splitlines()) == 1
    assert sha(db) == before and _journal_files(db) == []


def test_newer_schema_refused_unchanged(tmp_path):
    db = tmp_path / "h.db"
    record_run(db, "SN", "g", "static", "a" * 64, "t", P)
    con = sqlite3.connect(db)
    con.execute(f"PRAGMA user_version = {history.VERSION + 1}")
    con.commit()
    con.close()
    before = sha(db)
    with pytest.raises(InputError, match="newer than this noisecal"):
        record_run(db, "SN", "g", "static", "b" * 64, "t", P)
    with pytest.raises(InputError, match="newer than this noisecal"):
        runs_of(db, "SN")
    assert sha(db) == before


def test_damaged_database_is_one_line(tmp_path, run_cli):
    """A history file with garbage over its data pages: 'damaged', one line, exit 2
    (no traceback), for the history command and for a store."""
    db = tmp_path / "h.db"
    for k in range(200):
        record_run(db, "SN", "g", "static", f"{k:064d}", "t", P * 5)
    con = sqlite3.connect(db)
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    con.close()
    data = bytearray(db.read_bytes())
    page = int.from_bytes(data[16:18], "big")
    data[page:] = b"\xa5" * (len(data) - page)
    db.write_bytes(bytes(data))
    status, _, err = run_cli("history", "SN", "--db", db)
    assert status == 2 and "damaged" in err and len(err.splitlines()) == 1, err
    with pytest.raises(InputError, match="damaged"):
        record_run(db, "SN", "g", "static", "c" * 64, "t", P)


def test_not_an_sqlite_file(tmp_path, run_cli):
    db = tmp_path / "h.db"
    db.write_bytes(b"\x00\x01 not a database " * 40)
    before = sha(db)
    status, _, err = run_cli("history", "SN", "--db", db)
    assert status == 2 and "not an SQLite database" in err, err
    assert sha(db) == before


def test_locked_database_after_a_bounded_wait(tmp_path, monkeypatch):
    """Another writer holding the lock: after NOISECAL_DB_WAIT seconds, 'locked', and
    nothing stored."""
    db = tmp_path / "h.db"
    record_run(db, "SN", "g", "static", "a" * 64, "t", P)
    monkeypatch.setenv("NOISECAL_DB_WAIT", "0.5")
    holder = sqlite3.connect(db, isolation_level=None)
    holder.execute("BEGIN IMMEDIATE")
    try:
        start = time.monotonic()
        with pytest.raises(InputError, match="locked by another noisecal run"):
            record_run(db, "SN", "g", "static", "b" * 64, "t", P)
        assert time.monotonic() - start < 10
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    assert len(runs_of(db, "SN")) == 1


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes read-only files")
def test_read_only_database(tmp_path):
    db = tmp_path / "h.db"
    record_run(db, "SN", "g", "static", "a" * 64, "t", P)
    history.connect(db).close()
    db.chmod(0o444)
    try:
        with pytest.raises(InputError, match="read-only"):
            record_run(db, "SN", "g", "static", "b" * 64, "t", P)
    finally:
        db.chmod(0o644)


def test_database_in_a_missing_folder_or_a_folder(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        record_run(tmp_path / "no" / "h.db", "SN", "g", "static", "a" * 64, "t", P)
    with pytest.raises(InputError, match="a folder"):
        record_run(tmp_path, "SN", "g", "static", "a" * 64, "t", P)


WRITER = textwrap.dedent("""
    import sys, time
    from noisecal.history import Parameter, record_run
    db, tag, start = sys.argv[1], sys.argv[2], float(sys.argv[3])
    while time.time() < start:
        time.sleep(0.001)
    for i in range(10):
        record_run(db, "SN", "gyro", "static", f"{tag}-{i}", "noisecal test",
                   [Parameter("gyro_x", "white_noise", float(i), None, None, "u")])
""")


def test_first_writers_of_a_new_database_lose_nothing(tmp_path):
    """Four processes start storing into a database that does not exist, at the same
    instant: the schema is created once inside the write lock and all 40 runs are
    there (the table check used to run outside the lock and refuse a database
    another writer was creating)."""
    db = tmp_path / "new.db"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    start = time.time() + 1.5
    procs = [subprocess.Popen([sys.executable, "-c", WRITER, str(db), tag, str(start)],
                              env=env, stderr=subprocess.PIPE) for tag in "abcd"]
    errs = [p.communicate(timeout=120)[1].decode() for p in procs]
    assert [p.returncode for p in procs] == [0] * 4, errs
    runs = runs_of(db, "SN")
    assert {r["input_sha256"] for r in runs} == {f"{t}-{i}" for t in "abcd" for i in range(10)}
    assert history.integrity(db) == "ok"


def test_a_runs_files_and_its_row_appear_together(tmp_path, monkeypatch):
    """The outputs are put in place inside the run's history transaction: while another
    writer holds the lock past the bounded wait, neither the files nor the row appear;
    once it is free, both do."""
    from noisecal.export.atomic import Staged
    from noisecal.jobs.history import Recorder

    db = tmp_path / "h.db"
    record_run(db, "SN", "g", "static", "a" * 64, "t", P)
    rec = Recorder(str(db), "SN", "g", "static", lambda result: ({}, "b" * 64, None))
    monkeypatch.setenv("NOISECAL_DB_WAIT", "0.3")
    holder = sqlite3.connect(db, isolation_level=None)
    holder.execute("BEGIN IMMEDIATE")
    try:
        with pytest.raises(InputError, match="locked"):
            with Staged() as staged:
                staged.text(tmp_path / "o.yaml", "x: 1\n")
                staged.commit(rec(None))
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    assert sorted(p.name for p in tmp_path.iterdir() if "yaml" in p.name) == []
    assert len(runs_of(db, "SN")) == 1
    with Staged() as staged:
        staged.text(tmp_path / "o.yaml", "x: 1\n")
        staged.commit(rec(None))
    rec.close()
    assert (tmp_path / "o.yaml").read_text() == "x: 1\n" and rec.run_id == 2
    assert len(runs_of(db, "SN")) == 2
