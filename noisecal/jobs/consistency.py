"""Is a running filter's noise right? NIS, NEES and whiteness from its log; ALS estimate.

Pipeline: read the model file and one log per run (innovations ``nu_<measurement>``,
innovation covariances ``S_<a>_<b>``, optionally states ``x_<state>``, covariances
``P_<a>_<b>`` and truth ``truth_<state>``) → NIS per step → time-averaged band
(and the ensemble band over runs) → whitened innovations → autocorrelation and
Ljung–Box → verdict and direction → optionally Q and R by autocovariance least
squares (the model's Phi, H and noise structure, the gain from ``filter_used``).
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass

import numpy as np

from .. import __version__
from ..analysis.innovations import (ChiSquareTest, Whiteness, chi_square_test,
                                    normalised_squares, whiteness)
from ..errors import AnalysisError, InputError
from ..export import yaml_block
from ..export.atomic import STDOUT, Staged
from ..model.spec import FilterModel, read_model
from ..types import Estimate, Recording
from .filter import _sq, yaml_output
from .result import JobResult, Parameter, ParameterError, whole

LAYOUT = "noisecal.consistency/1"
MIN_STEPS = 50
"""Fewest logged steps for a test with a useful band."""


@dataclass(frozen=True)
class ConsistencyResult(JobResult):
    """What the log says about the filter's noise.

    Attributes
    ----------
    model : FilterModel
    logs : tuple of Recording
    nis : ChiSquareTest
    nees : ChiSquareTest or None
    whiteness : Whiteness
    consistent : bool
    direction : str
    als_fit : AlsFit or None
        The ALS estimate (``--estimate``).
    sections : dict
    """

    model: FilterModel
    logs: tuple
    nis: ChiSquareTest
    nees: ChiSquareTest | None
    whiteness: Whiteness
    consistent: bool
    direction: str
    als_fit: object
    sections: dict

    @property
    def exit_status(self) -> int:
        """0 consistent, 1 not (as the command line returns)."""
        return 0 if self.consistent else 1

    def parameters(self) -> list:
        """The NIS scale (mean NIS / m) and, with an estimate, Q's and R's diagonals."""
        sc = self.nis.scale
        out = [Parameter("all", "nis_scale", Estimate(
            sc[0], sc[1], sc[2], "", "mean NIS / m; chi-square interval (independent "
            "steps)", self.nis.level), {})]
        fit = self.als_fit
        if fit is not None:
            how = (f"autocovariance least squares; parametric bootstrap ({fit.reps} "
                   f"replicates, seed {fit.seed}), percentile")
            for i, s in enumerate(self.model.states):
                out.append(Parameter(s, "Q", Estimate(float(fit.Q[i, i]),
                                                      float(fit.Q_low[i, i]),
                                                      float(fit.Q_high[i, i]),
                                                      _sq(self.model.units[i]), how), {}))
            for j, mm in enumerate(self.model.measurements):
                out.append(Parameter(mm.name, "R", Estimate(float(fit.R[j, j]),
                                                            float(fit.R_low[j, j]),
                                                            float(fit.R_high[j, j]),
                                                            _sq(mm.unit), how), {}))
        return out

    def _summary(self) -> str:
        return summary(self)

    def _render(self, out=None) -> str:
        return render(self.sections, out)


def _column(rec: Recording, names: list, where: str) -> np.ndarray | None:
    for n in names:
        if n in rec.channels:
            return np.asarray(rec.channel(n), float)
    return None


def _covariances(rec: Recording, prefix: str, order: list, what: str,
                 required: bool) -> np.ndarray | None:
    """(K, d, d) covariances from ``<prefix>_<a>_<b>`` columns (upper triangle)."""
    d = len(order)
    out = np.empty((rec.n, d, d))
    for i in range(d):
        for j in range(i, d):
            a, b = order[i], order[j]
            col = _column(rec, [f"{prefix}_{a}_{b}", f"{prefix}_{b}_{a}"], rec.source.path)
            if col is None:
                if not required:
                    return None
                raise InputError(f"{rec.source.path}: no column {prefix}_{a}_{b} ({what}); "
                                 f"a log needs {prefix}_<a>_<b> for the upper triangle of "
                                 f"{', '.join(order)}")
            out[:, i, j] = out[:, j, i] = col
    return out


def _log_arrays(rec: Recording, model: FilterModel) -> dict:
    names = [mm.name for mm in model.measurements]
    nu = []
    for n in names:
        col = _column(rec, [f"nu_{n}"], rec.source.path)
        if col is None:
            raise InputError(f"{rec.source.path}: no column nu_{n} (the innovation of "
                             f"measurement {n!r} in the model); its channels are "
                             f"{', '.join(rec.channels)}")
        nu.append(col)
    nu = np.column_stack(nu)
    S = _covariances(rec, "S", names, "innovation covariance", True)
    if rec.n < MIN_STEPS:
        raise AnalysisError(f"{rec.source.path}: {rec.n} steps; the tests need at least "
                            f"{MIN_STEPS}")
    if not (np.all(np.isfinite(nu)) and np.all(np.isfinite(S))):
        raise InputError(f"{rec.source.path}: innovations or S hold values that are not "
                         "finite; log only steps where the filter updated")
    out = {"nu": nu, "S": S}
    states = list(model.states)
    has = [f"truth_{s}" in rec.channels for s in states]
    if any(has):
        if not all(has):
            raise InputError(f"{rec.source.path}: truth for some states only; NEES needs "
                             f"truth_<state>, x_<state> and P_<a>_<b> for all of "
                             f"{', '.join(states)}")
        x = []
        for s in states:
            col = _column(rec, [f"x_{s}"], rec.source.path)
            if col is None:
                raise InputError(f"{rec.source.path}: truth_{s} but no x_{s}; NEES needs the "
                                 "filter's estimate beside the truth")
            x.append(col)
        out["err"] = np.column_stack([np.asarray(rec.channel(f"truth_{s}"), float)
                                      for s in states]) - np.column_stack(x)
        out["P"] = _covariances(rec, "P", states, "state covariance", True)
    return out


def _squares(e, cov, where, what):
    try:
        return normalised_squares(e, cov)
    except np.linalg.LinAlgError:
        bad = next(k for k in range(cov.shape[0])
                   if np.linalg.eigvalsh(cov[k]).min() <= 0)
        raise InputError(f"{where}: {what} at step {bad} is not positive definite; check "
                         "the log's columns and their order") from None


def _direction(nis: ChiSquareTest, wh: Whiteness, nees: ChiSquareTest | None) -> str:
    parts = []
    if nis.verdict == "above":
        parts.append(f"innovations larger than the filter believes (NIS {nis.scale[0]:.3g} "
                     "times its expected value): Q or R too small")
    elif nis.verdict == "below":
        parts.append(f"innovations smaller than the filter believes (NIS {nis.scale[0]:.3g} "
                     "times its expected value): Q or R too large (a conservative filter)")
    if not wh.white:
        if wh.lag1 > 0:
            parts.append("innovations positively correlated in time: the filter follows "
                         "too slowly, Q too small relative to R (or dynamics missing from "
                         "the model)")
        else:
            parts.append("innovations negatively correlated in time: the filter follows "
                         "too fast, Q too large relative to R")
    if nees is not None and nees.verdict != "within":
        parts.append(f"estimation errors {'larger' if nees.verdict == 'above' else 'smaller'}"
                     f" than the filter's P (NEES {nees.scale[0]:.3g} times its expected "
                     "value)")
    return "; ".join(parts) if parts else "NIS within its band and innovations white: " \
        "the noise the filter uses agrees with its innovations"


def _steady_start(S: np.ndarray, S_ss: np.ndarray) -> tuple[int, float]:
    """First step from which the logged S stays within 2 % of the steady state, and the
    fraction of steps after it that do."""
    rel = np.linalg.norm(S - S_ss, axis=(1, 2)) / np.linalg.norm(S_ss)
    off = rel > 0.02
    if not off.any():
        return 0, 1.0
    if off.all():
        return 0, 0.0
    last = int(np.flatnonzero(off)[-1])
    if last + 1 >= S.shape[0] // 2:
        # Never settles: report, keep all steps.
        return 0, float(np.mean(~off))
    return last + 1, 1.0


def check(model: FilterModel, logs: list, estimate: bool = False, lags: int | None = None,
          reps: int = 200, seed: int = 1, level: float = 0.95,
          command: str = "") -> ConsistencyResult:
    """Consistency tests of a filter's log, and optionally Q, R by ALS.

    Parameters
    ----------
    model : FilterModel
    logs : list of Recording
        One per run of the filter.
    estimate : bool
        Estimate Q and R by autocovariance least squares (needs a linear model
        with ``filter_used``).
    lags : int, optional
        Lags of the whiteness test and of ALS (default: until the filter's error
        dynamics decay to 1 %, 5 to 50).
    reps : int
        Bootstrap replicates of the ALS intervals (at least 50).
    seed : int
    level : float
        Level of the bands and intervals (0.5 to 0.999).
    command : str

    Returns
    -------
    ConsistencyResult
    """
    reps = whole("reps", reps, 50)
    seed = whole("seed", seed, 0)
    if isinstance(level, bool) or not isinstance(level, (int, float)) or \
            not 0.5 <= level < 1:
        raise ParameterError("level", level, "give a level between 0.5 and 1, e.g. 0.95")
    if lags is not None:
        lags = whole("lags", lags, 1)
    if not logs:
        raise ParameterError("logs", logs, "give at least one filter log")
    arrays = [_log_arrays(r, model) for r in logs]
    m = model.m
    nis_v, white = [], []
    for r, a in zip(logs, arrays):
        q, w = _squares(a["nu"], a["S"], r.source.path, "S")
        nis_v.append(q)
        white.append(w)
    nis = chi_square_test(nis_v, m, "NIS", level)
    nees = None
    if all("err" in a for a in arrays):
        nees_v = [_squares(a["err"], a["P"], r.source.path, "P")[0]
                  for r, a in zip(logs, arrays)]
        nees = chi_square_test(nees_v, model.n, "NEES", level, correlated=True)
    notes = list(model.notes)
    fit = None
    steady = None
    linear = model.form != "python"
    if linear and model.used_Q is not None:
        from ..fit.als import default_lags, kalman_gain
        from ..model.discretize import _point, source_terms

        amp0 = np.array([_point(s.amplitude) for s in model.sources])
        tau0 = np.array([_point(s.tau) if s.tau is not None else np.nan
                         for s in model.sources])
        Phi, Qs, _, _ = source_terms(model, amp0, tau0)
        H = model.H
        try:
            gain, _, S_ss = kalman_gain(Phi, H, model.used_Q, model.used_R)
        except (np.linalg.LinAlgError, ValueError) as exc:
            raise InputError(f"{model.path}: no steady-state filter for Phi, H and "
                             f"filter_used ({str(exc).splitlines()[0]}); check that the "
                             "states are observable or driven") from None
        starts = [_steady_start(a["S"], S_ss) for a in arrays]
        steady = {"S_steady": S_ss, "starts": starts}
        if min(f for _, f in starts) < 0.9:
            notes.append("the logged S does not settle at the steady state of the model's "
                         "Phi, H and filter_used Q, R: the log may come from another filter "
                         "or a time-varying one; ALS assumes the model's")
    if lags is None:
        lags = (default_lags(Phi, H, gain, min(a["nu"].shape[0] for a in arrays))
                if steady is not None else int(min(20, max(5, nis.steps // 50))))
    wh = whiteness(white, lags, level)
    consistent = nis.verdict == "within" and wh.white and (nees is None or
                                                           nees.verdict == "within")
    direction = _direction(nis, wh, nees)
    if estimate:
        if not linear:
            raise InputError(f"{model.path}: --estimate needs a linear model (F or Phi); "
                             "a Python model's Jacobians change along the run")
        if model.used_Q is None:
            raise InputError(f"{model.path}: --estimate needs filter_used: {{Q, R}}, the "
                             "matrices the running filter used")
        from ..fit.als import als

        nus = [a["nu"][s0:] for a, (s0, _) in zip(arrays, steady["starts"])]
        if sum(n.shape[0] for n in nus) < 10 * lags:
            raise AnalysisError(f"{len(nus)} log(s) hold {sum(n.shape[0] for n in nus)} "
                                f"steady steps; ALS needs at least 10 x lags ({10 * lags})")
        terms = Qs / np.where(amp0 > 0, amp0, 1.0)[:, None, None] ** 2
        fit = als(nus, Phi, H, gain, terms, lags, reps, seed, level)
    sections = _sections(model, logs, nis, nees, wh, consistent, direction, fit, steady,
                         notes, seed, reps, level, command,
                         terms if fit is not None else None)
    return ConsistencyResult(model, tuple(logs), nis, nees, wh, consistent, direction, fit,
                             sections)


def _test_section(t: ChiSquareTest) -> dict:
    num = yaml_block.num
    out = {"mean": num(t.mean), "expected": t.dof, "dof": t.dof, "steps": t.steps,
           "effective_steps": num(t.effective),
           "runs": t.runs, "band": [num(t.band[0]), num(t.band[1])], "level": t.level,
           "verdict": t.verdict,
           "scale": {"value": num(t.scale[0]), "ci": [num(t.scale[1]), num(t.scale[2])],
                     "meaning": "actual spread / the filter's (1 = right)"},
           "gate": num(t.gate), "outside_gate_fraction": num(t.outside_fraction),
           "expected_outside_fraction": num(1 - t.level)}
    if t.run_band is not None:
        out["ensemble"] = {"band": [num(t.run_band[0]), num(t.run_band[1])],
                           "outside_fraction": num(t.run_outside_fraction),
                           "expected_outside_fraction": num(1 - t.level),
                           "note": "average over runs at each step (runs cut to the "
                                   "shortest)"}
    return out


def _sections(model, logs, nis, nees, wh, consistent, direction, fit, steady, notes, seed,
              reps, level, command, terms=None) -> dict:
    num, m = yaml_block.num, yaml_block.matrix
    names = [mm.name for mm in model.measurements]
    cons = {
        "consistent": bool(consistent),
        "direction": direction,
        "nis": _test_section(nis),
        "whiteness": {
            "lags": wh.lags,
            "band": num(wh.band),
            "outside_fraction": num(wh.outside_fraction),
            "expected_outside_fraction": num(1 - level),
            "lag1_mean": num(wh.lag1),
            "ljung_box_p": {n: num(p) for n, p in zip(names, wh.ljung_box_p)},
            "p_value": num(wh.p_value),
            "white": bool(wh.white),
            "autocorrelation": {n: [num(v) for v in wh.acf[i]] for i, n in enumerate(names)},
            "method": ("innovations whitened by S's Cholesky factor; sample autocorrelation "
                       "at lags 1..lags against +-z/sqrt(K); Ljung-Box per component, "
                       "Bonferroni over components"),
        },
    }
    if nees is not None:
        cons["nees"] = _test_section(nees)
    cons["assumes"] = ("NIS values independent over steps (true of a consistent filter: "
                       "the time-averaged band uses every step); NEES values are "
                       "correlated over steps even then, so its band uses their effective "
                       "number (Geyer)")
    cons["notes"] = notes
    sections = {
        "layout": LAYOUT,
        "provenance": {
            "tool": f"noisecal {__version__}",
            "job": "consistency",
            "command": command,
            "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "logs": [{"path": r.source.path, "sha256": r.source.sha256, "steps": r.n}
                     for r in logs],
            "model": {"path": model.path, "sha256": model.sha256},
            "seed": seed,
            "settings": {"level": level, "lags": wh.lags, "reps": reps,
                         "estimate": fit is not None},
        },
        "consistency": cons,
    }
    if fit is not None:
        s = len(model.sources)
        est = {
            "method": ("autocovariance least squares (Odelson, Rajamani & Rawlings 2006): "
                       f"innovation autocovariances at lags 0..{fit.lags - 1} against the "
                       "filter's Phi, H, gain (from filter_used) and the model's noise "
                       "structure; densities and variances constrained >= 0, so Q and R "
                       "are positive semidefinite"),
            "interval": (f"parametric bootstrap: {fit.reps} innovation sequences simulated "
                         f"from the estimate through the same filter (seed {fit.seed}), "
                         f"re-estimated; central {level:g} percentile, element-wise"),
            "order": list(model.states),
            "Q": m(fit.Q),
            "Q_ci": {"low": m(fit.Q_low), "high": m(fit.Q_high)},
            "measurement_order": names,
            "R": m(fit.R),
            "R_ci": {"low": m(fit.R_low), "high": m(fit.R_high)},
            "sources": _source_section(model, fit, terms),
            "filter_used": {"Q": m(model.used_Q), "R": m(model.used_R)},
            "identifiability": {
                "unknowns": int(s + model.m),
                "rank": fit.rank,
                "identifiable": fit.identifiable,
                "statement": _ident_text(fit, model),
                "steady_state_from_step": [int(s0) for s0, _ in steady["starts"]],
            },
            "relative_residual": num(fit.residual),
        }
        sections["estimate"] = est
    return sections


def _source_section(model, fit, terms) -> dict:
    """Each source's θ with its interval; sources that enter Q alike get their sum."""
    num = yaml_block.num
    kinds = {"density": "spectral density q (u^2/Hz)",
             "variance": "discrete variance per step",
             "gauss_markov": "stationary variance sigma^2"}
    out = {}
    a = (1 - fit.level) / 2
    for i, src in enumerate(model.sources):
        entry = {"kind": kinds[src.kind], "identifiable": bool(fit.sources_identifiable[i]),
                 "model_value": num(_amp(src) ** 2)}
        if fit.sources_identifiable[i]:
            entry.update(q=num(fit.theta[i]), ci=[num(fit.theta_low[i]),
                                                   num(fit.theta_high[i])])
        else:
            alike = [k for k in range(len(model.sources)) if not
                     fit.sources_identifiable[k] and np.allclose(terms[k], terms[i],
                                                                 rtol=1e-9, atol=0)]
            names = [model.sources[k].name for k in alike]
            entry["q"] = None
            if len(alike) > 1:
                tot = fit.draws[:, alike].sum(axis=1)
                lo, hi = np.quantile(tot, [a, 1 - a])
                entry["sum_with"] = names
                entry["sum_q"] = num(fit.theta[alike].sum())
                entry["sum_ci"] = [num(lo), num(hi)]
                entry["note"] = ("enters Q exactly as " + ", ".join(
                    n for n in names if n != src.name) + ": only the sum is determined")
            else:
                entry["note"] = "not determined by the innovations on its own"
        out[src.name] = entry
    return out


