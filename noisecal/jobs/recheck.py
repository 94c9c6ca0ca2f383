"""Re-check after a hardware swap: the baseline's job on a new recording, compared.

Pipeline: read the baseline YAML block and check it (layout version, checksum,
the keys a re-check reads) → run its job (static, motion, odometry or targets)
on the new recording with every setting the baseline stored, its side files
(map, config, camera, survey) found relative to the baseline's own folder →
the parameters of both → :mod:`noisecal.fit.compare` (F-tests and interval
tests, Holm-corrected, decidability) → YAML block, side-by-side Allan plot for
a static baseline, a summary, and an exit status for scripts: 0 consistent,
1 changed, 3 inconclusive, 2 error.

A noise that depends on the conditions of a run is compared through the law
that removes them: where the baseline fitted a variance law σ² = a + b·x², the
coefficients a and b (and σ at covariate values the user states), never the
σ pooled over the drive, which changes with where the drive went.
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import InputError
from ..export import yaml_block
from ..export.atomic import STDOUT, Staged, output_paths
from ..fit import compare
from ..fit.simulate import TERM_NAMES
from ..ingest.yaml_file import read_yaml

LAYOUT = "noisecal.recheck/1"
EXIT = {"consistent": 0, "changed": 1, "inconclusive": 3}
JOBS = {"noisecal.static/1": "static", yaml_block.LAYOUT: "static",
        "noisecal.motion/1": "motion", "noisecal.odometry/1": "odometry",
        "noisecal.targets/1": "targets"}
"""Layouts a re-check reads; static/1 is migrated to the current layout on load."""
SIDE_OPTIONS = {"map": "--map", "config": "--config", "camera": "--camera",
                "survey": "--survey"}
"""Provenance side file → the option that overrides it."""
ACCEPT = "--accept-edited"


@dataclass(frozen=True)
class RecheckResult:
    """Verdicts of a re-check.

    Attributes
    ----------
    job : str
    verdict : str
        Overall verdict of the gated parameters.
    within_spec : bool or None
    comparisons : list of Comparison
    new_sections : dict
        The new recording's own YAML content.
    sections : dict
        The re-check's YAML content.
    baseline : dict or None
        The baseline block as the re-check read it (for the report's side-by-side plot).
    """

    job: str
    verdict: str
    within_spec: bool | None
    comparisons: list
    new_sections: dict
    sections: dict
    baseline: dict | None = None

    def summary(self) -> str:
        """Plain-language summary (see :func:`summary`)."""
        return summary(self)

    def report(self, path, overwrite: bool = False) -> Path:
        """Write the self-contained HTML report of this re-check (see
        :func:`noisecal.export.html.write_report`)."""
        from ..export.html import write_report

        return write_report(self, path, overwrite)

    @property
    def exit_status(self) -> int:
        return EXIT[self.verdict]

    @property
    def undecided(self) -> list:
        """Gated comparisons the data could not decide (inconclusive, or, when gated
        by name, not resolved in either recording)."""
        return [c for c in self.comparisons if c.gated and (
            c.verdict == "inconclusive" or (c.verdict == "not resolved" and c.longer))]


# ---------------------------------------------------------------------------------------
# The baseline: layout, checksum, the keys a re-check reads


def _damaged(where: str, what: str) -> InputError:
    return InputError(f"{where}: the baseline is damaged ({what}); re-run the job that "
                      "wrote it")


def _get(doc, dotted: str, where: str, kind=dict):
    """doc's value at a dotted key path, of the given kind, or a one-line error."""
    node = doc
    for key in dotted.split("."):
        if not isinstance(node, dict) or key not in node:
            raise _damaged(where, f"'{dotted}' is missing")
        node = node[key]
    if kind is float:
        if isinstance(node, bool) or not isinstance(node, (int, float)) or \
                not math.isfinite(node):
            raise _damaged(where, f"'{dotted}' is not a number")
        return float(node)
    if not isinstance(node, kind):
        raise _damaged(where, f"'{dotted}' is not a {kind.__name__}")
    return node


def _check_estimate(e, dotted: str, where: str) -> None:
    """An estimate is {value, ci95: [lo, hi]} with lo ≤ value ≤ hi, or {upper_bound}."""
    if not isinstance(e, dict):
        raise _damaged(where, f"'{dotted}' is not a mapping")
    if "value" in e:
        v = _get(e, "value", where, float)
        ci = e.get("ci95")
        if not isinstance(ci, list) or len(ci) != 2 or not all(
                x is None or (isinstance(x, (int, float)) and not isinstance(x, bool)
                              and math.isfinite(x)) for x in ci):
            raise _damaged(where, f"'{dotted}.ci95' is not [low, high]")
        if None not in ci and not ci[0] <= v <= ci[1]:
            raise _damaged(where, f"'{dotted}' lies outside its own interval")
    elif "upper_bound" in e:
        if e["upper_bound"] is not None:
            _get(e, "upper_bound", where, float)
    else:
        raise _damaged(where, f"'{dotted}' has neither a value nor an upper bound")


def _positive_list(entry: dict, key: str, dotted: str, where: str, n: int | None) -> list:
    values = entry.get(key)
    if not isinstance(values, list) or not values or (n is not None and len(values) != n):
        raise _damaged(where, f"'{dotted}.{key}' is not a list as long as tau_s")
    if not all(isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)
               and (x > 0 or key == "noise_alpha") for x in values):
        raise _damaged(where, f"'{dotted}.{key}' holds a value that is not a positive number")
    return values


