"""A fleet's parameters across units, from the history database.

Pipeline: every unit's runs (optionally one sensor name) → per parameter (job,
channel, name, unit) each unit's latest estimate → a random-effects model of the
units' true values, on the log scale where every value and bound is positive (noise
coefficients: the fleet's median is then exp(μ)) and linear otherwise → the fleet's
median with its interval, the spread between units with its interval, the range a
new unit is expected in (prediction interval) → units outside the fleet (studentized
deleted residuals) or outside a given limit → the median per calendar month and its
drift per year → a YAML summary (and a PNG).

Each unit's own interval enters as its sampling variance: a wide interval weighs
less, and the spread is what remains between units beyond their own uncertainty.
"""

from __future__ import annotations

import datetime as _dt
import math
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy import optimize, stats

from .. import __version__, history
from ..errors import InputError
from ..export.atomic import Staged, check_target

Z95 = float(stats.norm.ppf(0.975))
ALPHA_OUTLIER = 0.05
"""Family-wise rate of calling a unit outside the fleet (Bonferroni over the units)."""


@dataclass(frozen=True)
class RandomEffects:
    """A random-effects summary of k estimates y_i with sampling variances v_i.

    Attributes
    ----------
    k : int
        Estimates used.
    mu, mu_lower, mu_upper : float
        Mean of the true values (log or linear scale) and its 95 % interval
        (Hartung–Knapp–Sidik–Jonkman: t with k − 1 degrees of freedom).
    se : float
        Standard error of ``mu`` (HKSJ).
    tau2, tau2_lower, tau2_upper : float
        Between-unit variance (DerSimonian–Laird) and its 95 % Q-profile interval.
    q : float
        Cochran's Q; ``p_homogeneity`` its chi-square (k − 1) p-value.
    i2 : float
        Share of the spread not explained by the units' own intervals.
    pred_lower, pred_upper : float
        95 % prediction interval of a new unit's true value (t with k − 2 df).
    """

    k: int
    mu: float
    mu_lower: float
    mu_upper: float
    se: float
    tau2: float
    tau2_lower: float
    tau2_upper: float
    q: float
    p_homogeneity: float
    i2: float
    pred_lower: float
    pred_upper: float


def _weighted_mean(y, v, tau2):
    w = 1.0 / (v + tau2)
    return float(np.sum(w * y) / np.sum(w)), w


def _q_gen(y, v, tau2) -> float:
    mu, w = _weighted_mean(y, v, tau2)
    return float(np.sum(w * (y - mu) ** 2))


def random_effects(y, v, profile: bool = True) -> RandomEffects:
    """Fleet mean and between-unit spread from estimates and their variances.

    Parameters
    ----------
    y : array_like, shape (k,)
        Each unit's estimate (log scale for positive coefficients).
    v : array_like, shape (k,)
        Their sampling variances (from each unit's interval: ((hi − lo)/(2·1.96))²).
    profile : bool
        Compute τ²'s Q-profile interval (NaN otherwise: the leave-one-out fits need
        only τ²).

    Returns
    -------
    RandomEffects

    References
    ----------
    R. DerSimonian, N. Laird, "Meta-analysis in clinical trials", Controlled Clinical
    Trials 7, 1986 (τ²). J. Hartung, G. Knapp, "A refined method for the meta-analysis
    of controlled clinical trials with binary outcome", Stat. Med. 20, 2001, and
    K. Sidik, J. Jonkman, Stat. Med. 21, 2002 (interval of μ). W. Viechtbauer,
    "Confidence intervals for the amount of heterogeneity in meta-analysis", Stat. Med.
    26, 2007 (Q-profile). J. Higgins, S. Thompson, D. Spiegelhalter, "A re-evaluation of
    random-effects meta-analysis", J. R. Stat. Soc. A 172, 2009 (prediction interval).
    """
    y, v = np.asarray(y, float), np.asarray(v, float)
    k = y.shape[0]
    if k < 2:
        raise ValueError("a random-effects summary needs at least two estimates")
    w = 1.0 / v
    mu_fe = np.sum(w * y) / np.sum(w)
    q = float(np.sum(w * (y - mu_fe) ** 2))
    c = np.sum(w) - np.sum(w ** 2) / np.sum(w)
    tau2 = max(0.0, (q - (k - 1)) / c)
    mu, wr = _weighted_mean(y, v, tau2)
    se = math.sqrt(np.sum(wr * (y - mu) ** 2) / ((k - 1) * np.sum(wr)))
    t = stats.t.ppf(0.975, k - 1)
    lo_t2, hi_t2 = _q_profile(y, v, k) if profile else (math.nan, math.nan)
    if k >= 3:
        tp = stats.t.ppf(0.975, k - 2)
        half = tp * math.sqrt(tau2 + se ** 2)
    else:
        half = math.inf
    return RandomEffects(
        k, mu, mu - t * se, mu + t * se, se, tau2, lo_t2, hi_t2, q,
        float(stats.chi2.sf(q, k - 1)), max(0.0, (q - (k - 1)) / q) if q > 0 else 0.0,
        mu - half, mu + half)


