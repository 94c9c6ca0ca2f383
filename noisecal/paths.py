"""Where noisecal keeps files of its own (the cache, scratch folders), shared by every stage.

Work folders (a cache entry being built, the scratch ``.npy`` files of a read
without the cache) are made by :func:`locked_folder`: beside each folder sits
a ``.lock`` file that its process holds an ``flock`` on while it works. A
process killed outright (SIGKILL, SIGTERM without a handler, power loss)
releases the lock, so :func:`clean_stale` can tell its leftovers from the
folders of a run still going on, in this process or another.
"""

from __future__ import annotations

import fcntl
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

STALE_AFTER_S = 60.0
"""Age below which a lock file or temporary file is never cleaned: a run may have
just made it and not yet taken its lock (common practice, no source)."""

_noted: set = set()


def threads() -> int:
    """Threads a run's compiled work may use: ``$NOISECAL_THREADS`` if it is a whole
    number ≥ 1, else the cores this process may run on.

    A batch worker gets its share of the machine this way: N worker processes each
    sizing their pools to every core would run N² threads on N cores.
    """
    text = os.environ.get("NOISECAL_THREADS", "").strip()
    if text.isdigit() and int(text) >= 1:
        return int(text)
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def cache_root() -> Path:
    """The cache folder (not created).

    ``$NOISECAL_CACHE`` if set, else ``$XDG_CACHE_HOME/noisecal``, else
    ``~/.cache/noisecal``.
    """
    if os.environ.get("NOISECAL_CACHE"):
        return Path(os.environ["NOISECAL_CACHE"])
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "noisecal"


def note(text: str) -> None:
    """One ``noisecal: note: …`` line on stderr, once per process for each text.

    For conditions that change how a run works but not its results (the
    cache was not usable, a damaged cache entry was rebuilt).
    """
    if text not in _noted:
        _noted.add(text)
        print(f"noisecal: note: {text}", file=sys.stderr)


def usable_cache_root() -> Path | None:
    """The cache folder, created if needed, or None (with one note) if it cannot be used.

    Unusable: the path is a file, or the folder cannot be created or written
    (read-only file system, no permission). The test writes a file, so it
    holds for root too, whom permission bits do not stop.
    """
    root = cache_root()
    try:
        root.mkdir(parents=True, exist_ok=True)
        fd, probe = tempfile.mkstemp(dir=root, prefix=".probe-")
        os.close(fd)
        os.unlink(probe)
    except OSError as exc:
        why = exc.strerror or type(exc).__name__
        if root.exists() and not root.is_dir():
            why = "it is a file, not a folder"
        note(f"cache folder {root} cannot be used ({why}); reading without the cache "
             "(set NOISECAL_CACHE to a writable folder, or pass --no-cache)")
        return None
    return root


class LockedFolder:
    """A new folder ``<parent>/<prefix><random>`` held by this process until ``release``.

    Attributes
    ----------
    path : Path
        The folder.
    """

    def __init__(self, parent: Path, prefix: str):
        fd, lock = tempfile.mkstemp(dir=parent, prefix=prefix, suffix=".lock")
        fcntl.flock(fd, fcntl.LOCK_EX)
        self._fd, self._lock = fd, Path(lock)
        self.path = Path(lock[:-len(".lock")])
        try:
            self.path.mkdir()
        except OSError:
            self.release()
            raise

    def release(self, remove: bool = True) -> None:
        """Drop the lock (and the folder, if it is still there and ``remove``)."""
        if remove:
            shutil.rmtree(self.path, ignore_errors=True)
        if self._fd is not None:
            try:
                self._lock.unlink()
            except OSError:
                pass
            os.close(self._fd)
            self._fd = None


def clean_stale(parent: Path, prefix: str) -> int:
    """Remove ``prefix*`` folders and files left by runs that ended without cleaning.

    A folder with a lock file is removed when the lock is free (its process
    is gone); one without (an older noisecal, or a lock just made) and loose
    temporary files only when older than ``STALE_AFTER_S``.

    Returns
    -------
    int
        Number of leftovers removed.
    """
    try:
        names = [e for e in os.scandir(parent) if e.name.startswith(prefix)]
    except OSError:
        return 0
    removed = 0
    now = time.time()
    locks = {e.name[:-len(".lock")] for e in names if e.name.endswith(".lock")}
    for entry in names:
        try:
            old = now - entry.stat(follow_symlinks=False).st_mtime > STALE_AFTER_S
        except OSError:
            continue
        if entry.name.endswith(".lock"):
            if not old:
                continue
            try:
                fd = os.open(entry.path, os.O_RDWR)
            except OSError:
                continue
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:  # held: its run is still going
                os.close(fd)
                continue
            shutil.rmtree(entry.path[:-len(".lock")], ignore_errors=True)
            try:
                os.unlink(entry.path)
            except OSError:
                pass
            os.close(fd)
            removed += 1
        elif entry.name not in locks and old:
            if entry.is_dir(follow_symlinks=False):
                shutil.rmtree(entry.path, ignore_errors=True)
            else:
                try:
                    os.unlink(entry.path)
                except OSError:
                    continue
            removed += 1
    return removed


def scratch_parent() -> Path:
    """Folder for scratch folders of reads without the cache: the system's temporary folder."""
    return Path(tempfile.gettempdir())
