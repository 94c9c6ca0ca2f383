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

from dataclasses import dataclass

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


def pole_for(period: float, time_constant: float) -> float:
    """Pole a of the one-pole low-pass whose Allan deficit is 3N²T/(2τ²), T = ``time_constant``.

    For y_k = a·y_(k−1) + (1 − a)·w_k the variance of a sum of m samples is
    σ²(m − 2a/(1 − a²)) plus terms in a^m (from the AR(1) autocovariance
    σ²(1 − a)a^|j|/(1 + a)), so a solves T(1 − a²) = 2a·period; for T ≫
    period, a ≈ exp(−period/T).
    """
    return float((np.hypot(period, time_constant) - period) / time_constant)


def one_pole(y: np.ndarray, period: float, time_constant: float) -> np.ndarray:
    """First-order low-pass of DC gain 1 with the pole of :func:`pole_for`: the band
    limit in bootstrap replicates."""
    from scipy.signal import lfilter

    a = pole_for(period, time_constant)
    return lfilter([1.0 - a], [1.0, -a], y)


@dataclass(frozen=True)
class RateModel:
    """A rate process of known terms, as the parametric bootstraps simulate it.

    Calling it is the reference simulation (numpy, one record);
    :func:`replicate_avar` simulates the same process in compiled batches.

    Attributes
    ----------
    c2 : ndarray, shape (5,)
        Squared coefficients [Q², N², B², K², R²], SI (negative entries count as 0).
    gm : (sigma, corr_time), optional
        Gauss–Markov term: stationary std (unit u) and correlation time (s).
    low_pass : float
        Time constant (s) of a first-order low-pass of DC gain 1 applied to the
        whole record (a band-limited sensor); 0 for none.
    """

    c2: np.ndarray
    gm: tuple[float, float] | None = None
    low_pass: float = 0.0

    def __call__(self, period: float, n: int, rng: np.random.Generator) -> np.ndarray:
        y = simulate_rate(np.maximum(self.c2, 0.0), period, n, rng, gm=self.gm)
        return one_pole(y, period, self.low_pass) if self.low_pass > 0 else y

    def pole(self, period: float) -> float:
        """Pole of the discrete low-pass at ``period`` (:func:`pole_for`; 0 for none)."""
        return pole_for(period, self.low_pass) if self.low_pass > 0 else 0.0

    def params(self, period: float) -> np.ndarray:
        """Per-sample parameters of a record at ``period`` (``engine.RECORD_PARAMS``)."""
        q2, n2, _, k2, r2 = (max(float(v), 0.0) for v in self.c2)
        sigma, corr = self.gm if self.gm is not None and self.gm[0] > 0 else (0.0, 1.0)
        phi = np.exp(-period / corr)
        # The random walk's bridge part N(0, K²dt/12) is white and independent of the
        # white noise: one draw of their summed variance has the same distribution.
        white = n2 / period + (k2 * period / 12.0 if k2 > 0 else 0.0)
        pole = self.pole(period)
        return np.array([period, np.sqrt(white), np.sqrt(q2), np.sqrt(k2 * period),
                         np.sqrt(r2) * period, phi, sigma, sigma * np.sqrt(1.0 - phi ** 2),
                         pole])

    def flicker_batch(self, count: int, period: float, n: int,
                      rng: np.random.Generator) -> np.ndarray:
        """Flicker parts of ``count`` records, shape (count, n), or (count, 0) if none."""
        b2 = max(float(self.c2[2]), 0.0)
        if b2 <= 0:
            return np.empty((count, 0))
        from scipy import fft

        from ..analysis.engine import fill_normals

        size = fft.next_fast_len(2 * n, real=True)
        bins = size // 2 + 1
        # The rfft of white unit noise, drawn directly: bins strictly between DC and
        # Nyquist are complex with independent N(0, size/2) parts, a Nyquist bin
        # (even size) is real N(0, size). Same distribution, one transform fewer.
        raw = fill_normals(rng, np.empty(count * bins * 2))
        spec = raw.view(np.complex128).reshape(count, bins) * np.sqrt(size / 2.0)
        if size % 2 == 0:
            spec[:, -1] = spec[:, -1].real * np.sqrt(2.0)
        f = np.fft.rfftfreq(size, d=period)
        spec[:, 0] = 0.0
        spec[:, 1:] /= np.sqrt(f[1:])
        return np.ascontiguousarray(fft.irfft(spec, size, axis=1)[:, :n]) * np.sqrt(
            b2 / np.pi / (2.0 * period))


