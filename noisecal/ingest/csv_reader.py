"""CSV recordings: a header of ``name [unit]`` cells, then numeric rows.

Leading lines that start with ``#`` are comments. The body is streamed in
blocks by pyarrow's CSV reader (multi-threaded, correctly rounded floats);
when it fails or finds a hole, a slow scan finds the first bad cell so the
error can name its line and column. Text pyarrow will not take but pandas
does (spaces around numbers, say) continues with pandas' C parser on byte
ranges.
"""

from __future__ import annotations

import csv
import io
import warnings
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

from ..errors import InputError
from .sink import release_free_memory

_SNIFF_BYTES = 8192
BLOCK_BYTES = 1 << 21
"""Bytes of CSV text per parsed block. Measured here (2 threads, 143 MB file): 2 MiB
blocks hold 24 MB of parser memory, 4 MiB blocks 60–70 MB (glibc keeps the
freed buffers of each thread), for 10 % more speed."""
ARROW_BLOCK_BYTES = 1 << 20
"""Block size of the pyarrow reader. Measured here (2 cores, 1 h 6-channel CSV, same
process): 1 MiB blocks read at 1.1x pandas.read_csv's time, 16 MiB at 1.5x."""
PARSE_THREADS = 2
PARSE_AHEAD = 3
"""Blocks submitted ahead of the one being written: bounds the text and frames held."""
TRIM_EVERY = 4
"""Blocks between two returns of freed parser memory to the system."""


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
    seen = 0
    with open(path, encoding="utf-8", newline="") as fh:
        for line_no, line in enumerate(fh, start=1):
            if line_no <= header_index + 1 or not line.strip():
                continue
            seen += 1
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
    if seen == 0:
        raise InputError(f"{path}: the header is there but no data rows follow; "
                         "record some data")


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