def check_baseline(base: dict, where: str) -> None:
    """Refuse, in one line, a baseline missing or mistyping anything a re-check reads."""
    _get(base, "provenance", where)
    layout = base["layout"]
    if layout == yaml_block.LAYOUT:
        chans = _get(base, "channels", where)
        if not chans:
            raise _damaged(where, "'channels' is empty")
        for key in ("recording.duration_s", "filter.dt"):
            if not _get(base, key, where, float) > 0:
                raise _damaged(where, f"'{key}' is not positive")
        for ch, entry in chans.items():
            if not isinstance(entry, dict):
                raise _damaged(where, f"'channels.{ch}' is not a mapping")
            for term in TERM_NAMES:
                _check_estimate(entry.get(term), f"channels.{ch}.{term}", where)
            pts = entry.get("allan_points")
            if not isinstance(pts, dict):
                raise _damaged(where, f"'channels.{ch}.allan_points' is missing")
            n = len(_positive_list(pts, "tau_s", f"channels.{ch}.allan_points", where, None))
            for key in ("deviation", "edf", "noise_alpha", "terms"):
                _positive_list(pts, key, f"channels.{ch}.allan_points", where, n)
    needs = {"noisecal.motion/1": ["measurement.sigma", "measurement.bias",
                                   "measurement.channels", "measurement.outlier_fraction",
                                   "measurement.gate", "alignment.time_offset"],
             "noisecal.odometry/1": ["odometry", "alignment.time_offset"],
             "noisecal.targets/1": ["camera.pixel.sigma", "camera.outlier_fraction",
                                    "camera.gate"]}
    for key in needs.get(layout, []):
        _get(base, key, where)
    try:
        found = estimates_of(base)
    except (KeyError, TypeError, AttributeError) as exc:
        raise _damaged(where, f"a fitted number is missing ({exc.__class__.__name__})") \
            from None
    for ch, name, e, _ in found:
        _check_estimate(e, f"{ch}.{name}", where)
    _check_settings(base, where)
    if layout == "noisecal.motion/1":
        for ch in _get(base, "measurement.sigma", where):
            entry = base["measurement"]["channels"].get(ch)
            if not isinstance(entry, dict):
                raise _damaged(where, f"'measurement.channels.{ch}' is missing")
            if "effective_samples" in entry and not _get(
                    entry, "effective_samples", where, float) > 1:
                raise _damaged(where, f"'measurement.channels.{ch}.effective_samples' is "
                               "not above 1")
            if "variance_law" in entry:
                law = _get(entry, "variance_law", where)
                for k in ("a", "b"):
                    _check_estimate(law.get(k), f"measurement.channels.{ch}.variance_law.{k}",
                                    where)


def _check_settings(base: dict, where: str) -> None:
    """The settings a re-check re-uses, read and checked for kind and range."""
    if "settings" in base["provenance"] and not isinstance(base["provenance"]["settings"],
                                                           dict):
        raise _damaged(where, "'provenance.settings' is not a mapping")
    try:
        st = settings_of(base)
    except (KeyError, TypeError, ValueError, AttributeError) as exc:
        raise _damaged(where, f"a setting cannot be read ({exc.__class__.__name__})") \
            from None
    ok = {
        "channels": lambda v: isinstance(v, list) and v and all(isinstance(c, str) for c in v),
        "dt": lambda v: math.isfinite(v) and v > 0,
        "reps": lambda v: v > 0, "seed": lambda v: v >= 0,
        "repair": lambda v: v in (None, "sort", "drop"),
        "covariate": lambda v: v is None or isinstance(v, str),
        "gate": lambda v: 0.5 < v < 1,
        "max_offset": lambda v: math.isfinite(v) and v > 0,
        "ground": lambda v: v in ("ray", "homography", "dlt"),
        "poses": lambda v: isinstance(v, bool),
    }
    for key, value in st.items():
        if not ok[key](value):
            raise _damaged(where, f"the setting {key} = {value!r} is not one a job takes")


