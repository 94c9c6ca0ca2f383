"""HTML reports parsed with html5lib (no browser): self-contained, escaped, complete.

The HTML parsing follows the WHATWG HTML standard (html5lib builds the same tree a
browser does); the checks themselves are common practice, no source.
"""

from __future__ import annotations

import base64
import math
import re

import html5lib
import numpy as np
import pytest
import yaml

from noisecal.history import printable
from tests.report.conftest import HOSTILE, TOY_SECTIONS

NS = "{http://www.w3.org/1999/xhtml}"
JOBS = ("static", "recheck", "motion", "odometry", "targets", "toy", "unit")


def parse(path):
    return html5lib.parse(path.read_bytes(), namespaceHTMLElements=True)


def text(el) -> str:
    return "".join(el.itertext())


def by_id(doc, ident):
    for el in doc.iter():
        if el.get("id") == ident:
            return el
    raise AssertionError(f"no element with id {ident}")


def rows(table):
    return [[text(td).strip() for td in tr.iter(f"{NS}td")] for tr in table.iter(f"{NS}tr")
            if list(tr.iter(f"{NS}td"))]


@pytest.mark.parametrize("name", JOBS)
def test_self_contained_and_script_free(made, name):
    """Nothing to fetch and nothing to run: no script element, no event-handler
    attribute, every src/href a data: URI, a CSP that forbids any request, every image a
    decodable PNG (common practice, no source)."""
    doc = parse(made[name])
    assert not list(doc.iter(f"{NS}script"))
    for el in doc.iter():
        for attr, value in el.attrib.items():
            assert not attr.lower().startswith("on"), (el.tag, attr)
            if attr in ("src", "href", "srcset", "action", "data", "poster"):
                assert value.startswith("data:"), (el.tag, attr, value[:40])
    csp = [m.get("content") for m in doc.iter(f"{NS}meta")
           if m.get("http-equiv") == "Content-Security-Policy"]
    assert csp and "default-src 'none'" in csp[0] and "script-src" not in csp[0]
    imgs = list(doc.iter(f"{NS}img"))
    assert imgs, "every report has at least one plot"
    for img in imgs:
        head, data = img.get("src").split(",", 1)
        assert head == "data:image/png;base64"
        raw = base64.b64decode(data)
        assert raw[:8] == b"\x89PNG\r\n\x1a\n"
        width, height = int.from_bytes(raw[16:20], "big"), int.from_bytes(raw[20:24], "big")
        assert (int(img.get("width")), int(img.get("height"))) == (width, height) != (0, 0)
    style = "".join(text(s) for s in doc.iter(f"{NS}style"))
    assert "size: A4" in style and "break-before: page" in style


def test_generic_result_shows_its_numbers_exactly(made):
    """A result type the renderer does not know: its Estimates as 4 significant
    digits with interval, unit, τ range and resolved/bound (values written by hand
    here, not computed by the code under test)."""
    doc = parse(made["toy"])
    table = rows(by_id(doc, "headline"))
    # No customary unit for these: that column is left out; the τ range is shown.
    assert table[0] == ["gyro_x", "white_noise", "1.234e-05", "1.1e-05 … 1.4e-05",
                        "rad/s/Hz^0.5", "0.5 … 64 s", "resolved"]
    assert table[1][:5] == ["gyro_x", "bias_random_walk", "< 3.2e-07", "upper bound at 95 %",
                            "rad/s*Hz^0.5"]
    assert table[1][-1] == "bound"
    assert table[2][0] == printable(HOSTILE) and table[2][2:4] == ["0.5678", "0.5 … 0.61"]
    # Notes, the failed model check and the job's own figure.
    warnings = [text(p) for p in doc.iter(f"{NS}p") if p.get("class") == "warning"]
    assert any("NOT consistent" in w and "a toy cause" in w and "a toy advice" in w
               for w in warnings)
    notes = text(by_id(doc, "notes"))
    assert printable(HOSTILE) in notes and "second note" in notes
    assert [text(c) for c in doc.iter(f"{NS}figcaption")] == ["toy figure. a toy caption"]


