"""Welch PSD of a channel: the white level, the sensor's roll-off, narrow lines.

A white rate noise of coefficient N has the one-sided PSD 2N². A sensor's own
low-pass (anti-aliasing or a digital filter) rolls the PSD off below Nyquist;
the roll-off frequency is where the smoothed PSD falls to half the white level
(−3 dB) and stays below it. A vibration or an electrical line is a narrow
peak well above the smoothed PSD around it.

References
----------
P. D. Welch, "The use of fast Fourier transform for the estimation of power
spectra", IEEE Trans. Audio Electroacoust. 15(2), 1967.
IEEE Std 952-1997, Annex C: a white rate noise of coefficient N has the
two-sided PSD N², i.e. the one-sided PSD 2N².
"""

from __future__ import annotations

import numpy as np
from ..types import PsdCheck

MAX_SAMPLES = 1 << 21
"""Samples the PSD uses at most (its first part): ~1000 averaged segments read the
white level to about 3 %, and a day at 400 Hz would need gigabytes of segments."""

LINE_FACTOR = 20.0
"""A line is a bin this many times above the running median PSD (13 dB)."""


def spectrum(y: np.ndarray, period: float, nperseg: int = 4096) -> tuple[np.ndarray, np.ndarray]:
    """One-sided Welch PSD (Hann window, linear detrend per segment).

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples of one contiguous segment, unit u (the first
        ``MAX_SAMPLES`` are used).
    period : float
        Sample period, s.
    nperseg : int
        Segment length (shortened for short records).

    Returns
    -------
    freq : ndarray, shape (f,)
        Hz.
    psd : ndarray, shape (f,)
        u²/Hz.
    """
    from .engine import welch_linear

    y = np.asarray(y[:MAX_SAMPLES], dtype=np.float64)
    nseg = int(min(nperseg, max(16, y.shape[0] // 8)))
    # scipy.signal.welch's numbers (tested there), segments detrended in batches.
    return welch_linear(y, 1.0 / period, nseg, centre=y.mean())


def _smooth(psd: np.ndarray, half: int) -> np.ndarray:
    """Running median over ±``half`` bins: the PSD without its lines.

    The ends repeat the edge bins (scipy.ndimage.median_filter's ``mode="nearest"``,
    tested equal to it); numpy's sliding windows spare loading scipy.ndimage.
    """
    padded = np.pad(np.asarray(psd, dtype=np.float64), half, mode="edge")
    windows = np.lib.stride_tricks.sliding_window_view(padded, 2 * half + 1)
    return np.median(windows, axis=1)


def roll_off(freq: np.ndarray, psd: np.ndarray, white_psd: float, f_from: float) -> float | None:
    """Frequency where the PSD falls to half the white level and stays below it.

    Parameters
    ----------
    freq, psd : ndarray, shape (f,)
        One-sided Welch PSD.
    white_psd : float
        The white level 2N², u²/Hz.
    f_from : float
        Lowest frequency to look at, Hz (above the bias terms' corners).

    Returns
    -------
    float or None
        Hz; None when the PSD stays above half the white level up to Nyquist.
    """
    smooth = _smooth(psd, 8)
    sel = freq >= f_from
    f, s = freq[sel], smooth[sel]
    above = s >= 0.5 * white_psd
    if f.size == 0 or above[-1]:
        return None
    last = np.flatnonzero(above)
    if last.size == 0:
        return float(f[0])
    j = int(last[-1])
    # Interpolate the crossing on a log scale between the last bin above and the next.
    s0, s1 = np.log(s[j]), np.log(s[j + 1])
    frac = (np.log(0.5 * white_psd) - s0) / (s1 - s0) if s1 != s0 else 0.0
    return float(f[j] + frac * (f[j + 1] - f[j]))


def lines(freq: np.ndarray, psd: np.ndarray, f_from: float) -> tuple:
    """Narrow peaks of the PSD: (frequency Hz, amplitude u), strongest first.

    A line is a run of bins more than ``LINE_FACTOR`` times the running median;
    its amplitude is that of the sinusoid with the run's excess power.
    """
    smooth = _smooth(psd, 16)
    df = float(freq[1] - freq[0])
    hot = (psd > LINE_FACTOR * smooth) & (freq >= f_from)
    out = []
    j = 0
    idx = np.flatnonzero(hot)
    while j < idx.size:
        k = j
        while k + 1 < idx.size and idx[k + 1] <= idx[k] + 2:
            k += 1
        run = slice(max(idx[j] - 2, 0), idx[k] + 3)
        power = float(np.sum(psd[run] - smooth[run]) * df)
        peak = idx[j] + int(np.argmax(psd[idx[j]:idx[k] + 1]))
        out.append((float(freq[peak]), float(np.sqrt(2.0 * max(power, 0.0)))))
        j = k + 1
    return tuple(sorted(out, key=lambda p: -p[1]))


def white_level(y: np.ndarray, period: float, white_noise: float | None = None,
                f_from: float | None = None, nperseg: int = 4096) -> PsdCheck:
    """The PSD's white level, roll-off and lines, as a check of the Allan fit.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Rate samples of one contiguous segment, unit u.
    period : float
        Sample period, s.
    white_noise : float, optional
        N from the Allan fit, u/√Hz: the reference level for the roll-off.
        Without it the level is read in 0.2–0.45 × the sample rate.
    f_from : float, optional
        Lowest frequency where the white noise dominates, Hz (default: a
        twentieth of Nyquist).
    nperseg : int
        Welch segment length.

    Returns
    -------
    PsdCheck
        The PSD, the equivalent N read in the band below the roll-off (one
        octave wide, ending at half the roll-off or at 0.45 × the sample rate),
        the band, the roll-off frequency (None if none below Nyquist) and lines.
    """
    fs = 1.0 / period
    freq, psd = spectrum(y, period, nperseg)
    f_from = 0.025 * fs if f_from is None else max(float(f_from), freq[1])
    ref = 2.0 * white_noise ** 2 if white_noise else None
    cut = roll_off(freq, psd, ref, f_from) if ref else None
    hi = min(0.45 * fs, 0.5 * cut) if cut else 0.45 * fs
    lo = max(f_from, hi / 2.0) if ref else 0.2 * fs
    inband = (freq >= lo) & (freq <= hi)
    band = psd[inband] if inband.sum() >= 3 else psd[1:]
    # The mean (unbiased, unlike a median of chi-square bins) without line bins.
    level = float(np.mean(band[band < LINE_FACTOR * np.median(band)]))
    return PsdCheck(freq=freq, psd=psd, white_noise=float(np.sqrt(level / 2.0)),
                    band_hz=(float(lo), float(hi)), roll_off_hz=cut,
                    lines=lines(freq, psd, f_from))
