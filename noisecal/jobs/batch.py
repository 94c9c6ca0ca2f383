"""Many recordings in one command: a manifest's rows as Dask tasks, the history by the client.

Pipeline: read the manifest (CSV or YAML) into :class:`Row` s → decide which rows are
already done (a stamp beside their outputs whose run is in the history and whose input
hash matches) → send every other row to a Dask cluster (a local one of processes by
default, or an existing one by its scheduler address) → each worker reads the row's
files from paths it can see, runs the row's job exactly as its own command would
(same functions, same defaults, same seeds) and writes the outputs into a private
staging folder in OUTDIR → only a small :class:`Outcome` comes back → the client
alone stores the run in the history database, in one transaction inside which it
puts the files in place, so a run's row and its files appear together.

Recordings never travel through the scheduler: a task carries paths and options, an
outcome carries the fitted numbers the history needs (a few kB).
"""

from __future__ import annotations

import csv
import datetime as _dt
import fcntl
import hashlib
import io
import json
import os
import shlex
import shutil
import sys
import uuid
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__, history
from ..errors import InputError, NoisecalError
from ..export.atomic import WRITTEN, atomic_path
from .progress import visible

JOBS = ("static", "motion", "odometry", "targets", "recheck")
REQUIRED = ("job", "recording", "unit", "sensor")
FILE_COLUMNS = ("truth", "camera", "survey", "baseline", "map", "config", "poses")
COLUMNS = REQUIRED + FILE_COLUMNS + ("options",)

NEEDS = {"static": (), "motion": ("truth",), "odometry": ("truth", "config"),
         "targets": ("camera", "survey"), "recheck": ("baseline",)}
"""The file columns a job cannot run without."""

TAKES = {"static": (), "motion": ("truth", "map"), "odometry": ("truth", "config"),
         "targets": ("camera", "survey", "poses"),
         "recheck": ("baseline", "truth", "map", "config", "camera", "survey", "poses")}
"""The file columns a job reads (any other non-empty one is an error)."""

OPTIONS = {
    "static": {"reps": int, "seed": int, "dt": float, "channels": list, "repair": str},
    "motion": {"covariate": str, "gate": float, "max_offset": float, "seed": int},
    "odometry": {"max_offset": float},
    "targets": {"ground": str, "gate": float, "seed": int},
    "recheck": {"limits": Path, "tolerance": float, "alpha": float, "verdict_on": str,
                "at": "floats", "accept_edited": bool},
}
"""Each job's options in a manifest (the Python API's names), with their kinds."""

HISTORY_JOB = {"odometry": "motion --odometry"}
"""The job name a run is stored under (as its own command stores it)."""

STAGING = ".noisecal-batch-"
"""Prefix of the staging folders in OUTDIR (a row's outputs before they are stored)."""
LOCK = ".noisecal-batch.lock"


@dataclass(frozen=True)
class Row:
    """One manifest row, checked and with absolute paths.

    Attributes
    ----------
    index : int
        Position in the manifest, from 0.
    where : str
        ``manifest, line N`` (CSV) or ``manifest, row N`` (YAML), for messages.
    job, unit, sensor : str
    recording : str
        Absolute path of the recording (the detections for ``targets``).
    files : dict of str to str
        Further inputs by column (``truth``, ``camera``, …), absolute paths.
    options : dict
        Keyword options of the job, typed.
    """

    index: int
    where: str
    job: str
    unit: str
    sensor: str
    recording: str
    files: dict
    options: dict

    @property
    def stem(self) -> str:
        """Outputs are ``OUTDIR/<unit>/<stem>.yaml`` (and ``.png``)."""
        return f"{self.sensor}.{self.job}"

    def label(self) -> str:
        return history.printable(f"{self.unit}/{self.sensor} {self.job}")


