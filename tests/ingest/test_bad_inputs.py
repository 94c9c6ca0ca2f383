"""Every bad input: exit status 2, one line on stderr, nothing written."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from noisecal.errors import NoisecalError
from noisecal.ingest import read_recording
from tests.conftest import rate_csv, sha

GOOD_HEADER = "time [s],gyro_x [deg/s],gyro_y [deg/s]\n"


def body(n=1500, bad=None):
    lines = [f"{i * 0.01:.2f},{np.sin(i):.6f},{np.cos(i):.6f}" for i in range(n)]
    if bad:
        for row, text in bad.items():
            lines[row] = text
    return "\n".join(lines) + "\n"


CASES = {
    "backwards time": (GOOD_HEADER + body(bad={7: "0.01,1,1"}), "line 9", b"text"),
    "repeated time": (GOOD_HEADER + body(bad={7: "0.06,1,1"}), "line 9", b"text"),
    "nan cell": (GOOD_HEADER + body(bad={3: "0.03,nan,1"}), "line 5, column 'gyro_x'", b"text"),
    "inf cell": (GOOD_HEADER + body(bad={3: "0.03,1,inf"}), "line 5, column 'gyro_y'", b"text"),
    "non-numeric": (GOOD_HEADER + body(bad={4: "0.04,abc,1"}), "line 6", b"text"),
    "empty cell": (GOOD_HEADER + body(bad={4: "0.04,,1"}), "line 6", b"text"),
    "too many cells": (GOOD_HEADER + body(bad={9: "0.09,1,1,1"}), "line 11", b"text"),
    "too few cells": (GOOD_HEADER + body(bad={9: "0.09,1"}), "line 11", b"text"),
    "missing unit": ("time [s],gyro_x,gyro_y [deg/s]\n" + body(), "no unit", b"text"),
    "unknown unit": ("time [s],gyro_x [bogons],gyro_y [deg/s]\n" + body(), "unknown unit", b"text"),
    "time not first": ("gyro_x [deg/s],time [s],gyro_y [deg/s]\n" + body(), "not the time", b"text"),
    "time unit not time": ("time [m],gyro_x [deg/s],gyro_y [deg/s]\n" + body(), "not a time", b"text"),
    "empty file": ("", "empty", b"text"),
    "header only": (GOOD_HEADER, "no data rows", b"text"),
    "too short": (GOOD_HEADER + body(n=200), "needs at least 1024", b"text"),
    "duplicate channel": ("time [s],a [1],a [1]\n" + body(), "appears twice", b"text"),
}


def _run_and_check(run_cli, tmp_path, path, *extra, expect):
    out = tmp_path / "out.yaml"
    before = sorted(p.name for p in tmp_path.iterdir())
    digest = sha(path) if path.exists() else None
    status, stdout, stderr = run_cli("static", path, "-o", out, "--reps", 20, "--quiet", *extra)
    assert status == 2, stderr
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, stderr
    assert expect in lines[0], lines[0]
    assert "Traceback" not in stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == before, "something was written"
    if digest:
        assert sha(path) == digest


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_csv(run_cli, tmp_path, case):
    text, expect, _ = CASES[case]
    path = tmp_path / "rec.csv"
    path.write_text(text, encoding="utf-8")
    _run_and_check(run_cli, tmp_path, path, expect=expect)


def test_binary_file(run_cli, tmp_path):
    path = tmp_path / "rec.csv"
    path.write_bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00" + bytes(range(256)))
    _run_and_check(run_cli, tmp_path, path, expect="binary")


def test_not_utf8(run_cli, tmp_path):
    path = tmp_path / "rec.csv"
    path.write_bytes("time [s],t° [degC]\n0,1\n".encode("latin-1"))
    _run_and_check(run_cli, tmp_path, path, expect="UTF-8")


def test_missing_file_and_unknown_type(run_cli, tmp_path):
    _run_and_check(run_cli, tmp_path, tmp_path / "nope.csv", expect="no such file")
    other = tmp_path / "rec.xlsx"
    other.write_text("x")
    _run_and_check(run_cli, tmp_path, other, expect="unknown file type")


def test_parquet_with_missing_value(run_cli, tmp_path):
    path = tmp_path / "rec.parquet"
    pq.write_table(pa.table({"time [s]": pa.array([0.0, 1.0, 2.0]),
                             "x [1]": pa.array([1.0, None, 2.0])}), path)
    _run_and_check(run_cli, tmp_path, path, expect="data row 2, column 'x [1]'")


def test_damaged_parquet(run_cli, tmp_path):
    path = tmp_path / "rec.parquet"
    path.write_bytes(b"PAR1" + b"garbage" * 20)
    _run_and_check(run_cli, tmp_path, path, expect="not a readable Parquet")


def test_npz_unequal_lengths(run_cli, tmp_path):
    path = tmp_path / "rec.npz"
    np.savez(path, **{"time [s]": np.arange(10.0), "x [1]": np.arange(9.0)})
    _run_and_check(run_cli, tmp_path, path, expect="9 rows")


def test_npz_with_objects(run_cli, tmp_path):
    path = tmp_path / "rec.npz"
    np.savez(path, **{"time [s]": np.arange(3.0), "x [1]": np.array([{}, 1, 2], dtype=object)})
    _run_and_check(run_cli, tmp_path, path, expect="npz")


def test_output_is_input(run_cli, tmp_path):
    path = rate_csv(tmp_path / "rec.yaml", np.zeros(10), 0.1)
    status, _, err = run_cli("static", path, "-o", path, "--quiet")
    assert status == 2 and "input" in err and len(err.strip().splitlines()) == 1


def test_existing_output_needs_overwrite(run_cli, tmp_path):
    rec = rate_csv(tmp_path / "rec.csv", np.random.default_rng(0).standard_normal(2048), 0.1)
    out = tmp_path / "out.yaml"
    out.write_text("keep me")
    status, _, err = run_cli("static", rec, "-o", out, "--quiet", "--reps", 20)
    assert status == 2 and "--overwrite" in err
    assert out.read_text() == "keep me"


@pytest.mark.parametrize("args, expect", [
    (("--channels", "gyro_q"), "gyro_q not in"),
    (("--dt", "-1"), "--dt -1.0: give a positive number of seconds"),
    (("--reps", "5"), "at least 20"),
])
def test_bad_options(run_cli, tmp_path, args, expect):
    rec = rate_csv(tmp_path / "rec.csv", np.random.default_rng(0).standard_normal(2048), 0.1)
    _run_and_check(run_cli, tmp_path, rec, *args, expect=expect)


def test_constant_channel(run_cli, tmp_path):
    rec = rate_csv(tmp_path / "rec.csv", np.ones(2048), 0.1)
    _run_and_check(run_cli, tmp_path, rec, expect="constant")


def test_missing_output_folder(run_cli, tmp_path):
    rec = rate_csv(tmp_path / "rec.csv", np.random.default_rng(0).standard_normal(2048), 0.1)
    status, _, err = run_cli("static", rec, "-o", tmp_path / "no" / "out.yaml", "--quiet")
    assert status == 2 and "does not exist" in err


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.one_of(
    st.binary(max_size=400),
    st.text(max_size=400),
    st.lists(st.lists(st.one_of(st.floats(allow_nan=True), st.integers(), st.text(max_size=5)),
                      min_size=1, max_size=4), max_size=20).map(
        lambda rows: "time [s],x [deg/s],y [g]\n" + "\n".join(",".join(map(str, r)) for r in rows)),
))
def test_fuzzed_csv_raises_only_project_errors(tmp_path, content):
    """Hypothesis fuzzing: whatever the bytes, the reader returns a Recording or
    raises a NoisecalError — never another exception."""
    path = tmp_path / "fuzz.csv"
    if isinstance(content, str):
        path.write_text(content, encoding="utf-8")
    else:
        path.write_bytes(content)
    try:
        read_recording(path)
    except NoisecalError:
        pass


@pytest.mark.parametrize("argv", [["static", "x.csv"], ["bogus"], ["static", "x.csv", "-o", "y.yaml", "--dt", "abc"]])
def test_bad_command_line_is_one_line(argv, capsys):
    from noisecal.cli import main

    with pytest.raises(SystemExit) as exit_info:
        main(argv)
    err = capsys.readouterr().err
    assert exit_info.value.code == 2
    assert len(err.strip().splitlines()) == 1 and "--help" in err
