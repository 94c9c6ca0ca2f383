"""The static characterisation's YAML block: commented, versioned, includable.

Numbers are SI, rounded to six significant digits. The layout is noisecal's
own; its version is in ``layout``.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import yaml

from ..ingest.yaml_file import GuardedLoader, quote_for_loader
from ..types import Estimate, FilterBlock, Recording
from ..units import derived_unit

LAYOUT = "noisecal.static/1"


def num(x) -> float | None:
    """A float rounded to six significant digits (None for NaN/None)."""
    if x is None:
        return None
    x = float(x)
    if not np.isfinite(x):
        return None
    return float(f"{x:.6g}")


def matrix(a: np.ndarray) -> list:
    """A 2-D array as a list of lists of rounded floats."""
    return [[num(v) for v in row] for row in np.asarray(a)]


def exact(x) -> float | None:
    """A float at full precision (YAML writes the shortest text that reads back equal)."""
    if x is None:
        return None
    x = float(x)
    return x if np.isfinite(x) else None


def estimate(e: Estimate) -> dict:
    """An Estimate as ``{value, ci95, unit, ...}`` or ``{upper_bound, unit, ...}``.

    Fitted numbers are written at full precision, so a re-check or a reader
    gets back the very Estimate the job had (:func:`estimate_from`).
    """
    if e.resolved:
        out = {"value": exact(e.value), "ci95": [exact(e.lower), exact(e.upper)],
               "unit": e.unit}
    else:
        out = {"upper_bound": exact(e.upper), "unit": e.unit}
    if e.level != 0.95:
        out["level"] = float(e.level)
    if e.tau_range is not None:
        out["tau_s"] = [exact(e.tau_range[0]), exact(e.tau_range[1])]
    out["method"] = e.method
    return out


def estimate_from(d: dict, unit: str | None = None) -> Estimate:
    """The Estimate an :func:`estimate` mapping holds (the inverse of :func:`estimate`).

    Parameters
    ----------
    d : dict
        ``{value, ci95, unit, method[, tau_s, level]}`` or ``{upper_bound, unit, ...}``.
    unit : str, optional
        Unit to use where the mapping has none.

    Returns
    -------
    Estimate
    """
    level = float(d.get("level", 0.95))
    tau = tuple(float(t) for t in d["tau_s"]) if d.get("tau_s") else None
    u = d.get("unit", unit)
    if "value" in d:
        lo, hi = d["ci95"]
        return Estimate(float(d["value"]), float(lo), float(hi), u, d.get("method", ""),
                        level, tau)
    return Estimate.bound(float(d["upper_bound"]), u, d.get("method", ""), level, tau)


def curve_table(curve) -> dict:
    """An Allan curve as columns: tau, deviation, interval, EDF, noise type, terms."""
    return {
        "kind": curve.kind,
        "tau_s": [num(v) for v in curve.taus],
        "deviation": [num(v) for v in curve.dev],
        "ci95_low": [num(v) for v in curve.lower],
        "ci95_high": [num(v) for v in curve.upper],
        "edf": [num(v) for v in curve.edf],
        "noise_alpha": [int(v) for v in curve.alpha],
        "terms": [int(v) for v in curve.n_terms],
    }


def recording_section(rec: Recording) -> dict:
    """Facts of the recording: rate, jitter, gaps, saturation."""
    return {
        "samples": rec.n,
        "channels": list(rec.channels),
        "duration_s": num(rec.duration),
        "sample_period_s": num(rec.period),
        "rate_hz": num(1.0 / rec.period),
        "jitter_s": num(rec.jitter),
        "gaps": [{"start_s": num(g.start_s), "length_s": num(g.length_s),
                  "missing_samples": g.missing} for g in rec.gaps],
        "saturated": [{"channel": s.channel, "start_s": num(s.start_s), "samples": s.samples,
                       "value": num(s.value)} for s in rec.saturated],
    }


def filter_section(fb: FilterBlock) -> dict:
    """The filter matrices with their intervals."""
    def vec(a):
        return [num(v) for v in a]
    return {
        "dt": num(fb.dt),
        "order": list(fb.order),
        "units": list(fb.units),
        "matrix_units": {
            "R": [derived_unit(u, "variance") for u in fb.units],
            "Q_input": [derived_unit(u, "input_variance") for u in fb.units],
            "Q_bias": [derived_unit(u, "variance") for u in fb.units],
        },
        "R": matrix(fb.R),
        "R_ci95": {"low": matrix(fb.R_low), "high": matrix(fb.R_high)},
        "Q_input": matrix(fb.Q_input),
        "Q_input_ci95": {"low": matrix(fb.Q_input_low), "high": matrix(fb.Q_input_high)},
        "Q_bias": matrix(fb.Q_bias),
        "Q_bias_ci95": {"low": matrix(fb.Q_bias_low), "high": matrix(fb.Q_bias_high)},
        "Q_bias_from_bound": list(fb.Q_bias_is_bound),
        "gauss_markov": {"phi": vec(fb.gm_phi), "q": vec(fb.gm_q),
                         "q_range95": {"low": vec(fb.gm_q_low), "high": vec(fb.gm_q_high)}},
        "continuous": {"white_psd": vec(fb.white_psd), "bias_rw_psd": vec(fb.bias_rw_psd)},
        "notes": list(fb.notes),
    }


_COMMENTS = {
    "provenance": "Where these numbers came from.",
    "recording": "The recording as validated at ingest (SI; times in s from the first sample).",
    "channels": ("Noise terms per channel (IEEE Std 952): value and 95 % interval, or an\n"
                 "upper bound where the data cannot resolve the term. tau_s: averaging\n"
                 "times that constrain the term."),
    "filter": ("Discrete-time matrices for step dt over 'order' (SI, diagonal).\n"
               "R = N^2/dt (channel as a measurement); Q_input = N^2*dt (channel\n"
               "integrated in the prediction); Q_bias = K^2*dt (bias random-walk state).\n"
               "A starting point for tuning: confirm on the real system."),
}


class _Dumper(yaml.SafeDumper):
    """Block mappings; lists of scalars (intervals, matrix rows) in flow style."""


def _represent_list(dumper, data):
    flow = all(not isinstance(v, (dict, list)) for v in data)
    return dumper.represent_sequence("tag:yaml.org,2002:seq", data, flow_style=flow)


_Dumper.add_representer(list, _represent_list)
# Text that the reading side (YAML 1.2 numbers) would take for a number is quoted,
# so a name such as "1e3" comes back a name.
quote_for_loader(_Dumper)


CHECKSUM = "checksum"
"""Last section of every block: ``sha256:<hex>`` of the sections above (:func:`digest`)."""
SIDE_FILES = ("map", "config", "camera", "survey")
"""Provenance keys naming side files a re-check reads again (paths, or a marker
such as ``(same names)`` that names no file)."""


def side_file(path) -> str:
    """A side file's path for the provenance: absolute, so that the block works from
    any folder; :func:`render` with ``out`` makes it relative to the block's folder."""
    text = str(path)
    if text.startswith("("):  # "(same names)": no file
        return text
    return str(Path(text).resolve())


