"""Static characterisation: a bench recording at rest → noise terms, Q and R.

Pipeline: read → per channel: overlapping ADEV (octave grid for the fit,
dense grid for the plot) → IEEE Std 952 terms with bootstrap intervals →
Gauss–Markov approximation → Welch PSD cross-check → filter block → YAML
block and Allan plot, written atomically.
"""

from __future__ import annotations

import datetime as _dt
import numbers
from dataclasses import dataclass, fields, replace
from pathlib import Path

import numpy as np

from .. import __version__
from ..analysis.psd import white_level
from ..errors import AnalysisError, InputError
from ..export import yaml_block
from ..export.atomic import STDOUT, Staged, output_paths
from ..export.plot import allan_figure
from ..fit.discrete import filter_block
from ..fit.ieee952 import COLUMNS, PENALTY, basis6, fit_terms, term_estimates
from ..fit.model_check import check_model, spikes
from ..fit.simulate import TERM_NAMES
from ..ingest import read_recording
from ..types import AllanCurve, ChannelModel, FilterBlock, Recording
from ..units import customary
from .parallel import SharedBar, map_ordered
from .progress import StageBars, progress_bar
from .result import JobResult, Parameter, ParameterError, seconds, whole

MIN_SAMPLES = 1024
"""Fewest contiguous samples: gives an octave curve of nine points (τ0 … 256 τ0)."""

DEFAULT_REPS = 200
DEFAULT_SEED = 1


@dataclass(frozen=True)
class ChannelResult:
    """Everything the static job found for one channel.

    Attributes
    ----------
    model : ChannelModel
        Terms, Gauss–Markov bias, fit, model check and turn-on bias.
    dense : AllanCurve
        Dense-grid overlapping ADEV (for the plot).
    hadamard : AllanCurve
        Dense-grid overlapping Hadamard deviation (drift-insensitive).
    psd : PsdCheck
        Welch PSD: white level, roll-off, lines.
    """

    model: ChannelModel
    dense: AllanCurve
    hadamard: AllanCurve
    psd: object


@dataclass(frozen=True)
class StaticResult(JobResult):
    """Everything the static job produced.

    Attributes
    ----------
    recording : Recording
    channels : dict of str to ChannelResult
        Per channel, in the filter order.
    block : FilterBlock
    sections : dict
        The YAML content as a mapping (a view of the typed values above).
    reps, seed : int
        Bootstrap replicates and seed.

    Examples
    --------
    >>> import numpy as np, noisecal
    >>> y = np.random.default_rng(0).normal(0.0, 1e-3, 4096)
    >>> rec = noisecal.read({"gyro_x": y}, period=0.01, units={"gyro_x": "rad/s"})
    >>> res = noisecal.static(rec, reps=40, seed=3)
    >>> est = res.estimate("gyro_x", "white_noise")
    >>> est.resolved, est.unit
    (True, 'rad/s/Hz^0.5')
    >>> bool(est.lower < 1e-4 < est.upper)   # N = 1e-3 · sqrt(0.01)
    True
    >>> lo, hi = res.confidence_interval("gyro_x", "white_noise", level=0.90).lower, est.lower
    >>> bool(lo > hi)
    True
    """

    recording: Recording
    channels: dict
    block: FilterBlock
    sections: dict
    reps: int = DEFAULT_REPS
    seed: int = DEFAULT_SEED

    @property
    def models(self) -> list:
        """ChannelModel per channel, in order."""
        return [c.model for c in self.channels.values()]

    @property
    def dense(self) -> list:
        return [c.dense for c in self.channels.values()]

    @property
    def hadamard(self) -> list:
        return [c.hadamard for c in self.channels.values()]

    @property
    def psd(self) -> list:
        return [c.psd for c in self.channels.values()]

    def parameters(self) -> list:
        """The five IEEE Std 952 terms of every channel (full precision)."""
        return [Parameter(name, term, c.model.terms[term], {})
                for name, c in self.channels.items() for term in TERM_NAMES]

    def _summary(self) -> str:
        return summary(self)

    def _render(self, out=None) -> str:
        return yaml_block.render(self.sections, out=out)

    def _at_level(self, channel: str, name: str, level: float):
        """A resolved term's interval from the same bootstrap at another level."""
        model = self.channels[channel].model
        if name not in TERM_NAMES or model.fit is None:
            return None
        return term_estimates(model.fit, model.curve, level)[name]


