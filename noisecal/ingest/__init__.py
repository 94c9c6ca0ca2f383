"""Ingest: read a recording file into one validated, SI :class:`Recording`."""

from __future__ import annotations

import hashlib
from pathlib import Path

from ..errors import InputError
from ..types import Recording, Source
from .columnar import read_npz, read_parquet
from .csv_reader import read_csv
from .validate import REPAIRS, build_recording

READERS = {".csv": read_csv, ".txt": read_csv, ".parquet": read_parquet,
           ".pq": read_parquet, ".npz": read_npz}


def file_digest(path: Path) -> str:
    """SHA-256 of a file's bytes, read in 1 MiB blocks."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def read_recording(path: str | Path, repair: str | None = None) -> Recording:
    """Read and validate a recording file.

    Parameters
    ----------
    path : str or Path
        A ``.csv``, ``.parquet``/``.pq`` or ``.npz`` file whose column names are
        ``name [unit]`` cells, time first (``time [s]`` or ``time [ns]``).
    repair : {None, "sort", "drop"}
        Repair for timestamps that are not strictly increasing (see
        :func:`~noisecal.ingest.validate.build_recording`).

    Returns
    -------
    Recording
        SI samples with gaps, jitter, saturation and provenance.

    Raises
    ------
    InputError
        One line naming what is wrong, where, and what to do.
    """
    path = Path(path)
    if repair is not None and repair not in REPAIRS:
        raise InputError(f"--repair {repair!r} is not known; use one of {', '.join(REPAIRS)}")
    if not path.exists():
        raise InputError(f"{path}: no such file; check the path")
    if not path.is_file():
        raise InputError(f"{path}: not a file; give a recording file")
    reader = READERS.get(path.suffix.lower())
    if reader is None:
        raise InputError(f"{path}: unknown file type {path.suffix!r}; give a .csv, "
                         ".parquet or .npz recording")
    try:
        raw = reader(path)
        source = Source(str(path), file_digest(path), path.stat().st_size, raw.format)
    except PermissionError:
        raise InputError(f"{path}: permission denied; make the file readable") from None
    return build_recording(raw, source, repair)