@dataclass(frozen=True)
class Outcome:
    """What comes back from a worker for one row (no arrays).

    Attributes
    ----------
    index : int
        The row.
    status : {"done", "unchanged", "failed"}
        ``unchanged``: the inputs hash to the stamp's value, nothing was run.
    digest : str
        SHA-256 over the job, its options and every input file's content.
    error : str
        The one-line error of a failed row.
    staging : str
        Folder holding the row's outputs under their final names.
    input_sha256 : str
        The recording's SHA-256, as its own command stores it.
    verdict : str or None
        A re-check's verdict.
    parameters : list of history.Parameter
        The fitted numbers the history stores.
    """

    index: int
    status: str
    digest: str = ""
    error: str = ""
    staging: str = ""
    input_sha256: str = ""
    verdict: str | None = None
    parameters: list = field(default_factory=list)


@dataclass(frozen=True)
class RowReport:
    """How a row ended in this batch.

    Attributes
    ----------
    row : Row or None
        None for a row refused while reading the manifest.
    where : str
    status : {"done", "unchanged", "failed"}
    message : str
        The error of a failed row; the verdict of a re-check.
    run_id : int or None
        The history run (for ``done``, and ``unchanged`` rows: the earlier run).
    outputs : tuple of str
    """

    row: Row | None
    where: str
    status: str
    message: str = ""
    run_id: int | None = None
    outputs: tuple = ()


@dataclass(frozen=True)
class BatchResult:
    """Every row's report, in manifest order.

    Attributes
    ----------
    rows : tuple of RowReport
    outdir, db : str
    scheduler : str
        ``local (N workers)`` or the scheduler's address.
    dashboard : str or None
        The Dask dashboard's address, when the cluster has one.
    """

    rows: tuple
    outdir: str
    db: str
    scheduler: str
    dashboard: str | None = None

    @property
    def ok(self) -> bool:
        """Whether every row is done or unchanged."""
        return all(r.status != "failed" for r in self.rows)

    @property
    def exit_status(self) -> int:
        """0 when every row succeeded, 1 when one or more failed."""
        return 0 if self.ok else 1

    def count(self, status: str) -> int:
        return sum(r.status == status for r in self.rows)

    def summary(self) -> str:
        return summary(self)


# --------------------------------------------------------------------------- manifest


def _convert(kind, key: str, value, where: str, base: Path):
    """A manifest option value as its kind (text from a CSV, or a YAML scalar)."""
    text = value if isinstance(value, str) else None
    try:
        if kind is int:
            if isinstance(value, bool):
                raise ValueError
            return value if isinstance(value, int) else int(str(value).strip())
        if kind is float:
            if isinstance(value, bool):
                raise ValueError
            return float(value)
        if kind is bool:
            if isinstance(value, bool):
                return value
            low = str(value).strip().lower()
            if low in ("true", "yes", "1"):
                return True
            if low in ("false", "no", "0"):
                return False
            raise ValueError
        if kind is list:
            items = value if isinstance(value, list) else str(value).split(",")
            return [str(v).strip() for v in items if str(v).strip()]
        if kind == "floats":
            items = value if isinstance(value, list) else str(value).split(",")
            return [float(v) for v in items]
        if kind is Path:
            return str((base / str(value)).resolve()) if str(value) else None
        return str(value)
    except (TypeError, ValueError):
        raise InputError(f"{where}: option {key}={value!r} is not "
                         f"{_KIND_TEXT.get(kind, 'valid')}; fix it in the manifest") from None


_KIND_TEXT = {int: "a whole number", float: "a number", bool: "true or false",
              "floats": "numbers separated by commas", list: "names separated by commas"}


