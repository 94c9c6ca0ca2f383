"""Your filter's own Q and R: a model file → discrete Phi, Q, R with intervals.

Pipeline: read and check the model file (noise values from noisecal blocks or
numbers) → Gauss–Markov entries into F → Van Loan per source (or, for a Python
model, the four Jacobians by complex step, checked against finite differences)
→ Monte Carlo over the noise estimates' intervals (seeded) → YAML block.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass

import numpy as np

from .. import __version__
from ..export import yaml_block
from ..export.atomic import STDOUT, Staged, check_target
from ..model.discretize import linearised, monte_carlo
from ..model.spec import FilterModel, read_model
from ..types import Estimate
from .result import JobResult, Parameter, ParameterError, whole

LAYOUT = "noisecal.filter/1"
DEFAULT_DRAWS = 2000

CONVENTION = (
    "Q is the covariance of the process noise accumulated over one step dt (a discrete "
    "variance, state units squared): Q = integral over [0, dt] of e^(F s) G Qc G^T "
    "e^(F^T s) ds (Van Loan 1978), from the continuous noise intensities Qc (E[w(t) w(s)^T] "
    "= Qc delta(t - s), the two-sided spectral density, u^2/Hz = u^2*s; a white-noise coefficient N gives q = N^2, a random walk K gives "
    "q = K^2). For small F*dt, Q is about G Qc G^T * dt: density times dt, never density "
    "divided by dt. R is the variance of one measurement sample (N^2/dt for a sensor "
    "whose sample averages white noise over dt). Give Q and R to a filter stepping at dt.")
CONVENTION_DISCRETE = (
    "Discrete model: Q = sum of g g^T Var(w), with Var(w) = q*dt for a density q (white "
    "noise integrated over the step) or the variance given; a Gauss-Markov state has "
    "Phi = exp(-dt/T) and Var = sigma^2 (1 - exp(-2 dt/T)). R is one sample's variance.")
CONVENTION_PYTHON = (
    "Nonlinear model linearised at the operating point: Phi = df/dx, Q = L Qw L^T with "
    "L = df/dw and Qw = diag(q/dt) (each w the white noise's mean over the step; a "
    "variance source gives its variance), H = dh/dx, R = M diag(sigma^2) M^T with "
    "M = dh/dv. First order in dt: for a stiff model prefer the linear form (Van Loan).")


def _sq(unit: str) -> str:
    if not unit:
        return ""
    return f"{unit}**2" if unit.replace("_", "").isalnum() else f"({unit})**2"


def _prod(a: str, b: str) -> str:
    if a == b:
        return _sq(a)
    if not a or not b:
        return ""
    wrap = (lambda u: u if u.replace("_", "").isalnum() else f"({u})")
    return f"{wrap(a)}*{wrap(b)}"


@dataclass(frozen=True)
class FilterResult(JobResult):
    """The filter's discrete matrices with their intervals.

    Attributes
    ----------
    model : FilterModel
    matrices : dict
        ``Phi``, ``Q``, ``R`` and their ``_low``/``_high`` ends (n × n, m × m);
        ``F`` (continuous form, with Gauss–Markov entries), ``H`` (m × n),
        ``qc`` (s,) continuous densities; ``draws``, ``seed``, ``level``.
    jacobians : dict or None
        Python form: ``F``, ``L``, ``H``, ``M`` (:class:`noisecal.model.jacobian.Jacobian`).
    sections : dict
        The YAML block's content.
    """

    model: FilterModel
    matrices: dict
    jacobians: dict | None
    sections: dict

    def parameters(self) -> list:
        """Q's and R's diagonal entries and each source's density, as Estimates."""
        out = []
        mx, mdl = self.matrices, self.model
        method = (f"Monte Carlo over the noise estimates' intervals ({mx['draws']} draws, "
                  f"seed {mx['seed']})")
        for i, s in enumerate(mdl.states):
            out.append(Parameter(s, "Q", Estimate(float(mx["Q"][i, i]),
                                                  float(mx["Q_low"][i, i]),
                                                  float(mx["Q_high"][i, i]),
                                                  _sq(mdl.units[i]), method), {}))
        for j, mm in enumerate(mdl.measurements):
            out.append(Parameter(mm.name, "R", Estimate(float(mx["R"][j, j]),
                                                        float(mx["R_low"][j, j]),
                                                        float(mx["R_high"][j, j]),
                                                        _sq(mm.unit), method), {}))
        for k, src in enumerate(mdl.sources):
            if np.isfinite(mx["qc"][k]):
                out.append(Parameter(src.name, "density_q", Estimate(
                    float(mx["qc"][k]), float(mx["qc_low"][k]), float(mx["qc_high"][k]),
                    "", method), {}))
        return out

    def _summary(self) -> str:
        return summary(self)

    def _render(self, out=None) -> str:
        return render(self.sections, out)


