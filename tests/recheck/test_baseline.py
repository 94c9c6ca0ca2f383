"""The baseline a re-check reads: checksum, damage, layout version, side-file paths,
every setting's round trip, and verdicts a script can gate on."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import numpy as np
import pytest
import yaml

from noisecal.export import yaml_block
from noisecal.fit import compare
from noisecal.fit.simulate import simulate_rate
from noisecal.jobs.recheck import factor_text, recheck
from tests.conftest import rate_csv, write_csv

ROOT = Path(__file__).resolve().parents[2]
REC = ROOT / "recordings"


def _rate(path, seed, n=2 ** 12, scale=1.0, k=0.0):
    y = simulate_rate(np.array([0, (1e-3 * scale) ** 2, 0, k ** 2, 0]), 0.1, n,
                      np.random.default_rng(seed))
    return rate_csv(path, y, 0.1)


@pytest.fixture(scope="module")
def static_base(tmp_path_factory):
    """A small static baseline and a new recording of the same noise."""
    from noisecal.cli import main

    folder = tmp_path_factory.mktemp("static")
    base = folder / "base.yaml"
    assert main(["static", str(_rate(folder / "a.csv", 1)), "-o", str(base), "--reps", "20",
                 "--quiet"]) == 0
    return base, _rate(folder / "b.csv", 2)


def _one_line_error(status, err, *words):
    assert status == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("noisecal: error:"), err
    assert "Traceback" not in err
    for w in words:
        assert w in lines[0], err


# --------------------------------------------------------------------------- checksum

def test_checksum_follows_values_not_layout():
    """A value, key or list changed breaks the checksum; comments, quoting and
    indentation do not (it covers the parsed content). Common practice, no source."""
    text = yaml_block.render({"layout": "noisecal.static/1", "a": {"b": [1.5, None, 3],
                                                                    "c": 1e-17, "d": "x: y"}})
    doc = yaml.safe_load(text)
    assert doc["checksum"].startswith("sha256:") and yaml_block.verify(doc) == "ok"
    relaid = "# another comment\n" + yaml.safe_dump(doc, default_flow_style=True)
    assert yaml_block.verify(yaml.safe_load(relaid)) == "ok"
    for edit in (lambda d: d["a"].__setitem__("c", 2e-17),
                 lambda d: d["a"]["b"].append(4),
                 lambda d: d["a"].__setitem__("e", 1),
                 lambda d: d["a"].pop("d")):
        d = yaml.safe_load(text)
        edit(d)
        assert yaml_block.verify(d) == "mismatch"
    d = yaml.safe_load(text)
    d.pop("checksum")
    assert yaml_block.verify(d) == "missing"


def test_hand_edit_refused_or_accepted_and_recorded(static_base, tmp_path, run_cli):
    """The reported case: gyro_x's white noise and its interval doubled by hand. Refused
    (one line, exit 2, names --accept-edited); accepted with the option, the stated
    values are compared — the new unit, at half the edited value, is 'better' — and the
    output records that an edited baseline was accepted."""
    base, new = static_base
    doc = yaml.safe_load(base.read_text())
    w = doc["channels"]["gyro_x"]["white_noise"]
    w["value"] *= 2
    w["ci95"] = [v * 2 for v in w["ci95"]]
    edited = tmp_path / "edited.yaml"
    edited.write_text(yaml.safe_dump(doc, sort_keys=False))
    _one_line_error(*run_cli("recheck", edited, new)[::2], "checksum", "--accept-edited")
    status, out, err = run_cli("recheck", edited, new, "--accept-edited", "-o", tmp_path / "r.yaml")
    assert status == 1 and "gyro_x.white_noise: better" in out, out + err
    r = yaml.safe_load((tmp_path / "r.yaml").read_text())
    assert "accepted with --accept-edited" in r["provenance"]["baseline_integrity"]
    assert yaml_block.verify(r) == "ok"


def _variants(text: str, doc: dict):
    """Truncated, damaged and foreign-version baselines (name, text)."""
    out = [(f"truncated at {f:.0%}", text[:int(len(text) * f)])
           for f in (0.02, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99)]
    out += [("empty", ""), ("a list", "- 1\n- 2\n"), ("binary", "\x00\x01\x02layout"),
            ("bad yaml", "layout: [\n")]

    def edit(name, fn):
        d = yaml.safe_load(text)
        fn(d)
        out.append((name, yaml.safe_dump(d, sort_keys=False)))

    ch = "gyro_x"
    edit("another version", lambda d: d.__setitem__("layout", "noisecal.static/3"))
    edit("a re-check block", lambda d: d.__setitem__("layout", "noisecal.recheck/1"))
    edit("no layout", lambda d: d.pop("layout"))
    edit("no channels", lambda d: d.pop("channels"))
    edit("channels a list", lambda d: d.__setitem__("channels", [1, 2]))
    edit("no provenance", lambda d: d.pop("provenance"))
    edit("no allan points", lambda d: d["channels"][ch].pop("allan_points"))
    edit("no white noise", lambda d: d["channels"][ch].pop("white_noise"))
    edit("value as text", lambda d: d["channels"][ch]["white_noise"].__setitem__("value", "x"))
    edit("ci95 short", lambda d: d["channels"][ch]["white_noise"].__setitem__("ci95", [1]))
    edit("value outside ci95",
         lambda d: d["channels"][ch]["white_noise"].__setitem__("value", 1e9))
    edit("zero deviation", lambda d: d["channels"][ch]["allan_points"].__setitem__(
        "deviation", [0.0] * len(d["channels"][ch]["allan_points"]["deviation"])))
    edit("edf short", lambda d: d["channels"][ch]["allan_points"]["edf"].pop())
    edit("zero edf", lambda d: d["channels"][ch]["allan_points"]["edf"].__setitem__(0, 0))
    edit("zero duration", lambda d: d["recording"].__setitem__("duration_s", 0))
    edit("dt text", lambda d: d["filter"].__setitem__("dt", "fast"))
    edit("settings a list", lambda d: d["provenance"].__setitem__("settings", [1]))
    edit("seed text", lambda d: d["provenance"].__setitem__("seed", "abc"))
    edit("term a number", lambda d: d["channels"][ch].__setitem__("rate_ramp", 3))
    return out, edit


def test_damaged_baselines_one_line_exit_two(static_base, tmp_path, run_cli):
    """Every damaged, truncated or foreign-version baseline (30 variants) gives one line
    and exit 2, never a traceback: as found (the checksum fails first), with
    --accept-edited (the content check), and with a checksum re-stamped over the
    damage (the content check behind a valid checksum). Common practice, no source."""
    base, new = static_base
    text = base.read_text()
    variants, _ = _variants(text, yaml.safe_load(text))
    assert len(variants) >= 30
    for name, body in variants:
        path = tmp_path / "damaged.yaml"
        path.write_text(body, encoding="utf-8")
        # Cut at 99 % only the checksum line is lost: with --accept-edited that block
        # is whole and is (rightly) used.
        for extra in ([], ["--accept-edited"])[:1 if name == "truncated at 99%" else 2]:
            status, out, err = run_cli("recheck", path, new, *extra)
            assert status == 2, (name, extra, out, err)
            _one_line_error(status, err)
        doc = yaml.safe_load(body) if not name.startswith(("truncated", "binary", "bad")) \
            else None
        if isinstance(doc, dict):
            doc.pop("checksum", None)
            path.write_text(yaml_block.render(doc), encoding="utf-8")
            status, out, err = run_cli("recheck", path, new)
            assert status == 2, (name, "re-stamped", out, err)
            _one_line_error(status, err)


def test_other_version_names_the_version(static_base, tmp_path, run_cli):
    base, new = static_base
    doc = yaml.safe_load(base.read_text())
    doc["layout"] = "noisecal.static/3"
    path = tmp_path / "v2.yaml"
    path.write_text(yaml_block.render(doc))
    _one_line_error(*run_cli("recheck", path, new)[::2], "another version", "static/2")


def test_layout_1_block_is_migrated(static_base, tmp_path, run_cli):
    """A block written before the statistic was spelled out (layout noisecal.static/1,
    allan_points.kind: oadev) is still a baseline: read as layout 2 after its checksum
    is verified. The new block names the statistic in words (common practice, no source)."""
    base, new = static_base
    doc = yaml.safe_load(base.read_text())
    assert doc["layout"] == "noisecal.static/2"
    assert {e["allan_points"]["kind"] for e in doc["channels"].values()} == {
        "overlapping_allan_deviation"}
    doc["layout"] = "noisecal.static/1"
    for entry in doc["channels"].values():
        entry["allan_points"]["kind"] = "oadev"
    path = tmp_path / "v1.yaml"
    path.write_text(yaml_block.render(doc))
    status, out, err = run_cli("recheck", path, new)
    assert status in (0, 1, 3) and "re-check (static)" in out, err
    migrated = yaml_block.migrate(yaml.safe_load(path.read_text()))
    assert migrated["layout"] == "noisecal.static/2"
    assert {e["allan_points"]["kind"] for e in migrated["channels"].values()} == {
        "overlapping_allan_deviation"}


# --------------------------------------------------------------------------- paths

def _motion_pair(folder: Path):
    from tests.recheck.range_sim import write_drive, write_map

    sensor, truth = write_drive(folder, 5, name="base")
    return sensor, truth, write_map(folder)


def test_side_files_found_from_any_folder(tmp_path, run_cli, monkeypatch):
    """The reported case: a baseline made in folder A with a relative map path, re-checked
    from another folder, then with A moved whole; the map deleted is one line naming
    --map, and --map points at it."""
    a = tmp_path / "A"
    sensor, truth, mp = _motion_pair(a)
    monkeypatch.chdir(a)
    assert run_cli("motion", sensor.name, "--truth", truth.name, "--map", "map.yaml",
                   "--covariate", "beacon.B1.range", "-o", "base.yaml", "--quiet")[0] == 0
    monkeypatch.chdir(tmp_path)
    status, out, err = run_cli("recheck", "A/base.yaml", "A/base_sensor.csv", "--truth",
                               "A/base_truth.csv")
    assert status in (0, 3), out + err
    moved = tmp_path / "elsewhere" / "C"
    shutil.move(str(a), str(moved))
    status, out, err = run_cli("recheck", moved / "base.yaml", moved / "base_sensor.csv",
                               "--truth", moved / "base_truth.csv")
    assert status in (0, 3), out + err
    spare = tmp_path / "spare_map.yaml"
    shutil.move(str(moved / "map.yaml"), str(spare))
    _one_line_error(*run_cli("recheck", moved / "base.yaml", moved / "base_sensor.csv",
                             "--truth", moved / "base_truth.csv")[::2], "--map", "map")
    status, out, err = run_cli("recheck", moved / "base.yaml", moved / "base_sensor.csv",
                               "--truth", moved / "base_truth.csv", "--map", spare)
    assert status in (0, 3), out + err
    _one_line_error(*run_cli("recheck", moved / "base.yaml", moved / "base_sensor.csv",
                             "--truth", moved / "base_truth.csv", "--map",
                             tmp_path / "nope.yaml")[::2], "--map", "no such file")


def test_render_stores_side_files_relative_to_the_block(tmp_path):
    """render(out=...) writes side files relative to the block's folder, and the
    re-check resolves such a path against the baseline's folder, not the working one."""
    from noisecal.jobs.recheck import side_file

    (tmp_path / "A" / "cfg").mkdir(parents=True)
    (tmp_path / "A" / "cfg" / "map.yaml").write_text("measures: {}\n")
    sections = {"layout": "noisecal.motion/1",
                "provenance": {"map": str(tmp_path / "A" / "cfg" / "map.yaml")}}
    doc = yaml.safe_load(yaml_block.render(sections, out=tmp_path / "A" / "base.yaml"))
    assert doc["provenance"]["map"] == "cfg/map.yaml" and yaml_block.verify(doc) == "ok"
    (tmp_path / "A" / "base.yaml").write_text("x")
    found = side_file(doc, "map", str(tmp_path / "A" / "base.yaml"))
    assert Path(found) == tmp_path / "A" / "cfg" / "map.yaml"


