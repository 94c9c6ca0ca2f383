"""Model files: what is read from blocks, and bad files as one line with exit status 2."""

from __future__ import annotations

import numpy as np
import pytest
import yaml

from noisecal.model.spec import read_model

from .blocks import est, motion_block, static_block

GOOD = """\
states: [angle, bias]
dt: 0.01
F: [[0, -1], [0, 0]]
noise:
  - G: [1, 0]
    from: {file: imu.yaml, channel: gyro_x, term: white_noise}
  - G: [0, 1]
    density: 1.0e-6
measurements:
  - name: pos
    H: [1, 0]
    variance: 4.0e-4
"""


@pytest.fixture
def folder(tmp_path):
    static_block(tmp_path / "imu.yaml", {"gyro_x": {"white_noise": est(4e-5),
                                                    "bias_random_walk": est(1e-6),
                                                    "bias_instability": est(2e-5)}})
    motion_block(tmp_path / "drive.yaml", {"lateral_offset": est(0.013)})
    return tmp_path


def test_minimal_form_is_accepted(folder, run_cli):
    """The minimal form (states, dt, F, noise with from and density, a measurement
    with variance) gives q = N^2 for the block's white noise and q = density^2 for the
    number (the spectral-density convention; common practice, no source)."""
    (folder / "m.yaml").write_text(GOOD)
    model = read_model(folder / "m.yaml")
    assert model.sources[0].amplitude.value == 4e-5
    status, out, err = run_cli("filter", folder / "m.yaml", "-o", folder / "q.yaml")
    assert status == 0, err
    doc = yaml.safe_load((folder / "q.yaml").read_text())
    assert doc["filter"]["continuous"]["Qc_diagonal"] == pytest.approx([1.6e-9, 1e-12])
    assert doc["provenance"]["inputs"][0]["checksum"] == "ok"
    assert "density times dt" in doc["filter"]["convention"]


def test_measurement_from_motion_and_static_blocks(folder):
    """A motion block's sigma gives R = sigma^2; a static block's white noise gives
    R = N^2/dt (one sample averages the white noise over dt; references.md, common
    practice, no source)."""
    (folder / "m.yaml").write_text(GOOD.replace(
        "    variance: 4.0e-4\n",
        "    from: {file: drive.yaml, channel: lateral_offset}\n"
        "  - name: rate\n    H: [0, 1]\n"
        "    from: {file: imu.yaml, channel: gyro_x, term: white_noise}\n"))
    from noisecal.jobs.filter import discretise

    res = discretise(read_model(folder / "m.yaml"), draws=300, seed=1)
    R = res.matrices["R"]
    assert R[0, 0] == pytest.approx(0.013 ** 2)
    assert R[1, 1] == pytest.approx(4e-5 ** 2 / 0.01)
    assert np.all(res.matrices["R_low"].diagonal() < R.diagonal())


def test_discrete_form(folder):
    """Phi given: Q = g g^T q dt for a density (white noise integrated over the step;
    common practice, no source) or the variance given."""
    (folder / "m.yaml").write_text(
        "states: [a, b]\ndt: 0.5\nPhi: [[1, 0.5], [0, 1]]\nnoise:\n"
        "  - {G: [0, 1], density: 0.2}\n  - {G: [1, 0], variance: 0.01}\n"
        "measurements:\n  - {name: a, H: [1, 0], variance: 1.0}\n")
    from noisecal.jobs.filter import discretise

    Q = discretise(read_model(folder / "m.yaml"), draws=200).matrices["Q"]
    assert np.allclose(Q, [[0.01, 0], [0, 0.04 * 0.5]])


BAD = [
    ("states: [a]\n", "dt is missing"),
    (GOOD.replace("F: [[0, -1], [0, 0]]", "F: [[0, -1]]"), "F: give 2 rows of 2"),
    (GOOD.replace("F: [[0, -1], [0, 0]]", "F: [[0, -1], [0, 0]]\nPhi: [[1, 0], [0, 1]]"),
     "exactly one of F"),
    (GOOD.replace("dt: 0.01", "dt: -1"), "dt: -1 must be above 0"),
    (GOOD.replace("dt: 0.01", "dt: fast"), "not a finite number"),
    (GOOD.replace("G: [1, 0]", "G: [1, 0, 0]"), "list of 2 numbers"),
    (GOOD.replace("G: [1, 0]", "G: [0, 0]"), "all zeros"),
    (GOOD + "colour: blue\n", "unknown key(s) colour"),
    (GOOD.replace("imu.yaml", "nowhere.yaml"), "no such noisecal block"),
    (GOOD.replace("gyro_x", "gyro_q"), "no static channel 'gyro_q'"),
    (GOOD.replace("white_noise}", "bias_instability}"), "not a white-noise source"),
    (GOOD.replace("    density: 1.0e-6\n", ""), "exactly one of from, density"),
    (GOOD.replace("    density: 1.0e-6\n", "    variance: 1.0e-6\n"), "discrete per-step"),
    (GOOD.replace("    H: [1, 0]\n", ""), "H is missing"),
    (GOOD + "filter_used: {Q: [[1, 0], [0, -1]], R: [[1]]}\n", "not positive semidefinite"),
    (GOOD + "filter_used: {Q: [[1, 2], [0, 1]], R: [[1]]}\n", "not symmetric"),
    ("states: [a, b\n", "not valid YAML"),
    ("- just a list\n", "a model file is a mapping"),
    (GOOD.replace("F: [[0, -1], [0, 0]]", "python: nothere.py\noperating_point: {x: [0, 0]}")
     .replace("  - G: [1, 0]\n", "  - ").replace("  - G: [0, 1]\n", "  - ")
     .replace("    H: [1, 0]\n", ""), "no such Python model"),
]


