"""Baseline against new: a verdict per parameter and overall, for a re-check.

Each parameter of a job's YAML block is compared with a test where one
exists — an F-test of two variances with their degrees of freedom (white
noise at τ0 and each term at the τ that constrains it, through the Allan
points' EDF; inlier variances of the motion job through their effective
sample sizes) — and otherwise a z-test on the log scale from the two 95 %
intervals. The p-values are corrected for multiple comparisons by Holm's
step-down method. A parameter whose difference is not significant is
``consistent`` only if the data could have seen a change of ``tolerance``
(80 % power); otherwise it is ``inconclusive``, with how many times more data
(and of what kind: a longer new recording, or a longer baseline when the
baseline's own interval is too wide for any new recording to help) would
decide it. The overall verdict can be gated on chosen parameters, or on those
this recording can decide (:func:`overall`).

References
----------
S. Holm, "A simple sequentially rejective multiple test procedure",
Scandinavian Journal of Statistics 6(2), 1979.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

ALPHA = 0.01
"""Family-wise false-alarm rate of a re-check (Holm): a 'changed' verdict sends a unit
back for characterisation, so false alarms are kept rare."""
POWER_Z = stats.norm.ppf(0.8)
DEFAULT_TOLERANCE = 1.25
"""Ratio (in standard deviation) a re-check must be able to see to call a parameter consistent."""


@dataclass(frozen=True)
class Comparison:
    """One parameter, baseline against new.

    Attributes
    ----------
    channel, name, unit : str
    baseline, new : float or None
        Values (None where only a bound).
    baseline_bound, new_bound : float or None
        Upper bounds where the term was not resolved.
    ratio : float or None
        new / baseline.
    test : str
    p_value, p_adjusted : float or None
    se_log : float or None
        Standard error of log(ratio).
    verdict : str
        ``consistent``, ``better``, ``worse`` or ``inconclusive`` (a resolved
        parameter the new data cannot decide); ``not resolved`` for a term only
        bounded in both (it does not enter the overall verdict).
    longer : float or None
        For ``inconclusive``: how many times more data would decide.
    within_spec : bool or None
    more_of : str
        What "more data" means for this parameter (``recording`` length, or
        ``targets`` where the spread between targets limits it).
    gated : bool
    limited_by : str
    """

    channel: str
    name: str
    unit: str
    baseline: float | None
    new: float | None
    baseline_bound: float | None
    new_bound: float | None
    ratio: float | None
    test: str
    p_value: float | None
    p_adjusted: float | None
    se_log: float | None
    verdict: str
    longer: float | None = None
    within_spec: bool | None = None
    more_of: str = "recording"
    gated: bool = True
    limited_by: str = "new"
    """``baseline`` where the baseline's own interval is too wide for any new data to
    decide: re-characterise, and re-check, both with ``longer`` times more data."""
    """Whether the parameter counts in the overall verdict (see :func:`overall`)."""


def f_test(var_a: float, dof_a: float, var_b: float, dof_b: float) -> float:
    """Two-sided p-value of H0: equal variances, F = var_b / var_a on (dof_b, dof_a)."""
    f = var_b / var_a
    tail = stats.f.sf(f, dof_b, dof_a) if f > 1 else stats.f.cdf(f, dof_b, dof_a)
    return float(min(1.0, 2 * tail))


def holm(p: list) -> list:
    """Holm-adjusted p-values (None entries left as None)."""
    idx = [i for i, v in enumerate(p) if v is not None]
    order = sorted(idx, key=lambda i: p[i])
    out = list(p)
    running = 0.0
    m = len(order)
    for rank, i in enumerate(order):
        running = max(running, min(1.0, (m - rank) * p[i]))
        out[i] = running
    return out


def _se_from_ci(e: dict) -> float | None:
    lo, hi = e["ci95"]
    if e["value"] is None or lo is None or hi is None or lo <= 0 or e["value"] <= 0:
        return None
    return (np.log(hi) - np.log(lo)) / (2 * 1.959964)


def compare_estimates(channel: str, name: str, base: dict, new: dict,
                      f_dof: tuple | None = None, higher_is_worse: bool = True,
                      linear: bool = False) -> dict:
    """Raw comparison of two ``{value, ci95, unit}`` / ``{upper_bound, unit}`` dicts.

    Parameters
    ----------
    f_dof : (var_base, dof_base, var_new, dof_new), optional
        Variances behind the parameter and their degrees of freedom: an F-test.
    higher_is_worse : bool
        Whether a larger value (a larger magnitude, with ``linear``) is worse.
    linear : bool
        A quantity that may be zero or negative (bias, offset, a fraction): a
        z-test of the difference, the standard errors from the intervals.
    """
    unit = base.get("unit", new.get("unit", ""))
    bv, nv = base.get("value"), new.get("value")
    bb, nb = base.get("upper_bound"), new.get("upper_bound")
    row = {"channel": channel, "name": name, "unit": unit, "baseline": bv, "new": nv,
           "baseline_bound": bb, "new_bound": nb, "ratio": None, "test": "", "p_value": None,
           "se_log": None, "se_base": None, "se_new": None,
           "higher_is_worse": higher_is_worse}
    if bv is not None:
        row["se_base"] = _se_from_ci(base)  # for how much more data a verdict needs
    if bv is None and bb is not None and nv is not None and not linear:
        # Bounded before, resolved now: is the new value above the baseline's 95 % upper
        # bound by more than its own interval allows? One-sided z from the new interval,
        # in the Holm family like any other test (a bare "above the bound" had no level).
        lo, hi = new["ci95"]
        se = (hi - lo) / (2 * 1.959964) if lo is not None and hi is not None else 0.0
        row["test"] = "new value against the baseline's upper bound (one-sided z)"
        row["p_value"] = (float(min(1.0, 2 * stats.norm.sf((nv - bb) / se))) if se > 0
                          else float(nv <= bb))
        row["against_bound"] = True
        return row
    if bv is None or nv is None:
        row["test"] = "not resolved in both: bounds compared"
        return row
    row["ratio"] = nv / bv if bv else None
    if linear:
        half = [(e["ci95"][1] - e["ci95"][0]) / (2 * 1.959964) for e in (base, new)]
        se = float(np.hypot(*half))
        row["test"] = "z-test of the difference from the two 95 % intervals"
        row["p_value"] = float(2 * stats.norm.sf(abs(nv - bv) / se)) if se > 0 else 1.0
        # For a signed quantity "larger" means larger in magnitude.
        row["ratio"] = abs(nv) / abs(bv) if bv else None
        return row
    if f_dof is not None:
        vb, db, vn, dn = f_dof
        row["test"] = f"F-test of variances ({dn:.4g}, {db:.4g} dof)"
        row["p_value"] = f_test(vb, db, vn, dn)
        # Of log σ; the two shares kept apart to say which recording limits a verdict.
        row["se_base"], row["se_new"] = float(0.5 * np.sqrt(2 / db)), float(0.5 * np.sqrt(2 / dn))
        row["se_log"] = float(np.hypot(row["se_base"], row["se_new"]))
        return row
    sb, sn = _se_from_ci(base), _se_from_ci(new)
    if sb is None or sn is None or not bv > 0 or not nv > 0:
        lo_b, hi_b = base["ci95"]
        lo_n, hi_n = new["ci95"]
        row["test"] = "interval overlap"
        overlap = not (lo_n > hi_b or hi_n < lo_b)
        row["p_value"] = 1.0 if overlap else 0.0
        return row
    se = float(np.hypot(sb, sn))
    z = (np.log(nv) - np.log(bv)) / se
    row["test"] = "z-test of log ratio from the two 95 % intervals"
    row["p_value"] = float(2 * stats.norm.sf(abs(z)))
    row["se_log"], row["se_base"], row["se_new"] = se, sb, sn
    return row


def law_sigma(a: dict, b: dict, x: float, x_unit: str = "") -> dict:
    """σ(x) = √(a + b·x²) of a variance law as an estimate dict, for a comparison at a
    stated covariate value.

    The interval is Wald on σ² from the half-widths of a's and b's intervals taken
    as independent (an intercept only bounded: anywhere in [0, bound]). The fit's a
    and b are negatively correlated (both columns share
    the intercept's information), so this overstates the spread: a conservative test
    (fewer false alarms, less power). A coefficient only bounded gives a bound.
    """
    unit = a.get("unit", "").replace("(", "").split(")^2")[0]
    if "value" not in b or ("value" not in a and a.get("upper_bound") is None):
        ub = [e.get("value", e.get("upper_bound")) for e in (a, b)]
        if None in ub:
            return {"unit": unit}
        return {"upper_bound": float(np.sqrt(ub[0] + ub[1] * x * x)), "unit": unit}
    if "value" in a:
        a_mid, a_half = a["value"], (a["ci95"][1] - a["ci95"][0]) / 2
    else:
        # An intercept only bounded: anywhere in [0, bound], its middle ± half of it.
        a_mid = a_half = a["upper_bound"] / 2
    var = a_mid + b["value"] * x * x
    half = [a_half, (b["ci95"][1] - b["ci95"][0]) / 2]
    spread = float(np.hypot(half[0], half[1] * x * x))
    lo, hi = max(var - spread, 0.0), var + spread
    return {"value": float(np.sqrt(var)), "ci95": [float(np.sqrt(lo)), float(np.sqrt(hi))],
            "unit": unit, "method": f"law at {x:g} {x_unit}".rstrip()}


ONE_OCTAVE = 2.0
"""More data asked for when no interval says how much: one more octave of τ (or twice
the targets), the least that adds information where a term is only bounded."""


def _more_data(r: dict, need_se: float):
    """(factor, limited_by) of more data that would decide row ``r`` at the tolerance.

    ``need_se`` is the largest standard error of the log ratio that the tolerance
    allows at 80 % power. The baseline's share of the error does not shrink with a
    longer new recording: where it alone exceeds ``need_se`` the baseline must be
    re-characterised (``baseline``: both runs with ``factor`` times more data).
    The factor is always above 1.
    """
    kind = "new"
    sb, sn = r.get("se_base"), r.get("se_new")
    if sb is not None and sb >= need_se:
        share = sb ** 2 + (sn if sn is not None else sb) ** 2
        return float(share / need_se ** 2), "baseline"
    if r["new"] is None:
        # Resolved before, only bounded now: at least as long as the baseline that
        # resolved it, and never less than one more octave.
        lr = r.get("length_ratio")
        f = lr if lr is not None and lr > 1 else ONE_OCTAVE
        if sb is not None:
            f = max(f, sb ** 2 * (lr or 1.0) / (need_se ** 2 - sb ** 2))
        return float(f), kind
    if sb is not None and sn is not None:
        return float(max(sn ** 2 / (need_se ** 2 - sb ** 2), 1.0 + 1e-9)), kind
    return float((r["se_log"] / need_se) ** 2), kind


def overall(comps: list, gate=None) -> str:
    """Overall verdict of the gated comparisons.

    Parameters
    ----------
    comps : list of Comparison
    gate : None, ``"decidable"`` or set of ``"channel.name"``
        None: every parameter ('not resolved' ones stay out); ``decidable``: those
        this recording could decide (inconclusive ones are reported, not counted,
        and nothing decided at all is inconclusive); a set: only those named, where
        one that cannot be decided, bounded in both included, is inconclusive.
    """
    if isinstance(gate, (set, frozenset)):
        counted = [c for c in comps if c.gated]
        if any(c.verdict in ("better", "worse") for c in counted):
            return "changed"
        if any(c.verdict in ("inconclusive", "not resolved") for c in counted):
            return "inconclusive"
        return "consistent"
    counted = [c for c in comps if c.gated]
    if any(c.verdict in ("better", "worse") for c in counted):
        return "changed"
    if gate == "decidable":
        decided = [c for c in counted if c.verdict == "consistent"]
        return "consistent" if decided else "inconclusive"
    if any(c.verdict == "inconclusive" for c in counted):
        return "inconclusive"
    return "consistent"


def verdicts(rows: list, tolerance: float = DEFAULT_TOLERANCE, limits: dict | None = None,
             alpha: float = ALPHA, gate=None):
    """Holm-correct the rows' p-values and give each its verdict.

    The Holm family is every tested parameter, whatever the gate: the gate chooses
    what the overall verdict rests on, not how many tests were made.

    Returns
    -------
    list of Comparison, overall verdict (``consistent``, ``changed`` or
    ``inconclusive``), overall within-spec (None without limits)
    """
    adjusted = holm([r["p_value"] for r in rows])
    out = []
    for r, p_adj in zip(rows, adjusted):
        longer = None
        if r.get("against_bound"):
            # A term the baseline bounded, now resolved: worse only when significantly
            # above the bound; otherwise there is still no baseline value to compare with.
            verdict = ("worse" if p_adj < alpha and r["new"] > r["baseline_bound"]
                       else "not resolved")
        elif r["p_value"] is None:
            if r["baseline"] is not None and r["new"] is None:
                # Resolved before, only bounded now: the new recording cannot tell; a
                # recording as long as the baseline's resolved it.
                verdict = "inconclusive"
                longer, r = _bounded_more(r, tolerance, alpha, len(rows))
            else:
                verdict = "not resolved"  # in neither recording: nothing to compare
        elif p_adj < alpha:
            up = r["ratio"] is not None and r["ratio"] > 1
            verdict = "worse" if up == r["higher_is_worse"] else "better"
        else:
            se = r["se_log"]
            if se is None:  # a signed quantity or an overlap test: nothing to scale
                verdict = "consistent"
            else:
                need_se = _need_se(r, tolerance, alpha, len(rows))
                if se <= need_se:
                    verdict = "consistent"
                else:
                    verdict = "inconclusive"
                    longer, limited = _more_data(r, need_se)
                    r = {**r, "limited_by": limited}
        spec = None
        lim = (limits or {}).get(r["channel"], {}).get(r["name"])
        if lim is not None:
            value = r["new"] if r["new"] is not None else r["new_bound"]
            spec = bool(value is not None and ("max" not in lim or value <= lim["max"]) and
                        ("min" not in lim or value >= lim["min"]))
        out.append(Comparison(r["channel"], r["name"], r["unit"], r["baseline"], r["new"],
                              r["baseline_bound"], r["new_bound"], r["ratio"], r["test"],
                              r["p_value"], p_adj, r["se_log"], verdict, longer, spec,
                              r.get("more_of", "recording"),
                              _gated(r, gate), r.get("limited_by", "new")))
    specs = [c.within_spec for c in out if c.within_spec is not None]
    return out, overall(out, gate), (all(specs) if specs else None)


def _gated(r: dict, gate) -> bool:
    if isinstance(gate, (set, frozenset)):
        return f"{r['channel']}.{r['name']}" in gate
    return True


def _need_se(r: dict, tolerance: float, alpha: float, m: int) -> float:
    """Largest standard error of the log ratio that sees a change of ``tolerance`` at
    80 % power after Holm's first step. The tolerance is a ratio of standard
    deviations: a variance-like parameter (power 2: α, a law's coefficients) moves
    twice as far in log."""
    z_a = stats.norm.ppf(1 - alpha / (2 * max(1, m)))
    return float(np.log(tolerance) * r.get("power", 1) / (z_a + POWER_Z))


def _bounded_more(r: dict, tolerance: float, alpha: float, m: int):
    """(factor, row with its kind) for a term resolved before and only bounded now."""
    f, kind = _more_data({**r, "se_new": None}, _need_se(r, tolerance, alpha, m))
    return f, {**r, "limited_by": kind}