# --------------------------------------------------------------------------- settings

def test_static_settings_round_trip(tmp_path, run_cli):
    """channels (a subset, reordered), dt, replicates, seed and repair survive: the
    re-check's new block was made with each of the baseline's."""
    t = np.arange(2 ** 12) * 0.1
    rng = np.random.default_rng(3)
    rows = np.column_stack([t, rng.normal(0, 1e-3, t.size), rng.normal(0, 2e-3, t.size),
                            rng.normal(0, 3e-3, t.size)])
    rows[[100, 101]] = rows[[101, 100]]  # one pair out of order: needs --repair sort
    header = ["time [s]", "gx [rad/s]", "gy [rad/s]", "gz [rad/s]"]
    a = write_csv(tmp_path / "a.csv", header, rows)
    b = write_csv(tmp_path / "b.csv", header, rows[:, [0, 1, 3, 2]] * [1, 1, 1, 1])
    base = tmp_path / "base.yaml"
    assert run_cli("static", a, "-o", base, "--channels", "gz,gx", "--dt", 0.5, "--reps", 23,
                   "--seed", 7, "--repair", "sort", "--quiet")[0] == 0
    res = recheck(str(base), str(b), use_cache=False)
    b_prov = yaml.safe_load(base.read_text())["provenance"]
    n_prov = res.new_sections["provenance"]
    assert list(res.new_sections["channels"]) == ["gz", "gx"]
    assert res.new_sections["filter"]["dt"] == 0.5
    assert n_prov["bootstrap_replicates"] == 23 and n_prov["seed"] == 7
    assert n_prov["settings"] == b_prov["settings"] == {"channels": ["gz", "gx"], "dt": 0.5,
                                                       "repair": "sort"}


