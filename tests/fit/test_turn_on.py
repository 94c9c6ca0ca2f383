"""Turn-on bias: the mean's interval covers the bias the sensor was switched on with."""

from __future__ import annotations

import numpy as np

from noisecal.fit.simulate import simulate_rate
from noisecal.fit.turn_on import turn_on_bias


def test_mean_interval_covers_the_turn_on_bias():
    """Over 400 seeded records of white noise plus a random walk started at a fixed
    bias b0, the 95 % interval of the mean covers b0 in 93–97 % of them: the variance
    of a τ-average of white noise is N²/τ and of a random walk about its start K²τ/3,
    the Allan variances at τ = the record (IEEE Std 952 Annex C)."""
    c2 = np.array([0, 1e-6, 0, 4e-10, 0])
    period, n, b0 = 0.1, 4000, 0.01
    hits = 0
    for s in range(400):
        y = simulate_rate(c2, period, n, np.random.default_rng(s)) + b0
        est = turn_on_bias(y, "rad/s", c2, n * period).mean
        hits += est.lower <= b0 <= est.upper
    assert 0.93 <= hits / 400 <= 0.97, hits / 400


def test_accelerometer_about_gravity_and_tilted():
    """A level accelerometer's P0 bias std is taken about ±g (g_n = 9.80665 m/s²,
    ISO 80000-3); a tilted one has none (gravity cannot be told from bias)."""
    c2 = np.array([0, 1e-6, 0, 0, 0])
    y = np.full(1000, -9.80665 + 0.003)
    level = turn_on_bias(y, "m/s**2", c2, 100.0)
    assert abs(level.p0_std - np.hypot(0.003, 1e-4)) < 1e-6 and "level" in level.note
    tilted = turn_on_bias(np.full(1000, 4.0), "m/s**2", c2, 100.0)
    assert tilted.p0_std is None and "tilted" in tilted.note
