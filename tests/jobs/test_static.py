"""The static job end to end, through the CLI, on a simulated recording."""

from __future__ import annotations

import numpy as np
import pytest
import yaml

from noisecal.fit.simulate import simulate_rate
from tests.conftest import sha

DEG = np.pi / 180
TRUE = {  # SI; gyro in rad/s, accel in m/s²
    "gyro_a": {"white_noise": 2e-4, "bias_random_walk": 4e-5},
    "acc_b": {"white_noise": 1e-3, "bias_instability": 4e-4},
}


@pytest.fixture(scope="module")
def bench(tmp_path_factory):
    """A 4.5 h-equivalent bench log at 10 Hz with one dropout, written as CSV."""
    folder = tmp_path_factory.mktemp("bench")
    period, n = 0.1, 30000
    rng = np.random.default_rng(42)
    gyro = simulate_rate(np.array([0, 2e-4 ** 2, 0, 4e-5 ** 2, 0]), period, n, rng) / DEG + 0.02
    acc = simulate_rate(np.array([0, 1e-3 ** 2, 4e-4 ** 2, 0, 0]), period, n, rng) / 9.80665 + 1.0
    t = np.arange(n) * period
    keep = np.ones(n, bool)
    keep[12000:12040] = False
    path = folder / "bench.csv"
    with open(path, "w") as fh:
        fh.write("time [s],gyro_a [deg/s],acc_b [g]\n")
        np.savetxt(fh, np.column_stack([t, gyro, acc])[keep], delimiter=",", fmt="%.10g")
    return path


@pytest.fixture(scope="module")
def result(bench, tmp_path_factory):
    from noisecal.cli import main

    out = tmp_path_factory.mktemp("out") / "bench.yaml"
    digest = sha(bench)
    status = main(["static", str(bench), "-o", str(out), "--dt", "0.02", "--quiet"])
    assert status == 0
    assert sha(bench) == digest, "the input was modified"
    return out, yaml.safe_load(out.read_text())


def test_required_keys_and_gap(result):
    _, doc = result
    assert doc["recording"]["gaps"] == [{"start_s": pytest.approx(1199.9),
                                         "length_s": pytest.approx(4.0), "missing_samples": 40}]
    for name in TRUE:
        for term in ("white_noise", "bias_instability", "bias_random_walk"):
            entry = doc["channels"][name][term]
            assert "unit" in entry
            assert ("value" in entry and len(entry["ci95"]) == 2) or "upper_bound" in entry
    f = doc["filter"]
    assert f["dt"] == 0.02 and f["order"] == ["gyro_a", "acc_b"]
    for key in ("R", "Q_input", "Q_bias"):
        assert np.asarray(f[key]).shape == (2, 2)


def test_terms_recovered_and_absent_terms_bounded(result):
    """Simulated truth recovered; terms that were not simulated are bounds.

    One run holds four true terms, so a plain 95 % check would fail one run in
    six by design; here each truth must lie within the interval stretched 1.5×
    about the estimate on a log scale (about a 3-sigma check). Coverage itself
    is measured over seeded runs in tests/test_coverage.py."""
    _, doc = result
    for name, truths in TRUE.items():
        for term, truth in truths.items():
            e = doc["channels"][name][term]
            assert "value" in e, (name, term, e)
            lo, hi = np.log(e["ci95"]) - np.log(e["value"])
            assert lo < 0 < hi, e
            assert 1.5 * lo <= np.log(truth / e["value"]) <= 1.5 * hi, (name, term, e)
    assert "upper_bound" in doc["channels"]["gyro_a"]["bias_instability"]
    assert "upper_bound" in doc["channels"]["acc_b"]["bias_random_walk"]
    assert "upper_bound" in doc["channels"]["acc_b"]["rate_ramp"]


def test_filter_matrices_follow_terms(result):
    """R = N²/dt, Q_input = N²·dt, Q_bias = K²·dt, or the bound where K is unresolved."""
    _, doc = result
    f, ch = doc["filter"], doc["channels"]
    dt = f["dt"]
    n_a = ch["gyro_a"]["white_noise"]["value"]
    k_a = ch["gyro_a"]["bias_random_walk"]["value"]
    k_b = ch["acc_b"]["bias_random_walk"]["upper_bound"]
    assert f["R"][0][0] == pytest.approx(n_a ** 2 / dt, rel=1e-5)
    assert f["Q_input"][0][0] == pytest.approx(n_a ** 2 * dt, rel=1e-5)
    assert f["Q_bias"][0][0] == pytest.approx(k_a ** 2 * dt, rel=1e-5)
    assert f["Q_bias"][1][1] == pytest.approx(k_b ** 2 * dt, rel=1e-5)
    assert f["Q_bias_from_bound"] == [False, True]
    assert f["R_ci95"]["low"][0][0] < f["R"][0][0] < f["R_ci95"]["high"][0][0]


def test_psd_check_agrees_with_allan(result):
    """Welch PSD white level (one-sided 2N², IEEE Std 952 two-sided N²) agrees
    with the Allan white noise within 5 %."""
    _, doc = result
    for name in TRUE:
        assert doc["channels"][name]["psd_check"]["ratio_to_allan"] == pytest.approx(1.0, abs=0.05)


def test_provenance_and_plot(result, bench):
    out, doc = result
    p = doc["provenance"]
    assert p["input"]["sha256"] == sha(bench)
    assert p["tool"].startswith("noisecal ") and p["seed"] == 1
    assert "static" in p["command"] and p["date"]
    assert doc["layout"].startswith("noisecal.static/")
    png = out.with_suffix(".png")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not list(out.parent.glob(".*.part")), "temporary files left behind"


def test_inspect_reports_gap(run_cli, bench):
    status, out, _ = run_cli("inspect", bench)
    assert status == 0
    assert "gap at 1199.9 s" in out and "gyro_a" in out and "[deg/s] -> [rad/s]" in out


def test_model_check_selection_bandwidth_and_turn_on(result):
    """Every channel carries its model check, the selected terms, where the fit
    started and its mean with an interval. The simulated gyro was offset by 0.02 deg/s
    and the accelerometer by 1 g on a level axis: the means hold them, and the
    accelerometer's P0 bias std is taken about g (common practice, no source)."""
    _, doc = result
    for name in TRUE:
        ch = doc["channels"][name]
        mc = ch["model_check"]
        assert mc["consistent"] is True and 0 < mc["p_value"] <= 1
        assert mc["points_outside"] == len(mc["outside"]) <= mc["points_fitted"]
        assert "white_noise" in ch["model_selection"]["terms"]
        assert ch["bandwidth"]["fitted_from_tau_s"] == pytest.approx(0.1)
        mean = ch["turn_on_bias"]["mean"]
        assert mean["ci95"][0] < mean["value"] < mean["ci95"][1]
    gyro = doc["channels"]["gyro_a"]["turn_on_bias"]
    assert gyro["mean"]["ci95"][0] < 0.02 * DEG < gyro["mean"]["ci95"][1]
    assert gyro["p0_std"] >= abs(gyro["mean"]["value"])
    acc = doc["channels"]["acc_b"]["turn_on_bias"]
    assert acc["mean"]["ci95"][0] < 9.80665 < acc["mean"]["ci95"][1]
    assert acc["p0_std"] < 0.01 and "level" in acc["note"]
