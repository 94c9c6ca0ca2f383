"""The fast read: CSV segments parsed in one pyarrow call each, and block checks by
reductions, give what element-wise reading and checking give."""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.errors import InputError
from noisecal.ingest import csv_reader, read_recording
from noisecal.ingest.header import parse_header
from noisecal.ingest.validate import MIN_STEP_S, SI_LIMIT, _quick_block


def body(tmp_path, n=5000, newline="\n"):
    rng = np.random.default_rng(11)
    data = np.column_stack([np.arange(n) * 0.01, rng.standard_normal((n, 2)) * 1e3])
    lines = [",".join(f"{v:.9g}" for v in row) for row in data]
    lines.insert(2100, "")
    text = newline.join(["# log", "time [s],a [rad/s],b [deg/s]"] + lines) + newline
    path = tmp_path / "r.csv"
    path.write_bytes(text.encode())
    return path, np.loadtxt(path, delimiter=",", skiprows=2)


@pytest.mark.parametrize("newline", ["\n", "\r\n", "\r"])
@pytest.mark.parametrize("segment", [777, 4096, 1 << 25])
def test_segments_cut_anywhere_read_like_loadtxt(tmp_path, monkeypatch, newline, segment):
    """Segments cut at any line end (LF, CRLF, lone CR), blocks of 4 KiB inside them:
    numbers as numpy.loadtxt reads them (reference library), deg/s scaled by pi/180
    (the unit's definition, common practice, no source)."""
    monkeypatch.setattr(csv_reader, "SEGMENT_BYTES", segment)
    monkeypatch.setattr(csv_reader, "ARROW_BLOCK_BYTES", 4096)
    path, ref = body(tmp_path, newline=newline)
    rec = read_recording(path, use_cache=False)
    np.testing.assert_array_equal(rec.time, ref[:, 0] - ref[0, 0])
    np.testing.assert_array_equal(rec.channel("a"), ref[:, 1])
    np.testing.assert_allclose(rec.channel("b"), np.deg2rad(ref[:, 2]), rtol=1e-15)


def test_segmented_read_equals_the_pandas_path(tmp_path, monkeypatch):
    """The segmented pyarrow read and the pandas byte-range read give identical
    arrays, cached and not."""
    path, _ = body(tmp_path)
    monkeypatch.setattr(csv_reader, "SEGMENT_BYTES", 1000)
    fast = read_recording(path, use_cache=False)
    cached = read_recording(path)
    monkeypatch.setattr(csv_reader.CsvSource, "blocks", csv_reader.CsvSource._pandas_blocks)
    slow = read_recording(path, use_cache=False)
    for rec in (fast, cached):
        np.testing.assert_array_equal(rec.time, slow.time)
        np.testing.assert_array_equal(rec.samples, slow.samples)


def test_bad_cell_in_a_later_segment_is_named_by_its_line(tmp_path, monkeypatch):
    monkeypatch.setattr(csv_reader, "SEGMENT_BYTES", 1000)
    path, _ = body(tmp_path)
    lines = path.read_text().splitlines()
    lines[4000] = "39.97,NA,1"
    path.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError, match="line 4001, column 'a'"):
        read_recording(path, use_cache=False)


HEADER = ["time [s]", "g1 [rad/s]", "g2 [deg/s]", "a [g]", "temp [degC]"]


def reference(time, cols, header, t0, last, rel_last):
    """The checks element by element in plain numpy: None where any fails."""
    steps = np.diff(np.concatenate([[last], time]) if last is not None else time)
    if not (np.isfinite(time).all() and all(np.isfinite(c).all() for c in cols)
            and (steps > 0).all()):
        return None
    rel = (time - t0) * header.time_scale
    rsteps = np.diff(np.concatenate([[rel_last], rel]) if rel_last is not None else rel)
    if not (np.isfinite(rel).all() and (rsteps >= MIN_STEP_S).all()):
        return None
    si = [c * s + o if o else c * s for c, s, o in zip(cols, header.scale, header.offset)]
    if not all((np.abs(c) <= SI_LIMIT).all() for c in si):
        return None
    return rel, si, np.array([c.min() for c in si]), np.array([c.max() for c in si])


@pytest.mark.parametrize("case", ["clean", "nan", "inf", "repeat", "backwards", "boundary",
                                  "overflow", "tiny step", "clean after"])