def load_baseline(path: str, accept_edited: bool = False):
    """The parsed baseline and what its checksum said (``ok``, ``missing``, ``mismatch``).

    Raises
    ------
    InputError
        Not a noisecal block, another layout version, a checksum that fails (unless
        ``accept_edited``), or damaged content: one line each.
    """
    base = read_yaml(Path(path), "baseline")
    layout = base.get("layout") if isinstance(base, dict) else None
    if not isinstance(layout, str) or not layout.startswith("noisecal."):
        raise InputError(f"{path}: not a noisecal block (its 'layout' should be one of "
                         f"{', '.join(JOBS)})")
    if layout not in JOBS:
        family = layout.rsplit("/", 1)[0]
        known = [k for k in JOBS if k.rsplit("/", 1)[0] == family]
        if known:
            raise InputError(f"{path}: layout {layout!r} is another version than this noisecal "
                             f"reads ({known[-1]}); re-run the baseline with noisecal "
                             f"{__version__}")
        raise InputError(f"{path}: a {layout!r} block is not a baseline; give one written by "
                         "static, motion (or motion --odometry) or targets")
    state = yaml_block.verify(base)
    if state != "ok" and not accept_edited:
        what = ("has no checksum (edited, or written before blocks carried one)"
                if state == "missing" else
                "does not match its checksum (edited by hand or damaged)")
        raise InputError(f"{path}: the baseline {what}; re-run the job that wrote it, or "
                         f"give {ACCEPT} if the edit is intended")
    # An older static layout is read as the current one (yaml_block.migrate), and Allan
    # point tables kept beside the block are put back (the block's checksum covers
    # their SHA-256).
    base = yaml_block.join_points(yaml_block.migrate(base), Path(path).resolve().parent,
                                  str(path))
    check_baseline(base, str(path))
    return base, state


# ---------------------------------------------------------------------------------------
# What is compared, and how


LINEAR = {"linear": True}
"""Signed quantities or fractions: compared by the difference, not the ratio."""
CAMERA_SIGMA = {"more_of": "targets (the spread between targets limits the systematic part)"}
CONDITIONS = {"conditions": True}
"""A σ pooled over a drive: where the noise follows a law it depends on where the
drive went, and the law's coefficients are compared instead (see comparison_rows)."""
LAW = {"power": 2, "law": True}
"""A variance law's coefficient (a variance: the tolerance applies to its root)."""


def estimates_of(sections: dict) -> list:
    """Every fitted number of a job's block: (channel, name, Estimate-like dict, how).

    ``how`` says how a re-check compares it: ``linear`` (by the difference),
    ``power`` 2 (a variance coefficient: the tolerance, a ratio of σ, applies to
    its square root), ``more_of`` (what more data means), ``conditions`` (depends
    on the run's conditions: not compared, its law is). The history stores the
    same numbers.
    """
    layout = sections.get("layout")
    out = []
    if layout == yaml_block.LAYOUT:
        for ch, entry in sections["channels"].items():
            for term in TERM_NAMES:
                out.append((ch, term, entry[term], {}))
    elif layout == "noisecal.motion/1":
        m = sections["measurement"]
        for ch in m["sigma"]:
            law = (m.get("channels", {}).get(ch) or {}).get("variance_law")
            out.append((ch, "sigma", m["sigma"][ch], CONDITIONS if law else {}))
            if law:
                more = {"more_of": f"drive over the baseline's {law.get('covariate')} range"}
                out.append((ch, "law_a", law["a"], {**LAW, **more}))
                out.append((ch, "law_b", law["b"], {**LAW, **more}))
            out.append((ch, "bias", m["bias"][ch], LINEAR))
        out.append(("all", "outlier_fraction", {**m["outlier_fraction"], "unit": "1"}, LINEAR))
        out.append(("all", "time_offset", sections["alignment"]["time_offset"], LINEAR))
    elif layout == "noisecal.odometry/1":
        for k in ("alpha1", "alpha2", "alpha3", "alpha4"):
            out.append(("odometry", k, sections["odometry"][k], {"power": 2}))
        out.append(("all", "time_offset", sections["alignment"]["time_offset"], LINEAR))
    elif layout == "noisecal.targets/1":
        for k in ("u", "v"):
            out.append(("pixel", k, sections["camera"]["pixel"]["sigma"][k], CAMERA_SIGMA))
        out.append(("all", "outlier_fraction",
                    {**sections["camera"]["outlier_fraction"], "unit": "1"}, LINEAR))
    return out


def _allan_point(entry: dict, tau: float):
    """(variance, EDF) of the Allan point nearest tau (log scale)."""
    pts = entry["allan_points"]
    taus = np.array(pts["tau_s"], dtype=float)
    i = int(np.argmin(np.abs(np.log(taus) - np.log(tau))))
    return float(pts["deviation"][i]) ** 2, float(pts["edf"][i])


def _white_edf(entry: dict, edf: float) -> float:
    """EDF of the τ0 point: for white rate noise the exact 2·(terms)/3 (the first
    differences overlap, correlation −1/2); allantools' figure there is about 17 %
    high (README, known limits), which would make the F-test too eager."""
    pts = entry["allan_points"]
    if int(pts["noise_alpha"][0]) == 0:
        return 2.0 * float(pts["terms"][0]) / 3.0
    return edf


