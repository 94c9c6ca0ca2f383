"""Parquet and NumPy ``.npz`` recordings.

Both name their columns (Parquet) or arrays (npz) with the same
``name [unit]`` cells as a CSV header; the time column comes first. Columns are
handed out as stored (any integer or float width); ``validate.exact_time``
widens integer times to int64 before any difference is taken.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from ..errors import InputError

BATCH_ROWS = 1 << 20


_NUMPY_TYPES = {"int8": "i1", "int16": "i2", "int32": "i4", "int64": "i8", "uint8": "u1",
                "uint16": "u2", "uint32": "u4", "uint64": "u8", "halffloat": "f2",
                "float": "f4", "double": "f8"}


def numpy_view(col) -> np.ndarray:
    """A numpy view of a pyarrow integer or floating-point array without nulls.

    ``Array.to_numpy`` gives the same but imports pandas on its first call
    (0.3-0.7 s of a run that does not otherwise need it).
    """
    code = _NUMPY_TYPES.get(str(col.type))
    if code is None or col.null_count:
        return col.to_numpy(zero_copy_only=False)  # not reached by the sources here
    dtype = np.dtype(code)  # Arrow buffers are in native byte order
    return np.frombuffer(col.buffers()[1], dtype=dtype, count=len(col),
                         offset=col.offset * dtype.itemsize)


def _row_phrase(row: int) -> str:
    return f"data row {row + 1}"


def _numeric(path: Path, name: str, array: np.ndarray) -> np.ndarray:
    if array.ndim != 1:
        raise InputError(f"{path}: column {name!r} has shape {array.shape}; "
                         "store each channel as a 1-D array")
    if array.dtype.kind not in "biuf":  # complex, text, dates, records, objects
        raise InputError(f"{path}: column {name!r} is of type {array.dtype}, not real "
                         "numbers; store integers or floating-point numbers")
    return array


def _timestamp_order(path: Path, schema) -> tuple[list, list, int | None]:
    """Header cells and column order with a timestamp column (pandas' datetimes) as the time.

    A column of Arrow type ``timestamp`` is the time whatever its name or place
    (pandas writes a datetime index last): it becomes ``time [ns]`` and goes
    first. Returns the cells, the column order and the timestamp column's
    position in the file (None when there is none).
    """
    import pyarrow.types as pt

    names = list(schema.names)
    stamps = [i for i, f in enumerate(schema) if pt.is_timestamp(f.type)]
    if not stamps:
        return names, list(range(len(names))), None
    if len(stamps) > 1:
        raise InputError(f"{path}: {len(stamps)} timestamp columns "
                         f"({', '.join(repr(names[i]) for i in stamps)}); keep one, the "
                         "sample time")
    t = stamps[0]
    others = [i for i in range(len(names)) if i != t]
    clash = [names[i] for i in others if names[i].split("[")[0].strip().lower() == "time"]
    if clash:
        raise InputError(f"{path}: a timestamp column {names[t]!r} and a time column "
                         f"{clash[0]!r}; keep one")
    return ["time [ns]"] + [names[i] for i in others], [t] + others, t


class ParquetSource:
    """A Parquet recording, read in record batches of ``BATCH_ROWS`` rows.

    A column of Arrow type ``timestamp`` (a pandas datetime column or index) is
    read as the time, in exact integer nanoseconds since the epoch (UTC for a
    zoned one).
    """

    format = "parquet"
    locate = staticmethod(_row_phrase)

    def __init__(self, path: Path):
        import pyarrow.parquet as pq
        import pyarrow.types as pt

        self.path = path
        try:
            # No pre-buffering: it decodes whole row groups ahead (measured: 2 GB
            # held for a day at 400 Hz, against 0.2 GB without).
            self._file = pq.ParquetFile(path, pre_buffer=False, buffer_size=1 << 22)
            schema = self._file.schema_arrow
        except Exception:  # pyarrow raises ArrowInvalid, OSError, … for a bad file
            raise InputError(f"{path}: not a readable Parquet file; check that the file is "
                             "complete and really Parquet") from None
        self.headers, self._order, self._stamp = _timestamp_order(path, schema)
        if len(self.headers) < 2:
            raise InputError(f"{path}: {len(self.headers)} column(s); a recording needs a "
                             "time column and at least one channel")
        for i, field in enumerate(schema):
            if i == self._stamp:
                continue
            if not (pt.is_integer(field.type) or pt.is_floating(field.type)):
                raise InputError(f"{path}: column {field.name!r} is of type {field.type}, "
                                 "not numeric; store numbers")

    def blocks(self, time_integer: bool, progress=None):
        import pyarrow as pa

        rows = 0
        try:
            batches = self._file.iter_batches(batch_size=BATCH_ROWS)
            for batch in batches:
                columns = [batch.column(i) for i in self._order]
                for name, col in zip(self.headers, columns):
                    if col.null_count:
                        bad = int(np.flatnonzero(col.is_null().to_numpy(zero_copy_only=False))[0])
                        raise InputError(f"{self.path}, {_row_phrase(rows + bad)}, column "
                                         f"{name!r}: missing value; fill it or remove the row")
                if self._stamp is not None:
                    # Through timestamp[ns] to int64: the epoch nanoseconds, exact.
                    columns[0] = columns[0].cast(pa.timestamp("ns")).cast(pa.int64())
                arrays = [numpy_view(c) for c in columns]
                rows += batch.num_rows
                if progress:
                    progress(rows)
                yield arrays[0], arrays[1:]
        except InputError:
            raise
        except Exception:
            raise InputError(f"{self.path}: the Parquet data cannot be read; the file may "
                             "be damaged") from None
        if rows == 0:
            raise InputError(f"{self.path}: no data rows; record some data")


def _memory_bytes() -> int | None:
    """Physical memory of the machine, bytes (None where unknown)."""
    try:
        return int(os.sysconf("SC_PHYS_PAGES")) * int(os.sysconf("SC_PAGE_SIZE"))
    except (AttributeError, ValueError, OSError):
        return None


def _declared_bytes(path: Path) -> int:
    """Bytes the arrays of an npz archive declare, read from the headers only.

    A compressed member can declare far more than its size on disk (a "zip
    bomb"); reading it whole would fill the memory before any check ran.
    """
    import zipfile

    total = 0
    with zipfile.ZipFile(path) as archive:
        for info in archive.infolist():
            if not info.filename.endswith(".npy"):
                continue
            with archive.open(info) as fh:
                version = np.lib.format.read_magic(fh)
                if version == (1, 0):
                    shape, _, dtype = np.lib.format.read_array_header_1_0(fh)
                else:
                    shape, _, dtype = np.lib.format.read_array_header_2_0(fh)
            total += math.prod(int(d) for d in shape) * dtype.itemsize
    return total


class NpzSource:
    """A NumPy ``.npz`` recording (arrays keyed by header cells), read whole."""

    format = "npz"
    locate = staticmethod(_row_phrase)

    def __init__(self, path: Path):
        self.path = path
        try:
            declared = _declared_bytes(path)
        except Exception:  # zipfile, numpy header errors: reported as unreadable below
            declared = 0
        memory = _memory_bytes()
        if memory is not None and declared > memory // 2:
            raise InputError(f"{path}: its arrays declare {declared / 1e9:.3g} GB, more than "
                             f"half of this machine's {memory / 1e9:.3g} GB memory; store a "
                             "large recording as Parquet, which is read in blocks")
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
        first = sorted(range(len(names)), key=lambda i: not names[i].lower().startswith("time"))
        self.headers = [names[i] for i in first]
        self._arrays = [_numeric(path, names[i], arrays[i]) for i in first]
        n = self._arrays[0].shape[0]
        for name, a in zip(self.headers, self._arrays):
            if a.shape[0] != n:
                raise InputError(f"{path}: column {name!r} has {a.shape[0]} rows where the "
                                 f"time column has {n}; store columns of equal length")

    def blocks(self, time_integer: bool, progress=None):
        if self._arrays[0].shape[0] == 0:
            raise InputError(f"{self.path}: no data rows; record some data")
        yield self._arrays[0], self._arrays[1:]