def discretise(model: FilterModel, draws: int = DEFAULT_DRAWS, seed: int = 1,
               command: str = "") -> FilterResult:
    """The discrete Phi, Q and R of a checked model, with intervals.

    Parameters
    ----------
    model : FilterModel
        From :func:`noisecal.model.spec.read_model`.
    draws : int
        Monte Carlo draws over the noise estimates' intervals (at least 200).
    seed : int
    command : str
        Command line, for the provenance.

    Returns
    -------
    FilterResult
    """
    draws = whole("draws", draws, 200)
    seed = whole("seed", seed, 0)
    jac = None
    if model.form == "python":
        from ..model.jacobian import load_python, model_jacobians

        f, h = load_python(model.python)
        if model.trajectory is not None:
            jac, traj = _along_trajectory(model, f, h)
        else:
            jac = model_jacobians(f, h, model.x0, model.u0, len(model.sources),
                                  len(model.measurements), model.dt, model.python)
            traj = None
        mx = linearised(model, jac, draws, seed)
        mx["trajectory"] = traj
    else:
        mx = monte_carlo(model, draws, seed)
        mx["H"] = model.H
    return FilterResult(model, mx, jac, _sections(model, mx, jac, draws, seed, command))


MAX_TRAJECTORY_ROWS = 5000
"""Rows of a trajectory linearised (evenly thinned beyond)."""


def _along_trajectory(model: FilterModel, f, h):
    """Jacobians along a trajectory recording; the linearisation where trace(Q) peaks.

    Returns
    -------
    jac : dict of str to Jacobian
        At the row of largest trace(Q) (the most noise a single linearisation sees).
    traj : dict
        ``steps``, ``row``, ``x``, ``u``, ``Q_min``, ``Q_max``, ``R_min``, ``R_max``
        (element-wise over the rows, at the noise values' points), ``thinned``.
    """
    from ..errors import InputError
    from ..ingest import read_recording
    from ..model.discretize import _point
    from ..model.jacobian import Jacobian, along

    rec = read_recording(model.trajectory)
    missing = [s for s in model.states if s not in rec.channels]
    if missing:
        raise InputError(f"{model.trajectory}: no column for state(s) {', '.join(missing)}; "
                         "a trajectory names its columns as the model's states (and inputs "
                         "u_0, u_1, ...)")
    X = np.column_stack([np.asarray(rec.channel(s), float) for s in model.states])
    k = 0
    while f"u_{k}" in rec.channels:
        k += 1
    U = (np.column_stack([np.asarray(rec.channel(f"u_{i}"), float) for i in range(k)])
         if k else np.zeros((X.shape[0], 0)))
    step = int(np.ceil(X.shape[0] / MAX_TRAJECTORY_ROWS))
    rows = np.arange(0, X.shape[0], step)
    J, worst = along(f, h, X[rows], U[rows], len(model.sources), len(model.measurements),
                     model.dt, model.python)
    dt = model.dt
    var0 = np.array([_point(s.amplitude) ** 2 / (1.0 if s.kind == "variance" else dt)
                     for s in model.sources])
    sig2 = np.array([_point(mm.sigma) ** 2 for mm in model.measurements])
    Qk = np.einsum("kis,kjs,s->kij", J["L"], J["L"], var0)
    Rk = np.einsum("kis,kjs,s->kij", J["M"], J["M"], sig2)
    best = int(np.argmax(np.trace(Qk, axis1=1, axis2=2)))
    jac = {name: Jacobian(J[name][best], worst[name].method, worst[name].fd_max_difference,
                          worst[name].scale) for name in J}
    return jac, {"steps": int(rows.shape[0]), "row": int(rows[best]), "x": X[rows[best]],
                 "u": U[rows[best]], "Q_min": Qk.min(0), "Q_max": Qk.max(0),
                 "R_min": Rk.min(0), "R_max": Rk.max(0), "thinned": step}


