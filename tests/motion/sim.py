"""Simulated drives with known latency, noise, correlation and outliers (for tests)."""

from __future__ import annotations

import numpy as np

from noisecal.analysis.align import TruthSeries

TRUTH_HZ, SENSOR_HZ = 50.0, 25.0


def pose(t):
    """A weaving drive: x, y (m), yaw (rad) at times t (s from the start)."""
    x = 1.2 * t
    y = 0.3 * np.sin(2 * np.pi * t / 9.0) + 0.1 * np.sin(2 * np.pi * t / 3.7)
    dy = 0.3 * 2 * np.pi / 9.0 * np.cos(2 * np.pi * t / 9.0) + \
        0.1 * 2 * np.pi / 3.7 * np.cos(2 * np.pi * t / 3.7)
    return x, y, np.arctan2(dy, 1.2), np.hypot(1.2, dy)


def drive(seed: int, duration: float = 120.0, latency: float = 0.06, sigma=(0.01, 0.02),
          rho: float = 0.4, outliers: float = 0.03, law_b: float = 0.0, t0: float = 1.0e9):
    """Sensor (offset y [m], heading yaw [rad]) against the exact truth.

    Returns
    -------
    t_sensor : ndarray, shape (n,), absolute s
    values : ndarray, shape (n, 2)
    truth : list of TruthSeries
    speed : ndarray, shape (n,), at the instants seen
    is_outlier : ndarray of bool, shape (n,)
    """
    rng = np.random.default_rng(seed)
    tt = np.arange(0.0, duration, 1 / TRUTH_HZ)
    _, ty, tyaw, _ = pose(tt)
    truth = [TruthSeries(t0 + tt, ty, False, []), TruthSeries(t0 + tt, np.unwrap(tyaw), True, [])]
    ts = np.arange(2.0, duration - 2.0, 1 / SENSOR_HZ)
    _, sy, syaw, speed = pose(ts - latency)
    n = ts.shape[0]
    cov = np.array([[sigma[0] ** 2, rho * sigma[0] * sigma[1]],
                    [rho * sigma[0] * sigma[1], sigma[1] ** 2]])
    e = rng.multivariate_normal([0, 0], cov, n)
    if law_b:
        e[:, 0] *= np.sqrt(1 + law_b * speed ** 2 / sigma[0] ** 2)
    bad = rng.random(n) < outliers
    e[bad] += rng.choice([-1, 1], (bad.sum(), 2)) * rng.uniform(8, 20, (bad.sum(), 2)) * sigma
    values = np.column_stack([sy, syaw]) + e
    return t0 + ts, values, truth, speed, bad
