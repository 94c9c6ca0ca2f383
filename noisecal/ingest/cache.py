"""Binary cache of validated recordings: memory-mapped ``.npy`` per column.

An entry is a folder named by the input's SHA-256 (and the cache layout
version) holding ``time.npy``, ``c<i>.npy`` and ``meta.json`` (header,
units, period, gaps, … — everything validation found). It is written in a
locked temporary folder beside it and renamed into place, so an interrupted
write leaves no entry; leftovers of a run killed outright are removed by the
next run (:func:`clean`).

What is checked, and when:

* ``meta.json`` holds, for each column file, its stat fingerprint when written
  (size, mtime and ctime in ns, inode) and the CRC-32 of ``SAMPLE_WINDOWS``
  windows spread over it (the first and last included), and a SHA-256 of its
  own content. On every load: the SHA-256 of ``meta.json``, the entry's
  recorded input hash (it must be the one asked for), each column's shape
  and dtype, its stat fingerprint and its sampled windows. A column whose
  fingerprint changed (any write to the file, a truncation, a copy or
  restore, even with the mtime put back: the ctime then changes) is not
  trusted. An entry that fails any check is removed, rebuilt from the input,
  and the run says so in one note on stderr.
* Not checked: bytes outside the sampled windows that changed without any
  write through the file system (a failing disk, memory errors); finding
  those means reading every byte on every load, which the cache is there to
  avoid.
* To avoid hashing a multi-GB file on every run, an index maps (real path,
  size, mtime, ctime, inode, device) to the content hash; any change to the
  file changes its ctime and forces a new hash. Each index record carries a
  checksum of itself, and an entry reached through the index must also match
  the file's size and a hash of its first and last 64 KiB (the *probe*), so
  a damaged or edited index cannot serve another file's data.
* The file's state is taken before the read and again after it; a file that
  changed in between is refused (one line) and nothing is cached, so an
  entry always holds the data of the bytes its name says.

These checks find damage (a flipped byte, a truncated file, an edited
number); they are not a defence against someone who can write the cache
folder and recompute the checksums.

Location: ``$NOISECAL_CACHE`` if set, else ``$XDG_CACHE_HOME/noisecal``, else
``~/.cache/noisecal``; a location that cannot be used (a file, read-only)
means no cache for the run, with one note.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
import zlib
from pathlib import Path

import numpy as np

from ..paths import LockedFolder, clean_stale, note
from .sink import NPY_HEADER

LAYOUT = 3
BUILDING = ".building-"
PROBE_BYTES = 1 << 16
MAP_LIMIT = 256
"""Columns up to which an entry is memory-mapped; a wider entry is read into memory,
since each memory map holds a file descriptor (the usual limit is 1024)."""
INDEX_SIZE = 1000
SAMPLE_WINDOWS = 16
"""Windows of ``SAMPLE_BYTES`` per column file checked on every load."""
SAMPLE_BYTES = 4096


def file_digest(path: Path, progress=None, stop=None) -> str | None:
    """SHA-256 of a file's bytes, read in 1 MiB blocks.

    ``stop`` (a ``threading.Event``) ends the work early and returns None; it
    lets a read that failed abandon a hash running beside it.
    """
    digest = hashlib.sha256()
    done = 0
    buffer = bytearray(1 << 20)  # reused: no allocation churn beside the parser threads
    view = memoryview(buffer)
    with open(path, "rb", buffering=0) as fh:
        while count := fh.readinto(buffer):
            if stop is not None and stop.is_set():
                return None
            digest.update(view[:count])  # releases the GIL: runs beside the parser
            done += count
            if progress:
                progress(done)
    return digest.hexdigest()


def file_state(path: Path) -> tuple:
    """What identifies a file's bytes without reading them: (real path, size,
    mtime, ctime, inode, device), times in ns."""
    st = os.stat(path)
    return (str(Path(path).resolve()), st.st_size, st.st_mtime_ns, st.st_ctime_ns,
            st.st_ino, st.st_dev)


def probe(path: Path) -> str:
    """SHA-256 of the size and the first and last ``PROBE_BYTES`` of a file."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        size = os.fstat(fh.fileno()).st_size
        digest.update(str(size).encode())
        digest.update(fh.read(PROBE_BYTES))
        fh.seek(max(0, size - PROBE_BYTES))
        digest.update(fh.read(PROBE_BYTES))
    return digest.hexdigest()


