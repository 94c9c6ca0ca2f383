"""Hostile and unlucky side inputs, units and time columns.

Every refusal must be a NoisecalError whose message is one line naming the
file; the checks here are common practice, no source, unless a test says
otherwise.
"""

from __future__ import annotations

import os
import threading

import numpy as np
import pytest

from noisecal.errors import InputError, NoisecalError
from noisecal.ingest import yaml_file
from noisecal.ingest.camera import read_camera, read_detections, read_survey
from noisecal.ingest.mapping import read_map, read_odometry_config
from noisecal.ingest.yaml_file import parse_yaml, read_side_file, read_yaml


def _one_line(exc: BaseException) -> str:
    text = str(exc)
    assert "\n" not in text and text
    return text


# --- side files: regular, bounded --------------------------------------------------

@pytest.mark.parametrize("reader", [read_map, read_odometry_config, read_camera,
                                    lambda p: read_yaml(p, "baseline")])
def test_dev_zero_folder_and_missing_are_refused(reader, tmp_path):
    """/dev/zero would grow memory without bound; a folder and a missing path are
    plain mistakes. Each is one line naming the path."""
    for path in ["/dev/zero", tmp_path, tmp_path / "nope.yaml"]:
        with pytest.raises(InputError) as err:
            reader(path)
        assert str(path) in _one_line(err.value)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no FIFOs on this system")
def test_fifo_is_refused_without_waiting(tmp_path):
    """A FIFO with no writer would block open() forever; it is refused at once.
    The read runs on a thread so that a regression fails instead of hanging."""
    fifo = tmp_path / "map.yaml"
    os.mkfifo(fifo)
    outcome = []

    def attempt():
        try:
            read_map(fifo)
        except InputError as exc:
            outcome.append(str(exc))

    worker = threading.Thread(target=attempt, daemon=True)
    worker.start()
    worker.join(10)
    assert not worker.is_alive(), "reading a FIFO blocked"
    assert outcome and "not a regular file" in outcome[0]


def test_size_cap(tmp_path, monkeypatch):
    path = tmp_path / "big.yaml"
    path.write_text("a: 1\n" * 100)
    assert len(read_side_file(path, "map file", 10_000)) == 500
    with pytest.raises(InputError, match="over the"):
        read_side_file(path, "map file", 499)
    monkeypatch.setattr(yaml_file, "YAML_CAP", 100)
    with pytest.raises(InputError, match=r"big\.yaml.*500 bytes"):
        read_yaml(path, "map file")


# --- the guarded loader --------------------------------------------------------------

def _bomb(levels: int) -> str:
    text = 'a: &a ["x","x","x","x","x","x","x","x","x"]\n'
    for i in range(1, levels):
        prev, name = chr(96 + i), chr(97 + i)
        text += f"{name}: &{name} [" + ", ".join([f"*{prev}"] * 9) + "]\n"
    return text


def test_alias_bomb_is_refused():
    """The "billion laughs" pattern: nine levels of nine aliases."""
    with pytest.raises(InputError, match="alias bomb") as err:
        parse_yaml(_bomb(9), "m.yaml", "map file")
    _one_line(err.value)


def test_a_few_aliases_are_fine():
    doc = parse_yaml(_bomb(3), "m.yaml", "map file")
    assert len(doc["c"]) == 9 and doc["c"][0][0] == ["x"] * 9


def test_recursive_alias_is_refused():
    with pytest.raises(InputError, match="loop"):
        parse_yaml("a: &x [1, *x]\n", "m.yaml", "map file")


@pytest.mark.parametrize("text", ["[" * 20000 + "]" * 20000, "{a: " * 5000 + "1" + "}" * 5000,
                                  "".join("  " * i + "k:\n" for i in range(300)) + "  " * 300 + "1"])
def test_deep_nesting_is_refused(text):
    with pytest.raises(InputError, match="nested more than 100") as err:
        parse_yaml(text, "m.yaml", "map file")
    assert "line 1" in _one_line(err.value) or "line" in str(err.value)


def test_nesting_at_the_limit_is_read():
    doc = parse_yaml("[" * 100 + "]" * 100, "m.yaml", "map file")
    assert isinstance(doc, list)


@pytest.mark.parametrize("text", ["a: " + "9" * 5000, "a: " + "9" * 41, "a: 0x" + "f" * 60])
def test_huge_integers_are_refused(text):
    with pytest.raises(InputError, match="digits"):
        parse_yaml(text, "m.yaml", "map file")


