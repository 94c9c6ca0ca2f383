"""Which terms the data need: false resolution of absent terms and resolution power.

A term counts as resolved when the model selection keeps it (what
:func:`term_estimates` reports as a number; a same-size swap within the near-tie
margin is reported beside it). The fast set is a tripwire over 60 seeds; the slow set measures the
rates over 400 seeds per case and prints the tables the README quotes.
"""

from __future__ import annotations

import numpy as np
import pytest

from noisecal.analysis.allan import allan_curve
from noisecal.fit.ieee952 import Selection, basis6, mixture_edf, usable_from
from noisecal.fit.simulate import TERM_NAMES, simulate_rate

PERIOD = 0.1
N2 = 1e-6
CASES = {  # white noise with one other term whose curve crosses white's inside the record
    "white": [0, N2, 0, 0, 0],
    "white+random walk": [0, N2, 0, (1e-3 / 30) ** 2, 0],
    "white+bias instability": [0, N2, 1e-7, 0, 0],
    "white+ramp": [0, N2, 0, 0, 1e-10],
    "white+quantization": [1e-5, N2, 0, 0, 0],
}


def resolved(curve, segments) -> set[int]:
    """Columns reported as numbers, by the fit's own selection path."""
    A = basis6(curve.taus)
    avar = curve.dev ** 2
    _, sel = usable_from(A, avar, curve.edf)
    nu = mixture_edf(curve, segments, sel.c6)
    _, sel = usable_from(A, avar, nu)
    return set(sel.cols)


def rates(c2, n: int, runs: int, first_seed: int) -> np.ndarray:
    """Share of seeded records in which each of the five terms is resolved."""
    hits = np.zeros(5)
    for s in range(runs):
        y = simulate_rate(np.array(c2, float), PERIOD, n, np.random.default_rng(first_seed + s))
        curve = allan_curve(y, PERIOD, "rad/s", "oadev", "octave")
        for i in resolved(curve, [(0, n)]) - {5}:
            hits[i] += 1
    return hits / runs


def test_false_resolution_tripwire():
    """Absent terms are resolved in at most 5 % of records (the specified bound); with
    60 seeds a true 5 % exceeds 6/60 with probability 8 %, so the tripwire fails at
    more than 8/60 (binomial, common practice)."""
    for name, c2 in CASES.items():
        r = rates(c2, 2 ** 14, 60, 500)
        for i, t in enumerate(TERM_NAMES):
            if c2[i] == 0:
                assert r[i] <= 8 / 60, (name, t, r)


def test_present_terms_are_found():
    """Each present term is resolved in most records (a floor far below the measured
    power, so the test trips only on a broken selection)."""
    for name, c2 in CASES.items():
        r = rates(c2, 2 ** 14, 30, 900)
        for i, t in enumerate(TERM_NAMES):
            if c2[i] > 0:
                assert r[i] >= 0.5, (name, t, r)


def test_near_tie_swaps_are_named():
    """A same-size structure within the margin is reported as a swap of one column."""
    sel = Selection(cols=(1, 3), c6=np.array([0, 1, 0, 1, 0, 0.0]), criterion=10.0,
                    ranked=[((1, 3), 10.0), ((1, 4), 11.0), ((1, 2, 3), 15.0)])
    assert sel.swappable() == {3: {4}}
    ties = sel.near_ties()
    assert len(ties) == 1 and "rate_ramp in place of bias_random_walk" in ties[0]


def test_needed_random_walk_stays_resolved():
    """The reported case: 2 h at 200 Hz, random walk 7x the white level at the longest
    fitted tau. The random walk was a bound when 9.5 % of replicates gave the rise to
    the ramp; selection then a bootstrap within the structure resolves it in at least
    two of three seeds (IEEE Std 952 Annex C terms)."""
    period, n = 1 / 200, 2 * 3600 * 200
    N = 1e-3
    y0 = simulate_rate(np.array([0, N ** 2, 0, 0, 0]), period, 2 ** 12, np.random.default_rng(0))
    top = allan_curve(y0, period, "rad/s").taus  # grid shape only
    tau_max = 2 * 3600 * 0.25
    # K·sqrt(τ/3) = 7·N/sqrt(τ) at the longest fitted tau.
    K = 7 * N / np.sqrt(tau_max) / np.sqrt(tau_max / 3)
    assert top.size
    held = []
    for seed in (1, 2, 3):
        y = simulate_rate(np.array([0, N ** 2, 0, K ** 2, 0]), period, n,
                          np.random.default_rng(seed))
        curve = allan_curve(y, period, "rad/s", "oadev", "octave")
        held.append(3 in resolved(curve, [(0, n)]))
    assert sum(held) >= 2, held


