"""Unit parsing with pint: once, at ingest, into SI.

Sensor headers use a few conventions that differ from pint's defaults:
``g`` is standard gravity (9.80665 m/s², 3rd CGPM 1901), not the gram, and
``mg``/``ug`` are milli-/micro-g; ``dps`` is degrees per second.

pint itself (a few tenths of a second to import, as much again to build its
registry) is loaded only for a unit outside the tables of common units
(:data:`COMMON`, :data:`_ANALYSED_SI`, :data:`_DERIVED`, :data:`_CUSTOMARY_SCALE`);
a recording in the usual units never loads it.

Spellings the trade reads two ways are refused with the spelling to use
(:data:`AMBIGUOUS`): ``G``/``Gs``/``mG``/``kG`` (gauss, giga-, or a capitalised
g; pint's gauss is the CGS-Gaussian one, not 10⁻⁴ T), ``dB`` and its kin
(logarithmic, not a scale factor) and ``px``/``pixel`` in a recording (a unit
library reads it as 1/96 inch). Channels whose dimension is not one the jobs
analyse (:func:`analysed`: temperature, voltage, current, mass, …) are kept
as auxiliary channels.
"""

from __future__ import annotations

import re
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np

from .errors import UnitError
from .paths import cache_root

if TYPE_CHECKING:
    import pint

STANDARD_GRAVITY = 9.80665  # m/s², 3rd CGPM (1901)

_HEADER = re.compile(r"^\s*(?P<name>[^\[\]]*?)\s*\[(?P<unit>[^\[\]]*)\]\s*$")
_G_TOKEN = re.compile(r"(?<![A-Za-z_µ])(?P<prefix>m|u|µ)?g(?![A-Za-z_0-9])")
_PREFIX = {None: "", "m": "milli", "u": "micro", "µ": "micro"}

_DEG = np.pi / 180.0
COMMON = {
    "s": (1.0, "s"), "ms": (1e-3, "s"), "us": (1e-6, "s"), "µs": (1e-6, "s"),
    "ns": (1e-9, "s"),
    "rad/s": (1.0, "rad/s"), "deg/s": (_DEG, "rad/s"), "°/s": (_DEG, "rad/s"),
    "dps": (_DEG, "rad/s"), "rpm": (2.0 * np.pi / 60.0, "rad/s"),
    "rad": (1.0, "rad"), "deg": (_DEG, "rad"), "°": (_DEG, "rad"),
    "m/s^2": (1.0, "m/s**2"), "m/s**2": (1.0, "m/s**2"), "m/s²": (1.0, "m/s**2"),
    "g": (STANDARD_GRAVITY, "m/s**2"), "mg": (STANDARD_GRAVITY * 1e-3, "m/s**2"),
    "m": (1.0, "m"), "mm": (1e-3, "m"), "cm": (1e-2, "m"), "m/s": (1.0, "m/s"),
    "1": (1.0, "1"),
}
"""Linear units sensor logs use most, as (SI per unit, SI unit text): ingest
skips loading pint's registry (a few tenths of a second) for these. The
tests check every entry against pint."""


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry:
    """The project's unit registry (pint defaults plus sensor conventions)."""
    import pint  # here, not at module level: most runs never need it

    try:
        # pint's own cache of parsed definitions halves its start-up time.
        ureg = pint.UnitRegistry(cache_folder=str(cache_root() / "pint"))
    except Exception:  # noqa: BLE001
        # pint writes its cache files in place: a process starting while another
        # writes one reads it truncated (EOFError, UnpicklingError), and a run killed
        # mid-write leaves it so. The definitions parse without the cache.
        ureg = pint.UnitRegistry()
    ureg.define("sensor_gravity = 9.80665 m/s^2")
    ureg.define("dps = degree / second")
    return ureg


_TOKEN = re.compile(r"[A-Za-zµ_Ω]+")
_GAUSS = ("write a magnetic field in tesla ([T], [uT] or [nT]; 1 gauss = 100 uT) and "
          "standard gravity as [g]")
_LOG = ("a logarithmic unit is not a scale factor; convert the column to a linear unit "
        "(e.g. [W], [V] or [1]) before ingest")
