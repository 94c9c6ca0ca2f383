"""Ingest: read a recording file into one validated, SI :class:`Recording`.

CSV and Parquet are streamed in blocks; with the cache on (the default) the
blocks go straight into memory-mapped ``.npy`` files of a cache entry, so a
second run over the same file starts at once and a recording larger than
the memory still runs. A repair (``--repair``) reads into memory and skips
the cache.
"""

from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

from ..errors import InputError, OutputError
from ..paths import LockedFolder, clean_stale, scratch_parent, usable_cache_root
from ..types import Gap, Recording, SaturatedRun, Source
from . import cache
from .columnar import NpzSource, ParquetSource
from .csv_reader import CsvSource
from .header import parse_header
from .ros_bag import BagSource, RosInput, bag_digest, is_bag
from .ros_csv import RosCsvSource, is_ros_export
from .sink import NpySink, release_free_memory
from .validate import REPAIRS, read_into_memory, stream, summarize

SOURCES = {".csv": CsvSource, ".txt": CsvSource, ".parquet": ParquetSource,
           ".pq": ParquetSource, ".npz": NpzSource}
CACHED = ("csv", "parquet")


def _open(path: Path, msgtype: str | None = None):
    if not path.exists():
        raise InputError(f"{path}: no such file; check the path")
    if not path.is_file():
        raise InputError(f"{path}: not a file; give a recording file")
    kind = SOURCES.get(path.suffix.lower())
    if kind is None:
        raise InputError(f"{path}: unknown file type {path.suffix!r}; give a .csv, "
                         ".parquet or .npz recording, or a ROS bag (.bag, .mcap, .db3, or a "
                         "ROS 2 bag folder)")
    try:
        if kind is CsvSource and is_ros_export(path):
            return RosCsvSource(path, msgtype)
        if msgtype is not None:
            raise InputError(f"{path}: --type applies to ROS bags and ROS CSV exports; this "
                             "file's header names its units, leave --type out")
        return kind(path)
    except PermissionError:
        raise InputError(f"{path}: permission denied; make the file readable") from None


def _recording(path, meta: dict, time, cols) -> Recording:
    src = Source(str(path), meta["sha256"], meta["size_bytes"], meta["format"],
                 tuple(meta["repairs"]), tuple(meta.get("notes", ())))
    return Recording(
        time=time, start_time=meta["start_time"], columns=tuple(cols),
        channels=tuple(meta["names"]), units=tuple(meta["units"]),
        source_units=tuple(meta["source_units"]), period=meta["period"],
        jitter=meta["jitter"], gaps=tuple(Gap(**g) for g in meta["gaps"]),
        saturated=tuple(SaturatedRun(**r) for r in meta["saturated"]), source=src)


def _meta(source, header, digest, size, start, time, cols, repairs, extremes=None) -> dict:
    if time.shape[0] < 3:
        raise InputError(f"{source.path}: {time.shape[0]} sample(s); at least 3 are needed")
    period, jitter, gaps, saturated = summarize(time, cols, header.names, extremes)
    return {
        "layout": cache.LAYOUT, "names": list(header.names), "units": list(header.units),
        "source_units": list(header.source_units), "format": source.format,
        "sha256": digest, "size_bytes": size, "start_time": start, "n": int(time.shape[0]),
        "period": period, "jitter": jitter, "repairs": list(repairs),
        "gaps": [g.__dict__ for g in gaps], "saturated": [r.__dict__ for r in saturated],
    }


def read_recording(path: str | Path, repair: str | None = None, use_cache: bool = True,
                   progress=None) -> Recording:
    """Read and validate a recording file.

    Parameters
    ----------
    path : str, Path or RosInput
        A ``.csv``, ``.parquet``/``.pq`` or ``.npz`` file whose column names are
        ``name [unit]`` cells, time first (``time [s]`` or ``time [ns]``); a CSV
        exported from a ROS topic (:mod:`noisecal.ingest.ros_csv`); or a ROS bag
        (ROS 1 ``.bag``, ROS 2 folder, ``.mcap`` or ``.db3``) with its topic given
        by a :class:`~noisecal.ingest.ros_bag.RosInput`.
    repair : {None, "sort", "drop"}
        Repair for timestamps that are not strictly increasing.
    use_cache : bool
        Use the binary cache (CSV and Parquet); see :mod:`noisecal.ingest.cache`.
        A cache folder that cannot be used means no cache, with one note on stderr.
    progress : callable, optional
        ``progress(stage, done, total)`` with stage ``"hash"`` or ``"read"``.

    Returns
    -------
    Recording
        SI samples with gaps, jitter, saturation and provenance.

    Raises
    ------
    InputError
        One line naming what is wrong, where, and what to do; also when the
        file changed while it was being read (nothing is cached then).
    """
    selection = path if isinstance(path, RosInput) else RosInput(str(path))
    path = Path(path)
    if repair is not None and repair not in REPAIRS:
        raise InputError(f"--repair {repair!r} is not known; use one of {', '.join(REPAIRS)}")
    if path.exists() and is_bag(path):
        return _read_bag(path, selection, repair, progress)
    if selection.topic is not None:
        raise InputError(f"{path}: --topic applies to ROS bags (.bag, .mcap, .db3 or a ROS 2 "
                         "bag folder); leave it out for this file")
    source = _open(path, selection.msgtype)
    state = _state(path)
    size = state[1]
    tick = (lambda stage: (lambda done: progress(stage, done, size))) if progress else (lambda s: None)
    cached = use_cache and repair is None and source.format in CACHED
    root = usable_cache_root() if cached else None
    if root is not None:
        _clean_once(root)
    cached = root is not None
    known = cache.known_hash(root, state)
    if known is not None:
        hit = cache.load(root, known, expect_probe=_probe(path))
        if hit is not None and _state(path) == state:
            return _recording(path, *hit)  # the header was checked when the entry was made
        cache.forget(root, state)
        known = None  # the index was wrong or the entry damaged: hash the file again
    header = parse_header(source.headers, str(path))
    extremes = None
    with _Hasher(path, known, tick("hash")) as hasher:
        if cached:
            return _read_cached(path, source, header, state, root, hasher, tick("read"))
        if repair is not None:
            start, time, cols, note = read_into_memory(source, header, repair, tick("read"))
        else:
            # Stream through scratch files so memory holds one copy, not blocks + copy;
            # the folder is locked, so a run killed outright leaves it for the next to clean.
            parent = scratch_parent()
            _clean_once(parent, SCRATCH)
            work = LockedFolder(parent, SCRATCH)
            sink = NpySink(work.path, len(header.names))
            try:
                start = stream(source, header, sink, None, tick("read"))
                extremes = sink.extremes  # the clipping search reads only a few blocks
                release_free_memory()
                time, cols = sink.finish(in_memory=True)
            finally:
                sink.close()
                work.release()
            note = None
        digest = hasher.result()
    _unchanged(path, state)
    repairs = (f"--repair {repair}: {note}",) if note else ()
    meta = _meta(source, header, digest, size, start, time, cols, repairs, extremes)
    meta["notes"] = list(getattr(source, "notes", ()))
    return _recording(path, meta, time, cols)


