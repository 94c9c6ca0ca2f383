"""Camera against surveyed targets: pixel R, outliers, gate, ground noise against range.

Pipeline: read the camera file, the survey and the detections (checked against
each other) → optionally a ground homography by normalized DLT from the floor
targets → :func:`noisecal.fit.camera.fit_camera` → YAML block and plots.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, replace

import numpy as np

from .. import __version__
from ..analysis import camera_geometry as geo
from ..errors import InputError
from ..export import yaml_block
from ..export.atomic import STDOUT, Staged, output_paths
from ..export.camera_plot import camera_figure
from ..fit.camera import CameraModel, fit_camera
from ..fit.measurement import GATE_PROBABILITY
from ..ingest.camera import Camera, Detections, Survey, check_homography, read_camera, \
    read_detections, read_survey
from .result import JobResult, Parameter, ParameterError

LAYOUT = "noisecal.targets/1"
FLOOR_Z_M = 0.01
"""Targets within this height of z = 0 count as floor points for the homography."""
GROUND_METHODS = ("ray", "homography", "dlt")


@dataclass(frozen=True)
class TargetsResult(JobResult):
    """Everything the targets job produced.

    Attributes
    ----------
    camera : Camera
        As used (with the estimated homography for ``--ground dlt``).
    survey : Survey
    detections : Detections
    projected : ndarray, shape (k, 2)
        Each surveyed target projected, px.
    ground : str
    model : CameraModel
    sections : dict
    """

    camera: Camera
    survey: Survey
    detections: Detections
    projected: np.ndarray
    ground: str
    model: CameraModel
    sections: dict

    def parameters(self) -> list:
        """Pixel σ of u and v (the whole R) and the outlier fraction."""
        more = {"more_of": "targets (the spread between targets limits the systematic part)"}
        out = [Parameter("pixel", k, self.model.sigma[k], more) for k in ("u", "v")]
        out.append(Parameter("all", "outlier_fraction", self.model.pixel.outlier_fraction,
                             {"linear": True}))
        return out

    def _summary(self) -> str:
        return summary(self)

    def _render(self, out=None) -> str:
        return yaml_block.render(self.sections, f"noisecal camera against surveyed targets "
                                 f"({LAYOUT})", _COMMENTS, out=out)


def estimate_ground_homography(camera: Camera, survey: Survey, det: Detections) -> np.ndarray:
    """Homography ground (x, y) → undistorted pixel, by normalized DLT from the floor
    targets' median detections."""
    idx = survey.index(det.ids)
    floor = [k for k in range(len(survey.ids)) if abs(survey.xyz[k, 2]) <= FLOOR_Z_M and
             np.any(idx == k)]
    if len(floor) < 4:
        raise InputError(f"{survey.source}: --ground dlt needs at least 4 detected floor "
                         f"targets (|z| <= {FLOOR_Z_M} m); {len(floor)} found")
    med = np.array([np.median(det.uv[idx == k], axis=0) for k in floor])
    H = geo.homography_dlt(survey.xyz[floor, :2], geo.undistorted_pixels(med, camera))
    check_homography(H, f"{survey.source}: the estimated homography")
    return H


POSE_CHANNELS = ("x", "y", "z", "roll", "pitch", "yaw")


def euler_zyx(roll: np.ndarray, pitch: np.ndarray, yaw: np.ndarray) -> np.ndarray:
    """World-from-body rotations R = Rz(yaw) Ry(pitch) Rx(roll), shape (n, 3, 3)."""
    cr, sr, cp, sp, cy, sy = (np.cos(roll), np.sin(roll), np.cos(pitch), np.sin(pitch),
                              np.cos(yaw), np.sin(yaw))
    return np.stack([
        np.stack([cy * cp, cy * sp * sr - sy * cr, cy * sp * cr + sy * sr], -1),
        np.stack([sy * cp, sy * sp * sr + cy * cr, sy * sp * cr - cy * sr], -1),
        np.stack([-sp, cp * sr, cp * cr], -1)], -2)


def posed_camera(camera: Camera, poses, det: Detections) -> Camera:
    """The camera at each detection: body pose from the poses recording (linear in
    position, in unwrapped angles) composed with the camera file's pose, read as
    body-from-camera.

    Raises
    ------
    InputError
        A pose channel missing or of the wrong unit, or detections outside the
        poses' time span.
    """
    missing = [c for c in POSE_CHANNELS if c not in poses.channels]
    if missing:
        raise InputError(f"{poses.source.path}: --poses needs channels x, y, z [m] and "
                         f"roll, pitch, yaw [rad]; missing {', '.join(missing)}")
    for c in POSE_CHANNELS:
        unit = "m" if c in ("x", "y", "z") else "rad"
        if poses.unit_of(c) != unit:
            raise InputError(f"{poses.source.path}, column {c!r}: unit [{poses.unit_of(c)}] "
                             f"is not {'a length' if unit == 'm' else 'an angle'}")
    tp = poses.start_time + np.asarray(poses.time)
    outside = np.flatnonzero((det.time < tp[0]) | (det.time > tp[-1]))
    if outside.size:
        raise InputError(f"{det.source}, line {outside[0] + 2}: detection time "
                         f"{det.time[outside[0]]:.6g} s is outside the poses "
                         f"({tp[0]:.6g} … {tp[-1]:.6g} s); the poses must cover the session")
    at = {c: np.interp(det.time, tp, np.unwrap(np.asarray(poses.channel(c)))
                       if c in ("roll", "pitch", "yaw") else np.asarray(poses.channel(c)))
          for c in POSE_CHANNELS}
    R_wb = euler_zyx(at["roll"], at["pitch"], at["yaw"])
    t_wb = np.column_stack([at["x"], at["y"], at["z"]])
    R = R_wb @ camera.R
    t = t_wb + np.einsum("nij,j->ni", R_wb, camera.t)
    return replace(camera, R=R, t=t)


