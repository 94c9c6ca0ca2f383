"""Camera measurement noise: pixel R, survey share, ground noise against range.

Order of work: pixel residuals (detected − projected) → the measurement model
of :mod:`noisecal.fit.measurement` (robust fit, gate, inlier R, effective
sample size) → the survey's share of that covariance (each target's survey
σ through the projection Jacobian) removed → ground residuals (each pixel's
ray on the plane at the target's height, or a homography) split into the
radial (along the line of sight) and lateral parts → range laws
σ²_radial = a + b·r⁴ and σ²_lateral = a + b·r² (what a pinhole above the
ground predicts for constant pixel noise) with intervals → the first-order
propagation J Σ_px Jᵀ per target against the empirical covariance and a
Monte Carlo of the exact mapping (where they part, the linearisation fails).
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
from scipy.special import ndtri

from ..analysis import camera_geometry as geo
from ..errors import InputError
from ..types import Estimate
from . import variance_model
from .measurement import GATE_PROBABILITY, MeasurementModel, clopper_pearson, fit_measurement, \
    variance_interval

LINEAR_TOLERANCE = 0.2
"""First-order and Monte Carlo ground covariances differing by more than this
(relative, in σ) mark a target where the linearisation fails."""
MC_SAMPLES = 400


@dataclass(frozen=True)
class CameraModel:
    """The camera's noise, in pixels and on the ground.

    Attributes
    ----------
    pixel : MeasurementModel
        Of the frame-to-frame jitter (residuals about each target's median), px.
    R_camera, R_camera_low, R_camera_high : ndarray, shape (2, 2)
        The camera's own pixel covariance: jitter plus systematic, survey share
        removed, px².
    R_survey : ndarray, shape (2, 2)
        Mean pixel covariance of the survey errors, px².
    R_systematic : ndarray, shape (2, 2)
        Spread of the targets' mean offsets less jitter and survey, px²
        (calibration error the filter also meets).
    systematic : dict of str → Estimate
        Its σ_u, σ_v (point estimates).
    sigma : dict of str → Estimate
        Camera's own σ_u, σ_v (a bound where the survey share leaves nothing).
    residuals_px : ndarray, shape (n, 2)
        Detected − projected, in the order of ``detected``.
    detected : ndarray, shape (n, 2)
        The detections, ordered target by target and in time, px.
    target_index : ndarray of int, shape (n,)
        Survey row of each detection.
    ground_residuals : ndarray, shape (n, 2)
        (radial, lateral) ground error of each detection, per-target mean
        removed, m.
    ground_range : ndarray, shape (n,)
        Horizontal camera–target distance, m.
    laws : dict
        ``radial`` and ``lateral``: ``{a, b, covariance, power}``.
    table : list of dict
        Per range bin: empirical and propagated σ.
    targets : list of dict
        Per target: detections, bias, σ, range, first-order vs Monte Carlo.
    regions : dict
        ``centre`` / ``edge``: σ_u, σ_v Estimates.
    outliers_by_range, outliers_by_score : list of dict
    range_bearing : dict
        σ of range (m) and bearing (rad) residuals.
    notes : tuple of str
    """

    pixel: MeasurementModel
    R_camera: np.ndarray
    R_camera_low: np.ndarray
    R_camera_high: np.ndarray
    R_survey: np.ndarray
    R_systematic: np.ndarray
    systematic: dict
    sigma: dict
    residuals_px: np.ndarray
    detected: np.ndarray
    target_index: np.ndarray
    ground_residuals: np.ndarray
    ground_range: np.ndarray
    laws: dict
    table: list
    targets: list
    regions: dict
    outliers_by_range: list
    outliers_by_score: list
    range_bearing: dict
    notes: tuple = field(default_factory=tuple)


def _bins(values, k=4):
    edges = np.unique(np.quantile(values, np.linspace(0, 1, k + 1)))
    return [(edges[i], edges[i + 1]) for i in range(len(edges) - 1)]


def _outlier_bins(values, outlier, name, unit):
    rows = []
    for lo, hi in _bins(values):
        sel = (values >= lo) & (values <= hi)
        n, k = int(np.count_nonzero(sel)), int(np.count_nonzero(outlier[sel]))
        a, b = clopper_pearson(k, n)
        rows.append({f"{name}_{unit}": [float(lo), float(hi)], "detections": n,
                     "outlier_fraction": k / n if n else None, "ci95": [a, b]})
    return rows


def _law(e2, r, power, info_scale, unit, level):
    A = np.column_stack([np.ones_like(r), r ** power])
    theta, cov = variance_model.fit(e2, A, info_scale)
    est = variance_model.estimates(theta, cov, ("a", "b"), (f"{unit}^2", f"{unit}^2/m^{power}"),
                                   "Gaussian maximum likelihood, Fisher interval with "
                                   "effective sample size", level)
    return {**est, "theta": theta, "covariance": cov, "power": power}


def law_sigma(law: dict, r: np.ndarray, z: float = 1.96):
    """σ(r) of a fitted law and its delta-method band, each shape (k,)."""
    A = np.column_stack([np.ones_like(r), r ** law["power"]])
    v = np.maximum(A @ law["theta"], 0.0)
    sd_v = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", A, law["covariance"], A), 0.0))
    s = np.sqrt(v)
    lo = np.sqrt(np.maximum(v - z * sd_v, 0.0))
    hi = np.sqrt(v + z * sd_v)
    return s, lo, hi


def fit_camera(camera, survey, detections, gate_probability: float = GATE_PROBABILITY,
               ground: str = "ray", seed: int = 1, level: float = 0.95) -> CameraModel:
    """Fit the camera's noise model.

    Parameters
    ----------
    camera : Camera
        One pose, or one per detection (R (m, 3, 3), t (m, 3)) in the order
        of ``detections``.
    survey : Survey
    detections : Detections
    gate_probability : float
    ground : {"ray", "homography"}
        How pixels reach the ground: ray–plane at each target's height, or the
        camera file's (or an estimated) homography (floor targets only).
    seed : int
    """
    idx = survey.index(detections.ids)
    order = np.lexsort((detections.time, idx))  # target by target, in time
    idx = idx[order]
    uv = detections.uv[order]
    xyz = survey.xyz[idx]
    moving = camera.R.ndim == 3
    if moving:  # one pose per detection: keep them in the same order
        camera = replace(camera, R=camera.R[order], t=camera.t[order])
    cam_t = np.broadcast_to(camera.t, (idx.shape[0], 3))

    def single(rows):
        """The camera at one detection (itself, for a fixed camera)."""
        return replace(camera, R=camera.R[rows], t=camera.t[rows]) if moving else camera

    def subset(mask):
        return replace(camera, R=camera.R[mask], t=camera.t[mask]) if moving else camera

    predicted = geo.project(xyz, camera, f"{survey.source}: target {survey.ids[idx[0]]!r}, ")
    res = uv - predicted
    period = float(np.median(np.diff(np.unique(detections.time)))) if \
        np.unique(detections.time).size > 1 else 1.0
    # Frame-to-frame jitter about each target's own median: the gate and the
    # temporal statistics see the detector, not the survey's fixed offsets.
    medians = np.zeros((len(survey.ids), 2))
    for t in np.unique(idx):
        medians[t] = np.median(res[idx == t], axis=0)
    jitter = res - medians[idx]
    pixel = fit_measurement(jitter, ("u", "v"), ("px", "px"), period,
                            gate_probability=gate_probability, seed=seed, level=level)
    inl = pixel.inliers
    notes = [n for n in pixel.notes if not n.startswith("R fits the inliers")]
    # Between targets: each target's inlier mean offset = survey error + systematic
    # camera error (calibration); less the survey's share through the projection.
    present = [t for t in np.unique(idx) if np.count_nonzero(inl & (idx == t)) >= 2]
    means = np.array([res[inl & (idx == t)].mean(axis=0) for t in present])
    counts = np.array([np.count_nonzero(inl & (idx == t)) for t in present])
    k = len(present)
    rep_row = {t: int(np.flatnonzero(idx == t)[np.count_nonzero(idx == t) // 2])
               for t in np.unique(idx)}
    Jp = np.concatenate([geo.projection_jacobian(survey.xyz[t:t + 1], single(rep_row[t]))
                         for t in present])
    S = np.einsum("nij,nkj->nik", Jp, Jp) * (survey.sigma[present] ** 2)[:, None, None]
    R_survey = S.mean(axis=0)
    between = np.atleast_2d(np.cov(means, rowvar=False)) if k > 1 else np.zeros((2, 2))
    # A target's mean also carries its jitter over its detections.
    between = between - pixel.R * np.mean(1.0 / counts)
    R_sys = between - R_survey
    R_cam = pixel.R + R_sys
    n_eff = np.array([ch.effective_size for ch in pixel.channels])
    sigma, R_lo, R_hi = {}, np.empty((2, 2)), np.empty((2, 2))
    for j, name in enumerate(("u", "v")):
        # total = jitter + (spread of target means − its jitter − survey share);
        # Satterthwaite turns the sum's variance into one chi-square.
        v1, d1 = pixel.R[j, j], n_eff[j] - 1
        # The spread's variance from the model in which target k's offset has
        # variance survey_k + systematic + jitter / n_k: targets near the camera
        # carry most of the survey's share, so a chi-square on k − 1 dof would
        # understate it, and the squared offsets of few targets are too noisy to
        # estimate it from. R_sys as estimated (it may be negative): clipping it at
        # 0 would bias w up.
        w = np.maximum(S[:, j, j] + R_sys[j, j] + v1 / counts, v1 / counts)
        # Var of Σ(d_k − d̄)² for independent d_k of variances w_k: 2 tr((C W)²), C
        # the centring matrix.
        var_spread = (2 * float(np.sum(w ** 2) * (1 - 2 / k) + np.sum(w) ** 2 / k ** 2)
                      / (k - 1) ** 2 if k > 2 else np.inf)
        total = max(v1 + R_sys[j, j], 1e-3 * v1)
        dof = 2 * total ** 2 / (2 * v1 ** 2 / d1 + var_spread)
        lo, hi = variance_interval(total, dof, level)
        R_lo[j, j], R_hi[j, j] = lo, hi
        sigma[name] = Estimate(float(np.sqrt(total)), float(np.sqrt(lo)), float(np.sqrt(hi)),
                               "px", "frame-to-frame jitter (inliers, effective sample size) "
                               "plus the spread between targets less the survey's share; "
                               "Satterthwaite degrees of freedom from both parts' "
                               "variances", level)
        share = R_survey[j, j] / max(between[j, j] + R_survey[j, j], 1e-300)
        if between[j, j] > 0 and R_survey[j, j] > 0.5 * (total + R_survey[j, j]):
            notes.append(f"the survey's uncertainty is {100 * share:.3g} % of the spread of the "
                         f"targets' {name} offsets: the camera's systematic error is poorly "
                         "determined; survey the targets more precisely")
    R_cam[0, 0], R_cam[1, 1] = (sigma[c].value ** 2 for c in ("u", "v"))
    z = ndtri(0.5 + level / 2)  # normal quantile
    for i, j in ((0, 1), (1, 0)):
        se = np.sqrt((R_cam[i, j] ** 2 + R_cam[i, i] * R_cam[j, j]) / max(np.min(n_eff) - 1, 1))
        R_lo[i, j], R_hi[i, j] = R_cam[i, j] - z * se, R_cam[i, j] + z * se
    systematic = {c: Estimate(float(np.sqrt(max(R_sys[j, j], 0.0))), None, None, "px",
                              "spread of the targets' mean offsets less jitter and survey "
                              "(point estimate; k - 1 degrees of freedom)", level)
                  for j, c in enumerate(("u", "v"))}
    if k < 10:
        notes.append(f"only {k} targets: the systematic (between-target) part of R rests on "
                     f"{k - 1} degrees of freedom")
    rejected = 1 - np.count_nonzero(inl) / inl.shape[0]
    notes.append(f"R fits the detections inside the gate (chi-square, 2 dof, p = "
                 f"{gate_probability}) about each target's own offset: it rejected "
                 f"{100 * rejected:.3g} %; the filter must gate its innovations the same way")
    # Ground residuals of the inliers.
    ui, xi, ti = uv[inl], xyz[inl], idx[inl]
    if ground == "homography":
        if camera.homography is None:
            raise InputError(f"{camera.source}: --ground homography needs 'ground: "
                             "{homography: ...}' in the camera file; or use --ground dlt")
        g = geo.apply_homography(np.linalg.inv(camera.homography),
                                 geo.undistorted_pixels(ui, camera))
    else:
        g = geo.ground_point(ui, subset(inl), xi[:, 2])
    err = g - xi[:, :2]
    los = xi[:, :2] - cam_t[inl, :2]
    rng_h = np.linalg.norm(los, axis=1)
    unit = los / rng_h[:, None]
    radial = np.sum(err * unit, axis=1)
    lateral = unit[:, 0] * err[:, 1] - unit[:, 1] * err[:, 0]
    # Remove each target's mean: survey and calibration errors are fixed per target.
    for t in np.unique(ti):
        sel = ti == t
        radial[sel] -= radial[sel].mean()
        lateral[sel] -= lateral[sel].mean()
    ratio = float(np.mean(n_eff) / pixel.inliers.sum())
    laws = {"radial": _law(radial ** 2, rng_h, 4, ratio, "m", level),
            "lateral": _law(lateral ** 2, rng_h, 2, ratio, "m", level)}
    # Per target: empirical, first-order and Monte Carlo ground covariance.
    rng = np.random.default_rng(seed)
    targets = []
    chol = np.linalg.cholesky(R_cam if np.all(np.linalg.eigvalsh(R_cam) > 0) else pixel.R)
    for t in np.unique(ti):
        sel = ti == t
        one = single(rep_row[t])
        p0 = geo.project(survey.xyz[t:t + 1], one)
        J = geo.ground_jacobian(p0, one, survey.xyz[t, 2])[0]
        C1 = J @ (chol @ chol.T) @ J.T
        sample = p0 + rng.standard_normal((MC_SAMPLES, 2)) @ chol.T
        try:
            many = (replace(one, R=np.repeat(one.R[None], MC_SAMPLES, 0),
                            t=np.repeat(one.t[None], MC_SAMPLES, 0)) if moving else one)
            mc = geo.ground_point(sample, many, survey.xyz[t, 2])
            Cmc = np.cov(mc, rowvar=False)
            shift = float(np.linalg.norm(mc.mean(axis=0) -
                                         geo.ground_point(p0, one, survey.xyz[t, 2])[0]))
        except Exception:  # rays past the horizon: the mapping itself breaks down
            Cmc, shift = np.full((2, 2), np.nan), np.nan
        rel = float(np.sqrt(np.trace(Cmc) / np.trace(C1)) - 1) if np.isfinite(Cmc).all() \
            else np.inf
        e = np.column_stack([radial[sel], lateral[sel]])
        targets.append({
            "id": survey.ids[t], "detections": int(np.count_nonzero(sel)),
            "range_m": float(np.median(rng_h[sel])),
            "pixel_bias_px": res[inl][sel].mean(axis=0).tolist(),
            "pixel_sigma_px": res[inl][sel].std(axis=0).tolist(),
            "ground_sigma_radial_m": float(e[:, 0].std()),
            "ground_sigma_lateral_m": float(e[:, 1].std()),
            "ground_cov_empirical": np.cov(err[sel], rowvar=False).tolist(),
            "ground_cov_first_order": C1.tolist(),
            "ground_cov_monte_carlo": Cmc.tolist(),
            "linearisation_error": rel, "monte_carlo_shift_m": shift,
            "linear_ok": bool(abs(rel) <= LINEAR_TOLERANCE),
        })
    bad = [t["id"] for t in targets if not t["linear_ok"]]
    if bad:
        notes.append(f"the first-order propagation to the ground is off by more than "
                     f"{100 * LINEAR_TOLERANCE:.0f} % at target(s) {', '.join(bad[:8])} (far, "
                     "near the horizon): an EKF linearising there is overconfident; use the "
                     "ground table, or measure in pixels")
    if laws["radial"]["b"].resolved:
        notes.append("the ground noise grows with range (b > 0 at 95 %), as a projection "
                     "that divides by depth predicts")
    # Range table: empirical σ per range bin beside the propagated one.
    table = []
    for lo, hi in _bins(rng_h, min(6, max(1, len(targets) // 2))):
        sel = (rng_h >= lo) & (rng_h <= hi)
        tsel = [t for t in targets if lo <= t["range_m"] <= hi]
        prop_r, prop_l = [], []
        for t in tsel:
            C1 = np.array(t["ground_cov_first_order"])
            k = survey.ids.index(t["id"])
            u = survey.xyz[k, :2] - cam_t[rep_row[k], :2]
            u = u / np.linalg.norm(u)
            nrm = np.array([-u[1], u[0]])
            prop_r.append(u @ C1 @ u)
            prop_l.append(nrm @ C1 @ nrm)
        r_mid = float(np.median(rng_h[sel]))
        s_law, s_lo, s_hi = law_sigma(laws["radial"], np.array([r_mid]))
        table.append({
            "range_m": r_mid, "range_span_m": [float(lo), float(hi)],
            "detections": int(np.count_nonzero(sel)),
            "sigma_m": float(np.sqrt(np.mean(radial[sel] ** 2 + lateral[sel] ** 2) / 2)),
            "sigma_radial_m": float(np.sqrt(np.mean(radial[sel] ** 2))),
            "sigma_lateral_m": float(np.sqrt(np.mean(lateral[sel] ** 2))),
            "propagated_radial_m": float(np.sqrt(np.mean(prop_r))) if prop_r else None,
            "propagated_lateral_m": float(np.sqrt(np.mean(prop_l))) if prop_l else None,
            "law_radial_m": float(s_law[0]), "law_radial_ci95_m": [float(s_lo[0]),
                                                                  float(s_hi[0])],
        })
    # Image regions: centre against edge by distance from the principal point.
    K = camera.K
    half_diag = 0.5 * np.hypot(camera.width, camera.height)
    rho = np.hypot(uv[:, 0] - K[0, 2], uv[:, 1] - K[1, 2]) / half_diag
    regions = {}
    for name, sel in (("centre", rho < 0.5), ("edge", rho >= 0.5)):
        s = sel & inl
        if np.count_nonzero(s) < 10:
            continue
        entry = {"detections": int(np.count_nonzero(s))}
        for j, c in enumerate(("u", "v")):
            var = float(np.var(res[s, j]))
            lo, hi = variance_interval(var, np.count_nonzero(s) * ratio - 1, level)
            entry[c] = Estimate(float(np.sqrt(var)), float(np.sqrt(lo)), float(np.sqrt(hi)),
                                "px", "chi-square with effective sample size", level)
        regions[name] = entry
    outlier = ~inl
    target_range = np.linalg.norm(xyz[:, :2] - cam_t[:, :2], axis=1)
    by_range = _outlier_bins(target_range, outlier, "range", "m")
    by_score = (_outlier_bins(detections.score[order], outlier, "score", "1")
                if detections.score is not None else [])
    # Range and bearing as a filter measuring those would see them.
    cam_in = subset(inl)
    rays = geo.pixel_rays(ui, cam_in)
    cam_r = geo.to_camera(xi, cam_in.R, cam_in.t)
    ray_c = np.einsum("ni,nij->nj", rays, cam_in.R) if moving else rays @ camera.R
    bearing_err = np.arctan2(ray_c[:, 0], ray_c[:, 2]) - np.arctan2(cam_r[:, 0], cam_r[:, 2])
    range_err = np.linalg.norm(g - cam_t[inl, :2], axis=1) - rng_h
    range_bearing = {}
    for name, e, u in (("range", range_err, "m"), ("bearing", bearing_err, "rad")):
        var = float(np.var(e))
        lo, hi = variance_interval(var, e.shape[0] * ratio - 1, level)
        range_bearing[name] = Estimate(float(np.sqrt(var)), float(np.sqrt(lo)),
                                       float(np.sqrt(hi)), u, "inliers; chi-square with "
                                       "effective sample size (range error grows with range: "
                                       "see the ground laws)", level)
    return CameraModel(pixel, R_cam, R_lo, R_hi, R_survey, R_sys, systematic, sigma, res,
                       uv, idx,
                       np.column_stack([radial, lateral]), rng_h, laws, table, targets,
                       regions, by_range, by_score, range_bearing, tuple(notes))