AMBIGUOUS = {
    **{t: _GAUSS for t in ("G", "Gs", "mG", "uG", "µG", "kG", "gauss", "Gauss")},
    **{t: _LOG for t in ("dB", "dBm", "dBW", "dBV", "dBu", "dBFS", "dBi", "dBc", "dBHz",
                         "decibel", "bel", "Np", "neper")},
    **{t: "pixels are counts, not lengths (a unit library reads px as 1/96 inch); write "
          "[1] for a pixel count in a recording" for t in ("px", "pixel", "pixels")},
}
"""Unit tokens refused in a recording, with the spelling to use instead."""


def check_unambiguous(unit: str, where: str) -> None:
    """Refuse unit text holding a token of :data:`AMBIGUOUS`, saying what to write.

    Raises
    ------
    UnitError
        One line naming ``where``, the unit as written and the spelling to use.
    """
    for token in _TOKEN.findall(unit):
        hint = AMBIGUOUS.get(token)
        if hint is not None:
            raise UnitError(f"{where}: unit [{unit}] is ambiguous ({token!r}); {hint}")


def _to_pint_text(unit: str) -> str:
    text = unit.strip().replace("√", "sqrt").replace("°", "deg")
    return _G_TOKEN.sub(lambda mt: _PREFIX[mt.group("prefix")] + "sensor_gravity", text)


def split_header(cell: str, where: str) -> tuple[str, str]:
    """Split a header cell ``name [unit]`` into name and unit text.

    Parameters
    ----------
    cell : str
        The header cell, e.g. ``"gyro_x [deg/s]"``.
    where : str
        Location for the error message (file and column).

    Raises
    ------
    UnitError
        When the cell has no ``[unit]`` or no name.
    """
    mt = _HEADER.match(cell)
    if mt is None or not mt.group("name"):
        raise UnitError(
            f"{where}: header cell {cell!r} has no unit; write it as 'name [unit]', "
            "e.g. 'gyro_x [deg/s]' or 'count [1]' for a plain number")
    if not mt.group("unit").strip():
        raise UnitError(f"{where}: header cell {cell!r} has an empty unit; "
                        "write the unit between the brackets, e.g. [deg/s]")
    return mt.group("name"), mt.group("unit").strip()


def parse_unit(unit: str, where: str) -> pint.Unit:
    """Parse unit text into a pint unit, with the sensor conventions applied."""
    check_unambiguous(unit, where)
    ureg = registry()
    try:
        parsed = ureg.parse_units(_to_pint_text(unit))
    except Exception:  # pint raises several unrelated types for bad text
        raise UnitError(f"{where}: unknown unit {unit!r}; use a unit such as "
                        "s, ns, deg/s, rad/s, g, m/s^2, rpm or 1") from None
    return parsed


def to_si(values: np.ndarray, unit: str, where: str) -> tuple[np.ndarray, str]:
    """Convert values in ``unit`` to SI base units.

    Parameters
    ----------
    values : ndarray, shape (n,)
        Values in the given unit.
    unit : str
        Unit text as written in the file.
    where : str
        Location for error messages.

    Returns
    -------
    si_values : ndarray, shape (n,)
        Values in SI base units (angles in rad).
    si_unit : str
        The SI unit, pint-parsable (``"1"`` for dimensionless).
    """
    common = COMMON.get(unit.strip())
    # Overflow to inf is the caller's to report, with the row; no warning here.
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        if common is not None:
            return np.asarray(values, dtype=np.float64) * common[0], common[1]
        parsed = parse_unit(unit, where)
        try:
            q = registry().Quantity(np.asarray(values, dtype=np.float64),
                                    parsed).to_base_units()
        except Exception:  # pint: logarithmic or otherwise unconvertible units
            raise UnitError(f"{where}: unit [{unit}] cannot be converted to SI; use a "
                            "linear unit such as deg/s, m/s^2 or 1") from None
        text = f"{q.units:~C}" or "1"
        return np.asarray(q.magnitude, dtype=np.float64), text


_ANALYSED_SI = {"1": True, "rad": True, "rad/s": True, "s": True, "m": True, "m/s": True,
                "m/s**2": True, "1/s": True, "K": False}
"""Common SI unit texts, classified without pint."""

