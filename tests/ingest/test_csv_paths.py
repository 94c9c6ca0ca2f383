"""Both CSV parsers, and the hand-over between them, read what numpy.loadtxt reads
(reference library)."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.errors import InputError
from noisecal.ingest import csv_reader, read_recording


def body(tmp_path, n=4000, newline="\n"):
    rng = np.random.default_rng(7)
    data = np.column_stack([np.arange(n) * 0.01, rng.standard_normal((n, 2))])
    lines = [",".join(f"{v:.9g}" for v in row) for row in data]
    lines.insert(1500, "")
    text = newline.join(["# log", "time [s],a [rad/s],b [rad/s]"] + lines) + newline
    path = tmp_path / "r.csv"
    path.write_bytes(text.encode())
    return path, np.loadtxt(path, delimiter=",", skiprows=2)


def assert_reads_like_loadtxt(path, ref):
    rec = read_recording(path, use_cache=False)
    np.testing.assert_array_equal(rec.time, ref[:, 0] - ref[0, 0])
    np.testing.assert_array_equal(rec.channel("a"), ref[:, 1])
    np.testing.assert_array_equal(rec.channel("b"), ref[:, 2])


@pytest.mark.parametrize("newline", ["\n", "\r\n"])
@pytest.mark.parametrize("parser", ["arrow", "pandas"])
def test_each_parser_in_small_blocks(tmp_path, monkeypatch, parser, newline):
    monkeypatch.setattr(csv_reader, "ARROW_BLOCK_BYTES", 4096)
    monkeypatch.setattr(csv_reader, "BLOCK_BYTES", 333)
    if parser == "pandas":
        monkeypatch.setattr(csv_reader.CsvSource, "blocks", csv_reader.CsvSource._pandas_blocks)
    path, ref = body(tmp_path, newline=newline)
    assert_reads_like_loadtxt(path, ref)


def test_hand_over_to_pandas_mid_file_repeats_no_row(tmp_path, monkeypatch):
    """If pyarrow gives up after some blocks on text the scan finds sound, pandas
    continues after the rows already handed out."""
    arrow = csv_reader.CsvSource._arrow_blocks

    def gives_up(self, time_integer, progress=None):
        for k, block in enumerate(arrow(self, time_integer, progress)):
            if k == 3:
                raise ValueError("stricter than pandas")
            yield block

    monkeypatch.setattr(csv_reader, "ARROW_BLOCK_BYTES", 4096)
    monkeypatch.setattr(csv_reader.CsvSource, "_arrow_blocks", gives_up)
    path, ref = body(tmp_path)
    assert_reads_like_loadtxt(path, ref)


def test_empty_cell_is_named_by_its_line(tmp_path, monkeypatch):
    monkeypatch.setattr(csv_reader, "ARROW_BLOCK_BYTES", 4096)
    path, _ = body(tmp_path)
    lines = path.read_text().splitlines()
    lines[3000] = "29.97,,1"
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match="line 3001, column 'a': empty cell"):
        read_recording(path, use_cache=False)
