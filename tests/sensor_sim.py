"""What real sensor recordings add to the noise terms, for tests the fit did not generate.

The static fit models a sum of IEEE Std 952 power laws sampled ideally. A real
MEMS output is low-passed before it is sampled (anti-aliasing or a digital
filter), rounded by its ADC, stamped with jitter, shaken by vibration lines and
drifted by temperature. Each function here adds one of those to a rate series
made by :func:`noisecal.fit.simulate.simulate_rate` (or to anything else).
"""

from __future__ import annotations

import numpy as np
from scipy import signal


def low_pass(y: np.ndarray, period: float, cutoff_hz: float, order: int = 2) -> np.ndarray:
    """Butterworth low-pass with DC gain 1 (scipy.signal.butter), applied causally.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples.
    period : float
        Sample period, s.
    cutoff_hz : float
        −3 dB frequency, Hz (below Nyquist).
    order : int
        Filter order.

    Returns
    -------
    ndarray, shape (n,)
    """
    sos = signal.butter(order, cutoff_hz, fs=1.0 / period, output="sos")
    # Start from the series' mean so the filter's start-up transient is not a step.
    zi = signal.sosfilt_zi(sos) * float(np.mean(y[:1000]))
    return signal.sosfilt(sos, y, zi=zi)[0]


def adc(y: np.ndarray, lsb: float) -> np.ndarray:
    """Round to the ADC's step ``lsb`` (same unit as y)."""
    return np.round(y / lsb) * lsb


def ns_stamps(n: int, period: float, jitter_s: float = 0.0, seed: int = 0) -> np.ndarray:
    """Integer-nanosecond time stamps with Gaussian jitter about the nominal grid."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) * period + rng.normal(0.0, jitter_s, n) if jitter_s else np.arange(n) * period
    return np.round(t * 1e9).astype(np.int64)


def vibration(n: int, period: float, freq_hz: float, amplitude: float,
              seed: int = 0) -> np.ndarray:
    """A periodic disturbance (a fan, a pump) of given frequency and amplitude."""
    phase = np.random.default_rng(seed).uniform(0, 2 * np.pi)
    return amplitude * np.sin(2 * np.pi * freq_hz * np.arange(n) * period + phase)


def warm_up(n: int, period: float, amplitude: float, time_constant_s: float) -> np.ndarray:
    """A temperature transient: an exponential settling of the bias after power-on."""
    return amplitude * np.exp(-np.arange(n) * period / time_constant_s)


def kasdin_flicker(n: int, period: float, b: float, seed: int = 0) -> np.ndarray:
    """Flicker rate noise by Kasdin's fractional-difference filter (alpha = −1 in rate).

    A second, independent generator of bias instability (the project's own
    simulator shapes the spectrum in the Fourier domain): white noise through
    the filter with coefficients h_k = h_{k-1}(k − 1 + a/2)/k, a = 1, truncated
    at n taps, scaled to one-sided PSD B²/(π f) at low frequency, so that the
    Allan floor is (2 ln2/π)·B² (IEEE Std 952 Annex C).

    References
    ----------
    N. J. Kasdin, "Discrete simulation of colored noise and stochastic processes
    and 1/f^alpha power law noise generation", Proc. IEEE 83(5), 1995, eq. (116).
    """
    rng = np.random.default_rng(seed)
    a = 1.0
    h = np.empty(n)
    h[0] = 1.0
    k = np.arange(1, n)
    h[1:] = np.cumprod((k - 1 + a / 2.0) / k)
    w = rng.standard_normal(n)
    size = 1 << int(np.ceil(np.log2(2 * n)))
    x = np.fft.irfft(np.fft.rfft(w, size) * np.fft.rfft(h, size), size)[:n]
    # Unit-variance white input has one-sided PSD 2·period; |H|² ≈ 1/(2π f·period) at
    # low f, so the output's PSD is 1/(π f): the factor b makes it B²/(π f).
    return x * b
