"""Binary cache of validated recordings: memory-mapped ``.npy`` per column.

An entry is a folder named by the input's SHA-256 (and the cache layout
version) holding ``time.npy``, ``c<i>.npy`` and ``meta.json`` (header,
units, period, gaps, … — everything validation found). It is written in a
temporary folder beside it and renamed into place, so an interrupted write
leaves no entry; a folder without a readable ``meta.json`` is treated as
absent and rebuilt. To avoid hashing a multi-GB file on every run, an index
maps (real path, size, mtime, ctime, inode) to the content hash; any change
to the file changes its ctime and forces a new hash.

Location: ``$NOISECAL_CACHE`` if set, else ``$XDG_CACHE_HOME/noisecal``, else
``~/.cache/noisecal``.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

LAYOUT = 1


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


def _stat_key(path: Path) -> str:
    st = path.stat()
    return f"{path.resolve()}|{st.st_size}|{st.st_mtime_ns}|{st.st_ctime_ns}|{st.st_ino}"


def _index(root: Path) -> dict:
    try:
        return json.loads((root / "index.json").read_text())
    except (OSError, ValueError):
        return {}


def known_hash(path: Path, root: Path | None) -> str | None:
    """The file's SHA-256 from the stat index, if the file is unchanged since."""
    return _index(root).get(_stat_key(path)) if root else None


def remember(path: Path, root: Path | None, digest: str) -> None:
    """Record the file's hash in the stat index (the newest 1000 files are kept)."""
    if root is None:
        return
    table = _index(root)
    table[_stat_key(path)] = digest
    _write_json(root / "index.json", dict(list(table.items())[-1000:]))


def _write_json(path: Path, data) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".tmp-", suffix=".json")
    with os.fdopen(fd, "w") as fh:
        json.dump(data, fh)
    os.replace(tmp, path)


def entry_dir(root: Path, digest: str) -> Path:
    return root / f"v{LAYOUT}-{digest}"


def load(root: Path, digest: str):
    """(meta, time, columns) memory-mapped from a complete entry, or None."""
    folder = entry_dir(root, digest)
    try:
        meta = json.loads((folder / "meta.json").read_text())
        time = np.load(folder / "time.npy", mmap_mode="r")
        cols = [np.load(folder / f"c{i}.npy", mmap_mode="r") for i in range(len(meta["names"]))]
    except (OSError, ValueError, KeyError):
        if folder.exists():
            shutil.rmtree(folder, ignore_errors=True)  # partial or damaged: rebuild
        return None
    if any(c.shape != time.shape for c in cols) or time.shape[0] != meta["n"]:
        shutil.rmtree(folder, ignore_errors=True)
        return None
    return meta, time, cols


def new_entry(root: Path) -> Path:
    """A fresh temporary folder inside the cache for an entry being written."""
    root.mkdir(parents=True, exist_ok=True)
    return Path(tempfile.mkdtemp(dir=root, prefix=".building-"))


def commit(tmp: Path, root: Path, digest: str, meta: dict) -> Path:
    """Write ``meta.json`` last, then rename the folder into place."""
    (tmp / "meta.json").write_text(json.dumps(meta))
    target = entry_dir(root, digest)
    try:
        os.rename(tmp, target)
    except OSError:  # another run won the race: keep theirs
        shutil.rmtree(tmp, ignore_errors=True)
    return target
