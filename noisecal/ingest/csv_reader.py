"""CSV recordings: a header of ``name [unit]`` cells, then numeric rows.

Leading lines that start with ``#`` are comments. The body is read in
segments of ``SEGMENT_BYTES`` cut at line ends, each parsed in one call of
pyarrow's CSV reader (all cores, correctly rounded floats) and handed out in
blocks. When it fails or finds a hole, a slow scan finds the first bad cell so the
error can name its line and column. Text pyarrow will not take but pandas
does (spaces around numbers, say) continues with pandas' C parser on byte
ranges.
"""

from __future__ import annotations

import csv
import io
import re
import warnings
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

from ..errors import InputError
from .columnar import numpy_view
from .sink import release_free_memory

_SNIFF_BYTES = 8192
BLOCK_BYTES = 1 << 21
"""Bytes of CSV text per parsed block. Measured here (2 threads, 143 MB file): 2 MiB
blocks hold 24 MB of parser memory, 4 MiB blocks 60–70 MB (glibc keeps the
freed buffers of each thread), for 10 % more speed."""
ARROW_BLOCK_BYTES = 1 << 21
"""Block size of the pyarrow reader (a segment is parsed in blocks of this size on
all cores; each block is checked and written as one). Measured here (2 cores, 2 h
6-channel CSV, first read with the cache): 2 MiB blocks 12 % faster than 1 MiB (fewer
per-block steps), 4 MiB no faster and up to 1.5x the decoded arrays at peak."""
SEGMENT_BYTES = 1 << 23
"""Bytes of CSV text parsed in one call of pyarrow's reader (from a native stream
over the segment); the next segment is parsed while one is handed out. Measured
here (2 cores, 1-2 h 6-channel CSVs): 8-32 MiB segments read about as fast as the
whole body in one call and 1.5-2x faster than pyarrow's streaming reader; a cold
read's peak memory is 1.1-1.3x the decoded arrays with 8 MiB, 1.25-1.45x with
16 MiB (one call: 1.4x for the parse alone)."""
PARSE_THREADS = 2
PARSE_AHEAD = 3
"""Blocks submitted ahead of the one being written: bounds the text and frames held."""
TRIM_EVERY = 4
"""Blocks between two returns of freed parser memory to the system."""


MAX_HEADER_LINE = 1 << 20
"""Characters of header line beyond which the header is refused rather than split."""
_EOL = re.compile(rb"\r\n|\r|\n")
_NUMBER = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?\Z")
_INTEGER = re.compile(r"[+-]?[0-9]+\Z")
_NOT_FINITE = {"nan", "+nan", "-nan", "inf", "+inf", "-inf", "infinity", "+infinity",
               "-infinity"}
INT64 = (-(1 << 63), (1 << 63) - 1)


def _raw_lines(fh, offset: int):
    """Yield ``(start, end, bytes)`` of each line from ``offset``, its end (``\n``,
    ``\r\n`` or a lone ``\r``) left off; ``end`` is the offset after the line end."""
    fh.seek(offset)
    buf, base = b"", offset
    while True:
        chunk = fh.read(1 << 20)
        buf += chunk
        pos = 0
        for m in _EOL.finditer(buf):
            if chunk and m.group() == b"\r" and m.end() == len(buf):
                break  # a \r\n may be cut between two reads
            yield base + pos, base + m.end(), buf[pos:m.start()]
            pos = m.end()
        buf, base = buf[pos:], base + pos
        if not chunk:
            if buf:
                yield base, base + len(buf), buf
            return


def _decode(path: Path, line_no: int, raw: bytes) -> str:
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}, line {line_no}: byte 0x{raw[exc.start]:02X} (character "
                         f"{len(raw[:exc.start].decode('utf-8', 'replace')) + 1} of the line) "
                         "is not UTF-8; save the CSV as UTF-8") from None


def _text_lines(path: Path, offset: int):
    """Yield ``(line number, text)`` of every line after a byte-order mark at ``offset``."""
    with open(path, "rb") as fh:
        for line_no, (_, _, raw) in enumerate(_raw_lines(fh, offset), start=1):
            yield line_no, _decode(path, line_no, raw)