@pytest.mark.parametrize("text, value", [
    ("1e3", 1000.0), ("1E3", 1000.0), ("1.0e-6", 1e-6), ("1.5E+2", 150.0), (".5", 0.5),
    ("-.5", -0.5), ("+2", 2), ("-3", -3), ("1_000", 1000), ("010", 10), ("0x1F", 31),
    ("0o17", 15), ("2.", 2.0), ("9" * 40, int("9" * 40)),
])
def test_numbers_in_every_common_spelling(text, value):
    """YAML 1.2 core schema numbers (yaml.org/spec/1.2.2, 10.3.2), plus underscores
    between digits; PyYAML's YAML 1.1 rules read ``1e3`` as text and ``010`` as 8."""
    got = parse_yaml(f"a: {text}", "m.yaml", "map file")["a"]
    assert got == value and type(got) is type(value)


@pytest.mark.parametrize("text, sign", [(".inf", 1), ("-.inf", -1), ("+.inf", 1), ("inf", 1),
                                        ("-inf", -1), ("-Inf", -1), ("INF", 1)])
def test_infinities_are_floats(text, sign):
    got = parse_yaml(f"a: {text}", "m.yaml", "map file")["a"]
    assert got == sign * np.inf


@pytest.mark.parametrize("text", [".nan", "nan", "NaN"])
def test_nan_is_a_float(text):
    assert np.isnan(parse_yaml(f"a: {text}", "m.yaml", "map file")["a"])


@pytest.mark.parametrize("text, value", [("on", "on"), ("no", "no"), ("y", "y"),
                                         ("1:30", "1:30"), ("true", True), ("False", False),
                                         ("'1e3'", "1e3"), ("1e", "1e"), ("e3", "e3"),
                                         ("1.2.3", "1.2.3")])
def test_text_stays_text(text, value):
    """YAML 1.2: only true/false are booleans; sexagesimal is gone."""
    assert parse_yaml(f"a: {text}", "m.yaml", "map file")["a"] == value


@pytest.mark.parametrize("text", ["a: !!python/object:os.system x", "a: !!binary zz",
                                  "{[1]: 2}", "a: 2024-13-45", "a: !!float abc",
                                  "a: !!int 1.5", "a: [", "\tx: 1"])
def test_odd_constructs_are_one_line_errors(text):
    with pytest.raises(InputError) as err:
        parse_yaml(text, "m.yaml", "map file")
    assert _one_line(err.value).startswith("m.yaml")


def test_map_with_scientific_numbers_and_odd_keys(tmp_path):
    path = tmp_path / "map.yaml"
    path.write_text("measures: {offset: path.offset}\npath: [[0, 0], [4e1, 0], [4.0e+1, 2.5e1]]\n")
    mapping = read_map(path)
    np.testing.assert_array_equal(mapping.path, [[0, 0], [40, 0], [40, 25]])
    path.write_text("measures: {offset: x}\n1: a\nz: b\n")  # keys of mixed types
    with pytest.raises(InputError, match="unknown key"):
        read_map(path)
    path.write_text("measures: {offset: x}\nbeacons: [1, 2]\n")
    with pytest.raises(InputError, match="'beacons' maps"):
        read_map(path)


def test_camera_file_with_infinite_focal_length(tmp_path):
    path = tmp_path / "camera.yaml"
    path.write_text("camera: {width: 640, height: 480, fx: -inf, fy: 1e3, cx: 320, cy: 240,\n"
                    "  pose: {position: [0, 0, 1], rotation: [[1,0,0],[0,1,0],[0,0,1]]}}\n")
    with pytest.raises(InputError, match="'fx' must be a number"):
        read_camera(path)
    path.write_text(path.read_text().replace("-inf", "1.2e3"))
    assert read_camera(path).K[0, 0] == 1200.0


# --- survey and detections tables ---------------------------------------------------------

def _camera(tmp_path):
    path = tmp_path / "camera.yaml"
    path.write_text("camera: {width: 640, height: 480, fx: 500, fy: 500, cx: 320, cy: 240,\n"
                    "  pose: {position: [0, 0, 1], rotation: [[1,0,0],[0,1,0],[0,0,1]]}}\n")
    return read_camera(path)


def test_detection_line_numbers_count_comments(tmp_path):
    """The line named is the file's line, comment and blank lines counted."""
    survey = tmp_path / "survey.csv"
    survey.write_text("id,x [m],y [m],z [m]\nT1,1,2,3\n")
    det = tmp_path / "det.csv"
    det.write_text("# session 4\n\ntime [s],id,u [px],v [px]\n0.0,T1,10,10\n"
                   "# a note\n0.1,T9,10,10\n")
    with pytest.raises(InputError, match=r"det\.csv, line 6: target id 'T9'"):
        read_detections(det, read_survey(survey), _camera(tmp_path))
    det.write_text("time [s],id,u [px],v [px]\n0.0,T1,10,10\n0.1,T1,abc,10\n")
    with pytest.raises(InputError, match=r"line 3, column 'u'"):
        read_detections(det, read_survey(survey), _camera(tmp_path))


