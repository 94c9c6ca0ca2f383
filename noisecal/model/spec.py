"""The filter model file: states, dt, F or Phi (or a Python model), noise sources, measurements.

A model file is YAML of noisecal's own layout (see README, "Your filter's Q and R").
:func:`read_model` reads it with the guarded loader, checks every entry and resolves
each noise density and measurement variance to an :class:`~noisecal.types.Estimate`
(from a noisecal block named by ``from:``, or a number given in the file). Nothing
after this module parses text.

Conventions (SI throughout)
---------------------------
- A noise source is white noise of intensity ``q``, E[w(t) w(s)] = q δ(t − s) (the
  two-sided spectral density, u²/Hz = u²·s; IEEE Std 952's N² — the one-sided PSD is 2q):
  ``q = N²`` for a static block's white noise N, ``q = K²`` for its bias random
  walk K, ``q = density²`` for a number given as an amplitude density.
- Continuous model: dx/dt = F x + Σ g_i w_i, g_i the source's column of G.
- Discrete model (``Phi``): x_{k+1} = Phi x_k + Σ g_i w_i,k, with Var(w_i,k) = q·dt
  (the white noise integrated over the step) or the ``variance`` given.
- A first-order Gauss–Markov source (``term: gauss_markov``) drives the one state its
  G column selects, with F[i, i] = −1/T and q = 2σ²/T (stationary variance σ²).
- A measurement is one scalar z_j = H_j x + v_j with Var(v_j) = the variance given,
  a motion block's σ² for its channel, or N²/dt for a static block's white noise.
"""

from __future__ import annotations

import hashlib
import math
import numbers
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..types import Estimate

TERMS = ("white_noise", "bias_random_walk", "gauss_markov")
"""Static-block terms that are white-noise sources of a state-space model."""

_TOP = {"states", "dt", "F", "Phi", "noise", "measurements", "filter_used", "python",
        "operating_point", "trajectory", "units", "name"}


@dataclass(frozen=True)
class Source:
    """One white-noise source of the process model.

    Attributes
    ----------
    name : str
        Name shown in outputs (``channel.term`` for a block value).
    g : ndarray, shape (n,) or None
        Its column of G (None for a Python model: the column comes from ∂f/∂w).
    amplitude : Estimate
        Amplitude density (N, K; u/√Hz, u·√Hz) or, for a discrete ``variance``, the
        square root of that variance; q = amplitude². For Gauss–Markov, σ.
    kind : str
        ``"density"``, ``"variance"`` (discrete variance per step) or ``"gauss_markov"``.
    tau : Estimate or None
        Gauss–Markov correlation time, s.
    origin : str
        Where the number came from (``file: channel.term`` or ``model file``).
    """

    name: str
    g: np.ndarray | None
    amplitude: Estimate
    kind: str = "density"
    tau: Estimate | None = None
    origin: str = "model file"

    @property
    def is_bound(self) -> bool:
        """True where the block gives only an upper bound (used as a bound)."""
        return not self.amplitude.resolved or (self.tau is not None and not self.tau.resolved)


@dataclass(frozen=True)
class Measurement:
    """One scalar measurement.

    Attributes
    ----------
    name : str
    h : ndarray, shape (n,) or None
        Its row of H (None for a Python model).
    sigma : Estimate
        Standard deviation of one sample, in the measurement's unit; R_jj = σ².
    origin : str
    unit : str
    """

    name: str
    h: np.ndarray | None
    sigma: Estimate
    origin: str = "model file"
    unit: str = ""