def test_hostile_text_stays_text(made):
    """Serial, channel names and notes holding markup are text in the tree: the parser
    finds no script or b element made of them, and the text reads as written (control
    characters shown escaped, as on the terminal)."""
    for name in ("toy", "unit"):
        doc = parse(made[name])
        assert not list(doc.iter(f"{NS}script")) and not list(doc.iter(f"{NS}b"))
        body = text(doc)
        assert printable(HOSTILE) in body
        assert '<script>window.__pwned = 1</script>\\n\'<b>bold</b> & "quoted"' in body
    unit = parse(made["unit"])
    assert text(by_id(unit, "serial")) == printable(HOSTILE)
    title = text(next(unit.iter(f"{NS}title")))
    assert title.endswith(printable(HOSTILE))


def test_every_number_of_the_record_at_full_precision(made):
    """The full-record section holds every number of the result's mapping with all its
    digits (repr round-trips a float exactly: Python language reference)."""
    doc = parse(made["toy"])
    record = text(by_id(doc, "record"))
    for v in (0.1234567890123, 1.5e-09, 2.25e-08, 0.25, 123456, 42):
        assert repr(v) in record
    prov = text(by_id(doc, "provenance"))
    p = TOY_SECTIONS["provenance"]
    for item in (p["command"], p["date"], p["input"]["sha256"], "123456", "seed", "42",
                 p["tool"], "in.csv"):
        assert str(item) in prov


def _floats(node):
    if isinstance(node, dict):
        for v in node.values():
            yield from _floats(v)
    elif isinstance(node, list):
        for v in node:
            yield from _floats(v)
    elif isinstance(node, float) and math.isfinite(node):
        yield node


@pytest.mark.parametrize("name", ["static", "motion", "odometry", "recheck"])
def test_report_holds_every_number_of_the_yaml_block(made, name):
    """Every finite number of the YAML block the same run wrote appears in the report's
    full record to the YAML's own precision (YAML 1.2 floats read back by PyYAML)."""
    block = yaml.safe_load((made["folder"] / f"{name}.yaml").read_text())
    block.pop("checksum", None)
    record = text(by_id(parse(made[name]), "record"))
    shown = {float(x) for x in re.findall(r"-?\d+(?:\.\d+)?(?:e[-+]?\d+)?|-?inf", record)}
    missing = [v for v in _floats(block) if v not in shown]
    assert not missing, missing[:5]


def test_static_headline_against_the_yaml_and_customary_units(made):
    """The static report's headline: each term as the YAML block gives it (4 digits), the
    white noise of the gyro also in deg/√h: 1 °/√h = (π/180)/60 rad/s/√Hz (arithmetic
    from the definitions; references.md)."""
    block = yaml.safe_load((made["folder"] / "static.yaml").read_text())
    table = rows(by_id(parse(made["static"]), "headline"))
    got = {(r[0], r[1]): r for r in table}
    for ch in ("gyro_x", "accel_z"):
        for term in ("quantization", "white_noise", "bias_instability", "bias_random_walk",
                     "rate_ramp"):
            e = block["channels"][ch][term]
            row = got[(ch, term)]
            if "value" in e:
                assert float(row[2]) == pytest.approx(e["value"], rel=6e-4)
                lo, hi = (float(x) for x in row[3].split(" … "))
                assert (lo, hi) == pytest.approx(tuple(e["ci95"]), rel=6e-4)
                assert row[-1] == "resolved"
            else:
                assert row[2].startswith("< ")
                assert float(row[2][2:]) == pytest.approx(e["upper_bound"], rel=6e-4)
                assert row[-1] == "bound"
    n = block["channels"]["gyro_x"]["white_noise"]["value"]
    value, unit = got[("gyro_x", "white_noise")][5].split()
    assert unit == "deg/h^0.5"
    assert float(value) == pytest.approx(n * 180 / np.pi * 60, rel=6e-4)
    # The simulated gyro: 0.05 deg/s white at 100 Hz -> N = 0.05 * sqrt(0.01) deg/s/sqrt(Hz)
    # = 0.3 deg/sqrt(h) (arithmetic from the simulation's definition).
    assert 0.25 < float(value) < 0.35