def _f_dof(base: dict, new: dict, ch: str, name: str, be: dict, ne: dict):
    """(var_base, dof_base, var_new, dof_new) where an F-test applies, else None.

    Static: white noise at τ0 (where it dominates a rate sensor's curve), every
    other resolved term at the Allan point nearest the geometric middle of the τ
    range that constrains it, through the points' EDF. Motion: each inlier σ
    with the effective sample sizes.
    """
    if "value" not in be or "value" not in ne:
        return None
    if base["layout"] == yaml_block.LAYOUT:
        b, n = base["channels"][ch], new["channels"][ch]
        at_tau0 = name == "white_noise" or not be.get("tau_s")
        # White noise is tested at the first tau the fit used: below it a sensor's
        # low-pass, not its white noise, sets the curve.
        first = max(float((x.get("bandwidth") or {}).get("fitted_from_tau_s") or 0.0)
                    for x in (b, n))
        tau = (max(float(b["allan_points"]["tau_s"][0]), first) if at_tau0
               else float(np.sqrt(np.prod(be["tau_s"]))))
        vb, db = _allan_point(b, tau)
        vn, dn = _allan_point(n, tau)
        if name == "white_noise" and first <= float(b["allan_points"]["tau_s"][0]):
            db, dn = _white_edf(b, db), _white_edf(n, dn)
        return vb, db, vn, dn
    if base["layout"] == "noisecal.motion/1" and name == "sigma":
        bc = base["measurement"]["channels"].get(ch, {})
        nc = new["measurement"]["channels"].get(ch, {})
        if "effective_samples" in bc and "effective_samples" in nc:
            return (be["value"] ** 2, bc["effective_samples"] - 1,
                    ne["value"] ** 2, nc["effective_samples"] - 1)
    return None


def _covariate_range(block: dict):
    """(lowest, highest) covariate of a motion run's inliers, or None (not stored)."""
    span = ((block.get("provenance") or {}).get("conditions") or {}).get("covariate_range")
    if isinstance(span, list) and len(span) == 2 and all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in span):
        return float(span[0]), float(span[1])
    return None


def _intercept_pinned(base: dict, ch: str, spans: list) -> bool:
    """Whether both runs reach covariate values where the law's intercept a is at least
    the slope's share (|x| ≤ √(a/b), from the baseline's law). Farther out, a is an
    extrapolation to x = 0 that takes up any variance the law's form leaves out (a
    small misalignment adds δ²·ẋ²), and it depends on the drive, not only the sensor.
    Blocks that do not store their covariate range compare it always."""
    if None in spans:
        return True
    law = base["measurement"]["channels"][ch]["variance_law"]
    a = law["a"].get("value", law["a"].get("upper_bound"))
    b = law["b"].get("value", law["b"].get("upper_bound"))
    if not a or not b:
        return True
    reach = float(np.sqrt(a / b))
    return all(min(abs(lo), abs(hi)) <= reach or lo <= 0 <= hi for lo, hi in spans)


def _law_points(base: dict, new: dict, at: list, by_law: set) -> list:
    """(channel, name, baseline σ(x), new σ(x)) at each stated covariate value, and at
    the middle (geometric, for a positive range) of the covariate range both runs
    covered, where both laws rest on data."""
    out = []
    if base["layout"] != "noisecal.motion/1":
        return out
    spans = [_covariate_range(x) for x in (base, new)]
    at = list(at)
    if None not in spans:
        lo, hi = max(spans[0][0], spans[1][0]), min(spans[0][1], spans[1][1])
        if lo < hi:
            at.append(float(f"{np.sqrt(lo * hi) if lo > 0 else (lo + hi) / 2:.3g}"))
    for ch, entry in base["measurement"]["channels"].items():
        law = entry.get("variance_law") if ch in by_law else None
        nlaw = (new["measurement"]["channels"].get(ch) or {}).get("variance_law")
        if not law or not nlaw:
            continue
        unit = str(law.get("b", {}).get("unit", "")).rsplit("/", 1)[-1]
        unit = unit.replace("(", "").replace(")^2", "")
        for x in dict.fromkeys(at):
            out.append((ch, f"sigma_at_{x:g}",
                        compare.law_sigma(law["a"], law["b"], x, unit),
                        compare.law_sigma(nlaw["a"], nlaw["b"], x, unit)))
    return out