def _q_profile(y, v, k) -> tuple:
    """95 % interval of τ²: the τ² where the generalised Q meets the chi-square
    (k − 1) quantiles (it decreases in τ²)."""
    hi_q, lo_q = stats.chi2.ppf(0.975, k - 1), stats.chi2.ppf(0.025, k - 1)

    def root(target):
        if _q_gen(y, v, 0.0) <= target:
            return 0.0
        top = max(1e-12, float(np.var(y, ddof=1)))
        while _q_gen(y, v, top) > target:
            top *= 4.0
        return float(optimize.brentq(lambda t2: _q_gen(y, v, t2) - target, 0.0, top,
                                     xtol=1e-14 * top, rtol=1e-12))
    return root(hi_q), root(lo_q)


@dataclass(frozen=True)
class UnitValue:
    """One unit's latest estimate of a parameter."""

    unit: str
    run: int
    date: str
    value: float | None
    lower: float | None
    upper: float | None
    is_bound: bool


@dataclass(frozen=True)
class ParameterSummary:
    """The fleet's view of one parameter.

    Attributes
    ----------
    job, channel, name, unit : str
    scale : {"log", "linear"}
    values : tuple of UnitValue
        Each unit's latest estimate.
    fit : RandomEffects or None
        None with fewer than two resolved estimates.
    outliers : tuple of dict
        Units outside the fleet: unit, t (studentized deleted residual), side.
    beyond_limits : tuple of dict
        Units whose estimate passes a given limit.
    drift : dict
        Per month the fleet's median; the slope per year where there are three
        months or more.
    """

    job: str
    channel: str
    name: str
    unit: str
    scale: str
    values: tuple
    fit: RandomEffects | None
    outliers: tuple = ()
    beyond_limits: tuple = ()
    drift: dict = field(default_factory=dict)

    def back(self, x: float) -> float:
        """A value on the model's scale back in the parameter's unit."""
        return math.exp(x) if self.scale == "log" else x


@dataclass(frozen=True)
class FleetResult:
    """Every parameter's fleet summary.

    Attributes
    ----------
    db : str
    sensor : str or None
    units : tuple of str
    summaries : tuple of ParameterSummary
        One per parameter (job, channel, name, unit).
    sections : dict
        The YAML content.
    """

    db: str
    sensor: str | None
    units: tuple
    summaries: tuple
    sections: dict

    report_purpose = ("The fleet's distribution of each stored parameter across units: "
                      "the median and the spread between units with 95 % intervals (each "
                      "unit's own interval taken into account), the units outside the fleet "
                      "or a limit, and the median's drift over time.")

    def summary(self) -> str:
        return summary(self)

    def parameters(self) -> list:
        """The fleet's median and spread of each parameter, as Estimates."""
        from ..types import Estimate
        from .result import Parameter

        out = []
        for s in self.summaries:
            f = s.fit
            if f is None:
                continue
            out.append(Parameter(s.channel, f"{s.name} (fleet median)", Estimate(
                s.back(f.mu), s.back(f.mu_lower), s.back(f.mu_upper), s.unit,
                "random effects, HKSJ interval"), {}))
            tau = [math.sqrt(x) for x in (f.tau2, f.tau2_lower, f.tau2_upper)]
            out.append(Parameter(s.channel, f"{s.name} (spread between units)", Estimate(
                *tau, "1" if s.scale == "log" else s.unit,
                "between-unit SD" + (" of the log" if s.scale == "log" else "")
                + ", DerSimonian-Laird, Q-profile interval"), {}))
        return out

    def report_figures(self) -> list:
        """(title, caption, PNG bytes) for the HTML report."""
        import io

        from ..export.fleet_plot import fleet_figure

        buf = io.BytesIO()
        fleet_figure(self, buf)
        return [("Fleet", "Each unit's latest value with its 95 % interval; the fleet's "
                 "median (dark band: its 95 % interval) and the range of a unit's true "
                 "value (light band); red: outside the fleet.", buf.getvalue())]


