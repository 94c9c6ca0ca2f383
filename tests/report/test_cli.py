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


def test_filter_and_consistency_reports(tmp_path, run_cli):
    """Jobs the renderer has no special case for get the generic report: a headline of
    the job's parameters, the consistency verdict as the exit status gives it, the
    provenance's command, no script (the committed filter demo; common practice, no
    source)."""
    import html5lib
    import yaml

    from tests.report.conftest import ROOT

    rec = ROOT / "recordings"
    status, _, err = run_cli("filter", rec / "filter_model.yaml", "-o", tmp_path / "f.yaml",
                             "--draws", 200, "--report", tmp_path / "f.html")
    assert status == 0, err
    status, _, err = run_cli("consistency", rec / "filter_log_run1.csv", "--model",
                             rec / "filter_model.yaml", "-o", tmp_path / "c.yaml",
                             "--report", tmp_path / "c.html")
    assert status in (0, 1), err
    for name in ("f", "c"):
        doc = html5lib.parse((tmp_path / f"{name}.html").read_bytes(),
                             namespaceHTMLElements=False)
        body = "".join(doc.itertext())
        assert not list(doc.iter("script"))
        block = yaml.safe_load((tmp_path / f"{name}.yaml").read_text())
        assert block["provenance"]["command"] in body
        head = next(t for t in doc.iter("table") if t.get("id") == "headline")
        cells = ["".join(td.itertext()) for td in head.iter("td")]
        assert cells, "the headline lists the job's parameters"
    verdict = next(p for p in doc.iter("p") if p.get("id") == "verdict")
    assert ("NOT consistent" in "".join(verdict.itertext())) == (status == 1)