def analyse(camera: Camera, survey: Survey, det: Detections, ground: str = "ray",
            gate_probability: float = GATE_PROBABILITY, seed: int = 1,
            command: str = "") -> TargetsResult:
    """Fit the camera's noise and build the YAML sections."""
    if ground not in GROUND_METHODS:
        raise ParameterError("ground", ground, f"use one of {', '.join(GROUND_METHODS)}")
    if not 0.5 < gate_probability < 1:
        raise ParameterError("gate", gate_probability, "give a probability between 0.5 and 1")
    if camera.R.ndim == 3:
        projected = np.array([np.median(geo.project(
            np.repeat(survey.xyz[k:k + 1], int(np.count_nonzero(hit)), 0),
            replace(camera, R=camera.R[hit], t=camera.t[hit]),
            f"{survey.source}: target {survey.ids[k]!r}, "), axis=0)
            if np.any(hit := (survey.index(det.ids) == k)) else [np.nan, np.nan]
            for k in range(len(survey.ids))])
    else:
        # Only the detected targets must be in view; a survey may hold others.
        seen = np.unique(survey.index(det.ids))
        projected = np.full((len(survey.ids), 2), np.nan)
        projected[seen] = geo.project(survey.xyz[seen], camera,
                                      f"{survey.source}: a detected target, ")
    if det.uv.shape[0] < 50:
        raise InputError(f"{det.source}: {det.uv.shape[0]} detections; at least 50 are needed "
                         "for a covariance with a useful interval")
    used = camera
    if ground == "dlt":
        if camera.R.ndim == 3:
            raise InputError("--ground dlt needs a fixed camera: with --poses the image-to-"
                             "ground mapping changes every frame; use --ground ray")
        used = replace(camera, homography=estimate_ground_homography(camera, survey, det))
    model = fit_camera(used, survey, det, gate_probability,
                       "homography" if ground in ("homography", "dlt") else "ray", seed)
    res = TargetsResult(used, survey, det, projected, ground, model, {})
    return replace(res, sections=_sections(res, seed, command))


def _est(e):
    return yaml_block.estimate(e)


def _clean(value):
    """Lists and floats for YAML (NaN → None, rounded)."""
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, (bool, str, int)) or value is None:
        return value
    return yaml_block.num(value)


def _sections(res: TargetsResult, seed: int, command: str) -> dict:
    m, num, mat = res.model, yaml_block.num, yaml_block.matrix
    p = m.pixel
    rejected = 1 - np.count_nonzero(p.inliers) / p.inliers.shape[0]
    laws = {k: {"form": f"sigma^2 = a + b * range^{law['power']}", "a": _est(law["a"]),
                "b": _est(law["b"])} for k, law in m.laws.items()}
    camera = {
        "pixel": {
            "order": ["u", "v"],
            "sigma": {k: _est(v) for k, v in m.sigma.items()},
            "R": mat(m.R_camera),
            "R_ci95": {"low": mat(m.R_camera_low), "high": mat(m.R_camera_high)},
            "R_jitter": mat(p.R),
            "R_systematic": mat(m.R_systematic),
            "R_survey_share": mat(m.R_survey),
            "sigma_systematic": {k: yaml_block.num(v.value) for k, v in m.systematic.items()},
            "R_jitter_all_samples": mat(p.R_all),
            "composition": "R = R_jitter (frame to frame, about each target's own offset) + "
                           "R_systematic (spread of the targets' offsets, less the survey's "
                           "share R_survey_share)",
            "bias": {ch.name: _est(ch.bias) for ch in p.channels},
            "unit": "px",
        },
        "outlier_fraction": {"value": num(p.outlier_fraction.value),
                             "ci95": [num(p.outlier_fraction.lower),
                                      num(p.outlier_fraction.upper)],
                             "method": p.outlier_fraction.method},
        "gate": {"probability": num(p.gate_probability), "dimension": 2,
                 "threshold_chi2": num(p.gate_threshold), "rejected_fraction": num(rejected),
                 "expected_if_gaussian": num(1 - p.gate_probability)},
        "ground": {
            "method": {"ray": "each pixel's ray on the horizontal plane at the target's height",
                       "homography": "the camera file's homography (undistorted pixels)",
                       "dlt": "homography by normalized DLT from the floor targets"}[res.ground],
            "per_target_mean_removed": True,
            "laws": laws,
            "table": _clean(m.table),
        },
        "range_bearing": {k: _est(v) for k, v in m.range_bearing.items()},
        "regions": {k: {"detections": v["detections"], "u": _est(v["u"]), "v": _est(v["v"])}
                    for k, v in m.regions.items()},
        "outliers_by_range": _clean(m.outliers_by_range),
        "outliers_by_score": _clean(m.outliers_by_score),
        "targets": _clean(m.targets),
        "notes": list(m.notes),
    }
    if res.ground == "dlt":
        camera["ground"]["homography"] = mat(res.camera.homography)
    return {
        "layout": LAYOUT,
        "provenance": {
            "tool": f"noisecal {__version__}", "job": "targets", "command": command,
            "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "detections": {"path": res.detections.source, "sha256": res.detections.sha256},
            "survey": yaml_block.side_file(res.survey.source),
            "camera": yaml_block.side_file(res.camera.source), "seed": seed,
            # Every setting, so that a re-check runs the same analysis on new data; a
            # moving camera (one pose per detection) needs the new session's poses.
            "settings": {"ground": res.ground, "gate": float(res.model.pixel.gate_probability),
                         "seed": seed, "poses": bool(np.ndim(res.camera.R) == 3)},
        },
        "camera": camera,
    }


