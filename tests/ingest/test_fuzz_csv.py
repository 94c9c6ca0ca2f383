"""Hypothesis fuzzing of CSV bytes: random header cells, numbers and their
spellings, separators, encodings, line ends, blank and comment lines.

For every file the reader returns a Recording whose values are the written numbers
(``float`` of the cell text, the time relative to its first value), or raises a
NoisecalError whose message is one line — never another exception, never a hang
(an alarm ends an example after ``HANG_S``; Hypothesis' deadline flags a slow one).
Where the file is built to be sound, a Recording is required; where it is built to
be wrong (another separator, UTF-16, ``1_000``, an empty or non-finite cell, a time
going backwards, fewer than 3 rows), the error is. Common practice, no source."""

from __future__ import annotations

import signal
from datetime import timedelta

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from noisecal.errors import NoisecalError
from noisecal.ingest import read_recording

HANG_S = 30

FORMATS = [repr, lambda v: f"{v:.6e}", lambda v: f"{v:.17g}", lambda v: f"{v:.3f}",
           lambda v: f" {v!r} ", lambda v: f"+{abs(v)!r}", lambda v: f"{v:.0f}"]
VALUES = st.one_of(st.just(0.0), st.floats(1e-6, 1e9), st.floats(-1e9, -1e-6))
"""Sample values (a channel all below 1e-100 in SI is refused by validation, rightly)."""
PRINTABLE = st.characters(blacklist_categories=("Cs", "Cc"))
BAD_CELLS = ["1_000", "", "nan", "-inf", "1,5", "0x10", "\u0661", "1e", "--1"]


@st.composite
def csv_files(draw):
    """(bytes, expected outcome, expected values) of one CSV file."""
    n = draw(st.integers(0, 40))
    channels = draw(st.integers(1, 3))
    ns = draw(st.booleans())
    steps = draw(st.lists(st.integers(1, 10**6), min_size=n, max_size=n))
    start = draw(st.integers(0, 2**62) if ns else st.integers(0, 10**6))
    ticks = start + np.cumsum(np.array(steps, dtype=np.int64)) if n else np.zeros(0, np.int64)
    values = draw(st.lists(st.lists(VALUES, min_size=channels,
                                    max_size=channels), min_size=n, max_size=n))
    header = ["time [ns]" if ns else "time [s]"] + [
        f"c{j} [{draw(st.sampled_from(['1', 'rad/s', 'm']))}]" for j in range(channels)]
    cells = []
    for t, row in zip(ticks, values):
        time_text = str(int(t)) if ns else repr(int(t) / 1000)
        cells.append([time_text] + [draw(st.sampled_from(FORMATS))(v) for v in row])
    sound, known = n >= 3, True
    kind = draw(st.sampled_from(["clean"] * 6 + ["header_text", "cell_text", "bad_cell",
                                                  "backwards", "separator", "utf16"]))
    if kind == "header_text":
        header[draw(st.integers(0, channels))] = draw(st.text(max_size=30))
        known = False
    elif kind == "cell_text" and n:
        cells[draw(st.integers(0, n - 1))][draw(st.integers(1, channels))] = draw(
            st.text(max_size=8))
        known = False
    elif kind == "bad_cell" and n:
        cells[draw(st.integers(0, n - 1))][draw(st.integers(0, channels))] = draw(
            st.sampled_from(BAD_CELLS))
        sound = False
    elif kind == "backwards" and n >= 2:
        row = draw(st.integers(1, n - 1))
        cells[row][0] = cells[row - 1][0]
        sound = False
    sep = ","
    if kind == "separator":
        sep = draw(st.sampled_from([";", "\t", "|"]))
        sound = False
    lines = [sep.join(header)] + [sep.join(r) for r in cells]
    for _ in range(draw(st.integers(0, 3))):  # blank lines in the body
        lines.insert(draw(st.integers(1, len(lines))), draw(st.sampled_from(["", " "])))
    # Comments of printable text (a NUL anywhere marks a binary file, refused as such).
    comments = [f"# {draw(st.text(PRINTABLE, max_size=20))}" for _ in range(draw(st.integers(0, 2)))]
    newline = draw(st.sampled_from(["\n", "\r\n", "\r", "mixed"]))
    ends = [draw(st.sampled_from(["\n", "\r\n", "\r"])) if newline == "mixed" else newline
            for _ in comments + lines]
    text = "".join(line + end for line, end in zip(comments + lines, ends))
    if not draw(st.booleans()):
        text = text[:-len(ends[-1])]  # no line end after the last row
    encoding = "utf-16" if kind == "utf16" else draw(st.sampled_from(["utf-8", "utf-8-sig"]))
    if kind == "utf16":
        sound = False
    try:
        data = text.encode(encoding)
    except UnicodeEncodeError:  # a lone surrogate from st.text
        data, known = text.encode(encoding, "surrogatepass"), False
    expected = None
    if known and sound:  # the time cells as written (ints stay exact), channels as floats
        expected = ([int(r[0]) if ns else float(r[0]) for r in cells],
                    np.array([[float(c) for c in r[1:]] for r in cells]))
    return data, (sound if known else None), expected, ns


class Hang(Exception):
    pass


def _alarm(signum, frame):
    raise Hang(f"no answer within {HANG_S} s")


@pytest.fixture
def hang_guard():
    old = signal.signal(signal.SIGALRM, _alarm)
    yield
    signal.alarm(0)
    signal.signal(signal.SIGALRM, old)


@settings(max_examples=250, deadline=timedelta(seconds=10), derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(case=csv_files(), use_cache=st.booleans())
def test_fuzzed_csv_bytes(tmp_path, hang_guard, case, use_cache):
    data, sound, expected, ns = case
    path = tmp_path / "fuzz.csv"
    path.write_bytes(data)
    signal.alarm(HANG_S)
    try:
        rec = read_recording(path, use_cache=use_cache)
    except NoisecalError as exc:
        message = str(exc)
        assert message and "\n" not in message and "\r" not in message, repr(message)
        assert sound is not True, message
        return
    finally:
        signal.alarm(0)
    assert path.read_bytes() == data
    assert sound is not False, "a file built to be wrong was read"
    if expected is not None:
        times, values = expected
        if ns:
            ticks = np.array(times, dtype=np.int64)
            want = (ticks - ticks[0]).astype(np.float64) * 1e-9
        else:
            want = np.array(times) - times[0]
        np.testing.assert_array_equal(rec.time, want)
        for j, column in enumerate(rec.columns):
            np.testing.assert_array_equal(column, values[:, j])