def select_channels(rec: Recording, channels: list[str] | None) -> list[str]:
    """The channels asked for, checked against the recording.

    By default every channel but the auxiliary ones (``rec.auxiliary``:
    temperature, voltage, … which no noise model here describes); an auxiliary
    channel is fitted only when named.
    """
    if not channels:
        chosen = list(rec.analysed_channels)
        if not chosen:
            raise InputError(
                f"{rec.source.path}: every channel is auxiliary ("
                + ", ".join(f"{c} [{u}]" for c, u in zip(rec.channels, rec.units))
                + "), none a rate, acceleration, angle, length, field or pressure; name "
                "one with --channels to fit it anyway")
        return chosen
    if isinstance(channels, str) or not all(isinstance(c, str) for c in channels):
        raise ParameterError("channels", channels, "give a list of channel names")
    missing = [c for c in channels if c not in rec.channels]
    if missing:
        raise ParameterError("channels", channels, f"{', '.join(missing)} not in "
                             f"{rec.source.path}; its channels are {', '.join(rec.channels)}")
    return list(channels)


def check_length(rec: Recording) -> None:
    """Refuse a recording too short for an Allan analysis, saying what is needed."""
    longest = max(b - a for a, b in rec.segments)
    if longest < MIN_SAMPLES:
        raise AnalysisError(
            f"{rec.source.path}: the longest run without gaps has {longest} samples "
            f"({longest * rec.period:.3g} s); the static analysis needs at least "
            f"{MIN_SAMPLES} ({MIN_SAMPLES * rec.period:.3g} s at this rate), and hours "
            "to see bias instability and random walk")


def characterise(rec: Recording, channels: list[str] | None = None, dt: float | None = None,
                 reps: int = DEFAULT_REPS, seed: int = DEFAULT_SEED, quiet: bool = True,
                 command: str = "") -> StaticResult:
    """Fit the noise terms of each channel and build the filter block.

    Parameters
    ----------
    rec : Recording
    channels : list of str, optional
        Channels to analyse, in the filter order; default all.
    dt : float, optional
        Filter time step, s; default the sample period.
    reps : int
        Bootstrap replicates per channel.
    seed : int
        Bootstrap seed: channel i uses ``seed + i`` for the IEEE terms and
        ``seed + 1000 + i`` for the Gauss–Markov fit.
    quiet : bool
        Hide the progress bar.
    command : str
        Command line, for the provenance.

    Returns
    -------
    StaticResult
    """
    names = select_channels(rec, channels)
    check_length(rec)
    if isinstance(reps, bool) or not isinstance(reps, numbers.Integral) or reps < 20:
        raise ParameterError("reps", reps, "at least 20 bootstrap replicates are needed "
                             "for a 95 % interval; 200 is the default")
    reps, seed = int(reps), whole("seed", seed, 0)
    step = rec.period if dt is None else seconds("dt", dt)
    for name in names:
        spread = float(np.ptp(rec.channel(name)))
        if spread == 0:
            raise AnalysisError(f"{rec.source.path}, column {name!r}: the channel is "
                                "constant; leave it out with --channels")
        if spread < 1e-100:
            # Its variances (spread² / τ²) would underflow double precision.
            raise AnalysisError(f"{rec.source.path}, column {name!r}: values span only "
                                f"{spread:.3g} {rec.unit_of(name)}; write them in a unit "
                                "that keeps them near 1 (e.g. urad/s)")
    with progress_bar(total=2 * reps * len(names), desc="bootstrap", quiet=quiet) as bar:
        # Channels on threads: their heavy steps run in kernels that release the GIL.
        shared = SharedBar(bar)
        outs = map_ordered(lambda item: _channel(rec, item[1], reps, seed + item[0], shared),
                           list(enumerate(names)))
        per = {name: ChannelResult(*out) for name, out in zip(names, outs)}
    models = [c.model for c in per.values()]
    block = filter_block(models, step)
    block = replace(block, notes=block.notes + _dt_notes(models, step))
    sections = _sections(rec, models, [c.psd for c in per.values()], block, seed, reps,
                         command)
    return StaticResult(rec, per, block, sections, reps, seed)


