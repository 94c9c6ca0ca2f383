"""The static characterisation's YAML block: commented, versioned, includable.

Numbers are SI, rounded to six significant digits. The layout is noisecal's
own; its version is in ``layout``.

Layout versions: ``noisecal.static/2`` names the statistic of each Allan point
table in words (``allan_points.kind: overlapping_allan_deviation``, see
:data:`KIND_NAMES`) where ``noisecal.static/1`` wrote a short code (``oadev``);
nothing else changed. A re-check reads both: :func:`migrate` turns a version 1
block into version 2 after its checksum has been verified.
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

LAYOUT = "noisecal.static/2"
LAYOUTS_READ = ("noisecal.static/1", LAYOUT)
"""Static layouts a re-check accepts (older ones through :func:`migrate`)."""

KIND_NAMES = {
    "adev": "allan_deviation",
    "oadev": "overlapping_allan_deviation",
    "mdev": "modified_allan_deviation",
    "hdev": "hadamard_deviation",
    "ohdev": "overlapping_hadamard_deviation",
    "totdev": "total_deviation",
}
"""The statistic of an Allan point table, spelled out (the analysis keeps short codes)."""


def migrate(sections: dict) -> dict:
    """A static block of an older layout as the current one (a copy; others unchanged).

    ``noisecal.static/1`` → ``/2``: ``allan_points.kind`` codes become their names.
    Call it after the checksum is verified: the checksum covers the block as written.
    """
    if not isinstance(sections, dict) or sections.get("layout") != "noisecal.static/1":
        return sections
    out = {**sections, "layout": LAYOUT}
    chans = sections.get("channels")
    if isinstance(chans, dict):
        out["channels"] = {}
        for ch, entry in chans.items():
            pts = entry.get("allan_points") if isinstance(entry, dict) else None
            if isinstance(pts, dict) and pts.get("kind") in KIND_NAMES:
                entry = {**entry, "allan_points": {**pts, "kind": KIND_NAMES[pts["kind"]]}}
            out["channels"][ch] = entry
    return out


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
        "kind": KIND_NAMES.get(curve.kind, curve.kind),
        "tau_s": [num(v) for v in curve.taus],
        "deviation": [num(v) for v in curve.dev],
        "ci95_low": [num(v) for v in curve.lower],
        "ci95_high": [num(v) for v in curve.upper],
        "edf": [num(v) for v in curve.edf],
        "noise_alpha": [int(v) for v in curve.alpha],
        "terms": [int(v) for v in curve.n_terms],
    }


def recording_section(rec: Recording) -> dict:
    """Facts of the recording: rate, jitter, gaps, saturation (and the reader's notes:
    a bag's topic, the time used, the record-minus-stamp delay)."""
    notes = {"notes": list(rec.source.notes)} if rec.source.notes else {}
    return {
        **notes,
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
        **ros_covariance(fb.order, fb.units, fb.R),
        "notes": list(fb.notes),
    }


def ros_covariance(order, units, R) -> dict:
    """``{"ros_covariance": {field: [9 or 36 floats]}}``: R (SI) in the row-major arrays
    of the ROS messages where whole arrays are characterised, else ``{}``
    (:func:`noisecal.export.ros_params.covariance_arrays`)."""
    from .ros_params import covariance_arrays

    arrays, _ = covariance_arrays(order, units, R)
    if not arrays:
        return {}
    return {"ros_covariance": {k: [num(v) for v in a] for k, a in arrays.items()}}


OUTPUTS = ("noisecal", "ros")
UNITS = ("si", "customary")
ALLAN_POINTS = ("inline", "sidecar")
POINTS_LAYOUT = "noisecal.allan_points/1"
POINTS_KEY = "allan_points_file"
"""Provenance key of a static block whose Allan point tables are in a side file."""


def points_path(out, allan_points: str, output_as: str, inputs: list, overwrite: bool):
    """Where the Allan point tables go (None: in the block), checked before any work.

    ``OUT.yaml`` → ``OUT.allan.yaml`` beside it, with ``allan_points="sidecar"``.
    """
    from ..errors import InputError
    from .atomic import STDOUT, check_target

    if allan_points not in ALLAN_POINTS:
        raise InputError(f"--allan-points {allan_points}: give one of {', '.join(ALLAN_POINTS)}")
    if allan_points == "inline":
        return None
    if output_as != "noisecal":
        raise InputError("--allan-points sidecar: a ROS parameter file holds no Allan "
                         "points; leave it out with --as ros")
    if out == STDOUT:
        raise InputError("--allan-points sidecar: needs -o FILE.yaml to put the tables "
                         "beside; leave it out with -o -")
    path = Path(out).with_name(Path(out).stem + ".allan.yaml")
    check_target(path, [Path(p) for p in inputs if p], overwrite)
    return path


def split_points(sections: dict, side: Path) -> tuple[dict, str]:
    """The block without its Allan point tables, and the side file that holds them.

    The block's provenance names the side file (relative to the block) and its
    SHA-256, so the block's checksum covers the tables too.

    Returns
    -------
    block : dict
        Sections with ``channels.<ch>.allan_points`` left out and
        ``provenance.allan_points_file: {path, sha256}`` added.
    text : str
        The side file: ``layout: noisecal.allan_points/1``, the input's sha256,
        ``channels.<ch>: <table>``, its own checksum.
    """
    tables = {ch: e["allan_points"] for ch, e in sections["channels"].items()
              if isinstance(e, dict) and "allan_points" in e}
    doc = {"layout": POINTS_LAYOUT,
           "input_sha256": sections["provenance"]["input"]["sha256"],
           "channels": tables}
    text = render(doc, f"noisecal Allan point tables ({POINTS_LAYOUT})", {
        "channels": ("Per channel: the octave points the terms were fitted to (tau_s,\n"
                     "deviation, ci95, EDF, noise type, terms). The block beside this file\n"
                     "names it and its SHA-256.")})
    chans = {ch: {k: v for k, v in e.items() if k != "allan_points"}
             for ch, e in sections["channels"].items()}
    prov = {**sections["provenance"],
            POINTS_KEY: {"path": side.name,
                         "sha256": hashlib.sha256(text.encode("utf-8")).hexdigest()}}
    return {**sections, "provenance": prov, "channels": chans}, text


def join_points(base: dict, folder: Path, where: str) -> dict:
    """A block whose provenance names an Allan point side file, with the tables put back.

    The side file is found relative to the block's folder; its SHA-256 must be the
    one the (checksummed) block names.

    Raises
    ------
    InputError
        The side file is missing, unreadable, or not the one the block names.
    """
    from ..errors import InputError
    from ..ingest.yaml_file import read_yaml

    ref = (base.get("provenance") or {}).get(POINTS_KEY)
    if ref is None:
        return base
    if not isinstance(ref, dict) or not isinstance(ref.get("path"), str):
        raise InputError(f"{where}: 'provenance.{POINTS_KEY}' is damaged; re-run the job")
    path = folder / ref["path"]
    if not path.is_file():
        raise InputError(f"{where}: its Allan point tables {path} are missing; keep the "
                         ".allan.yaml file beside the block")
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    if digest != ref.get("sha256"):
        raise InputError(f"{path}: not the Allan point file the block {where} names (SHA-256 "
                         "differs: edited, or from another run); re-run the job")
    side = read_yaml(path, "Allan point file")
    tables = side.get("channels") if isinstance(side, dict) else None
    if not isinstance(tables, dict):
        raise InputError(f"{path}: no 'channels' tables; re-run the job")
    chans = {}
    for ch, e in (base.get("channels") or {}).items():
        chans[ch] = {**e, "allan_points": tables[ch]} if isinstance(e, dict) and \
            ch in tables else e
    return {**base, "channels": chans}


def outputs(result, out, output_as: str = "noisecal", node: str | None = None,
            units: str = "si", points: Path | None = None) -> list:
    """(path, text) of each file a static or motion job writes at ``-o`` (and beside it).

    ``points``: the Allan point side file (:func:`points_path`), or None.
    """
    if points is None:
        return [(out, render_output(result, None if out == "-" else out, output_as, node,
                                    units))]
    sections = result.sections
    if units == "customary":
        sections = with_input_units(sections, [result.recording])
    block, side = split_points(sections, Path(points))
    return [(points, side), (out, _render_sections(result, block, out))]


def _in_unit(d: dict, si_unit: str, unit: str) -> dict | None:
    """An estimate mapping's numbers converted from ``si_unit`` to ``unit`` (None if not)."""
    from ..units import convert

    try:
        scale = convert(1.0, si_unit, unit)
        if convert(0.0, si_unit, unit) != 0.0 or not np.isfinite(scale):
            return None  # affine (degC): a noise level is not a temperature
    except Exception:  # a unit pint cannot relate: no customary copy, SI stays
        return None
    out = {}
    if d.get("value") is not None:
        out["value"] = float(d["value"]) * scale
        out["ci95"] = [float(v) * scale for v in d["ci95"]]
    elif d.get("upper_bound") is not None:
        out["upper_bound"] = float(d["upper_bound"]) * scale
    else:
        return None
    out["unit"] = unit
    return out


def with_input_units(sections: dict, recordings) -> dict:
    """A copy of a static or motion block with each fitted number also in the input's units.

    Each channel's term (static) or ``sigma``/``bias`` (motion) gets an
    ``in_input_units`` mapping beside its SI one, e.g. a ``[deg/s]`` channel's
    white noise in ``deg/s/Hz^0.5``. SI stays the value a reader should use.

    Parameters
    ----------
    sections : dict
        The block's sections.
    recordings : sequence of Recording
        The recordings whose units the channels were read in (sensor first).
    """
    from ..fit.simulate import TERM_NAMES

    src, si = {}, {}
    for rec in reversed(list(recordings)):
        src.update(zip(rec.channels, rec.source_units))
        si.update(zip(rec.channels, rec.units))
    out = dict(sections)
    if isinstance(sections.get("channels"), dict):
        chans = {}
        for ch, entry in sections["channels"].items():
            entry = dict(entry)
            if ch in src:
                for term in TERM_NAMES:
                    d = entry.get(term)
                    if isinstance(d, dict) and d.get("unit"):
                        conv = _in_unit(d, d["unit"], derived_unit(src[ch], term))
                        if conv is not None:
                            entry[term] = {**d, "in_input_units": conv}
            chans[ch] = entry
        out["channels"] = chans
    m = sections.get("measurement")
    if isinstance(m, dict):
        m = dict(m)
        for key in ("sigma", "bias"):
            if isinstance(m.get(key), dict):
                m[key] = {ch: ({**d, "in_input_units": conv} if ch in src and (
                    conv := _in_unit(d, d.get("unit", si.get(ch)), src[ch])) else d)
                    for ch, d in m[key].items()}
        out["measurement"] = m
    return out


def render_output(result, out=None, output_as: str = "noisecal", node: str | None = None,
                  units: str = "si") -> str:
    """The text a job writes at ``-o``: its noisecal block, or a ROS 2 parameter file.

    Parameters
    ----------
    result : StaticResult or MotionResult
    out : path, optional
        Where it goes (side files in the block are made relative to its folder).
    output_as : {"noisecal", "ros"}
        ``ros``: the ROS 2 parameter file of :mod:`noisecal.export.ros_params`.
    node : str, optional
        Node name of the parameter file (default ``noisecal``).
    units : {"si", "customary"}
        ``customary``: numbers also in the input's units (noisecal block only).
    """
    from ..errors import InputError

    if output_as not in OUTPUTS:
        raise InputError(f"--as {output_as}: give one of {', '.join(OUTPUTS)}")
    if units not in UNITS:
        raise InputError(f"--units {units}: give one of {', '.join(UNITS)}")
    if output_as == "ros":
        from .ros_params import check_node, render_result

        if units != "si":
            raise InputError("--units customary: a ROS parameter file is SI (REP 103); "
                             "leave --units out with --as ros")
        return render_result(result, check_node(node or "noisecal"))
    if node is not None:
        raise InputError(f"--node {node}: applies to --as ros; leave it out")
    if units == "customary":
        recs = [getattr(result, k) for k in ("recording", "sensor", "truth")
                if hasattr(result, k)]
        return result._render(out) if not recs else _render_sections(
            result, with_input_units(result.sections, recs), out)
    return result._render(out)


def _render_sections(result, sections: dict, out) -> str:
    """``result._render`` on other sections (the job's own title and comments)."""
    from dataclasses import replace

    return replace(result, sections=sections)._render(out)


_COMMENTS = {
    "provenance": "Where these numbers came from.",
    "recording": "The recording as validated at ingest (SI; times in s from the first sample).",
    "channels": ("Noise terms per channel (IEEE Std 952): value and 95 % interval, or an\n"
                 "upper bound where the data cannot resolve the term. tau_s: averaging\n"
                 "times that constrain the term."),
    "filter": ("Discrete-time matrices for step dt over 'order' (SI, diagonal).\n"
               "R = N^2/dt (channel as a measurement); Q_input = N^2*dt (channel\n"
               "integrated in the prediction); Q_bias = K^2*dt (bias random-walk state).\n"
               "ros_covariance: R as the ROS messages' row-major arrays (REP 103).\n"
               "A starting point for tuning: confirm on the real system."),
}


class _Dumper(getattr(yaml, "CSafeDumper", yaml.SafeDumper)):
    """Block mappings; lists of scalars (intervals, matrix rows) in flow style.

    libyaml's emitter where PyYAML was built with it (the text is the same as the
    pure-Python emitter's, four times faster: a six-channel block is written three
    times, once for its checksum).
    """


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