@dataclass(frozen=True)
class FilterModel:
    """A checked filter model file.

    Attributes
    ----------
    path : str
        The model file as given.
    sha256 : str
    states : tuple of str, length n
    units : tuple of str, length n
        State units as written ('' where not given).
    dt : float
        Filter step, s.
    form : str
        ``"continuous"`` (F), ``"discrete"`` (Phi) or ``"python"``.
    F : ndarray, shape (n, n) or None
        Continuous-time dynamics (Gauss–Markov diagonal entries not yet set).
    Phi : ndarray, shape (n, n) or None
        Discrete transition, for the discrete form.
    sources : tuple of Source
    measurements : tuple of Measurement
    used_Q, used_R : ndarray or None
        Q (n, n) and R (m, m) the running filter used (``filter_used``).
    python : str or None
        Path of the Python model (``f(x, u, w, dt)``, ``h(x, v)``).
    x0, u0 : ndarray or None
        Operating point of a Python model.
    inputs : tuple of dict
        The noisecal blocks read: path, sha256, checksum status.
    notes : tuple of str
    trajectory : str or None
        A recording of states (columns named as the states) and inputs (``u_0``,
        ``u_1``, …) along which a Python model's Jacobians are taken.
    """

    path: str
    sha256: str
    states: tuple
    units: tuple
    dt: float
    form: str
    F: np.ndarray | None
    Phi: np.ndarray | None
    sources: tuple
    measurements: tuple
    used_Q: np.ndarray | None = None
    used_R: np.ndarray | None = None
    python: str | None = None
    x0: np.ndarray | None = None
    u0: np.ndarray | None = None
    inputs: tuple = ()
    notes: tuple = field(default_factory=tuple)
    trajectory: str | None = None

    @property
    def n(self) -> int:
        return len(self.states)

    @property
    def m(self) -> int:
        return len(self.measurements)

    @property
    def G(self) -> np.ndarray:
        """Noise input matrix, shape (n, s) (linear forms)."""
        return np.column_stack([s.g for s in self.sources]) if self.sources else \
            np.zeros((self.n, 0))

    @property
    def H(self) -> np.ndarray:
        """Measurement matrix, shape (m, n) (linear forms)."""
        return np.vstack([mm.h for mm in self.measurements])


class _Reader:
    """Checks of one model file; every message names the file and the entry."""

    def __init__(self, path: Path):
        self.path = path
        self.blocks: dict = {}
        self.notes: list = []

    def fail(self, where: str, text: str):
        raise InputError(f"{self.path}: {where}: {text}")

    def number(self, value, where: str, positive: bool = False) -> float:
        if isinstance(value, bool) or not isinstance(value, numbers.Real) or \
                not math.isfinite(value):
            self.fail(where, f"{value!r} is not a finite number; write a number such as 0.01")
        if positive and not value > 0:
            self.fail(where, f"{value!r} must be above 0")
        return float(value)

    def vector(self, value, n: int, where: str) -> np.ndarray:
        if not isinstance(value, list) or len(value) != n:
            self.fail(where, f"give a list of {n} numbers (one per state)")
        return np.array([self.number(v, f"{where}[{i}]") for i, v in enumerate(value)])

    def matrix(self, value, rows: int, cols: int, where: str) -> np.ndarray:
        if not isinstance(value, list) or len(value) != rows or not all(
                isinstance(r, list) and len(r) == cols for r in value):
            self.fail(where, f"give {rows} rows of {cols} numbers, e.g. [[0, 1], [0, 0]]")
        return np.array([[self.number(v, f"{where}[{i}][{j}]") for j, v in enumerate(r)]
                         for i, r in enumerate(value)])

    def block(self, ref: str, where: str) -> dict:
        """A noisecal block named by ``from: {file}``, relative to the model's folder."""
        from ..export.yaml_block import verify
        from ..ingest.yaml_file import read_yaml

        file = (self.path.parent / ref) if not Path(ref).is_absolute() else Path(ref)
        key = str(file.resolve())
        if key not in self.blocks:
            try:
                doc = read_yaml(file, "noisecal block")
            except InputError as exc:
                self.fail(where, f"from.file: {exc}")
            if not isinstance(doc, dict) or not isinstance(doc.get("layout"), str):
                self.fail(where, f"from.file {ref} is not a noisecal block (no layout); "
                          "give a YAML block written by noisecal static or motion")
            status = verify(doc)
            if status != "ok":
                self.notes.append(f"{ref}: checksum {status} (edited by hand?); its values "
                                  "are used as they stand")
            self.blocks[key] = {"path": str(ref), "sha256": hashlib.sha256(
                file.read_bytes()).hexdigest(), "checksum": status, "doc": doc}
        return self.blocks[key]["doc"]

    def text(self, value, where: str) -> str:
        if not isinstance(value, str) or not value:
            self.fail(where, f"{value!r}: give a name")
        return value


def _estimate(r: _Reader, d, where: str, unit: str | None = None) -> Estimate:
    from ..export.yaml_block import estimate_from

    if not isinstance(d, dict) or not ("value" in d or "upper_bound" in d):
        r.fail(where, "the block holds no estimate there; was it written by this version "
               "of noisecal?")
    try:
        e = estimate_from(d, unit)
    except (KeyError, TypeError, ValueError):
        r.fail(where, "the block's estimate is damaged (value, ci95 or upper_bound)")
    for v in (e.value, e.lower, e.upper):
        if v is not None and not (math.isfinite(v) and v >= 0):
            r.fail(where, f"the block's estimate {v!r} is not a non-negative number")
    return e