def _channel(rec: Recording, name: str, reps: int, seed: int, bar):
    """Curves, terms, model check, spectrum and turn-on bias of one channel.

    Returns
    -------
    (ChannelModel, AllanCurve, AllanCurve, PsdCheck)
        The model, the dense ADEV and Hadamard curves, the spectrum check.
    """
    # Here, not at module level: the fitting modules load once the data are read.
    from ..fit.gauss_markov import fit_gauss_markov
    from ..fit.turn_on import turn_on_bias

    y = rec.channel(name)
    unit = rec.unit_of(name)
    segments = rec.segments
    a, b = max(segments, key=lambda s: s[1] - s[0])
    bar.set_description(f"{name}: deviations")
    from ..analysis.allan import allan_curves

    # One phase and one pass over it for the three curves; the dense ones take
    # their noise types from the octave curve.
    curve, dense, hadamard = allan_curves(
        y, rec.period, unit, [("oadev", "octave", None), ("oadev", "dense", 0),
                              ("ohdev", "dense", 0)], segments)
    bar.set_description(f"{name}: bootstrap")
    fit = fit_terms(curve, rec.period, segments, reps=reps, seed=seed, progress=bar.update)
    terms = term_estimates(fit, curve)
    n = terms["white_noise"]
    white = [t for t, share in _white_taus(fit, curve)]
    # The spectrum is read where the white noise dominates the curve (f ≈ 1/(2τ)).
    psd = white_level(y[a:b], rec.period, n.value or n.upper,
                      f_from=0.5 / max(white) if white else None)
    # The Gauss–Markov fit sees the same taus as the terms (a band limit is left out).
    gm = fit_gauss_markov(_points(curve, fit.used), rec.period, segments, reps,
                          seed + 1000, progress=bar.update)
    model = ChannelModel(channel=name, unit=unit, terms=terms, gauss_markov=gm, curve=curve,
                         coefficients=fit.c2, seed=seed, fit=fit,
                         check=check_model(curve, fit, psd, rec.duration,
                                           spikes(y[a:b], rec.period)),
                         turn_on=turn_on_bias(y, unit, fit.c2, rec.duration))
    return model, dense, hadamard, psd


def _dt_notes(models: list, dt: float) -> tuple:
    """A note per channel whose low-pass time constant T is not small against dt.

    R = N²/dt assumes the samples a filter takes dt apart are independent; within
    about ten time constants they are not, and the variance of one sample at the
    sample rate (``bandwidth.sample_std``²) is what the filter actually sees.
    """
    out = []
    for m in models:
        T = m.fit.band_limit_time if m.fit is not None else 0.0
        if T > 0 and dt < 10.0 * T:
            out.append(f"{m.channel}: dt = {dt:.3g} s is within ten times the sensor's "
                       f"low-pass time constant ({T:.3g} s): consecutive samples are "
                       f"correlated, R = N^2/dt = {m.terms['white_noise'].value ** 2 / dt:.3g} "
                       f"overstates one sample's variance ({m.curve.dev[0] ** 2:.3g} at the "
                       "sample rate); step the filter slower or model the low-pass")
    return tuple(out)


def _white_taus(fit, curve):
    """(tau, share) of the fitted points where white noise is at least half the model."""
    A = basis6(curve.taus)
    model = A @ fit.selection.c6
    share = A[:, 1] * fit.selection.c6[1] / np.where(model > 0, model, np.inf)
    return [(t, s) for t, s, u in zip(curve.taus, share, fit.used) if u and s >= 0.5]


def _points(curve: AllanCurve, keep: np.ndarray) -> AllanCurve:
    """The curve restricted to the points ``keep``."""
    k = curve.taus.shape[0]
    return replace(curve, **{f.name: getattr(curve, f.name)[keep] for f in fields(curve)
                             if isinstance(getattr(curve, f.name), np.ndarray)
                             and getattr(curve, f.name).shape == (k,)})


