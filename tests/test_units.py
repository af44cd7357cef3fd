"""Unit tests of orbitmass.units: the internal unit system and the boundary parser.

External references:
- /work/shared/references.md "Constants" (computed from IAU 2015 Resolution B3 GM_sun,
  IAU 2012 Resolution B2 au, IAU 2015 Resolution B2 parsec);
- astropy.constants and astropy.units (which carry these constants exactly), astropy.time;
- pyerfa ``erfa.SRS`` (SOFA/ERFA Schwarzschild radius of the Sun, au) when installed.
"""

from __future__ import annotations

import math

import astropy.units as u
import numpy as np
import pytest
from astropy import constants as const
from astropy.time import Time

from orbitmass import units
from orbitmass.exceptions import InputError
from orbitmass.units import INTERNAL_UNITS, parse_quantity, to_internal


def test_gm_sun_in_au3_per_julian_year2():
    # references.md: GM_sun in au^3 per Julian year^2 = 39.4769264089 (not 4 pi^2), computed
    # from IAU 2015 B3 GM_sun = 1.3271244e20 m^3/s^2 and the IAU 2012 au
    assert units.GM_SUN_AU3_PER_YR2 == pytest.approx(39.4769264089, abs=1e-10)
    assert units.GM_SUN_AU3_PER_YR2 != pytest.approx(4 * math.pi**2, rel=1e-6)
    # astropy constants directly
    ref = (1.3271244e20 * u.m**3 / u.s**2).to_value(u.au**3 / u.yr**2)
    assert units.GM_SUN_AU3_PER_YR2 == pytest.approx(ref, rel=1e-15)
    assert const.GM_sun.value == 1.3271244e20  # astropy carries the IAU 2015 nominal value


def test_kms_per_au_per_year():
    # references.md: km/s per (au per Julian year) = 4.74047046353 (computed)
    assert units.KMS_PER_AU_PER_YR == pytest.approx(4.74047046353, abs=1e-11)
    # IAU 2012 au = 149 597 870 700 m exactly; Julian year = 365.25 * 86400 s exactly
    assert units.KMS_PER_AU_PER_YR == pytest.approx(149_597_870.7 / (365.25 * 86400.0), rel=1e-15)


def test_speed_of_light():
    # SI definition: c = 299 792 458 m/s exactly (astropy.constants.c)
    assert units.C_KMS == 299_792.458
    assert units.C_KMS == const.c.to_value(u.km / u.s)
    assert units.C_AU_PER_YR == pytest.approx(const.c.to_value(u.au / u.yr), rel=1e-15)
    # about 63 241 au per Julian year (common practice, no source)
    assert round(units.C_AU_PER_YR) == 63241


def test_au_per_parsec():
    # IAU 2015 Resolution B2: 1 pc = 648000 / pi au (references.md), as in astropy
    assert units.AU_PER_PC == 648000.0 / math.pi
    assert units.AU_PER_PC == pytest.approx((1 * u.pc).to_value(u.au), rel=1e-15)
    # references.md: 1 pc = 3.0856775814913673e16 m
    assert units.AU_PER_PC * 149_597_870_700.0 == pytest.approx(3.0856775814913673e16, rel=1e-15)


def test_schwarzschild_radius_per_solar_mass():
    # 2 G M_sun / c^2 from astropy constants; references.md: 2953.25 m
    ref = (2 * const.GM_sun / const.c**2).to_value(u.au)
    assert units.RS_AU_PER_MSUN == pytest.approx(ref, rel=1e-14)
    assert units.RS_AU_PER_MSUN * const.au.to_value(u.m) == pytest.approx(2953.25, abs=0.005)


def test_schwarzschild_radius_against_erfa():
    # erfa.SRS = 1.97412574336e-8 au (SOFA/ERFA, 11 significant digits)
    erfa = pytest.importorskip("erfa")
    assert units.RS_AU_PER_MSUN == pytest.approx(erfa.SRS, rel=1e-9)


def test_julian_year_and_j2000():
    # IAU: Julian year = 365.25 d (astropy.units.yr); J2000.0 = JD 2451545.0 (astropy.time)
    assert units.DAYS_PER_YEAR == 365.25
    assert units.DAYS_PER_YEAR == (1 * u.yr).to_value(u.day)
    assert units.JD_J2000 == 2451545.0
    assert units.JD_J2000 == Time("J2000.0", scale="tdb").jd
    assert Time(units.JD_J2000, format="jd", scale="tdb").jyear == 2000.0


@pytest.mark.parametrize(
    ("physical_type", "unit"),
    [("mass", u.solMass), ("length", u.pc), ("angle", u.mas), ("time", u.yr),
     ("speed", u.km / u.s), ("angular speed", u.mas / u.yr)],
)
def test_internal_units_table(physical_type, unit):
    # The keys are astropy physical-type names (astropy.units.PhysicalType equality),
    # and the units are those of the module docstring.
    assert INTERNAL_UNITS[physical_type] == unit
    assert INTERNAL_UNITS[physical_type].physical_type == physical_type


def test_internal_units_cover_the_documented_types():
    assert set(INTERNAL_UNITS) == {"mass", "length", "angle", "time", "speed", "angular speed"}