def _encoding_problem(path: Path, head: bytes) -> None:
    """Refuse UTF-16/32 text (by its byte-order mark or its zero bytes) and binary files."""
    for bom, name in ((b"\xff\xfe\x00\x00", "UTF-32"), (b"\x00\x00\xfe\xff", "UTF-32"),
                      (b"\xff\xfe", "UTF-16"), (b"\xfe\xff", "UTF-16")):
        if head.startswith(bom):
            raise InputError(f"{path}: the file is {name} text; save the CSV as UTF-8 "
                             "(in a spreadsheet: 'CSV UTF-8')")
    if b"\x00" in head:
        even, odd = head[0::2], head[1::2]
        if max(even.count(0), odd.count(0)) > 0.4 * len(head) / 2 and min(
                even.count(0), odd.count(0)) < 0.05 * len(head) / 2:
            raise InputError(f"{path}: the file looks like UTF-16 text without a byte-order "
                             "mark; save the CSV as UTF-8")
        raise InputError(f"{path}: this is a binary file, not CSV text; "
                         "give a CSV, Parquet (.parquet) or NumPy (.npz) recording")


def _header_line(path: Path) -> tuple[int, int, int, str]:
    """Where the text starts (after a UTF-8 byte-order mark), the header line's
    index (0-based, after leading comments), the offset where the body starts,
    and the header's text."""
    with open(path, "rb") as fh:
        head = fh.read(_SNIFF_BYTES)
        if not head:
            raise InputError(f"{path}: the file is empty; record some data or check the path")
        _encoding_problem(path, head)
        first = 3 if head.startswith(b"\xef\xbb\xbf") else 0
        for index, (_, end, raw) in enumerate(_raw_lines(fh, first)):
            line = _decode(path, index + 1, raw)
            if line.strip() and not line.lstrip().startswith("#"):
                return first, index, end, line
    raise InputError(f"{path}: no header line found; the first line must name the "
                     "columns, e.g. 'time [s],gyro_x [deg/s]'")


def _split_row(path: Path, line_no: int, text: str) -> list:
    try:
        return next(csv.reader([text]))
    except csv.Error as exc:  # a cell over the csv module's length limit, a NUL, …
        raise InputError(f"{path}, line {line_no}: the line cannot be split into cells "
                         f"({exc}); fix or remove the line") from None


def _cell_problem(text: str, integer: bool) -> str | None:
    """Why a data cell is not a number as a recording writes it (None if it is)."""
    if not text:
        return "empty cell; fill it or remove the row"
    shown = repr(text[:40])
    if text.lower() in _NOT_FINITE:
        return (f"{shown} is not a finite number; remove the row or mark the dropout "
                "by leaving it out")
    if not _NUMBER.match(text):
        if "_" in text and _NUMBER.match(text.replace("_", "")):
            return (f"{shown} has a digit separator '_'; write the number without it, "
                    f"e.g. {text.replace('_', '')[:30]}")
        return f"{shown} is not a number; fix the cell or remove the row"
    if integer:
        if not _INTEGER.match(text):
            return (f"{shown} is not a whole number of nanoseconds; write [ns] times as "
                    "integers, or the time column in [s]")
        if not INT64[0] <= int(text) <= INT64[1]:
            return (f"{shown} is beyond the signed 64-bit range nanoseconds are read in "
                    "exactly; subtract a fixed offset from the time column (or write it "
                    "in [s])")
    return None


def _scan_for_problem(path: Path, first: int, header_index: int, headers: list[str],
                      time_integer: bool = False) -> None:
    """Raise an InputError naming the first bad row or cell; return if none."""
    names = [h.split("[")[0].strip() for h in headers]
    seen = 0
    for line_no, line in _text_lines(path, first):
        if line_no <= header_index + 1 or not line.strip():
            continue
        seen += 1
        row = _split_row(path, line_no, line)
        if len(row) != len(headers):
            raise InputError(
                f"{path}, line {line_no}: {len(row)} cells where the header has "
                f"{len(headers)}; fix or remove the ragged row")
        for col, cell in enumerate(row):
            why = _cell_problem(cell.strip(), time_integer and col == 0)
            if why:
                raise InputError(f"{path}, line {line_no}, column '{names[col]}': {why}")
    if seen == 0:
        raise InputError(f"{path}: the header is there but no data rows follow; "
                         "record some data")