def _options(job: str, raw, where: str, base: Path) -> dict:
    """The ``options`` cell (``key=value`` words) or mapping, checked against the job."""
    if raw is None or raw == "":
        return {}
    if isinstance(raw, str):
        try:
            words = shlex.split(raw)
        except ValueError as exc:
            raise InputError(f"{where}: options {raw!r} cannot be split ({exc}); write "
                             "key=value words, e.g. reps=200 seed=1") from None
        pairs = {}
        for word in words:
            key, eq, value = word.partition("=")
            if not eq or not key:
                raise InputError(f"{where}: option {word!r} is not key=value; write e.g. "
                                 "reps=200 seed=1")
            pairs[key.strip()] = value
        raw = pairs
    if not isinstance(raw, dict):
        raise InputError(f"{where}: options must be key=value words (CSV) or a mapping "
                         "(YAML)")
    allowed = OPTIONS[job]
    out = {}
    for key, value in raw.items():
        key = str(key).replace("-", "_")
        if key not in allowed:
            have = ", ".join(allowed) or "none"
            raise InputError(f"{where}: {history.printable(key)} is not an option of "
                             f"{job}; its options are {have}")
        out[key] = _convert(allowed[key], key, value, where, base)
    return out


def _safe_name(what: str, value: str, where: str) -> str:
    """A unit serial or sensor name usable as one folder or file name."""
    value = value.strip()
    if not value:
        raise InputError(f"{where}: the {what} is empty; give one for every row")
    if value.startswith(".") or any(c in value for c in "/\\") or \
            not value.isprintable():
        raise InputError(f"{where}: {what} {history.printable(value)!r} cannot name a "
                         "folder or file (a leading dot, a slash or a control character); "
                         "rename it in the manifest")
    return value


def _row(index: int, where: str, cells: dict, base: Path) -> Row:
    """One row from its cells (text or YAML values), every check a one-line error."""
    job = str(cells.get("job") or "").strip()
    if job not in JOBS:
        raise InputError(f"{where}: job {history.printable(job)!r} is not one of "
                         f"{', '.join(JOBS)}")
    unit = _safe_name("unit", str(cells.get("unit") or ""), where)
    sensor = _safe_name("sensor", str(cells.get("sensor") or ""), where)
    recording = str(cells.get("recording") or "").strip()
    if not recording:
        raise InputError(f"{where}: no recording; give its path (relative to the manifest)")
    files = {}
    for col in FILE_COLUMNS:
        value = str(cells.get(col) or "").strip()
        if not value:
            continue
        if col not in TAKES[job]:
            raise InputError(f"{where}: a {job} row does not read a {col} file; leave the "
                             f"{col} cell empty")
        files[col] = str((base / value).resolve())
    missing = [c for c in NEEDS[job] if c not in files]
    if missing:
        raise InputError(f"{where}: a {job} row needs {' and '.join(missing)}; fill the "
                         f"{missing[0]} cell")
    return Row(index, where, job, unit, sensor, str((base / recording).resolve()), files,
               _options(job, cells.get("options"), where, base))


