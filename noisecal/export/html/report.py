"""Self-contained HTML reports: one file per job run, and one per unit's history.

A report is built from a job's result object (:class:`~noisecal.jobs.result.JobResult`
or :class:`~noisecal.jobs.recheck.RecheckResult`), never from the YAML file: the
headline table comes from ``result.parameters()`` (the typed Estimates), the
job-specific parts from the result's typed fields, and the appendix shows the
result's own mapping (``to_dict()``, what the YAML block holds) in full. A result
type the renderer does not know (a new job) gets the generic report: purpose,
parameters, warnings and notes found in its mapping, provenance, the full mapping,
and the figures its ``report_figures()`` returns.

The page has no script and fetches nothing: CSS inline, figures as ``data:`` PNGs,
a Content-Security-Policy that forbids every request. Jinja2 escapes every value
(names, serials and notes from files are text, never markup); control characters
are shown escaped, as on the terminal.
"""

from __future__ import annotations

import datetime as _dt
import math
import numbers
import re
from pathlib import Path

from ... import __version__
from ...history import printable
from ...types import Estimate
from .figures import job_figures, unit_figures

_ENV = None


def environment():
    """The Jinja2 environment: templates shipped with the package, autoescaping on."""
    global _ENV
    if _ENV is None:
        import jinja2

        _ENV = jinja2.Environment(
            loader=jinja2.PackageLoader("noisecal.export.html", "templates"),
            autoescape=True, undefined=jinja2.StrictUndefined, trim_blocks=True,
            lstrip_blocks=True)
        _ENV.filters["shown"] = lambda v: printable(v) if v is not None else ""
        _ENV.tests["numeric"] = lambda v: numeric(str(v))
        _ENV.filters["shown_lines"] = lambda v: "\n".join(
            printable(line) for line in str(v or "").split("\n"))
    return _ENV


def fmt(x, digits: int = 4) -> str:
    """A number as the report shows it: ``digits`` significant digits, ``—`` for none."""
    if x is None:
        return "—"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, numbers.Integral):
        return str(int(x))
    if isinstance(x, numbers.Real):
        x = float(x)
        if math.isnan(x):
            return "NaN"
        if math.isinf(x):
            return "∞" if x > 0 else "−∞"
        return f"{x:.{digits}g}"
    return printable(str(x))


def full(x) -> str:
    """A number at full precision (the appendix: every digit the YAML block holds)."""
    if isinstance(x, bool) or not isinstance(x, numbers.Real):
        return fmt(x)
    if isinstance(x, numbers.Integral):
        return str(int(x))
    return repr(float(x))


def estimate_row(channel: str, name: str, e: Estimate, customary: str | None = None) -> dict:
    """One table row of an Estimate: value, interval, unit, resolved or bound."""
    level = f"{100 * e.level:g} %"
    if e.resolved:
        value = fmt(e.value)
        interval = f"{fmt(e.lower)} … {fmt(e.upper)}"
        status = "resolved"
    else:
        value = f"< {fmt(e.upper)}"
        interval = f"upper bound at {level}"
        status = "bound"
    tau = (f"{fmt(e.tau_range[0], 3)} … {fmt(e.tau_range[1], 3)} s"
           if e.tau_range else "")
    if customary and not e.resolved:
        customary = f"< {customary}"
    return {"channel": channel, "name": name, "value": value, "interval": interval,
            "level": level, "unit": e.unit, "customary": customary or "", "status": status,
            "tau": tau, "method": e.method}


def _walk_notes(node, path: str, out: list, warn: list) -> None:
    """Notes and failed checks anywhere in a result's mapping (generic jobs)."""
    if isinstance(node, dict):
        for k, v in node.items():
            here = f"{path}.{k}" if path else str(k)
            if k == "notes" and isinstance(v, list):
                out += [(path or "result", str(n)) for n in v if n]
            elif k in ("note", "warning") and isinstance(v, str) and v:
                (warn if k == "warning" else out).append((path or "result", v))
            elif k == "consistent" and v is False:
                why = "; ".join(str(node[x]) for x in ("likely_cause", "advice") if node.get(x))
                warn.append((path or "result", "model check: NOT consistent"
                             + (f" — {why}" if why else "")))
            else:
                _walk_notes(v, here, out, warn)
    elif isinstance(node, list):
        for i, v in enumerate(node):
            _walk_notes(v, f"{path}[{i}]", out, warn)