CHUNK = 8
"""Replicates per compiled call and per seed of the batched bootstrap: small enough
that both cores get work with 200 replicates, large enough to amortise the call."""


def replicate_avar(model: RateModel, expected, period: float, m: np.ndarray,
                   segments: list[tuple[int, int]], reps: int, seed: int,
                   progress=None, full_max: int = 2 ** 16) -> np.ndarray:
    """Allan variance curves of records simulated from ``model``, in compiled batches.

    The same two-level scheme as :func:`noisecal.fit.ieee952.replicate_curves`
    (its reference path is the specification; a test compares the two over
    seeds): records up to ``full_max`` samples are simulated whole with the gap
    layout; longer ones as a fine record of ``full_max`` samples for m < 4d,
    its deviations from the model scaled by sqrt(terms there / terms in the
    real record), and a record at period d·tau0 over the full duration for
    the rest. Replicates are simulated ``CHUNK`` at a time, each chunk from its
    own child of ``numpy.random.SeedSequence(seed)``, on the engine's threads
    (the kernels release the GIL); the result depends on the seed only, not on
    the number of cores.

    Parameters
    ----------
    model : RateModel
    expected : callable
        ``expected(taus)`` → model Allan variance, shape (k,).
    period : float
        Sample period, s.
    m : ndarray of int, shape (k,)
        Averaging factors of the fit grid.
    segments : list of (start, stop)
        Gap layout of the real record.
    reps : int
        Number of replicates.
    seed : int
        Seed of the replicates.
    progress : callable, optional
        Called with the number of replicates done after each chunk.
    full_max : int
        Longest record simulated sample for sample.

    Returns
    -------
    avar : ndarray, shape (reps, k)
        Unit u².
    """
    from ..analysis import engine

    m = np.asarray(m, dtype=np.int64)
    n = int(sum(b - a for a, b in segments))
    k = m.shape[0]
    if n <= full_max:
        # Runs re-based onto the simulated record, which holds only the samples.
        lengths = np.array([b - a for a, b in segments], dtype=np.int64)
        stops = np.cumsum(lengths)
        levels = [(np.ones(k, dtype=bool), period, n, stops - lengths, stops, m)]
        model_fine, ratio = None, None
    else:
        d = 2 ** int(np.ceil(np.log2(n / full_max)))
        fine = m < 4 * d
        one = np.zeros(1, dtype=np.int64)
        levels = [(fine, period, full_max, one, one + full_max, m[fine]),
                  (~fine, period * d, n // d, one, one + n // d, m[~fine] // d)]
        model_fine = expected(m[fine] * period)
        ratio = np.sqrt(np.maximum(full_max + 1 - 2 * m[fine], 1) / (n + 1 - 2 * m[fine]))
    out = np.empty((reps, k))
    sizes = [min(CHUNK, reps - s) for s in range(0, reps, CHUNK)]
    children = np.random.SeedSequence(seed).spawn(len(sizes))

    def chunk(count, child):
        rng = np.random.default_rng(child)
        block = np.empty((count, k))
        for cols, p, length, starts, stops, ms in levels:
            part = np.empty((count, ms.shape[0]))
            # Flicker spectra one record at a time: a chunk's worth held 25 MB per thread.
            step = 1 if model.c2[2] > 0 else count
            for r in range(0, count, step):
                engine.oavar_records(rng, model.params(p), length, starts, stops, ms,
                                     model.flicker_batch(step, p, length, rng),
                                     part[r:r + step])
            block[:, cols] = part
        return block

    pool = engine._pool()
    futures = [pool.submit(chunk, c, s) for c, s in zip(sizes, children)]
    try:
        row = 0
        for count, fut in zip(sizes, futures):
            out[row:row + count] = fut.result()
            row += count
            if progress:
                progress(count)
    finally:
        for fut in futures:
            fut.cancel()
    if model_fine is None:
        return out
    fine = levels[0][0]
    out[:, fine] = model_fine + (out[:, fine] - model_fine) * ratio
    return np.maximum(out, 0.0)