_COMMENTS = {
    "provenance": "Where these numbers came from.",
    "camera": ("Camera measurement noise. pixel.R: the camera's own covariance of the\n"
               "detections inside the gate (survey share removed), px^2. ground: noise on\n"
               "the ground plane against range, with fitted laws and a table. A starting\n"
               "point: confirm on the real system."),
}


def summary(res: TargetsResult) -> str:
    """Plain-text summary of the camera fit."""
    m = res.model
    o = m.pixel.outlier_fraction
    lines = [f"{res.detections.source}: {m.detected.shape[0]} detections of "
             f"{len(m.targets)} targets"]
    for k, e in m.sigma.items():
        text = (f"{e.value:.4g} (95 %: {e.lower:.4g} … {e.upper:.4g})" if e.resolved
                else f"< {e.upper:.4g} (upper bound)")
        lines.append(f"  pixel sigma {k} {text} px")
    lines.append(f"  outliers {100 * o.value:.3g} % (95 %: {100 * o.lower:.3g} … "
                 f"{100 * o.upper:.3g} %)")
    for key, law in m.laws.items():
        b = law["b"]
        text = (f"{b.value:.3g} (95 %: {b.lower:.3g} … {b.upper:.3g})" if b.resolved
                else f"< {b.upper:.3g}")
        lines.append(f"  ground {key}: sigma^2 = a + b r^{law['power']}, b = {text} {b.unit}")
    for row in m.table:
        prop = row["propagated_radial_m"]
        first = f"{prop:.3g}" if prop is not None else "-"
        lines.append(f"    range {row['range_m']:6.3g} m: sigma radial "
                     f"{row['sigma_radial_m']:.3g} m (first order {first}), lateral "
                     f"{row['sigma_lateral_m']:.3g} m")
    lines += [f"  note: {n}" for n in m.notes]
    return "\n".join(lines)


def run_targets(detections_path: str, survey_path: str, camera_path: str, out: str,
                plot: str | None = None, ground: str = "ray",
                gate_probability: float = GATE_PROBABILITY, overwrite: bool = False,
                seed: int = 1, command: str = "", poses_path: str | None = None,
                record=None, report: str | None = None) -> TargetsResult:
    """Read, analyse and write the camera YAML block and plot (and store the run in
    ``record``, a :class:`noisecal.jobs.history.Recorder`, together with them; and the
    HTML ``report`` when given)."""
    from .static import _report_path

    inputs = [detections_path, survey_path, camera_path] + ([poses_path] if poses_path else [])
    out_path, plot_path = output_paths(out, plot, inputs, overwrite,
                                       getattr(record, "paths", ()))
    report_path = _report_path(report, inputs, overwrite, record, out_path, plot_path)
    camera = read_camera(camera_path)
    survey = read_survey(survey_path)
    det = read_detections(detections_path, survey, camera)
    if poses_path:
        from ..ingest import read_recording

        camera = posed_camera(camera, read_recording(poses_path), det)
    res = analyse(camera, survey, det, ground, gate_probability, seed, command)
    with Staged(overwrite) as staged:
        if plot_path is not None:
            camera_figure(res, staged.path(plot_path))
        if report_path is not None:
            from ..export.html import render_job

            staged.text(report_path, render_job(res))
        staged.text(out_path, res._render(None if out_path == STDOUT else out_path))
        staged.commit(record(res) if record else None)
    return res