def _line_locator(path: Path, first: int, header_index: int):
    def locate(row: int) -> str:
        seen = -1
        for line_no, line in _text_lines(path, first):
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
        self._first, self.header_index, self._body, header_text = _header_line(path)
        if len(header_text) > MAX_HEADER_LINE:
            raise InputError(f"{path}, line {self.header_index + 1}: the header line is "
                             f"{len(header_text):,} characters long; header cells are "
                             "'name [unit]', e.g. 'gyro_x [deg/s]'")
        # Unquoted (the usual header) is split by hand: csv refuses cells over 128 KiB,
        # and a long cell deserves the header's own message.
        cells = (header_text.split(",") if '"' not in header_text
                 else _split_row(path, self.header_index + 1, header_text))
        self.headers = [c.strip() for c in cells]
        if len(self.headers) < 2:
            raise InputError(f"{path}, line {self.header_index + 1}: the header names "
                             f"{len(self.headers)} column(s); a recording needs a time "
                             "column and at least one channel, separated by commas")
        self.locate = _line_locator(path, self._first, self.header_index)
        self._time_integer = False

    def problem(self) -> None:
        """Raise the error for the first bad row or cell (called on any parse trouble)."""
        _scan_for_problem(self.path, self._first, self.header_index, self.headers,
                          self._time_integer)

    def _body_ranges(self):
        """Byte ranges of about ``BLOCK_BYTES`` each, cut at line ends, after the header."""
        size = self.path.stat().st_size
        with open(self.path, "rb") as fh:
            start = self._body
            while start < size:
                end = _line_end(fh, min(start + BLOCK_BYTES, size), size)
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

        Each ``SEGMENT_BYTES`` segment is parsed by pyarrow on all cores, then
        handed out in ``ARROW_BLOCK_BYTES`` blocks, so memory holds about one
        segment's arrays. A null cell or a parse failure sends us to the slow
        scan for a precise error; if the scan finds nothing wrong (text
        pyarrow is stricter about), the rest of the file is read by the pandas
        path.
        """
        self._time_integer = time_integer
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
        read_options = pacsv.ReadOptions(column_names=names, block_size=ARROW_BLOCK_BYTES)
        parse_options = pacsv.ParseOptions(ignore_empty_lines=True)
        # No null spellings: a cell is a number or the parse fails and the scan names
        # it (an empty cell, "NA"); "nan" and "inf" come through as floats and
        # validation names them. Measured: 20 % less parse time than pyarrow's
        # default list of null spellings.
        convert_options = pacsv.ConvertOptions(column_types=types, strings_can_be_null=False,
                                               null_values=[],
                                               quoted_strings_can_be_null=False)
        # malloc, not pyarrow's own pool, which keeps freed blocks: with it
        # release_free_memory() can hand the parser's buffers back.
        memory = pa.system_memory_pool()

        def parse(span):
            # A native stream over the segment: its reads never take the GIL (a
            # Python file's did, and made the main thread's writes wait for it).
            with pa.OSFile(str(self.path), memory_pool=memory) as fh:
                return pacsv.read_csv(fh.get_stream(span[0], span[1] - span[0]),
                                      read_options=read_options,
                                      parse_options=parse_options,
                                      convert_options=convert_options, memory_pool=memory)

        # The next segment is parsed (on all cores) while one is checked and written.
        with ThreadPoolExecutor(1) as pool:
            pending: deque = deque()
            spans = self._segments()
            span = next(spans, None)
            if span is not None:
                pending.append((span[1], pool.submit(parse, span)))
            while pending:
                end, future = pending.popleft()
                table = future.result()
                span = next(spans, None)
                if span is not None:
                    pending.append((span[1], pool.submit(parse, span)))
                if any(col.null_count for col in table.columns):
                    raise ValueError("a hole")  # empty or NaN cell: the scan names it
                batches = table.to_batches()
                del table  # each block's buffers go when it has been handed out
                batches.reverse()
                while batches:
                    batch = batches.pop()
                    if batch.num_rows == 0:
                        continue
                    arrays = [numpy_view(col) for col in batch.columns]
                    del batch
                    yield arrays[0], arrays[1:]
                    del arrays
                if progress:
                    progress(end)

    def _segments(self):
        """Byte ranges of about ``SEGMENT_BYTES`` each, cut at line ends, after the header."""
        size = self.path.stat().st_size
        with open(self.path, "rb") as fh:
            start = self._body  # the header never reaches pyarrow: any length, a BOM
            while start < size:
                end = _line_end(fh, min(start + SEGMENT_BYTES, size), size)
                yield start, end
                start = end

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


def _line_end(fh, pos: int, size: int) -> int:
    """Offset just after the first line end (``\n``, ``\r\n`` or ``\r``) at or after ``pos``."""
    fh.seek(pos)
    while pos < size:
        chunk = fh.read(1 << 16)
        if not chunk:
            break
        m = re.search(rb"\r\n|\r|\n", chunk)
        if m is None:
            pos += len(chunk)
            continue
        end = pos + m.end()
        if m.group() == b"\r" and m.end() == len(chunk):  # a \r\n cut by the read
            fh.seek(end)
            if fh.read(1) == b"\n":
                end += 1
        return min(end, size)
    return size
