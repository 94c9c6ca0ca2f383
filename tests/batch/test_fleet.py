"""noisecal fleet: the fleet's median and spread across units from the history.

References: R. DerSimonian, N. Laird, Controlled Clinical Trials 7 (1986) for the
between-unit variance; J. Hartung, G. Knapp (Stat. Med. 20, 2001) and K. Sidik,
J. Jonkman (Stat. Med. 21, 2002) for the interval of the mean; W. Viechtbauer (Stat.
Med. 26, 2007) for the Q-profile interval of tau^2; J. Higgins, S. Thompson,
D. Spiegelhalter (J. R. Stat. Soc. A 172, 2009) for the prediction interval; the
reference library is statsmodels' ``combine_effects`` (method_re="chi2" is
DerSimonian-Laird; its "random effect wls" row is the HKSJ interval).
"""

from __future__ import annotations

import contextlib
import io
import math

import numpy as np
import pytest
import yaml
from scipy import stats
from statsmodels.stats.meta_analysis import combine_effects

from noisecal import history
from noisecal.cli import main
from noisecal.jobs.fleet import random_effects

Z = stats.norm.ppf(0.975)


def _cli(*args):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in args])
    return status, out.getvalue(), err.getvalue()


def _dl_by_hand(y, v):
    """DerSimonian-Laird tau^2 and the random-effects mean, written out from the paper."""
    w = 1 / v
    ybar = (w * y).sum() / w.sum()
    q = (w * (y - ybar) ** 2).sum()
    tau2 = max(0.0, (q - (len(y) - 1)) / (w.sum() - (w ** 2).sum() / w.sum()))
    ws = 1 / (v + tau2)
    return tau2, (ws * y).sum() / ws.sum(), ws


@pytest.mark.filterwarnings("ignore::statsmodels.tools.sm_exceptions.InvalidTestWarning")
def test_random_effects_against_statsmodels_and_by_hand():
    """Mean, tau^2 and the HKSJ interval equal statsmodels'; tau^2's Q-profile bounds
    make the generalised Q equal the chi-square quantiles; the prediction interval is
    mu +- t(k-2) sqrt(tau^2 + SE^2)."""
    rng = np.random.default_rng(7)
    k = 9
    v = rng.uniform(0.005, 0.05, k)
    y = rng.normal(0.3, 0.2, k) + rng.normal(0, np.sqrt(v))
    fit = random_effects(y, v)
    sm = combine_effects(y, v, method_re="chi2", use_t=True)
    frame = sm.summary_frame()
    assert fit.tau2 == pytest.approx(sm.tau2, rel=1e-10)
    assert fit.mu == pytest.approx(sm.mean_effect_re, rel=1e-10)
    row = frame.loc["random effect wls"]
    assert (fit.mu_lower, fit.mu_upper) == pytest.approx((row["ci_low"], row["ci_upp"]),
                                                         rel=1e-9)
    tau2, mu, ws = _dl_by_hand(y, v)
    assert (fit.tau2, fit.mu) == pytest.approx((tau2, mu), rel=1e-12)
    se = math.sqrt((ws * (y - mu) ** 2).sum() / ((k - 1) * ws.sum()))
    half = stats.t.ppf(0.975, k - 2) * math.sqrt(tau2 + se ** 2)
    assert (fit.pred_lower, fit.pred_upper) == pytest.approx((mu - half, mu + half))

    def q_gen(t2):
        w = 1 / (v + t2)
        m = (w * y).sum() / w.sum()
        return (w * (y - m) ** 2).sum()
    assert fit.tau2_lower < fit.tau2 < fit.tau2_upper
    if fit.tau2_lower > 0:
        assert q_gen(fit.tau2_lower) == pytest.approx(stats.chi2.ppf(0.975, k - 1))
    assert q_gen(fit.tau2_upper) == pytest.approx(stats.chi2.ppf(0.025, k - 1))