def test_motion_settings_round_trip(tmp_path, run_cli):
    """covariate (given only on the command line), gate, max offset, seed and map."""
    sensor, truth, mp = _motion_pair(tmp_path)
    base = tmp_path / "base.yaml"
    assert run_cli("motion", sensor, "--truth", truth, "--map", mp, "--covariate",
                   "beacon.B1.range", "--gate", 0.99, "--max-offset", 0.4, "--seed", 3,
                   "-o", base, "--quiet")[0] == 0
    res = recheck(str(base), str(sensor), str(truth), use_cache=False)
    b, n = yaml.safe_load(base.read_text()), res.new_sections
    assert n["provenance"]["settings"] == b["provenance"]["settings"] == {
        "covariate": "beacon.B1.range", "gate": 0.99, "max_offset_s": 0.4, "seed": 3}
    assert n["measurement"]["gate"]["probability"] == 0.99
    assert n["alignment"]["max_offset_s"] == 0.4
    assert "variance_law" in n["measurement"]["channels"]["range"]
    assert Path(n["provenance"]["map"]) == mp.resolve()


def test_odometry_and_targets_settings_round_trip(tmp_path, run_cli):
    """Odometry: config and max offset. Targets: ground method (dlt), gate, seed,
    camera and survey."""
    o = tmp_path / "o.yaml"
    assert run_cli("motion", REC / "encoder_ticks.csv", "--truth", REC / "encoder_truth.csv",
                   "--odometry", REC / "encoder_config.yaml", "--max-offset", 0.7, "-o", o,
                   "--quiet")[0] == 0
    res = recheck(str(o), str(REC / "encoder_ticks.csv"), str(REC / "encoder_truth.csv"),
                  use_cache=False)
    assert res.new_sections["alignment"]["max_offset_s"] == 0.7
    assert res.new_sections["provenance"]["settings"] == {"max_offset_s": 0.7}
    c = tmp_path / "c.yaml"
    status, out, err = run_cli("targets", REC / "yard_detections.csv", "--survey",
                               REC / "yard_survey.csv", "--camera", REC / "yard_camera.yaml",
                               "--ground", "dlt", "--gate", 0.99, "--seed", 4, "-o", c)
    assert status == 0, err
    res = recheck(str(c), str(REC / "yard_detections.csv"), use_cache=False)
    n, b = res.new_sections, yaml.safe_load(c.read_text())
    assert n["provenance"]["settings"] == b["provenance"]["settings"] == {
        "ground": "dlt", "gate": 0.99, "seed": 4, "poses": False}
    assert n["camera"]["ground"]["method"] == b["camera"]["ground"]["method"]
    assert n["camera"]["gate"]["probability"] == 0.99


