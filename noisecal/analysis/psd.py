"""Welch PSD of a channel: an independent check of the white-noise level.

References
----------
P. D. Welch, "The use of fast Fourier transform for the estimation of power
spectra", IEEE Trans. Audio Electroacoust. 15(2), 1967.
IEEE Std 952-1997, Annex C: a white rate noise of coefficient N has the
two-sided PSD N², i.e. the one-sided PSD 2N².
"""

from __future__ import annotations

import numpy as np
from scipy import signal

from ..types import PsdCheck


MAX_SAMPLES = 1 << 21
"""Samples the PSD uses at most (its first part): ~1000 averaged segments read the
white level to about 3 %, and a day at 400 Hz would need gigabytes of segments."""


def white_level(y: np.ndarray, period: float, band: tuple[float, float] = (0.2, 0.45),
                nperseg: int = 4096) -> PsdCheck:
    """White-noise coefficient N read from the upper part of a Welch PSD.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples of one contiguous segment, unit u (the first
        ``MAX_SAMPLES`` are used).
    period : float
        Sample period, s.
    band : tuple of float
        Band as fractions of the sample rate (Nyquist is 0.5); the upper band
        is above bias-instability and random-walk corners in bench data.
    nperseg : int
        Welch segment length (shortened for short records).

    Returns
    -------
    PsdCheck
        The PSD (one-sided, u²/Hz) and N = sqrt(mean PSD in band / 2), u/√Hz.
    """
    fs = 1.0 / period
    y = np.asarray(y[:MAX_SAMPLES], dtype=np.float64)
    nseg = int(min(nperseg, max(16, y.shape[0] // 8)))
    freq, psd = signal.welch(y - y.mean(), fs=fs, nperseg=nseg, detrend="linear")
    lo, hi = band[0] * fs, band[1] * fs
    inband = (freq >= lo) & (freq <= hi)
    level = float(np.mean(psd[inband])) if inband.any() else float(np.mean(psd[1:]))
    return PsdCheck(freq=freq, psd=psd, white_noise=float(np.sqrt(level / 2.0)),
                    band_hz=(float(lo), float(hi)))
