"""The Python API: the calls an acceptance check makes, errors in Python terms,
doctests, and a written block that reads back to the same Estimates."""

from __future__ import annotations

import doctest
import math

import numpy as np
import pytest
import yaml
from hypothesis import given, settings, strategies as st

import noisecal
from noisecal.export import yaml_block
from noisecal.fit.simulate import simulate_rate
from noisecal.types import Estimate


@pytest.fixture(scope="module")
def gyro():
    y = simulate_rate(np.array([0, 1e-8, 0, 0, 0]), 0.01, 2 ** 14, np.random.default_rng(7))
    return y


def test_documented_example(gyro, tmp_path):
    """The documented example, as written: read arrays, run static, summary, to_dict,
    write, and an interval at another level (a narrower 90 % interval inside the 95 %
    one: common practice, no source)."""
    rec = noisecal.read({"gyro_x": gyro}, period=0.01, units={"gyro_x": "rad/s"})
    res = noisecal.static(rec, reps=40, seed=3)
    text = res.summary()
    assert "gyro_x" in text and "white_noise" in text
    wn = res.to_dict()["channels"]["gyro_x"]["white_noise"]
    assert wn["unit"] == "rad/s/Hz^0.5" and wn["ci95"][0] < wn["value"] < wn["ci95"][1]
    out = res.write(tmp_path / "out.yaml")
    assert yaml.safe_load(out.read_text())["layout"].startswith("noisecal.static/")
    ci90 = res.confidence_interval("gyro_x", "white_noise", level=0.90)
    assert isinstance(ci90, Estimate) and ci90.level == 0.90
    e = res.estimate("gyro_x", "white_noise")
    assert e.lower < ci90.lower < ci90.value == e.value < ci90.upper < e.upper
    # N = sigma·sqrt(period) = 1e-4 (IEEE Std 952 Annex C).
    assert e.lower < 1e-4 < e.upper


def test_a_file_and_arrays_give_the_same_numbers(gyro, tmp_path):
    """The same samples from a CSV and from arrays: the same terms (the deviations are
    equal to 1e-9, so are the fits)."""
    path = tmp_path / "g.csv"
    with open(path, "w") as fh:
        fh.write("time [s],gyro_x [deg/s]\n")
        np.savetxt(fh, np.column_stack([np.arange(gyro.size) * 0.01, np.degrees(gyro)]),
                   delimiter=",", fmt="%.17g")
    a = noisecal.static(noisecal.read(path, cache=False), reps=40, seed=3)
    b = noisecal.static(noisecal.read({"gyro_x": np.degrees(gyro)}, period=0.01,
                                      units={"gyro_x": "deg/s"}), reps=40, seed=3)
    ea, eb = a.estimate("gyro_x", "white_noise"), b.estimate("gyro_x", "white_noise")
    assert ea.value == pytest.approx(eb.value, rel=1e-6)


@pytest.mark.parametrize("kwargs, text", [
    ({"reps": 5}, "reps=5: at least 20"),
    ({"reps": 40, "seed": -1}, "seed=-1"),
    ({"reps": 40, "dt": 0}, "dt=0"),
    ({"reps": 40, "channels": ["nope"]}, "channels=['nope']: nope not in"),
    ({"reps": "40"}, "reps='40'"),
])
def test_options_are_checked_in_python_terms(gyro, kwargs, text):
    """A Python caller is told the parameter, not a command-line option."""
    rec = noisecal.read({"gyro_x": gyro}, period=0.01, units={"gyro_x": "rad/s"})
    with pytest.raises(ValueError) as info:
        noisecal.static(rec, **kwargs)
    assert str(info.value).startswith(text) and "--" not in str(info.value)


def test_options_are_keyword_only(gyro):
    rec = noisecal.read({"gyro_x": gyro}, period=0.01, units={"gyro_x": "rad/s"})
    with pytest.raises(TypeError):
        noisecal.static(rec, None, None, 40)  # noqa: positional options are refused


@pytest.mark.parametrize("call, text", [
    (lambda: noisecal.read({"a": [1.0, 2.0, 3.0]}, period=0.1), "units="),
    (lambda: noisecal.read({"a": [1.0, 2.0, 3.0]}, units={"a": "rad/s"}), "period=None"),
    (lambda: noisecal.read({"a": [1.0, np.nan, 3.0]}, period=0.1, units={"a": "m"}),
     "not finite"),
    (lambda: noisecal.read({"a": [1.0, 2.0, 3.0], "b": [1.0]}, period=0.1,
                           units={"a": "m", "b": "m"}), "has 1 samples"),
    (lambda: noisecal.read({"a": [1.0, 2.0, 3.0]}, time=[0, 2, 1], units={"a": "m"}),
     "increase"),
])
def test_read_arrays_refuses_bad_input(call, text):
    with pytest.raises(ValueError, match=text):
        call()


def test_cli_says_the_option(run_cli, tmp_path, gyro):
    """The command line turns a parameter error into its option, exit status 2."""
    path = tmp_path / "g.csv"
    with open(path, "w") as fh:
        fh.write("time [s],gyro_x [rad/s]\n")
        np.savetxt(fh, np.column_stack([np.arange(gyro.size) * 0.01, gyro]), delimiter=",")
    status, _, err = run_cli("static", path, "-o", tmp_path / "o.yaml", "--reps", "5")
    assert status == 2 and "--reps 5: at least 20" in err and err.count("\n") == 1
    assert not (tmp_path / "o.yaml").exists()