@pytest.mark.parametrize(
    ("text", "physical_type", "quantity"),
    [
        ("8.1 kpc", "length", 8.1 * u.kpc),
        ("1 lyr", "length", 1 * u.lyr),
        ("206264.80624709636 au", "length", 206264.80624709636 * u.au),
        ("12 km / s", "speed", 12 * u.km / u.s),
        ("1e3 m/s", "speed", 1e3 * u.m / u.s),
        ("1 arcsec", "angle", 1 * u.arcsec),
        ("250 uas", "angle", 250 * u.uas),
        ("2 deg", "angle", 2 * u.deg),
        ("365.25 d", "time", 365.25 * u.day),
        ("4.3e6 solMass", "mass", 4.3e6 * u.solMass),
        ("1 Msun", "mass", 1 * u.solMass),
        ("5 mas / yr", "angular speed", 5 * u.mas / u.yr),
        ("-3.5 mas", "angle", -3.5 * u.mas),
    ],
)
def test_parse_quantity_converts_like_astropy(text, physical_type, quantity):
    # astropy.units conversion of the same quantity to the internal unit
    expected = quantity.to_value(INTERNAL_UNITS[physical_type])
    got = parse_quantity(text, physical_type, key="some.key")
    assert isinstance(got, float)
    assert got == pytest.approx(expected, rel=1e-14)


def test_parse_quantity_docstring_values():
    # definitions: 1 kpc = 1000 pc, 1 arcsec = 1000 mas
    assert parse_quantity("8.1 kpc", "length", key="k") == pytest.approx(8100.0, rel=1e-15)
    assert parse_quantity("1 arcsec", "angle", key="k") == pytest.approx(1000.0, rel=1e-15)


def _error(text, physical_type="length"):
    with pytest.raises(InputError) as info:
        parse_quantity(text, physical_type, key="distance.prior.mean", where="target.toml")
    err = info.value
    # common practice, no source: one error naming the file and the key
    assert err.file == "target.toml"
    assert err.key == "distance.prior.mean"
    assert str(err).startswith("target.toml, 'distance.prior.mean': ")
    return str(err)


@pytest.mark.parametrize("value", [8.1, 8, np.float64(8.1), True, None, ["8 kpc"], b"8 kpc"])
def test_not_a_string_is_refused(value):
    msg = _error(value)
    assert "expected a quantity string like '1.5 pc'" in msg
    assert repr(value) in msg


@pytest.mark.parametrize("text", ["8.1", "8.1 ", "1e3"])
def test_bare_number_string_is_refused(text):
    msg = _error(text)
    assert "has no unit" in msg
    assert "expected a length such as '1.5 pc'" in msg


@pytest.mark.parametrize(
    ("text", "physical_type", "expected"),
    [
        ("8 km/s", "length", "is not a length (cannot convert km / s to pc)"),
        ("3 kpc", "angle", "is not an angle (cannot convert kpc to mas)"),
        ("1 yr", "mass", "is not a mass"),
        ("1 mas", "angular speed", "is not an angular speed"),
        ("2 Msun", "time", "is not a time"),
    ],
)
def test_wrong_physical_type_is_refused(text, physical_type, expected):
    msg = _error(text, physical_type)
    assert expected in msg


@pytest.mark.parametrize("text", ["eight kpc", "kpc", "", "8 parsnips", "8 kpc kpc kpc)"])
def test_garbage_is_refused(text):
    msg = _error(text)
    assert f"cannot read {text!r} as '<number> <unit>'" in msg


def test_list_is_refused():
    msg = _error("[1, 2] kpc")
    assert "is not one number and a unit" in msg


@pytest.mark.parametrize("text", ["inf pc", "-inf pc", "nan pc", "1e308 Gpc"])
def test_non_finite_is_refused(text):
    # 1e308 Gpc overflows float64 in parsecs (1 Gpc = 1e9 pc)
    msg = _error(text)
    assert msg.endswith("is not finite")


def test_error_without_file_names_the_key_only():
    with pytest.raises(InputError) as info:
        parse_quantity("8", "length", key="--precision")
    assert str(info.value).startswith("'--precision': ")
    assert info.value.file == ""


@pytest.mark.parametrize(
    ("quantity", "physical_type"),
    [(1 * u.arcsec, "angle"), (3 * u.kpc, "length"), (1 * u.Msun, "mass"), (30 * u.day, "time"),
     (1 * u.au / u.yr, "speed"), (1 * u.arcsec / u.yr, "angular speed"), (1 * u.rad, "angle")],
)
def test_to_internal_against_astropy(quantity, physical_type):
    # astropy.units conversion
    got = to_internal(quantity, physical_type)
    assert isinstance(got, float)
    assert got == pytest.approx(quantity.to_value(INTERNAL_UNITS[physical_type]), rel=1e-15)


def test_to_internal_known_values():
    # 1 rad = 648000/pi arcsec (definition); 1 au/yr = 4.74047046353 km/s (references.md)
    assert to_internal(1 * u.rad, "angle") == pytest.approx(648000e3 / math.pi, rel=1e-15)
    assert to_internal(1 * u.au / u.yr, "speed") == pytest.approx(4.74047046353, abs=1e-11)


def test_to_internal_wrong_unit_raises_astropy_error():
    # library use: astropy's own UnitConversionError propagates
    with pytest.raises(u.UnitConversionError):
        to_internal(1 * u.km / u.s, "length")
