"""The static fit on data shaped like real sensors, which its own model did not generate.

A MEMS output is low-passed before sampling, rounded by its ADC and may carry a
vibration line; the fit must still find the white noise, invent no terms, and
say when its model cannot follow the curve. The low-pass here is scipy's
Butterworth (a reference library), the flicker an independent Kasdin generator.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal

from noisecal.analysis.allan import allan_curve, deviation
from noisecal.analysis.psd import white_level
from noisecal.fit.ieee952 import basis6, fit_terms, term_estimates
from noisecal.fit.model_check import check_model
from noisecal.fit.simulate import one_pole, simulate_rate
from tests.sensor_sim import adc, kasdin_flicker, low_pass, vibration

PERIOD = 0.01
N = 1.75e-4       # rad/s/√Hz (0.6 deg/√h)
LSB = 2e-5        # rad/s ADC step: adds LSB²·PERIOD/12 to N² (Widrow & Kollár)
N_EFF = np.sqrt(N ** 2 + LSB ** 2 * PERIOD / 12.0)
SEEDS = (11, 12, 13)


def fitted(y, reps=100, seed=1):
    curve = allan_curve(y, PERIOD, "rad/s", "oadev", "octave")
    fit = fit_terms(curve, PERIOD, [(0, y.shape[0])], reps=reps, seed=seed)
    return term_estimates(fit, curve), curve, fit


def test_band_limit_column_is_the_low_pass_deficit():
    """White noise through a one-pole low-pass y_k = a·y_(k−1) + (1−a)·w_k: its Allan
    variance, computed exactly from the filter's impulse response
    (scipy.signal.dimpulse, reference library), approaches N²/τ − 3N²T/(2τ²) with
    T = 2a·τ0/(1 − a²) (the AR(1) autocovariance σ²(1−a)a^|j|/(1+a); Box & Jenkins,
    from memory) — the band-limit column of the fit."""
    a = 0.8
    h = signal.dimpulse(([1.0 - a], [1.0, -a], PERIOD), n=4000)[1][0].ravel()
    acov = np.correlate(h, h, "full")[h.size - 1:] / PERIOD  # rate variance per unit N²
    for m in (40, 80, 320):
        # AVAR of the m-average: (2·Var(S_m) − Cov(S_m, S_m shifted))/(m²) from the
        # autocovariance of the samples (exact for a stationary series).
        j = np.arange(-2 * m + 1, 2 * m)
        g = acov[np.abs(j)]
        tri = np.maximum(m - np.abs(j), 0)
        var_s = np.sum(tri * g)
        cov = np.sum(np.maximum(m - np.abs(j - m), 0) * g)
        avar = (var_s - cov) / m ** 2
        T = 2 * a * PERIOD / (1 - a ** 2)
        tau = m * PERIOD
        expected = basis6(np.array([tau]))[0] @ np.array([0, 1, 0, 0, 0, T / 2])
        assert avar == pytest.approx(expected, rel=2e-3)
    # The replicates' low-pass has the same deficit as the column it stands for.
    y = one_pole(np.random.default_rng(0).standard_normal(2 ** 18) / np.sqrt(PERIOD),
                 PERIOD, T)
    dev, _ = deviation(y, PERIOD, np.array([320]))
    assert dev[0] ** 2 == pytest.approx(expected, rel=0.05)


@pytest.mark.parametrize("cutoff", [5.0, 10.0, 20.0, 40.0])
def test_white_noise_through_a_low_pass(cutoff):
    """White noise through a 2nd-order Butterworth (scipy.signal.butter, DC gain 1)
    and ADC rounding: N (with the rounding's LSB²τ0/12 beside it, Widrow & Kollár)
    inside its interval in at least two of three seeds; no other term invented; the
    short taus left out; the PSD roll-off within 15 % of the cut-off (butter's
    −3 dB point)."""
    held = 0
    for seed in SEEDS:
        y = simulate_rate(np.array([0, N ** 2, 0, 0, 0]), PERIOD, 2 ** 16,
                          np.random.default_rng(seed))
        y = adc(low_pass(y, PERIOD, cutoff), LSB)
        terms, curve, fit = fitted(y, seed=seed)
        n = terms["white_noise"]
        assert n.resolved
        held += n.lower <= N_EFF <= n.upper
        for name in ("quantization", "bias_instability", "bias_random_walk", "rate_ramp"):
            assert not terms[name].resolved, (cutoff, name, terms[name])
        assert curve.taus[fit.used][0] >= 0.3 / cutoff
        psd = white_level(y, PERIOD, n.value, f_from=1.0)
        assert psd.roll_off_hz == pytest.approx(cutoff, rel=0.15)
    assert held >= 2


def test_reported_gyro_through_12_hz():
    """The reported case: a gyro with white noise, bias instability and random walk
    through a 2nd-order 12 Hz low-pass, ADC-rounded. The white noise was a bound 5×
    below the truth; now N, B and K are numbers whose intervals hold the truth in
    at least two of three seeds (IEEE Std 952 Annex C terms)."""
    deg = np.pi / 180
    truth = {"white_noise": N, "bias_instability": 5 * deg / 3600,
             "bias_random_walk": 20 * deg / 3600 / 60}
    c2 = np.array([0, N ** 2, truth["bias_instability"] ** 2,
                   truth["bias_random_walk"] ** 2, 0])
    hits = dict.fromkeys(truth, 0)
    for seed in SEEDS:
        y = simulate_rate(c2, PERIOD, 4 * 360_000, np.random.default_rng(seed))
        terms, _, _ = fitted(adc(low_pass(y, PERIOD, 12.0), LSB), seed=seed)
        for name, value in truth.items():
            e = terms[name]
            ref = N_EFF if name == "white_noise" else value
            hits[name] += e.resolved and e.lower <= ref <= e.upper
            assert e.resolved or e.upper >= ref, (name, e)
    assert all(v >= 2 for v in hits.values()), hits


def test_kasdin_flicker_is_bias_instability():
    """Flicker from Kasdin's generator (Proc. IEEE 1995), not the project's own:
    bias instability B recovered (floor 0.664·B, IEEE Std 952 Annex C) in at least
    two of three seeds, and the white noise beside it."""
    B = 3e-5
    held = 0
    for seed in SEEDS:
        y = simulate_rate(np.array([0, N ** 2, 0, 0, 0]), PERIOD, 2 ** 18,
                          np.random.default_rng(seed)) + kasdin_flicker(2 ** 18, PERIOD, B, seed + 100)
        terms, _, _ = fitted(y, seed=seed)
        e = terms["bias_instability"]
        held += e.resolved and e.lower <= B <= e.upper
    assert held >= 2


def test_model_check_flags_a_vibration_line():
    """A 7 Hz line of 2 mrad/s beside white noise: the model check is false and names
    the line (its frequency within 2 %); clean white noise passes (common practice,
    no source: a periodic disturbance bumps the Allan curve near τ ≈ 0.37/f)."""
    n = 2 ** 17
    clean = simulate_rate(np.array([0, N ** 2, 0, 0, 0]), PERIOD, n, np.random.default_rng(4))
    for y, expect in ((clean, True), (clean + vibration(n, PERIOD, 7.0, 2e-3), False)):
        terms, curve, fit = fitted(y)
        n_est = terms["white_noise"]
        psd = white_level(y, PERIOD, n_est.value or n_est.upper, f_from=0.5)
        check = check_model(curve, fit, psd, n * PERIOD)
        assert check.consistent is expect, check
        if not expect:
            assert "7" in check.cause and abs(psd.lines[0][0] - 7.0) < 0.14


def test_model_check_flags_a_step_the_terms_cannot_make():
    """A bias step halfway (a shock, a temperature jump) on white noise: no sum of the
    five terms makes the resulting curve, and the check says so (common practice,
    no source)."""
    n = 2 ** 17
    y = simulate_rate(np.array([0, N ** 2, 0, 0, 0]), PERIOD, n, np.random.default_rng(5))
    y[n // 2:] += 3e-4
    terms, curve, fit = fitted(y)
    check = check_model(curve, fit, None, n * PERIOD)
    bare_fit = not check.consistent or any(terms[k].resolved for k in
                                           ("bias_random_walk", "rate_ramp", "bias_instability"))
    assert bare_fit, "a step passed as white noise alone"


def test_a_glitch_fails_the_model_check():
    """One 5000σ sample (a logger glitch) in white noise triples the Allan white level;
    the check names it (a Gaussian sample beyond 10σ has probability 1.5e-23: common
    practice, no source), and quantized, flicker and random-walk records of the same
    length raise no spike, nor does heavy-tailed noise (Student t, 3 degrees of
    freedom: its far samples carry about a fifth of the variance, not most of it)."""
    from noisecal.fit.model_check import spikes

    n = 20000
    rng = np.random.default_rng(0)
    y = rng.normal(0, 1e-3, n)
    y[n // 2] += 5.0
    terms, curve, fit = fitted(y)
    glitch = spikes(y, PERIOD)
    assert glitch == (1, pytest.approx(n // 2 * PERIOD))
    check = check_model(curve, fit, None, n * PERIOD, glitch)
    assert not check.consistent and check.spikes == 1 and "spike" in check.cause
    for clean in (np.round(rng.normal(0, 1e-3, n) / 3e-3) * 3e-3,
                  simulate_rate(np.array([0, 0, 1e-6, 0, 0]), PERIOD, n, rng),
                  simulate_rate(np.array([0, 0, 0, 1e-6, 0]), PERIOD, n, rng),
                  rng.standard_t(3, 2 ** 20) * 1e-3):
        assert spikes(clean, PERIOD)[0] == 0


def test_filter_block_says_when_dt_meets_the_low_pass():
    """A 10 Hz low-passed gyro (time constant ~10 ms) characterised for a 10 ms filter
    step: the block says R = N²/dt overstates one sample's variance; for a 1 s step it
    says nothing (common practice, no source: samples within a filter's time constant
    are correlated)."""
    import noisecal

    y = simulate_rate(np.array([0, N ** 2, 0, 0, 0]), PERIOD, 2 ** 16, np.random.default_rng(5))
    rec = noisecal.read({"g": low_pass(y, PERIOD, 10.0)}, period=PERIOD, units={"g": "rad/s"})
    near = noisecal.static(rec, reps=40, dt=PERIOD).block.notes
    far = noisecal.static(rec, reps=40, dt=1.0).block.notes
    assert any("low-pass time constant" in n for n in near)
    assert not any("low-pass time constant" in n for n in far)


def _weak_walk_through_butterworth(seed, n=300_000):
    """White noise (1e-3 rad/s/√Hz) and a weak random walk (2e-5) through scipy's
    2nd-order 5 Hz Butterworth at 100 Hz."""
    c2 = np.array([0, 1e-6, 0, 4e-10, 0])
    y = simulate_rate(c2, PERIOD, n, np.random.default_rng(seed))
    return low_pass(y, PERIOD, 5.0)


def test_band_limit_column_stays_where_a_floor_would_take_its_place():
    """On this record every structure open picks white noise + bias instability without
    the band-limit column and N comes out 4.7 % low, outside its interval; with the
    column kept once the curve has shown its low-pass, the fit keeps N and the random
    walk. Common practice, no source (the low-pass's deficit does not end where the
    left-out taus do)."""
    y = _weak_walk_through_butterworth(5048)
    terms, curve, fit = fitted(y, reps=100, seed=3)
    assert not fit.used[0] and 5 in fit.selection.cols
    assert 2 not in fit.selection.cols
    n = terms["white_noise"]
    assert n.lower <= 1e-3 <= n.upper, (n.value, n.lower, n.upper)


@pytest.mark.slow
def test_white_noise_coverage_through_a_butterworth():
    """Coverage of N's 95 % interval over 150 records of 300 000 samples through the
    Butterworth (measured 94.0 %; 92.7 % when every structure was open after the
    left-out taus); 91–98 % accepted (binomial standard error 1.8 %)."""
    hits = 0
    for s in range(150):
        terms, _, _ = fitted(_weak_walk_through_butterworth(5000 + s), reps=200, seed=s)
        n = terms["white_noise"]
        hits += n.lower <= 1e-3 <= n.upper
    print(f"N coverage through a 5 Hz Butterworth: {hits / 150:.3f}")
    assert 0.91 <= hits / 150 <= 0.98
