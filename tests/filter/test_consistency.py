"""NIS, NEES and whiteness: bands against scipy.stats.chi2, verdicts on filterpy runs."""

from __future__ import annotations

import numpy as np
import pytest
import yaml
from scipy import stats

from noisecal.analysis.innovations import chi2_band, chi_square_test, whiteness

from . import sim
from .blocks import write_log

pytest.importorskip("filterpy")


def test_band_against_scipy_and_the_textbook_example():
    """Average of N chi-square(m) values: [chi2_{Nm}(0.025)/N, chi2_{Nm}(0.975)/N]
    (Bar-Shalom, Li & Kirubarajan 2001; references.md). For N = 50 runs, m = 2 the
    book's band is about [1.5, 2.6] (value from memory); scipy.stats.chi2 gives the
    exact ends."""
    lo, hi = chi2_band(2, 50, 0.95)
    assert lo == pytest.approx(stats.chi2.ppf(0.025, 100) / 50, rel=1e-12)
    assert hi == pytest.approx(stats.chi2.ppf(0.975, 100) / 50, rel=1e-12)
    assert lo == pytest.approx(1.5, abs=0.02) and hi == pytest.approx(2.6, abs=0.02)


def test_false_alarms_of_the_band_and_whiteness():
    """For exact chi-square(2) values and white N(0, 1) components, the mean falls
    outside its 95 % band, and the whiteness test rejects, about 5 % of the time
    (the definition of the bands; 200 seeded simulations, binomial 99.9 % range)."""
    outside = rejected = 0
    for seed in range(200):
        rng = np.random.default_rng(seed)
        e = rng.standard_normal((400, 2))
        t = chi_square_test([np.sum(e ** 2, axis=1)], 2, "NIS", 0.95)
        outside += t.verdict != "within"
        rejected += not whiteness([e], 10, 0.95).white
    lo, hi = stats.binom.ppf([0.0005, 0.9995], 200, 0.05)
    assert lo <= outside <= hi
    # Bonferroni over 2 components keeps the rate at or under 5 %.
    assert rejected <= hi


def _cli_log(tmp_path, name, nu, S, extra=None):
    return write_log(tmp_path / f"{name}.csv", ["p"], "m", nu[:, None], S[:, None, None],
                     extra)


def _nees_columns(x, xs, Ps):
    return {"x_p [m]": xs[:, 0], "x_v [m/s]": xs[:, 1], "truth_p [m]": x[:, 0],
            "truth_v [m/s]": x[:, 1], "P_p_p [m**2]": Ps[:, 0, 0],
            "P_p_v [m**2/s]": Ps[:, 0, 1], "P_v_v [m**2/s**2]": Ps[:, 1, 1]}


@pytest.mark.parametrize("q_used, r_used, verdict, words", [
    (0.5 / 30, 0.04 / 30, "above", "Q or R too small"),
    (0.5 * 30, 0.04 * 30, "below", "Q or R too large"),
])
def test_filterpy_run_with_wrong_noise(tmp_path, run_cli, q_used, r_used, verdict, words):
    """filterpy's KalmanFilter on a simulated constant-velocity target (q = 0.5 m^2/s^3,
    R = 0.04 m^2) run with Q and R both 30x too small: NIS and NEES lie above their
    bands; 30x too large: below; the direction says which, exit status 1
    (Bar-Shalom et al. 2001, §5.4)."""
    x, z = sim.truth(0.5, 0.04, 3000, np.random.default_rng(11))
    nu, S, xs, Ps = sim.run_filterpy(z, q_used, r_used)
    log = _cli_log(tmp_path, "log", nu, S, _nees_columns(x, xs, Ps))
    (tmp_path / "m.yaml").write_text(sim.model_text(q_used, r_used))
    status, out, err = run_cli("consistency", log, "--model", tmp_path / "m.yaml",
                               "-o", tmp_path / "c.yaml")
    assert status == 1, err
    doc = yaml.safe_load((tmp_path / "c.yaml").read_text())["consistency"]
    assert doc["nis"]["verdict"] == verdict and doc["nees"]["verdict"] == verdict
    assert doc["consistent"] is False
    assert words in doc["direction"]


def test_filterpy_run_with_true_noise(tmp_path, run_cli):
    """The same filter with the true Q and R: consistent. Over 20 seeded runs NIS lies
    within its 95 % band in at least 16 (binomial, p = 0.95: P(< 16) < 0.3 %) and the
    whole verdict (NIS, whiteness, NEES) holds in at least 14; one run through the
    command line gives exit status 0 and about 5 % of steps above the gate
    (Bar-Shalom et al. 2001, §5.4)."""
    from noisecal.api import consistency

    (tmp_path / "m.yaml").write_text(sim.model_text(0.5, 0.04))
    nis_ok = all_ok = 0
    for seed in range(20):
        x, z = sim.truth(0.5, 0.04, 2000, np.random.default_rng(1000 + seed))
        nu, S, xs, Ps = sim.run_filterpy(z, 0.5, 0.04)
        log = _cli_log(tmp_path, f"log{seed}", nu, S, _nees_columns(x, xs, Ps))
        res = consistency(str(log), model=tmp_path / "m.yaml")
        nis_ok += res.nis.verdict == "within"
        all_ok += res.consistent
        if seed == 0:
            status, out, err = run_cli("consistency", log, "--model", tmp_path / "m.yaml",
                                       "-o", tmp_path / "c.yaml")
            doc = yaml.safe_load((tmp_path / "c.yaml").read_text())["consistency"]
            assert status == (0 if res.consistent else 1)
            assert doc["nis"]["outside_gate_fraction"] == pytest.approx(0.05, abs=0.02)
    assert nis_ok >= 16 and all_ok >= 14, (nis_ok, all_ok)