def _exact(value: float, unit: str) -> Estimate:
    """A number given in the model file: no interval."""
    return Estimate(value, value, value, unit, "given in the model file (no interval)")


def _source(r: _Reader, entry, i: int, n: int, linear: bool, discrete: bool) -> Source:
    where = f"noise[{i}]"
    if not isinstance(entry, dict):
        r.fail(where, "give a mapping with G and one of from, density, variance")
    unknown = set(entry) - {"G", "from", "density", "variance", "name", "unit"}
    if unknown:
        r.fail(where, f"unknown key(s) {', '.join(sorted(map(str, unknown)))}; use G, from, "
               "density, variance, name")
    g = None
    if linear:
        if "G" not in entry:
            r.fail(where, "G is missing: give the source's column of G, one number per state")
        g = r.vector(entry["G"], n, f"{where}.G")
        if not np.any(g):
            r.fail(f"{where}.G", "is all zeros: the source would drive nothing")
    elif "G" in entry:
        r.fail(where, "a Python model takes L = df/dw from its f; leave out G")
    given = [k for k in ("from", "density", "variance") if k in entry]
    if len(given) != 1:
        r.fail(where, "give exactly one of from, density (amplitude, u/sqrt(Hz)) or "
               "variance (discrete, per step)")
    how = given[0]
    unit = entry.get("unit", "")
    if how == "density":
        a = r.number(entry["density"], f"{where}.density", positive=True)
        name = entry.get("name", f"noise{i}")
        return Source(str(name), g, _exact(a, str(unit)), "density")
    if how == "variance":
        if not discrete:
            r.fail(where, "variance is a discrete per-step number: with a continuous F give "
                   "density (amplitude) instead, or give Phi for a discrete model")
        v = r.number(entry["variance"], f"{where}.variance", positive=True)
        name = entry.get("name", f"noise{i}")
        return Source(str(name), g, _exact(math.sqrt(v), str(unit)), "variance")
    ref = entry["from"]
    if not isinstance(ref, dict) or set(ref) - {"file", "channel", "term"} or \
            not {"file", "channel", "term"} <= set(ref):
        r.fail(f"{where}.from", "give {file, channel, term} (term: white_noise, "
               "bias_random_walk or gauss_markov)")
    file, ch = r.text(ref["file"], f"{where}.from.file"), r.text(ref["channel"],
                                                                 f"{where}.from.channel")
    term = ref["term"]
    if term not in TERMS:
        r.fail(f"{where}.from.term", f"{term!r} is not a white-noise source of a state-space "
               f"model; use one of {', '.join(TERMS)} (bias instability, quantization and "
               "rate ramp are not white-noise densities)")
    doc = r.block(file, where)
    chans = doc.get("channels")
    if not isinstance(chans, dict) or ch not in chans:
        have = ", ".join(map(str, chans)) if isinstance(chans, dict) else "none"
        r.fail(f"{where}.from", f"{file} has no static channel {ch!r} (channels: {have})")
    entry_ch = chans[ch]
    origin = f"{file}: {ch}.{term}"
    name = str(entry.get("name", f"{ch}.{term}"))
    if term == "gauss_markov" and not linear:
        r.fail(f"{where}.from", "a Python model writes the Gauss–Markov state into its f; "
               "give that state's driving noise as a density (2 sigma^2 / T)")
    if term == "gauss_markov":
        gm = entry_ch.get("gauss_markov") if isinstance(entry_ch, dict) else None
        if not isinstance(gm, dict) or "sigma" not in gm:
            r.fail(f"{where}.from", f"{file}: {ch} has no resolved Gauss–Markov bias; use "
                   "white_noise or bias_random_walk, or a density")
        if g is not None and (np.count_nonzero(g) != 1):
            r.fail(f"{where}.G", "a Gauss–Markov source drives one state: give a G column "
                   "with one non-zero entry (that state becomes the Gauss–Markov state)")
        sigma = _estimate(r, gm["sigma"], f"{where}.from ({origin}.sigma)")
        tau = _estimate(r, gm["correlation_time"], f"{where}.from ({origin}.correlation_time)",
                        "s")
        if tau.resolved and not tau.lower > 0:
            r.fail(f"{where}.from", f"{origin}: correlation time must be above 0")
        return Source(name, g, sigma, "gauss_markov", tau, origin)
    amp = _estimate(r, entry_ch.get(term) if isinstance(entry_ch, dict) else None,
                    f"{where}.from ({origin})")
    return Source(name, g, amp, "density", None, origin)