@pytest.mark.slow
def test_resolution_tables():
    """False resolution ≤ 5 % for every absent term (the bound of the static fit's
    specification) and resolution power per case, over 400 seeds at two record lengths
    (printed for the README)."""
    bad = []
    for n in (2 ** 14, 2 ** 16):
        for name, c2 in CASES.items():
            r = rates(c2, n, 400, 20000)
            print(f"{n} samples, {name}: " + ", ".join(
                f"{t} {v:.3f}" for t, v in zip(TERM_NAMES, r)))
            bad += [(n, name, t, v) for i, (t, v) in enumerate(zip(TERM_NAMES, r))
                    if c2[i] == 0 and v > 0.05]
    assert not bad, bad


def test_random_walk_takes_a_floor_it_ties_with():
    """Bias instability in place of a random walk within ``RANDOM_WALK_BAND`` gives way
    to the random walk, and the swap is reported as a near tie (common practice, no
    source: the random walk is the filter's safer model where the data cannot tell)."""
    from noisecal.fit.ieee952 import RANDOM_WALK_BAND, select_structure

    taus = 0.1 * 2.0 ** np.arange(10)
    A = basis6(taus)
    nu = np.array([400, 300, 200, 120, 80, 40, 20, 10, 5, 3.0])  # EDFs falling with tau
    # White noise and a floor that shows only at the last, low-EDF points.
    sel = select_structure(A, A[:, 1] * 1e-2 + A[:, 2] * 2e-3, nu)
    scores = dict(sel.ranked)
    assert 0 < scores[(1, 3)] - scores[(1, 2)] < RANDOM_WALK_BAND, sel.ranked[:4]
    assert sel.cols == (1, 3), sel.ranked[:4]
    assert any("bias_instability in place of bias_random_walk" in t for t in sel.near_ties())
    # A floor over several octaves keeps bias instability.
    sel = select_structure(A, A[:, 1] * 1e-2 + A[:, 2] * 2e-2, nu)
    assert sel.cols == (1, 2), sel.ranked[:4]


@pytest.mark.slow
def test_resolution_power_against_strength():
    """Share of 100 seeded 2^16-sample records that resolve random walk, bias
    instability or ramp, against where the term's Allan deviation crosses the white
    noise's (as a fraction of the record). Printed for the README; a term crossing at
    1/32 of the record or earlier is resolved in at least 80 % of records (measured
    83-97 %). IEEE Std 952 Annex C expressions for the crossings."""
    from noisecal.fit.simulate import FLICKER_FLOOR

    n = 2 ** 16
    record = n * PERIOD
    for frac in (1 / 2, 1 / 8, 1 / 32, 1 / 64):
        tc = record * frac
        row, stand_in = [], []
        for i, c2 in ((3, [0, N2, 0, 3 * N2 / tc ** 2, 0]),
                      (2, [0, N2, N2 / tc / FLICKER_FLOOR, 0, 0]),
                      (4, [0, N2, 0, 0, 2 * N2 / tc ** 3])):
            r = rates(c2, n, 100, 70000)
            row.append(r[i])
            stand_in.append(r[{3: 2, 2: 3, 4: 3}[i]])
        print(f"crossing at {frac:.4f} of the record: random walk {row[0]:.2f}, "
              f"bias instability {row[1]:.2f}, ramp {row[2]:.2f}; the absent term "
              f"standing in (bias instability, random walk, random walk): "
              f"{stand_in[0]:.2f}, {stand_in[1]:.2f}, {stand_in[2]:.2f}")
        if frac <= 1 / 32:
            # Measured 0.83-1.00: a weak floor seen only at the last points gives way to
            # the random walk within RANDOM_WALK_BAND (the filter's safer model).
            assert min(row) >= 0.8, (frac, row)