def tree(node, depth: int = 0):
    """The result's mapping as nested rows for the appendix: ``(key, value-or-children)``.

    Lists of numbers (matrix rows, Allan points) stay one line of full-precision
    numbers; lists of mappings become numbered children.
    """
    if isinstance(node, dict):
        return {"kind": "map", "items": [(printable(str(k)), tree(v, depth + 1))
                                         for k, v in node.items()]}
    if isinstance(node, (list, tuple)):
        if all(not isinstance(v, (dict, list, tuple)) for v in node):
            return {"kind": "leaf", "text": "[" + ", ".join(full(v) for v in node) + "]"}
        if all(isinstance(v, (list, tuple)) and all(not isinstance(x, (dict, list, tuple))
                                                    for x in v) for v in node):
            return {"kind": "leaf", "text": "[" + ", ".join(
                "[" + ", ".join(full(x) for x in v) + "]" for v in node) + "]"}
        return {"kind": "map", "items": [(f"[{i}]", tree(v, depth + 1))
                                         for i, v in enumerate(node)]}
    return {"kind": "leaf", "text": full(node) if not isinstance(node, str) else printable(node)}


def _provenance(sections: dict, extra: dict | None = None) -> list:
    """Provenance as (key, text) lines, nested keys dotted; inputs get their sizes."""
    prov = dict(sections.get("provenance") or {})
    for key, value in (extra or {}).items():
        if isinstance(prov.get(key), dict):
            prov[key] = {**prov[key], **{k: v for k, v in value.items()
                                         if k not in prov[key]}}
        elif key not in prov:
            prov[key] = value
    lines: list = []

    def add(prefix, v):
        if isinstance(v, dict):
            for k, x in v.items():
                add(f"{prefix}.{k}" if prefix else str(k), x)
        elif isinstance(v, (list, tuple)):
            lines.append((prefix, ", ".join(printable(str(x)) for x in v) or "none"))
        else:
            lines.append((prefix, full(v) if not isinstance(v, str) else v))
    add("", prov)
    return lines


def _source(src) -> dict:
    return {"path": src.path, "sha256": src.sha256, "size_bytes": src.size_bytes,
            "format": src.format}


def _matrix(title: str, order, units, mat, low=None, high=None, caption: str = "") -> dict:
    """A square matrix as a table; with intervals each cell reads ``value [low, high]``."""
    rows = []
    for i, name in enumerate(order):
        cells = []
        for j in range(len(order)):
            text = fmt(mat[i][j])
            if low is not None and high is not None and (mat[i][j] or low[i][j] or high[i][j]):
                text += f" [{fmt(low[i][j], 3)}, {fmt(high[i][j], 3)}]"
            cells.append(text)
        rows.append([f"{name} [{units[i]}]" if units else name] + cells)
    return {"title": title, "caption": caption, "matrix": True,
            "columns": [""] + list(order), "rows": rows}


_NUMERIC = re.compile(r"^[<>≤≥~−+\-]?\s*[0-9.][0-9.eE+\-−…\s\[\],%]*$")


def numeric(text: str) -> bool:
    """Whether a cell reads as a number or an interval (kept on one line)."""
    return len(text) <= 40 and bool(_NUMERIC.match(text))


def _table(title: str, columns: list, rows: list, caption: str = "") -> dict:
    return {"title": title, "caption": caption, "matrix": False, "columns": columns,
            "rows": [[fmt(c) if not isinstance(c, str) else c for c in r] for r in rows]}


# ---------------------------------------------------------------------------------------
# Per job: purpose, recording facts, headline, tables, warnings


