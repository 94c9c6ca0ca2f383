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
import os
import sqlite3
import time
from contextlib import contextmanager
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


SQLITE_MAGIC = b"SQLite format 3\x00"
TABLES = {"runs", "parameters"}


def _lock_timeout() -> float:
    """How long a run waits for another run's write lock (``NOISECAL_DB_WAIT``, s)."""
    try:
        return max(0.0, float(os.environ.get("NOISECAL_DB_WAIT", BUSY_TIMEOUT_S)))
    except ValueError:
        return BUSY_TIMEOUT_S


def _is_busy(exc: sqlite3.Error) -> bool:
    text = str(exc).lower()
    return "locked" in text or "busy" in text


def _locked(path) -> InputError:
    return InputError(f"--db {path}: locked by another noisecal run for "
                      f"{_lock_timeout():.0f} s; try again when it has finished (or set "
                      "NOISECAL_DB_WAIT to wait longer)")


def _corrupt(path) -> InputError:
    return InputError(f"--db {path}: the history database is damaged (SQLite cannot read "
                      "it); restore it from a backup or give another --db path")


def _waiting(path, step):
    """``step()``, retried while another connection holds the lock, up to the bound.

    The wait is a Python loop of short SQLite timeouts so that Ctrl-C or a signal is
    handled at once, not after SQLite's own sleep.
    """
    deadline = time.monotonic() + _lock_timeout()
    while True:
        try:
            return step()
        except sqlite3.OperationalError as exc:
            if not _is_busy(exc):
                raise
            if time.monotonic() >= deadline:
                raise _locked(path) from None
            time.sleep(0.05)


def _check_file(path: Path, write: bool) -> int:
    """Validate an existing file without writing to it; return its schema version.

    Reads the header and then the schema through a read-only connection, so that a
    file that is not ours is refused exactly as it was (never switched to WAL).
    """
    if path.is_dir():
        raise InputError(f"--db {path}: a folder, not a database file; give a file path")
    try:
        with open(path, "rb") as fh:
            head = fh.read(100)
    except OSError as exc:
        raise InputError(f"--db {path}: cannot be read ({exc.strerror}); check its "
                         "permissions") from None
    if not head:
        return 0  # an empty file: SQLite makes it a new database
    if not head.startswith(SQLITE_MAGIC):
        raise InputError(f"--db {path}: not an SQLite database (another kind of file, or a "
                         "damaged one); give another --db path")
    try:
        con = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True, timeout=0.2,
                              isolation_level=None)
    except sqlite3.Error:
        raise _corrupt(path) from None
    try:
        def look():
            version = con.execute("PRAGMA user_version").fetchone()[0]
            names = {r[0] for r in con.execute(
                "SELECT name FROM sqlite_master WHERE type='table'")}
            check = con.execute("PRAGMA quick_check(1)").fetchone()[0]
            return version, names, check
        version, names, check = _waiting(path, look)
        # Another run creating this database can show its tables before its schema
        # version for a moment (seen under load with two first writers): look again
        # before calling the file another program's.
        for _ in range(20):
            if not (version == 0 and names - {n for n in names if n.startswith("sqlite_")}):
                break
            time.sleep(0.05)
            version, names, check = _waiting(path, look)
    except sqlite3.DatabaseError:
        raise _corrupt(path) from None
    finally:
        con.close()
    if version > VERSION:
        raise InputError(f"--db {path}: schema version {version} is newer than this noisecal "
                         f"({VERSION}); upgrade noisecal or give another --db path")
    user_tables = {n for n in names if not n.startswith("sqlite_")}
    if (version == 0 and user_tables) or (version > 0 and not TABLES <= user_tables):
        raise InputError(f"--db {path}: an SQLite database of another program (no noisecal "
                         "history in it); left as it was; give another --db path")
    if check != "ok":
        raise _corrupt(path)
    if write and not (os.access(path, os.W_OK) and os.access(path.parent, os.W_OK)):
        raise InputError(f"--db {path}: read-only (the file or its folder cannot be "
                         "written); give a writable --db path")
    return version


def check_new(path: str | Path) -> None:
    """Refuse a database path that does not exist and cannot be created."""
    path = Path(path)
    folder = path.resolve().parent
    if not folder.is_dir():
        raise InputError(f"--db {path}: folder {path.parent} does not exist; create it first")
    if not os.access(folder, os.W_OK):
        raise InputError(f"--db {path}: folder {path.parent} is read-only; give a writable "
                         "--db path")


