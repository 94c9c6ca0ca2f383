"""Re-check after a hardware swap: the baseline's job on a new recording, compared.

Pipeline: read the baseline YAML block → run its job (static, motion,
odometry or targets, from its provenance) on the new recording with the same
settings → the parameters of both → :mod:`noisecal.fit.compare` (F-tests and
interval tests, Holm-corrected, decidability) → YAML block, side-by-side Allan
plot for a static baseline, a summary, and an exit status for scripts:
0 consistent, 1 changed, 3 inconclusive, 2 error.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import InputError
from ..export import yaml_block
from ..export.atomic import output_paths, write_text
from ..fit import compare
from ..fit.simulate import TERM_NAMES
from ..ingest.yaml_file import read_yaml

LAYOUT = "noisecal.recheck/1"
EXIT = {"consistent": 0, "changed": 1, "inconclusive": 3}
JOBS = {"noisecal.static/1": "static", "noisecal.motion/1": "motion",
        "noisecal.odometry/1": "odometry", "noisecal.targets/1": "targets"}


@dataclass(frozen=True)
class RecheckResult:
    """Verdicts of a re-check.

    Attributes
    ----------
    job : str
    verdict : str
    within_spec : bool or None
    comparisons : list of Comparison
    new_sections : dict
        The new recording's own YAML content.
    sections : dict
        The re-check's YAML content.
    """

    job: str
    verdict: str
    within_spec: bool | None
    comparisons: list
    new_sections: dict
    sections: dict

    @property
    def exit_status(self) -> int:
        return EXIT[self.verdict]


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


LINEAR = {"linear": True}
"""Signed quantities or fractions: compared by the difference, not the ratio."""
CAMERA_SIGMA = {"more_of": "targets (the spread between targets limits the systematic part)"}


def estimates_of(sections: dict) -> list:
    """Every fitted number of a job's block: (channel, name, Estimate-like dict, how).

    ``how`` says how a re-check compares it: ``linear`` (by the difference),
    ``power`` 2 (a variance coefficient: the tolerance, a ratio of σ, applies to
    its square root), ``more_of`` (what more data means). The history stores the
    same numbers.
    """
    layout = sections.get("layout")
    out = []
    if layout == "noisecal.static/1":
        for ch, entry in sections["channels"].items():
            for term in TERM_NAMES:
                out.append((ch, term, entry[term], {}))
    elif layout == "noisecal.motion/1":
        m = sections["measurement"]
        for ch in m["sigma"]:
            out.append((ch, "sigma", m["sigma"][ch], {}))
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


def _f_dof(base: dict, new: dict, ch: str, name: str, be: dict, ne: dict):
    """(var_base, dof_base, var_new, dof_new) where an F-test applies, else None.

    Static: white noise at τ0 (where it dominates a rate sensor's curve), every
    other resolved term at the Allan point nearest the geometric middle of the τ
    range that constrains it, through the points' EDF. Motion: each inlier σ
    with the effective sample sizes.
    """
    if "value" not in be or "value" not in ne:
        return None
    if base["layout"] == "noisecal.static/1":
        b, n = base["channels"][ch], new["channels"][ch]
        at_tau0 = name == "white_noise" or not be.get("tau_s")
        # White noise is tested at the first tau the fit used: below it a sensor's
        # low-pass, not its white noise, sets the curve.
        first = max(float(x.get("bandwidth", {}).get("fitted_from_tau_s") or 0.0)
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


def comparison_rows(base: dict, new: dict) -> list:
    """One row per parameter present in both blocks, tested as :func:`estimates_of`
    and :func:`_f_dof` say."""
    found = {(ch, name): e for ch, name, e, _ in estimates_of(new)}
    length_ratio = None
    if base["layout"] == "noisecal.static/1":
        # A term resolved before and only bounded now: as long as the baseline decides it.
        length_ratio = max(1.0, float(base["recording"]["duration_s"]) /
                           float(new["recording"]["duration_s"]))
    rows = []
    for ch, name, be, how in estimates_of(base):
        ne = found.get((ch, name))
        if ne is None:
            continue
        row = compare.compare_estimates(ch, name, be, ne, _f_dof(base, new, ch, name, be, ne),
                                        linear=how.get("linear", False))
        row.update({k: v for k, v in how.items() if k != "linear"})
        if length_ratio is not None:
            row["length_ratio"] = length_ratio
        rows.append(row)
    return rows


def _provenance(base: dict, key: str, where: str):
    value = base.get("provenance", {}).get(key)
    if value is None:
        raise InputError(f"{where}: the baseline's provenance has no {key!r}")
    return value


def rerun(job: str, base: dict, recording: str, truth: str | None, where: str,
          use_cache: bool = True) -> dict:
    """The baseline's job on the new recording with the baseline's settings."""
    if job == "static":
        from ..ingest import read_recording
        from .static import characterise

        prov = base["provenance"]
        rec = read_recording(recording, use_cache=use_cache)
        channels = [c for c in base["channels"] if c in rec.channels]
        if not channels:
            raise InputError(f"{recording}: none of the baseline's channels "
                             f"({', '.join(base['channels'])}) is in the new recording")
        return characterise(rec, channels, base["filter"]["dt"],
                            int(prov.get("bootstrap_replicates", 200)), int(prov.get("seed", 1)),
                            True, "recheck").sections
    if truth is None and job in ("motion", "odometry"):
        raise InputError(f"{where}: a {job} baseline needs the new drive's truth: --truth TRUTH")
    if job == "motion":
        from ..ingest import read_recording
        from ..ingest.mapping import read_map, same_names
        from . import motion

        sensor, tr = read_recording(recording, use_cache=use_cache), read_recording(
            truth, use_cache=use_cache)
        mp = _provenance(base, "map", where)
        mapping = (same_names(sensor.channels, tr.channels) if mp == "(same names)"
                   else read_map(mp))
        return motion.analyse(sensor, tr, mapping,
                              base["measurement"]["gate"]["probability"],
                              base["alignment"]["max_offset_s"],
                              int(base["provenance"].get("seed", 1)), "recheck").sections
    if job == "odometry":
        from ..ingest import read_recording
        from ..ingest.mapping import read_odometry_config
        from . import odometry

        cfg = read_odometry_config(_provenance(base, "config", where))
        return odometry.analyse(read_recording(recording, use_cache=use_cache),
                                read_recording(truth, use_cache=use_cache), cfg,
                                base["alignment"]["max_offset_s"], "recheck").sections
    from ..ingest.camera import read_camera, read_detections, read_survey
    from . import targets

    camera = read_camera(_provenance(base, "camera", where))
    survey = read_survey(_provenance(base, "survey", where))
    det = read_detections(recording, survey, camera)
    return targets.analyse(camera, survey, det, "ray", base["camera"]["gate"]["probability"],
                           int(base["provenance"].get("seed", 1)), "recheck").sections


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


def recheck(baseline: str, recording: str, truth: str | None = None,
            limits: str | None = None, tolerance: float = compare.DEFAULT_TOLERANCE,
            use_cache: bool = True, command: str = "", alpha: float = compare.ALPHA
            ) -> RecheckResult:
    """Run the baseline's job on a new recording and compare every parameter."""
    base = read_yaml(Path(baseline), "baseline")
    if not isinstance(base, dict) or base.get("layout") not in JOBS:
        raise InputError(f"{baseline}: not a noisecal block (its 'layout' should be one of "
                         f"{', '.join(JOBS)})")
    if not tolerance > 1:
        raise InputError(f"--tolerance {tolerance}: give a ratio above 1, e.g. 1.25")
    if not 0 < alpha < 0.5:
        raise InputError(f"--alpha {alpha}: give a false-alarm rate between 0 and 0.5, "
                         "e.g. 0.01")
    job = JOBS[base["layout"]]
    lim = read_limits(limits)
    new = rerun(job, base, recording, truth, baseline, use_cache)
    rows = comparison_rows(base, new)
    comps, overall, spec = compare.verdicts(rows, tolerance, lim, alpha)
    sections = _sections(job, baseline, recording, base, new, comps, overall, spec, tolerance,
                         command, alpha)
    return RecheckResult(job, overall, spec, comps, new, sections)


def _sections(job, baseline, recording, base, new, comps, overall, spec, tolerance, command,
              alpha):
    num = yaml_block.num
    params: dict = {}
    for c in comps:
        params.setdefault(c.channel, {})[c.name] = {
            "verdict": c.verdict, "baseline": num(c.baseline), "new": num(c.new),
            "baseline_upper_bound": num(c.baseline_bound), "new_upper_bound": num(c.new_bound),
            "ratio": num(c.ratio), "test": c.test, "p_value": num(c.p_value),
            "p_holm": num(c.p_adjusted), "unit": c.unit,
            **({"more_data_factor": num(c.longer), "more_of": c.more_of} if c.longer else {}),
            **({"within_spec": c.within_spec} if c.within_spec is not None else {}),
        }
    out = {
        "layout": LAYOUT,
        "provenance": {"tool": f"noisecal {__version__}", "job": f"recheck ({job})",
                       "command": command,
                       "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                       "baseline": baseline,
                       "baseline_input": base.get("provenance", {}).get("input"),
                       "new_input": new.get("provenance", {}).get("input"),
                       "recording": recording},
        "verdict": overall,
        "exit_status": EXIT[overall],
        "method": {"multiple_comparisons": "Holm", "alpha": alpha,
                   "tolerance_ratio": tolerance,
                   "inconclusive": "not significant, and a change of the tolerance ratio "
                                   "would not have been seen at 80 % power"},
        "parameters": params,
    }
    if spec is not None:
        out["within_spec"] = spec
    return out


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
                    else f"{c.baseline}") + " → " + (
                f"bound {c.new_bound:.3g}" if c.new is None and c.new_bound else f"{c.new}")
        extra = ((f" (record {c.longer:.2g}× longer to decide)" if c.more_of == "recording"
                  else f" ({c.longer:.2g}× more {c.more_of} to decide)") if c.longer else "")
        p = ("" if c.p_adjusted is None else f", p = {c.p_adjusted:.2g}"
             if c.p_adjusted > 1e-16 else ", p < 1e-16")
        lines.append(f"  {c.channel}.{c.name}: {c.verdict}{p}; {what}{extra}")
    return "\n".join(lines)


def run_recheck(baseline: str, recording: str, out: str | None = None,
                truth: str | None = None, limits: str | None = None,
                tolerance: float = compare.DEFAULT_TOLERANCE, overwrite: bool = False,
                use_cache: bool = True, command: str = "", alpha: float = compare.ALPHA
                ) -> RecheckResult:
    """Re-check and write the YAML block (and for a static baseline the Allan plot)."""
    inputs = [baseline, recording] + ([truth] if truth else []) + ([limits] if limits else [])
    out_path = plot_path = None
    if out:
        out_path, plot_path = output_paths(out, None, inputs, overwrite)
    res = recheck(baseline, recording, truth, limits, tolerance, use_cache, command, alpha)
    if out_path:
        if res.job == "static":
            from ..export.plot import recheck_figure

            recheck_figure(read_yaml(Path(baseline), "baseline"), res.new_sections, plot_path)
        write_text(out_path, yaml_block.render(res.sections, f"noisecal re-check ({LAYOUT})",
                                               {"verdict": "consistent | changed | "
                                                "inconclusive (exit status 0 | 1 | 3)"}))
    return res