def _static(res, page: dict) -> None:
    from ...units import customary

    rec = res.recording
    page["purpose"] = (
        "Noise terms (IEEE Std 952) of a recording made at rest, each with its 95 % "
        f"interval or an upper bound, and the discrete Q and R a Kalman filter stepping at "
        f"dt = {fmt(res.block.dt)} s needs.")
    page["facts"] = [
        ("file", rec.source.path), ("samples", fmt(rec.n)),
        ("duration", f"{fmt(rec.duration)} s ({fmt(rec.duration / 3600, 3)} h)"),
        ("rate", f"{fmt(1 / rec.period)} Hz"), ("gaps", fmt(len(rec.gaps))),
        ("channels", ", ".join(f"{c} [{u}, given in {su}]" for c, u, su in
                                zip(rec.channels, rec.units, rec.source_units))),
    ]
    rows = []
    for p in res.parameters():
        e = p.estimate
        unit = res.channels[p.channel].model.unit
        rows.append(estimate_row(p.channel, p.name, e,
                                 customary(e.value if e.resolved else e.upper, unit, p.name)))
    page["headline"] = rows
    page["customary_title"] = "customary"
    tables = []
    for name, ch in res.channels.items():
        m = ch.model
        gm = m.gauss_markov or {}
        if gm:
            tables.append(_table(f"{name}: first-order Gauss–Markov bias",
                                 ["parameter", "value", "95 % interval", "unit", "method"],
                                 [[k, *(lambda r: [r["value"], r["interval"], r["unit"],
                                                   r["method"]])(estimate_row(name, k, v))]
                                  for k, v in gm.items()]))
        mc = m.check
        if mc is not None:
            verdict = "consistent" if mc.consistent else "NOT consistent"
            page["checks"].append({
                "title": f"{name}: model check", "ok": bool(mc.consistent),
                "text": (f"{verdict}: p = {fmt(mc.p_value, 3)}; {len(mc.outside)} of "
                         f"{mc.points} fitted points outside their 95 % interval; "
                         f"{mc.spikes} spike(s)"
                         + ("" if mc.consistent else f". Likely cause: {mc.cause}. "
                            f"{mc.advice}"))})
        if m.fit is not None:
            page["notes"] += [(name, f"near tie: {t}") for t in m.fit.selection.near_ties()]
            used = m.curve.taus[m.fit.used]
            page["notes"].append((name, f"terms fitted from τ = {fmt(float(used[0]), 3)} s to "
                                  f"{fmt(float(used[-1]), 3)} s"))
        if m.turn_on is not None:
            t = m.turn_on
            if t.note:
                page["notes"].append((name, f"turn-on bias: {t.note}"))
        psd = ch.psd
        n = m.terms["white_noise"]
        tables.append(_table(
            f"{name}: spectrum check (Welch PSD)", ["quantity", "value"],
            [["white level from the PSD", f"{fmt(psd.white_noise)} {n.unit}"],
             ["band", " … ".join(fmt(b) for b in psd.band_hz) + " Hz"],
             ["ratio to the Allan white noise", fmt(psd.white_noise / (n.value or n.upper))],
             ["roll-off", f"{fmt(psd.roll_off_hz)} Hz" if psd.roll_off_hz else "none seen"]]))
    fb = res.block
    units = list(fb.units)
    tables.append(_matrix("R (measurement noise)", fb.order, units, fb.R.tolist(),
                          fb.R_low.tolist(), fb.R_high.tolist(),
                          "R = N²/dt per channel, SI; 95 % interval in brackets."))
    tables.append(_matrix("Q_input (channel integrated in the prediction)", fb.order, units,
                          fb.Q_input.tolist(), fb.Q_input_low.tolist(),
                          fb.Q_input_high.tolist(), "Q = N²·dt, SI."))
    tables.append(_matrix("Q_bias (bias random-walk state)", fb.order, units,
                          fb.Q_bias.tolist(), fb.Q_bias_low.tolist(), fb.Q_bias_high.tolist(),
                          "Q = K²·dt, SI; from the upper bound where K is not resolved."))
    page["tables"] = tables
    page["warnings"] += [("filter", n) for n in fb.notes]


def in_input_units(rec, channel: str, e: Estimate) -> str | None:
    """An Estimate in the unit the recording's file gave for ``channel`` (e.g. mm, deg),
    where that differs from SI and the Estimate has the channel's own unit."""
    from ...units import convert

    if channel not in rec.channels:
        return None
    i = rec.channels.index(channel)
    si, src = rec.units[i], rec.source_units[i]
    if e.unit != si or src == si:
        return None
    try:
        if e.resolved:
            return (f"{fmt(convert(e.value, si, src))} ({fmt(convert(e.lower, si, src))} … "
                    f"{fmt(convert(e.upper, si, src))}) {src}")
        return f"{fmt(convert(e.upper, si, src))} {src}"
    except Exception:  # a unit pint cannot convert between is shown in SI only
        return None


