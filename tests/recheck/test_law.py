"""Re-check of a sensor whose noise follows a law: the sensor is compared, not the drive.

The simulated range sensor (range_sim.py) has σ² = a + b·r² about a beacon; a
baseline fitted with the covariate, then a new drive elsewhere (nearer, farther,
longer, shorter, another folder). False alarms and power are counted over seeded
pairs: the family-wise rate stated by the re-check is α = 1 % (Holm).
"""

from __future__ import annotations

import re
from collections import Counter

import numpy as np
import pytest
from scipy import stats

from noisecal.fit import compare
from tests.recheck.law_cases import pair_verdict


def _drives(rng, scale=1.0):
    """A baseline drive and a new one with other ranges and length."""
    near = rng.uniform(3, 20)
    base = dict(near=near, far=near + rng.uniform(8, 25), duration=float(rng.uniform(90, 180)))
    near2 = rng.uniform(3, 30)
    new = dict(near=near2, far=near2 + rng.uniform(8, 25),
               duration=float(rng.uniform(90, 180)), scale=scale)
    return base, new


ALIGNMENT = {"time_offset", "bias"}
"""Parameters whose intervals come from the sensor-truth alignment (the bias moves with
a misaligned offset on a moving covariate)."""


def _count(root, cases, first, scale=1.0, by_param=None):
    rng = np.random.default_rng(first)
    all_, decidable, noise = Counter(), Counter(), Counter()
    for s in range(cases):
        base, new = _drives(rng, scale)
        res = pair_verdict(root, first + s, base, new)
        all_[res.verdict] += 1
        decidable[compare.overall(res.comparisons, "decidable")] += 1
        # The verdict on the noise parameters alone (the law, outliers, sigma at x).
        kept = [c for c in res.comparisons if c.name not in ALIGNMENT]
        noise[compare.overall(kept, "decidable")] += 1
        if by_param is not None:
            by_param.update(c.name for c in res.comparisons if c.verdict in ("worse", "better"))
    print(f"scale {scale}, {cases} pairs: verdicts {dict(all_)}; "
          f"on what is decidable {dict(decidable)}; noise parameters only {dict(noise)}"
          + (f"; changed by parameter {dict(by_param)}" if by_param else ""))
    return all_, decidable, noise


def _not_above(k: int, n: int, rate: float) -> bool:
    """Whether k events in n are consistent (one-sided, 1 %) with a rate ≤ ``rate``:
    the binomial tail P(X ≥ k) under ``rate`` is above 1 %. Common practice, no source."""
    return bool(stats.binom.sf(k - 1, n, rate) > 0.01)


def test_same_law_farther_from_the_beacon_is_not_changed(tmp_path, run_cli):
    """The reported case: the same sensor driven a second time farther from its beacon
    (5–15 m, then 20–40 m), the covariate given on the command line. The pooled σ
    roughly triples with the drive (σ = √(a + b r²)), but the law's slope b is
    compared, and it is consistent; the intercept, pinned only near the beacon, is left
    undecided and said so. Exit 3 with every parameter, 0 on what the drive decides."""
    from tests.recheck.range_sim import write_drive, write_map

    a = tmp_path / "A"
    sensor, truth = write_drive(a, 1, near=5, far=15, name="base")
    mp = write_map(a)
    status, out, err = run_cli("motion", sensor, "--truth", truth, "--map", mp, "--covariate",
                               "beacon.B1.range", "-o", a / "base.yaml", "--quiet")
    assert status == 0, err
    s2, t2 = write_drive(tmp_path / "B", 2, near=20, far=40, name="new")
    status, out, err = run_cli("recheck", a / "base.yaml", s2, "--truth", t2, "--at", "10,30")
    assert status in (0, 3) and "CHANGED" not in out, out + err
    assert "range.sigma:" not in out            # the pooled σ is not compared
    assert "range.law_b: consistent" in out
    assert not re.search(r"(?<![\d.])1×", out), out
    status, out, err = run_cli("recheck", a / "base.yaml", s2, "--truth", t2,
                               "--verdict-on", "decidable")
    assert status == 0 and "CONSISTENT" in out, out + err
    if "law_a: inconclusive" in out:
        assert "left undecided:\n  range.law_a:" in out


def test_false_alarms_fast_tripwire(tmp_path):
    """20 seeded same-sensor pairs with different drives, lengths and folders: no
    'changed' (at α = 1 %, P(any of 20) ≈ 18 %; the measured rate over 200 is 0,
    see the slow test), and every pair decides at least one parameter."""
    all_, decidable, _ = _count(tmp_path, 20, 100)
    assert all_["changed"] <= 1, all_
    assert decidable["consistent"] >= 19, decidable


@pytest.fixture(scope="module")
def two_hundred_pairs(tmp_path_factory):
    """200 seeded same-sensor pairs (different ranges, lengths, folders)."""
    return _count(tmp_path_factory.mktemp("pairs"), 200, 10_000, by_param=Counter())


@pytest.mark.slow
def test_false_alarm_rate_of_the_noise_parameters(two_hundred_pairs):
    """Over 200 same-sensor pairs the share called 'changed' on the noise parameters
    (the law's b, its a where both drives pin it, σ where both drives overlap, the
    outlier fraction) is consistent with the stated family-wise rate α = 1 % (measured:
    0 of 200)."""
    _, _, noise = two_hundred_pairs
    assert _not_above(noise["changed"], 200, compare.ALPHA), noise


@pytest.mark.slow
def test_false_alarm_rate_of_every_parameter(two_hundred_pairs):
    """With the time offset and bias too, the whole verdict's false-alarm share over
    the same 200 pairs is consistent with α = 1 % (measured: 3 of 200, two on the time
    offset and one on the bias, whose intervals come from the alignment; the time
    offset's 95 % interval covered the true latency in 73 of 80 of these drives)."""
    all_, decidable, _ = two_hundred_pairs
    assert _not_above(all_["changed"], 200, compare.ALPHA), all_
    assert _not_above(decidable["changed"], 200, compare.ALPHA), decidable


def test_power_fast_tripwire(tmp_path):
    """σ × 1.5 at every range (both coefficients × 2.25), other drives: 'changed' in at
    least 5 of 6 pairs."""
    all_, _, _ = _count(tmp_path, 6, 200, scale=1.5)
    assert all_["changed"] >= 5, all_


@pytest.mark.slow
@pytest.mark.parametrize("scale,floor", [(1.25, 0.80), (1.5, 0.97)])
def test_power_against_a_changed_law(tmp_path, scale, floor):
    """Power over 100 seeded pairs with different drives: σ × 1.25 detected in at
    least 80 % (the re-check's stated 80 % power at the default tolerance 1.25), σ × 1.5
    in at least 97 % (measured: 96 and 100 of 100)."""
    all_, _, _ = _count(tmp_path, 100, 20_000, scale=scale)
    assert all_["changed"] >= floor * 100, all_