def _measurement(r: _Reader, entry, j: int, n: int, linear: bool, dt: float) -> Measurement:
    where = f"measurements[{j}]"
    if not isinstance(entry, dict):
        r.fail(where, "give a mapping with name, H and one of variance, from")
    unknown = set(entry) - {"name", "H", "variance", "from", "unit"}
    if unknown:
        r.fail(where, f"unknown key(s) {', '.join(sorted(map(str, unknown)))}; use name, H, "
               "variance, from, unit")
    name = r.text(entry.get("name"), f"{where}.name")
    h = None
    if linear:
        if "H" not in entry:
            r.fail(where, "H is missing: give the measurement's row of H, one number per state")
        h = r.vector(entry["H"], n, f"{where}.H")
    elif "H" in entry:
        r.fail(where, "a Python model takes M = dh/dv from its h; leave out H")
    given = [k for k in ("variance", "from") if k in entry]
    if len(given) != 1:
        r.fail(where, "give exactly one of variance (u^2) or from {file, channel[, term]}")
    unit = str(entry.get("unit", ""))
    if given[0] == "variance":
        v = r.number(entry["variance"], f"{where}.variance", positive=True)
        return Measurement(name, h, _exact(math.sqrt(v), unit), "model file", unit)
    ref = entry["from"]
    if not isinstance(ref, dict) or "file" not in ref or "channel" not in ref or \
            set(ref) - {"file", "channel", "term"}:
        r.fail(f"{where}.from", "give {file, channel} of a motion block (or of a static block "
               "with term: white_noise)")
    file = r.text(ref["file"], f"{where}.from.file")
    ch = r.text(ref["channel"], f"{where}.from.channel")
    doc = r.block(file, where)
    origin = f"{file}: {ch}"
    meas = doc.get("measurement")
    if isinstance(meas, dict) and isinstance(meas.get("sigma"), dict):
        if ref.get("term", "sigma") != "sigma":
            r.fail(f"{where}.from.term", "a motion block gives sigma; leave out term")
        if ch not in meas["sigma"]:
            r.fail(f"{where}.from", f"{file} has no measured channel {ch!r} (channels: "
                   f"{', '.join(map(str, meas['sigma']))})")
        sigma = _estimate(r, meas["sigma"][ch], f"{where}.from ({origin})")
        return Measurement(name, h, sigma, origin + ".sigma", unit or sigma.unit)
    chans = doc.get("channels")
    if isinstance(chans, dict) and ch in chans:
        if ref.get("term", "white_noise") != "white_noise":
            r.fail(f"{where}.from.term", "from a static block a measurement takes the white "
                   "noise (R = N^2/dt); give term: white_noise")
        n_est = _estimate(r, chans[ch].get("white_noise"), f"{where}.from ({origin})")
        # One sample averages the white noise over dt: variance N^2/dt.
        sigma = n_est.scaled(1.0 / math.sqrt(dt), "")
        sigma = Estimate(sigma.value, sigma.lower, sigma.upper, unit,
                         n_est.method + "; sigma = N/sqrt(dt)", n_est.level)
        return Measurement(name, h, sigma, origin + ".white_noise / sqrt(dt)", unit)
    r.fail(f"{where}.from", f"{file} has no channel {ch!r} (neither a motion block's "
           "measurement nor a static block's channel)")