def _key(state: tuple) -> str:
    return "|".join(map(str, state))


def _record_check(key: str, digest: str) -> str:
    return hashlib.sha256(f"{key}\n{digest}".encode()).hexdigest()[:32]


def _index(root: Path) -> dict:
    try:
        table = json.loads((root / "index.json").read_text())
    except (OSError, ValueError):
        return {}
    return table if isinstance(table, dict) else {}


def known_hash(root: Path | None, state: tuple) -> str | None:
    """The file's SHA-256 from the stat index, if the file is unchanged since
    and the index record is intact."""
    if root is None:
        return None
    key = _key(state)
    record = _index(root).get(key)
    if not isinstance(record, dict):
        return None
    digest = record.get("sha256")
    if not isinstance(digest, str) or record.get("check") != _record_check(key, digest):
        return None
    return digest


def remember(root: Path | None, state: tuple, digest: str) -> None:
    """Record the hash of the file in ``state`` (the newest ``INDEX_SIZE`` files are kept)."""
    if root is None:
        return
    key = _key(state)
    table = _index(root)
    table.pop(key, None)
    table[key] = {"sha256": digest, "check": _record_check(key, digest)}
    _write_json(root / "index.json", dict(list(table.items())[-INDEX_SIZE:]))


def forget(root: Path, state: tuple) -> None:
    """Drop the index record of the file in ``state``."""
    table = _index(root)
    if table.pop(_key(state), None) is not None:
        _write_json(root / "index.json", table)


def _write_json(path: Path, data) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".tmp-", suffix=".json")
    try:
        with os.fdopen(fd, "w") as fh:
            json.dump(data, fh)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def clean(root: Path) -> int:
    """Remove partial entries and temporary files of interrupted runs; return how many."""
    return sum(clean_stale(root, prefix) for prefix in (BUILDING, ".tmp-", ".probe-"))


def entry_dir(root: Path, digest: str) -> Path:
    return root / f"v{LAYOUT}-{digest}"


def _canonical(obj) -> bytes:
    return json.dumps(obj, sort_keys=True, separators=(",", ":")).encode()


def stat_fingerprint(path: Path) -> list:
    """(size, mtime ns, ctime ns, inode) of a file: any write through the file
    system changes the ctime, which cannot be set back."""
    st = os.stat(path)
    return [st.st_size, st.st_mtime_ns, st.st_ctime_ns, st.st_ino]


