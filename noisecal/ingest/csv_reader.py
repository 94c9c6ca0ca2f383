"""CSV recordings: a header of ``name [unit]`` cells, then numeric rows.

Leading lines that start with ``#`` are comments. The fast path is pandas'
C parser; when it fails or finds a hole, a slow scan finds the first bad cell
so the error can name its line and column.
"""

from __future__ import annotations

import csv
import io
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError
from .table import RawTable

_SNIFF_BYTES = 8192


def _header_line(path: Path) -> tuple[int, str]:
    """Index (0-based) and text of the header line, after leading comments."""
    with open(path, "rb") as fh:
        head = fh.read(_SNIFF_BYTES)
    if not head:
        raise InputError(f"{path}: the file is empty; record some data or check the path")
    if b"\x00" in head:
        raise InputError(f"{path}: this is a binary file, not CSV text; "
                         "give a CSV, Parquet (.parquet) or NumPy (.npz) recording")
    try:
        with open(path, encoding="utf-8", newline="") as fh:
            for index, line in enumerate(fh):
                if line.strip() and not line.lstrip().startswith("#"):
                    return index, line
    except UnicodeDecodeError:
        raise InputError(f"{path}: the file is not UTF-8 text; save the CSV as UTF-8") from None
    raise InputError(f"{path}: no header line found; the first line must name the "
                     "columns, e.g. 'time [s],gyro_x [deg/s]'")


def _scan_for_problem(path: Path, header_index: int, headers: list[str]) -> None:
    """Raise an InputError naming the first bad row or cell; return if none."""
    names = [h.split("[")[0].strip() for h in headers]
    with open(path, encoding="utf-8", newline="") as fh:
        for line_no, line in enumerate(fh, start=1):
            if line_no <= header_index + 1 or not line.strip():
                continue
            row = next(csv.reader([line]))
            if len(row) != len(headers):
                raise InputError(
                    f"{path}, line {line_no}: {len(row)} cells where the header has "
                    f"{len(headers)}; fix or remove the ragged row")
            for col, cell in enumerate(row):
                text = cell.strip()
                where = f"{path}, line {line_no}, column '{names[col]}'"
                if not text:
                    raise InputError(f"{where}: empty cell; fill it or remove the row")
                try:
                    value = float(text)
                except ValueError:
                    raise InputError(f"{where}: {text[:40]!r} is not a number; "
                                     "fix the cell or remove the row") from None
                if not np.isfinite(value):
                    raise InputError(f"{where}: {text[:20]!r} is not a finite number; "
                                     "remove the row or mark the dropout by leaving it out")


def _line_locator(path: Path, header_index: int):
    def locate(row: int) -> str:
        seen = -1
        with open(path, encoding="utf-8", newline="") as fh:
            for line_no, line in enumerate(fh, start=1):
                if line_no <= header_index + 1 or not line.strip():
                    continue
                seen += 1
                if seen == row:
                    return f"line {line_no}"
        return f"data row {row + 1}"
    return locate


def read_csv(path: Path) -> RawTable:
    """Read a CSV recording into a :class:`RawTable`.

    Parameters
    ----------
    path : Path
        The CSV file.

    Raises
    ------
    InputError
        Empty, binary or non-UTF-8 file; ragged rows; empty, non-numeric or
        non-finite cells, each naming the line and column.
    """
    header_index, header_text = _header_line(path)
    headers = [c.strip() for c in next(csv.reader(io.StringIO(header_text)))]
    if len(headers) < 2:
        raise InputError(f"{path}, line {header_index + 1}: the header names "
                         f"{len(headers)} column(s); a recording needs a time column "
                         "and at least one channel, separated by commas")
    try:
        with warnings.catch_warnings():
            # pandas warns, and drops cells, when a row is longer than the header.
            warnings.simplefilter("error", pd.errors.ParserWarning)
            frame = pd.read_csv(path, skiprows=header_index + 1, header=None,
                                names=list(range(len(headers))), dtype=np.float64,
                                engine="c", comment=None, skip_blank_lines=True,
                                encoding="utf-8", index_col=False)
    except Exception:  # pandas' parser errors have no common base worth naming
        frame = None
    if frame is None or frame.isna().to_numpy().any():
        _scan_for_problem(path, header_index, headers)
        if frame is None:
            raise InputError(f"{path}: the CSV body could not be parsed; check the "
                             "delimiter (commas) and quoting")
    if len(frame) == 0:
        raise InputError(f"{path}: the header is there but no data rows follow; "
                         "record some data")
    values = frame.to_numpy(dtype=np.float64)
    if not np.isfinite(values).all():
        _scan_for_problem(path, header_index, headers)
    time = values[:, 0]
    if headers[0].replace(" ", "").endswith("[ns]"):
        # Integer nanoseconds since an epoch do not fit float64 exactly: reread as int64.
        try:
            exact = pd.read_csv(path, skiprows=header_index + 1, header=None, usecols=[0],
                                dtype=np.int64, engine="c", skip_blank_lines=True)
            time = exact.to_numpy()[:, 0]
        except (ValueError, OverflowError):
            pass  # fractional nanoseconds: float64 is all there is
    columns = [np.ascontiguousarray(values[:, j]) for j in range(1, values.shape[1])]
    return RawTable(headers, time, columns, "csv", _line_locator(path, header_index))
