"""Odometry against truth: the odometry motion model's α1…α4, slip, quantization, Q.

The motion between two poses is decomposed as a rotation δrot1 towards the
new position, a translation δtrans and a rotation δrot2 (Thrun, Burgard &
Fox 2005, ch. 5). The odometry's errors against the truth's decomposition
are zero-mean Gaussians with variances

    var(δrot1) = α1 δrot1² + α2 δtrans²
    var(δtrans) = α3 δtrans² + α4 (δrot1² + δrot2²)
    var(δrot2) = α1 δrot2² + α2 δtrans²

evaluated at the odometry's own δ (what the filter has at run time), fitted
jointly by maximum likelihood over non-overlapping windows. Windows whose
translation error is beyond ``SLIP_Z`` standard deviations are slip and are
left out of the fit (reported as episodes).

References
----------
S. Thrun, W. Burgard, D. Fox, *Probabilistic Robotics*, MIT Press, 2005,
ch. 5 (odometry motion model), ch. 7 (EKF prediction with it).
B. Widrow, I. Kollár, *Quantization Noise*, 2008 (q²/12).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.special import ndtri

from ..analysis.align import wrap
from ..types import Estimate
from . import variance_model

SLIP_Z = 4.0
"""Translation errors beyond this many model standard deviations are slip."""
MAX_PASSES = 30
MIN_TRANS_M = 1e-3
"""Below this translation δrot1 is not defined: the motion is a rotation (δrot1 = 0)."""


def decompose(x0, y0, th0, x1, y1, th1, min_trans: float = MIN_TRANS_M):
    """(δrot1, δtrans, δrot2) of the motion from pose 0 to pose 1.

    Parameters
    ----------
    x0, y0, th0, x1, y1, th1 : ndarray, shape (w,)
        Poses, m and rad.
    min_trans : float
        Translations below this are pure rotations: δrot1 = 0.

    Returns
    -------
    rot1, trans, rot2 : ndarray, shape (w,)
    """
    dx, dy = x1 - x0, y1 - y0
    trans = np.hypot(dx, dy)
    rot1 = np.where(trans >= min_trans, wrap(np.arctan2(dy, dx) - th0), 0.0)
    rot2 = wrap(th1 - th0 - rot1)
    return rot1, trans, rot2


def encoder_pose(left: np.ndarray, right: np.ndarray, ticks_per_rev: float,
                 wheel_radius: float, track_width: float):
    """Dead-reckoned pose of a differential drive from cumulative wheel ticks.

    Parameters
    ----------
    left, right : ndarray, shape (n,)
        Cumulative encoder counts.
    ticks_per_rev, wheel_radius, track_width : float
        Counts per wheel revolution; m; m (distance between the wheels).

    Returns
    -------
    x, y, theta : ndarray, shape (n,)
        Pose in the frame of the first sample (m, rad), midpoint integration.
    """
    per_tick = 2 * np.pi * wheel_radius / ticks_per_rev
    dl = np.diff(np.asarray(left, dtype=float)) * per_tick
    dr = np.diff(np.asarray(right, dtype=float)) * per_tick
    ds = 0.5 * (dl + dr)
    dth = (dr - dl) / track_width
    theta = np.concatenate([[0.0], np.cumsum(dth)])
    mid = theta[:-1] + 0.5 * dth
    x = np.concatenate([[0.0], np.cumsum(ds * np.cos(mid))])
    y = np.concatenate([[0.0], np.cumsum(ds * np.sin(mid))])
    return x, y, theta


def quantization(ticks_per_rev: float, wheel_radius: float, track_width: float) -> dict:
    """Quantization floor of one window's motion from encoder counts.

    A wheel's distance over a window is the difference of two readings, each
    off by a uniform error of one tick q: variance 2·q²/12. Translation (mean
    of the wheels) then has q²/12, rotation (difference over the track b)
    q²/(3 b²); the heading at one end q²/(6 b²), which δrot1 and δrot2 each
    carry (a first-order account: the chord's own direction error is left out).
    """
    q = 2 * np.pi * wheel_radius / ticks_per_rev
    return {"tick_m": q, "translation_variance_m2": q * q / 12.0,
            "rotation_variance_rad2": q * q / (3.0 * track_width ** 2),
            # The heading read at one end is off by (e_r − e_l)/b: q²/(6 b²); δrot1
            # carries the start's, δrot2 the end's.
            "end_heading_variance_rad2": q * q / (6.0 * track_width ** 2)}


def quantization_floor(ticks_per_rev: float, wheel_radius: float, track_width: float):
    """Known variances of (δrot1, δtrans, δrot2) from counting ticks, shape (3,)."""
    q = quantization(ticks_per_rev, wheel_radius, track_width)
    end = q["end_heading_variance_rad2"]
    return np.array([end, q["translation_variance_m2"], end])


@dataclass(frozen=True)
class OdometryModel:
    """Odometry noise fitted against truth.

    Attributes
    ----------
    alpha : dict of str → Estimate
        ``alpha1`` … ``alpha4`` (units rad²/rad², rad²/m², m²/m², m²/rad²).
    window_s : float
        Window length the α refer to, s.
    floor : ndarray, shape (3,)
        Known variances in those of (δrot1, δtrans, δrot2) (quantization).
    motion_odo, motion_true : ndarray, shape (w, 3)
        (δrot1, δtrans, δrot2) of each window.
    errors : ndarray, shape (w, 3)
        Odometry − truth (rotations wrapped).
    window_start : ndarray, shape (w,)
        Window start times, s from the odometry recording's start.
    slip : ndarray of bool, shape (w,)
    episodes : list of dict
        ``{start_s, duration_s, excess_m}`` per run of consecutive slip windows.
    scale_error : dict of str → Estimate
        Mean relative translation and rotation error (calibration).
    notes : tuple of str
    """

    alpha: dict
    window_s: float
    floor: np.ndarray
    motion_odo: np.ndarray
    motion_true: np.ndarray
    errors: np.ndarray
    window_start: np.ndarray
    slip: np.ndarray
    episodes: list
    scale_error: dict
    notes: tuple = field(default_factory=tuple)

    def variances(self, motion: np.ndarray) -> np.ndarray:
        """Model variances of (δrot1, δtrans, δrot2) for motions, shape (w, 3)."""
        a = [self.alpha[f"alpha{i}"] for i in range(1, 5)]
        th = np.array([e.value if e.resolved else e.upper for e in a])
        v = np.column_stack([d @ th for d in _design(motion)])
        return v + self.floor


def _design(motion: np.ndarray):
    r1, t, r2 = motion[:, 0] ** 2, motion[:, 1] ** 2, motion[:, 2] ** 2
    z = np.zeros_like(t)
    return (np.column_stack([r1, t, z, z]), np.column_stack([z, z, t, r1 + r2]),
            np.column_stack([r2, t, z, z]))


ALPHA_UNITS = ("rad^2/rad^2", "rad^2/m^2", "m^2/m^2", "m^2/rad^2")


def _fit(motion, errors, floor):
    A = np.vstack(_design(motion))
    e2 = np.concatenate([errors[:, 0] ** 2, errors[:, 1] ** 2, errors[:, 2] ** 2])
    known = np.repeat(floor, motion.shape[0])
    rows = A.sum(axis=1) > 0  # a motion of zero size says nothing of α
    return variance_model.fit(e2[rows], A[rows], known=known[rows])


def _mean_ratio(err, size, unit, level):
    keep = np.abs(size) > 0
    if np.count_nonzero(keep) < 3:
        return None
    s = np.sum(err[keep] * size[keep]) / np.sum(size[keep] ** 2)
    resid = err[keep] - s * size[keep]
    se = np.sqrt(np.sum(resid ** 2 * size[keep] ** 2)) / np.sum(size[keep] ** 2)
    z = ndtri(0.5 + level / 2)  # normal quantile
    return Estimate(float(s), float(s - z * se), float(s + z * se), unit,
                    "least squares of error on motion, heteroscedastic-robust interval", level)


def fit_odometry(motion_odo: np.ndarray, motion_true: np.ndarray, window_start: np.ndarray,
                 window_s: float, floor=(0.0, 0.0, 0.0),
                 level: float = 0.95) -> OdometryModel:
    """Fit α1…α4 with intervals, flag slip, estimate scale errors.

    Parameters
    ----------
    motion_odo, motion_true : ndarray, shape (w, 3)
        (δrot1, δtrans, δrot2) per window from the odometry and from the truth.
    window_start : ndarray, shape (w,)
        Start time of each window, s.
    window_s : float
        Window length, s.
    floor : sequence of 3 floats
        Known variances added to those of (δrot1, δtrans, δrot2) (encoder
        quantization: see :func:`quantization_floor`).
    """
    floor = np.asarray(floor, dtype=float)
    errors = np.column_stack([wrap(motion_odo[:, 0] - motion_true[:, 0]),
                              motion_odo[:, 1] - motion_true[:, 1],
                              wrap(motion_odo[:, 2] - motion_true[:, 2])])
    slip = np.zeros(errors.shape[0], bool)
    # Slip inflates the model, which hides more slip: repeat until the set holds
    # (each pass can only unmask what the last fit's inflation hid).
    for _ in range(MAX_PASSES):
        theta, cov = _fit(motion_odo[~slip], errors[~slip], floor)
        v = np.column_stack([d @ theta for d in _design(motion_odo)])
        z = np.abs(errors[:, 1]) / np.sqrt(np.maximum(v[:, 1] + floor[1], 1e-300))
        new = z > SLIP_Z
        if np.array_equal(new, slip):
            break
        slip = new
    else:
        theta, cov = _fit(motion_odo[~slip], errors[~slip], floor)
    alpha = variance_model.estimates(
        theta, cov, [f"alpha{i}" for i in range(1, 5)], ALPHA_UNITS,
        "Gaussian maximum likelihood over windows, Fisher interval", level)
    episodes = []
    idx = np.flatnonzero(slip)
    if idx.size:
        runs = np.split(idx, np.flatnonzero(np.diff(idx) > 1) + 1)
        for run in runs:
            episodes.append({"start_s": float(window_start[run[0]]),
                             "duration_s": float(len(run) * window_s),
                             "excess_m": float(np.sum(errors[run, 1]))})
    keep = ~slip
    dtheta_true = motion_true[:, 0] + motion_true[:, 2]
    scale = {"translation": _mean_ratio(errors[keep, 1], motion_true[keep, 1], "1", level),
             "rotation": _mean_ratio(errors[keep, 0] + errors[keep, 2], dtheta_true[keep],
                                     "1", level)}
    notes = []
    for key, est in scale.items():
        if est is not None and (est.lower > 0 or est.upper < 0):
            what = "wheel radius" if key == "translation" else "track width"
            notes.append(f"odometry {key} is off by {100 * est.value:.3g} % on average "
                         f"(calibrate the {what}); the alpha include this systematic error")
    if episodes:
        notes.append(f"{len(episodes)} slip episode(s) ({100 * slip.mean():.3g} % of the "
                     "windows) left out of the fit; gate the odometry or inflate Q there")
    scale = {k: v for k, v in scale.items() if v is not None}
    return OdometryModel(alpha, window_s, floor, motion_odo, motion_true, errors, window_start, slip,
                         episodes, scale, tuple(notes))


def step_noise(model: OdometryModel, speed: float, turn_rate: float, dt: float) -> dict:
    """Per-step process noise of a differential-drive EKF prediction at θ = 0.

    α fitted over windows of W seconds describe the error of a W-long motion.
    If the per-step errors are independent, a W-long motion is W/dt steps
    whose variances add, so the per-step α are α·W/dt (each step's δ is dt/W
    of the window's). The pose noise is Q = V M Vᵀ with M the variances of
    (δrot1, δtrans, δrot2) and V the Jacobian of the pose update (Thrun et
    al. 2005, ch. 7).

    Parameters
    ----------
    speed, turn_rate : float
        A representative step's motion: m/s, rad/s.
    dt : float
        Prediction step, s.
    """
    trans = speed * dt
    rot1 = rot2 = 0.5 * turn_rate * dt
    th = np.array([e.value if e.resolved else e.upper for e in
                   (model.alpha[f"alpha{i}"] for i in range(1, 5))]) * model.window_s / dt
    m = np.array([th[0] * rot1 ** 2 + th[1] * trans ** 2,
                  th[2] * trans ** 2 + th[3] * (rot1 ** 2 + rot2 ** 2),
                  th[0] * rot2 ** 2 + th[1] * trans ** 2])
    V = np.array([[-trans * np.sin(rot1), np.cos(rot1), 0.0],
                  [trans * np.cos(rot1), np.sin(rot1), 0.0],
                  [1.0, 0.0, 1.0]])
    return {"dt_s": dt, "speed_mps": speed, "turn_rate_radps": turn_rate,
            "motion_variance": m, "Q_pose": V @ np.diag(m) @ V.T}