def comparison_rows(base: dict, new: dict, at: list | None = None,
                    edited: bool = False) -> list:
    """One row per parameter present in both blocks, tested as :func:`estimates_of`
    and :func:`_f_dof` say.

    Parameters
    ----------
    at : list of float, optional
        Covariate values (SI) at which a variance law's σ is compared too.
    edited : bool
        The baseline was accepted with a failing checksum: compare its stated values
        and intervals, since the Allan points behind an F-test may no longer back them.
    """
    found = {(ch, name): e for ch, name, e, _ in estimates_of(new)}
    length_ratio = None
    if base["layout"] == yaml_block.LAYOUT:
        length_ratio = (float(base["recording"]["duration_s"]) /
                        float(new["recording"]["duration_s"]))
    # Where either run resolved a law's slope b, the noise depends on the covariate:
    # the pooled σ then measures the drive as much as the sensor, so the law is compared.
    # Where neither did, the law is a constant within what the data resolve, and the
    # pooled σ (F-test, tighter) is the sensor's.
    by_law = {ch for ch, name, e, _ in estimates_of(base) + estimates_of(new)
              if name == "law_b" and "value" in e}
    spans = [_covariate_range(x) for x in (base, new)]
    rows = []
    for ch, name, be, how in estimates_of(base):
        ne = found.get((ch, name))
        if ne is None or (how.get("conditions") and ch in by_law) or (
                how.get("law") and ch not in by_law):
            continue
        if name == "law_a" and not _intercept_pinned(base, ch, spans):
            continue
        f_dof = None if edited else _f_dof(base, new, ch, name, be, ne)
        row = compare.compare_estimates(ch, name, be, ne, f_dof,
                                        linear=how.get("linear", False))
        row.update({k: v for k, v in how.items() if k not in ("linear", "law", "conditions")})
        if length_ratio is not None:
            row["length_ratio"] = length_ratio
        rows.append(row)
    for ch, name, be, ne in _law_points(base, new, at or [], by_law):
        row = compare.compare_estimates(ch, name, be, ne)
        x = name.removeprefix("sigma_at_")
        row["more_of"] = f"drive near {x} (the covariate's SI unit)"
        rows.append(row)
    return rows


# ---------------------------------------------------------------------------------------
# Running the baseline's job again, with every setting


def settings_of(base: dict) -> dict:
    """Every setting of the baseline's run, from its provenance (older blocks: from
    where the sections kept them)."""
    prov = base["provenance"]
    st = prov.get("settings") if isinstance(prov.get("settings"), dict) else {}
    layout = base["layout"]
    if layout == yaml_block.LAYOUT:
        return {"channels": list(st.get("channels") or base["channels"]),
                "dt": float(st.get("dt") or base["filter"]["dt"]),
                "reps": int(prov.get("bootstrap_replicates", 200)),
                "seed": int(prov.get("seed", 1)), "repair": st.get("repair")}
    if layout == "noisecal.motion/1":
        laws = [c["variance_law"].get("covariate")
                for c in base["measurement"].get("channels", {}).values()
                if isinstance(c, dict) and c.get("variance_law")]
        return {"covariate": st.get("covariate", laws[0] if laws else None),
                "gate": float(st.get("gate") or base["measurement"]["gate"]["probability"]),
                "max_offset": float(st.get("max_offset_s")
                                    or base["alignment"]["max_offset_s"]),
                "seed": int(st.get("seed", prov.get("seed", 1)))}
    if layout == "noisecal.odometry/1":
        return {"max_offset": float(st.get("max_offset_s")
                                    or base["alignment"]["max_offset_s"])}
    return {"ground": st.get("ground", "ray"),
            "gate": float(st.get("gate") or base["camera"]["gate"]["probability"]),
            "seed": int(st.get("seed", prov.get("seed", 1))), "poses": bool(st.get("poses"))}


def side_file(base: dict, key: str, baseline: str, override: str | None = None) -> str:
    """Path of a side file of the baseline (map, config, camera, survey).

    Order: the override option; the stored path, relative to the baseline's own
    folder when relative; a file of the same name beside the baseline (a folder
    moved whole). A missing one is one line naming the option that gives it.
    """
    option = SIDE_OPTIONS[key]
    if override is not None:
        if not Path(override).is_file():
            raise InputError(f"{option} {override}: no such file; check the path")
        return str(override)
    stored = base["provenance"].get(key)
    if not isinstance(stored, str) or not stored:
        raise InputError(f"{baseline}: the baseline does not say which {key} file it used; "
                         f"give it with {option} PATH")
    if stored.startswith("("):
        return stored  # "(same names)": no file
    folder = Path(baseline).resolve().parent
    candidates = [folder / stored, folder / Path(stored).name]
    for c in candidates:
        if c.is_file():
            return str(c)
    raise InputError(f"{baseline}: the baseline's {key} file {stored} is not found (looked "
                     f"beside the baseline too); give it with {option} PATH")


