"""Text input: encodings, line ends, undecodable bytes, long cells, number
spellings and exact nanosecond times. Each bad case: one line naming where, through
the CLI exit status 2 and nothing written. Common practice, no source, except where
numpy.loadtxt (reference library) gives the expected values."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.errors import InputError, NoisecalError
from noisecal.ingest import csv_reader, read_recording
from tests.ingest.test_bad_inputs import _run_and_check

HEADER = "time [s],gyro_x [rad/s],gyro_y [rad/s]"


def rows(n=3000, seed=0):
    data = np.column_stack([np.arange(n) * 0.001,
                            np.random.default_rng(seed).standard_normal((n, 2))])
    return data, [f"{t:.3f},{a:.9g},{b:.9g}" for t, a, b in data]


def write(path, lines, newline="\n", encoding="utf-8", prefix=b""):
    path.write_bytes(prefix + (newline.join(lines) + newline).encode(encoding))
    return path


def check(rec, data):
    ref = np.array([[float(c) for c in f"{t:.3f},{a:.9g},{b:.9g}".split(",")]
                    for t, a, b in data])
    np.testing.assert_array_equal(rec.time, ref[:, 0] - ref[0, 0])
    np.testing.assert_array_equal(rec.channel("gyro_x"), ref[:, 1])
    np.testing.assert_array_equal(rec.channel("gyro_y"), ref[:, 2])


def one_line_error(path, match, **kwargs):
    with pytest.raises(InputError) as info:
        read_recording(path, **kwargs)
    text = str(info.value)
    assert "\n" not in text and len(text) < 400, text
    assert match in text, text
    return text


def test_utf8_byte_order_mark_is_stripped(tmp_path):
    data, body = rows()
    rec = read_recording(write(tmp_path / "r.csv", [HEADER] + body, prefix=b"\xef\xbb\xbf"))
    assert rec.channels == ("gyro_x", "gyro_y")
    check(rec, data)


def test_byte_order_mark_before_comments(tmp_path):
    data, body = rows()
    path = write(tmp_path / "r.csv", ["# logger 7", HEADER] + body, prefix=b"\xef\xbb\xbf")
    check(read_recording(path), data)


@pytest.mark.parametrize("encoding, name", [("utf-16", "UTF-16"), ("utf-16-be", "UTF-16"),
                                            ("utf-16-le", "UTF-16"), ("utf-32", "UTF-32")])
def test_utf16_and_utf32_are_refused_by_name(run_cli, tmp_path, encoding, name):
    _, body = rows(1500)
    path = write(tmp_path / "rec.csv", [HEADER] + body, encoding=encoding)
    _run_and_check(run_cli, tmp_path, path, expect=name)


@pytest.mark.parametrize("parser", ["arrow", "pandas"])
def test_cr_only_line_ends(tmp_path, monkeypatch, parser):
    """Old-Mac line ends (a lone CR) read like LF ones, by both parsers, in blocks cut
    anywhere."""
    monkeypatch.setattr(csv_reader, "ARROW_BLOCK_BYTES", 4096)
    monkeypatch.setattr(csv_reader, "BLOCK_BYTES", 333)
    if parser == "pandas":
        monkeypatch.setattr(csv_reader.CsvSource, "blocks", csv_reader.CsvSource._pandas_blocks)
    data, body = rows()
    check(read_recording(write(tmp_path / "r.csv", ["# cr", HEADER] + body, newline="\r"),
                         use_cache=False), data)


@pytest.mark.parametrize("newline", ["\r", "\r\n"])
def test_bad_cell_is_named_by_its_line_with_any_line_end(tmp_path, newline):
    _, body = rows()
    body[2000] = "2.000,1,x"
    path = write(tmp_path / "r.csv", ["# c", HEADER] + body, newline=newline)
    one_line_error(path, "line 2003, column 'gyro_y': 'x' is not a number")


def test_undecodable_byte_after_the_first_8kb_names_its_line(run_cli, tmp_path):
    """The reported case: a Latin-1 byte far past the 8 KB the header sniff reads."""
    _, body = rows()
    body[1999] = body[1999] + "\xb0"
    path = tmp_path / "rec.csv"
    path.write_bytes(("\n".join([HEADER] + body) + "\n").encode("latin-1"))
    assert path.stat().st_size > 8192 * 4
    _run_and_check(run_cli, tmp_path, path, expect="line 2001: byte 0xB0")


def test_undecodable_byte_in_a_long_comment_block(tmp_path):
    _, body = rows(100)
    comments = [f"# note {i} " + "x" * 60 for i in range(300)]
    comments[250] = "# tempe\xe9rature"
    path = tmp_path / "r.csv"
    path.write_bytes(("\n".join(comments + [HEADER] + body) + "\n").encode("latin-1"))
    one_line_error(path, "line 251: byte 0xE9")


@pytest.mark.parametrize("size, quoted, expect", [
    (10**6, False, "column 2: header cell 'gyro_xxx"), (10**6, True, "line 1"),
    (1 << 21, False, "line 1: the header line is 2,097,"), (300, False, "300 characters")])
def test_one_megabyte_header_cell_is_one_line(run_cli, tmp_path, size, quoted, expect):
    _, body = rows(1500)
    cell = "gyro_" + "x" * (size - 13) + " [rad/s]"
    if quoted:
        cell = f'"{cell}"'
    path = write(tmp_path / "rec.csv", [f"time [s],{cell},gyro_y [rad/s]"] + body)
    _run_and_check(run_cli, tmp_path, path, expect=expect)


def test_long_data_cell_is_one_line(tmp_path):
    _, body = rows()
    body[10] = "0.010,1" + "0" * 300_000 + "x,1"
    one_line_error(write(tmp_path / "r.csv", [HEADER] + body), "line 12")


@pytest.mark.parametrize("cell", ["1_000", "1_0.5", "+1_0e3"])
def test_digit_separator_is_refused(run_cli, tmp_path, cell):
    """Python's float() takes '1_000'; a recording must not (pandas and pyarrow refuse
    it too, so it would otherwise depend on the parser)."""
    _, body = rows(1500)
    body[700] = f"0.700,{cell},1"
    path = write(tmp_path / "rec.csv", [HEADER] + body)
    _run_and_check(run_cli, tmp_path, path, expect="line 702, column 'gyro_x'")
    one_line_error(path, "digit separator")


def test_non_ascii_digits_are_refused(tmp_path):
    """float('١٢') is 12.0 in Python: the scan must not call it a number."""
    _, body = rows()
    body[5] = "0.005,\u0661\u0662,1"
    one_line_error(write(tmp_path / "r.csv", [HEADER] + body), "line 7, column 'gyro_x'")


@pytest.mark.parametrize("cell", ["x[0] [m]", "x [m] [s]", "gyro] [rad/s]"])
def test_bracket_inside_a_name_is_refused(run_cli, tmp_path, cell):
    _, body = rows(1500)
    path = write(tmp_path / "rec.csv", [f"time [s],{cell},gyro_y [rad/s]"] + body)
    _run_and_check(run_cli, tmp_path, path, expect="inside the name")


def ns_lines(start, n=3000, step=1_000_000):
    return ["time [ns],x [1]"] + [f"{start + i * step},{np.sin(i):.6f}" for i in range(n)]


def test_epoch_nanoseconds_near_int64_max_are_exact(tmp_path):
    """A 1 kHz log just below 2^63 ns: steps of exactly 1 ms (float64 would give
    steps of 1 ms ± 1 µs and a rate like 1000.58 Hz)."""
    start = (1 << 63) - 3000 * 1_000_000 - 12345
    rec = read_recording(write(tmp_path / "r.csv", ns_lines(start)))
    assert rec.period == pytest.approx(0.001, rel=1e-12)
    np.testing.assert_array_equal(rec.time, (np.arange(3000) * 1_000_000).astype(float) * 1e-9)


@pytest.mark.parametrize("where", [0, 2500])
def test_nanoseconds_beyond_int64_are_refused_not_rounded(run_cli, tmp_path, monkeypatch, where):
    """Unsigned epoch values >= 2^63 cannot be read exactly as int64: one line naming
    the line, never a float64 time. Also when they start after pyarrow has handed out
    integer blocks."""
    monkeypatch.setattr(csv_reader, "ARROW_BLOCK_BYTES", 4096)
    start = (1 << 63) - where * 1_000_000
    path = write(tmp_path / "rec.csv", ns_lines(start))
    _run_and_check(run_cli, tmp_path, path, expect=f"line {where + 2}, column 'time'")
    one_line_error(path, "64-bit")


def test_fractional_nanoseconds_are_refused(tmp_path, monkeypatch):
    monkeypatch.setattr(csv_reader, "ARROW_BLOCK_BYTES", 4096)
    lines = ns_lines(10**18)
    lines[2001] = lines[2001].replace(",", ".5,", 1)
    one_line_error(write(tmp_path / "r.csv", lines), "line 2002, column 'time'")


def test_errors_stay_noisecal_errors_for_a_nul_in_the_body(tmp_path):
    _, body = rows()
    body[2900] = "2.900,1\x00,1"
    with pytest.raises(NoisecalError) as info:
        read_recording(write(tmp_path / "r.csv", [HEADER] + body))
    assert "\n" not in str(info.value) and "line 2902" in str(info.value)