def _all_units(db: Path) -> list:
    """Every unit in the history (read-only)."""
    history.runs_of(db, "")  # validates the file (and migrates an older schema)
    con = sqlite3.connect(f"{db.resolve().as_uri()}?mode=ro", uri=True, timeout=5)
    try:
        return [u for (u,) in con.execute("SELECT DISTINCT unit FROM runs ORDER BY unit")]
    finally:
        con.close()


def _sampling(u: UnitValue, scale: str) -> tuple:
    """(estimate, variance) of a unit on the model's scale, from its 95 % interval."""
    if scale == "log":
        y = math.log(u.value)
        s = (math.log(u.upper) - math.log(u.lower)) / (2 * Z95)
    else:
        y = u.value
        s = (u.upper - u.lower) / (2 * Z95)
    # A zero-width interval (an exact value) would take every weight: floor it.
    return y, max(s * s, 1e-300)


def _leave_one_out(y, v) -> np.ndarray:
    """Studentized deleted residuals (Viechtbauer & Cheung 2010, Res. Synth. Methods 1)."""
    k = y.shape[0]
    t = np.zeros(k)
    for i in range(k):
        keep = np.arange(k) != i
        fit = random_effects(y[keep], v[keep], profile=False)
        t[i] = (y[i] - fit.mu) / math.sqrt(v[i] + fit.tau2 + fit.se ** 2)
    return t


def _fit(resolved: list, scale: str) -> tuple:
    """The random-effects fit of the units inside the fleet, and those outside.

    With four units or more, a unit whose studentized deleted residual passes the
    Bonferroni normal quantile is outside the fleet; the fit is made again without
    those (once), so that a broken unit neither moves the median nor widens the
    fleet's range."""
    y, v = (np.array(a) for a in zip(*(_sampling(u, scale) for u in resolved)))
    if len(resolved) < 4:
        return random_effects(y, v), []
    t = _leave_one_out(y, v)
    crit = stats.norm.ppf(1 - ALPHA_OUTLIER / (2 * len(resolved)))
    out = np.abs(t) > crit
    outliers = [{"unit": u.unit, "t": float(ti), "side": "above" if ti > 0 else "below"}
                for u, ti, o in zip(resolved, t, out) if o]
    return random_effects(y[~out], v[~out]), outliers


def _limits(path: str | None) -> dict:
    if path is None:
        return {}
    from ..ingest.yaml_file import read_yaml

    doc = read_yaml(Path(path), "limits file")
    limits = doc.get("limits") if isinstance(doc, dict) else None
    if not isinstance(limits, dict):
        raise InputError(f"--limits {path}: write limits: {{channel: {{parameter: "
                         "{max: x}}}} (SI)")
    out = {}
    for channel, params in limits.items():
        for name, bound in (params or {}).items():
            if not isinstance(bound, dict) or not set(bound) <= {"min", "max"} or not all(
                    isinstance(x, (int, float)) and not isinstance(x, bool)
                    for x in bound.values()):
                raise InputError(f"--limits {path}: {channel}.{name}: give min and/or max "
                                 "as numbers (SI)")
            out[(str(channel), str(name))] = {k: float(x) for k, x in bound.items()}
    return out


