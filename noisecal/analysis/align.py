"""Time alignment of a sensor against ground truth, and truth at sensor times.

Sign convention: the offset δ is how late the sensor's timestamps are. A
sample stamped t measured the truth at t − δ; δ > 0 is a sensor latency.

Method: a coarse δ from the cross-correlation of the first differences (the
motion) of every mapped channel, checked against a scan of a Huber loss of the
residuals over the whole search range (outliers do not pull it), then refined
by minimising that loss and finished by least squares over its inliers, and a 95 % interval from the
sandwich (Gauss–Newton curvature, and the long-run variance of the score
with a Bartlett kernel so coloured residuals widen it).

References
----------
W. K. Newey, K. D. West, "A simple, positive semi-definite, heteroskedasticity
and autocorrelation consistent covariance matrix", Econometrica 55(3), 1987.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import ndtri

from ..errors import AnalysisError
from .residuals import MAD_TO_SIGMA, acf

HUBER_K = 2.0
"""Huber loss threshold in robust standard deviations (common practice, no source)."""


def wrap(angle: np.ndarray) -> np.ndarray:
    """Angles wrapped to [−π, π), rad."""
    return (np.asarray(angle) + np.pi) % (2 * np.pi) - np.pi


@dataclass(frozen=True)
class TruthSeries:
    """One truth quantity as a function of time, for interpolation.

    Attributes
    ----------
    time : ndarray, shape (m,)
        Absolute times, s, strictly increasing.
    values : ndarray, shape (m,)
        SI values (angles unwrapped).
    is_angle : bool
        Residuals against it are wrapped to ±π.
    gaps : list of (float, float)
        Absolute (start, end) times between which the truth has no samples.
    """

    time: np.ndarray
    values: np.ndarray
    is_angle: bool
    gaps: list

    def at(self, t: np.ndarray) -> np.ndarray:
        """Linear interpolation at absolute times t (inside the truth's span)."""
        return np.interp(t, self.time, self.values)

    def slope(self, t: np.ndarray) -> np.ndarray:
        """Time derivative of the interpolant at t (one truth period around t), u/s."""
        h = 0.5 * float(np.median(np.diff(self.time)))
        return (self.at(t + h) - self.at(t - h)) / (2 * h)


def residuals(sensor: np.ndarray, truth: list, t: np.ndarray, offset: float) -> np.ndarray:
    """Sensor minus truth at corrected times t − offset; angles wrapped.

    Parameters
    ----------
    sensor : ndarray, shape (n, c)
    truth : list of TruthSeries, length c
    t : ndarray, shape (n,)
        Sensor timestamps, absolute s.
    offset : float
        δ, s.

    Returns
    -------
    ndarray, shape (n, c)
    """
    out = np.empty_like(sensor, dtype=float)
    for j, series in enumerate(truth):
        r = sensor[:, j] - series.at(t - offset)
        out[:, j] = wrap(r) if series.is_angle else r
    return out


@dataclass(frozen=True)
class Alignment:
    """The estimated sensor–truth time offset.

    Attributes
    ----------
    offset : float
        δ, s (sensor timestamps late by δ).
    lower, upper : float
        95 % interval, s.
    coarse : float
        Cross-correlation estimate, s.
    used : ndarray of bool, shape (n,)
        Sensor samples inside the truth's span after correction.
    """

    offset: float
    lower: float
    upper: float
    coarse: float
    used: np.ndarray


def _coarse(sensor, truth, t, max_offset):
    """Cross-correlation of first differences on a uniform grid at the sensor rate."""
    dt = float(np.median(np.diff(t)))
    grid = np.arange(t[0], t[-1], dt)
    lags = int(np.ceil(max_offset / dt))
    if grid.shape[0] < 4 * lags + 16:
        raise AnalysisError("the overlap of sensor and truth is too short to search "
                            f"offsets of ±{max_offset:g} s; record longer or lower --max-offset")
    total = np.zeros(2 * lags + 1)
    for j, series in enumerate(truth):
        s = np.diff(np.interp(grid, t, sensor[:, j]))
        h = np.diff(series.at(np.clip(grid, series.time[0], series.time[-1])))
        if series.is_angle:
            s = wrap(s)
        # Clip the sensor's jumps (outliers) to a robust range before correlating.
        scale = MAD_TO_SIGMA * np.median(np.abs(s - np.median(s))) or 1.0
        s = np.clip(s, -5 * scale, 5 * scale)
        s = (s - s.mean()) / (s.std() or 1.0)
        h = (h - h.mean()) / (h.std() or 1.0)
        n = s.shape[0]
        size = 1 << int(np.ceil(np.log2(2 * n)))
        cc = np.fft.irfft(np.fft.rfft(s, size) * np.conj(np.fft.rfft(h, size)), size)
        # cc[k] = Σ s[i + k] h[i]: the sensor lags the truth by k samples.
        total += np.concatenate([cc[-lags:], cc[: lags + 1]]) / n
    k = int(np.argmax(total)) - lags
    if 0 < k + lags < 2 * lags:  # parabolic peak refinement
        y0, y1, y2 = total[k + lags - 1: k + lags + 2]
        den = y0 - 2 * y1 + y2
        frac = 0.5 * (y0 - y2) / den if den < 0 else 0.0
    else:
        frac = 0.0
    return (k + frac) * dt


def _usable(truth, t, offset):
    lo = max(s.time[0] for s in truth)
    hi = min(s.time[-1] for s in truth)
    tc = t - offset
    return (tc >= lo) & (tc <= hi)


def _long_run_variance(u: np.ndarray) -> float:
    """Bartlett-kernel (Newey–West) long-run variance of a score series, × n."""
    n = u.shape[0]
    rho = acf(u, min(n // 4, 500))
    # Bandwidth: where the score's correlation has died out, at least n^(1/3).
    below = np.flatnonzero(np.abs(rho) < 2 / np.sqrt(n))
    lag = int(max(np.cbrt(n), 2 * (below[0] if below.size else 1)))
    lag = min(lag, n // 4, rho.shape[0] - 1)
    w = 1 - np.arange(1, lag + 1) / (lag + 1)
    return float(np.var(u) * n * (1 + 2 * np.sum(w * rho[1: lag + 1])))


def estimate_offset(sensor: np.ndarray, truth: list, t: np.ndarray,
                    max_offset: float = 1.0, level: float = 0.95, where: str = "") -> Alignment:
    """Estimate δ with its interval.

    Parameters
    ----------
    sensor : ndarray, shape (n, c)
        Sensor values, SI.
    truth : list of TruthSeries, length c
        The quantity each sensor column measures.
    t : ndarray, shape (n,)
        Sensor timestamps, absolute s.
    max_offset : float
        Largest |δ| searched, s.
    level : float
        Confidence level.
    where : str
        What is being aligned (e.g. the two file names), to begin error messages.

    Returns
    -------
    Alignment

    Raises
    ------
    AnalysisError
        When the overlap is too short or the truth shows no motion to align on.
    """
    try:
        return _estimate_offset(sensor, truth, t, max_offset, level)
    except AnalysisError as exc:
        if not where:
            raise
        raise AnalysisError(f"{where}: {exc}") from None


def _estimate_offset(sensor, truth, t, max_offset, level) -> Alignment:
    from scipy import optimize  # here, not at import: only the offset search uses it

    inside = _usable(truth, t, 0.0)
    if np.count_nonzero(inside) < 50:
        raise AnalysisError("sensor and truth overlap in fewer than 50 sensor samples; "
                            "check that both recordings cover the same drive (absolute "
                            "timestamps)")
    for series in truth:
        if np.ptp(series.values) == 0:
            raise AnalysisError("a truth quantity is constant: there is no motion to align "
                                "on; drive while recording")
    coarse = _coarse(sensor[inside], truth, t[inside], max_offset)
    # Samples usable at every offset searched, so each offset sees the same data.
    used0 = _usable(truth, t, -max_offset) & _usable(truth, t, max_offset)
    if np.count_nonzero(used0) < 50:
        raise AnalysisError(f"fewer than 50 sensor samples stay inside the truth at every "
                            f"offset within ±{max_offset:g} s; lower --max-offset or record "
                            "a longer overlap")
    s, tt = sensor[used0], t[used0]
    step = float(np.median(np.diff(t)))

    def robust_scale(delta):
        r0 = residuals(s, truth, tt, delta)
        sc = MAD_TO_SIGMA * np.median(np.abs(r0 - np.median(r0, axis=0)), axis=0)
        sc[sc == 0] = 1.0
        return sc

    def huber(delta, sc):
        z = residuals(s, truth, tt, delta) / sc
        a = np.abs(z)
        return float(np.sum(np.where(a <= HUBER_K, 0.5 * z * z, HUBER_K * a - 0.5 * HUBER_K ** 2)))

    # The cross-correlation of motion is quick but can be fooled by noise when the
    # motion is slow; a scan of the loss itself over the whole search range, one
    # sensor period apart, cannot. Start from the better of the two.
    scale = robust_scale(coarse)
    grid = np.append(np.arange(-max_offset, max_offset + 0.5 * step, step), coarse)
    start = float(grid[int(np.argmin([huber(d, scale) for d in grid]))])
    scale = robust_scale(start)

    def loss(delta):
        return huber(delta, scale)

    res = optimize.minimize_scalar(loss, bounds=(start - step, start + step),
                                   method="bounded", options={"xatol": 1e-6 * max(step, 1e-3)})
    delta = float(res.x)
    inl = np.all(np.abs(residuals(s, truth, tt, delta) / scale) <= HUBER_K * 2, axis=1)
    if np.count_nonzero(inl) < 20:
        raise AnalysisError("fewer than 20 sensor samples agree with the truth at any "
                            "offset; check the mapping of sensor to truth channels")
    # Final least squares over the samples the Huber fit calls inliers: the
    # outliers' clipped pull on δ would add variance the interval cannot see.
    s_in, t_in = s[inl], tt[inl]

    def inlier_loss(d):
        return float(np.sum((residuals(s_in, truth, t_in, d) / scale) ** 2))

    res = optimize.minimize_scalar(inlier_loss, bounds=(delta - step, delta + step),
                                   method="bounded", options={"xatol": 1e-6 * max(step, 1e-3)})
    delta = float(res.x)
    r = residuals(s, truth, tt, delta)
    # d r / d δ = + truth slope at t − δ. The loss weighs each channel by 1/scale²
    # (channels independently), so the sandwich uses the same weights; inliers
    # only, where the Huber loss is quadratic.
    weight = 1.0 / scale ** 2
    g = np.column_stack([series.slope(tt - delta) for series in truth])
    g_in, r_in = g[inl], r[inl]
    hess = float(np.sum(g_in * g_in * weight))
    if hess <= 0:
        raise AnalysisError("the truth shows no motion in the overlap; the time offset "
                            "cannot be estimated")
    score = np.sum(g_in * r_in * weight, axis=1)
    var = _long_run_variance(score) / hess ** 2
    half = ndtri(0.5 + level / 2) * np.sqrt(var)  # normal quantile
    return Alignment(delta, delta - half, delta + half, coarse, _usable(truth, t, delta))
