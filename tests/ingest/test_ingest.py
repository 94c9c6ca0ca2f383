"""Ingest: formats, SI conversion, gaps, jitter, saturation, repairs."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from noisecal.errors import InputError
from noisecal.ingest import read_recording
from tests.conftest import write_csv


def test_csv_units_to_si_and_gap(tmp_path):
    rows = [(i * 0.01, 1.0, 0.5) for i in range(200) if not 100 <= i < 105]
    rec = read_recording(write_csv(tmp_path / "r.csv", ["time [s]", "gyro_x [deg/s]",
                                                        "accel_z [g]"], rows))
    assert rec.channels == ("gyro_x", "accel_z")
    assert rec.units == ("rad/s", "m/s**2")
    assert rec.channel("gyro_x")[0] == pytest.approx(np.pi / 180)
    assert rec.channel("accel_z")[0] == pytest.approx(0.5 * 9.80665)
    assert rec.period == pytest.approx(0.01)
    assert len(rec.gaps) == 1
    gap = rec.gaps[0]
    assert gap.start_s == pytest.approx(0.99) and gap.length_s == pytest.approx(0.05)
    assert gap.missing == 5
    assert rec.segments == [(0, 100), (100, 195)]


def test_integer_nanoseconds_keep_their_precision(tmp_path):
    """Epoch nanoseconds exceed float64's 2^53: relative times must stay exact."""
    t0 = 1_780_000_000_123_456_789
    rows = [(t0 + i * 5_000_000 + (i % 3), 0.0 + i) for i in range(50)]
    rec = read_recording(write_csv(tmp_path / "r.csv", ["time [ns]", "x [1]"], rows))
    np.testing.assert_allclose(np.diff(rec.time), [0.005 + ((i + 1) % 3 - i % 3) * 1e-9
                                                   for i in range(49)], rtol=0, atol=1e-15)
    assert rec.jitter == pytest.approx(np.std(np.diff(rec.time)), rel=1e-9)


def test_saturated_run_reported(tmp_path):
    y = np.sin(np.arange(300) * 0.1)
    y[50:60] = 1.2
    rows = [(i * 0.1, v) for i, v in enumerate(y)]
    rec = read_recording(write_csv(tmp_path / "r.csv", ["time [s]", "a [m/s^2]"], rows))
    assert len(rec.saturated) == 1
    run = rec.saturated[0]
    assert run.samples == 10 and run.start_s == pytest.approx(5.0) and run.value == 1.2


@pytest.mark.parametrize("repair, kept", [("sort", 5), ("drop", 4)])
def test_repairs_are_explicit_and_recorded(tmp_path, repair, kept):
    path = write_csv(tmp_path / "r.csv", ["time [s]", "x [1]"],
                     [(0, 1), (1, 2), (3, 3), (2, 4), (4, 5), (4, 6)])
    with pytest.raises(InputError, match="--repair"):
        read_recording(path)
    rec = read_recording(path, repair=repair)
    assert rec.n == kept
    assert np.all(np.diff(rec.time) > 0)
    assert rec.source.repairs and rec.source.repairs[0].startswith(f"--repair {repair}")


def test_parquet_and_npz_read_like_csv(tmp_path):
    t = np.arange(100) * 0.02
    y = np.cos(t)
    pq.write_table(pa.table({"time [s]": t, "gyro_z [deg/s]": y}), tmp_path / "r.parquet")
    np.savez(tmp_path / "r.npz", **{"time [s]": t, "gyro_z [deg/s]": y})
    csv = write_csv(tmp_path / "r.csv", ["time [s]", "gyro_z [deg/s]"],
                    [(repr(float(a)), repr(float(b))) for a, b in zip(t, y)])
    recs = [read_recording(p) for p in (tmp_path / "r.parquet", tmp_path / "r.npz", csv)]
    for rec in recs[1:]:
        np.testing.assert_array_equal(rec.samples, recs[0].samples)
        assert rec.units == recs[0].units
    assert [r.source.format for r in recs] == ["parquet", "npz", "csv"]


def test_comment_lines_before_header(tmp_path):
    path = tmp_path / "r.csv"
    path.write_text("# logger v2\n# bench 4\ntime [s],x [1]\n0,1\n1,2\n2,3\n")
    rec = read_recording(path)
    assert rec.n == 3


def test_input_is_never_modified(tmp_path):
    path = write_csv(tmp_path / "r.csv", ["time [s]", "x [1]"], [(0, 1), (2, 2), (1, 3)])
    before = path.read_bytes()
    read_recording(path, repair="sort")
    assert path.read_bytes() == before


@pytest.mark.parametrize("newline", ["\n", "\r\n"])
def test_blocks_cut_anywhere_read_like_numpy(tmp_path, monkeypatch, newline):
    """The body is parsed in byte ranges cut at line ends on two threads: with
    ranges of a few hundred bytes (so every cut lands somewhere new), blank
    lines and CRLF ends, the values equal numpy.loadtxt's of the same text
    (reference library), in order, and a bad cell in a late range is still
    named by its line."""
    from noisecal.ingest import csv_reader

    monkeypatch.setattr(csv_reader, "BLOCK_BYTES", 333)
    rng = np.random.default_rng(5)
    n = 3000
    data = np.column_stack([np.arange(n) * 0.01, rng.standard_normal((n, 2))])
    lines = [",".join(f"{v:.9g}" for v in row) for row in data]
    lines.insert(1234, "")
    text = newline.join(["# bench log", "time [s],a [rad/s],b [rad/s]"] + lines) + newline
    path = tmp_path / "r.csv"
    path.write_bytes(text.encode())
    rec = read_recording(path, use_cache=False)
    ref = np.loadtxt(path, delimiter=",", skiprows=2)
    np.testing.assert_array_equal(rec.time, ref[:, 0] - ref[0, 0])
    np.testing.assert_array_equal(rec.channel("a"), ref[:, 1])
    np.testing.assert_array_equal(rec.channel("b"), ref[:, 2])
    lines[2700] = "27.00,x,1"
    path.write_bytes((newline.join(["time [s],a [rad/s],b [rad/s]"] + lines) + newline).encode())
    with pytest.raises(InputError, match="line 2702, column 'a'"):
        read_recording(path, use_cache=False)
