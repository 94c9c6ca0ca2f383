"""Atomic output: write to a temporary file in the target folder, then rename."""

from __future__ import annotations

import os
import tempfile
from contextlib import contextmanager
from pathlib import Path

from ..errors import OutputError


def check_target(path: Path, inputs: list[Path], overwrite: bool) -> None:
    """Refuse an output that is an input, sits in a missing folder, or exists.

    Parameters
    ----------
    path : Path
        Output path.
    inputs : list of Path
        Input files, which are never overwritten.
    overwrite : bool
        Whether an existing output may be replaced.
    """
    resolved = path.resolve()
    for source in inputs:
        if source.exists() and resolved == source.resolve():
            raise OutputError(f"{path}: this is an input file; choose another output path")
    if not resolved.parent.is_dir():
        raise OutputError(f"{path}: folder {path.parent} does not exist; create it first")
    if path.exists() and not overwrite:
        raise OutputError(f"{path}: already exists; pass --overwrite to replace it")


@contextmanager
def atomic_path(path: Path):
    """Yield a temporary path beside ``path``; rename it over ``path`` on success."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; outputs get the usual mode
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_text(path: Path, text: str) -> None:
    """Write text atomically."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def output_paths(out: str, plot: str | None, inputs: list, overwrite: bool):
    """The YAML and PNG paths of a job, checked before any work is done.

    Parameters
    ----------
    out : str
        The YAML block (``.yaml``/``.yml``).
    plot : str or None
        The PNG; default the YAML path with ``.png``.
    inputs : list of Path
        Files the outputs must not overwrite.
    overwrite : bool
        Replace existing outputs.

    Returns
    -------
    out_path, plot_path : Path
    """
    from ..errors import InputError

    out_path = Path(out)
    plot_path = Path(plot) if plot else out_path.with_suffix(".png")
    if out_path.suffix.lower() not in (".yaml", ".yml"):
        raise InputError(f"-o {out}: the output is a YAML block; give a .yaml path")
    if plot_path.resolve() == out_path.resolve():
        raise InputError(f"--plot {plot_path}: the same path as -o; give the plot its own path")
    for target in (out_path, plot_path):
        check_target(target, [Path(p) for p in inputs], overwrite)
    return out_path, plot_path