def test_intervals_cover_over_seeded_fleets():
    """Coverage of the mean's HKSJ interval and tau^2's Q-profile interval over 400
    seeded fleets of 10 units with unequal intervals: each near 95 % (binomial band
    0.92-0.98 at n = 400)."""
    mu, tau = -7.0, 0.25
    hits_mu = hits_tau = 0
    n = 400
    for seed in range(n):
        rng = np.random.default_rng(seed)
        v = rng.uniform(0.01, 0.1, 10)
        y = mu + rng.normal(0, tau, 10) + rng.normal(0, np.sqrt(v))
        fit = random_effects(y, v)
        hits_mu += fit.mu_lower <= mu <= fit.mu_upper
        hits_tau += fit.tau2_lower <= tau ** 2 <= fit.tau2_upper
    assert 0.92 <= hits_mu / n <= 0.98
    assert 0.92 <= hits_tau / n <= 0.98


def _fleet_db(path, seed=11):
    """12 IMU units over four months (log median rising 2 % a month), unit F07 far
    above the fleet in its latest run, and one camera unit that --sensor leaves out.
    Returns the latest month's (unit, value, lower, upper)."""
    rng = np.random.default_rng(seed)
    theta = np.log(2e-4) + rng.normal(0, 0.1, 12)
    latest = []
    for month in range(1, 5):
        for i in range(12):
            s = rng.uniform(0.03, 0.08)
            y = theta[i] + math.log(1.02) * (month - 1) + rng.normal(0, s)
            if i == 7 and month == 4:
                y += 1.5
            value, lo, hi = math.exp(y), math.exp(y - Z * s), math.exp(y + Z * s)
            history.record_run(path, f"F{i:02d}", "imu", "static", "0" * 64, "noisecal test",
                               [history.Parameter("gyro_x", "white_noise", value, lo, hi,
                                                  "rad/s/Hz^0.5"),
                                history.Parameter("gyro_x", "bias_instability", None, None,
                                                  1e-5 * (1 + i), "rad/s", True)],
                               date=f"2026-{month:02d}-10T12:00:00+00:00")
            if month == 4:
                latest.append((f"F{i:02d}", value, lo, hi))
    history.record_run(path, "C01", "camera", "targets", "1" * 64, "noisecal test",
                       [history.Parameter("gyro_x", "white_noise", 1.0, 0.5, 2.0,
                                          "rad/s/Hz^0.5")], date="2026-04-11T12:00:00+00:00")
    return latest


@pytest.mark.filterwarnings("ignore::statsmodels.tools.sm_exceptions.InvalidTestWarning")
def test_fleet_command_summarises_names_outliers_limits_and_drift(tmp_path):
    """The summary's median and spread equal statsmodels' random-effects fit of each
    unit's latest log value (variance from its interval), F07 left out; F07 is named
    outside the fleet and no other; the units above a limit are named; the monthly drift's
    interval holds the planted 2 % a month; another sensor's unit is left out."""
    db = tmp_path / "h.db"
    latest = _fleet_db(db)
    (tmp_path / "limits.yaml").write_text("limits: {gyro_x: {white_noise: {max: 2.6e-4}}}\n")
    status, out, err = _cli("fleet", "--db", db, "--sensor", "imu", "-o", tmp_path / "f.yaml",
                            "--plot", tmp_path / "f.png", "--limits", tmp_path / "limits.yaml",
                            "--report", tmp_path / "f.html")
    assert status == 0, err
    doc = yaml.safe_load((tmp_path / "f.yaml").read_text())
    assert doc["provenance"]["units"] == [f"F{i:02d}" for i in range(12)]
    wn = next(p for p in doc["parameters"] if p["name"] == "white_noise")
    inside = [e for e in latest if e[0] != "F07"]  # the fit leaves the outlier out
    y = np.log([v for _, v, _, _ in inside])
    var = ((np.log([h for *_, h in inside]) - np.log([lo for _, _, lo, _ in inside]))
           / (2 * Z)) ** 2
    sm = combine_effects(y, var, method_re="chi2", use_t=True)
    row = sm.summary_frame().loc["random effect wls"]
    assert wn["median"]["value"] == pytest.approx(math.exp(sm.mean_effect_re), rel=1e-9)
    assert wn["median"]["ci95"] == pytest.approx([math.exp(row["ci_low"]),
                                                  math.exp(row["ci_upp"])], rel=1e-9)
    assert wn["spread"]["tau"] == pytest.approx(math.sqrt(sm.tau2), rel=1e-9)
    assert wn["units"] == 12 and wn["units_in_fit"] == 11
    assert [o["unit"] for o in wn["outside_fleet"]] == ["F07"]
    assert wn["outside_fleet"][0]["side"] == "above"
    above = sorted(u for u, v, _, _ in latest if v > 2.6e-4)
    assert above and sorted(b["unit"] for b in wn["beyond_limits"]) == above
    slope = wn["drift"]["slope_per_year"]
    planted = 1.02 ** 12 - 1
    assert slope["ci95"][0] <= planted <= slope["ci95"][1] and slope["ci95"][0] > 0
    assert [m["month"] for m in wn["drift"]["by_month"]] == ["2026-01", "2026-02",
                                                             "2026-03", "2026-04"]
    bi = next(p for p in doc["parameters"] if p["name"] == "bias_instability")
    assert bi["median"] is None and bi["largest_upper_bound"] == pytest.approx(1.2e-4)
    assert (tmp_path / "f.png").stat().st_size > 10_000
    assert "outside the fleet: F07 (above)" in out
    page = (tmp_path / "f.html").read_text()
    assert "F07 outside the fleet (above)" in page and "data:image/png;base64," in page
    assert f"{wn['median']['value']:.4g}" in page