def run_job(job: str, settings: dict, files: dict, recording: str, truth: str | None,
            poses: str | None, where: str, use_cache: bool = True):
    """The baseline's job on the new recording with the baseline's settings: the job's
    result (its ``.sections`` is the block). The one place a re-check dispatches."""
    if job == "static":
        from ..ingest import read_recording
        from .static import characterise

        rec = read_recording(recording, repair=settings["repair"], use_cache=use_cache)
        missing = [c for c in settings["channels"] if c not in rec.channels]
        if missing:
            raise InputError(f"{recording}: the baseline's channel(s) {', '.join(missing)} "
                             f"are not in the new recording (it has {', '.join(rec.channels)});"
                             " record them under the same names")
        return characterise(rec, settings["channels"], settings["dt"], settings["reps"],
                            settings["seed"], True, "recheck")
    if truth is None and job in ("motion", "odometry"):
        raise InputError(f"{where}: a {job} baseline needs the new drive's truth: --truth TRUTH")
    if job == "motion":
        from ..ingest import read_recording
        from ..ingest.mapping import read_map, same_names
        from . import motion

        sensor, tr = read_recording(recording, use_cache=use_cache), read_recording(
            truth, use_cache=use_cache)
        cov = settings["covariate"]
        mapping = (same_names(sensor.channels, tr.channels, cov)
                   if files["map"] == "(same names)" else read_map(files["map"], cov))
        return motion.analyse(sensor, tr, mapping, settings["gate"], settings["max_offset"],
                              settings["seed"], "recheck")
    if job == "odometry":
        from ..ingest import read_recording
        from ..ingest.mapping import read_odometry_config
        from . import odometry

        cfg = read_odometry_config(files["config"])
        return odometry.analyse(read_recording(recording, use_cache=use_cache),
                                read_recording(truth, use_cache=use_cache), cfg,
                                settings["max_offset"], "recheck")
    from ..ingest.camera import read_camera, read_detections, read_survey
    from . import targets

    camera = read_camera(files["camera"])
    survey = read_survey(files["survey"])
    det = read_detections(recording, survey, camera)
    if settings["poses"]:
        if poses is None:
            raise InputError(f"{where}: the baseline's camera was moving (poses per frame); "
                             "give the new session's poses with --poses POSES")
        from ..ingest import read_recording

        camera = targets.posed_camera(camera, read_recording(poses, use_cache=use_cache), det)
    return targets.analyse(camera, survey, det, settings["ground"], settings["gate"],
                           settings["seed"], "recheck")


def rerun(job: str, base: dict, recording: str, truth: str | None, where: str,
          use_cache: bool = True, files: dict | None = None, poses: str | None = None
          ) -> dict:
    """The new recording's block: :func:`run_job` with the baseline's settings and side
    files (``files`` overrides them by key)."""
    files = files or {}
    needed = {"motion": ["map"], "odometry": ["config"], "targets": ["camera", "survey"]}
    paths = {k: side_file(base, k, where, files.get(k)) for k in needed.get(job, [])}
    return run_job(job, settings_of(base), paths, recording, truth, poses, where,
                   use_cache).sections


def read_limits(path: str | None) -> dict | None:
    """Engineering limits: ``limits: {channel: {parameter: {max: x, min: y}}}`` (SI)."""
    if path is None:
        return None
    doc = read_yaml(Path(path), "limits file")
    lim = doc.get("limits") if isinstance(doc, dict) else None
    if not isinstance(lim, dict):
        raise InputError(f"{path}: a limits file has 'limits: {{channel: {{parameter: "
                         "{max: value}}}}' (SI units)")
    for ch, params in lim.items():
        if not isinstance(params, dict):
            raise InputError(f"{path}: limits of {ch!r} must map parameter names to "
                             "{max: ..., min: ...}")
        for name, bounds in params.items():
            if not isinstance(bounds, dict) or not set(bounds) <= {"max", "min"} or not all(
                    isinstance(v, (int, float)) and not isinstance(v, bool)
                    for v in bounds.values()):
                raise InputError(f"{path}: limit {ch}.{name} must be {{max: number}} and/or "
                                 "{min: number}")
    return lim


def parse_gate(text: str | None):
    """``--verdict-on``: None (every parameter), ``decidable``, or a set of
    ``channel.name``."""
    if text is None or text == "all":
        return None
    if text == "decidable":
        return "decidable"
    names = {t.strip() for t in text.split(",") if t.strip()}
    if not names or not all("." in n for n in names):
        raise InputError(f"--verdict-on {text}: give all, decidable, or channel.parameter "
                         "names separated by commas, e.g. gyro_x.white_noise")
    return names