def _canonical(value):
    """Mappings with text keys (a damaged block may mix 0 and "a", which cannot be
    sorted); a key that is not text keeps its type in its name."""
    if isinstance(value, dict):
        return {(k if isinstance(k, str) else f"<{type(k).__name__}>{k!r}"): _canonical(v)
                for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_canonical(v) for v in value]
    return value


def digest(sections: dict) -> str:
    """``sha256:<hex>`` of the sections as read back from YAML, dumped as canonical
    JSON (keys sorted, no spaces): comments and layout of the text do not count, any
    changed value, key or list does. The ``checksum`` section itself is left out."""
    body = _canonical({k: v for k, v in sections.items() if k != CHECKSUM})
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      default=str)
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def verify(doc: dict) -> str:
    """Whether a parsed block matches its checksum: ``ok``, ``missing`` or ``mismatch``."""
    stored = doc.get(CHECKSUM)
    if not isinstance(stored, str):
        return "missing"
    return "ok" if stored == digest(doc) else "mismatch"


def _relative_side_files(sections: dict, folder: Path) -> dict:
    """The sections with provenance side-file paths relative to ``folder``."""
    import os

    prov = sections.get("provenance")
    if not isinstance(prov, dict):
        return sections
    new = dict(prov)
    for key in SIDE_FILES:
        value = prov.get(key)
        if isinstance(value, str) and not value.startswith("("):
            try:
                new[key] = Path(os.path.relpath(Path(value).resolve(), folder)).as_posix()
            except ValueError:  # another drive (Windows): keep it absolute
                pass
    return {**sections, "provenance": new}


def render(sections: dict, title: str | None = None, comments: dict | None = None,
           out=None) -> str:
    """YAML text with a comment above each top-level section, and a checksum last.

    Parameters
    ----------
    sections : dict
        Top-level sections in output order.
    title : str, optional
        First comment line (default: the static block's).
    comments : dict, optional
        Section name → comment (default: the static block's).
    out : path, optional
        Where the text will be written: side files named in the provenance are then
        stored relative to its folder, so a folder moved whole keeps working.
    """
    comments = _COMMENTS if comments is None else comments
    if out is not None:
        sections = _relative_side_files(sections, Path(out).resolve().parent)
    # The checksum covers the values as a reader gets them back, so round trip first.
    body = {k: v for k, v in sections.items() if k != CHECKSUM}
    stamp = digest(yaml.load(yaml.dump(body, Dumper=_Dumper, sort_keys=False,
                                       allow_unicode=True), Loader=GuardedLoader))
    sections = {**body, CHECKSUM: stamp}
    comments = {**comments, CHECKSUM: comments.get(CHECKSUM, (
        "SHA-256 of the sections above (canonical JSON, keys sorted). A re-check refuses\n"
        "a block that does not match: re-run it, or accept an edit with --accept-edited."))}
    lines = [f"# {title or f'noisecal static characterisation ({LAYOUT})'}",
             "# Values are SI. Intervals are 95 % unless stated.", ""]
    for key, value in sections.items():
        for c in comments.get(key, "").splitlines():
            lines.append(f"# {c}")
        lines.append(yaml.dump({key: value}, Dumper=_Dumper, sort_keys=False,
                               default_flow_style=False, allow_unicode=True, width=100).rstrip())
        lines.append("")
    return "\n".join(lines)