def _amp(src) -> float:
    return float(src.amplitude.value if src.amplitude.resolved else src.amplitude.upper)


def _ident_text(fit, model) -> str:
    s = len(model.sources)
    p = s + model.m
    if fit.rank == p:
        return (f"the autocovariance matrix has full column rank ({p} unknowns): Q and R "
                "are determined by the innovations, each source on its own (the filter is "
                "stable; its gain is fixed)")
    if fit.identifiable:
        merged = [model.sources[i].name for i in range(s) if not fit.sources_identifiable[i]]
        return (f"rank {fit.rank} of {p}: Q and R are determined, but the split between "
                f"{', '.join(merged)} is not (they drive Q alike); the estimate gives one "
                "split of their sum")
    return (f"rank {fit.rank} of {p}: Q and R are NOT determined by the innovations; "
            "fewer noise sources (merge those that enter alike) or more measurements are "
            "needed; the numbers given are one solution among many")


_COMMENTS = {
    "provenance": "Where these numbers came from.",
    "consistency": ("Normalised innovation squared (NIS) against its chi-square band, and\n"
                    "the innovations' whiteness (Bar-Shalom, Li & Kirubarajan 2001)."),
    "estimate": ("Q and R the innovations point to (discrete, for the filter's dt), with\n"
                 "intervals. A starting point: confirm on the real system."),
}