def recheck(baseline: str, recording: str, truth: str | None = None,
            limits: str | None = None, tolerance: float = compare.DEFAULT_TOLERANCE,
            use_cache: bool = True, command: str = "", alpha: float = compare.ALPHA,
            *, files: dict | None = None, poses: str | None = None,
            accept_edited: bool = False, verdict_on: str | None = None,
            at: list | None = None) -> RecheckResult:
    """Run the baseline's job on a new recording and compare every parameter.

    Parameters
    ----------
    baseline, recording, truth, limits : str
        Paths; ``truth`` for motion and odometry baselines.
    tolerance : float
        Ratio (in σ) a parameter must be able to reveal to be called consistent.
    alpha : float
        Family-wise false-alarm rate (Holm).
    files : dict, optional
        Overrides of the baseline's side files: ``map``, ``config``, ``camera``, ``survey``.
    poses : str, optional
        The new session's platform poses (a moving-camera baseline).
    accept_edited : bool
        Accept a baseline whose checksum fails (recorded in the re-check's block).
    verdict_on : str, optional
        ``all`` (default), ``decidable``, or ``channel.name,...`` (see
        :func:`noisecal.fit.compare.overall`).
    at : list of float, optional
        Covariate values (SI) at which a variance law's σ is compared.
    """
    if not tolerance > 1:
        raise InputError(f"--tolerance {tolerance}: give a ratio above 1, e.g. 1.25")
    if not 0 < alpha < 0.5:
        raise InputError(f"--alpha {alpha}: give a false-alarm rate between 0 and 0.5, "
                         "e.g. 0.01")
    gate = parse_gate(verdict_on)
    unknown = set(files or {}) - set(SIDE_OPTIONS)
    if unknown:
        raise InputError(f"files: unknown side file(s) {', '.join(sorted(unknown))}; "
                         f"the keys are {', '.join(SIDE_OPTIONS)}")
    base, state = load_baseline(baseline, accept_edited)
    job = JOBS[base["layout"]]
    if at and job != "motion":
        raise InputError(f"--at: only a motion baseline has a variance law; {baseline} is "
                         f"a {job} block")
    lim = read_limits(limits)
    new = rerun(job, base, recording, truth, baseline, use_cache, files, poses)
    try:
        rows = comparison_rows(base, new, at, edited=state != "ok")
    except (KeyError, TypeError, ValueError, IndexError, ZeroDivisionError,
            AttributeError) as exc:
        # check_baseline reads what a comparison needs; this is the net under it.
        raise _damaged(baseline, f"{exc.__class__.__name__} while comparing") from None
    if isinstance(gate, set):
        names = {f"{r['channel']}.{r['name']}" for r in rows}
        missing = sorted(gate - names)
        if missing:
            raise InputError(f"--verdict-on: {', '.join(missing)} not compared in this "
                             f"re-check; the parameters are {', '.join(sorted(names))}")
    comps, overall, spec = compare.verdicts(rows, tolerance, lim, alpha, gate)
    comps = [_with_unresolved_more(c, gate) for c in comps]
    sections = _sections(job, baseline, recording, base, new, comps, overall, spec, tolerance,
                         command, alpha, state, verdict_on, at)
    return RecheckResult(job, overall, spec, comps, new, sections, base)


def _with_unresolved_more(c, gate):
    """A parameter named in the gate but bounded in both: one more octave of data is
    the least that could resolve it."""
    from dataclasses import replace

    if isinstance(gate, set) and c.gated and c.verdict == "not resolved":
        return replace(c, longer=compare.ONE_OCTAVE)
    return c


# ---------------------------------------------------------------------------------------
# What a script and a person read


def factor_text(f: float) -> str:
    """A more-data factor rounded up, never shown as 1× (the factor is above 1)."""
    if f < 10:
        up = math.ceil(f * 10 - 1e-9) / 10
        return f"{max(up, 1.1):g}×"
    return f"{math.ceil(f - 1e-9):g}×"


def need_text(c, new: dict | None = None) -> str:
    """What more data, of what kind, decides comparison ``c``."""
    f = factor_text(c.longer)
    if c.limited_by == "baseline":
        more = "longer" if c.more_of == "recording" else f"more {c.more_of.split(' (')[0]}"
        return (f"the baseline's own interval is too wide for any new data: "
                f"re-characterise and re-check, both {f} {more} (or a larger --tolerance)")
    if c.verdict == "not resolved":
        return f"bounded in both: record {f} longer (one more octave of τ) to resolve it"
    if c.more_of == "recording":
        dur = ((new or {}).get("recording") or {}).get("duration_s")
        length = f", ≥ {_duration(dur * c.longer)}" if dur else ""
        return f"record {f} longer{length}"
    return f"{f} more {c.more_of.split(' (')[0]}"


def _duration(s: float) -> str:
    return (f"{s:.3g} s" if s < 120 else f"{s / 60:.3g} min" if s < 7200
            else f"{s / 3600:.3g} h")


def _sections(job, baseline, recording, base, new, comps, overall, spec, tolerance, command,
              alpha, state="ok", verdict_on=None, at=None):
    num = yaml_block.num
    params: dict = {}
    for c in comps:
        params.setdefault(c.channel, {})[c.name] = {
            "verdict": c.verdict, "baseline": num(c.baseline), "new": num(c.new),
            "baseline_upper_bound": num(c.baseline_bound), "new_upper_bound": num(c.new_bound),
            "ratio": num(c.ratio), "test": c.test, "p_value": num(c.p_value),
            "p_holm": num(c.p_adjusted), "unit": c.unit, "gated": c.gated,
            **({"more_data_factor": num(c.longer), "more_of": c.more_of} if c.longer else {}),
            **({"within_spec": c.within_spec} if c.within_spec is not None else {}),
        }
    integrity = {"ok": "checksum matches",
                 "missing": f"no checksum; accepted with {ACCEPT}",
                 "mismatch": f"checksum fails (edited); accepted with {ACCEPT}: stated "
                             "values and intervals compared"}[state]
    out = {
        "layout": LAYOUT,
        "provenance": {"tool": f"noisecal {__version__}", "job": f"recheck ({job})",
                       "command": command,
                       "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                       "baseline": baseline,
                       "baseline_checksum": base.get(yaml_block.CHECKSUM),
                       "baseline_integrity": integrity,
                       "baseline_input": base.get("provenance", {}).get("input"),
                       "new_input": new.get("provenance", {}).get("input"),
                       "recording": recording,
                       "settings": settings_of(base)},
        "verdict": overall,
        "exit_status": EXIT[overall],
        "method": {"multiple_comparisons": "Holm", "alpha": alpha,
                   "tolerance_ratio": tolerance,
                   "verdict_on": verdict_on or "all",
                   **({"law_sigma_at": [float(x) for x in at]} if at else {}),
                   "inconclusive": "not significant, and a change of the tolerance ratio "
                                   "would not have been seen at 80 % power"},
        "parameters": params,
        "undecided": [{"parameter": f"{c.channel}.{c.name}", "more_data_factor": num(c.longer),
                       "more_of": c.more_of, "limited_by": c.limited_by,
                       "needs": need_text(c, new)}
                      for c in comps if c.gated and c.longer and
                      c.verdict in ("inconclusive", "not resolved")],
    }
    if spec is not None:
        out["within_spec"] = spec
    return out