def _beyond(values, bound: dict) -> list:
    out = []
    for u in values:
        hi = u.upper if u.is_bound else u.value
        if "max" in bound and hi is not None and hi > bound["max"]:
            sure = u.is_bound is False and u.lower is not None and u.lower > bound["max"]
            out.append({"unit": u.unit, "value": hi, "limit": {"max": bound["max"]},
                        "whole_interval_beyond": bool(sure)})
        elif "min" in bound and u.value is not None and u.value < bound["min"]:
            sure = u.upper is not None and u.upper < bound["min"]
            out.append({"unit": u.unit, "value": u.value, "limit": {"min": bound["min"]},
                        "whole_interval_beyond": bool(sure)})
    return out


def _month(date: str) -> str:
    return _dt.datetime.fromisoformat(date).strftime("%Y-%m")


def _drift(all_runs: dict, scale: str) -> dict:
    """The fleet's median per month, and its drift per year.

    Per month: the random-effects median of each unit's latest run in the month
    (units outside the fleet that month left out). The drift is estimated within
    units, since the same units are measured again: y_it = a_i + b·t + e_it by
    weighted least squares (weights 1/v_it, each unit its own level a_i), with a
    cluster-robust standard error by unit (K.-Y. Liang, S. L. Zeger, Biometrika 73,
    1986) and t with (units − 1) degrees of freedom; it needs three units seen in
    two months or more.
    """
    months: dict = {}
    for unit, entries in all_runs.items():
        for u in entries:  # oldest first: a later run in the month replaces an earlier
            if not u.is_bound and None not in (u.value, u.lower, u.upper) and \
                    u.lower <= u.value <= u.upper and (scale == "linear" or u.lower > 0):
                months.setdefault(_month(u.date), {})[unit] = u
    periods, points = [], {}
    for month in sorted(months):
        units = list(months[month].values())
        if len(units) < 2:
            continue
        fit, outside = _fit(units, scale)
        gone = {o["unit"] for o in outside}
        periods.append({"month": month, "units": fit.k, "median": _back(fit.mu, scale),
                        "ci95": [_back(fit.mu_lower, scale), _back(fit.mu_upper, scale)]})
        for u in units:
            if u.unit not in gone:
                y, v = _sampling(u, scale)
                t = _dt.datetime.fromisoformat(u.date).timestamp() / (365.25 * 86400)
                points.setdefault(u.unit, []).append((t, y, v))
    out: dict = {"by_month": periods}
    clusters = [np.array(p) for p in points.values() if len(p) >= 2]
    if len(periods) < 2 or len(clusters) < 3:
        return out
    sxx = sxy = 0.0
    parts = []
    for c in clusters:
        t, y, w = c[:, 0], c[:, 1], 1.0 / c[:, 2]
        dt = t - np.sum(w * t) / np.sum(w)
        dy = y - np.sum(w * y) / np.sum(w)
        sxx += float(np.sum(w * dt * dt))
        sxy += float(np.sum(w * dt * dy))
        parts.append((w, dt, dy))
    if sxx <= 0:
        return out
    b = sxy / sxx
    meat = sum(float(np.sum(w * dt * (dy - b * dt))) ** 2 for w, dt, dy in parts)
    g = len(parts)
    se = math.sqrt(meat * g / (g - 1)) / sxx
    tq = stats.t.ppf(0.975, g - 1)
    lo, hi = b - tq * se, b + tq * se
    how = ("within-unit weighted least squares (each unit its own level), "
           "cluster-robust standard error by unit, t with units - 1 df")
    if scale == "log":
        out["slope_per_year"] = {"value": math.expm1(b), "ci95": [math.expm1(lo),
                                                                  math.expm1(hi)],
                                 "unit": "fraction of the median per year", "units": g,
                                 "method": how + " (log scale)"}
    else:
        out["slope_per_year"] = {"value": b, "ci95": [lo, hi], "unit": "per year",
                                 "units": g, "method": how}
    return out


def _back(x: float, scale: str) -> float:
    return math.exp(x) if scale == "log" else float(x)


