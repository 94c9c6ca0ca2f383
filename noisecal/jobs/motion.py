"""Motion against ground truth: aligned residuals → measurement noise R, gate, laws.

Pipeline: read sensor and truth → the map (same names, or a map file) → the
truth quantity of each sensor channel → time offset with interval → truth
at corrected sensor times (refused across truth gaps) → residuals → robust
model, gate, inlier R, bias, colour, covariate law → YAML block and plots.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, replace

import numpy as np

from .. import __version__
from ..analysis.align import Alignment, estimate_offset, residuals
from ..analysis.derived import truth_series
from ..errors import AnalysisError, InputError, UnitError
from ..export import yaml_block
from ..export.atomic import STDOUT, Staged, output_paths
from ..export.motion_plot import motion_figure
from ..fit.measurement import GATE_PROBABILITY, MeasurementModel, fit_measurement
from ..ingest import read_recording
from ..ingest.mapping import MeasurementMap, check_quantity, read_map, same_names
from ..types import Recording
from .progress import StageBars
from .result import JobResult, Parameter, ParameterError, offset_estimate

LAYOUT = "noisecal.motion/1"
MIN_SAMPLES = 100
"""Fewest aligned sensor samples for a covariance with a useful interval."""


@dataclass(frozen=True)
class MotionResult(JobResult):
    """Everything the motion job produced.

    Attributes
    ----------
    sensor, truth : Recording
    mapping : MeasurementMap
    alignment : Alignment
    time : ndarray, shape (n,)
        Sensor times used, s from the sensor's first sample.
    residuals : ndarray, shape (n, c)
        Sensor − truth, SI, angles wrapped.
    covariate : ndarray, shape (n,) or None
    model : MeasurementModel
    sections : dict
    """

    sensor: Recording
    truth: Recording
    mapping: MeasurementMap
    alignment: Alignment
    time: np.ndarray
    residuals: np.ndarray
    covariate: np.ndarray | None
    covariate_unit: str
    model: MeasurementModel
    sections: dict

    def parameters(self) -> list:
        """σ and bias per channel (and the variance law's a, b), outlier fraction, latency."""
        out = []
        for ch in self.model.channels:
            out.append(Parameter(ch.name, "sigma", ch.sigma, {}))
            out.append(Parameter(ch.name, "bias", ch.bias, {"linear": True}))
            if ch.law:
                out.append(Parameter(ch.name, "law_a", ch.law["a"], {"power": 2}))
                out.append(Parameter(ch.name, "law_b", ch.law["b"], {"power": 2}))
        out.append(Parameter("all", "outlier_fraction", self.model.outlier_fraction,
                             {"linear": True}))
        out.append(Parameter("all", "time_offset", offset_estimate(self.alignment),
                             {"linear": True}))
        return out

    def _summary(self) -> str:
        return summary(self)

    def _render(self, out=None) -> str:
        return render(self.sections, out)


def _check_truth_gaps(series, times, path):
    for start, end in series.gaps:
        inside = np.count_nonzero((times > start) & (times < end))
        if inside:
            raise AnalysisError(
                f"{path}: the truth has a gap of {end - start:.3g} s at t = {start:.6g} s where "
                f"the sensor has {inside} sample(s); cut that stretch from the sensor "
                "recording or record the truth without dropouts")


def analyse(sensor: Recording, truth: Recording, mapping: MeasurementMap,
            gate_probability: float = GATE_PROBABILITY, max_offset: float = 1.0,
            seed: int = 1, command: str = "") -> MotionResult:
    """Align, form residuals and fit the measurement model.

    Parameters
    ----------
    sensor, truth : Recording
    mapping : MeasurementMap
    gate_probability : float
        Probability of the chi-square gate (0 < p < 1).
    max_offset : float
        Largest |time offset| searched, s.
    seed : int
        Seed of the robust fit's random starts.
    command : str
        Command line, for the provenance.
    """
    if not 0.5 < gate_probability < 1:
        raise ParameterError("gate", gate_probability, "give a probability between 0.5 "
                             "and 1, e.g. 0.997")
    if not (np.isfinite(max_offset) and max_offset > 0):
        raise ParameterError("max_offset", max_offset, "give a positive time in s")
    names = list(mapping.measures)
    series, units = [], []
    for name in names:
        where = f"{mapping.source}, sensor channel {name!r}"
        if name not in sensor.channels:
            raise InputError(f"{where}: not in {sensor.source.path}; its channels are "
                             f"{', '.join(sensor.channels)}")
        quantity = mapping.measures[name]
        s, unit = truth_series(truth, mapping, quantity, where)
        if unit != sensor.unit_of(name):
            raise UnitError(f"{where}: the sensor gives [{sensor.unit_of(name)}] but the truth "
                            f"quantity {quantity!r} is [{unit}]; map it to a quantity of the "
                            "same dimension")
        series.append(s)
        units.append(unit)
    t_abs = sensor.start_time + np.asarray(sensor.time)
    values = np.column_stack([np.asarray(sensor.channel(n), dtype=float) for n in names])
    alignment = estimate_offset(values, series, t_abs, max_offset,
                                where=f"{sensor.source.path} against {truth.source.path}")
    used = alignment.used
    if np.count_nonzero(used) < MIN_SAMPLES:
        raise AnalysisError(f"{sensor.source.path}: only {np.count_nonzero(used)} sensor "
                            f"samples fall inside the truth's time span; at least {MIN_SAMPLES} "
                            "are needed")
    corrected = t_abs[used] - alignment.offset
    for s in series:
        _check_truth_gaps(s, corrected, truth.source.path)
    r = residuals(values[used], series, t_abs[used], alignment.offset)
    cov, cov_unit = None, ""
    if mapping.covariate:
        check_quantity(mapping, mapping.covariate, f"--covariate {mapping.covariate}")
        cs, cov_unit = truth_series(truth, mapping, mapping.covariate,
                                    f"covariate {mapping.covariate!r}")
        cov = cs.at(corrected)
    model = fit_measurement(r, tuple(names), tuple(units), sensor.period, cov,
                            mapping.covariate or "", cov_unit, gate_probability, seed)
    result = MotionResult(sensor, truth, mapping, alignment, np.asarray(sensor.time)[used], r,
                          cov, cov_unit, model, {})
    sections = _sections(result, seed, max_offset, command)
    return replace(result, sections=sections)


def _input(rec: Recording) -> dict:
    return {"path": rec.source.path, "sha256": rec.source.sha256,
            "size_bytes": rec.source.size_bytes, "format": rec.source.format}


def _shape(sh) -> dict:
    num = yaml_block.num
    return {"jarque_bera_p": num(sh.jarque_bera_p), "anderson_darling": num(sh.anderson_darling),
            "anderson_darling_p": num(sh.anderson_darling_p),
            "excess_kurtosis": num(sh.excess_kurtosis),
            "student_t_dof": num(min(sh.student_t_dof, 1e6))}


def _sections(res: MotionResult, seed: int, max_offset: float, command: str) -> dict:
    num, est = yaml_block.num, yaml_block.estimate
    m, a = res.model, res.alignment
    per = {}
    for ch in m.channels:
        entry = {
            "unit": ch.unit,
            "truth": res.mapping.measures[ch.name],
            "sigma_all_samples": num(ch.sigma_all),
            "effective_samples": num(ch.effective_size),
            "shape_inliers": _shape(ch.shape_inliers),
            "shape_all": _shape(ch.shape_all),
            "ljung_box": {"lags": min(20, max(1, int(np.count_nonzero(m.inliers)) // 5)),
                          "q": num(ch.ljung_box_q), "p": num(ch.ljung_box_p)},
            "acf": [num(v) for v in ch.acf[:21]],
        }
        if ch.gauss_markov:
            entry["gauss_markov"] = {k: est(v) for k, v in ch.gauss_markov.items()}
        if ch.law:
            entry["variance_law"] = {"form": f"sigma^2 = a + b * {ch.law['covariate']}^2",
                                     "covariate": ch.law["covariate"],
                                     "a": est(ch.law["a"]), "b": est(ch.law["b"])}
        per[ch.name] = entry
    rejected = 1 - np.count_nonzero(m.inliers) / m.inliers.shape[0]
    return {
        "layout": LAYOUT,
        "provenance": {
            "tool": f"noisecal {__version__}", "job": "motion", "command": command,
            "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "input": _input(res.sensor), "truth": _input(res.truth),
            "map": yaml_block.side_file(res.mapping.source), "seed": seed,
            # Every setting, so that a re-check runs the same analysis on new data.
            "settings": {"covariate": res.mapping.covariate,
                         "gate": float(res.model.gate_probability),
                         "max_offset_s": float(max_offset), "seed": seed},
            # The conditions of the run: where a law's coefficients are pinned by data.
            **({"conditions": {"covariate_range": [
                num(np.nanmin(res.covariate[m.inliers])),
                num(np.nanmax(res.covariate[m.inliers]))]}}
               if res.covariate is not None else {}),
        },
        "alignment": {
            "time_offset": {"value": num(a.offset), "ci95": [num(a.lower), num(a.upper)],
                            "unit": "s", "method": "cross-correlation of motion, refined by "
                            "a Huber loss; sandwich interval (Newey-West)"},
            "convention": "a sensor sample stamped t measured the truth at t - time_offset "
                          "(positive: sensor latency)",
            "coarse_s": num(a.coarse),
            "max_offset_s": num(max_offset),
            "samples_used": int(res.time.shape[0]),
            "overlap_s": [num(res.time[0]), num(res.time[-1])],
        },
        "measurement": {
            "order": list(m.order),
            "units": list(m.units),
            "sigma": {ch.name: est(ch.sigma) for ch in m.channels},
            "bias": {ch.name: est(ch.bias) for ch in m.channels},
            "R": yaml_block.matrix(m.R),
            "R_ci95": {"low": yaml_block.matrix(m.R_low), "high": yaml_block.matrix(m.R_high)},
            "R_all_samples": yaml_block.matrix(m.R_all),
            **yaml_block.ros_covariance(m.order, m.units, m.R),
            "outlier_fraction": {"value": num(m.outlier_fraction.value),
                                 "ci95": [num(m.outlier_fraction.lower),
                                          num(m.outlier_fraction.upper)],
                                 "method": m.outlier_fraction.method},
            "gate": {"probability": num(m.gate_probability), "dimension": len(m.order),
                     "threshold_chi2": num(m.gate_threshold),
                     "rejected_fraction": num(rejected),
                     "expected_if_gaussian": num(1 - m.gate_probability)},
            "robust": {"location": [num(v) for v in m.robust_location],
                       "scatter": yaml_block.matrix(m.robust_scatter),
                       "method": "reweighted minimum covariance determinant"},
            "channels": per,
            "notes": list(m.notes),
        },
    }


_COMMENTS = {
    "provenance": "Where these numbers came from.",
    "alignment": "Sensor-truth time offset with its 95 % interval (see 'convention').",
    "measurement": ("Measurement noise over 'order' (SI). R: covariance of the samples inside\n"
                    "the chi-square gate, corrected for the cut; R_all_samples: with outliers.\n"
                    "Use R with the same gate in the filter. ros_covariance: R as the ROS\n"
                    "messages' row-major arrays (REP 103). A starting point: confirm on the\n"
                    "real system."),
}


def summary(res: MotionResult) -> str:
    """Plain-text summary: offset, sigmas, outliers, notes."""
    a, m = res.alignment, res.model
    lines = [f"{res.sensor.source.path} against {res.truth.source.path}: "
             f"{res.time.shape[0]} aligned samples",
             f"  time offset {a.offset * 1e3:.4g} ms (95 %: {a.lower * 1e3:.4g} … "
             f"{a.upper * 1e3:.4g} ms; positive = sensor late)"]
    for ch in m.channels:
        s = ch.sigma
        lines.append(f"  {ch.name:<16} sigma {s.value:.4g} (95 %: {s.lower:.4g} … {s.upper:.4g}) "
                     f"{s.unit}; bias {ch.bias.value:.3g} {s.unit}")
    o = m.outlier_fraction
    rejected = 1 - np.count_nonzero(m.inliers) / m.inliers.shape[0]
    lines.append(f"  outliers {100 * o.value:.3g} % (95 %: {100 * o.lower:.3g} … "
                 f"{100 * o.upper:.3g} %); the gate chi2({len(m.order)}) <= "
                 f"{m.gate_threshold:.4g} (p = {m.gate_probability}) rejects "
                 f"{100 * rejected:.3g} %")
    lines += [f"  note: {n}" for n in m.notes]
    return "\n".join(lines)


def run_motion(sensor_path: str, truth_path: str, out: str, map_path: str | None = None,
               plot: str | None = None, covariate: str | None = None,
               gate_probability: float = GATE_PROBABILITY, max_offset: float = 1.0,
               overwrite: bool = False, seed: int = 1, quiet: bool = False,
               command: str = "", use_cache: bool = True, record=None,
               report: str | None = None, output_as: str = "noisecal",
               node: str | None = None, units: str = "si") -> MotionResult:
    """Read, analyse and write the YAML block and the plot.

    Parameters
    ----------
    sensor_path, truth_path : str
        Recordings (formats of :func:`noisecal.ingest.read_recording`).
    out : str
        YAML output path.
    map_path : str, optional
        Measurement map (default: same channel names).
    plot : str, optional
        PNG path; default the YAML path with ``.png``.
    covariate : str, optional
        Truth quantity to fit the variance law against (overrides the map's).
    gate_probability, max_offset, seed, command
        See :func:`analyse`.
    record : noisecal.jobs.history.Recorder, optional
        The history the run is stored in, together with its files.
    report : str, optional
        HTML report path (self-contained), written together with the other outputs.
    output_as : {"noisecal", "ros"}
        What ``out`` holds: the noisecal block, or a ROS 2 parameter file
        (:mod:`noisecal.export.ros_params`).
    node : str, optional
        Node name of the ROS parameter file.
    units : {"si", "customary"}
        ``customary``: fitted numbers also in the input's units.
    """
    from .static import _report_path

    inputs = [sensor_path, truth_path] + ([map_path] if map_path else [])
    out_path, plot_path = output_paths(out, plot, inputs, overwrite,
                                       getattr(record, "paths", ()))
    report_path = _report_path(report, inputs, overwrite, record, out_path, plot_path)
    bars = StageBars(quiet)
    try:
        sensor = read_recording(sensor_path, use_cache=use_cache, progress=bars)
        truth = read_recording(truth_path, use_cache=use_cache, progress=bars)
    finally:
        bars.close()
    mapping = (read_map(map_path, covariate) if map_path
               else same_names(sensor.channels, truth.channels, covariate))
    res = analyse(sensor, truth, mapping, gate_probability, max_offset, seed, command)
    with Staged(overwrite) as staged:
        if plot_path is not None:
            motion_figure(res, staged.path(plot_path))
        if report_path is not None:
            from ..export.html import render_job

            staged.text(report_path, render_job(res))
        staged.text(out_path, yaml_block.render_output(
            res, None if out_path == STDOUT else out_path, output_as, node, units))
        staged.commit(record(res) if record else None)
    return res


def render(sections: dict, out=None) -> str:
    """The YAML text of the motion block (side files relative to ``out``'s folder)."""
    return yaml_block.render(sections, f"noisecal motion against truth ({LAYOUT})", _COMMENTS,
                             out=out)