ANALYSED_DIMENSIONS = (
    {}, {"[time]": -1}, {"[time]": -2}, {"[time]": 1},
    {"[length]": 1}, {"[length]": 1, "[time]": -1}, {"[length]": 1, "[time]": -2},
    {"[length]": 1, "[time]": -3},
    {"[mass]": 1, "[current]": -1, "[time]": -2},   # magnetic flux density (T)
    {"[mass]": 1, "[length]": -1, "[time]": -2},    # pressure (Pa), barometers
)
"""Dimensions the jobs fit noise models to: counts and angles, angular rate and
acceleration, time (clock offsets), length, speed, acceleration and jerk,
magnetic flux density and pressure. Anything else (temperature, voltage,
current, mass, …) is an auxiliary channel: kept, shown, not fitted by default."""


@lru_cache(maxsize=256)
def analysed(si_unit: str) -> bool:
    """Whether a channel of SI unit ``si_unit`` is one the noise fit analyses.

    Parameters
    ----------
    si_unit : str
        An SI unit text as :func:`to_si` returns it (e.g. ``"rad/s"``, ``"K"``).

    Returns
    -------
    bool
        False for dimensions outside :data:`ANALYSED_DIMENSIONS`, and for text
        that does not parse (nothing is fitted on a guess).
    """
    known = _ANALYSED_SI.get(si_unit)
    if known is not None:
        return known
    try:
        dims = dict(registry().parse_units(_to_pint_text(si_unit)).dimensionality)
    except Exception:  # not parsable: treat as auxiliary rather than guess
        return False
    dims = {k: v for k, v in dims.items() if v}
    return any(dims == d for d in ANALYSED_DIMENSIONS)


def time_scale(unit: str, where: str) -> float:
    """Seconds per one unit of a time column; error if the unit is not a time."""
    common = COMMON.get(unit.strip())
    if common is not None and common[1] == "s":
        return common[0]
    parsed = parse_unit(unit, where)
    q = registry().Quantity(1.0, parsed)
    if q.dimensionality != registry().Quantity(1.0, "s").dimensionality:
        raise UnitError(f"{where}: the time column's unit {unit!r} is not a time; "
                        "use [s] or [ns]")
    scale = float(q.to("s").magnitude)
    if not (np.isfinite(scale) and scale > 0):
        raise UnitError(f"{where}: the time column's unit {unit!r} is not a usable time "
                        "scale; use [s] or [ns]")
    return scale


_DERIVED = {
    # SI unit: (quantization, rate_ramp, white_psd, bias_rw_psd, input_variance, variance)
    "1": ("s", "1/s", "1/Hz", "Hz", "s**2", "1"),
    "m": ("m*s", "m/s", "m**2/Hz", "m**2*Hz", "m**2*s**2", "m**2"),
    "m/s": ("m", "m/s**2", "m**2/s**2/Hz", "m**2/s**2*Hz", "m**2", "m**2/s**2"),
    "m/s**2": ("m/s", "m/s**3", "m**2/s**4/Hz", "m**2/s**4*Hz", "m**2/s**2", "m**2/s**4"),
    "rad": ("rad*s", "rad/s", "rad**2/Hz", "rad**2*Hz", "rad**2*s**2", "rad**2"),
    "rad/s": ("rad", "rad/s**2", "rad**2/s**2/Hz", "rad**2/s**2*Hz", "rad**2", "rad**2/s**2"),
    "s": ("s**2", "1", "s**2/Hz", "s**2*Hz", "s**4", "s**2"),
}
"""Units :func:`derived_unit` gives through pint for the SI units of :data:`COMMON`,
so that a run in those units never loads pint. The tests check every entry
against the pint path."""

_DERIVED_KINDS = ("quantization", "rate_ramp", "white_psd", "bias_rw_psd", "input_variance",
                  "variance")