def summarise(db: str | Path, sensor: str | None = None, limits: str | None = None) \
        -> FleetResult:
    """The fleet summary of every parameter stored in ``db``.

    Parameters
    ----------
    db : str or Path
        History database.
    sensor : str, optional
        Only runs stored under this sensor name.
    limits : str, optional
        Limits YAML (``limits: {channel: {parameter: {max: x, min: y}}}``, SI).

    Returns
    -------
    FleetResult
    """
    db = Path(db)
    bounds = _limits(limits)
    series: dict = {}  # (job, channel, name, unit) -> {unit serial: [UnitValue...]}
    units = []
    for serial in _all_units(db):
        runs = [r for r in history.runs_of(db, serial)
                if sensor is None or r["sensor"] == sensor]
        if runs:
            units.append(serial)
        for r in runs:
            for p in r["parameters"]:
                series.setdefault((r["job"], p.channel, p.name, p.unit), {}).setdefault(
                    serial, []).append(UnitValue(serial, r["run"], r["date"], p.value,
                                                 p.lower, p.upper, p.is_bound))
    if not units:
        raise InputError(f"--db {db}: no runs" + (f" of sensor {history.printable(sensor)}"
                                                  if sensor else "") + " stored; run "
                         "noisecal batch (or a job with --unit) first")
    summaries = []
    for key in sorted(series):
        per_unit = series[key]
        latest = tuple(entries[-1] for entries in per_unit.values())
        resolved = [u for u in latest if not u.is_bound and None not in
                    (u.value, u.lower, u.upper) and u.lower <= u.value <= u.upper]
        positive = all(u.value > 0 and u.lower > 0 for u in resolved)
        scale = "log" if positive else "linear"
        fit, outliers = None, []
        if len(resolved) >= 2:
            fit, outliers = _fit(resolved, scale)
        limit = bounds.get((key[1], key[2]))
        summaries.append(ParameterSummary(
            *key, scale, latest, fit, tuple(outliers),
            tuple(_beyond(latest, limit) if limit else ()),
            _drift(per_unit, scale) if fit is not None else {}))
    sections = _sections(db, sensor, units, summaries)
    return FleetResult(str(db), sensor, tuple(units), tuple(summaries), sections)


def _num(x):
    return None if x is None or not math.isfinite(x) else float(x)


def _sections(db, sensor, units, summaries) -> dict:
    params = []
    for s in summaries:
        f = s.fit
        entry = {"job": s.job, "channel": s.channel, "name": s.name, "unit": s.unit,
                 "scale": s.scale, "units": len(s.values),
                 "units_in_fit": f.k if f is not None else 0,
                 "upper_bounds_only": sorted(u.unit for u in s.values if u.is_bound)}
        if f is not None:
            entry["median"] = {
                "value": s.back(f.mu), "ci95": [s.back(f.mu_lower), s.back(f.mu_upper)],
                "method": ("random effects on the log scale (median = exp(mu)); tau2 by "
                           "DerSimonian-Laird, interval Hartung-Knapp-Sidik-Jonkman"
                           if s.scale == "log" else "random effects (mean); tau2 by "
                           "DerSimonian-Laird, interval Hartung-Knapp-Sidik-Jonkman")}
            tau = (math.sqrt(f.tau2), math.sqrt(f.tau2_lower), math.sqrt(f.tau2_upper))
            entry["spread"] = {
                "tau": tau[0], "ci95": [tau[1], tau[2]],
                "unit": "log units (a unit one tau above the median is exp(tau) times it)"
                if s.scale == "log" else s.unit,
                "method": "between-unit standard deviation beyond each unit's own "
                "interval; Q-profile interval",
                "i2": f.i2, "homogeneity_p": f.p_homogeneity}
            entry["fleet_range"] = {
                "ci95": [_num(s.back(f.pred_lower)), _num(s.back(f.pred_upper))],
                "method": "95 % prediction interval of a unit's true value (t, k - 2 df)"}
            entry["outside_fleet"] = list(s.outliers)
            entry["drift"] = s.drift
        else:
            entry["median"] = None
            entry["note"] = "fewer than two units with a resolved value"
            bounds = [u.upper for u in s.values if u.is_bound and u.upper is not None]
            if bounds:
                # Each unit lies below its own bound (95 %): the fleet below the largest.
                entry["largest_upper_bound"] = max(bounds)
        if s.beyond_limits:
            entry["beyond_limits"] = list(s.beyond_limits)
        flagged = [f"{o['unit']} outside the fleet ({o['side']})" for o in s.outliers] + \
            [f"{o['unit']} beyond the limit" for o in s.beyond_limits]
        if flagged:
            entry["warning"] = "; ".join(flagged)
        entry["per_unit"] = [{"unit": u.unit, "run": u.run, "date": u.date,
                              **({"upper_bound": u.upper} if u.is_bound else
                                 {"value": u.value, "ci95": [u.lower, u.upper]})}
                             for u in s.values]
        params.append(entry)
    return {
        "provenance": {"tool": f"noisecal {__version__}", "job": "fleet", "db": str(db),
                       "sensor": sensor,
                  "units": list(units),
                  "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                  "outlier_rule": "studentized deleted residual beyond the normal quantile "
                  f"of {ALPHA_OUTLIER:g}/(2k) (Bonferroni over k units, k >= 4); units "
                  "outside the fleet are named and left out of the median, spread and "
                  "range"},
        "parameters": params,
    }