def test_fleet_bad_inputs_one_line(tmp_path):
    """A missing database, a bad limits file and an existing output: one line, status 2,
    nothing written."""
    status, out, err = _cli("fleet", "--db", tmp_path / "none.db", "-o", tmp_path / "f.yaml")
    assert status == 2 and len(err.strip().splitlines()) == 1 and "no such database" in err
    db = tmp_path / "h.db"
    _fleet_db(db)
    (tmp_path / "lim.yaml").write_text("limits: {gyro_x: {white_noise: {max: high}}}\n")
    status, out, err = _cli("fleet", "--db", db, "-o", tmp_path / "f.yaml", "--limits",
                            tmp_path / "lim.yaml")
    assert status == 2 and "give min and/or max as numbers" in err
    (tmp_path / "f.yaml").write_text("mine")
    status, out, err = _cli("fleet", "--db", db, "-o", tmp_path / "f.yaml")
    assert status == 2 and "already exists" in err
    assert (tmp_path / "f.yaml").read_text() == "mine"
    status, out, err = _cli("fleet", "--db", db, "--sensor", "lidar", "-o", tmp_path / "g.yaml")
    assert status == 2 and "no runs of sensor lidar" in err
    assert not (tmp_path / "g.yaml").exists()


def _drift_coverage(n: int) -> float:
    from noisecal.jobs.fleet import UnitValue, _drift

    rate = math.log(1.03)  # per month
    hits = 0
    for seed in range(n):
        rng = np.random.default_rng(1000 + seed)
        theta = np.log(1e-3) + rng.normal(0, 0.15, 10)
        runs = {}
        for i in range(10):
            entries = []
            for month in range(1, 5):
                s = rng.uniform(0.03, 0.1)
                y = theta[i] + rate * (month - 1) + rng.normal(0, s)
                entries.append(UnitValue(f"U{i}", 0, f"2026-{month:02d}-10T00:00:00+00:00",
                                         math.exp(y), math.exp(y - Z * s), math.exp(y + Z * s),
                                         False))
            runs[f"U{i}"] = entries
        slope = _drift(runs, "log")["slope_per_year"]
        # The planted rate per year on the dates used (10th of each month).
        days = (np.datetime64("2026-04-10") - np.datetime64("2026-01-10")).astype(int)
        truth = math.expm1(rate * 3 * 365.25 / days)
        hits += slope["ci95"][0] <= truth <= slope["ci95"][1]
    return hits / n


def test_drift_interval_covers_a_planted_drift():
    """The drift's 95 % interval holds a planted 3 % a month in 100 seeded fleets of
    10 units over four months (binomial band 0.89-0.99 at n = 100; 400 under slow)."""
    assert 0.89 <= _drift_coverage(100) <= 0.99


@pytest.mark.slow
def test_drift_interval_coverage_long():
    """As above over 400 seeded fleets (band 0.92-0.98)."""
    assert 0.92 <= _drift_coverage(400) <= 0.98