def _sections(model: FilterModel, mx: dict, jac, draws: int, seed: int, command: str) -> dict:
    m = yaml_block.matrix
    vec = (lambda a: [yaml_block.num(v) for v in a])
    flags = [f"{s.name}: {s.origin} is only an upper bound; Q uses the bound (a larger, "
             "conservative Q), its interval spans 0 to the bound" for s in model.sources
             if s.is_bound]
    flags += [f"{mm.name}: {mm.origin} is only an upper bound; R uses the bound"
              for mm in model.measurements if not mm.sigma.resolved]
    noise = {}
    for k, s in enumerate(model.sources):
        entry = {"origin": s.origin, "kind": s.kind,
                 "amplitude": yaml_block.estimate(s.amplitude),
                 "density_q": ({"value": yaml_block.num(mx["qc"][k]),
                                "ci95": [yaml_block.num(mx["qc_low"][k]),
                                         yaml_block.num(mx["qc_high"][k])]}
                               if np.isfinite(mx["qc"][k]) else None),
                 "from_bound": s.is_bound}
        if s.g is not None:
            entry["G"] = vec(s.g)
        if s.tau is not None:
            entry["correlation_time"] = yaml_block.estimate(s.tau)
        entry["Q_contribution"] = m(mx["Qs"][k])
        noise[s.name] = entry
    units = list(model.units)
    filt = {
        "order": list(model.states),
        "units": units,
        "dt": yaml_block.num(model.dt),
        "convention": {"continuous": CONVENTION, "discrete": CONVENTION_DISCRETE,
                       "python": CONVENTION_PYTHON}[model.form],
        "Phi": m(mx["Phi"]),
    }
    if not np.array_equal(mx["Phi_low"], mx["Phi_high"]):
        filt["Phi_ci95"] = {"low": m(mx["Phi_low"]), "high": m(mx["Phi_high"])}
    filt["Q"] = m(mx["Q"])
    filt["Q_ci95"] = {"low": m(mx["Q_low"]), "high": m(mx["Q_high"])}
    filt["Q_units"] = [[_prod(a, b) for b in units] for a in units]
    filt["measurement_order"] = [mm.name for mm in model.measurements]
    filt["H"] = m(mx["H"])
    filt["R"] = m(mx["R"])
    filt["R_ci95"] = {"low": m(mx["R_low"]), "high": m(mx["R_high"])}
    filt["R_units"] = [[_prod(a.unit, b.unit) for b in model.measurements]
                       for a in model.measurements]
    if model.form != "python":
        filt["continuous"] = {
            **({"F": m(mx["F"])} if mx.get("F") is not None else {}),
            "G": m(model.G),
            "Qc_diagonal": [yaml_block.num(v) for v in mx["qc"]],
            "sources": [s.name for s in model.sources],
        }
    filt["from_bound"] = flags
    filt["notes"] = list(model.notes)
    sections = {
        "layout": LAYOUT,
        "provenance": {
            "tool": f"noisecal {__version__}",
            "job": "filter",
            "command": command,
            "date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "model": {"path": model.path, "sha256": model.sha256},
            "inputs": [dict(b) for b in model.inputs],
            "seed": seed,
            "draws": draws,
            "interval": ("element-wise central 95 % of Monte Carlo draws over the noise "
                         "estimates (each log-normal on either side of its value to match "
                         "its interval; an upper bound uniform on [0, bound]); draws "
                         "independent across sources"),
        },
        "filter": filt,
        "noise": noise,
    }
    if jac is not None:
        traj = mx.get("trajectory")
        filt["noise_space"] = {
            "note": ("what an EKF that re-linearises each step takes: Qw = Cov(w) per step "
                     "(q/dt for a density), Rv = Cov(v); it forms L Qw L^T and M Rv M^T "
                     "itself"),
            "Qw": m(mx["Qw"]), "Qw_ci95": {"low": m(mx["Qw_low"]), "high": m(mx["Qw_high"])},
            "Rv": m(mx["Rv"]), "Rv_ci95": {"low": m(mx["Rv_low"]), "high": m(mx["Rv_high"])}}
        if traj is not None:
            sections["trajectory"] = {
                "path": model.trajectory, "rows_linearised": traj["steps"],
                "every_nth_row": traj["thinned"],
                "filter_matrices_at_row": traj["row"],
                "why": "the row where trace(Q) is largest: the most noise one linearisation "
                       "sees",
                "Q_range": {"min": m(traj["Q_min"]), "max": m(traj["Q_max"])},
                "R_range": {"min": m(traj["R_min"]), "max": m(traj["R_max"])}}
        x_at = traj["x"] if traj is not None else model.x0
        u_at = traj["u"] if traj is not None else model.u0
        sections["jacobians"] = {
            "operating_point": {"x": vec(x_at), "u": vec(u_at)},
            **{k: {"matrix": m(v.J), "method": v.method,
                   "max_difference_to_finite_differences": yaml_block.num(v.fd_max_difference),
                   "largest_entry": yaml_block.num(v.scale)} for k, v in jac.items()}}
    return sections