def summary(result: FleetResult) -> str:
    """One line per parameter: median, spread, units outside."""
    lines = [f"fleet of {len(result.units)} unit(s) in {result.db}"
             + (f", sensor {result.sensor}" if result.sensor else "")]
    for s in result.summaries:
        head = f"  {s.channel}.{s.name} [{s.unit}] ({s.job})"
        if s.fit is None:
            lines.append(f"{head}: fewer than two resolved values")
            continue
        f = s.fit
        spread = (f"spread x{math.exp(math.sqrt(f.tau2)):.3g}" if s.scale == "log"
                  else f"spread {math.sqrt(f.tau2):.4g}")
        text = (f"{head}: median {s.back(f.mu):.4g} (95 %: {s.back(f.mu_lower):.4g} … "
                f"{s.back(f.mu_upper):.4g}), {spread}, {f.k} units")
        if s.outliers:
            text += "; outside the fleet: " + ", ".join(
                f"{o['unit']} ({o['side']})" for o in s.outliers)
        if s.beyond_limits:
            text += "; beyond the limit: " + ", ".join(o["unit"] for o in s.beyond_limits)
        slope = s.drift.get("slope_per_year")
        if slope and s.scale == "log":
            lo, hi = slope["ci95"]
            text += (f"; drift {100 * slope['value']:+.3g} %/year (95 %: {100 * lo:+.3g} … "
                     f"{100 * hi:+.3g})")
        elif slope:
            text += (f"; drift {slope['value']:+.4g} {s.unit}/year (95 %: "
                     f"{slope['ci95'][0]:+.4g} … {slope['ci95'][1]:+.4g})")
        lines.append(text)
    return "\n".join(history.printable(line) for line in lines)


def run_fleet(db: str, out: str | None = None, sensor: str | None = None,
              limits: str | None = None, plot: str | None = None,
              overwrite: bool = False, report: str | None = None) -> FleetResult:
    """Summarise the fleet and write the YAML summary, the PNG and the HTML report
    (each optional) together, atomically; every path is checked before any work."""
    from ..export import yaml_block

    protect = [Path(db), Path(f"{db}-wal"), Path(f"{db}-shm")] + (
        [Path(limits)] if limits else [])
    if report:
        from ..export.html import check_report_path

        report = check_report_path(report, protect, overwrite, [out, plot])
    for target in (out, plot):
        if target:
            check_target(Path(target), protect, overwrite)
    if out and plot and Path(out).resolve() == Path(plot).resolve():
        raise InputError(f"--plot {plot}: the same path as -o; give each its own path")
    if out and Path(out).suffix.lower() not in (".yaml", ".yml"):
        raise InputError(f"-o {out}: the summary is YAML; give a .yaml path")
    result = summarise(db, sensor, limits)
    with Staged(overwrite) as staged:
        if plot:
            from ..export.fleet_plot import fleet_figure

            fleet_figure(result, staged.path(Path(plot)))
        if report:
            from ..export.html.report import render_job

            staged.text(report, render_job(result, "noisecal fleet report"))
        if out:
            staged.text(Path(out), yaml_block.render(
                result.sections, "noisecal fleet summary",
                {"provenance": "Where the numbers come from.",
                 "parameters": "Per parameter: the fleet's median and spread with 95 % "
                 "intervals, units outside the fleet or a limit, drift by month."}))
        staged.commit()
    return result