def render(sections: dict, out=None) -> str:
    """The YAML text of the consistency block."""
    return yaml_block.render(sections, f"noisecal filter consistency ({LAYOUT})", _COMMENTS,
                             out=out)


def summary(result: ConsistencyResult) -> str:
    """Plain text: the verdict, NIS with its band, whiteness, and the estimate."""
    n = result.nis
    lines = [f"{len(result.logs)} log(s), {n.steps} steps, m = {n.dof}: "
             f"{'CONSISTENT' if result.consistent else 'NOT consistent'}",
             f"  mean NIS {n.mean:.4g} (expected {n.dof}; {n.level:g} band {n.band[0]:.4g} … "
             f"{n.band[1]:.4g}): {n.verdict}",
             f"  steps above the {n.level:g} gate: {100 * n.outside_fraction:.2f} % "
             f"(expected {100 * (1 - n.level):.2f} %)"]
    if n.run_band is not None:
        lines.append(f"  ensemble over {n.runs} runs: {100 * n.run_outside_fraction:.2f} % "
                     f"of steps outside [{n.run_band[0]:.4g}, {n.run_band[1]:.4g}]")
    if result.nees is not None:
        e = result.nees
        lines.append(f"  mean NEES {e.mean:.4g} (expected {e.dof}; band {e.band[0]:.4g} … "
                     f"{e.band[1]:.4g}): {e.verdict}")
    w = result.whiteness
    lines.append(f"  whiteness: Ljung-Box p = {w.p_value:.3g} over {w.lags} lags, "
                 f"lag-1 autocorrelation {w.lag1:+.3f} (band ±{w.band:.3g}): "
                 f"{'white' if w.white else 'NOT white'}")
    lines.append(f"  {result.direction}")
    fit = result.als_fit
    if fit is not None:
        with np.printoptions(linewidth=100, formatter={"float_kind": lambda v: f"{v:11.5g}"}):
            lines.append("  ALS estimate Q =\n    " + str(fit.Q).replace("\n", "\n    "))
            lines.append("  ALS estimate R =\n    " + str(fit.R).replace("\n", "\n    "))
        for p in result.parameters()[1:]:
            e = p.estimate
            lines.append(f"    {p.name}[{p.channel}] {e.value:.4g} ({fit.level:g}: "
                         f"{e.lower:.4g} … {e.upper:.4g})")
        lines.append("  " + _ident_text(fit, result.model))
    for note in result.sections["consistency"]["notes"]:
        lines.append(f"  note: {note}")
    return "\n".join(lines)


