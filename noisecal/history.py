"""Every unit's history in an embedded SQLite database.

One database file (default ``noisecal.db`` in the working folder) holds the
runs of every unit: which unit and sensor, which job, when, the input's
SHA-256, the tool version, the verdict of a re-check, and every fitted
parameter with its interval. Each run is written in one transaction (WAL
journal, ``BEGIN IMMEDIATE``), so a crash or two runs at once lose or corrupt
nothing. The schema is versioned (``PRAGMA user_version``) and migrated
forward on open. All SQL takes bound parameters; no text from a file or a
user is ever spliced into a statement.
"""

from __future__ import annotations

import datetime as _dt
import sqlite3
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError

DEFAULT_DB = "noisecal.db"
BUSY_TIMEOUT_S = 30.0

SCHEMA_V1 = (
    """CREATE TABLE runs (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        unit TEXT NOT NULL,
        sensor TEXT NOT NULL,
        job TEXT NOT NULL,
        date TEXT NOT NULL,
        input_sha256 TEXT NOT NULL,
        tool_version TEXT NOT NULL)""",
    """CREATE TABLE parameters (
        run_id INTEGER NOT NULL REFERENCES runs(id) ON DELETE CASCADE,
        channel TEXT NOT NULL,
        name TEXT NOT NULL,
        value REAL,
        lower REAL,
        upper REAL,
        unit TEXT NOT NULL)""",
    "CREATE INDEX runs_by_unit ON runs(unit, date)",
)
"""The first schema (user_version 1), kept so that migrations can be tested."""

MIGRATIONS = {
    # v2: a re-check's verdict on the run; parameters say whether they are bounds.
    2: ("ALTER TABLE runs ADD COLUMN verdict TEXT",
        "ALTER TABLE parameters ADD COLUMN is_bound INTEGER NOT NULL DEFAULT 0",
        "CREATE INDEX parameters_by_run ON parameters(run_id)"),
}
VERSION = max(MIGRATIONS)


@dataclass(frozen=True)
class Parameter:
    """One fitted number of a run, as stored."""

    channel: str
    name: str
    value: float | None
    lower: float | None
    upper: float | None
    unit: str
    is_bound: bool = False


def connect(path: str | Path) -> sqlite3.Connection:
    """Open (creating or migrating) the history database.

    Raises
    ------
    InputError
        When the file is not an SQLite database or is from a newer noisecal.
    """
    path = Path(path)
    if path.exists() and path.is_dir():
        raise InputError(f"--db {path}: a folder, not a database file")
    try:
        con = sqlite3.connect(str(path), timeout=BUSY_TIMEOUT_S, isolation_level=None)
        con.execute("PRAGMA journal_mode=WAL")
        con.execute("PRAGMA foreign_keys=ON")
        con.execute("PRAGMA synchronous=NORMAL")
        version = con.execute("PRAGMA user_version").fetchone()[0]
    except sqlite3.DatabaseError:
        raise InputError(f"--db {path}: not a noisecal history database (SQLite could not "
                         "read it); give another path") from None
    if version > VERSION:
        con.close()
        raise InputError(f"--db {path}: schema version {version} is newer than this noisecal "
                         f"({VERSION}); upgrade noisecal")
    _migrate(con, version)
    return con


def _migrate(con: sqlite3.Connection, version: int) -> None:
    """Bring the schema to VERSION, each step in its own transaction."""
    if version == 0:
        tables = con.execute("SELECT count(*) FROM sqlite_master WHERE type='table'").fetchone()[0]
        if tables:
            raise InputError("the database has tables but no noisecal schema version; give "
                             "another --db path")
        con.execute("BEGIN IMMEDIATE")
        try:
            # Another process may have created it while we waited for the lock.
            if con.execute("PRAGMA user_version").fetchone()[0] == 0:
                for statement in SCHEMA_V1:
                    con.execute(statement)
                con.execute("PRAGMA user_version = 1")
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise
        version = con.execute("PRAGMA user_version").fetchone()[0]
    for target in range(version + 1, VERSION + 1):
        con.execute("BEGIN IMMEDIATE")
        try:
            if con.execute("PRAGMA user_version").fetchone()[0] < target:
                for statement in MIGRATIONS[target]:
                    con.execute(statement)
                con.execute(f"PRAGMA user_version = {int(target)}")  # an int we own
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise


def record_run(path: str | Path, unit: str, sensor: str, job: str, input_sha256: str,
               tool_version: str, parameters: list, verdict: str | None = None,
               date: str | None = None) -> int:
    """Store one run and its parameters in one transaction; return its id."""
    if not unit.strip():
        raise InputError("--unit: give the unit's serial number (not empty)")
    con = connect(path)
    try:
        con.execute("BEGIN IMMEDIATE")
        try:
            cur = con.execute(
                "INSERT INTO runs (unit, sensor, job, date, input_sha256, tool_version, verdict)"
                " VALUES (?, ?, ?, ?, ?, ?, ?)",
                (unit, sensor, job,
                 date or _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                 input_sha256, tool_version, verdict))
            run_id = int(cur.lastrowid)
            con.executemany(
                "INSERT INTO parameters (run_id, channel, name, value, lower, upper, unit, "
                "is_bound) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                [(run_id, p.channel, p.name, p.value, p.lower, p.upper, p.unit,
                  int(p.is_bound)) for p in parameters])
            con.execute("COMMIT")
        except BaseException:
            con.execute("ROLLBACK")
            raise
    finally:
        con.close()
    return run_id


def runs_of(path: str | Path, unit: str, param: str | None = None,
            since: str | None = None) -> list[dict]:
    """A unit's runs, oldest first, each with its parameters (filtered)."""
    if not Path(path).exists():
        raise InputError(f"--db {path}: no such database; runs are stored with --unit")
    con = connect(path)
    try:
        query = "SELECT id, sensor, job, date, input_sha256, tool_version, verdict FROM runs " \
                "WHERE unit = ?"
        args: list = [unit]
        if since:
            query += " AND date >= ?"
            args.append(since)
        rows = con.execute(query + " ORDER BY date, id", args).fetchall()
        out = []
        for rid, sensor, job, date, sha, tool, verdict in rows:
            pq = "SELECT channel, name, value, lower, upper, unit, is_bound FROM parameters " \
                 "WHERE run_id = ?"
            pargs: list = [rid]
            if param:
                pq += " AND (name = ? OR channel || '.' || name = ?)"
                pargs += [param, param]
            params = [Parameter(c, n, v, lo, hi, u, bool(b))
                      for c, n, v, lo, hi, u, b in con.execute(pq, pargs).fetchall()]
            out.append({"run": rid, "sensor": sensor, "job": job, "date": date,
                        "input_sha256": sha, "tool_version": tool, "verdict": verdict,
                        "parameters": params})
        return out
    finally:
        con.close()


def integrity(path: str | Path) -> str:
    """SQLite's own integrity check ("ok" when sound)."""
    con = sqlite3.connect(str(path))
    try:
        return con.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        con.close()


def printable(text: str) -> str:
    """Text with control characters (newlines, escapes) shown, not acted on."""
    return "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in str(text))