class CsvSource:
    """A CSV recording opened for streaming.

    Attributes
    ----------
    headers : list of str
        Header cells.
    locate : callable
        Data-row index → ``"line N"`` (slow; for error messages only).
    """

    format = "csv"

    def __init__(self, path: Path):
        self.path = path
        self.header_index, header_text = _header_line(path)
        self.headers = [c.strip() for c in next(csv.reader(io.StringIO(header_text)))]
        if len(self.headers) < 2:
            raise InputError(f"{path}, line {self.header_index + 1}: the header names "
                             f"{len(self.headers)} column(s); a recording needs a time "
                             "column and at least one channel, separated by commas")
        self.locate = _line_locator(path, self.header_index)

    def problem(self) -> None:
        """Raise the error for the first bad row or cell (called on any parse trouble)."""
        _scan_for_problem(self.path, self.header_index, self.headers)

    def _body_ranges(self):
        """Byte ranges of about ``BLOCK_BYTES`` each, cut at line ends, after the header."""
        size = self.path.stat().st_size
        with open(self.path, "rb") as fh:
            for _ in range(self.header_index + 1):
                fh.readline()
            start = fh.tell()
            while start < size:
                fh.seek(min(start + BLOCK_BYTES, size))
                fh.readline()
                end = min(fh.tell(), size)
                yield start, end
                start = end

    def _parse_range(self, span, dtypes):
        import pandas as pd

        start, end = span
        with open(self.path, "rb") as fh:
            fh.seek(start)
            text = fh.read(end - start)
        try:
            frame = pd.read_csv(io.BytesIO(text), header=None, names=list(dtypes),
                                dtype=dtypes, engine="c", skip_blank_lines=True,
                                index_col=False, encoding="utf-8")
        except pd.errors.EmptyDataError:  # a block of blank lines
            return None
        del text
        if frame.isna().to_numpy().any():
            return "hole"
        return [frame[j].to_numpy() for j in range(frame.shape[1])]

    def blocks(self, time_integer: bool, progress=None):
        """Yield ``(time, [columns])`` blocks of numbers as written in the file.

        pyarrow's streaming reader parses ``ARROW_BLOCK_BYTES`` blocks on all
        cores ahead of the one being handed out, so memory stays a few blocks.
        A null cell or a parse failure sends us to the slow scan for a precise
        error; if the scan finds nothing wrong (text pyarrow is stricter
        about), the rest of the file is read by the pandas path.
        """
        rows = 0
        try:
            for time, cols in self._arrow_blocks(time_integer, progress):
                yield time, cols
                rows += time.shape[0]
        except InputError:
            raise
        except Exception:  # pyarrow's errors (ArrowInvalid, …) or a hole
            self.problem()
            for time, cols in self._pandas_blocks(time_integer, progress):
                cut = min(rows, time.shape[0])
                rows -= cut
                if time.shape[0] > cut:
                    yield time[cut:], [c[cut:] for c in cols]
            return
        if rows == 0:
            raise InputError(f"{self.path}: the header is there but no data rows follow; "
                             "record some data")

    def _arrow_blocks(self, time_integer: bool, progress=None):
        import pyarrow as pa
        from pyarrow import csv as pacsv

        names = [f"c{j}" for j in range(len(self.headers))]
        types = {n: pa.float64() for n in names}
        if time_integer:
            types[names[0]] = pa.int64()
        # A Python file, not a native one: its reads take the GIL, which keeps the
        # reader's read-ahead to a few blocks (a native file measured 2.75x the
        # decoded arrays at peak, this 1.5x at most).
        with open(self.path, "rb") as fh:
            reader = pacsv.open_csv(
                fh,
                read_options=pacsv.ReadOptions(skip_rows=self.header_index + 1,
                                               column_names=names,
                                               block_size=ARROW_BLOCK_BYTES),
                parse_options=pacsv.ParseOptions(ignore_empty_lines=True),
                convert_options=pacsv.ConvertOptions(column_types=types,
                                                     strings_can_be_null=False),
                # malloc, not pyarrow's own pool, which keeps freed blocks: with it
                # release_free_memory() can hand the parser's buffers back.
                memory_pool=pa.system_memory_pool())
            for k, batch in enumerate(reader):
                if k % TRIM_EVERY == TRIM_EVERY - 1:
                    release_free_memory()
                if batch.num_rows == 0:
                    continue
                if any(col.null_count for col in batch.columns):
                    raise ValueError("a hole")  # empty or NaN cell: the scan names it
                # Columns without nulls come out as views of pyarrow's buffers.
                arrays = [col.to_numpy() for col in batch.columns]
                if progress:
                    progress(fh.tell())
                yield arrays[0], arrays[1:]

    def _pandas_blocks(self, time_integer: bool, progress=None):
        """Yield ``(time, [columns])`` blocks by pandas' C parser on byte ranges.

        The body is cut into byte ranges at line ends and each range is parsed
        whole by pandas' C parser, two ranges at a time on two threads (its
        tokenizer releases the GIL); blocks come out in file order. Measured
        here: one whole-range parse is about twice as fast per byte as pandas'
        own chunked reader. Anything it cannot parse sends us to the slow scan
        for a precise error.
        """
        import pandas as pd

        dtypes = {j: np.float64 for j in range(len(self.headers))}
        if time_integer:
            dtypes[0] = np.int64
        rows = 0
        self._emitted = 0
        try:
            with warnings.catch_warnings():
                # pandas warns, and drops cells, when a row is longer than the header;
                # the filter is process-wide, so it holds in the worker threads too.
                warnings.simplefilter("error", pd.errors.ParserWarning)
                with ThreadPoolExecutor(PARSE_THREADS) as pool:
                    pending: deque = deque()
                    spans = self._body_ranges()
                    for span in spans:
                        pending.append((span[1], pool.submit(self._parse_range, span, dtypes)))
                        if len(pending) < PARSE_AHEAD:
                            continue
                        rows += yield from self._emit(pending.popleft(), progress)
                    while pending:
                        rows += yield from self._emit(pending.popleft(), progress)
        except InputError:
            raise
        except Exception:  # pandas' parser errors have no common base worth naming
            self.problem()
            if time_integer:
                # Fractional nanoseconds: read the time column as float64 instead.
                yield from self._float_time_fallback(rows, progress)
                return
            raise InputError(f"{self.path}: the CSV body could not be parsed; check "
                             "the delimiter (commas) and quoting") from None
        if rows == 0:
            raise InputError(f"{self.path}: the header is there but no data rows follow; "
                             "record some data")

    def _emit(self, item, progress):
        end, future = item
        arrays = future.result()
        self._emitted += 1
        if self._emitted % TRIM_EVERY == 0:
            release_free_memory()
        if isinstance(arrays, str):
            self.problem()
            raise InputError(f"{self.path}: a cell is empty or not a number; "
                             "fix the row")  # the scan above names it; this is a guard
        if progress:
            progress(end)
        if arrays is None or arrays[0].shape[0] == 0:
            return 0
        yield arrays[0], arrays[1:]
        return arrays[0].shape[0]

    def _float_time_fallback(self, skip_rows: int, progress):
        for time, cols in self._pandas_blocks(False, progress):
            if skip_rows > 0:
                cut = min(skip_rows, time.shape[0])
                skip_rows -= cut
                time, cols = time[cut:], [c[cut:] for c in cols]
            if time.shape[0]:
                yield time, cols