def _motion(res, page: dict) -> None:
    m, a = res.model, res.alignment
    page["purpose"] = (
        "Measurement noise R of a sensor against ground truth (inside a chi-square gate), "
        "its bias, outliers and the sensor–truth time offset, each with its 95 % interval.")
    page["facts"] = [("sensor", res.sensor.source.path), ("truth", res.truth.source.path),
                     ("aligned samples", fmt(int(res.time.shape[0]))),
                     ("overlap", f"{fmt(float(res.time[0]))} … {fmt(float(res.time[-1]))} s"),
                     ("channels", ", ".join(f"{c} [{u}]" for c, u in zip(m.order, m.units)))]
    page["headline"] = [estimate_row(p.channel, p.name, p.estimate,
                                     in_input_units(res.sensor, p.channel, p.estimate))
                        for p in res.parameters()]
    page["tables"] = [
        _matrix("R (inside the gate)", m.order, list(m.units), m.R.tolist(), m.R_low.tolist(),
                m.R_high.tolist(), "Covariance of the samples inside the gate, corrected "
                "for the cut, SI; 95 % interval in brackets. Use with the same gate."),
        _matrix("R over all samples (outliers included)", m.order, list(m.units),
                m.R_all.tolist()),
        _table("Gate and residual checks", ["channel", "effective samples", "Ljung–Box p",
                                            "excess kurtosis (inliers)", "σ all samples"],
               [[ch.name, ch.effective_size, ch.ljung_box_p, ch.shape_inliers.excess_kurtosis,
                 ch.sigma_all] for ch in m.channels],
               f"Gate: chi-square({len(m.order)}) ≤ {fmt(m.gate_threshold)} "
               f"(p = {fmt(m.gate_probability)})."),
    ]
    page["warnings"] += [("measurement", n) for n in m.notes]
    page["extra_prov"] = {"input": _source(res.sensor.source),
                          "truth": _source(res.truth.source)}


def _odometry(res, page: dict) -> None:
    m = res.model
    page["purpose"] = (
        "Wheel-odometry noise: the motion model's α1…α4 (Thrun, Burgard & Fox, ch. 5) with "
        "95 % intervals, slip, scale errors and the per-step process noise Q.")
    page["facts"] = [("odometry", res.odometry.source.path), ("truth", res.truth.source.path),
                     ("input kind", res.config.kind),
                     ("windows used", f"{fmt(int((~m.slip).sum()))} of {fmt(int(m.slip.size))}"
                      f" ({fmt(m.window_s, 3)} s each)"),
                     ("slip episodes", fmt(len(m.episodes)))]
    page["headline"] = [estimate_row(p.channel, p.name, p.estimate) for p in res.parameters()]
    page["tables"] = [
        _table("Scale errors", ["quantity", "value", "95 % interval", "unit"],
               [[k, *(lambda r: [r["value"], r["interval"], r["unit"]])(estimate_row("", k, v))]
                for k, v in m.scale_error.items()]),
        _matrix("Q per prediction step (x, y, yaw)", ["x", "y", "yaw"], ["m", "m", "rad"],
                res.step["Q_pose"].tolist() if hasattr(res.step["Q_pose"], "tolist")
                else res.step["Q_pose"],
                caption=f"dt = {fmt(res.step['dt_s'])} s at {fmt(res.step['speed_mps'])} m/s "
                f"and {fmt(res.step['turn_rate_radps'])} rad/s; per-step errors assumed "
                "independent."),
    ]
    page["warnings"] += [("odometry", n) for n in m.notes]
    page["extra_prov"] = {"input": _source(res.odometry.source),
                          "truth": _source(res.truth.source)}


def _targets(res, page: dict) -> None:
    m = res.model
    page["purpose"] = (
        "Camera measurement noise from detections of surveyed targets: the pixel R (frame "
        "jitter plus the systematic spread between targets), outliers, and the noise on the "
        "ground plane against range.")
    page["facts"] = [("detections", res.detections.source),
                     ("detections used", fmt(int(m.detected.shape[0]))),
                     ("targets", fmt(len(m.targets))), ("ground", res.ground)]
    page["headline"] = [estimate_row(p.channel, p.name, p.estimate) for p in res.parameters()]
    tables = [_matrix("Pixel R", ["u", "v"], ["px", "px"], m.R_camera.tolist(),
                      m.R_camera_low.tolist(), m.R_camera_high.tolist(),
                      "R = R_jitter + R_systematic (survey share removed), px²; 95 % interval "
                      "in brackets.")]
    laws = [[k, f"σ² = a + b·range^{law['power']}", *(lambda r: [r["value"], r["interval"],
                                                                  r["unit"]])(
        estimate_row("", "b", law["b"]))] for k, law in m.laws.items()]
    if laws:
        tables.append(_table("Ground-plane laws", ["direction", "form", "b", "95 % interval",
                                                   "unit"], laws))
    if m.table:
        tables.append(_table("Ground-plane noise against range",
                             ["range [m]", "σ radial [m]", "first order [m]", "σ lateral [m]"],
                             [[r["range_m"], r["sigma_radial_m"], r["propagated_radial_m"],
                               r["sigma_lateral_m"]] for r in m.table]))
    page["tables"] = tables
    page["warnings"] += [("camera", n) for n in m.notes]


