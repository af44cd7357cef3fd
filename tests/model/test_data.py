"""Unit tests of orbitmass.model.data: the frozen data containers and the name check.

External references:
- astropy.coordinates (SkyCoord.directional_offset_by / spherical_offsets_to) for the
  position-angle convention of polar rows (north through east);
- Python's unicodedata (Unicode general categories) for the name rule;
- first-order error propagation of (rho, theta) -> (east, north) (common practice, no source).
"""

from __future__ import annotations

import dataclasses

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord

from orbitmass.model.data import (
    NAME_MAX_LENGTH,
    NAME_PUNCTUATION,
    Astrometry,
    Companion,
    Distance,
    ExtendedMass,
    FitOptions,
    Instrument,
    Relativity,
    Target,
    Velocities,
    name_problem,
)
from orbitmass.model.priors import Fixed, Normal, Uniform


def _astrometry(polar=(False, True, True)):
    n = len(polar)
    return Astrometry(
        t_yr=np.linspace(2000.0, 2010.0, n),
        polar=np.array(polar, dtype=bool),
        value1=np.array([10.0, 120.0, 80.0][:n]),
        value2=np.array([-5.0, 30.0, 250.0][:n]),
        err1=np.array([0.2, 0.5, 0.4][:n]),
        err2=np.array([0.3, 0.25, 0.1][:n]),
        corr=np.zeros(n),
        source="pos.csv",
        lines=np.arange(2, 2 + n, dtype=np.int64),
    )


def _velocities():
    return Velocities(
        t_yr=np.array([2001.0, 2002.0, 2003.0]),
        rv_kms=np.array([-100.0, 50.0, 12.0]),
        rv_err_kms=np.array([10.0, 10.0, 0.5]),
        instrument=np.array(["spec-a", "spec-a", "spec-b"]),
        central=np.array([False, False, True]),
        source="rv.csv",
    )


def test_astrometry_construction_and_length():
    a = _astrometry()
    assert len(a) == 3
    assert a.source == "pos.csv"
    assert list(a.lines) == [2, 3, 4]


@pytest.mark.parametrize("name", ["t_yr", "polar", "value1", "value2", "err1", "err2", "corr"])
def test_astrometry_arrays_are_read_only(name):
    a = _astrometry()
    arr = getattr(a, name)
    assert not arr.flags.writeable
    with pytest.raises(ValueError, match="read-only"):
        arr[0] = arr[1]


@pytest.mark.parametrize("name", ["t_yr", "rv_kms", "rv_err_kms", "instrument", "central"])
def test_velocity_arrays_are_read_only(name):
    v = _velocities()
    arr = getattr(v, name)
    assert not arr.flags.writeable
    with pytest.raises(ValueError, match="read-only"):
        arr[0] = arr[1]


@pytest.mark.parametrize(
    "make",
    [_astrometry, _velocities, lambda: Distance(), lambda: Relativity(), lambda: FitOptions(),
     lambda: Instrument("spec-a", Fixed(0.0), Fixed(0.0)),
     lambda: ExtendedMass(Uniform(0.0, 0.1), scale_radius_mas=5.0)],
)
def test_containers_are_frozen(make):
    obj = make()
    field = dataclasses.fields(obj)[0].name
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(obj, field, None)


def test_default_lines_is_empty():
    a = Astrometry(*(np.zeros(1) for _ in range(2)), *(np.ones(1) for _ in range(5)))
    assert a.lines.size == 0 and a.lines.dtype == np.int64
    assert a.source == ""


def test_polar_rows_follow_the_position_angle_convention():
    # astropy.coordinates: offset a point by separation rho at position angle theta (north
    # through east) and read back the (east = dRA cos dec, north = dDec) offsets; for these
    # small angles (<= 120 mas) the tangent-plane and spherical offsets agree to < 1e-9 mas.
    a = _astrometry()
    east, north = a.east_north()
    centre = SkyCoord(ra=266.4 * u.deg, dec=-29.0 * u.deg)
    for k in range(len(a)):
        if not a.polar[k]:
            assert (east[k], north[k]) == (a.value1[k], a.value2[k])  # Cartesian rows unchanged
            continue
        moved = centre.directional_offset_by(a.value2[k] * u.deg, a.value1[k] * u.mas)
        d_east, d_north = centre.spherical_offsets_to(moved)
        assert east[k] == pytest.approx(d_east.to_value(u.mas), abs=1e-6)
        assert north[k] == pytest.approx(d_north.to_value(u.mas), abs=1e-6)