def test_quick_block_checks_agree_with_element_wise_checks(case):
    """Block checks by reductions (max, min, the smallest step) accept exactly the
    blocks element-wise checks accept, and give the same SI values bit for bit,
    for scaled (deg/s, g) and affine (degC) units (common practice, no source)."""
    header = parse_header(HEADER, "r.csv")
    rng = np.random.default_rng(5)
    n = 4000
    time = 1000.0 + np.arange(n) * 0.0025
    cols = [rng.standard_normal(n) * 10 ** k for k in (-3, 1, 0, 1)]
    last, rel_last = None, None
    if case == "nan":
        cols[2][1234] = np.nan
    elif case == "inf":
        cols[0][7] = -np.inf
    elif case == "repeat":
        time[3000] = time[2999]
    elif case == "backwards":
        time[10] -= 0.01
    elif case == "boundary":
        last = time[0]
    elif case == "overflow":
        cols[3][99] = 1e308  # degC to K stays finite; deg/s below overflows SI_LIMIT
        cols[1][5] = 1e102
    elif case == "tiny step":
        time[2000:] += 1e-13 - 0.0025  # a step below MIN_STEP_S
    elif case == "clean after":
        last, rel_last = time[0] - 0.0025, -0.0025
    t0 = time[0] if last is None else time[0] - 0.0025
    got = _quick_block(time, cols, header, t0, last, rel_last)
    want = reference(time, cols, header, t0, last, rel_last)
    assert (got is None) == (want is None)
    if want is not None:
        np.testing.assert_array_equal(got[0], want[0])
        for a, b in zip(got[1], want[1]):
            np.testing.assert_array_equal(a, b)
        np.testing.assert_array_equal(got[2], want[2])
        np.testing.assert_array_equal(got[3], want[3])
    if case in ("clean", "clean after"):
        assert want is not None


def runs_at(y, value, least=5):
    """Start indices and lengths of runs of at least ``least`` samples equal to value."""
    hit = np.concatenate([[0], (y == value).astype(int), [0]])
    edges = np.flatnonzero(np.diff(hit))
    return [(int(a), int(b - a)) for a, b in zip(edges[::2], edges[1::2]) if b - a >= least]


@pytest.mark.parametrize("cached", [True, False])
def test_clipped_runs_found_from_block_extremes_as_by_a_full_scan(tmp_path, monkeypatch,
                                                                  fresh_cache, cached):
    """Clipping at the top and bottom, runs across block ends and in several blocks:
    the runs found from each block's extremes are those a scan of every value finds
    (common practice, no source)."""
    monkeypatch.setattr(csv_reader, "ARROW_BLOCK_BYTES", 4096)
    monkeypatch.setattr(csv_reader, "SEGMENT_BYTES", 20000)
    rng = np.random.default_rng(2)
    n = 6000
    y = np.round(rng.standard_normal(n), 6)
    for a, k in ((130, 9), (2990, 30), (5000, 5), (40, 4)):
        y[a:a + k] = 5.5
    y[4100:4120] = -5.25
    path = tmp_path / "clip.csv"
    with open(path, "w") as fh:
        fh.write("time [s],acc [g]\n")
        np.savetxt(fh, np.column_stack([np.arange(n) * 0.01, y]), delimiter=",", fmt="%.9g")
    rec = read_recording(path, use_cache=cached)
    si = y * 9.80665
    want = sorted([(a, k, si.max()) for a, k in runs_at(si, si.max())]
                  + [(a, k, si.min()) for a, k in runs_at(si, si.min())])
    got = [(int(round(r.start_s / 0.01)), r.samples, r.value) for r in rec.saturated]
    assert got == want and len(want) == 4


@pytest.fixture
def fresh_cache(tmp_path, monkeypatch):
    root = tmp_path / "cache"
    monkeypatch.setenv("NOISECAL_CACHE", str(root))
    return root


NO_PANDAS = """
import sys
from noisecal.ingest import read_recording
rec = read_recording(sys.argv[1], use_cache=False)
print(rec.n, 'pandas' in sys.modules)
"""


@pytest.mark.parametrize("kind", ["csv", "parquet"])
def test_reading_does_not_load_pandas(tmp_path, kind):
    """Columns come out of pyarrow as numpy views without Array.to_numpy, whose first
    call imports pandas; the values are pyarrow's own (reference library)."""
    import subprocess
    import sys

    import pyarrow as pa
    import pyarrow.parquet as pq

    n = 3000
    rng = np.random.default_rng(4)
    table = pa.table({"time [s]": np.arange(n) * 0.01,
                      "a [rad/s]": rng.standard_normal(n).astype(np.float32),
                      "b [rad/s]": rng.integers(-1000, 1000, n).astype(np.int16)})
    path = tmp_path / f"r.{kind}"
    if kind == "parquet":
        pq.write_table(table, path, row_group_size=1000)
    else:
        path.write_text("time [s],a [rad/s],b [rad/s]\n" + "".join(
            f"{t!r},{a!r},{b}\n" for t, a, b in zip(*(c.to_pylist() for c in table.columns))))
    out = subprocess.run([sys.executable, "-c", NO_PANDAS, str(path)], capture_output=True,
                         text=True, check=True).stdout.split()
    assert out == [str(n), "False"]
    rec = read_recording(path, use_cache=False)
    np.testing.assert_array_equal(rec.channel("a"), table.column(1).to_numpy().astype(float))
    np.testing.assert_array_equal(rec.channel("b"), table.column(2).to_numpy().astype(float))