def _check_units(r: _Reader, states: list, units: list, sources: tuple,
                 measurements: tuple) -> None:
    """Where states and values both carry units: states SI, and every source's density
    of the dimension its state needs (q·dt in state units squared), every measurement's
    sigma in the measurement's unit. This is what catches N²/dt against N²·dt."""
    if not any(units) and not any(mm.unit for mm in measurements):
        return
    from ..errors import UnitError
    from ..units import parse_unit, registry

    ureg = registry()

    def q(unit: str, where: str):
        try:
            return ureg.Quantity(1.0, parse_unit(unit, where))
        except UnitError as exc:
            r.fail(where, str(exc).split(": ", 1)[-1])

    for i, (name, u) in enumerate(zip(states, units)):
        if u:
            base = q(u, f"states[{i}] unit").to_base_units()
            if abs(base.magnitude - 1.0) > 1e-12:
                r.fail(f"states[{i}]", f"unit [{u}] is not SI (1 {u} = {base.magnitude:.6g} "
                       f"{base.units:~}); noisecal's values are SI: write the SI unit")
    for i, src in enumerate(sources):
        if src.g is None or not src.amplitude.unit:
            continue
        amp = q(src.amplitude.unit, f"noise[{i}] ({src.origin}) unit")
        for k in np.flatnonzero(src.g):
            if not units[k]:
                continue
            state = q(units[k], f"states[{k}] unit")
            if src.kind == "gauss_markov":
                need, have = state.dimensionality, amp.dimensionality
                what = f"sigma [{src.amplitude.unit}]"
            else:
                need = (state ** 2).dimensionality
                have = (amp ** 2 * ureg.second).dimensionality
                what = (f"q*dt = ({src.amplitude.unit})^2*s" if src.kind == "density"
                        else f"the variance [({src.amplitude.unit})^2]")
                if src.kind == "variance":
                    have = (amp ** 2).dimensionality
            if need != have:
                r.fail(f"noise[{i}]", f"{src.name}: {what} is not in [({units[k]})^2] of "
                       f"state {states[k]} that its G drives; check G (a rate noise "
                       "drives the state it is the rate of) or the state's unit")
    for j, mm in enumerate(measurements):
        if mm.unit and mm.sigma.unit and q(mm.unit, f"measurements[{j}].unit").dimensionality \
                != q(mm.sigma.unit, f"measurements[{j}] ({mm.origin}) unit").dimensionality:
            r.fail(f"measurements[{j}]", f"{mm.name}: sigma is [{mm.sigma.unit}] but the "
                   f"measurement is [{mm.unit}]; check the block's channel")