def _g(x) -> str:
    return f"{x:.4g}" if isinstance(x, float) else f"{x}"


def summary(res: RecheckResult) -> str:
    """Plain-language summary for a technician or a CI log."""
    lines = [f"re-check ({res.job}): {res.verdict.upper()}"
             + ("" if res.within_spec is None else
                f"; {'within' if res.within_spec else 'OUT OF'} spec")]
    for c in res.comparisons:
        if c.baseline is not None and c.new is not None:
            what = f"{c.baseline:.4g} → {c.new:.4g} {c.unit}"
        else:
            what = (f"bound {c.baseline_bound:.3g}" if c.baseline is None and c.baseline_bound
                    else _g(c.baseline)) + " → " + (
                f"bound {c.new_bound:.3g}" if c.new is None and c.new_bound else _g(c.new))
        extra = (f" ({need_text(c, res.new_sections)} to decide)"
                 if c.longer and c.verdict == "inconclusive" else "")
        p = ("" if c.p_adjusted is None else f", p = {c.p_adjusted:.2g}"
             if c.p_adjusted > 1e-16 else ", p < 1e-16")
        gated = "" if c.gated else " [not gated]"
        lines.append(f"  {c.channel}.{c.name}: {c.verdict}{p}; {what}{extra}{gated}")
    undecided = res.undecided
    if undecided and res.verdict != "changed":
        lines.append("left undecided:")
        lines += [f"  {c.channel}.{c.name}: {need_text(c, res.new_sections)}"
                  for c in undecided]
    return "\n".join(lines)


def run_recheck(baseline: str, recording: str, out: str | None = None,
                truth: str | None = None, limits: str | None = None,
                tolerance: float = compare.DEFAULT_TOLERANCE, overwrite: bool = False,
                use_cache: bool = True, command: str = "", alpha: float = compare.ALPHA,
                **options) -> RecheckResult:
    """Re-check and write the YAML block (and for a static baseline the Allan plot).

    ``options`` are :func:`recheck`'s keyword-only ones; ``record`` (a
    :class:`noisecal.jobs.history.Recorder`) stores the run together with its files.
    ``out`` ``-`` writes the block to standard output (and no plot). Nothing is
    written when the re-check fails.
    """
    record = options.pop("record", None)
    report = options.pop("report", None)
    files = options.get("files") or {}
    inputs = ([baseline, recording] + ([truth] if truth else []) + ([limits] if limits else [])
              + [p for p in files.values() if p] + ([options["poses"]]
                                                     if options.get("poses") else []))
    out_path = plot_path = None
    if out:
        # Files the baseline's provenance names are inputs too (its side files, the
        # recordings it was made from), wherever the baseline's folder puts them.
        base = read_yaml(Path(baseline), "baseline")
        prov = base.get("provenance") if isinstance(base, dict) else None
        folder = Path(baseline).resolve().parent
        for key, value in (prov.items() if isinstance(prov, dict) else ()):
            stored = value.get("path") if isinstance(value, dict) else value
            if isinstance(stored, str) and stored and not stored.startswith("("):
                inputs += [folder / stored, folder / Path(stored).name, Path(stored)]
        out_path, plot_path = output_paths(out, None, inputs, overwrite,
                                           getattr(record, "paths", ()))
        if out_path == STDOUT:
            plot_path = None
    from .static import _report_path

    report_path = _report_path(report, inputs, overwrite, record, out_path, plot_path)
    res = recheck(baseline, recording, truth, limits, tolerance, use_cache, command, alpha,
                  **options)
    with Staged(overwrite) as staged:
        if plot_path is not None and res.job == "static":
            from ..export.plot import recheck_figure

            recheck_figure(read_yaml(Path(baseline), "baseline"), res.new_sections,
                           staged.path(plot_path))
        if out_path is not None:
            staged.text(out_path, yaml_block.render(
                res.sections, f"noisecal re-check ({LAYOUT})",
                {"verdict": "consistent | changed | inconclusive (exit status 0 | 1 | 3)",
                 "undecided": "Gated parameters this recording could not decide, and what "
                 "more data each needs."}))
        if report_path is not None:
            from ..export.html import render_job

            staged.text(report_path, render_job(res))
        staged.commit(record(res) if record else None)
    return res