def _recheck(res, page: dict) -> None:
    from ...jobs.recheck import need_text

    page["purpose"] = (
        f"Re-check of a {res.job} baseline on a new recording: every parameter compared "
        "(F-tests and interval tests, Holm-corrected), with what more data would decide.")
    spec = ("" if res.within_spec is None else
            "; within the engineering limits" if res.within_spec else
            "; OUT OF the engineering limits")
    page["verdict"] = {"word": res.verdict, "text": f"{res.verdict}{spec} (exit status "
                       f"{res.exit_status})",
                       "ok": res.verdict == "consistent" and res.within_spec is not False}
    rows = []
    for c in res.comparisons:
        base = fmt(c.baseline) if c.baseline is not None else (
            f"< {fmt(c.baseline_bound)}" if c.baseline_bound is not None else "—")
        new = fmt(c.new) if c.new is not None else (
            f"< {fmt(c.new_bound)}" if c.new_bound is not None else "—")
        more = need_text(c, res.new_sections) if c.longer else ""
        rows.append([f"{c.channel}.{c.name}", base, new, c.unit, fmt(c.ratio), c.verdict,
                     c.test, fmt(c.p_adjusted, 3), "yes" if c.gated else "no", more])
    page["headline"] = []
    page["tables"] = [_table("Baseline against new, per parameter",
                             ["parameter", "baseline", "new", "unit", "ratio", "verdict", "test",
                              "p (Holm)", "in verdict", "more data to decide"], rows)]
    for c in res.undecided:
        page["warnings"].append((f"{c.channel}.{c.name}", "undecided: "
                                 + need_text(c, res.new_sections)))
    if res.verdict == "changed":
        page["warnings"].insert(0, ("verdict", "a parameter changed beyond the tolerance: "
                                    "re-characterise before using the baseline's Q and R"))


_JOBS = {"StaticResult": _static, "MotionResult": _motion, "OdometryResult": _odometry,
         "TargetsResult": _targets, "RecheckResult": _recheck}

CAUTION = ("These numbers are a starting point for a filter's tuning: confirm them on the "
           "real system, and where the filter's output can hurt someone, defer to the "
           "applicable safety standards and a qualified review.")


def job_page(result, title: str | None = None) -> dict:
    """The view of one job's result that the template renders (plain values, text)."""
    sections = result.sections
    job = (sections.get("provenance") or {}).get("job") or type(result).__name__
    page = {"kind": "job", "job": str(job), "title": title or f"noisecal {job} report",
            "purpose": "", "facts": [], "headline": [], "tables": [], "checks": [],
            "warnings": [], "notes": [], "verdict": None, "extra_prov": {},
            "summary": "", "caution": CAUTION}
    handler = _JOBS.get(type(result).__name__)
    if handler is not None:
        handler(result, page)
        notes, warns = [], []
        if handler is _recheck:
            _walk_notes(result.new_sections, "new recording", notes, warns)
            page["notes"] += notes
            page["warnings"] += [w for w in warns if w not in page["warnings"]]
    else:
        page["purpose"] = (getattr(result, "report_purpose", None)
                           or f"Results of the {job} job, each number with its interval.")
        page["headline"] = [estimate_row(p.channel, p.name, p.estimate)
                            for p in result.parameters()]
        notes, warns = [], []
        _walk_notes(sections, "", notes, warns)
        page["notes"] += notes
        page["warnings"] += warns
        verdict = getattr(result, "verdict", None)
        consistent = getattr(result, "consistent", None)
        if isinstance(verdict, str):
            page["verdict"] = {"text": verdict, "ok": verdict == "consistent"}
        elif isinstance(consistent, bool):
            page["verdict"] = {"text": "consistent" if consistent else "NOT consistent",
                               "ok": consistent}
    try:
        page["summary"] = result.summary()
    except (AttributeError, NotImplementedError):
        from ...jobs.recheck import RecheckResult, summary

        page["summary"] = summary(result) if isinstance(result, RecheckResult) else ""
    page["has_customary"] = any(r["customary"] for r in page["headline"])
    page.setdefault("customary_title", "input's units")
    page["has_tau"] = any(r["tau"] for r in page["headline"])
    page["provenance"] = _provenance(sections, page.pop("extra_prov"))
    page["figures"] = job_figures(result)
    page["block"] = tree(sections)
    page["generated"] = _now()
    page["tool"] = f"noisecal {__version__}"
    return page


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def render_job(result, title: str | None = None) -> str:
    """The HTML text of one job's report (see :func:`job_page`)."""
    return environment().get_template("job.html.j2").render(page=job_page(result, title))


