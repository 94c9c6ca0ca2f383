"""Unit conversion against pint and the published constants."""

from __future__ import annotations

import numpy as np
import pint
import pytest

from noisecal.errors import UnitError
from noisecal.units import convert, customary, split_header, time_scale, to_si


def test_standard_gravity():
    """g_n = 9.80665 m/s² exactly (3rd CGPM, 1901; ISO 80000-3); 'g' in a header is
    gravity, not the gram."""
    values, unit = to_si(np.array([1.0, -2.0]), "g", "t")
    assert unit == "m/s**2"
    np.testing.assert_array_equal(values, [9.80665, -19.6133])
    assert to_si(np.array([1.0]), "mg", "t")[0][0] == pytest.approx(9.80665e-3, rel=1e-15)


@pytest.mark.parametrize("unit, si, factor", [
    ("deg/s", "rad/s", np.pi / 180), ("deg/h", "rad/s", np.pi / 180 / 3600),
    ("rpm", "rad/s", 2 * np.pi / 60), ("m/s^2", "m/s**2", 1.0), ("mrad/s", "rad/s", 1e-3),
])
def test_against_pint(unit, si, factor):
    """Reference library: pint's own conversion of the same unit to base units."""
    values, got = to_si(np.array([1.5]), unit, "t")
    ref = pint.UnitRegistry().Quantity(1.5, unit).to_base_units().magnitude
    assert got == si
    assert values[0] == pytest.approx(ref, rel=1e-14)
    assert values[0] == pytest.approx(1.5 * factor, rel=1e-14)


def test_angle_random_walk_constants():
    """1 °/√h = (π/180)/60 rad/s/√Hz ≈ 2.9089e-4; 1 °/h ≈ 4.8481e-6 rad/s
    (arithmetic from the definitions)."""
    assert convert(1.0, "deg/h^0.5", "rad/s/Hz^0.5") == pytest.approx(np.pi / 180 / 60, rel=1e-12)
    assert convert(1.0, "deg/h^0.5", "rad/s/Hz^0.5") == pytest.approx(2.9089e-4, rel=1e-4)
    assert convert(1.0, "deg/h", "rad/s") == pytest.approx(4.8481e-6, rel=1e-4)
    assert convert(1.0, "m/s/h^0.5", "m/s**2/Hz^0.5") == pytest.approx(1 / 60, rel=1e-12)
    assert customary(2.9088820866572158e-4, "rad/s", "white_noise") == "1 deg/h^0.5"


def test_time_units():
    assert time_scale("ns", "t") == 1e-9
    assert time_scale("ms", "t") == 1e-3
    with pytest.raises(UnitError):
        time_scale("m", "t")


@pytest.mark.parametrize("cell", ["gyro_x", "gyro_x []", "[deg/s]", "gyro [deg/s"])
def test_header_without_unit_is_refused(cell):
    with pytest.raises(UnitError):
        split_header(cell, "t")


def test_unknown_unit_is_refused():
    with pytest.raises(UnitError, match="unknown unit"):
        to_si(np.array([1.0]), "furlongs per fortnite", "t")


@pytest.mark.parametrize("unit", sorted(__import__("noisecal.units", fromlist=["COMMON"]).COMMON))
def test_common_units_agree_with_pint(unit):
    """Reference library: every entry of the fast table of common units gives the
    scale and SI unit that the pint path (pint's registry with the sensor
    conventions) gives for the same text."""
    from noisecal import units

    scale, si = units.COMMON[unit]
    q = units.registry().Quantity(1.0, units.parse_unit(unit, "t")).to_base_units()
    assert si == (f"{q.units:~C}" or "1")
    assert scale == pytest.approx(q.magnitude, rel=1e-14)


@pytest.mark.parametrize("unit, expect", [
    ("G", "tesla"), ("Gs", "tesla"), ("mG", "tesla"), ("gauss", "tesla"), ("G/s", "tesla"),
    ("dB", "logarithmic"), ("dBm", "logarithmic"), ("px", "pixel count"),
    ("pixel", "pixel count"), ("px/s", "pixel count"),
])
def test_ambiguous_units_are_refused_with_the_spelling_to_use(unit, expect):
    """pint reads G as the CGS-Gaussian gauss, Gs as gigaseconds, dB as a factor of
    10^0.1 and px as 1/96 inch (checked with pint here); the trade means gauss,
    g, a level and a count. Each is refused, saying what to write."""
    ureg = pint.UnitRegistry()
    assert str(ureg.parse_units("Gs")) == "gigasecond"
    assert ureg.Quantity(1, "px").to("inch").magnitude == pytest.approx(1 / 96)
    with pytest.raises(UnitError, match=expect) as err:
        to_si(np.array([1.0]), unit, "f.csv, column 'x'")
    assert str(err.value).startswith("f.csv, column 'x': unit [") and "\n" not in str(err.value)
    with pytest.raises(UnitError):
        time_scale(unit, "t")