_COMMENTS = {
    "provenance": "Where these numbers came from.",
    "filter": ("Discrete-time matrices for one filter step dt over 'order' (SI), with\n"
               "element-wise 95 % intervals from the noise estimates' intervals. See\n"
               "'convention'. A starting point for tuning: confirm on the real system."),
    "noise": ("The noise sources: where each value came from, its density q and its\n"
              "part of Q."),
    "jacobians": "The Jacobians at the operating point, and their check.",
    "trajectory": ("Q and R along the trajectory (element-wise range); the filter matrices\n"
                   "above are taken at one row of it."),
}


def render(sections: dict, out=None) -> str:
    """The YAML text of the filter block."""
    return yaml_block.render(sections, f"noisecal filter matrices ({LAYOUT})", _COMMENTS,
                             out=out)


def summary(result: FilterResult) -> str:
    """Plain-text: Phi, Q and R with the interval of each diagonal entry."""
    mdl, mx = result.model, result.matrices
    lines = [f"{mdl.path}: {mdl.form} model, {mdl.n} states, {len(mdl.sources)} noise "
             f"source(s), {mdl.m} measurement(s), dt = {mdl.dt:g} s"]
    with np.printoptions(linewidth=100, formatter={"float_kind": lambda v: f"{v:11.5g}"}):
        lines.append("  Phi =\n    " + str(mx["Phi"]).replace("\n", "\n    "))
        lines.append("  Q =\n    " + str(mx["Q"]).replace("\n", "\n    "))
        lines.append("  R =\n    " + str(mx["R"]).replace("\n", "\n    "))
    for p in result.parameters():
        e = p.estimate
        if p.name in ("Q", "R"):
            lines.append(f"  {p.name}[{p.channel}] {e.value:.4g}  (95 %: {e.lower:.4g} … "
                         f"{e.upper:.4g}) {e.unit}")
    for s in mdl.sources:
        if s.is_bound:
            lines.append(f"  flag: {s.name} is an upper bound; Q uses the bound")
    fixed = [s.name for s in mdl.sources if s.origin == "model file"] + \
        [mm.name for mm in mdl.measurements if mm.origin == "model file"]
    if fixed:
        lines.append(f"  note: {', '.join(fixed)} given as numbers in the model file: no "
                     "interval (the intervals above come from the blocks' estimates only)")
    for note in mdl.notes:
        lines.append(f"  note: {note}")
    return "\n".join(lines)


def yaml_output(out: str, inputs: list, overwrite: bool, protect=()):
    """The YAML output path checked before any work (:data:`STDOUT` for ``-o -``); no plot."""
    from pathlib import Path

    from ..errors import InputError

    if out == STDOUT:
        return STDOUT
    path = Path(out)
    if path.suffix.lower() not in (".yaml", ".yml"):
        raise InputError(f"-o {out}: the output is a YAML block; give a .yaml path "
                         "(or - for standard output)")
    check_target(path, [Path(p) for p in list(inputs) + list(protect) if p], overwrite)
    return path


def run_filter(model_path: str, out: str, draws: int = DEFAULT_DRAWS, seed: int = 1,
               overwrite: bool = False, command: str = "", record=None,
               report: str | None = None) -> FilterResult:
    """Read the model, discretise it and write the YAML block atomically.

    Parameters
    ----------
    model_path : str
        The model file.
    out : str
        YAML output path (``-`` for standard output).
    draws, seed, command
        See :func:`discretise`.
    overwrite : bool
        Replace an existing output.
    record : optional
        A history recorder (none by default).
    report : str, optional
        HTML report path (self-contained), written together with the YAML block.
    """
    out_path = yaml_output(out, [model_path], overwrite, getattr(record, "paths", ()))
    from .static import _report_path

    report_path = _report_path(report, [model_path], overwrite, record, out_path)
    if not isinstance(draws, int) or isinstance(draws, bool):
        raise ParameterError("draws", draws, "give a whole number")
    result = discretise(read_model(model_path), draws, seed, command)
    with Staged(overwrite) as staged:
        staged.text(out_path, result._render(None if out_path == STDOUT else out_path))
        if report_path is not None:
            from ..export.html import render_job

            staged.text(report_path, render_job(result))
        staged.commit(record(result) if record else None)
    return result