@pytest.mark.parametrize("text, message", BAD, ids=[m for _, m in BAD])
def test_bad_model_file_is_one_line(folder, run_cli, text, message):
    """Bad input: one line naming the file and the entry, exit status 2, nothing
    written (project rule; common practice, no source)."""
    (folder / "m.yaml").write_text(text)
    out = folder / "q.yaml"
    status, stdout, err = run_cli("filter", folder / "m.yaml", "-o", out)
    assert status == 2
    assert err.count("\n") == 1 and "Traceback" not in err
    assert message in err and "m.yaml" in err
    assert not out.exists()


def test_gauss_markov_state_needs_zero_in_F(folder, run_cli):
    """A Gauss-Markov source sets F[i][i] = -1/T itself; a non-zero entry there is refused."""
    static_block(folder / "gm.yaml", {"g": {"white_noise": est(1e-4), "gauss_markov": {
        "sigma": est(1e-4), "correlation_time": est(10.0, unit="s")}}})
    (folder / "m.yaml").write_text(
        "states: [a, b]\ndt: 0.1\nF: [[0, -1], [0, -0.5]]\nnoise:\n"
        "  - G: [0, 1]\n    from: {file: gm.yaml, channel: g, term: gauss_markov}\n"
        "measurements:\n  - {name: a, H: [1, 0], variance: 1.0}\n")
    status, _, err = run_cli("filter", folder / "m.yaml", "-o", folder / "q.yaml")
    assert status == 2 and "write 0 there" in err


@pytest.mark.parametrize("states, g, message", [
    ("[{name: p, unit: m}, {name: v, unit: m/s}]", "[0, 1]", None),
    ("[{name: p, unit: m}, {name: v, unit: m/s}]", "[1, 0]", "not in [(m)^2] of state p"),
    ("[{name: p, unit: m}, {name: v, unit: deg/s}]", "[0, 1]", "is not SI"),
])
def test_units_catch_a_source_on_the_wrong_state(tmp_path, run_cli, states, g, message):
    """An accelerometer's white noise N [m/s^2/sqrt(Hz)] driving the velocity gives
    q*dt in (m/s)^2; put on the position (a wrong G, the kind of slip that writes
    N^2/dt for N^2*dt) it does not match m^2 and is refused (dimensional analysis,
    pint; common practice, no source). State units must be SI."""
    static_block(tmp_path / "imu.yaml", {"accel_x": {
        "white_noise": est(5e-4, unit="m/s**2/Hz^0.5")}})
    (tmp_path / "m.yaml").write_text(
        f"states: {states}\ndt: 0.02\nF: [[0, 1], [0, 0]]\nnoise:\n"
        f"  - G: {g}\n    from: {{file: imu.yaml, channel: accel_x, term: white_noise}}\n"
        "measurements:\n  - {name: p, H: [1, 0], variance: 1.0e-4, unit: m}\n")
    status, _, err = run_cli("filter", tmp_path / "m.yaml", "-o", tmp_path / "q.yaml")
    if message is None:
        assert status == 0, err
    else:
        assert status == 2 and message in err and err.count("\n") == 1


def test_discrete_gauss_markov(tmp_path):
    """Discrete form with a Gauss-Markov source: Phi[i][i] = e^(-dt/T) and Q[i][i] =
    sigma^2 (1 - e^(-2dt/T)) (Brown & Hwang; from memory)."""
    static_block(tmp_path / "gm.yaml", {"g": {"white_noise": est(1e-4), "gauss_markov": {
        "sigma": est(2e-3), "correlation_time": est(8.0, unit="s")}}})
    (tmp_path / "m.yaml").write_text(
        "states: [a, b]\ndt: 0.5\nPhi: [[1, -0.5], [0, 0]]\nnoise:\n"
        "  - G: [0, 1]\n    from: {file: gm.yaml, channel: g, term: gauss_markov}\n"
        "measurements:\n  - {name: a, H: [1, 0], variance: 1.0}\n")
    from noisecal.jobs.filter import discretise

    mx = discretise(read_model(tmp_path / "m.yaml"), draws=200).matrices
    assert mx["Phi"][1, 1] == pytest.approx(np.exp(-0.5 / 8.0), rel=1e-12)
    assert mx["Q"][1, 1] == pytest.approx(4e-6 * (1 - np.exp(-1.0 / 8.0)), rel=1e-12)