def test_recheck_side_by_side(made):
    """The re-check report: the verdict and, per parameter, baseline and new values, the
    test, the verdict and what more data would decide, as in its YAML block."""
    block = yaml.safe_load((made["folder"] / "recheck.yaml").read_text())
    doc = parse(made["recheck"])
    assert block["verdict"] in text(by_id(doc, "verdict"))
    table = {r[0]: r for r in rows(next(t for t in doc.iter(f"{NS}table")
                                        if "parameter" in text(t)))}
    for ch, params in block["parameters"].items():
        for name, c in params.items():
            row = table[f"{ch}.{name}"]
            assert row[5] == c["verdict"] and row[6] == c["test"]
            if c["baseline"] is not None:
                assert float(row[1]) == pytest.approx(c["baseline"], rel=6e-4)
            if c["new"] is not None:
                assert float(row[2]) == pytest.approx(c["new"], rel=6e-4)


def test_unit_report_runs_and_verdicts(made):
    """The unit report: one row per run and parameter with the stored numbers (written by
    hand in the fixture), the verdicts, and one figure per channel."""
    doc = parse(made["unit"])
    body = text(doc)
    tables = [rows(t) for t in doc.iter(f"{NS}table")]
    params = tables[-1]
    assert ["1", "2026-01-10T08:00:00+00:00", "gyro_x.white_noise", "0.0001",
            "9e-05 … 0.00011", "rad/s/Hz^0.5", ""] in params
    assert ["3", "2026-06-20T08:00:00+00:00", "gyro_x.bias_random_walk", "< 3e-06",
            "upper bound", "rad/s*Hz^0.5", "changed"] in params
    assert "Re-check, run 2 (2026-03-15T08:00:00+00:00): consistent" in body
    assert "Re-check, run 3 (2026-06-20T08:00:00+00:00): changed" in body
    assert len(list(doc.iter(f"{NS}img"))) == 2


@pytest.mark.parametrize("name", ["motion", "odometry", "targets"])
def test_job_notes_are_visible(made, name):
    """Each job's notes reach the page as visible warnings (class warning), and the
    caution about using the numbers is there."""
    block = yaml.safe_load((made["folder"] / f"{name}.yaml").read_text()) \
        if name != "targets" else None
    doc = parse(made[name])
    warnings = " ".join(text(p) for p in doc.iter(f"{NS}p") if p.get("class") == "warning")
    notes = (block or {}).get("measurement", {}).get("notes") or \
        (block or {}).get("odometry", {}).get("notes") or []
    for n in notes:
        assert printable(n) in warnings
    assert "confirm them on the real system" in text(doc)


def test_motion_headline_in_the_sensor_units(made):
    """The motion report gives σ and bias in SI and in the units the sensor's file used
    (mm, deg): 1 m = 1000 mm, 1 rad = 180/π deg (arithmetic from the definitions)."""
    block = yaml.safe_load((made["folder"] / "motion.yaml").read_text())
    table = {(r[0], r[1]): r for r in rows(by_id(parse(made["motion"]), "headline"))}
    for ch, factor, unit in (("y", 1e3, "mm"), ("yaw", 180 / np.pi, "deg")):
        s = block["measurement"]["sigma"][ch]
        shown = table[(ch, "sigma")][5]
        value, rest = shown.split(" (")
        lo, hi = rest.split(")")[0].split(" … ")
        assert shown.endswith(f" {unit}")
        assert float(value) == pytest.approx(s["value"] * factor, rel=6e-4)
        assert (float(lo), float(hi)) == pytest.approx(
            (s["ci95"][0] * factor, s["ci95"][1] * factor), rel=6e-4)