# --------------------------------------------------------------------------- gating

def test_factor_is_never_one():
    """The more-data factor is rounded up and above 1: 1.0001 and 1.04 read 1.1×."""
    assert factor_text(1.0001) == "1.1×" and factor_text(1.04) == "1.1×"
    assert factor_text(2.0) == "2×" and factor_text(44.2) == "45×"


def test_same_length_bounded_term_asks_for_more_than_the_same_length():
    """The reported case: a term resolved in a 1 h baseline and only bounded in a 1 h
    re-check. The figure is at least one more octave (2×), never 1×; where the
    baseline's own interval is too wide, the baseline is named as the limit."""
    row = {"channel": "g", "name": "bias_random_walk", "unit": "", "baseline": 1e-5,
           "new": None, "baseline_bound": None, "new_bound": 2e-5, "ratio": None, "test": "",
           "p_value": None, "se_log": None, "se_base": 0.05, "se_new": None,
           "higher_is_worse": True, "length_ratio": 1.0}
    (c,), overall, _ = compare.verdicts([row])
    assert c.verdict == "inconclusive" and c.longer >= 2 and c.limited_by == "new"
    (c,), _, _ = compare.verdicts([{**row, "se_base": 0.5}])
    assert c.limited_by == "baseline" and c.longer > 1


