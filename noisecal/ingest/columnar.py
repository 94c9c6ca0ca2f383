"""Parquet and NumPy ``.npz`` recordings.

Both name their columns (Parquet) or arrays (npz) with the same
``name [unit]`` cells as a CSV header; the time column comes first.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..errors import InputError
from .table import RawTable


def _row_phrase(row: int) -> str:
    return f"data row {row + 1}"


def _numeric(path: Path, name: str, array: np.ndarray, n: int) -> np.ndarray:
    if array.ndim != 1:
        raise InputError(f"{path}: column {name!r} has shape {array.shape}; "
                         "store each channel as a 1-D array")
    if array.shape[0] != n:
        raise InputError(f"{path}: column {name!r} has {array.shape[0]} rows where the "
                         f"time column has {n}; store columns of equal length")
    if not (np.issubdtype(array.dtype, np.number) or array.dtype == bool):
        raise InputError(f"{path}: column {name!r} is of type {array.dtype}, not numeric; "
                         "store numbers")
    return array


def read_parquet(path: Path) -> RawTable:
    """Read a Parquet recording column by column into a :class:`RawTable`."""
    import pyarrow.parquet as pq

    try:
        pfile = pq.ParquetFile(path)
        names = list(pfile.schema_arrow.names)
    except Exception:  # pyarrow raises ArrowInvalid, OSError, … for a bad file
        raise InputError(f"{path}: not a readable Parquet file; check that the file is "
                         "complete and really Parquet") from None
    if len(names) < 2:
        raise InputError(f"{path}: {len(names)} column(s); a recording needs a time "
                         "column and at least one channel")
    arrays = []
    for name in names:
        try:
            col = pfile.read(columns=[name]).column(0)
        except Exception:
            raise InputError(f"{path}: column {name!r} cannot be read; the file may "
                             "be damaged") from None
        if col.null_count:
            row = int(np.flatnonzero(col.is_null().to_numpy(zero_copy_only=False))[0])
            raise InputError(f"{path}, {_row_phrase(row)}, column {name!r}: missing "
                             "value; fill it or remove the row")
        try:
            arrays.append(col.to_numpy())
        except Exception:
            raise InputError(f"{path}: column {name!r} is not numeric; store numbers") from None
    n = arrays[0].shape[0]
    arrays = [_numeric(path, nm, a, n) for nm, a in zip(names, arrays)]
    return _table(names, arrays, "parquet")


def read_npz(path: Path) -> RawTable:
    """Read a NumPy ``.npz`` recording (arrays keyed by header cells)."""
    try:
        with np.load(path, allow_pickle=False) as archive:
            names = list(archive.files)
            arrays = [archive[k] for k in names]
    except Exception:  # zipfile, ValueError (pickled object arrays), OSError
        raise InputError(f"{path}: not a readable .npz archive of numeric arrays; "
                         "save it with numpy.savez") from None
    if len(names) < 2:
        raise InputError(f"{path}: {len(names)} array(s); a recording needs a time "
                         "array and at least one channel")
    time_first = sorted(range(len(names)), key=lambda i: not names[i].lower().startswith("time"))
    names = [names[i] for i in time_first]
    arrays = [arrays[i] for i in time_first]
    n = arrays[0].shape[0] if arrays[0].ndim else 0
    arrays = [_numeric(path, nm, a, n) for nm, a in zip(names, arrays)]
    return _table(names, arrays, "npz")


def _table(names: list, arrays: list, fmt: str) -> RawTable:
    time = arrays[0]
    time = time.astype(np.int64) if np.issubdtype(time.dtype, np.integer) else time.astype(np.float64)
    cols = [np.asarray(a, dtype=np.float64) for a in arrays[1:]]
    return RawTable(names, time, cols, fmt, _row_phrase)