def test_several_runs_give_the_ensemble_band(tmp_path, run_cli):
    """Several runs: the ensemble band at one step is [chi2_{N m}(0.025)/N,
    chi2_{N m}(0.975)/N] (Bar-Shalom et al. 2001), and about 5 % of steps fall outside
    it for a consistent filter (3 runs, 1000 steps: within 2.5-8 %)."""
    logs = []
    for r in range(3):
        x, z = sim.truth(0.5, 0.04, 1000, np.random.default_rng(100 + r))
        nu, S, _, _ = sim.run_filterpy(z, 0.5, 0.04)
        logs.append(_cli_log(tmp_path, f"run{r}", nu, S))
    (tmp_path / "m.yaml").write_text(sim.model_text(0.5, 0.04))
    status, out, err = run_cli("consistency", *logs, "--model", tmp_path / "m.yaml",
                               "-o", tmp_path / "c.yaml")
    assert status == 0, out + err
    ens = yaml.safe_load((tmp_path / "c.yaml").read_text())["consistency"]["nis"]["ensemble"]
    assert ens["band"] == pytest.approx([stats.chi2.ppf(0.025, 3) / 3,
                                         stats.chi2.ppf(0.975, 3) / 3], rel=1e-5)
    assert 0.025 <= ens["outside_fraction"] <= 0.08


def test_correlated_innovations_point_to_the_ratio(tmp_path, run_cli):
    """Q too small relative to R (R right): the filter follows too slowly, its
    innovations are positively correlated (common practice, no source), whiteness fails."""
    x, z = sim.truth(0.5, 0.04, 3000, np.random.default_rng(5))
    nu, S, _, _ = sim.run_filterpy(z, 0.5 / 100, 0.04)
    (tmp_path / "m.yaml").write_text(sim.model_text(0.5 / 100, 0.04))
    status, out, _ = run_cli("consistency", _cli_log(tmp_path, "log", nu, S), "--model",
                             tmp_path / "m.yaml", "-o", tmp_path / "c.yaml")
    doc = yaml.safe_load((tmp_path / "c.yaml").read_text())["consistency"]
    assert status == 1
    assert doc["whiteness"]["white"] is False and doc["whiteness"]["lag1_mean"] > 0.1
    assert "positively correlated" in doc["direction"]


BAD_LOGS = [
    ("time [s],nu_q [m],S_q_q [m**2]\n0,1,1\n1,1,1\n2,1,1\n", "no column nu_p"),
    ("time [s],nu_p [m]\n0,1\n1,1\n2,1\n", "no column S_p_p"),
]


@pytest.mark.parametrize("text, message", BAD_LOGS, ids=[m for _, m in BAD_LOGS])
def test_bad_log_is_one_line(tmp_path, run_cli, text, message):
    """A log without the model's columns: one line naming the column, status 2,
    nothing written (project rule; common practice, no source)."""
    (tmp_path / "log.csv").write_text(text)
    (tmp_path / "m.yaml").write_text(sim.model_text(0.5, 0.04))
    status, _, err = run_cli("consistency", tmp_path / "log.csv", "--model",
                             tmp_path / "m.yaml", "-o", tmp_path / "c.yaml")
    assert status == 2 and message in err and err.count("\n") == 1
    assert not (tmp_path / "c.yaml").exists()


def test_covariance_not_positive_definite(tmp_path, run_cli):
    """S of -1 at some step: refused with the step named."""
    nu = np.ones(60)
    S = np.ones(60)
    S[7] = -1.0
    (tmp_path / "m.yaml").write_text(sim.model_text(0.5, 0.04))
    status, _, err = run_cli("consistency", _cli_log(tmp_path, "log", nu, S), "--model",
                             tmp_path / "m.yaml", "-o", tmp_path / "c.yaml")
    assert status == 2 and "step 7" in err


@pytest.mark.slow
def test_false_alarm_rates_on_filterpy_runs(tmp_path):
    """With the true Q and R, over 400 seeded filterpy runs (2000 steps) the NIS band and
    the whiteness test each reject about 5 % (binomial 99.9 % range for 400 at 5 %:
    9-35) and NEES, whose band rests on an estimated effective number of steps, at most
    12 % (Bar-Shalom et al. 2001, §5.4; the definition of a 95 % band)."""
    from noisecal.analysis.innovations import normalised_squares

    nis_out = nees_out = white_out = 0
    runs = 400
    for seed in range(runs):
        x, z = sim.truth(0.5, 0.04, 2000, np.random.default_rng(5000 + seed))
        nu, S, xs, Ps = sim.run_filterpy(z, 0.5, 0.04)
        q, w = normalised_squares(nu[:, None], S[:, None, None])
        nis_out += chi_square_test([q], 1).verdict != "within"
        white_out += not whiteness([w], 10).white
        e, _ = normalised_squares(x - xs, Ps)
        nees_out += chi_square_test([e], 2, "NEES", correlated=True).verdict != "within"
    print(f"false alarms over {runs}: NIS {nis_out}, whiteness {white_out}, NEES {nees_out}")
    assert 9 <= nis_out <= 35 and white_out <= 35 and nees_out <= 0.12 * runs
