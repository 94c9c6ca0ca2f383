"""``--report`` and ``noisecal report``: refused before any work, with one line and
status 2, nothing written (the project's output rules; common practice, no source)."""

from __future__ import annotations

import pytest

from tests.report.conftest import static_csv


@pytest.mark.parametrize("report,why", [
    ("out.txt", "give a path ending in .html"),
    ("-", "a report is a file"),
    ("missing/out.html", "does not exist"),
    ("bench.csv", "a report is an HTML file"),
])
def test_bad_report_paths_are_refused_first(tmp_path, run_cli, report, why):
    rec = static_csv(tmp_path / "bench.csv", 3)
    before = sorted(p.name for p in tmp_path.iterdir())
    status, _, err = run_cli("static", rec, "-o", tmp_path / "out.yaml", "--reps", 20,
                             "--quiet", "--report",
                             report if report == "-" else tmp_path / report)
    assert status == 2 and why in err and len(err.strip().splitlines()) == 1
    assert "Traceback" not in err
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_existing_report_needs_overwrite(tmp_path, run_cli):
    rec = static_csv(tmp_path / "bench.csv", 3)
    (tmp_path / "r.html").write_text("mine")
    status, _, err = run_cli("static", rec, "-o", tmp_path / "out.yaml", "--reps", 20,
                             "--quiet", "--report", tmp_path / "r.html")
    assert status == 2 and "--overwrite" in err
    assert (tmp_path / "r.html").read_text() == "mine" and not (tmp_path / "out.yaml").exists()


def test_unit_report_refusals(tmp_path, run_cli):
    status, _, err = run_cli("report", "SN-9", "--db", tmp_path / "none.db", "-o",
                             tmp_path / "u.html")
    assert status == 2 and "no such database" in err and not (tmp_path / "u.html").exists()
    status, _, err = run_cli("report", "SN-9", "--db", tmp_path / "none.db", "-o",
                             tmp_path / "u.pdf")
    assert status == 2 and err.startswith("noisecal: error: -o ") and "html" in err


def test_unit_without_runs(made, run_cli, tmp_path):
    db = made["folder"] / "unit.db"
    status, _, err = run_cli("report", "nobody", "--db", db, "-o", tmp_path / "u.html")
    assert status == 2 and "no runs stored" in err and not (tmp_path / "u.html").exists()


def test_result_report_from_python(made, tmp_path):
    """``result.report(path)`` refuses an existing file unless ``overwrite=True``."""
    from noisecal.jobs.result import ParameterError
    from tests.report.conftest import TOY_SECTIONS, ToyResult

    res = ToyResult(TOY_SECTIONS)
    path = res.report(tmp_path / "a.html")
    with pytest.raises(ParameterError, match="overwrite=True"):
        res.report(path)
    assert res.report(path, overwrite=True) == path
