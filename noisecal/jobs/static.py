"""Static characterisation: a bench recording at rest → noise terms, Q and R.

Pipeline: read → per channel: overlapping ADEV (octave grid for the fit,
dense grid for the plot) → IEEE Std 952 terms with bootstrap intervals →
Gauss–Markov approximation → Welch PSD cross-check → filter block → YAML
block and Allan plot, written atomically.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from ..analysis.allan import allan_curve
from ..analysis.psd import white_level
from ..errors import AnalysisError, InputError
from ..export import yaml_block
from ..export.atomic import output_paths, write_text
from ..export.plot import allan_figure
from ..fit.discrete import filter_block
from ..fit.gauss_markov import fit_gauss_markov
from ..fit.ieee952 import fit_terms, term_estimates
from ..fit.simulate import TERM_NAMES
from ..ingest import read_recording
from ..types import ChannelModel, FilterBlock, Recording
from ..units import customary
from .progress import StageBars, progress_bar

MIN_SAMPLES = 1024
"""Fewest contiguous samples: gives an octave curve of nine points (τ0 … 256 τ0)."""

DEFAULT_REPS = 200
DEFAULT_SEED = 1


@dataclass(frozen=True)
class StaticResult:
    """Everything the static job produced.

    Attributes
    ----------
    recording : Recording
    models : list of ChannelModel
    dense : list of AllanCurve
        Dense-grid overlapping ADEV per channel (for the plot).
    hadamard : list of AllanCurve
        Dense-grid overlapping Hadamard deviation per channel (drift-insensitive).
    psd : list of PsdCheck
    block : FilterBlock
    sections : dict
        The YAML content as a mapping.
    """

    recording: Recording
    models: list
    dense: list
    hadamard: list
    psd: list
    block: FilterBlock
    sections: dict


def select_channels(rec: Recording, channels: list[str] | None) -> list[str]:
    """The channels asked for, checked against the recording."""
    if not channels:
        return list(rec.channels)
    missing = [c for c in channels if c not in rec.channels]
    if missing:
        raise InputError(f"--channels: {', '.join(missing)} not in {rec.source.path}; "
                         f"its channels are {', '.join(rec.channels)}")
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
    if reps < 20:
        raise InputError(f"--reps {reps}: at least 20 bootstrap replicates are needed "
                         "for a 95 % interval; 200 is the default")
    step = rec.period if dt is None else dt
    if not (np.isfinite(step) and step > 0):
        raise InputError(f"--dt {dt}: not a positive time step; give seconds, e.g. --dt 0.01")
    for name in names:
        if np.ptp(rec.channel(name)) == 0:
            raise AnalysisError(f"{rec.source.path}, column {name!r}: the channel is "
                                "constant; leave it out with --channels")
    segments = rec.segments
    longest = max(segments, key=lambda s: s[1] - s[0])
    models, dense, hadamard, psd = [], [], [], []
    with progress_bar(total=2 * reps * len(names), desc="bootstrap", quiet=quiet) as bar:
        for i, name in enumerate(names):
            y = rec.channel(name)
            unit = rec.unit_of(name)
            bar.set_description(f"{name}: deviations")
            curve = allan_curve(y, rec.period, unit, "oadev", "octave", segments)
            dense.append(allan_curve(y, rec.period, unit, "oadev", "dense", segments,
                                     noise_from=curve))
            hadamard.append(allan_curve(y, rec.period, unit, "ohdev", "dense", segments,
                                        noise_from=curve))
            bar.set_description(f"{name}: bootstrap")
            fit = fit_terms(curve, rec.period, segments, reps=reps, seed=seed + i,
                            progress=bar.update)
            models.append(ChannelModel(
                channel=name, unit=unit, terms=term_estimates(fit, curve),
                gauss_markov=fit_gauss_markov(curve, rec.period, segments, reps,
                                              seed + 1000 + i, progress=bar.update),
                curve=curve,
                coefficients=fit.c2, seed=seed + i))
            psd.append(white_level(y[longest[0]:longest[1]], rec.period))
    block = filter_block(models, step)
    sections = _sections(rec, models, psd, block, seed, reps, command)
    return StaticResult(rec, models, dense, hadamard, psd, block, sections)


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
        }
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
        },
        "recording": yaml_block.recording_section(rec),
        "channels": channels,
        "filter": yaml_block.filter_section(block),
    }


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
    for note in result.block.notes:
        lines.append(f"  note: {note}")
    return "\n".join(lines)


def run_static(path: str, out: str, plot: str | None = None, dt: float | None = None,
               channels: list[str] | None = None, repair: str | None = None,
               overwrite: bool = False, reps: int = DEFAULT_REPS, seed: int = DEFAULT_SEED,
               quiet: bool = False, command: str = "", use_cache: bool = True) -> StaticResult:
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

    Returns
    -------
    StaticResult
    """
    out_path, plot_path = output_paths(out, plot, [path], overwrite)
    bars = StageBars(quiet)
    try:
        rec = read_recording(path, repair=repair, use_cache=use_cache, progress=bars)
    finally:
        bars.close()
    result = characterise(rec, channels, dt, reps, seed, quiet, command)
    allan_figure(result.models, result.dense, result.hadamard, plot_path,
                 f"{Path(path).name} — overlapping Allan deviation, 95 % intervals, fitted terms")
    write_text(out_path, yaml_block.render(result.sections))
    return result