def read_manifest(path: str | Path) -> list:
    """The manifest's rows: a :class:`Row`, or a :class:`RowReport` of a refused row.

    Parameters
    ----------
    path : str or Path
        A CSV whose header holds ``job,recording,unit,sensor`` (and any of
        ``truth, camera, survey, baseline, map, config, poses, options``), or a YAML
        file ``rows: [{job: …, recording: …, unit: …, sensor: …, options: {…}}]``.
        Paths are relative to the manifest's folder.

    Returns
    -------
    list
        In manifest order.

    Raises
    ------
    InputError
        A manifest that cannot be read at all (missing, not UTF-8, no header, an
        unknown column): one line, nothing is run.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such manifest file; give the CSV or YAML listing the "
                         "rows")
    base = path.resolve().parent
    entries = []  # (where, cells)
    if path.suffix.lower() in (".yaml", ".yml"):
        from ..ingest.yaml_file import read_yaml

        doc = read_yaml(path, "manifest")
        rows = doc.get("rows") if isinstance(doc, dict) else None
        if not isinstance(rows, list):
            raise InputError(f"{path}: a YAML manifest is a mapping with a list 'rows'; "
                             "see the README's batch section")
        for k, cells in enumerate(rows, 1):
            entries.append((f"{path}, row {k}", cells if isinstance(cells, dict) else None))
    else:
        try:
            text = path.read_text(encoding="utf-8-sig")
        except UnicodeDecodeError as exc:
            raise InputError(f"{path}: the manifest is not UTF-8 text (byte {exc.start}); "
                             "save it as UTF-8") from None
        reader = csv.reader(io.StringIO(text))
        header = next(reader, None)
        if not header:
            raise InputError(f"{path}: empty manifest; the first line is the header "
                             "job,recording,unit,sensor")
        header = [h.strip().lower() for h in header]
        missing = [c for c in REQUIRED if c not in header]
        unknown = [c for c in header if c not in COLUMNS]
        if missing or unknown:
            what = (f"no column {', '.join(missing)}" if missing else
                    f"unknown column {history.printable(unknown[0])!r}")
            raise InputError(f"{path}, line 1: {what}; the columns are "
                             f"{','.join(REQUIRED)} and optionally {', '.join(COLUMNS[4:])}")
        for cells in reader:
            line = reader.line_num
            if not any(c.strip() for c in cells):
                continue
            if len(cells) > len(header):
                entries.append((f"{path}, line {line}", None))
                continue
            entries.append((f"{path}, line {line}", dict(zip(header, cells))))
    out: list = []
    seen: dict = {}
    for index, (where, cells) in enumerate(entries):
        try:
            if cells is None:
                raise InputError(f"{where}: not a row of the manifest's columns (more cells "
                                 "than the header: quote a cell that holds commas; or, in "
                                 "YAML, not a mapping)")
            row = _row(index, where, cells, base)
            key = (row.unit, row.stem)
            if key in seen:
                raise InputError(f"{where}: the same unit, sensor and job as {seen[key]}; "
                                 "give the sensor another name so the outputs do not clash")
            seen[key] = where
            out.append(row)
        except InputError as exc:
            out.append(RowReport(None, where, "failed", str(exc)))
    if not out:
        raise InputError(f"{path}: the manifest lists no rows")
    return out


# --------------------------------------------------------------------------- worker side


def _digest(row: Row) -> str:
    """SHA-256 over the job, its options and each input file's content."""
    from ..ingest.cache import file_digest

    files = {"recording": row.recording, **row.files}
    if row.options.get("limits"):
        files["limits"] = row.options["limits"]
    hashes = {}
    for role, p in sorted(files.items()):
        try:
            hashes[role] = file_digest(Path(p))
        except FileNotFoundError:
            raise InputError(f"{row.where}: {role} {p}: no such file") from None
        except IsADirectoryError:
            raise InputError(f"{row.where}: {role} {p}: a folder, not a file") from None
        except OSError as exc:
            raise InputError(f"{row.where}: {role} {p}: cannot be read "
                             f"({exc.strerror})") from None
    text = json.dumps({"job": row.job, "options": row.options, "inputs": hashes},
                      sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def _facts(job: str, result):
    """(sections stored, the recording's SHA-256, verdict): what the history keeps."""
    if job == "recheck":
        prov = result.new_sections.get("provenance", {})
        sha = (prov.get("input") or prov.get("detections") or {}).get("sha256", "")
        return result.new_sections, sha, result.verdict
    if job == "targets":
        return result.sections, result.detections.sha256, None
    source = {"static": "recording", "motion": "sensor", "odometry": "odometry"}[job]
    return result.sections, getattr(result, source).source.sha256, None


def _call(row: Row, out: str, command: str):
    """The row's job, through the same function its own command calls."""
    o, f = dict(row.options), row.files
    if row.job == "static":
        from .static import run_static

        return run_static(row.recording, out, quiet=True, command=command, **o)
    if row.job == "motion":
        from .motion import run_motion

        if "gate" in o:
            o["gate_probability"] = o.pop("gate")
        return run_motion(row.recording, f["truth"], out, map_path=f.get("map"),
                          quiet=True, command=command, **o)
    if row.job == "odometry":
        from .odometry import run_odometry

        return run_odometry(row.recording, f["truth"], f["config"], out, quiet=True,
                            command=command, **o)
    if row.job == "targets":
        from .targets import run_targets

        if "gate" in o:
            o["gate_probability"] = o.pop("gate")
        return run_targets(row.recording, f["survey"], f["camera"], out, command=command,
                           poses_path=f.get("poses"), **o)
    from .recheck import run_recheck

    side = {k: f[k] for k in ("map", "config", "camera", "survey") if k in f}
    return run_recheck(f["baseline"], row.recording, out, truth=f.get("truth"),
                       command=command, files=side, poses=f.get("poses"), **o)


def run_row(row: Row, outdir: str, known: str | None, token: str,
            command: str = "") -> Outcome:
    """Run one row on a worker (a Dask task); never raises for bad input.

    Parameters
    ----------
    row : Row
    outdir : str
        The batch's output folder (shared storage the worker can write).
    known : str or None
        The input digest of the row's stored run; when the inputs still hash to it,
        nothing is run (``unchanged``).
    token : str
        This batch's token (names the staging folder).
    command : str
        For the outputs' provenance.

    Returns
    -------
    Outcome
    """
    from .history import parameters_of

    staging = None
    try:
        digest = _digest(row)
        if known is not None and digest == known:
            return Outcome(row.index, "unchanged", digest)
        staging = Path(outdir) / f"{STAGING}{token}-{row.index}"
        shutil.rmtree(staging, ignore_errors=True)
        staging.mkdir()
        result = _call(row, str(staging / f"{row.stem}.yaml"), command)
        sections, sha, verdict = _facts(row.job, result)
        return Outcome(row.index, "done", digest, staging=str(staging), input_sha256=sha,
                       verdict=verdict, parameters=parameters_of(sections))
    except NoisecalError as exc:
        message = str(exc)
    except MemoryError:
        message = "out of memory on the worker; run this row alone or on a larger machine"
    except OSError as exc:
        message = (f"the worker could not write in {outdir} ({exc.strerror or exc}); the "
                   "workers need OUTDIR at the same path, writable (shared storage)")
    except Exception as exc:  # noqa: BLE001 - one row's bug must not end the batch
        message = (f"unexpected {type(exc).__name__}: {exc} (a fault in noisecal; please "
                   "report it with this row)")
    if staging is not None:
        shutil.rmtree(staging, ignore_errors=True)
    where = row.where
    first = " ".join(message.split())
    return Outcome(row.index, "failed", error=first if first.startswith(where)
                   else f"{where}: {first}")


# --------------------------------------------------------------------------- client side


def _stamp_path(outdir: Path, row: Row) -> Path:
    return outdir / row.unit / f".{row.stem}.done.json"


def _targets(outdir: Path, row: Row) -> list:
    folder = outdir / row.unit
    return [folder / f"{row.stem}.yaml", folder / f"{row.stem}.png"]


def _stored(con, run_id, stamp: dict) -> bool:
    """Whether the history holds the stamp's run (same id, unit, sensor, job, date)."""
    found = con.execute("SELECT unit, sensor, job, date FROM runs WHERE id = ?",
                        (int(run_id),)).fetchone()
    return found is not None and list(found) == [stamp.get("unit"), stamp.get("sensor"),
                                                 stamp.get("job"), stamp.get("date")]


def _known(store, outdir: Path, row: Row):
    """(digest, run id) of the row's stored run when its stamp, files and history row
    agree; None otherwise. A stamp whose run is not in the history (the batch stopped
    between the two) counts as not done."""
    con = store.existing
    if con is None:
        return None
    try:
        stamp = json.loads(_stamp_path(outdir, row).read_text(encoding="utf-8"))
        files = [outdir / row.unit / name for name in stamp["files"]]
        if all(p.is_file() for p in files) and _stored(con, stamp["run_id"], stamp):
            return stamp["digest"], int(stamp["run_id"])
    except (OSError, ValueError, KeyError, TypeError):
        pass
    return None


def _record(con, db: Path, outdir: Path, row: Row, outcome: Outcome) -> tuple:
    """Store a done row: one history transaction inside which its stamp and files are
    put in place (stamp first: an output in place always has one). Returns
    (run id, outputs)."""
    folder = outdir / row.unit
    folder.mkdir(exist_ok=True)
    staging = Path(outcome.staging)
    names = sorted(p.name for p in staging.iterdir() if p.is_file())
    date = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
    job = HISTORY_JOB.get(row.job, row.job)
    with history.adding_run(con, db, row.unit, row.sensor, job, outcome.input_sha256,
                            f"noisecal {__version__}", outcome.parameters, outcome.verdict,
                            date) as run_id:
        stamp = {"digest": outcome.digest, "run_id": run_id, "unit": row.unit,
                 "sensor": row.sensor, "job": job, "date": date, "files": names}
        with atomic_path(_stamp_path(outdir, row), overwrite=True) as tmp:
            tmp.write_text(json.dumps(stamp, indent=1), encoding="utf-8")
        for name in names:
            os.replace(staging / name, folder / name)
    shutil.rmtree(staging, ignore_errors=True)
    outputs = tuple(str(folder / n) for n in names)
    WRITTEN.extend(outputs)
    return run_id, outputs


class _History:
    """The history database: an existing one opened (validated, migrated) now, before
    any work; a new one only checked now and created when the first run is stored, so
    that a batch refused early leaves no database behind."""

    def __init__(self, path: Path):
        self.path = path
        self.existing = history.connect(path) if path.exists() else None
        if self.existing is None:
            history.check_new(path)

    @property
    def con(self):
        if self.existing is None:
            self.existing = history.connect(self.path)
        return self.existing

    def close(self) -> None:
        if self.existing is not None:
            self.existing.close()


class _Lock:
    """One batch at a time on an output folder (an advisory lock file in it)."""

    def __init__(self, outdir: Path):
        self.path = outdir / LOCK
        self.fh = open(self.path, "a+")
        try:
            fcntl.flock(self.fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            self.fh.close()
            raise InputError(f"-o {outdir}: another batch is writing to this folder; wait "
                             "for it to finish or give another folder") from None

    def release(self) -> None:
        self.fh.close()


def _client(scheduler: str | None, workers: int | None):
    """A Dask client: on the scheduler at ``scheduler``, or on a new local cluster of
    ``workers`` processes (default one per core), one task thread each (a job runs
    its own threads for channels and bootstrap chunks)."""
    try:
        import logging

        from distributed import Client, LocalCluster
    except ImportError:
        raise InputError("noisecal batch needs Dask: pip install 'noisecal[fleet]'") \
            from None
    if scheduler:
        try:
            return Client(scheduler, timeout="20s"), None, scheduler
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(f"--scheduler {scheduler}: no Dask scheduler answered "
                             f"({type(exc).__name__}); check the address and that the "
                             "scheduler runs") from None
    from ..paths import threads

    cores = threads()
    n = workers or cores
    # A free port each time (two batches, or tests, side by side). Each worker's jobs
    # share out the cores (NOISECAL_THREADS) instead of each sizing its pools to all.
    cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                           dashboard_address=":0", silence_logs=logging.ERROR,
                           host="127.0.0.1",
                           env={"NOISECAL_THREADS": str(max(1, cores // n))})
    return Client(cluster), cluster, f"local ({n} worker{'s' * (n != 1)})"


def _dashboard(client, local: bool) -> str | None:
    """The dashboard's address; a local one only when bokeh can draw it."""
    if local:
        try:
            import bokeh  # noqa: F401
        except ImportError:
            return None
    try:
        if "dashboard" in client.scheduler_info().get("services", {}):
            return client.dashboard_link
    except Exception:  # noqa: BLE001 - the address is a courtesy
        pass
    return None


def run_batch(manifest: str | Path, outdir: str | Path, db: str | Path | None = None,
              scheduler: str | None = None, workers: int | None = None,
              overwrite: bool = False, quiet: bool = False, command: str = "",
              say=None) -> BatchResult:
    """Run every row of a manifest on Dask workers; store each run once.

    Parameters
    ----------
    manifest : str or Path
        CSV or YAML manifest (see :func:`read_manifest`).
    outdir : str or Path
        Output folder: ``<unit>/<sensor>.<job>.yaml`` and ``.png`` per row (created
        if its parent exists).
    db : str or Path, optional
        History database (default ``OUTDIR/history.db``).
    scheduler : str, optional
        Address of a running Dask scheduler (``tcp://host:8786``); default a local
        cluster of processes.
    workers : int, optional
        Processes of the local cluster (default one per core).
    overwrite : bool
        Run every row again, even those whose inputs are unchanged, and replace
        output files no batch wrote.
    quiet : bool
        No progress bar.
    command : str
        Command line, for the provenance.
    say : callable, optional
        Receives a line per finished row (and the dashboard address).

    Returns
    -------
    BatchResult
    """
    say = say or (lambda text: None)
    outdir = Path(outdir)
    if not outdir.is_dir() and (outdir.exists() or not outdir.resolve().parent.is_dir()):
        raise InputError(f"-o {outdir}: not a folder, or its parent does not exist; "
                         "give a folder (it is created inside an existing one)")
    db = Path(db) if db else outdir / "history.db"
    entries = read_manifest(manifest)
    created = not outdir.exists()
    if created:
        outdir.mkdir()
    lock = _Lock(outdir)
    try:
        for old in outdir.glob(f"{STAGING}*"):  # a stopped batch's leftovers
            shutil.rmtree(old, ignore_errors=True)
        store = _History(db)
        try:
            return _run(entries, outdir, db, store, scheduler, workers, overwrite, quiet,
                        command, say)
        finally:
            store.close()
    finally:
        lock.release()
        if created and [p.name for p in outdir.iterdir()] == [LOCK]:
            # Nothing was stored: leave nothing behind (a refused scheduler, Ctrl-C).
            (outdir / LOCK).unlink(missing_ok=True)
            outdir.rmdir()


def _run(entries, outdir, db, store, scheduler, workers, overwrite, quiet, command, say):
    reports: dict = {}
    todo = []  # (row, known digest)
    known_runs: dict = {}
    for e in entries:
        if isinstance(e, RowReport):
            reports[id(e)] = e
            say(e.message)
            continue
        k = None if overwrite else _known(store, outdir, e)
        if k is not None:
            known_runs[e.index] = k[1]
        elif not overwrite and not _stamp_path(outdir, e).exists():
            foreign = [p for p in _targets(outdir, e) if p.exists()]
            if foreign:
                reports[e.index] = RowReport(
                    e, e.where, "failed", f"{e.where}: {foreign[0]} exists and no batch "
                    "wrote it; move it away or pass --overwrite")
                continue
        todo.append((e, None if k is None else k[0]))
    token = uuid.uuid4().hex[:12]
    dashboard = None
    where = scheduler or ""
    if todo:
        client, cluster, where = _client(scheduler, workers)
        try:
            dashboard = _dashboard(client, cluster is not None)
            if dashboard:
                say(f"Dask dashboard: {dashboard}")
            _submit(client, todo, outdir, db, store, token, command, quiet, say, reports,
                    known_runs)
        finally:
            try:
                client.close()
                if cluster is not None:
                    cluster.close()
            except Exception:  # noqa: BLE001 - closing must not hide the batch's outcome
                pass
            # This batch's staging folders, and those a stopped batch's tasks still
            # running on a shared cluster made after this one started (the lock says
            # no other batch is using the folder).
            for old in outdir.glob(f"{STAGING}*"):
                shutil.rmtree(old, ignore_errors=True)
    ordered = [reports[id(e)] if isinstance(e, RowReport) else reports[e.index]
               for e in entries]
    return BatchResult(tuple(ordered), str(outdir), str(db), where, dashboard)


def _submit(client, todo, outdir, db, store, token, command, quiet, say, reports,
            known_runs):
    """Submit the rows, store each done one as it arrives (the client's only writes)."""
    from distributed import as_completed

    rows = {row.index: row for row, _ in todo}
    futures = [client.submit(run_row, row, str(outdir.resolve()), known, token, command,
                             key=f"noisecal-row-{token}-{row.index}", pure=False)
               for row, known in todo]
    bar = None
    if visible(quiet):
        from tqdm import tqdm

        bar = tqdm(total=len(futures), desc="rows", unit="row", file=sys.stderr)
    try:
        for future in as_completed(futures):
            index = int(future.key.rsplit("-", 1)[1])
            row = rows[index]
            try:
                outcome = future.result()
            except Exception as exc:  # noqa: BLE001 - a lost worker fails its row only
                outcome = Outcome(index, "failed", error=(
                    f"{row.where}: the worker running this row was lost "
                    f"({type(exc).__name__}); run the batch again to retry it"))
            reports[index] = _report(store, db, outdir, row, outcome, known_runs)
            r = reports[index]
            text = {"done": f"done, run {r.run_id}",
                    "unchanged": f"unchanged, run {r.run_id} kept",
                    "failed": r.message}[r.status]
            if r.status == "done" and row.job == "recheck" and r.message:
                text += f", verdict {r.message}"
            line = f"{row.label()}: {text}" if r.status != "failed" else text
            if bar is not None:
                bar.write(history.printable(line), file=sys.stderr)
                bar.update(1)
            else:
                say(line)
    finally:
        if bar is not None:
            bar.close()
        for f in futures:
            if not f.done():
                f.cancel()


def _report(store, db, outdir, row, outcome, known_runs) -> RowReport:
    if outcome.status == "unchanged":
        files = _targets(outdir, row)
        return RowReport(row, row.where, "unchanged", run_id=known_runs.get(row.index),
                         outputs=tuple(str(p) for p in files if p.exists()))
    if outcome.status == "failed":
        return RowReport(row, row.where, "failed", outcome.error)
    try:
        run_id, outputs = _record(store.con, db, outdir, row, outcome)
    except NoisecalError as exc:
        shutil.rmtree(outcome.staging, ignore_errors=True)
        return RowReport(row, row.where, "failed", f"{row.where}: {exc}")
    except OSError as exc:
        shutil.rmtree(outcome.staging, ignore_errors=True)
        return RowReport(row, row.where, "failed", f"{row.where}: could not put the outputs "
                         f"in place ({exc.strerror}); nothing was stored; run again")
    return RowReport(row, row.where, "done", outcome.verdict or "", run_id, outputs)


def summary(result: BatchResult) -> str:
    """The closing lines: counts, failed rows, where the history is."""
    n = len(result.rows)
    lines = [f"{n} row{'s' * (n != 1)} on {result.scheduler or 'no cluster (nothing to run)'}"
             f": {result.count('done')} done, {result.count('unchanged')} unchanged "
             f"(skipped), {result.count('failed')} failed; history in {result.db}"]
    failed = [r for r in result.rows if r.status == "failed"]
    if failed:
        lines.append("failed rows:")
        lines += [f"  {r.message}" for r in failed]
    return "\n".join(history.printable(line) for line in lines)