@pytest.mark.parametrize("unit", ["g", "mg", "ug", "m/s^2", "deg/s", "uT", "nT", "hPa", "kg"])
def test_near_misses_stay_accepted(unit):
    """Lower-case g is gravity (3rd CGPM); tesla, pascal and kilogram are plain SI."""
    to_si(np.array([1.0]), unit, "t")


@pytest.mark.parametrize("unit, fitted", [
    ("deg/s", True), ("rad", True), ("g", True), ("m", True), ("m/s", True), ("1", True),
    ("rad/s^2", True), ("ns", True), ("uT", True), ("hPa", True), ("m/s^3", True),
    ("degC", False), ("K", False), ("V", False), ("mA", False), ("kg", False), ("W", False),
    ("J", False), ("degF", False),
])
def test_analysed_dimensions(unit, fitted):
    """Which SI dimensions the noise fit takes (pint's dimensionality of the unit)."""
    from noisecal.units import analysed

    _, si = to_si(np.array([1.0]), unit, "t")
    assert analysed(si) is fitted


def test_conversion_overflow_gives_inf_without_warning():
    """Overflow is reported by ingest with the row; to_si itself stays quiet."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        values, _ = to_si(np.array([1e306]), "km", "t")
    assert np.isinf(values[0])


def test_truncated_unit_cache_is_not_fatal(tmp_path):
    """A pint cache file cut short (another process writing it, or a run killed
    mid-write) leaves the registry working: common practice, no source."""
    import os
    import subprocess
    import sys

    env = dict(os.environ, NOISECAL_CACHE=str(tmp_path))
    code = ("from noisecal.units import registry, to_si; import numpy as np; registry(); "
            "print(to_si(np.array([1.0]), 'deg/s', 'x')[0][0])")
    first = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                           text=True, check=True)
    files = [p for p in (tmp_path / "pint").rglob("*") if p.is_file() and p.suffix != ".json"]
    assert files, "pint wrote no cache files"
    for p in files:
        p.write_bytes(p.read_bytes()[: max(1, p.stat().st_size // 3)])
    again = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                           text=True)
    assert again.returncode == 0, again.stderr
    assert float(again.stdout) == float(first.stdout) == np.pi / 180


@pytest.mark.parametrize("si", sorted(__import__("noisecal.units",
                                                  fromlist=["_DERIVED"])._DERIVED))
def test_derived_unit_table_agrees_with_pint(si):
    """Reference library: every entry of the table of derived units (which spares a
    run in common units from loading pint) is the text pint's registry gives for the
    same product (u·s, u/s, u²/Hz, u²·Hz, (u·s)², u²)."""
    from noisecal import units

    kinds = units._DERIVED_KINDS + ("white_noise", "bias_instability", "bias_random_walk",
                                    "time")
    for kind in kinds:
        assert units.derived_unit(si, kind) == units._derived_by_pint(si, kind), (si, kind)


@pytest.mark.parametrize("key", sorted(__import__("noisecal.units",
                                                   fromlist=["CUSTOMARY"]).CUSTOMARY))
def test_customary_scale_agrees_with_pint(key):
    """Reference library: the fixed factor to each customary unit equals pint's
    conversion of one SI unit of the term (and a table entry for every customary
    unit); arithmetic from the definitions for deg/h^0.5 in test_angle_random_walk_constants."""
    from noisecal import units

    si, term = key
    ureg = pint.UnitRegistry()
    ureg.define("sensor_gravity = 9.80665 m/s^2")
    frm = units._to_pint_text(units.derived_unit(si, term))
    ref = ureg.Quantity(1.0, frm).to(units._to_pint_text(units.CUSTOMARY[key])).magnitude
    assert units._CUSTOMARY_SCALE[key] == pytest.approx(ref, rel=1e-15)


def test_common_units_never_load_pint():
    """A recording in common units (deg/s, g, s) reads, names its noise units and
    prints customary values without importing pint (about half a second a run);
    common practice, no source."""
    import subprocess
    import sys

    code = ("import sys, numpy as np\n"
            "from noisecal import units\n"
            "for u in ('deg/s', 'g', 'mg', 's', 'ns', 'rad/s', 'm'):\n"
            "    units.to_si(np.ones(2), u, 't')\n"
            "units.time_scale('ns', 't')\n"
            "for si in units._DERIVED:\n"
            "    assert units.analysed(si)\n"
            "    for k in ('quantization', 'white_noise', 'bias_instability',\n"
            "              'bias_random_walk', 'rate_ramp', 'white_psd', 'bias_rw_psd',\n"
            "              'input_variance', 'variance', 'time'):\n"
            "        units.derived_unit(si, k)\n"
            "for si, term in units.CUSTOMARY:\n"
            "    units.customary(1e-5, si, term)\n"
            "print('pint' in sys.modules)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "False"