def test_side_tables_refuse_devices_and_overflow(tmp_path):
    with pytest.raises(InputError, match="not a regular file"):
        read_survey("/dev/zero")
    survey = tmp_path / "survey.csv"
    survey.write_text("id,x [km],y [m],z [m]\nT1,1e306,2,3\n")
    with pytest.raises(InputError, match=r"line 2, column 'x'.*overflows"):
        read_survey(survey)


def test_detections_hash_is_of_the_file(tmp_path):
    """Provenance: the SHA-256 of the bytes read (hashlib)."""
    import hashlib

    survey = tmp_path / "survey.csv"
    survey.write_text("id,x [m],y [m],z [m]\nT1,1,2,3\n")
    det = tmp_path / "det.csv"
    det.write_text("time [s],id,u [px],v [px]\n0.0,T1,10,10\n")
    got = read_detections(det, read_survey(survey), _camera(tmp_path))
    assert got.sha256 == hashlib.sha256(det.read_bytes()).hexdigest()


def test_errors_are_project_errors():
    assert issubclass(InputError, NoisecalError)


# --- time columns, SI range, auxiliary channels (Parquet and npz) -----------------------

N = 2000


def _write(tmp_path, name, arrays, parquet=False):
    if parquet:
        import pyarrow as pa
        import pyarrow.parquet as pq

        path = tmp_path / f"{name}.parquet"
        pq.write_table(pa.table({k: pa.array(v) for k, v in arrays.items()}), path)
    else:
        path = tmp_path / f"{name}.npz"
        np.savez(path, **arrays)
    return path


def _read(path):
    from noisecal.ingest import read_recording

    return read_recording(path, use_cache=False)


@pytest.mark.parametrize("parquet", [False, True])
@pytest.mark.parametrize("dtype", [np.int16, np.int32, np.uint16, np.uint32, np.int64,
                                   np.uint64])
def test_integer_time_columns_are_exact(tmp_path, dtype, parquet):
    """50 Hz in ms stored in narrow integers spanning more than the type's half range:
    differences taken in the stored type would wrap (int16: a 40 s record read as
    -25.5 s). Expected values are arithmetic: 2000 samples × 20 ms."""
    info = np.iinfo(dtype)
    start = max(int(info.min), -20000)
    time = (start + 20 * np.arange(N)).astype(dtype)
    y = np.random.default_rng(1).normal(size=N)
    rec = _read(_write(tmp_path, "t", {"time [ms]": time, "gyro [deg/s]": y}, parquet))
    assert rec.duration == pytest.approx(40.0, rel=1e-12)
    assert rec.period == pytest.approx(0.02, rel=1e-12)
    assert rec.jitter < 1e-12 and not rec.gaps
    assert rec.start_time == pytest.approx(start * 1e-3)


def test_uint64_time_beyond_int64_is_refused(tmp_path):
    time = np.arange(N, dtype=np.uint64) + np.uint64(2 ** 63)
    path = _write(tmp_path, "t", {"time [ns]": time, "x [1]": np.zeros(N)})
    with pytest.raises(InputError, match=r"data row 1, column 'time'.*64-bit") as err:
        _read(path)
    _one_line(err.value)


@pytest.mark.parametrize("time, match", [
    (np.array([-2 ** 63 + 1, 0, 2 ** 63 - 1]), "data row 3, column 'time'"),
    (np.arange(N) * 1e-310, "data row 2, column 'time'"),
    (np.arange(N) % 2 == 0, "type bool"),
])
def test_times_unusable_in_seconds_are_refused(tmp_path, time, match):
    path = _write(tmp_path, "t", {"time [ns]": time, "x [1]": np.ones(time.shape[0])})
    with pytest.raises(InputError, match=match) as err:
        _read(path)
    _one_line(err.value)


@pytest.mark.parametrize("unit, scale, match", [
    ("km/s", 1e306, r"data row 1, column 'x'.*overflows"),
    ("rad/s", 1e150, r"data row 1, column 'x'.*beyond 1e\+100"),
    ("rad/s", 1e-200, r"column 'x': every value is below 1e-100"),
])
def test_values_out_of_range_in_si_are_refused(tmp_path, unit, scale, match):
    y = np.random.default_rng(2).normal(size=N) * scale
    path = _write(tmp_path, "t", {"time [s]": np.arange(N) * 0.01, f"x [{unit}]": y})
    with pytest.raises(InputError, match=match) as err:
        _read(path)
    _one_line(err.value)