def connect(path: str | Path) -> sqlite3.Connection:
    """Open (creating or migrating) the history database for writing.

    The file is validated before anything is written to it; the schema is created
    or migrated inside the write lock, so the first runs of a new database never
    race each other.

    Raises
    ------
    InputError
        One line each for a folder, a missing or read-only folder or file, a file
        that is not SQLite, another program's database, a damaged database, a
        schema from a newer noisecal, and a lock held longer than the bounded wait.
    """
    path = Path(path)
    if path.exists():
        _check_file(path, write=True)
    else:
        check_new(path)
    try:
        con = sqlite3.connect(str(path), timeout=0.2, isolation_level=None)
    except sqlite3.Error:
        raise _corrupt(path) from None
    try:
        _waiting(path, lambda: con.execute("PRAGMA journal_mode=WAL").fetchone())
        con.execute("PRAGMA foreign_keys=ON")
        con.execute("PRAGMA synchronous=NORMAL")
        _migrate(con, path)
    except sqlite3.DatabaseError:
        con.close()
        raise _corrupt(path) from None
    except BaseException:
        con.close()
        raise
    return con


@contextmanager
def _write(con: sqlite3.Connection, path):
    """One write transaction (``BEGIN IMMEDIATE`` after the bounded wait)."""
    _waiting(path, lambda: con.execute("BEGIN IMMEDIATE"))
    try:
        yield
    except BaseException:
        con.execute("ROLLBACK")
        raise
    try:
        _waiting(path, lambda: con.execute("COMMIT"))
    except BaseException:
        if con.in_transaction:
            con.execute("ROLLBACK")
        raise


def _migrate(con: sqlite3.Connection, path) -> None:
    """Create the schema or bring it to VERSION, each step in its own transaction,
    every check inside the write lock (another run may have done it meanwhile)."""
    with _write(con, path):
        version = con.execute("PRAGMA user_version").fetchone()[0]
        if version == 0:
            tables = con.execute("SELECT count(*) FROM sqlite_master "
                                 "WHERE type='table'").fetchone()[0]
            if tables:
                raise InputError(f"--db {path}: an SQLite database of another program (no "
                                 "noisecal history in it); give another --db path")
            for statement in SCHEMA_V1:
                con.execute(statement)
            con.execute("PRAGMA user_version = 1")
    for target in range(2, VERSION + 1):
        with _write(con, path):
            version = con.execute("PRAGMA user_version").fetchone()[0]
            if version > VERSION:
                raise InputError(f"--db {path}: schema version {version} is newer than this "
                                 f"noisecal ({VERSION}); upgrade noisecal")
            if version < target:
                for statement in MIGRATIONS[target]:
                    con.execute(statement)
                con.execute(f"PRAGMA user_version = {int(target)}")  # an int we own


@contextmanager
def adding_run(con: sqlite3.Connection, path, unit: str, sensor: str, job: str,
               input_sha256: str, tool_version: str, parameters: list,
               verdict: str | None = None, date: str | None = None):
    """Insert one run in a write transaction and yield its id; committed when the
    block ends without error (so a run's files and its row appear together), rolled
    back otherwise."""
    if not unit.strip():
        raise InputError("--unit: give the unit's serial number (not empty)")
    try:
        with _write(con, path):
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
            yield run_id
    except sqlite3.OperationalError as exc:
        if "disk" in str(exc).lower() or "full" in str(exc).lower():
            raise InputError(f"--db {path}: could not store the run ({exc}); nothing was "
                             "written; free space and run again") from None
        raise _corrupt(path) from None
    except sqlite3.DatabaseError:
        raise _corrupt(path) from None


def record_run(path: str | Path, unit: str, sensor: str, job: str, input_sha256: str,
               tool_version: str, parameters: list, verdict: str | None = None,
               date: str | None = None) -> int:
    """Store one run and its parameters in one transaction; return its id."""
    if not unit.strip():
        raise InputError("--unit: give the unit's serial number (not empty)")
    con = connect(path)
    try:
        with adding_run(con, path, unit, sensor, job, input_sha256, tool_version, parameters,
                        verdict, date) as run_id:
            pass
    finally:
        con.close()
    return run_id


def runs_of(path: str | Path, unit: str, param: str | None = None,
            since: str | None = None) -> list[dict]:
    """A unit's runs, oldest first, each with its parameters (filtered)."""
    if not Path(path).exists():
        raise InputError(f"--db {path}: no such database; runs are stored with --unit")
    path = Path(path)
    if _check_file(path, write=False) < VERSION:
        connect(path).close()  # an older schema: migrate it first
    con = None
    try:
        con = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro", uri=True, timeout=0.2,
                              isolation_level=None)
        return _waiting(path, lambda: _read_runs(con, unit, param, since))
    except sqlite3.DatabaseError:
        raise _corrupt(path) from None
    finally:
        if con is not None:
            con.close()


def _read_runs(con, unit, param, since) -> list[dict]:
    """The rows of :func:`runs_of` from an open connection."""
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