def _read_bag(path: Path, selection: RosInput, repair, progress) -> Recording:
    """One topic of a ROS bag as a Recording (decoded in memory; not cached)."""
    source = _readable(lambda p: BagSource(p, selection.topic, selection.msgtype), path)
    header = parse_header(source.headers, f"{path}, topic {source.topic}")
    start, time, cols, note = read_into_memory(source, header, repair, None)
    digest, size = _readable(bag_digest, path)
    if progress:
        progress("read", size, size)
    repairs = (f"--repair {repair}: {note}",) if note else ()
    meta = _meta(source, header, digest, size, start, time, cols, repairs)
    meta["notes"] = list(source.notes)
    return _recording(path, meta, time, cols)


SCRATCH = "noisecal-scratch-"
_cleaned: set = set()


def _clean_once(folder: Path, prefix: str | None = None) -> None:
    """Remove leftovers of interrupted runs, once per process and folder."""
    if (folder, prefix) in _cleaned:
        return
    _cleaned.add((folder, prefix))
    if prefix is None:
        cache.clean(folder)
    else:
        clean_stale(folder, prefix)


def _readable(look, path: Path):
    """``look(path)``, an OSError turned into the one-line input error."""
    try:
        return look(path)
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror}); check the path "
                         "and permissions") from None


def _state(path: Path) -> tuple:
    return _readable(cache.file_state, path)


def _probe(path: Path) -> str:
    return _readable(cache.probe, path)


def _unchanged(path: Path, state: tuple) -> None:
    """Refuse a file whose size, times or inode changed while it was read."""
    if _state(path) != state:
        raise InputError(f"{path}: the file changed while it was being read (a logger "
                         "still writing, or a copy under way); wait until it is complete, "
                         "or analyse a copy, and run again")


class _Hasher:
    """The input's SHA-256, computed on a thread beside the parse.

    hashlib releases the GIL, so on two cores the hash costs little wall time;
    leaving the block early (a bad file, Ctrl-C) stops it.
    """

    def __init__(self, path: Path, known: str | None, progress):
        self._known = known
        self._stop = threading.Event()
        self._pool = None if known else ThreadPoolExecutor(1)
        self._future = (None if known else
                        self._pool.submit(cache.file_digest, path, progress, self._stop))

    def result(self) -> str:
        return self._known if self._future is None else self._future.result()

    def __enter__(self):
        return self

    def __exit__(self, kind, *rest):
        if kind is not None:
            self._stop.set()
        if self._pool is not None:
            self._pool.shutdown(wait=True)
        return False


def _read_cached(path, source, header, state, root, hasher, tick) -> Recording:
    """Stream into a new cache entry, then serve the recording from it.

    The entry is committed only if the file's state after the read and the
    hash is the one taken before it, so its name (the hash) and its data come
    from the same bytes.
    """
    try:
        work = cache.new_entry(root)
    except OSError as exc:
        raise OutputError(f"{root}: cannot write to the cache folder ({exc.strerror}); "
                          "free some space or pass --no-cache") from None
    sink = None
    try:
        sink = NpySink(work.path, len(header.names))
        start = stream(source, header, sink, None, tick)
        time, cols = sink.finish()
        digest = hasher.result()
        fingerprint = _probe(path)
        _unchanged(path, state)
        release_free_memory()
        if cache.load(root, digest) is not None:
            # Same bytes under another name or a new mtime: keep the entry there is.
            sink.close()
            work.release()
        else:
            meta = _meta(source, header, digest, state[1], start, time, cols, (),
                         sink.extremes)
            meta["probe"] = fingerprint
            del time, cols
            cache.commit(work, root, digest, meta)
        cache.remember(root, state, digest)
    except OSError as exc:
        if sink is not None:
            sink.close()
        work.release()
        if exc.filename and Path(exc.filename) == path:
            raise InputError(f"{path}: cannot be read ({exc.strerror}); check the file") from None
        raise OutputError(f"{root}: cannot write to the cache folder ({exc.strerror}); "
                          "free some space or pass --no-cache") from None
    except BaseException:
        if sink is not None:
            sink.close()
        work.release()
        raise
    hit = cache.load(root, digest)
    if hit is None:
        raise OutputError(f"{cache.entry_dir(root, digest)}: the cache entry just "
                          "written cannot be read; check the disk or pass --no-cache")
    return _recording(path, *hit)
