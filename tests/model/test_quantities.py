"""Unit tests of orbitmass.model.quantities: the one table of labels, units and display units.

External references:
- the output contract (docs/output-contract.md, fixed: /work/shared/spec/output-contract.md)
  for the keys summary.json must carry;
- astropy.units for every display-unit factor and for the display examples;
- astropy.constants (2 GM/c^2) for Schwarzschild radii of stellar masses;
- matplotlib.mathtext: every math spelling must be valid mathtext.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
import pytest
from astropy import constants as const

from orbitmass.model import quantities as qmod
from orbitmass.model.quantities import (
    COLUMN_PATTERNS,
    QUANTITIES,
    UNITS,
    base_of,
    column_doc,
    display_unit,
    quantity,
)

# unit key of the table -> astropy unit (astropy.units names; yr is the Julian year)
ASTROPY_UNIT = {
    "M_sun": u.solMass, "pc": u.pc, "kpc": u.kpc, "Mpc": u.Mpc, "uas": u.uas, "mas": u.mas,
    "arcsec": u.arcsec, "km": u.km, "au": u.au, "km/s": u.km / u.s, "mas/yr": u.mas / u.yr,
    "uas/yr": u.uas / u.yr, "yr": u.yr, "d": u.day, "Julian yr": u.yr, "deg": u.deg, "rad": u.rad,
}

# Output contract, summary.json: "derived" and per-companion keys that may not be renamed or dropped
CONTRACT_DERIVED = ("mass_msun", "distance_pc")
CONTRACT_COMPANION = ("period_yr", "eccentricity", "inclination_deg", "semimajor_axis_mas",
                      "semimajor_axis_au", "periastron_au", "periastron_rs")

# Sample columns of a relative-frame fit with one companion "S2", central-body velocities and
# instrument "spec-b", and of an absolute-frame fit at a redshift (columns written by
# orbitmass.results.derive_samples at the branch point of this test; the output contract says
# posterior.* holds every sampled and derived quantity)
SAMPLE_COLUMNS = (
    "mass_msun", "distance_pc", "parallax_mas", "schwarzschild_radius_au", "systemic_kms",
    "x0_mas", "y0_mas", "vx0_mas_per_yr", "vy0_mas_per_yr", "vz0_kms",
    "offset_kms.spec-b", "jitter_kms.spec-b",
    "S2.period_yr", "S2.period_obs_yr", "S2.eccentricity", "S2.inclination_deg",
    "S2.arg_periastron_deg", "S2.ascending_node_deg", "S2.mean_anomaly_deg",
    "S2.periastron_time_jyr", "S2.semimajor_axis_mas", "S2.semimajor_axis_au", "S2.periastron_au",
    "S2.periastron_rs", "S2.periastron_speed_kms", "S2.semi_amplitude_kms", "S2.mass_ratio",
    "S2.central_mass_msun", "S2.companion_mass_msun", "S2.A_mas", "S2.B_mas", "S2.F_mas",
    "S2.G_mas", "log_posterior",
)


@pytest.mark.parametrize("key", CONTRACT_DERIVED + CONTRACT_COMPANION)
def test_every_summary_json_key_of_the_contract_has_an_entry(key):
    assert key in QUANTITIES
    q = QUANTITIES[key]
    assert q.key == key and q.label and q.name and q.meaning


@pytest.mark.parametrize("column", SAMPLE_COLUMNS)
def test_every_sample_column_has_an_entry(column):
    q = quantity(column, ["S2"])
    assert q is not None, column
    # the pattern of COLUMN_DOC maps back onto the column
    pattern = COLUMN_PATTERNS[q.key]
    assert pattern.replace("<C>", "S2").replace("<I>", "spec-b") == column


def test_column_doc_covers_the_table():
    doc = column_doc()
    assert len(doc) == len(QUANTITIES)
    for pattern, (label, unit, meaning) in doc.items():
        assert unit in UNITS and label and meaning
        assert pattern in COLUMN_PATTERNS.values()


@pytest.mark.parametrize("key", list(QUANTITIES))
def test_stored_unit_in_the_name_matches_astropy(key):
    # The stored unit is a UNITS key; the unit named in the column key is that unit
    # (common practice, no source: unit-suffixed names).
    q = QUANTITIES[key]
    assert q.unit in UNITS
    suffix_unit = {"_msun": "M_sun", "_pc": "pc", "_mas": "mas", "_au": "au", "_kms": "km/s",
                   "_mas_per_yr": "mas/yr", "_yr": "yr", "_deg": "deg", "_jyr": "Julian yr",
                   "_rs": "R_S", "_arcmin_per_orbit": "arcmin", "_days": "d"}
    for suffix, unit in sorted(suffix_unit.items(), key=lambda kv: -len(kv[0])):
        if key.endswith(suffix):
            assert q.unit == unit, key
            break
    else:
        assert q.unit == "", key  # eccentricity, mass_ratio, log_posterior are bare numbers


@pytest.mark.parametrize("key", [k for k, q in QUANTITIES.items() if q.display])
def test_display_factors_are_astropy_conversions(key):
    # astropy.units: factor = (1 stored unit).to(display unit)
    q = QUANTITIES[key]
    assert q.display[0].above == 0.0  # the first rule catches every magnitude (class docstring)
    aboves = [r.above for r in q.display]
    assert aboves == sorted(aboves)
    for rule in q.display:
        expected = (1 * ASTROPY_UNIT[q.unit]).to_value(ASTROPY_UNIT[rule.unit])
        assert rule.factor == pytest.approx(expected, rel=1e-15), (key, rule.unit)


@pytest.mark.parametrize(
    ("column", "value", "unit_key", "quantity_"),
    [
        ("distance_pc", 46190.0, "kpc", 46190.0 * u.pc),  # 46.19 kpc
        ("distance_pc", 8.1e9, "Mpc", 8.1e9 * u.pc),
        ("distance_pc", 1.3012, "pc", 1.3012 * u.pc),
        ("distance_pc", 1000.0, "kpc", 1000.0 * u.pc),  # the threshold is inclusive
        ("parallax_mas", 0.021649, "uas", 0.021649 * u.mas),  # 21.649 µas
        ("parallax_mas", 768.0665, "mas", 768.0665 * u.mas),
        ("S2.semimajor_axis_mas", 125.1, "mas", 125.1 * u.mas),
        ("S2.semimajor_axis_mas", 0.5, "uas", 0.5 * u.mas),
        ("S2.semimajor_axis_mas", 17493.0, "arcsec", 17493.0 * u.mas),
        ("S2.period_yr", 0.01, "d", 0.01 * u.yr),
        ("S2.period_yr", 16.05, "yr", 16.05 * u.yr),
        ("S2.semimajor_axis_au", 0.005, "km", 0.005 * u.au),
        ("S2.semimajor_axis_au", 1031.3, "au", 1031.3 * u.au),
        ("vx0_mas_per_yr", 0.2, "mas/yr", 0.2 * u.mas / u.yr),  # no display rules: stored unit
    ],
)
def test_display_unit_by_magnitude(column, value, unit_key, quantity_):
    unit, factor = display_unit(column, value, ["S2"])
    assert unit is UNITS[unit_key]
    # displayed value equals astropy's conversion of the stored value
    assert value * factor == pytest.approx(quantity_.to_value(ASTROPY_UNIT[unit_key]), rel=1e-14)


def test_display_examples_as_printed():
    # astropy.units: 46190 pc = 46.19 kpc, 0.021649 mas = 21.649 µas
    unit, f = display_unit("distance_pc", 46190.0)
    assert (unit.text, round(46190.0 * f, 10)) == ("kpc", round((46190 * u.pc).to_value(u.kpc), 10))
    assert round(46190.0 * f, 6) == 46.19
    unit, f = display_unit("parallax_mas", 0.021649)
    assert unit.text == "µas"
    assert round(0.021649 * f, 9) == round((0.021649 * u.mas).to_value(u.uas), 9) == 21.649


@pytest.mark.parametrize("mass_msun", [1.0, 1.4, 10.0, 36.0])
def test_schwarzschild_radius_of_stellar_masses_in_km(mass_msun):
    # astropy.constants: R_S = 2 G M / c^2, about 2.95 km per solar mass
    rs = 2 * const.GM_sun * mass_msun / const.c**2
    rs_au = rs.to_value(u.au)
    unit, factor = display_unit("schwarzschild_radius_au", rs_au)
    assert unit.key == "km"
    assert rs_au * factor == pytest.approx(rs.to_value(u.km), rel=1e-14)


def test_schwarzschild_radius_of_a_massive_black_hole_in_au():
    # astropy.constants: 4e6 Msun gives R_S = 0.079 au, shown in au (above the 0.01 au threshold)
    rs_au = (2 * const.GM_sun * 4.0e6 / const.c**2).to_value(u.au)
    unit, factor = display_unit("schwarzschild_radius_au", rs_au)
    assert unit.key == "au" and factor == 1.0


def test_non_finite_magnitude_uses_the_first_rule():
    for bad in (float("nan"), float("inf"), -float("inf")):
        unit, factor = display_unit("distance_pc", bad)
        assert unit.key == "pc" and factor == 1.0


def test_negative_values_use_their_magnitude():
    unit, _ = display_unit("x0_mas", -2500.0)
    assert unit.key == "mas"  # x0 has no display rules: always the stored unit
    unit, factor = display_unit("distance_pc", -46190.0)
    assert unit.key == "kpc" and factor == pytest.approx(1e-3, rel=1e-15)


def test_override():
    unit, factor = display_unit("distance_pc", 46190.0, override="pc")
    assert unit.key == "pc" and factor == 1.0
    unit, factor = display_unit("distance_pc", 1.0, override="Mpc")
    assert unit.key == "Mpc" and factor == pytest.approx((1 * u.pc).to_value(u.Mpc), rel=1e-15)
    unit, factor = display_unit("eccentricity", 0.88, override="")
    assert unit.key == "" and factor == 1.0
    with pytest.raises(ValueError, match=r"distance_pc cannot be shown in 'deg'; expected one of "
                                         r"Mpc, kpc, pc"):
        display_unit("distance_pc", 46190.0, override="deg")


def test_unknown_column_is_dimensionless():
    assert quantity("not_a_column") is None
    unit, factor = display_unit("not_a_column", 3.0)
    assert unit.key == "" and factor == 1.0


def test_base_of():
    assert base_of("C1.period_yr", ["C1"]) == "period_yr"
    assert base_of("offset_kms.spec-b", ["C1"]) == "offset_kms"
    assert base_of("mass_msun", ["C1"]) == "mass_msun"
    assert base_of("S 2.eccentricity", ["S 2"]) == "eccentricity"  # names may hold spaces
    # without companion names: a head that is no quantity is taken as a companion prefix
    assert base_of("C1.period_yr") == "period_yr"
    assert base_of("jitter_kms.spec-b") == "jitter_kms"


def test_unit_spellings():
    # the solar-mass unit is spelt M☉ wherever a reader sees it (module docstring)
    assert UNITS["M_sun"].text == "M☉"
    assert "☉" in UNITS["M_sun"].html
    assert UNITS["uas"].text == "µas"
    for key, unit in UNITS.items():
        assert unit.key == key


def _parses_as_mathtext(text):
    from matplotlib.mathtext import MathTextParser

    MathTextParser("path").parse(text)


@pytest.mark.parametrize("key", [k for k in UNITS if k])
def test_unit_math_and_latex_are_valid_mathtext(key):
    # matplotlib.mathtext parses the figure spelling and the $-delimited LaTeX spelling
    unit = UNITS[key]
    _parses_as_mathtext(f"${unit.math}$")
    if "$" in unit.latex:
        _parses_as_mathtext(unit.latex.replace(r"\,", " "))


@pytest.mark.parametrize("key", list(QUANTITIES))
def test_symbols_are_valid_mathtext(key):
    # Quantity.latex is documented as "LaTeX math symbol (also valid mathtext)"
    _parses_as_mathtext(f"${QUANTITIES[key].latex}$")


def test_conversion_constants():
    # IAU 2012 Resolution B2: 1 au = 149 597 870.7 km; IAU Julian year 365.25 d (astropy)
    assert qmod.AU_KM == (1 * u.au).to_value(u.km)
    assert qmod.JULIAN_YEAR_D == (1 * u.yr).to_value(u.day)


def test_formats_are_valid():
    # every fmt is a valid format spec for a float (Python format mini-language)
    for q in QUANTITIES.values():
        assert isinstance(format(np.float64(1234.5678), q.fmt), str)