def test_doctests():
    """The examples in the API's docstrings run as written."""
    import noisecal.api
    import noisecal.jobs.static

    for mod in (noisecal.api, noisecal.jobs.static):
        failed, tried = doctest.testmod(mod, optionflags=doctest.ELLIPSIS)
        assert tried > 0 and failed == 0, mod.__name__


finite = st.floats(min_value=1e-300, max_value=1e300, allow_nan=False, allow_infinity=False)


# Methods are the project's own sentences: printable text (YAML folds line breaks,
# NEL and the line and paragraph separators included, into spaces).
printable = st.text(st.characters(blacklist_categories=("Cc", "Cs", "Zl", "Zp")),
                    max_size=30)


@settings(max_examples=200, deadline=None, derandomize=True)
@given(st.lists(finite, min_size=3, max_size=3), st.booleans(), st.sampled_from(
    ["rad/s/Hz^0.5", "m/s**2", "1"]), printable, st.booleans())
def test_estimate_round_trip(values, resolved, unit, method, with_tau):
    """An Estimate written into a block and read back is the same Estimate (every float,
    the unit, the method, the tau range)."""
    lo, mid, hi = sorted(values)
    tau = (0.1, 20.0) if with_tau else None
    e = (Estimate(mid, lo, hi, unit, method, 0.95, tau) if resolved
         else Estimate.bound(hi, unit, method, 0.95, tau))
    text = yaml_block.render({"layout": "x", "e": yaml_block.estimate(e)})
    back = yaml_block.estimate_from(yaml.safe_load(text)["e"])
    assert back == e


def test_written_block_reads_back_to_the_parameters(gyro, tmp_path):
    """Every parameter of a written static block reads back equal to the result's own."""
    rec = noisecal.read({"gyro_x": gyro}, period=0.01, units={"gyro_x": "rad/s"})
    res = noisecal.static(rec, reps=40, seed=3)
    doc = yaml.safe_load(res.write(tmp_path / "b.yaml").read_text())
    for p in res.parameters():
        back = yaml_block.estimate_from(doc["channels"][p.channel][p.name])
        assert back == p.estimate, p
        assert not math.isnan(back.upper)


def test_recheck_from_python_and_side_files_relative(tmp_path):
    """A Python re-check of a static block against the same recording: consistent, exit
    0; the block written by write() carries a checksum the re-check verifies, and a
    block moved with its recording to another folder still re-checks."""
    import shutil

    y = simulate_rate(np.array([0, 1e-8, 0, 0, 0]), 0.01, 2 ** 14, np.random.default_rng(9))
    csv = tmp_path / "a" / "g.csv"
    csv.parent.mkdir()
    with open(csv, "w") as fh:
        fh.write("time [s],gyro_x [rad/s]\n")
        np.savetxt(fh, np.column_stack([np.arange(y.size) * 0.01, y]), delimiter=",")
    res = noisecal.static(noisecal.read(csv, cache=False), reps=40, seed=3)
    block = res.write(tmp_path / "a" / "base.yaml")
    check = noisecal.recheck(block, csv, verdict_on="decidable")
    assert check.verdict == "consistent" and check.exit_status == 0
    moved = tmp_path / "elsewhere"
    shutil.copytree(tmp_path / "a", moved)
    again = noisecal.recheck(moved / "base.yaml", moved / "g.csv", verdict_on="decidable")
    assert again.verdict == "consistent"
    with pytest.raises(ValueError, match="tolerance=1.0"):
        noisecal.recheck(block, csv, tolerance=1.0)


def test_a_number_like_name_survives_the_block(tmp_path):
    """A channel named like a YAML 1.2 number ("1e3") is written quoted and re-checks:
    the block's checksum and the reader see the same text (YAML 1.2 core schema)."""
    y = simulate_rate(np.array([0, 1e-8, 0, 0, 0]), 0.01, 2 ** 13, np.random.default_rng(2))
    csv = tmp_path / "g.csv"
    with open(csv, "w") as fh:
        fh.write("time [s],1e3 [rad/s]\n")
        np.savetxt(fh, np.column_stack([np.arange(y.size) * 0.01, y]), delimiter=",")
    res = noisecal.static(noisecal.read(csv, cache=False), reps=40, seed=3)
    block = res.write(tmp_path / "b.yaml")
    assert "'1e3':" in block.read_text() or '"1e3":' in block.read_text()
    assert noisecal.recheck(block, csv, verdict_on="decidable").exit_status == 0


def test_the_job_function_checks_its_options_too(gyro):
    """characterise, which the re-check calls with a baseline's settings, refuses a
    replicate count or time step out of range with the same one-line ParameterError."""
    from noisecal.jobs.static import characterise

    rec = noisecal.read({"gyro_x": gyro}, period=0.01, units={"gyro_x": "rad/s"})
    with pytest.raises(ValueError, match="reps=5: at least 20"):
        characterise(rec, reps=5)
    with pytest.raises(ValueError, match="dt=-1"):
        characterise(rec, dt=-1, reps=40)