def _sections(rec, models, psd, block, seed, reps, command) -> dict:
    channels = {}
    for model, check in zip(models, psd):
        entry = {"unit": model.unit}
        for name in TERM_NAMES:
            entry[name] = yaml_block.estimate(model.terms[name])
        gm = model.gauss_markov
        entry["gauss_markov"] = ({k: yaml_block.estimate(v) for k, v in gm.items()}
                                 if gm else {"resolved": False})
        n = model.terms["white_noise"]
        entry["psd_check"] = {
            "white_noise": yaml_block.num(check.white_noise),
            "band_hz": [yaml_block.num(b) for b in check.band_hz],
            "ratio_to_allan": yaml_block.num(check.white_noise / (n.value or n.upper)),
            "lines": [{"frequency_hz": yaml_block.num(f), "amplitude": yaml_block.num(a)}
                      for f, a in check.lines[:5]],
        }
        entry["bandwidth"] = _bandwidth(model, check, rec.period)
        entry["model_selection"] = {
            "terms": [COLUMNS[i] for i in model.fit.selection.cols],
            "rule": f"least deviance + {PENALTY:g} per term over every subset of terms",
            "near_ties": model.fit.selection.near_ties(),
        }
        mc = model.check
        entry["model_check"] = {
            "consistent": mc.consistent,
            "p_value": yaml_block.num(mc.p_value),
            "test": ("deviance of the fitted points against the bootstrap replicates' "
                     "(overlapping points are correlated; the replicates carry it)"),
            "points_fitted": mc.points,
            "points_outside": len(mc.outside),
            "spikes": mc.spikes,
            "outside": [{"tau_s": yaml_block.num(t), "data": side} for t, side in mc.outside],
            **({"likely_cause": mc.cause, "advice": mc.advice} if not mc.consistent else {}),
        }
        tb = model.turn_on
        entry["turn_on_bias"] = {"mean": yaml_block.estimate(tb.mean),
                                 "p0_std": yaml_block.num(tb.p0_std), "note": tb.note}
        entry["bootstrap_seed"] = model.seed
        entry["allan_points"] = yaml_block.curve_table(model.curve)
        channels[model.channel] = entry
    return {
        "layout": yaml_block.LAYOUT,
        "provenance": {
            "tool": f"noisecal {__version__}",
            "job": "static",
            "command": command,
            "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "input": {"path": rec.source.path, "sha256": rec.source.sha256,
                      "size_bytes": rec.source.size_bytes, "format": rec.source.format},
            "repairs": list(rec.source.repairs),
            "seed": seed,
            "bootstrap_replicates": reps,
            # Every setting, so that a re-check runs the same analysis on new data.
            "settings": {"channels": [m.channel for m in models], "dt": float(block.dt),
                         "repair": next((r.split()[1].rstrip(":") for r in rec.source.repairs
                                         if r.startswith("--repair ")), None)},
        },
        "recording": yaml_block.recording_section(rec),
        "channels": channels,
        "filter": yaml_block.filter_section(block),
    }


def _bandwidth(model: ChannelModel, check, period: float) -> dict:
    """Where the terms' model holds, the sensor's roll-off and what it means for dt."""
    fit, curve = model.fit, model.curve
    start = float(curve.taus[fit.used][0])
    left = [float(t) for t in curve.taus[~fit.used]]
    T = fit.band_limit_time
    out = {
        "fitted_from_tau_s": yaml_block.num(start),
        "left_out_tau_s": [yaml_block.num(t) for t in left],
        "roll_off_hz": yaml_block.num(check.roll_off_hz),
        "time_constant_s": yaml_block.num(T) if T > 0 else None,
        "sample_std": yaml_block.num(curve.dev[0]),
    }
    if any(side == "above" for _, side in model.check.left_out):
        out["why"] = ("the shortest taus lie above the terms, which no low-pass does: "
                      "see model_check")
    elif left:
        out["why"] = ("below these taus the curve falls under every sum of the terms: "
                      "the sensor's own low-pass")
    if T > 0 or check.roll_off_hz:
        out["note"] = (
            "white_noise is the low-frequency level: right for a filter whose dt is "
            "well above the time constant. At dt near it, consecutive samples are "
            "correlated; the per-sample std at the sample period is sample_std, below "
            "white_noise/sqrt(period)")
    return out