def read_model(path: str | Path) -> FilterModel:
    """Read and check a filter model file.

    Parameters
    ----------
    path : str or Path
        The model YAML (a regular file of at most 4 MiB).

    Returns
    -------
    FilterModel
        Every noise value resolved to an Estimate; matrices as float arrays, SI.

    Raises
    ------
    InputError
        One line naming the file, the entry and what to write instead.
    """
    from ..ingest.yaml_file import read_side_file, parse_yaml, YAML_CAP

    path = Path(path)
    data = read_side_file(path, "model file", YAML_CAP)
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: the model file is not UTF-8 text (byte {exc.start}); "
                         "save it as UTF-8") from None
    doc = parse_yaml(text, str(path), "model file")
    r = _Reader(path)
    if not isinstance(doc, dict):
        r.fail("top level", "a model file is a mapping with states, dt, F or Phi, noise and "
               "measurements")
    unknown = set(doc) - _TOP
    if unknown:
        r.fail("top level", f"unknown key(s) {', '.join(sorted(map(str, unknown)))}; a model "
               f"file has {', '.join(sorted(_TOP))}")
    for key in ("states", "dt", "noise", "measurements"):
        if key not in doc:
            r.fail("top level", f"{key} is missing")
    states_raw = doc["states"]
    if not isinstance(states_raw, list) or not states_raw:
        r.fail("states", "give a list of state names, e.g. [angle, bias]")
    states, units = [], []
    for i, s in enumerate(states_raw):
        if isinstance(s, dict) and set(s) <= {"name", "unit"} and "name" in s:
            states.append(r.text(s["name"], f"states[{i}].name"))
            units.append(str(s.get("unit", "")))
        else:
            states.append(r.text(s, f"states[{i}]"))
            units.append("")
    if len(set(states)) != len(states):
        r.fail("states", "names repeat; give each state its own name")
    if "units" in doc:
        if not isinstance(doc["units"], list) or len(doc["units"]) != len(states):
            r.fail("units", f"give {len(states)} unit names, one per state")
        units = [str(u) for u in doc["units"]]
    n = len(states)
    dt = r.number(doc["dt"], "dt", positive=True)
    forms = [k for k in ("F", "Phi", "python") if k in doc]
    if len(forms) != 1:
        r.fail("top level", "give exactly one of F (continuous time), Phi (discrete) or "
               "python (a file with f(x, u, w, dt) and h(x, v))")
    form = {"F": "continuous", "Phi": "discrete", "python": "python"}[forms[0]]
    F = r.matrix(doc["F"], n, n, "F") if form == "continuous" else None
    Phi = r.matrix(doc["Phi"], n, n, "Phi") if form == "discrete" else None
    linear = form != "python"
    noise = doc["noise"]
    if not isinstance(noise, list) or not noise:
        r.fail("noise", "give a list of noise sources (each: G and one of from, density)")
    sources = tuple(_source(r, e, i, n, linear, form != "continuous")
                    for i, e in enumerate(noise))
    names = [s.name for s in sources]
    if len(set(names)) != len(names):
        r.fail("noise", "two sources share a name; give each a name: key")
    gm_states = []
    for i, s in enumerate(sources):
        if s.kind == "gauss_markov" and s.g is not None:
            k = int(np.flatnonzero(s.g)[0])
            if k in gm_states:
                r.fail(f"noise[{i}].G", f"state {states[k]} already has a Gauss–Markov source")
            gm_states.append(k)
            base = F if F is not None else Phi
            if base[k, k] != 0 and form == "continuous":
                r.fail(f"noise[{i}]", f"F[{k}][{k}] is {base[k, k]:g}: a Gauss–Markov state "
                       "takes its F entry -1/T from the block; write 0 there")
            if form == "discrete" and base[k, k] != 0:
                r.fail(f"noise[{i}]", f"Phi[{k}][{k}] is {base[k, k]:g}: a Gauss–Markov state "
                       "takes exp(-dt/T) from the block; write 0 there")
    meas = doc["measurements"]
    if not isinstance(meas, list) or not meas:
        r.fail("measurements", "give a list of measurements (each: name, H, variance or from)")
    measurements = tuple(_measurement(r, e, j, n, linear, dt) for j, e in enumerate(meas))
    mnames = [mm.name for mm in measurements]
    if len(set(mnames)) != len(mnames):
        r.fail("measurements", "two measurements share a name")
    used_Q = used_R = None
    if "filter_used" in doc:
        fu = doc["filter_used"]
        if not isinstance(fu, dict) or set(fu) - {"Q", "R"} or not {"Q", "R"} <= set(fu):
            r.fail("filter_used", "give {Q: n x n, R: m x m}: the matrices the running "
                   "filter used")
        used_Q = r.matrix(fu["Q"], n, n, "filter_used.Q")
        used_R = r.matrix(fu["R"], len(measurements), len(measurements), "filter_used.R")
        for name, a in (("Q", used_Q), ("R", used_R)):
            if not np.allclose(a, a.T, rtol=1e-9, atol=0):
                r.fail(f"filter_used.{name}", "is not symmetric")
            if np.linalg.eigvalsh(a).min() < -1e-12 * max(1.0, np.abs(a).max()):
                r.fail(f"filter_used.{name}", "is not positive semidefinite")
        if np.linalg.eigvalsh(used_R).min() <= 0:
            r.fail("filter_used.R", "is singular: a Kalman filter needs R positive definite")
    python = x0 = u0 = trajectory = None
    if form == "python":
        python = str((path.parent / r.text(doc["python"], "python")))
        if not Path(python).is_file():
            r.fail("python", f"no such Python model file {doc['python']!r} (relative to the "
                   "model file's folder); check the path")
        if ("operating_point" in doc) == ("trajectory" in doc):
            r.fail("top level", "a Python model needs one of operating_point: {x: [...], "
                   "u: [...]} or trajectory: a recording of the states (and inputs u_0, "
                   "u_1, ...) where the Jacobians are taken")
        if "trajectory" in doc:
            trajectory = str(path.parent / r.text(doc["trajectory"], "trajectory"))
            if not Path(trajectory).is_file():
                r.fail("trajectory", f"no such recording {doc['trajectory']!r} (relative to "
                       "the model file's folder); check the path")
        else:
            op = doc["operating_point"]
            if not isinstance(op, dict) or "x" not in op or set(op) - {"x", "u"}:
                r.fail("operating_point", "give {x: [...], u: [...]}: the state and input "
                       "where the Jacobians are taken")
            x0 = r.vector(op["x"], n, "operating_point.x")
            u = op.get("u", [])
            if not isinstance(u, list):
                r.fail("operating_point.u", "give a list of numbers (the input), or leave "
                       "it out")
            u0 = np.array([r.number(v, f"operating_point.u[{i}]") for i, v in enumerate(u)])
    elif "operating_point" in doc or "trajectory" in doc:
        r.fail("top level", "operating_point and trajectory belong to a Python model; a "
               "linear model (F or Phi) has neither")
    _check_units(r, states, units, sources, measurements)
    inputs = tuple({k: v for k, v in b.items() if k != "doc"} for b in r.blocks.values())
    return FilterModel(str(path), hashlib.sha256(data).hexdigest(), tuple(states),
                       tuple(units), dt, form, F, Phi, sources, measurements, used_Q, used_R,
                       python, x0, u0, inputs, tuple(r.notes), trajectory)