def run_consistency(log_paths: list, model_path: str, out: str, estimate: bool = False,
                    lags: int | None = None, reps: int = 200, seed: int = 1,
                    level: float = 0.95, overwrite: bool = False, command: str = "",
                    use_cache: bool = True, record=None,
                    report: str | None = None) -> ConsistencyResult:
    """Read the model and the logs, test, optionally estimate, write the YAML block.

    Parameters
    ----------
    log_paths : list of str
        One filter log per run (CSV, Parquet or .npz; ``name [unit]`` columns).
    model_path : str
        The model file.
    out : str
        YAML output (``-`` for standard output).
    estimate, lags, reps, seed, level, command
        See :func:`check`.
    overwrite : bool
    use_cache : bool
    record : optional
    report : str, optional
        HTML report path (self-contained), written together with the YAML block.
    """
    from ..ingest import read_recording
    from .static import _report_path

    out_path = yaml_output(out, list(log_paths) + [model_path], overwrite,
                           getattr(record, "paths", ()))
    report_path = _report_path(report, list(log_paths) + [model_path], overwrite, record,
                               out_path)
    model = read_model(model_path)
    logs = [read_recording(p, use_cache=use_cache) for p in log_paths]
    result = check(model, logs, estimate, lags, reps, seed, level, command)
    with Staged(overwrite) as staged:
        staged.text(out_path, result._render(None if out_path == STDOUT else out_path))
        if report_path is not None:
            from ..export.html import render_job

            staged.text(report_path, render_job(result))
        staged.commit(record(result) if record else None)
    return result


__all__ = ["ConsistencyResult", "check", "run_consistency", "summary"]
