"""Atomic, exclusive output: temporary files beside the targets, put in place together.

A job checks its output paths before any work (:func:`output_paths`), writes every
output to a temporary file in the target's folder (:class:`Staged`), and only when all
of them are complete puts them in place: ``link()`` onto a name that must not exist
(so a run never silently replaces a file another run wrote meanwhile), or
``os.replace`` when the user asked for ``--overwrite``. On any error or signal the
temporary files are removed and the outputs already put in place by this run are
taken back, so a failed run leaves nothing.
"""

from __future__ import annotations

import errno
import os
import sys
import tempfile
from contextlib import contextmanager, nullcontext
from pathlib import Path

from ..errors import InputError, OutputError

STDOUT = "-"
"""``-o -``: the YAML block goes to standard output."""

_LIVE: set = set()
"""Temporary files not yet put in place; removed by :func:`remove_leftovers` on a signal."""
WRITTEN: list = []
"""Outputs this process has put in place (so that an interrupted run can say which)."""


def _same(a: Path, b: Path) -> bool:
    """Whether two paths name one file (or one place, when one does not exist yet)."""
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b) or \
            a.resolve() == b.resolve()
    except OSError:
        return a.resolve() == b.resolve()


def check_target(path: Path, inputs: list[Path], overwrite: bool) -> None:
    """Refuse an output that is an input, a folder, in a missing folder, or exists.

    Parameters
    ----------
    path : Path
        Output path.
    inputs : list of Path
        Files the run reads (recordings, side files, the history database), which
        are never overwritten.
    overwrite : bool
        Whether an existing output may be replaced.
    """
    path = Path(path)
    for source in inputs:
        if source is not None and _same(path, Path(source)):
            raise OutputError(f"{path}: this is a file the run reads ({source}); choose "
                              "another output path")
    if path.is_dir():
        raise OutputError(f"{path}: an existing folder; give a file path inside it")
    if not path.resolve().parent.is_dir():
        raise OutputError(f"{path}: folder {path.parent} does not exist; create it first")
    if path.exists() and not overwrite:
        raise OutputError(f"{path}: already exists; pass --overwrite to replace it")
    if not os.access(path.resolve().parent, os.W_OK):
        raise OutputError(f"{path}: folder {path.parent} is not writable; choose another "
                          "output path")


def _write_error(path: Path, exc: OSError) -> OutputError:
    what = ("the disk is full" if exc.errno == errno.ENOSPC
            else exc.strerror or exc.__class__.__name__)
    return OutputError(f"{path}: could not write ({what}); nothing was written; free space "
                       "or choose another output path")