def test_verdict_on_decidable_and_named(tmp_path, run_cli):
    """A re-check too short for the baseline's random walk: exit 3 on everything; exit 0
    on what it can decide, listing the random walk with how much more data of which
    kind it needs; exit 0 gated on the white noise alone, 3 on the random
    walk alone; an unknown name is one line, exit 2; white noise ×1.5 is exit 1 whatever
    the gate."""
    base = tmp_path / "base.yaml"
    q = np.array([0, 1e-6, 0, 4e-8, 0])
    y = simulate_rate(q, 0.1, 2 ** 16, np.random.default_rng(5))
    assert run_cli("static", rate_csv(tmp_path / "long.csv", y, 0.1), "-o", base, "--reps", 40,
                   "--quiet")[0] == 0
    short = rate_csv(tmp_path / "short.csv",
                     simulate_rate(q, 0.1, 1500, np.random.default_rng(6)), 0.1)
    assert run_cli("recheck", base, short)[0] == 3
    status, out, err = run_cli("recheck", base, short, "--verdict-on", "decidable", "-o",
                               tmp_path / "r.yaml")
    assert status == 0 and "left undecided:\n  gyro_x.bias_random_walk: " in out, out
    und = yaml.safe_load((tmp_path / "r.yaml").read_text())["undecided"]
    assert [u["parameter"] for u in und] == ["gyro_x.bias_random_walk"]
    # Either the new recording limits it (then: as long as the baseline), or the
    # baseline's own interval is too wide for 25 % at α = 1 % (then: both longer).
    if und[0]["limited_by"] == "new":
        assert und[0]["more_data_factor"] == pytest.approx(2 ** 16 / 1500, rel=0.05)
        assert "record" in und[0]["needs"]
    else:
        assert und[0]["more_data_factor"] > 1 and "re-characterise" in und[0]["needs"]
    assert not re.search(r"(?<![\d.])1×", out), out
    assert run_cli("recheck", base, short, "--verdict-on", "gyro_x.white_noise")[0] == 0
    assert run_cli("recheck", base, short, "--verdict-on", "gyro_x.bias_random_walk")[0] == 3
    _one_line_error(*run_cli("recheck", base, short, "--verdict-on", "gyro_x.nope")[::2],
                    "gyro_x.nope", "gyro_x.white_noise")
    worse = rate_csv(tmp_path / "worse.csv",
                     simulate_rate(q * [1, 2.25, 1, 1, 1], 0.1, 1500, np.random.default_rng(7)),
                     0.1)
    for gate in ("all", "decidable", "gyro_x.white_noise"):
        assert run_cli("recheck", base, worse, "--verdict-on", gate)[0] == 1