def derived_unit(si_unit: str, kind: str) -> str:
    """Unit of a noise coefficient for a channel of SI unit ``si_unit``.

    Parameters
    ----------
    si_unit : str
        Channel unit, e.g. ``"rad/s"``.
    kind : str
        One of ``quantization`` (u·s), ``white_noise`` (u/√Hz),
        ``bias_instability`` (u), ``bias_random_walk`` (u·√Hz),
        ``rate_ramp`` (u/s), ``white_psd`` (u²/Hz), ``bias_rw_psd`` (u²·Hz),
        ``variance`` (u²), ``input_variance`` ((u·s)²), ``time`` (s).
    """
    known = _DERIVED.get(si_unit)
    if known is not None and kind in _DERIVED_KINDS:
        return known[_DERIVED_KINDS.index(kind)]
    if known is not None or kind == "time":
        u = si_unit if si_unit != "1" else ""
        return {"white_noise": f"{u}/Hz^0.5" if u else "1/Hz^0.5",
                "bias_instability": u or "1",
                "bias_random_walk": f"{u}*Hz^0.5" if u else "Hz^0.5",
                "time": "s"}[kind]
    return _derived_by_pint(si_unit, kind)


def _derived_by_pint(si_unit: str, kind: str) -> str:
    """:func:`derived_unit` through pint's registry (any unit pint parses)."""
    u = si_unit if si_unit != "1" else ""
    ureg = registry()
    base = ureg.parse_units(_to_pint_text(si_unit))

    def simplified(unit) -> str:
        return f"{unit:~C}" or "1"

    table = {
        "quantization": lambda: simplified(base * ureg.s),
        "white_noise": lambda: f"{u}/Hz^0.5" if u else "1/Hz^0.5",
        "bias_instability": lambda: u or "1",
        "bias_random_walk": lambda: f"{u}*Hz^0.5" if u else "Hz^0.5",
        "rate_ramp": lambda: simplified(base / ureg.s),
        "white_psd": lambda: simplified(base ** 2) + "/Hz",
        "bias_rw_psd": lambda: (simplified(base ** 2) + "*Hz") if u else "Hz",
        "input_variance": lambda: simplified((base * ureg.s) ** 2),
        "variance": lambda: simplified(base ** 2),
        "time": lambda: "s",
    }
    return table[kind]()


def convert(value: float, from_unit: str, to_unit: str) -> float:
    """Convert a number between pint-parsable units (used for display only)."""
    ureg = registry()
    return float(ureg.Quantity(value, _to_pint_text(from_unit)).to(_to_pint_text(to_unit)).magnitude)


CUSTOMARY = {
    ("rad/s", "white_noise"): "deg/h^0.5",
    ("rad/s", "bias_instability"): "deg/h",
    ("rad/s", "bias_random_walk"): "deg/h^1.5",
    ("rad/s", "quantization"): "deg",
    ("rad/s", "rate_ramp"): "deg/h^2",
    ("m/s**2", "white_noise"): "m/s/h^0.5",
    ("m/s**2", "bias_instability"): "mg",
    ("m/s**2", "bias_random_walk"): "m/s/h^1.5",
    ("m/s**2", "quantization"): "m/s",
    ("m/s**2", "rate_ramp"): "mg/h",
}
"""Units the inertial trade quotes datasheets in, for display beside SI."""


_CUSTOMARY_SCALE = {
    ("rad/s", "white_noise"): 3437.7467707849396,       # (180/π)·60
    ("rad/s", "bias_instability"): 206264.80624709636,  # (180/π)·3600
    ("rad/s", "bias_random_walk"): 12375888.374825781,  # (180/π)·3600^1.5
    ("rad/s", "quantization"): 57.29577951308232,       # 180/π
    ("rad/s", "rate_ramp"): 742553302.4895469,          # (180/π)·3600²
    ("m/s**2", "white_noise"): 60.0,
    ("m/s**2", "bias_instability"): 101.97162129779284,  # 1000/9.80665
    ("m/s**2", "bias_random_walk"): 216000.0,
    ("m/s**2", "quantization"): 1.0,
    ("m/s**2", "rate_ramp"): 367097.8366720542,          # 1000·3600/9.80665
}
"""Customary units per SI unit of each :data:`CUSTOMARY` entry, as pint converts
them (checked against pint by the tests): the summary needs no unit registry."""


def customary(value: float, si_unit: str, term: str) -> str | None:
    """The value in the trade's customary unit, e.g. ``"0.15 deg/h^0.5"``, or None."""
    target = CUSTOMARY.get((si_unit, term))
    if target is None or value is None:
        return None
    scale = _CUSTOMARY_SCALE.get((si_unit, term))
    if scale is None:
        return f"{convert(value, derived_unit(si_unit, term), target):.4g} {target}"
    return f"{value * scale:.4g} {target}"