def _temporary(path: Path) -> Path:
    """A new empty file beside ``path`` with the usual mode, registered as live."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    _LIVE.add(tmp)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; outputs get the usual mode
    return Path(tmp)


def _discard(tmp) -> None:
    Path(tmp).unlink(missing_ok=True)
    _LIVE.discard(str(tmp))


def remove_leftovers() -> None:
    """Remove every temporary output file of this process (on a signal)."""
    for tmp in list(_LIVE):
        _discard(tmp)


def _put_in_place(tmp: Path, path: Path, overwrite: bool) -> None:
    """Move a complete temporary file to its final name (exclusively unless overwrite)."""
    if overwrite:
        os.replace(tmp, path)
        _LIVE.discard(str(tmp))
        return
    try:
        os.link(tmp, path)  # fails if the name exists: never replaces another run's file
    except FileExistsError:
        raise OutputError(f"{path}: appeared while this run worked (another run?); nothing "
                          "was written; choose another path or pass --overwrite") from None
    except OSError as exc:
        if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV):
            raise
        # A file system without hard links: reserve the name exclusively, then replace.
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        os.close(fd)
        os.replace(tmp, path)
    _discard(tmp)


class Staged:
    """Outputs written to temporary files first and put in place together.

    Use as a context manager: :meth:`path` gives the temporary file standing for an
    output, :meth:`text` writes one; :meth:`commit` puts them all in place (inside
    ``around``, e.g. the history transaction, so that a run is stored exactly when
    its files are). Leaving the block without a commit, or by an error, removes the
    temporary files; an ``OSError`` while writing becomes one :class:`OutputError`.

    Parameters
    ----------
    overwrite : bool
        Replace existing outputs (otherwise a name that exists at commit is refused).
    """

    def __init__(self, overwrite: bool = False):
        self.overwrite = overwrite
        self._pending: list = []  # (temporary, final)
        self._stdout: list = []
        self._current: Path | None = None

    def __enter__(self) -> "Staged":
        return self

    def __exit__(self, kind, exc, tb) -> bool:
        for tmp, _ in self._pending:
            _discard(tmp)
        self._pending = []
        if isinstance(exc, OSError) and not isinstance(exc, OutputError):
            raise _write_error(self._current or Path("output"), exc) from None
        return False

    def path(self, final: Path) -> Path:
        """The temporary file to write ``final``'s content to."""
        final = Path(final)
        self._current = final
        tmp = _temporary(final)
        self._pending.append((tmp, final))
        return tmp

    def text(self, final, text: str) -> None:
        """Stage ``text`` for ``final`` (a path, or :data:`STDOUT`)."""
        if final is None or str(final) == STDOUT:
            self._stdout.append(text)
            return
        tmp = self.path(final)
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())  # a full disk shows here, not after the rename

    def commit(self, around=None) -> None:
        """Put every staged output in place, all or none; then print staged stdout."""
        done: list = []
        try:
            with (around if around is not None else nullcontext()):
                for tmp, final in self._pending:
                    self._current = final
                    _put_in_place(tmp, final, self.overwrite)
                    done.append(final)
        except BaseException:
            if not self.overwrite:
                for final in done:  # ours: linked by this run a moment ago
                    Path(final).unlink(missing_ok=True)
            raise
        self._pending = []
        WRITTEN.extend(done)
        for text in self._stdout:
            sys.stdout.write(text)
        sys.stdout.flush()


@contextmanager
def atomic_path(path: Path, overwrite: bool = True):
    """Yield a temporary path beside ``path``; put it in place on success.

    ``overwrite=False`` refuses (one line) a ``path`` that exists by then.
    """
    path = Path(path)
    tmp = _temporary(path)
    try:
        yield tmp
        _put_in_place(tmp, path, overwrite)
    except OSError as exc:
        _discard(tmp)
        if isinstance(exc, OutputError):
            raise
        raise _write_error(path, exc) from None
    except BaseException:
        _discard(tmp)
        raise


def write_text(path: Path, text: str, overwrite: bool = True) -> None:
    """Write text atomically (standard output for :data:`STDOUT`)."""
    with Staged(overwrite) as s:
        s.text(path, text)
        s.commit()


def output_paths(out: str, plot: str | None, inputs: list, overwrite: bool,
                 protect: list = ()):
    """The YAML and PNG paths of a job, checked before any work is done.

    Parameters
    ----------
    out : str
        The YAML block (``.yaml``/``.yml``), or ``-`` for standard output.
    plot : str or None
        The PNG; default the YAML path with ``.png`` (none for ``-o -``).
    inputs : list of Path
        Files the outputs must not overwrite.
    overwrite : bool
        Replace existing outputs.
    protect : list of Path
        Further files the run reads or writes (the history database).

    Returns
    -------
    out_path : Path or str
        :data:`STDOUT` for ``-o -``.
    plot_path : Path or None
        None when no plot is written.
    """
    guarded = [Path(p) for p in list(inputs) + list(protect) if p]
    if out == STDOUT:
        out_path = STDOUT
        plot_path = Path(plot) if plot else None
    else:
        out_path = Path(out)
        plot_path = Path(plot) if plot else out_path.with_suffix(".png")
        if out_path.suffix.lower() not in (".yaml", ".yml"):
            raise InputError(f"-o {out}: the output is a YAML block; give a .yaml path "
                             "(or - for standard output)")
        if _same(plot_path, out_path):
            raise InputError(f"--plot {plot_path}: the same path as -o; give the plot its "
                             "own path")
        check_target(out_path, guarded, overwrite)
    if plot_path is not None:
        check_target(plot_path, guarded, overwrite)
    return out_path, plot_path
