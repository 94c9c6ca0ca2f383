"""Odometry against ground truth: α1…α4 with intervals, slip, quantization, per-step Q.

Pipeline: read the odometry (wheel ticks or increments) and truth recordings
→ the config → dead-reckoned motion per window → time offset (speed and turn
rate against the truth's) → truth motion per window at corrected times →
α fit with slip left out → YAML block and plot.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, replace

import numpy as np

from .. import __version__
from ..analysis.align import Alignment, estimate_offset
from ..analysis.derived import rate_series, truth_series
from ..errors import AnalysisError, InputError
from ..export import yaml_block
from ..export.atomic import STDOUT, Staged, output_paths
from ..export.odometry_plot import odometry_figure
from ..fit.odometry import OdometryModel, decompose, encoder_pose, fit_odometry, \
    quantization, quantization_floor, step_noise
from ..ingest import read_recording
from ..ingest.mapping import MeasurementMap, OdometryConfig, read_odometry_config
from ..types import Recording
from .progress import StageBars
from .result import JobResult, Parameter, ParameterError, offset_estimate

LAYOUT = "noisecal.odometry/1"
MIN_WINDOWS = 30
RATE_SPAN_S = 0.2
"""Span of the encoder speed and turn rate used for the time alignment, s."""


@dataclass(frozen=True)
class OdometryResult(JobResult):
    """Everything the odometry job produced.

    Attributes
    ----------
    odometry, truth : Recording
    config : OdometryConfig
    alignment : Alignment
    model : OdometryModel
    slow_check : dict or None
        Encoders: translation-error variance of the slowest tenth of the windows
        against the model there (quantization floor included), and the spread
        of the per-sample errors (keys ``step_*``) beside one step's quantization.
    step : dict
        Per-step process noise (see :func:`noisecal.fit.odometry.step_noise`).
    sections : dict
    """

    odometry: Recording
    truth: Recording
    config: OdometryConfig
    alignment: Alignment
    model: OdometryModel
    slow_check: dict | None
    step: dict
    sections: dict

    def parameters(self) -> list:
        """α1…α4 (variance coefficients) and the latency."""
        out = [Parameter("odometry", k, self.model.alpha[k], {"power": 2})
               for k in ("alpha1", "alpha2", "alpha3", "alpha4")]
        out.append(Parameter("all", "time_offset", offset_estimate(self.alignment),
                             {"linear": True}))
        return out

    def _summary(self) -> str:
        return summary(self)

    def _render(self, out=None) -> str:
        return yaml_block.render(self.sections, f"noisecal odometry against truth ({LAYOUT})",
                                 _COMMENTS, out=out)


def _channel(rec, name, unit, where):
    if name not in rec.channels:
        raise InputError(f"{where}: {rec.source.path} has no channel {name!r}; its channels "
                         f"are {', '.join(rec.channels)}")
    if rec.unit_of(name) != unit:
        raise InputError(f"{where}: channel {name!r} is [{rec.unit_of(name)}], expected an "
                         f"{'angle' if unit == 'rad' else 'length' if unit == 'm' else 'count'}"
                         f" ([{unit}])")
    return np.asarray(rec.channel(name), dtype=float)


def _odometry_motion(rec: Recording, cfg: OdometryConfig):
    """Window boundaries (sample indices) and the odometry's motion in each window.

    Returns
    -------
    bounds : ndarray of int, shape (w, 2)
    motion : ndarray, shape (w, 3)
    rate : tuple of (times, speed, turn_rate, span)
        Rates over intervals of ``span`` s, at their midpoints, for alignment.
    window_s : float
    track : tuple of ndarray, shape (n,) each, or None
        Encoders: the dead-reckoned pose (x, y, θ) at every sample.
    """
    t = np.asarray(rec.time)
    where = f"{cfg.source}"
    if cfg.kind == "encoders":
        left = _channel(rec, cfg.channels["left"], "1", where)
        right = _channel(rec, cfg.channels["right"], "1", where)
        x, y, th = encoder_pose(left, right, cfg.ticks_per_rev, cfg.wheel_radius_m,
                                cfg.track_width_m)
        k = max(1, int(round(cfg.window_s / rec.period)))
        starts = np.arange(0, rec.n - k, k)
        bounds = np.column_stack([starts, starts + k])
        motion = np.column_stack(decompose(x[bounds[:, 0]], y[bounds[:, 0]], th[bounds[:, 0]],
                                           x[bounds[:, 1]], y[bounds[:, 1]], th[bounds[:, 1]]))
        # Rates over RATE_SPAN_S: one tick of a coarse encoder at 50 Hz is a large
        # step in speed and turn rate; a centred difference has no delay.
        m = max(1, int(round(RATE_SPAN_S / rec.period)))
        dt = t[m:] - t[:-m]
        speed = np.hypot(x[m:] - x[:-m], y[m:] - y[:-m]) / dt
        turn = (th[m:] - th[:-m]) / dt
        return bounds, motion, (0.5 * (t[m:] + t[:-m]), speed, turn, m * rec.period), \
            k * rec.period, (x, y, th)
    dx = _channel(rec, cfg.channels["dx"], "m", where)
    dy = _channel(rec, cfg.channels["dy"], "m", where)
    dyaw = _channel(rec, cfg.channels["dyaw"], "rad", where)
    bounds = np.column_stack([np.arange(rec.n - 1), np.arange(1, rec.n)])
    zero = np.zeros(rec.n - 1)
    motion = np.column_stack(decompose(zero, zero, zero, dx[1:], dy[1:], dyaw[1:]))
    dt = np.diff(t)
    return bounds, motion, (t[:-1] + 0.5 * dt, np.hypot(dx[1:], dy[1:]) / dt, dyaw[1:] / dt,
                            float(np.median(dt))), float(np.median(dt)), None


def _slow_check(model: OdometryModel) -> dict:
    """Measured against modelled translation variance in the slowest tenth of windows."""
    keep = ~model.slip
    trans = model.motion_odo[keep, 1]
    slow = trans <= np.percentile(trans, 10)
    measured = float(np.mean(model.errors[keep, 1][slow] ** 2))
    modelled = float(np.mean(model.variances(model.motion_odo[keep][slow])[:, 1]))
    return {"windows": int(np.count_nonzero(slow)), "max_translation_m": float(trans[slow].max()),
            "measured_variance_m2": measured, "model_variance_m2": modelled,
            "quantization_share": float(model.floor[1] / modelled)}


def _per_step(odo, track, truth_pose, offset, cfg) -> dict:
    """Spread of the per-sample translation and rotation errors against the truth,
    beside the quantization floor of one sample step (which dominates at a high rate)."""
    t = odo.start_time + np.asarray(odo.time) - offset
    x, y, yaw = truth_pose
    ok = (t >= x.time[0]) & (t <= x.time[-1])
    idx = np.flatnonzero(ok[:-1] & ok[1:])
    ox, oy, oth = track
    tx, ty, tth = (s.at(t) for s in truth_pose)
    d_odo = np.hypot(ox[idx + 1] - ox[idx], oy[idx + 1] - oy[idx])
    d_true = np.hypot(tx[idx + 1] - tx[idx], ty[idx + 1] - ty[idx])
    r_odo = oth[idx + 1] - oth[idx]
    r_true = tth[idx + 1] - tth[idx]
    q = quantization(cfg.ticks_per_rev, cfg.wheel_radius_m, cfg.track_width_m)
    return {"step_translation_error_sd_m": float(np.std(d_odo - d_true)),
            "step_rotation_error_sd_rad": float(np.std(r_odo - r_true)),
            "step_quantization_translation_sd_m": float(np.sqrt(q["translation_variance_m2"])),
            "step_quantization_rotation_sd_rad": float(np.sqrt(q["rotation_variance_rad2"]))}


def analyse(odo: Recording, truth: Recording, cfg: OdometryConfig, max_offset: float = 1.0,
            command: str = "") -> OdometryResult:
    """Fit the odometry model of a drive against truth."""
    if not (np.isfinite(max_offset) and max_offset > 0):
        raise ParameterError("max_offset", max_offset, "give a positive time in s")
    bounds, motion, (tm, speed, turn, span), window_s, track = _odometry_motion(odo, cfg)
    mapping = MeasurementMap({}, cfg.pose, source=cfg.source)
    where = f"{cfg.source}, pose"
    truth_speed, truth_turn = rate_series(truth, cfg.pose, span, where)
    t_abs = odo.start_time + tm
    alignment = estimate_offset(np.column_stack([speed, turn]), [truth_speed, truth_turn],
                                t_abs, max_offset,
                                where=f"{odo.source.path} against {truth.source.path}")
    # Truth pose at the corrected window ends; windows must lie inside the truth.
    times = odo.start_time + np.asarray(odo.time)[bounds] - alignment.offset
    x, y, yaw = (truth_series(truth, mapping, q, where)[0] for q in (
        mapping.pose["x"], mapping.pose["y"], mapping.pose["yaw"]))
    lo = truth_speed.time[0]
    hi = truth_speed.time[-1]
    inside = (times[:, 0] >= lo) & (times[:, 1] <= hi)
    for start, end in truth_speed.gaps:
        inside &= ~((times[:, 1] > start) & (times[:, 0] < end))
    if np.count_nonzero(inside) < MIN_WINDOWS:
        raise AnalysisError(f"{odo.source.path}: only {np.count_nonzero(inside)} odometry "
                            f"windows lie inside the truth (without gaps); at least "
                            f"{MIN_WINDOWS} are needed: record a longer drive")
    times, motion, bounds = times[inside], motion[inside], bounds[inside]
    pose = [(s.at(times[:, 0]), s.at(times[:, 1])) for s in (x, y, yaw)]
    true = np.column_stack(decompose(pose[0][0], pose[1][0], pose[2][0],
                                     pose[0][1], pose[1][1], pose[2][1]))
    floor = np.zeros(3)
    if cfg.kind == "encoders":
        floor = quantization_floor(cfg.ticks_per_rev, cfg.wheel_radius_m, cfg.track_width_m)
    moving = (true[:, 1] > 0) | (np.abs(true[:, 0] + true[:, 2]) > 0)
    if np.count_nonzero(moving) < MIN_WINDOWS:
        raise AnalysisError(f"{odo.source.path}: fewer than {MIN_WINDOWS} windows with motion; "
                            "drive while recording")
    start_s = np.asarray(odo.time)[bounds[moving, 0]]
    model = fit_odometry(motion[moving], true[moving], start_s, window_s, floor)
    slow = None
    if cfg.kind == "encoders":
        slow = _slow_check(model)
        slow.update(_per_step(odo, track, (x, y, yaw), alignment.offset, cfg))
    keep = ~model.slip
    step = step_noise(model, float(np.median(model.motion_true[keep, 1]) / window_s),
                      float(np.median(np.abs(model.motion_true[keep, 0] +
                                             model.motion_true[keep, 2])) / window_s),
                      odo.period)
    res = OdometryResult(odo, truth, cfg, alignment, model, slow, step, {})
    return replace(res, sections=_sections(res, max_offset, command))


def _sections(res: OdometryResult, max_offset: float, command: str) -> dict:
    num, est, mat = yaml_block.num, yaml_block.estimate, yaml_block.matrix
    m, a, cfg = res.model, res.alignment, res.config
    out = {
        "model": "odometry motion model (rot1, trans, rot2), variance form: var(rot1) = "
                 "alpha1 rot1^2 + alpha2 trans^2; var(trans) = alpha3 trans^2 + alpha4 "
                 "(rot1^2 + rot2^2); var(rot2) = alpha1 rot2^2 + alpha2 trans^2",
        "input": cfg.kind,
        "window_s": num(m.window_s),
        "windows_used": int(np.count_nonzero(~m.slip)),
        **{k: est(v) for k, v in m.alpha.items()},
        "scale_error": {k: est(v) for k, v in m.scale_error.items()},
        "slip": {"fraction_of_windows": num(float(m.slip.mean())),
                 "threshold_sigma": 4.0,
                 "episodes": [{k: num(v) for k, v in e.items()} for e in m.episodes]},
    }
    if cfg.kind == "encoders":
        q = quantization(cfg.ticks_per_rev, cfg.wheel_radius_m, cfg.track_width_m)
        out["quantization"] = {
            **{k: num(v) for k, v in q.items()},
            "slowest_windows": {k: num(v) for k, v in res.slow_check.items()
                                if not k.startswith("step_")},
            "per_step": {k[5:]: num(v) for k, v in res.slow_check.items()
                         if k.startswith("step_")},
            "rule": "one count of error at each end of a window, uniform: q^2/12 per "
                    "translation (Widrow & Kollar)",
        }
    s = res.step
    out["step"] = {
        "dt_s": num(s["dt_s"]), "speed_mps": num(s["speed_mps"]),
        "turn_rate_radps": num(s["turn_rate_radps"]),
        "motion_variance": [num(v) for v in s["motion_variance"]],
        "Q_pose": mat(s["Q_pose"]), "order": ["x", "y", "yaw"],
        "assumption": "per-step errors independent: alpha per step = alpha * window_s / dt; "
                      "Q = V M V^T at yaw 0 for the median speed and turn rate",
    }
    out["notes"] = list(m.notes)
    return {
        "layout": LAYOUT,
        "provenance": {
            "tool": f"noisecal {__version__}", "job": "motion --odometry", "command": command,
            "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "input": {"path": res.odometry.source.path, "sha256": res.odometry.source.sha256},
            "truth": {"path": res.truth.source.path, "sha256": res.truth.source.sha256},
            "config": yaml_block.side_file(cfg.source),
            "settings": {"max_offset_s": float(max_offset)},
        },
        "alignment": {
            "time_offset": {"value": num(a.offset), "ci95": [num(a.lower), num(a.upper)],
                            "unit": "s", "method": "speed and turn rate against the truth's; "
                            "see the motion job"},
            "convention": "an odometry sample stamped t describes the truth at t - time_offset",
            "max_offset_s": num(max_offset),
        },
        "odometry": out,
    }


_COMMENTS = {
    "provenance": "Where these numbers came from.",
    "alignment": "Odometry-truth time offset with its 95 % interval.",
    "odometry": ("Odometry motion model (Thrun, Burgard & Fox 2005, ch. 5) fitted over windows\n"
                 "of window_s; slip windows left out. step: process noise of one prediction\n"
                 "step. A starting point: confirm on the real system."),
}


def summary(res: OdometryResult) -> str:
    """Plain-text summary of the odometry fit."""
    a, m = res.alignment, res.model
    lines = [f"{res.odometry.source.path} ({res.config.kind}) against "
             f"{res.truth.source.path}: {np.count_nonzero(~m.slip)} windows of "
             f"{m.window_s:.3g} s",
             f"  time offset {a.offset * 1e3:.4g} ms (95 %: {a.lower * 1e3:.4g} … "
             f"{a.upper * 1e3:.4g} ms)"]
    for k, e in m.alpha.items():
        text = (f"{e.value:.4g} (95 %: {e.lower:.4g} … {e.upper:.4g})" if e.resolved
                else f"< {e.upper:.4g} (upper bound)")
        lines.append(f"  {k} {text} {e.unit}")
    lines.append(f"  slip: {len(m.episodes)} episode(s), {100 * m.slip.mean():.3g} % of windows")
    lines += [f"  note: {n}" for n in m.notes]
    return "\n".join(lines)


def run_odometry(odometry_path: str, truth_path: str, config_path: str, out: str,
                 plot: str | None = None, max_offset: float = 1.0, overwrite: bool = False,
                 quiet: bool = False, command: str = "", use_cache: bool = True,
                 record=None, report: str | None = None) -> OdometryResult:
    """Read, analyse and write the odometry YAML block and plot (and store the run in
    ``record``, a :class:`noisecal.jobs.history.Recorder`, together with them; and the
    HTML ``report`` when given)."""
    from .static import _report_path

    out_path, plot_path = output_paths(out, plot, [odometry_path, truth_path, config_path],
                                       overwrite, getattr(record, "paths", ()))
    report_path = _report_path(report, [odometry_path, truth_path, config_path], overwrite,
                               record, out_path, plot_path)
    cfg = read_odometry_config(config_path)
    bars = StageBars(quiet)
    try:
        odo = read_recording(odometry_path, use_cache=use_cache, progress=bars)
        truth = read_recording(truth_path, use_cache=use_cache, progress=bars)
    finally:
        bars.close()
    res = analyse(odo, truth, cfg, max_offset, command)
    with Staged(overwrite) as staged:
        if plot_path is not None:
            odometry_figure(res, staged.path(plot_path))
        if report_path is not None:
            from ..export.html import render_job

            staged.text(report_path, render_job(res))
        staged.text(out_path, res._render(None if out_path == STDOUT else out_path))
        staged.commit(record(res) if record else None)
    return res
