"""A channel's turn-on bias: its mean with an interval, and a start value for P0.

The mean of a static record is the bias the sensor had this time it was
switched on (plus, for an accelerometer, the projection of gravity). Its
samples are correlated (bias instability, random walk), so the interval does
not use s/√n: the variance of a τ-average of the fitted noise model is its
Allan variance at τ for white noise and about it for the others, and the
mean over the whole record is such an average with τ the record's length.

References
----------
IEEE Std 952-1997, Annex C (Allan variance as the variance of τ-averages of
white rate noise). Common practice, no source: P0 of a bias state from the
turn-on bias seen on the bench.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from ..analysis.special import ndtri
from ..types import Estimate
from ..units import STANDARD_GRAVITY
from .simulate import basis

GRAVITY_WINDOW = 0.5
"""An accelerometer mean within this many m/s² of 0 or ±g is read as a level axis."""


@dataclass(frozen=True)
class TurnOnBias:
    """Turn-on bias of one channel.

    Attributes
    ----------
    mean : Estimate
        Mean of the record with its interval (channel unit).
    p0_std : float or None
        Initial bias standard deviation for the filter's P0: the RMS of this
        run's bias and its uncertainty, sqrt(b² + σ_b²); for an
        accelerometer, b is the mean less 0 or ±g when the axis reads level;
        None when it cannot be told (a tilted accelerometer).
    note : str
        How ``p0_std`` was obtained and its limit.
    """

    mean: Estimate
    p0_std: float | None
    note: str


def turn_on_bias(y: np.ndarray, unit: str, c2: np.ndarray, duration: float,
                 level: float = 0.95) -> TurnOnBias:
    """Mean and P0 bias std of one channel.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Samples, SI.
    unit : str
        SI unit of the channel.
    c2 : ndarray, shape (5,)
        Fitted [Q², N², B², K², R²] (negative entries count as zero).
    duration : float
        Record length, s.
    level : float

    Returns
    -------
    TurnOnBias
    """
    mean = float(np.mean(y, dtype=np.float64))
    var = float(basis(np.array([duration]))[0] @ np.maximum(c2, 0.0))
    se = np.sqrt(var)
    z = ndtri(0.5 + level / 2.0)  # the normal quantile (what scipy.stats.norm.ppf calls)
    est = Estimate(mean, mean - z * se, mean + z * se, unit,
                   method=("mean of the record; standard error from the fitted noise "
                           "model's Allan variance at tau = the record's length"),
                   level=level)
    hint = "one run shows one turn-on: the spread across turn-ons needs several runs"
    if unit == "m/s**2":
        ref = min((0.0, STANDARD_GRAVITY, -STANDARD_GRAVITY), key=lambda g: abs(mean - g))
        if abs(mean - ref) > GRAVITY_WINDOW:
            return TurnOnBias(est, None, "the axis is tilted (mean not within "
                              f"{GRAVITY_WINDOW} m/s² of 0 or ±g): gravity cannot be told "
                              "from the bias; use a multi-position test")
        b = mean - ref
        return TurnOnBias(est, float(np.hypot(b, se)),
                          f"mean less {ref:+.5g} m/s² (the axis read as level); {hint}")
    return TurnOnBias(est, float(np.hypot(mean, se)),
                      "rate channel at rest: the mean is the bias (Earth rate, up to "
                      f"7.3e-5 rad/s, is included); {hint}")
