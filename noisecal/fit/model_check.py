"""Does the fitted term model follow the Allan curve? Per point and as a whole.

The whole-curve test compares the fit's chi-square deviance over the fitted
points with the deviances of the bootstrap replicates, which were simulated
from the fitted model with the record's length and gaps and fitted the same
way: overlapping Allan points are correlated, and the replicates carry that
correlation, so the p-value needs no independence assumption. Per point, the
model must lie inside the point's 95 % interval. Points left out of the fit at
short taus are classified: below the model is a band limit (the sensor's
low-pass), above it something the terms cannot make there.

References
----------
B. Efron, R. Tibshirani, *An Introduction to the Bootstrap* (1993), ch. 16
(parametric bootstrap goodness of fit). NIST SP 1065 (2008), §5.3 (per-point
chi-square intervals).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..types import AllanCurve, PsdCheck
from .ieee952 import TermFit, basis6

P_MIN = 0.01
"""Whole-curve p-value below which the model is declared not to follow the curve."""

SPIKE_SIGMAS = 10.0
"""A sample this many robust σ from its neighbours' median is a spike: Gaussian noise
gives one beyond 10σ with probability 1.5e-23 per sample."""


SPIKE_SHARE = 0.5
"""Share of the sample-to-sample variance the spikes must carry to count."""


def spikes(y: np.ndarray, period: float) -> tuple:
    """Isolated glitches in a static record: (count, time of the first, s).

    A sample that differs from the median of its five-sample window by more
    than ``SPIKE_SIGMAS`` robust standard deviations of the sample-to-sample
    differences (MAD × 1.4826/√2; Rousseeuw & Croux 1993) is a spike: a
    logger glitch or a shock, which the Allan variance would read as white
    noise (one spike of 5000σ tripled N in a test record). They are reported
    when they carry at least ``SPIKE_SHARE`` of the sample-to-sample variance,
    so heavy-tailed noise is not called glitches.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Samples of one contiguous segment (the first 2^21 are looked at).
    period : float
        Sample period, s.
    """
    y = np.asarray(y[: 1 << 21], dtype=np.float64)
    n = y.shape[0]
    if n < 8:
        return (0, None)
    from ..analysis.engine import beyond, median_select

    d = np.diff(y)
    # np.median's values, by a counting pass (the two full medians cost 50 ms).
    sigma = 1.4826 * median_select(d, centre=median_select(d)) / np.sqrt(2.0)
    if sigma <= 0:
        return (0, None)
    # A sample K σ from the median of its five-sample window differs by more than K σ
    # from at least two of its four neighbours, so one of the four steps about it
    # exceeds K σ/2: only those few candidates need the median (a full median filter
    # cost 0.2 s per channel on 2^21 samples).
    big = beyond(d, SPIKE_SIGMAS * sigma / 2.0)
    if big.size == 0:
        return (0, None)
    cand = np.unique(np.clip((big[:, None] + np.arange(-1, 3)).ravel(), 0, n - 1))
    window = np.clip(cand[:, None] + np.arange(-2, 3), 0, n - 1)
    med = np.median(y[window], axis=1)
    excess = np.abs(y[cand] - med)
    hit = cand[excess > SPIKE_SIGMAS * sigma]
    # Heavy-tailed noise has its share of far samples too; spikes count when they
    # carry most of the sample-to-sample variance (one glitch of 5000 σ: all of it;
    # Student-t noise of 3 degrees of freedom: about a fifth).
    share = float(np.sum(excess[excess > SPIKE_SIGMAS * sigma] ** 2) / np.sum(d * d / 2.0))
    if share < SPIKE_SHARE:
        return (0, None)
    return (int(hit.shape[0]), float(hit[0] * period) if hit.size else None)


@dataclass(frozen=True)
class ModelCheck:
    """The model check of one channel.

    Attributes
    ----------
    consistent : bool
        The model follows the curve (whole-curve p ≥ ``P_MIN`` and no short tau
        left out above the model).
    p_value : float
        Share of bootstrap replicates whose deviance is at least the data's.
    deviance : float
        Deviance of the fit over the fitted points.
    points : int
        Fitted points.
    outside : tuple of (float, str)
        Fitted points whose 95 % interval excludes the model: (tau s, ``above`` or
        ``below``: where the data lie against the model).
    left_out : tuple of (float, str)
        Short taus left out of the fit and where they lie against the terms
        without the band-limit correction (``below`` is what a low-pass does;
        ``inside``: left out with its neighbour).
    spikes : int
        Isolated glitches found in the samples (see :func:`spikes`).
    cause : str
        The likely cause when not consistent (empty otherwise).
    advice : str
        What to do when not consistent (empty otherwise).
    """

    consistent: bool
    p_value: float
    deviance: float
    points: int
    outside: tuple
    left_out: tuple
    spikes: int = 0
    cause: str = ""
    advice: str = ""


def _sides(curve: AllanCurve, model: np.ndarray, idx: np.ndarray,
           keep_inside: bool = False) -> tuple:
    """(tau, side) of the points ``idx``: where the data lie against the model."""
    out = []
    for j in idx:
        lo, hi = curve.lower[j] ** 2, curve.upper[j] ** 2
        side = "below" if model[j] > hi else "above" if model[j] < lo else "inside"
        if side != "inside" or keep_inside:
            out.append((float(curve.taus[j]), side))
    return tuple(out)


def check_model(curve: AllanCurve, fit: TermFit, psd: PsdCheck | None = None,
                duration: float | None = None, glitches: tuple = (0, None)) -> ModelCheck:
    """Test the fitted terms against the curve they were fitted to.

    Parameters
    ----------
    curve : AllanCurve
        The octave curve of the fit.
    fit : TermFit
        The fit with its replicates (``replicate_deviance``).
    psd : PsdCheck, optional
        The channel's spectrum check; its narrow lines name a likely cause.
    duration : float, optional
        Record length, s (a misfit at taus beyond a tenth of it reads as a
        slow transient).
    glitches : (int, float or None)
        Spikes found in the samples and the time of the first (:func:`spikes`):
        any makes the check fail, whatever the curve shows.

    Returns
    -------
    ModelCheck
    """
    used = fit.used
    model = basis6(curve.taus) @ fit.selection.c6
    idx = np.flatnonzero(used)
    outside = _sides(curve, model, idx)
    # A low-pass only removes variance: left-out points are judged against the terms
    # without the band-limit column, and lie below them when a band limit explains them.
    bare = basis6(curve.taus) @ np.where(np.arange(6) == 5, 0.0, fit.selection.c6)
    left_out = _sides(curve, bare, np.flatnonzero(~used), keep_inside=True)
    reps = fit.replicate_deviance
    p = float((1 + np.sum(reps >= fit.deviance)) / (1 + reps.shape[0]))
    excess = [t for t, side in left_out if side == "above"]
    count, first = glitches
    consistent = p >= P_MIN and not excess and count == 0
    if consistent:
        return ModelCheck(True, p, float(fit.deviance), int(idx.shape[0]), outside, left_out)
    if count:
        cause = (f"{count} isolated spike(s) beyond {SPIKE_SIGMAS:g} σ of the sample-to-"
                 f"sample spread (first at {first:.6g} s): glitches the Allan variance "
                 "reads as noise")
        advice = "cut the record around them or record again; white noise is inflated"
    else:
        cause, advice = _cause(curve, outside, excess, psd, duration)
    return ModelCheck(False, p, float(fit.deviance), int(idx.shape[0]), outside, left_out,
                      count, cause, advice)


def _cause(curve, outside, excess, psd, duration) -> tuple[str, str]:
    lines = list(psd.lines) if psd is not None else []
    if lines:
        f, amp = lines[0]
        more = f" (and {len(lines) - 1} more)" if len(lines) > 1 else ""
        return (f"a periodic line at {f:.4g} Hz{more}, amplitude {amp:.3g} {curve.unit}, "
                f"bumps the curve near tau = {0.37 / f:.3g} s: vibration or electrical "
                "interference",
                "isolate the bench from the vibration source (or notch the line in the "
                "filter) and record again; the terms near that tau are not trustworthy")
    above = [t for t, side in outside if side == "above"]
    if duration and above and min(above) >= duration / 10.0:
        return ("the longest taus rise faster than random walk or ramp allow: a slow "
                "transient such as a temperature change or warm-up",
                "record after warm-up at a stable temperature (or longer); bias "
                "instability, random walk and ramp are not trustworthy")
    if excess:
        return (f"the shortest taus ({', '.join(f'{t:.3g}' for t in excess)} s) lie above "
                "any sum of the terms: a high-frequency line or aliasing",
                "look at the spectrum near Nyquist; low-pass the sensor before sampling")
    where = ", ".join(f"{t:.3g} s ({side})" for t, side in outside[:6]) or "no single tau"
    return (f"the curve has a shape the five terms do not make (points outside: {where}): "
            "for example a correlated (Gauss–Markov) hump or a line",
            "read the plot before using these numbers; consider the Gauss–Markov entry")
