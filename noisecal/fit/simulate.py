"""Synthesis of rate data with given IEEE Std 952 terms (for bootstraps and tests).

Each term is generated so that its Allan variance is the Annex C expression:
quantization 3Q²/τ² (white phase of std Q), white noise N²/τ (white rate of
variance N²/τ0), bias instability (2 ln2/π)B² (flicker rate of one-sided PSD
B²/(π f)), rate random walk K²τ/3 (a random walk with increment variance K²τ0,
averaged over each sample period),
rate ramp R²τ²/2 (y = R·t). An optional first-order Gauss–Markov term has
stationary std sigma and correlation time T.

References
----------
IEEE Std 952-1997, Annex C. N. J. Kasdin, "Discrete simulation of colored
noise and stochastic processes and 1/f^alpha power law noise generation",
Proc. IEEE 83(5), 1995 (spectral shaping of white noise).
"""

from __future__ import annotations

import numpy as np

TERM_NAMES = ("quantization", "white_noise", "bias_instability", "bias_random_walk", "rate_ramp")
FLICKER_FLOOR = 2.0 * np.log(2.0) / np.pi
"""Allan variance of bias instability per B² (0.664² ≈ 0.4413; IEEE Std 952 Annex C)."""


def basis(taus: np.ndarray) -> np.ndarray:
    """Allan variance of each term per unit squared coefficient.

    Parameters
    ----------
    taus : ndarray, shape (k,)
        Averaging times, s.

    Returns
    -------
    A : ndarray, shape (k, 5)
        Columns for [Q², N², B², K², R²]: 3/τ², 1/τ, 2ln2/π, τ/3, τ²/2.
    """
    t = np.asarray(taus, dtype=np.float64)
    return np.column_stack([3.0 / t ** 2, 1.0 / t, np.full_like(t, FLICKER_FLOOR),
                            t / 3.0, t ** 2 / 2.0])


def gm_avar(taus: np.ndarray, sigma: float, corr_time: float) -> np.ndarray:
    """Allan variance of a first-order Gauss–Markov process (IEEE Std 952 Annex C).

    Parameters
    ----------
    taus : ndarray, shape (k,)
        Averaging times, s.
    sigma : float
        Stationary standard deviation, unit u.
    corr_time : float
        Correlation time T, s.

    Returns
    -------
    avar : ndarray, shape (k,)
        (q_c T)²/τ·[1 − (T/2τ)(3 − 4e^(−τ/T) + e^(−2τ/T))] with q_c² = 2σ²/T.
    """
    x = np.asarray(taus, dtype=np.float64) / corr_time
    small = x < 1e-3
    bracket = np.where(small, x ** 2 / 3.0 - x ** 3 / 4.0,
                       1.0 - (3.0 - 4.0 * np.exp(-x) + np.exp(-2.0 * x)) / (2.0 * np.where(small, 1.0, x)))
    return 2.0 * sigma ** 2 * corr_time / np.asarray(taus) * bracket


def flicker(n: int, period: float, h: float, rng: np.random.Generator) -> np.ndarray:
    """Flicker noise of one-sided PSD h/f, by spectral shaping of white noise.

    Parameters
    ----------
    n : int
        Samples.
    period : float
        Sample period, s.
    h : float
        PSD coefficient, u²/Hz·Hz (S(f) = h/f).
    rng : numpy.random.Generator

    Returns
    -------
    y : ndarray, shape (n,)
    """
    from scipy import fft

    # Padding to at least 2n keeps the circular wrap out of the kept part; a
    # length with small prime factors keeps the transform fast.
    size = fft.next_fast_len(2 * n, real=True)
    spec = fft.rfft(rng.standard_normal(size))
    f = np.fft.rfftfreq(size, d=period)
    spec[0] = 0.0
    spec[1:] /= np.sqrt(f[1:])
    # White unit-variance noise has one-sided PSD 2·period; scale to h at 1 Hz.
    return fft.irfft(spec, size)[:n] * np.sqrt(h / (2.0 * period))


def simulate_rate(c2: np.ndarray, period: float, n: int, rng: np.random.Generator,
                  gm: tuple[float, float] | None = None) -> np.ndarray:
    """Rate samples whose Allan variance is ``basis(τ) @ c2`` (+ a GM term).

    Parameters
    ----------
    c2 : ndarray, shape (5,)
        Squared coefficients [Q², N², B², K², R²], SI.
    period : float
        Sample period, s.
    n : int
        Samples.
    rng : numpy.random.Generator
    gm : (sigma, corr_time), optional
        Gauss–Markov term, sampled at the sample instants.

    Returns
    -------
    y : ndarray, shape (n,)
    """
    q2, n2, b2, k2, r2 = (float(v) for v in c2)
    y = np.zeros(n)
    if q2 > 0:
        x = rng.standard_normal(n + 1) * np.sqrt(q2)
        y += np.diff(x) / period
    if n2 > 0:
        y += rng.standard_normal(n) * np.sqrt(n2 / period)
    if b2 > 0:
        y += flicker(n, period, b2 / np.pi, rng)
    if k2 > 0:
        y += averaged_random_walk(n, period, k2, rng)
    if r2 > 0:
        y += np.sqrt(r2) * period * np.arange(n)
    if gm is not None and gm[0] > 0:
        y += gauss_markov(n, period, gm[0], gm[1], rng)
    return y


def averaged_random_walk(n: int, period: float, k2: float,
                         rng: np.random.Generator) -> np.ndarray:
    """Averages over each sample period of a rate random walk (exact).

    With W the random walk (increment variance K²·dt) and ΔW_j its step over
    sample j, the sample's average is W_j + U_j where U_j = ΔW_j/2 + V_j and
    V_j ~ N(0, K²·dt/12) is independent (the Brownian-bridge part). Averaged
    samples keep σ²(τ) = K²τ/3 exactly at every τ = m·dt, so a record
    simulated at a coarser period (the decimated bootstrap) has the same Allan
    variance as one simulated sample for sample.
    """
    step = rng.standard_normal(n) * np.sqrt(k2 * period)
    start = np.concatenate([[0.0], np.cumsum(step[:-1])])
    return start + 0.5 * step + rng.standard_normal(n) * np.sqrt(k2 * period / 12.0)


def gauss_markov(n: int, period: float, sigma: float, corr_time: float,
                 rng: np.random.Generator) -> np.ndarray:
    """Stationary first-order Gauss–Markov samples (exact AR(1) discretisation).

    phi = exp(−dt/T), driving variance sigma²(1 − phi²) (Brown & Hwang).
    """
    from scipy.signal import lfilter

    phi = np.exp(-period / corr_time)
    w = rng.standard_normal(n) * sigma * np.sqrt(1.0 - phi ** 2)
    w[0] = rng.standard_normal() * sigma
    return lfilter([1.0], [1.0, -phi], w)
