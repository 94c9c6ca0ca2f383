"""Coverage of the motion job's intervals over seeded simulated drives.

Truth: latency 60 ms, σ = (10 mm, 0.02 rad), ρ = 0.4, 3 % gross outliers. The
fast set (40 drives) is a tripwire (binomial standard error 3.4 % at 95 %);
the slow set (600 drives, binomial standard error 0.9 %) is the measurement,
in the 93–97 % band.
"""

from __future__ import annotations

import pytest

from noisecal.analysis.align import estimate_offset, residuals
from noisecal.fit.measurement import fit_measurement
from tests.motion.sim import SENSOR_HZ, drive

LATENCY, SIGMA, RHO, OUTLIERS = 0.06, (0.01, 0.02), 0.4, 0.03


def coverage(runs: int, first_seed: int) -> dict:
    hits = {"latency": 0, "sigma_offset": 0, "sigma_heading": 0, "covariance": 0,
            "outlier_fraction": 0}
    true_cov = RHO * SIGMA[0] * SIGMA[1]
    for s in range(runs):
        t, values, truth, _, _ = drive(first_seed + s, latency=LATENCY, sigma=SIGMA, rho=RHO,
                                       outliers=OUTLIERS)
        a = estimate_offset(values, truth, t, max_offset=0.5)
        r = residuals(values[a.used], truth, t[a.used], a.offset)
        m = fit_measurement(r, ("y", "yaw"), ("m", "rad"), 1 / SENSOR_HZ, seed=s)
        hits["latency"] += a.lower <= LATENCY <= a.upper
        for j, key in enumerate(("sigma_offset", "sigma_heading")):
            e = m.channels[j].sigma
            hits[key] += e.lower <= SIGMA[j] <= e.upper
        hits["covariance"] += m.R_low[0, 1] <= true_cov <= m.R_high[0, 1]
        o = m.outlier_fraction
        hits["outlier_fraction"] += o.lower <= OUTLIERS <= o.upper
    result = {k: v / runs for k, v in hits.items()}
    print(f"coverage over {runs} drives: {result}")
    return result


def test_coverage_fast_set():
    """Latency, both sigmas, the covariance and the outlier rate each covered in at
    least 85 % of 40 seeded drives (95 % intervals; tripwire band for 40 runs,
    binomial theory)."""
    cov = coverage(40, 7000)
    assert all(v >= 0.85 for v in cov.values()), cov


@pytest.mark.slow
def test_coverage_slow_set():
    """600 seeded drives: every 95 % interval covers 93–97 % (acceptance band),
    the Clopper–Pearson outlier interval at least 93 % (it is conservative by
    construction)."""
    cov = coverage(600, 70_000)
    assert all(0.93 <= cov[k] <= 0.97 for k in cov if k != "outlier_fraction"), cov
    assert cov["outlier_fraction"] >= 0.93, cov