def sampled_crc(path: Path) -> str:
    """CRC-32 of ``SAMPLE_WINDOWS`` windows of ``SAMPLE_BYTES`` spread evenly over a
    file, the first and the last included (8 hex digits)."""
    with open(path, "rb", buffering=0) as fh:
        size = os.fstat(fh.fileno()).st_size
        last = max(size - SAMPLE_BYTES, 0)
        crc = zlib.crc32(str(size).encode())
        for k in range(SAMPLE_WINDOWS):
            fh.seek(last * k // (SAMPLE_WINDOWS - 1))
            crc = zlib.crc32(fh.read(SAMPLE_BYTES), crc)
    return f"{crc:08x}"


class Damaged(Exception):
    """An entry failed a check (internal; :func:`load` turns it into a rebuild)."""


def _stored_checksum(stored: dict) -> str:
    return hashlib.sha256(_canonical({k: v for k, v in stored.items()
                                      if k != "meta_sha256"})).hexdigest()


def _read_entry(folder: Path, digest: str):
    try:
        stored = json.loads((folder / "meta.json").read_text())
    except (OSError, ValueError) as exc:
        raise Damaged(f"meta.json unreadable ({type(exc).__name__})") from None
    if not isinstance(stored, dict) or not isinstance(stored.get("meta"), dict):
        raise Damaged("meta.json has another layout")
    if stored.get("meta_sha256") != _stored_checksum(stored):
        raise Damaged("meta.json does not match its checksum")
    meta, stats, samples = stored["meta"], stored.get("stat"), stored.get("sampled")
    if meta.get("sha256") != digest or meta.get("layout") != LAYOUT:
        raise Damaged("the entry records another input hash")
    names = ["time.npy"] + [f"c{i}.npy" for i in range(len(meta["names"]))]
    for table in (stats, samples):
        if not isinstance(table, dict) or sorted(table) != sorted(names):
            raise Damaged("meta.json lists other column files")
    arrays = []
    for name in names:
        path = folder / name
        try:
            if stat_fingerprint(path) != stats[name]:
                raise Damaged(f"{name} was changed after the entry was written")
            if len(names) > MAP_LIMIT:
                with open(path, "rb") as fh:
                    if np.lib.format.read_magic(fh) != (1, 0):
                        raise ValueError("version")
                    shape, fortran, dtype = np.lib.format.read_array_header_1_0(fh)
                    if fh.tell() != NPY_HEADER or fortran:
                        raise ValueError("header")
                    array = np.fromfile(fh, dtype=dtype)
                if array.shape != shape:
                    raise ValueError("truncated")
            else:
                array = np.load(path, mmap_mode="r")
            sampled = sampled_crc(path)
        except (OSError, ValueError, EOFError) as exc:
            raise Damaged(f"{name} unreadable ({type(exc).__name__})") from None
        if array.dtype != np.dtype("<f8") or array.shape != (meta["n"],):
            raise Damaged(f"{name} has shape {array.shape} of {array.dtype}")
        if sampled != samples[name]:
            raise Damaged(f"{name} does not match its checksum")
        arrays.append(array)
    return meta, arrays[0], arrays[1:]


def load(root: Path, digest: str, expect_probe: str | None = None):
    """(meta, time, columns) from a complete, intact entry, or None.

    Parameters
    ----------
    root : Path
        Cache folder.
    digest : str
        SHA-256 of the input.
    expect_probe : str, optional
        The input's :func:`probe`; an entry recording another is not served
        (the index pointed at the wrong entry) but left in place.

    A damaged entry is removed (the caller rebuilds it) with one note.
    """
    folder = entry_dir(root, digest)
    if not folder.is_dir():
        return None
    try:
        meta, time, cols = _read_entry(folder, digest)
    except (Damaged, KeyError, TypeError) as exc:
        why = str(exc) if isinstance(exc, Damaged) else "meta.json lacks a field"
        shutil.rmtree(folder, ignore_errors=True)
        note(f"cache entry {folder.name} was damaged ({why}); rebuilding it from the input")
        return None
    if expect_probe is not None and meta.get("probe") != expect_probe:
        return None
    return meta, time, cols


def new_entry(root: Path) -> LockedFolder:
    """A fresh locked temporary folder inside the cache for an entry being written."""
    root.mkdir(parents=True, exist_ok=True)
    return LockedFolder(root, BUILDING)


def commit(work: LockedFolder, root: Path, digest: str, meta: dict) -> bool:
    """Write ``meta.json`` (with the columns' fingerprints and its checksum) last,
    then rename the folder into place.

    Returns
    -------
    bool
        False if another run put the entry there first (theirs is kept).
    """
    names = ["time.npy"] + [f"c{i}.npy" for i in range(len(meta["names"]))]
    stored = {"meta": meta,
              "stat": {n: stat_fingerprint(work.path / n) for n in names},
              "sampled": {n: sampled_crc(work.path / n) for n in names}}
    stored["meta_sha256"] = _stored_checksum(stored)
    with open(work.path / "meta.json", "w") as fh:
        json.dump(stored, fh)
    target = entry_dir(root, digest)
    try:
        os.rename(work.path, target)
    except OSError:  # another run won the race: keep theirs
        work.release()
        return False
    work.release(remove=False)
    return True
