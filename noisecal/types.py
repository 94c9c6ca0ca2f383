"""Types that cross stage boundaries.

All are frozen dataclasses. Arrays are numpy float64 in SI units; shapes are
given in each docstring. Nothing after ingest parses text or converts units.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Source:
    """Where a recording came from.

    Attributes
    ----------
    path : str
        Path of the input file as given.
    sha256 : str
        Hex digest of the file's bytes.
    size_bytes : int
        File size.
    format : str
        ``"csv"``, ``"parquet"`` or ``"npz"``.
    repairs : tuple of str
        Repairs applied at ingest (e.g. ``"sorted 3 rows"``); empty if none.
    notes : tuple of str
        What the reader found worth stating (a bag's topic, which time it used,
        the record-minus-stamp delay, the driver's covariance arrays; the units a
        CSV export's message type gave); empty if none.
    """

    path: str
    sha256: str
    size_bytes: int
    format: str
    repairs: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Gap:
    """A dropout: time where samples are missing.

    Attributes
    ----------
    start_s : float
        Time of the last sample before the gap, s from the recording's start.
    length_s : float
        Missing time, s: the step across the gap minus one sample period.
    missing : int
        Number of samples missing at the nominal rate.
    index : int
        Index of the first sample after the gap.
    """

    start_s: float
    length_s: float
    missing: int
    index: int


@dataclass(frozen=True)
class SaturatedRun:
    """A run of samples stuck at a channel's extreme value (clipping).

    Attributes
    ----------
    channel : str
        Channel name.
    start_s : float
        Time of the run's first sample, s from the start.
    samples : int
        Length of the run.
    value : float
        The stuck value, SI.
    """

    channel: str
    start_s: float
    samples: int
    value: float


@dataclass(frozen=True)
class Recording:
    """A validated recording in SI units.

    Attributes
    ----------
    time : ndarray, shape (n,)
        Sample times, s, relative to the first sample (``time[0] == 0``).
    start_time : float
        The first sample's timestamp as in the file, s.
    columns : tuple of ndarray, each shape (n,)
        Channel values, SI units, one array per channel (memory-mapped from
        the cache for large files).
    channels : tuple of str, length c
        Channel names (header names without units).
    units : tuple of str, length c
        SI unit of each channel, pint-parsable (e.g. ``"rad/s"``).
    source_units : tuple of str, length c
        Unit of each channel as written in the file.
    period : float
        Nominal sample period, s (median step).
    jitter : float
        Standard deviation of the timestamp steps outside gaps, s.
    gaps : tuple of Gap
        Dropouts, in time order.
    saturated : tuple of SaturatedRun
        Runs stuck at a channel's extreme.
    source : Source
        Provenance of the file.
    auxiliary : tuple of str
        Channels whose dimension the noise fit does not analyse (temperature,
        voltage, mass, …; see :func:`noisecal.units.analysed`): kept and shown,
        left out of a fit unless asked for by name. Worked out from ``units``
        when not given.
    """

    time: np.ndarray
    start_time: float
    columns: tuple
    channels: tuple[str, ...]
    units: tuple[str, ...]
    source_units: tuple[str, ...]
    period: float
    jitter: float
    gaps: tuple[Gap, ...]
    saturated: tuple[SaturatedRun, ...]
    source: Source
    auxiliary: tuple[str, ...] | None = None

    def __post_init__(self):
        if self.auxiliary is None:
            from .units import analysed  # lazy: types stays importable without pint

            aux = tuple(c for c, u in zip(self.channels, self.units) if not analysed(u))
            object.__setattr__(self, "auxiliary", aux)

    @property
    def analysed_channels(self) -> tuple[str, ...]:
        """Channels a noise fit takes by default: all but the auxiliary ones."""
        return tuple(c for c in self.channels if c not in self.auxiliary)

    @property
    def n(self) -> int:
        """Number of samples."""
        return int(self.time.shape[0])

    @property
    def duration(self) -> float:
        """Time from the first to the last sample plus one period, s."""
        return float(self.time[-1] + self.period)

    @property
    def segments(self) -> list[tuple[int, int]]:
        """Contiguous runs between gaps as ``[start, stop)`` index pairs."""
        cuts = [0] + [g.index for g in self.gaps] + [self.n]
        return [(a, b) for a, b in zip(cuts[:-1], cuts[1:]) if b > a]

    def channel(self, name: str) -> np.ndarray:
        """Samples of one channel, shape (n,), SI."""
        return self.columns[self.channels.index(name)]

    @property
    def samples(self) -> np.ndarray:
        """All channels as one (n, c) array (a copy: for small recordings)."""
        return np.column_stack(self.columns)

    def unit_of(self, name: str) -> str:
        """SI unit of one channel."""
        return self.units[self.channels.index(name)]


@dataclass(frozen=True)
class Estimate:
    """A fitted number with its interval and unit — the one way numbers travel.

    A term the data cannot resolve has ``value`` and ``lower`` set to None and
    ``upper`` holding the upper bound.

    Attributes
    ----------
    value : float or None
        Point estimate, in ``unit``; None for an upper bound only.
    lower, upper : float or None
        Interval ends at ``level``; for a bound, ``upper`` is the bound.
    unit : str
        SI unit, pint-parsable.
    method : str
        How the number and interval were obtained.
    level : float
        Confidence level of the interval or bound.
    tau_range : tuple of float or None
        Averaging times (s) that constrain the estimate, where meaningful.
    """

    value: float | None
    lower: float | None
    upper: float | None
    unit: str
    method: str
    level: float = 0.95
    tau_range: tuple[float, float] | None = None

    @property
    def resolved(self) -> bool:
        """True when the data give a number, False for an upper bound."""
        return self.value is not None

    @classmethod
    def bound(cls, upper: float, unit: str, method: str, level: float = 0.95,
              tau_range: tuple[float, float] | None = None) -> "Estimate":
        """An upper bound for a term the data cannot resolve."""
        return cls(None, None, float(upper), unit, method, level, tau_range)

    def scaled(self, factor: float, unit: str, power: float = 1.0) -> "Estimate":
        """The estimate of ``factor * x**power`` (monotone, factor > 0)."""
        f = (lambda x: None if x is None else float(factor * x ** power))
        return Estimate(f(self.value), f(self.lower), f(self.upper), unit,
                        self.method, self.level, self.tau_range)


@dataclass(frozen=True)
class AllanCurve:
    """An Allan-family deviation curve with per-point intervals.

    Attributes
    ----------
    kind : str
        ``"oadev"``, ``"mdev"``, ``"ohdev"``, ``"adev"``, ``"hdev"`` or ``"totdev"``.
    taus : ndarray, shape (k,)
        Averaging times, s.
    m : ndarray of int, shape (k,)
        Averaging factors (tau / sample period).
    dev : ndarray, shape (k,)
        Deviation, channel unit.
    lower, upper : ndarray, shape (k,)
        Interval bounds of the deviation at ``level``.
    edf : ndarray, shape (k,)
        Equivalent degrees of freedom (Greenhall–Riley; total variance: SP 1065
        Table 7). Where ``identified`` is False, the smallest over the noise types.
    alpha : ndarray of int, shape (k,)
        Power-law noise exponent at each tau (S_y ∝ f^alpha): identified where
        ``identified`` is True, else the type whose (smallest) EDF was used.
    n_terms : ndarray of int, shape (k,)
        Number of difference terms that entered each point.
    unit : str
        Unit of ``dev``.
    level : float
        Confidence level of the bounds.
    identified : ndarray of bool, shape (k,), optional
        True where the noise type was identified (lag-1 method, enough cluster
        averages); False where too few averages remained and the conservative
        EDF was used. None (curves built elsewhere): not recorded.
    """

    kind: str
    taus: np.ndarray
    m: np.ndarray
    dev: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    edf: np.ndarray
    alpha: np.ndarray
    n_terms: np.ndarray
    unit: str
    level: float = 0.95
    identified: np.ndarray | None = None


@dataclass(frozen=True)
class PsdCheck:
    """White-noise level read from a Welch PSD, as a cross-check.

    Attributes
    ----------
    freq : ndarray, shape (f,)
        Frequencies, Hz.
    psd : ndarray, shape (f,)
        One-sided PSD, unit²/Hz.
    white_noise : float
        Equivalent white-noise coefficient N (unit/√Hz) from the band used.
    band_hz : tuple of float
        Frequency band the level was read from.
    roll_off_hz : float or None
        Where the PSD falls to half the white level and stays below (the
        sensor's bandwidth); None when it does not below Nyquist.
    lines : tuple of (float, float)
        Narrow peaks: (frequency Hz, sinusoid amplitude in the channel unit).
    """

    freq: np.ndarray
    psd: np.ndarray
    white_noise: float
    band_hz: tuple[float, float]
    roll_off_hz: float | None = None
    lines: tuple = ()


@dataclass(frozen=True)
class ChannelModel:
    """Noise model of one channel.

    Attributes
    ----------
    channel : str
        Channel name.
    unit : str
        SI unit of the channel.
    terms : dict of str to Estimate
        IEEE Std 952 terms by name: ``quantization``, ``white_noise``,
        ``bias_instability``, ``bias_random_walk``, ``rate_ramp``.
    gauss_markov : dict of str to Estimate
        First-order Gauss–Markov bias: ``sigma`` and ``correlation_time``.
    curve : AllanCurve
        The curve the terms were fitted to.
    coefficients : ndarray, shape (5,)
        Fitted variance coefficients [Q², N², B², K², R²] (SI) for plotting.
    seed : int
        Seed of the bootstrap that gave the intervals.
    fit : TermFit, optional
        The selection, the fitted taus and the bootstrap behind ``terms``.
    check : ModelCheck, optional
        Whether the terms follow the curve.
    turn_on : TurnOnBias, optional
        The record's mean with its interval and a P0 bias std.
    """

    channel: str
    unit: str
    terms: dict
    gauss_markov: dict
    curve: AllanCurve
    coefficients: np.ndarray
    seed: int
    fit: object = None
    check: object = None
    turn_on: object = None


@dataclass(frozen=True)
class FilterBlock:
    """Discrete-time noise matrices for one filter time step.

    Every matrix is (c, c), diagonal, SI, in the channel order ``order``.

    Attributes
    ----------
    dt : float
        Filter time step, s.
    order : tuple of str
        Channel order of the rows and columns.
    units : tuple of str
        SI unit of each channel.
    R, R_low, R_high : ndarray, shape (c, c)
        Per-sample measurement variance N²/dt and its 95 % interval.
    Q_input, Q_input_low, Q_input_high : ndarray, shape (c, c)
        Variance of the integrated channel over dt, N²·dt.
    Q_bias, Q_bias_low, Q_bias_high : ndarray, shape (c, c)
        Bias random-walk increment variance K²·dt.
    Q_bias_is_bound : tuple of bool
        Per channel: True where K is only an upper bound and the bound was used.
    gm_phi : ndarray, shape (c,)
        Gauss–Markov transition factor exp(-dt/T).
    gm_q, gm_q_low, gm_q_high : ndarray, shape (c,)
        Gauss–Markov driving-noise variance σ²(1 − exp(−2dt/T)).
    white_psd, bias_rw_psd : ndarray, shape (c,)
        Continuous-time densities N² and K² (K² is the bound where unresolved).
    """

    dt: float
    order: tuple[str, ...]
    units: tuple[str, ...]
    R: np.ndarray
    R_low: np.ndarray
    R_high: np.ndarray
    Q_input: np.ndarray
    Q_input_low: np.ndarray
    Q_input_high: np.ndarray
    Q_bias: np.ndarray
    Q_bias_low: np.ndarray
    Q_bias_high: np.ndarray
    Q_bias_is_bound: tuple[bool, ...]
    gm_phi: np.ndarray
    gm_q: np.ndarray
    gm_q_low: np.ndarray
    gm_q_high: np.ndarray
    white_psd: np.ndarray
    bias_rw_psd: np.ndarray
    notes: tuple[str, ...] = field(default_factory=tuple)