def test_zero_channel_is_not_underflow(tmp_path):
    path = _write(tmp_path, "t", {"time [s]": np.arange(N) * 0.01, "x [rad/s]": np.zeros(N),
                                  "y [rad/s]": np.full(N, 1e-90)})
    assert _read(path).n == N


def test_complex_npz_column_is_refused(tmp_path):
    path = _write(tmp_path, "t", {"time [s]": np.arange(N) * 0.01, "x [1]": np.ones(N) + 1j})
    with pytest.raises(InputError, match="complex128, not real numbers"):
        _read(path)


def test_ambiguous_unit_in_a_recording(tmp_path):
    path = _write(tmp_path, "t", {"time [s]": np.arange(N) * 0.01, "mag [G]": np.ones(N)})
    with pytest.raises(InputError, match=r"column 'mag'.*\[G\] is ambiguous.*tesla"):
        _read(path)


def test_auxiliary_channels_are_kept_shown_and_not_fitted_by_default(tmp_path):
    from noisecal.jobs.inspect import describe
    from noisecal.jobs.static import select_channels

    y = np.random.default_rng(3).normal(size=N)
    path = _write(tmp_path, "t", {"time [s]": np.arange(N) * 0.01, "gyro [deg/s]": y,
                                  "temp [degC]": 20 + y, "supply [V]": 5 + y,
                                  "mass [kg]": y})
    rec = _read(path)
    assert rec.channels == ("gyro", "temp", "supply", "mass")
    assert rec.auxiliary == ("temp", "supply", "mass")
    assert rec.channel("temp").mean() == pytest.approx(293.15 + y.mean())  # kelvin, pint
    assert select_channels(rec, None) == ["gyro"]
    assert select_channels(rec, ["temp"]) == ["temp"]
    text = describe(rec)
    assert "temp" in text and "auxiliary temp, supply, mass" in text


def test_only_auxiliary_channels_is_a_one_line_error(tmp_path):
    from noisecal.jobs.static import select_channels

    path = _write(tmp_path, "t", {"time [s]": np.arange(N) * 0.01, "temp [degC]": np.ones(N)})
    with pytest.raises(InputError, match="every channel is auxiliary") as err:
        select_channels(_read(path), None)
    _one_line(err.value)


def test_quote_for_loader_makes_dumped_text_read_back_as_text():
    """A SafeDumper leaves '1e3' unquoted (a string under YAML 1.1) and the guarded
    loader would read it as 1000.0; with quote_for_loader both readings agree."""
    import yaml

    class Plain(yaml.SafeDumper):
        pass

    class Quoting(yaml.SafeDumper):
        pass

    yaml_file.quote_for_loader(Quoting)
    doc = {"channels": ["1e3", "inf", "0o17", "1_0", ".5", "on", "yes", "gyro", "1:30"],
           "n": 3, "x": 1e-6, "y": float("inf"), "b": True, "none": None}
    plain = yaml.dump(doc, Dumper=Plain)
    assert parse_yaml(plain, "b.yaml", "baseline")["channels"][0] == 1000.0  # the hazard
    text = yaml.dump(doc, Dumper=Quoting)
    assert parse_yaml(text, "b.yaml", "baseline") == doc
    assert yaml.safe_load(text) == doc


def test_npz_declaring_more_than_memory_is_refused_before_reading(tmp_path, monkeypatch):
    """A compressed npz whose headers declare 800 GB in a few kB (a zip bomb) is
    refused from its headers (numpy .npy format 1.0), before any array is read."""
    import io
    import zipfile

    from noisecal.ingest import columnar

    path = tmp_path / "bomb.npz"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        for name in ["time [s].npy", "x [1].npy"]:
            with archive.open(name, "w", force_zip64=True) as fh:
                head = io.BytesIO()
                np.lib.format.write_array_header_1_0(
                    head, {"descr": "<f8", "fortran_order": False, "shape": (10 ** 11,)})
                fh.write(head.getvalue())
                fh.write(b"\0" * 4096)
    assert path.stat().st_size < 100_000
    monkeypatch.setattr(columnar, "_memory_bytes", lambda: 8 << 30)
    with pytest.raises(InputError, match="declare 1.6e\\+03 GB, more than half") as err:
        _read(path)
    _one_line(err.value)