def unit_page(serial: str, db: str, runs: list[dict]) -> dict:
    """The view of a unit's stored runs (:func:`noisecal.history.runs_of`)."""
    table = []
    for r in runs:
        for p in r["parameters"]:
            if p.is_bound:
                value, interval = f"< {fmt(p.upper)}", "upper bound"
            else:
                value = fmt(p.value)
                interval = (f"{fmt(p.lower)} … {fmt(p.upper)}"
                            if p.lower is not None and p.upper is not None else "")
            table.append([str(r["run"]), r["date"], f"{p.channel}.{p.name}", value, interval,
                          p.unit, r["verdict"] or ""])
    verdicts = [(str(r["run"]), r["date"], r["job"], r["verdict"]) for r in runs
                if r["verdict"]]
    return {
        "kind": "unit", "serial": serial, "title": "noisecal unit report",
        "purpose": ("How this unit's noise has moved over time: each stored parameter with "
                    "its 95 % interval per run, and the re-check verdicts on the same time "
                    "axis."),
        "db": db, "runs": [{"run": str(r["run"]), "date": r["date"], "job": r["job"],
                            "sensor": r["sensor"], "sha": r["input_sha256"],
                            "tool": r["tool_version"], "verdict": r["verdict"] or ""}
                           for r in runs],
        "verdicts": verdicts, "table": table,
        "figures": unit_figures(serial, runs), "caution": CAUTION,
        "generated": _now(), "tool": f"noisecal {__version__}",
    }


def render_unit(serial: str, db: str, runs: list[dict]) -> str:
    """The HTML text of a unit's history report."""
    return environment().get_template("unit.html.j2").render(page=unit_page(serial, db, runs))


def check_report_path(path, inputs: list, overwrite: bool, others: list = (),
                      option: str = "--report") -> Path:
    """A report path checked before any work: ``.html``, not an input, not another output.

    Parameters
    ----------
    path : str or Path
        The report to write.
    inputs : list
        Files the run reads (never overwritten).
    overwrite : bool
        Whether an existing report may be replaced.
    others : list
        The run's other outputs (YAML, PNG), which the report must not replace.
    """
    from ...errors import InputError
    from ..atomic import STDOUT, check_target

    if str(path) == STDOUT:
        raise InputError(f"{option} -: a report is a file; give a path ending in .html")
    path = Path(path)
    if path.suffix.lower() not in (".html", ".htm"):
        raise InputError(f"{option} {path}: a report is an HTML file; give a path ending "
                         "in .html")
    for other in others:
        if other is not None and str(other) != STDOUT and \
                Path(other).resolve() == path.resolve():
            raise InputError(f"{option} {path}: the same path as another output; give the "
                             "report its own path")
    check_target(path, [Path(p) for p in inputs if p], overwrite)
    return path


def write_report(result, path, overwrite: bool = False, title: str | None = None) -> Path:
    """Render a job's report and write it atomically (exclusively unless ``overwrite``)."""
    from ...jobs.result import ParameterError
    from ..atomic import write_text

    if Path(path).exists() and not overwrite and not Path(path).is_dir():
        raise ParameterError("path", str(path), "exists; pass overwrite=True to replace it")
    path = check_report_path(path, [], overwrite)
    write_text(path, render_job(result, title), overwrite=overwrite)
    return path