def summary(result: StaticResult) -> str:
    """Plain-text table of the terms, SI and the trade's customary units."""
    rec = result.recording
    lines = [f"{rec.source.path}: {rec.n} samples, {rec.duration:.6g} s at "
             f"{1 / rec.period:.6g} Hz, {len(rec.gaps)} gap(s)"]
    for model in result.models:
        lines.append(f"  {model.channel} [{model.unit}]")
        for name in TERM_NAMES:
            e = model.terms[name]
            if e.resolved:
                text = f"{e.value:.4g}  (95 %: {e.lower:.4g} … {e.upper:.4g}) {e.unit}"
                cust = customary(e.value, model.unit, name)
            else:
                text = f"< {e.upper:.4g} {e.unit}  (not resolved: upper bound)"
                cust = customary(e.upper, model.unit, name)
            lines.append(f"    {name:<17} {text}" + (f"  = {cust}" if cust else ""))
        fit, mc = model.fit, model.check
        if fit is not None and not fit.used.all() and mc is not None and mc.consistent:
            lines.append(f"    fitted from tau = {model.curve.taus[fit.used][0]:.3g} s: shorter "
                         "taus follow the sensor's low-pass, not the terms")
        if mc is not None:
            lines.append(f"    model check: {'consistent' if mc.consistent else 'NOT consistent'}"
                         f" (p = {mc.p_value:.3g}, {len(mc.outside)} of {mc.points} points "
                         "outside their 95 % interval)")
            if not mc.consistent:
                lines.append(f"    warning: {mc.cause}; {mc.advice}")
        if fit is not None:
            for tie in fit.selection.near_ties():
                lines.append(f"    near tie: {tie}")
        if model.turn_on is not None:
            m = model.turn_on.mean
            lines.append(f"    mean {m.value:.5g} (95 %: {m.lower:.5g} … {m.upper:.5g}) {m.unit}")
    for note in result.block.notes:
        lines.append(f"  note: {note}")
    return "\n".join(lines)


def run_static(path: str, out: str, plot: str | None = None, dt: float | None = None,
               channels: list[str] | None = None, repair: str | None = None,
               overwrite: bool = False, reps: int = DEFAULT_REPS, seed: int = DEFAULT_SEED,
               quiet: bool = False, command: str = "", use_cache: bool = True,
               record=None, report: str | None = None, output_as: str = "noisecal",
               node: str | None = None, units: str = "si",
               allan_points: str = "inline") -> StaticResult:
    """Read, characterise and write the YAML block and the plot.

    Parameters
    ----------
    path : str
        Recording file.
    out : str
        YAML output path.
    plot : str, optional
        PNG path; default the YAML path with ``.png``.
    dt, channels, reps, seed, quiet, command
        See :func:`characterise`.
    repair : {None, "sort", "drop"}
        Timestamp repair at ingest.
    overwrite : bool
        Replace existing outputs.
    use_cache : bool
        Use the binary cache of validated recordings.
    record : noisecal.jobs.history.Recorder, optional
        The history the run is stored in, together with its files.
    report : str, optional
        HTML report path (self-contained), written together with the other outputs.
    output_as : {"noisecal", "ros"}
        What ``out`` holds: the noisecal block, or a ROS 2 parameter file
        (:mod:`noisecal.export.ros_params`).
    node : str, optional
        Node name of the ROS parameter file.
    units : {"si", "customary"}
        ``customary``: fitted numbers also in the input's units.
    allan_points : {"inline", "sidecar"}
        ``sidecar``: the Allan point tables in ``OUT.allan.yaml`` beside the block,
        which names it and its SHA-256.

    Returns
    -------
    StaticResult
    """
    out_path, plot_path = output_paths(out, plot, [path], overwrite,
                                       getattr(record, "paths", ()))
    report_path = _report_path(report, [path], overwrite, record, out_path, plot_path)
    points_path = yaml_block.points_path(out_path, allan_points, output_as,
                                         [path, plot_path, report_path]
                                         + list(getattr(record, "paths", ())), overwrite)
    bars = StageBars(quiet)
    try:
        rec = read_recording(path, repair=repair, use_cache=use_cache, progress=bars)
    finally:
        bars.close()
    from ..api import static

    result = static(rec, channels=channels, dt=dt, reps=reps, seed=seed, progress=not quiet,
                    command=command)
    with Staged(overwrite) as staged:
        if plot_path is not None:
            allan_figure(result.models, result.dense, result.hadamard, staged.path(plot_path),
                         f"{Path(path).name} — overlapping Allan deviation, 95 % intervals, "
                         "fitted terms")
        if report_path is not None:
            from ..export.html import render_job

            staged.text(report_path, render_job(result))
        for target, text in yaml_block.outputs(result, out_path, output_as, node, units,
                                               points_path):
            staged.text(target, text)
        staged.commit(record(result) if record else None)
    return result


def _report_path(report, inputs, overwrite, record, *outputs):
    """The ``--report`` path checked before any work (None without one)."""
    if report is None:
        return None
    from ..export.html import check_report_path

    return check_report_path(report, list(inputs) + list(getattr(record, "paths", ())),
                             overwrite, outputs)