def test_polar_errors_by_first_order_propagation():
    # common practice, no source: J = d(east, north)/d(rho, theta); cov = J diag(s_rho^2, s_theta^2) J^T,
    # and the plotting errors are the square roots of its diagonal
    a = _astrometry()
    e_err, n_err = a.east_north_errors()
    assert (e_err[0], n_err[0]) == (a.err1[0], a.err2[0])
    for k in (1, 2):
        rho, theta = a.value1[k], np.deg2rad(a.value2[k])
        jac = np.array([[np.sin(theta), rho * np.cos(theta)], [np.cos(theta), -rho * np.sin(theta)]])
        cov = jac @ np.diag([a.err1[k] ** 2, np.deg2rad(a.err2[k]) ** 2]) @ jac.T
        assert e_err[k] == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-13)
        assert n_err[k] == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-13)


def test_companion_velocity_flags():
    v = _velocities()
    with_central = Companion("S2", None, v, {"period": Uniform(1.0, 100.0)})
    assert with_central.has_velocities and with_central.has_central_velocities
    only_companion = dataclasses.replace(v, central=np.zeros(3, dtype=bool))
    c = Companion("S2", None, only_companion, {})
    assert c.has_velocities and not c.has_central_velocities
    none = Companion("S2", _astrometry(), None, {})
    assert not none.has_velocities and not none.has_central_velocities
    empty = Velocities(*(np.zeros(0) for _ in range(3)), np.zeros(0, dtype=str), np.zeros(0, dtype=bool))
    assert not Companion("S2", None, empty, {}).has_velocities
    assert none.plane is None


def test_distance_describe():
    assert Distance().describe() == "no distance information"
    assert Distance(parallax=Fixed(2.0)).describe() == "parallax fixed at 2 mas"
    text = Distance(prior=Normal(8100.0, 50.0)).describe()
    assert text == "distance normal(mean 8100 pc, sd 50 pc)"
    text = Distance(redshift=0.0123).describe()
    assert text == "redshift 0.0123 (Planck18)"
    both = Distance(prior=Uniform(10.0, 20.0), redshift=1.5, cosmology="flat-lcdm:H0=70,Om0=0.3")
    assert both.describe() == "distance uniform on [10 pc, 20 pc], redshift 1.5 (flat-lcdm:H0=70,Om0=0.3)"


def test_relativity_defaults_are_newtonian():
    r = Relativity()
    assert r.redshift_factor == Fixed(0.0) and r.precession_factor == Fixed(0.0)
    assert r.roemer_delay is False


def test_fit_options():
    assert FitOptions().as_fit_kwargs() == {}
    assert FitOptions(walkers=64, seed=3).as_fit_kwargs() == {"n_walkers": 64, "seed": 3}
    assert FitOptions(max_steps=5000, seed=0).as_fit_kwargs() == {"seed": 0, "max_steps": 5000}


def test_target_defaults():
    t = Target(name="invented nucleus", reference_epoch=2010.0, frame="relative",
               central_priors={"mass": Uniform(1e5, 1e8)}, distance=Distance(parallax=Fixed(0.125)),
               instruments={}, companions=(Companion("S2", _astrometry(), None, {}),))
    assert t.relativity is None and t.extended_mass is None
    assert t.fit_options == FitOptions()
    assert t.source == "" and t.data_sha256 == ""
    with pytest.raises(dataclasses.FrozenInstanceError):
        t.name = "other"


# name rule: Unicode general categories L (letters), M (marks), N (numbers) via unicodedata
@pytest.mark.parametrize(
    "name",
    ["S2", "S2-a", "Ωμέγα 1", "star_7", "IRS 16SW", "B+12", "#3", "北斗", "e\u0301", "x" * NAME_MAX_LENGTH,
     "٣"],  # Arabic-Indic digit three (category Nd)
)
def test_valid_names(name):
    assert name_problem(name) is None


@pytest.mark.parametrize(
    ("name", "message"),
    [
        ("", "is empty"),
        ("x" * (NAME_MAX_LENGTH + 1), f"has {NAME_MAX_LENGTH + 1} characters; names have at most {NAME_MAX_LENGTH}"),
        (" S2", "starts or ends with a blank"),
        ("S2 ", "starts or ends with a blank"),
        ("S2.a", "contains '.'; names may use letters, digits, spaces and - _ + # only"),
        ("S2/a", "contains '/'"),
        ('S"2', "contains '\"'"),
        ("S$2", "contains '$'"),
        ("S\t2", "contains U+0009 (a control character)"),
        ("S\u00a02", "contains U+00A0 (no-break space)"),
        ("S2\u200b", "contains U+200B (zero width space)"),
        ("--", "has no letter or digit"),
        ("# +", "has no letter or digit"),
    ],
)
def test_invalid_names(name, message):
    problem = name_problem(name)
    assert problem is not None and problem.startswith(message)


def test_name_punctuation_documented():
    assert NAME_PUNCTUATION == " -_+#"
