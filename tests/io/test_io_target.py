"""Tests of orbitmass.io.target: target files (TOML) and the priors they produce.

External references used:
- astropy.units for unit conversions (deg -> rad, uas -> mas, kpc -> pc, day -> Julian year);
- hashlib (FIPS 180-4 SHA-256) for the data checksum;
- astropy.cosmology.realizations for the cosmology names.
"""

from __future__ import annotations

import hashlib
import math
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from orbitmass.exceptions import InputError
from orbitmass.io.target import read_target
from orbitmass.model.data import Target
from orbitmass.model.priors import FAMILIES, Fixed, Isotropic, LogUniform, Normal, TruncNormal, Uniform

POS = "jyear,east_mas,north_mas,east_err_mas,north_err_mas\n2018,1,2,0.1,0.1\n2020,2,3,0.1,0.1\n"
RV = "jyear,rv_kms,rv_err_kms\n2019,10,1\n2023,12,1\n"
DIST = '[distance]\nprior = { dist = "normal", mean = "8.0 kpc", sd = "0.3 kpc" }\n'
COMP = '[[companion]]\nname = "C1"\nastrometry = "pos.csv"\nvelocities = "rv.csv"\n'


def make(tmp_path: Path, toml: str, tables: dict[str, str] | None = None) -> Path:
    """Write a target file and its tables (default: pos.csv and rv.csv) into tmp_path."""
    for name, text in ({"pos.csv": POS, "rv.csv": RV} if tables is None else tables).items():
        (tmp_path / name).write_text(text, encoding="utf-8")
    path = tmp_path / "target.toml"
    path.write_text(toml, encoding="utf-8")
    return path


def fails(path: Path, *, key: str | None = None, line: int | None = None,
          file: Path | None = None, words: tuple[str, ...] = ()) -> InputError:
    """Assert read_target raises one InputError naming the file and the key or line."""
    with pytest.raises(InputError) as info:
        read_target(path)
    err = info.value
    message = str(err)
    expected_file = str(file if file is not None else path)
    assert err.file == expected_file
    assert expected_file in message
    if key is not None:
        assert err.key == key
        assert f"'{key}'" in message
    if line is not None:
        assert err.line == line
        assert f"{expected_file}:{line}" in message
    for w in words:
        assert w in message, message
    return err


# --------------------------------------------------------------------------- valid files


def test_minimal_target_defaults(tmp_path):
    t = read_target(make(tmp_path, DIST + COMP))
    assert isinstance(t, Target)
    assert t.name == "target"
    assert t.frame == "relative"
    # input-format.md, default-prior table: the systemic velocity is sampled, uniform +-1000 km/s,
    # whenever the target has velocities
    assert t.central_priors == {"mass": LogUniform(1e-3, 1e11), "systemic": Uniform(-1000.0, 1000.0)}
    (c,) = t.companions
    assert c.name == "C1" and c.plane is None
    day_in_yr = (1 * u.day).to_value(u.yr)  # astropy: Julian year of 365.25 d
    assert day_in_yr == pytest.approx(1 / 365.25, rel=1e-15)
    assert c.priors == {
        "period": LogUniform(pytest.approx(day_in_yr, rel=1e-15), 1e4),
        "eccentricity": Uniform(0.0, 1.0),
        "inclination": Isotropic(),
        "arg_periastron": Uniform(0.0, 2 * math.pi),
        "ascending_node": Uniform(0.0, 2 * math.pi),
        "mean_anomaly": Uniform(0.0, 2 * math.pi),
    }
    assert list(t.instruments) == ["default"]
    assert t.instruments["default"].offset == Fixed(0.0)
    assert t.instruments["default"].jitter == Fixed(0.0)
    assert t.distance.prior == Normal(8000.0, 300.0)  # 1 kpc = 1000 pc
    assert t.distance.parallax is None and t.distance.redshift is None
    assert t.source == str(tmp_path / "target.toml")
    assert c.astrometry.source == str(tmp_path / "pos.csv")


def test_reference_epoch_default_is_mean_of_all_epochs(tmp_path):
    t = read_target(make(tmp_path, DIST + COMP))
    assert t.reference_epoch == pytest.approx((2018 + 2020 + 2019 + 2023) / 4, rel=1e-15)
    t2 = read_target(make(tmp_path, '[target]\nname = "X"\nreference_epoch = 2021.5\n'
                          + DIST + COMP))
    assert (t2.name, t2.reference_epoch) == ("X", 2021.5)


def test_reference_epoch_mean_over_companions(tmp_path):
    toml = DIST + '[[companion]]\nname = "A"\nastrometry = "pos.csv"\n' \
        '[[companion]]\nname = "B"\nvelocities = "rv.csv"\n'
    t = read_target(make(tmp_path, toml))
    assert [c.name for c in t.companions] == ["A", "B"]
    assert t.companions[0].velocities is None and t.companions[1].astrometry is None
    assert t.reference_epoch == pytest.approx(2020.0, rel=1e-15)
    assert t.instruments["default"].offset == Fixed(0.0)


def test_absolute_frame_defaults(tmp_path):
    toml = ('[central]\nframe = "absolute"\n'
            'x0 = { dist = "normal", mean = "0 mas", sd = "2 mas" }\n'
            'vx0 = { dist = "normal", mean = "0.5 mas / yr", sd = "0.25 mas / yr" }\n'
            'vz0 = { dist = "normal", mean = "0 km / s", sd = "10000 m / s" }\n' + DIST + COMP)
    t = read_target(make(tmp_path, toml))
    assert t.frame == "absolute"
    assert t.central_priors == {
        "mass": LogUniform(1e-3, 1e11),
        "x0": Normal(0.0, 2.0),
        "y0": Uniform(-1e4, 1e4),
        "vx0": Normal(0.5, 0.25),
        "vy0": Uniform(-1e3, 1e3),
        "vz0": Normal(0.0, 10.0),
    }


def test_given_priors_in_other_units(tmp_path):
    toml = ('[central]\nmass = { dist = "uniform", low = "1e6 solMass", high = "1e7 solMass" }\n'
            + DIST + COMP
            + 'period = { dist = "truncnormal", mean = "365.25 d", sd = "1 yr", low = "0.5 yr", '
              'high = "2 yr" }\n'
              'eccentricity = { dist = "uniform", low = 0, high = 0.5 }\n'
              'inclination = { dist = "normal", mean = "30 deg", sd = "1800 arcsec" }\n'
              'ascending_node = { dist = "fixed", value = "1 rad" }\n'
              'arg_periastron = { dist = "uniform", low = "-180 deg", high = "180 deg" }\n'
              'periastron_time = { dist = "normal", mean = 2019.5, sd = 0.5 }\n')
    t = read_target(make(tmp_path, toml))
    assert t.central_priors["mass"] == Uniform(1e6, 1e7)
    p = t.companions[0].priors
    assert p["period"] == TruncNormal(1.0, 1.0, 0.5, 2.0)
    assert p["eccentricity"] == Uniform(0.0, 0.5)
    # angles in radians: compare with astropy deg -> rad
    rad30 = (30 * u.deg).to_value(u.rad)
    assert p["inclination"].mean == pytest.approx(rad30, rel=1e-14)
    assert p["inclination"].sd == pytest.approx((0.5 * u.deg).to_value(u.rad), rel=1e-14)
    assert p["inclination"].mean == pytest.approx(math.pi / 6, rel=1e-14)
    assert p["ascending_node"].value == pytest.approx(1.0, rel=1e-14)
    assert p["arg_periastron"].low == pytest.approx(-math.pi, rel=1e-14)
    assert p["periastron_time"] == Normal(2019.5, 0.5)
    assert "mean_anomaly" not in p


def test_orientation_angles_converted_by_astropy(tmp_path):
    toml = DIST + COMP + ('inclination = { dist = "fixed", value = "180 deg" }\n'
                          'mean_anomaly = { dist = "uniform", low = "0 deg", high = "360 deg" }\n'
                          'ascending_node = { dist = "uniform", low = "0 rad", high = "1 rad" }\n')
    p = read_target(make(tmp_path, toml)).companions[0].priors
    # astropy deg -> rad: 180 deg is pi and 360 deg is 2 pi to the last bit
    assert p["inclination"] == Fixed((180 * u.deg).to_value(u.rad)) == Fixed(math.pi)
    assert p["mean_anomaly"] == Uniform(0.0, 2 * math.pi)
    assert p["ascending_node"] == Uniform(0.0, 1.0)


def test_parallax_versus_distance_prior(tmp_path):
    toml = '[distance]\nparallax = { dist = "normal", mean = "125 uas", sd = "4 uas" }\n' + COMP
    t = read_target(make(tmp_path, toml))
    assert t.distance.prior is None
    # 1 uas = 1e-3 mas (astropy)
    assert t.distance.parallax.mean == pytest.approx((125 * u.uas).to_value(u.mas), rel=1e-14)
    assert t.distance.parallax.sd == pytest.approx(0.004, rel=1e-14)
    t2 = read_target(make(tmp_path, '[distance]\nprior = { dist = "uniform", low = "1 kpc", '
                          'high = "20 kpc" }\nredshift = 0.0021\n' + COMP))
    assert t2.distance == type(t2.distance)(prior=Uniform(1000.0, 20000.0), redshift=0.0021,
                                            cosmology="Planck18")


def test_redshift_alone(tmp_path):
    t = read_target(make(tmp_path, '[distance]\nredshift = 0.05\ncosmology = "WMAP9"\n' + COMP))
    assert (t.distance.prior, t.distance.parallax) == (None, None)
    assert (t.distance.redshift, t.distance.cosmology) == (0.05, "WMAP9")


def test_multiple_instruments(tmp_path):
    rv = ("jyear,rv_ms,rv_err_ms,instrument\n2019,1000,100,spec-b\n2020,1100,100,spec-a\n"
          "2021,900,100,spec-c\n")
    toml = (DIST + '[instruments.spec-b]\njitter = { dist = "log-uniform", low = "1 m / s", '
            'high = "5 km / s" }\n[instruments.spec-a]\n'
            '[instruments.spec-c]\noffset = { dist = "normal", mean = "0 km / s", '
            'sd = "5 km / s" }\n'
            '[instruments.unused]\n'
            '[[companion]]\nname = "C1"\nvelocities = "rv.csv"\n')
    t = read_target(make(tmp_path, toml, {"rv.csv": rv}))
    assert list(t.instruments) == ["spec-b", "spec-a", "spec-c", "unused"]  # declaration order
    b, a, c, unused = t.instruments.values()
    assert b.offset == Fixed(0.0)  # the first declared is the zero point
    assert b.jitter == LogUniform(0.001, 5.0)
    assert a.offset == Uniform(-100.0, 100.0) and a.jitter == Fixed(0.0)
    assert c.offset == Normal(0.0, 5.0)
    assert unused.offset == Uniform(-100.0, 100.0)
    assert list(t.companions[0].velocities.instrument) == ["spec-b", "spec-a", "spec-c"]


def test_unused_first_instrument_is_not_the_zero_point(tmp_path):
    toml = DIST + "[instruments.spare]\n[instruments.spec-a]\n" + COMP
    rv = "jyear,rv_kms,rv_err_kms,instrument\n2020,1,1,spec-a\n"
    t = read_target(make(tmp_path, toml, {"pos.csv": POS, "rv.csv": rv}))
    assert list(t.instruments) == ["spare", "spec-a"]
    assert t.instruments["spec-a"].offset == Fixed(0.0)
    assert t.instruments["spare"].offset == Uniform(-100.0, 100.0)


def test_declared_default_instrument_gives_priors(tmp_path):
    toml = DIST + '[instruments.default]\noffset = { dist = "normal", mean = "1 km / s", ' \
        'sd = "1 km / s" }\n' + COMP
    t = read_target(make(tmp_path, toml))
    assert t.instruments["default"].offset == Normal(1.0, 1.0)


def test_implicit_default_comes_after_declared(tmp_path):
    rv2 = "jyear,rv_kms,rv_err_kms,instrument\n2020,1,1,spec-a\n"
    toml = (DIST + "[instruments.spec-a]\n" + COMP
            + '[[companion]]\nname = "C2"\nvelocities = "rv2.csv"\n')
    t = read_target(make(tmp_path, toml, {"pos.csv": POS, "rv.csv": RV, "rv2.csv": rv2}))
    assert list(t.instruments) == ["spec-a", "default"]
    assert t.instruments["spec-a"].offset == Fixed(0.0)
    assert t.instruments["default"].offset == Uniform(-100.0, 100.0)


def test_central_rows_make_mass_ratio_appear(tmp_path):
    rv = "jyear,rv_kms,rv_err_kms,body\n2019,10,1,companion\n2020,-1,1,central\n"
    t = read_target(make(tmp_path, DIST + COMP, {"pos.csv": POS, "rv.csv": rv}))
    assert t.companions[0].priors["mass_ratio"] == Uniform(0.0, 1.0)
    assert t.companions[0].has_central_velocities
    given_q = COMP + 'mass_ratio = { dist = "log-uniform", low = 1e-3, high = 0.1 }\n'
    t2 = read_target(make(tmp_path, DIST + given_q, {"pos.csv": POS, "rv.csv": rv}))
    assert t2.companions[0].priors["mass_ratio"] == LogUniform(1e-3, 0.1)
    t3 = read_target(make(tmp_path, DIST + COMP))  # companion rows only: a test particle
    assert "mass_ratio" not in t3.companions[0].priors


def test_circular_orbit_holds_arg_periastron(tmp_path):
    toml = DIST + COMP + 'eccentricity = { dist = "fixed", value = 0 }\n'
    p = read_target(make(tmp_path, toml)).companions[0].priors
    assert p["eccentricity"] == Fixed(0.0) and p["arg_periastron"] == Fixed(0.0)


def test_shared_plane(tmp_path):
    toml = (DIST + COMP + 'plane = "disk"\ninclination = { dist = "uniform", low = "10 deg", '
            'high = "20 deg" }\n[[companion]]\nname = "C2"\nastrometry = "pos.csv"\n'
            'plane = "disk"\n[[companion]]\nname = "C3"\nastrometry = "pos.csv"\n')
    t = read_target(make(tmp_path, toml))
    c1, c2, c3 = t.companions
    assert c1.plane == c2.plane == "disk" and c3.plane is None
    assert c2.priors["inclination"] == c1.priors["inclination"]
    assert c1.priors["inclination"].low == pytest.approx(math.radians(10), rel=1e-14)
    assert c3.priors["inclination"] == Isotropic()


def test_data_checksum(tmp_path):
    path = make(tmp_path, DIST + COMP + '[[companion]]\nname = "C2"\nvelocities = "rv2.csv"\n',
                {"pos.csv": POS, "rv.csv": RV, "rv2.csv": RV + "2024,1,1\n"})
    expected = hashlib.sha256(path.read_bytes() + POS.encode() + RV.encode()
                              + (RV + "2024,1,1\n").encode()).hexdigest()  # FIPS 180-4
    before = {f.name: (f.read_bytes(), f.stat().st_mtime_ns) for f in tmp_path.iterdir()}
    assert read_target(path).data_sha256 == expected
    # reading leaves the user's folder as it was: no file changed, added or removed
    assert {f.name: (f.read_bytes(), f.stat().st_mtime_ns) for f in tmp_path.iterdir()} == before


def test_paths_relative_to_target(tmp_path, monkeypatch):
    sub = tmp_path / "deep"
    sub.mkdir()
    path = make(sub, '[fit]\nwalkers = 64\n' + DIST + COMP)
    monkeypatch.chdir(tmp_path)
    t = read_target(Path("deep") / "target.toml")
    assert t.companions[0].astrometry.source == str(Path("deep") / "pos.csv")
    assert len(t.companions[0].astrometry) == 2
    assert read_target(path).data_sha256 == t.data_sha256


# --------------------------------------------------------------------------- bad input


def test_unknown_prior_dist(tmp_path):
    path = make(tmp_path, DIST + COMP + 'period = { dist = "gaussian", mean = "1 yr", '
                'sd = "1 d" }\n')
    err = fails(path, key="companion[0].period.dist", words=("'gaussian'",))
    for name in FAMILIES:
        if name != "isotropic":
            assert name in str(err)


def test_isotropic_only_for_inclination(tmp_path):
    path = make(tmp_path, DIST + COMP + 'ascending_node = { dist = "isotropic" }\n')
    fails(path, key="companion[0].ascending_node.dist", words=("inclination only",))


def test_undeclared_instrument(tmp_path):
    rv = "jyear,rv_kms,rv_err_kms,instrument\n# c\n2021,1,1,spec-a\n2019,1,1,spec-x\n"
    path = make(tmp_path, DIST + "[instruments.spec-a]\n" + COMP, {"pos.csv": POS, "rv.csv": rv})
    err = fails(path, file=tmp_path / "rv.csv", line=4, words=("'spec-x'", "not declared",
                                                               "[instruments.spec-x]"))
    assert err.key == "instrument"


def test_companion_without_data(tmp_path):
    path = make(tmp_path, DIST + COMP + '[[companion]]\nname = "C2"\nplane = "p"\n')
    fails(path, key="companion[1]", words=("no data",))


def test_low_not_below_high(tmp_path):
    path = make(tmp_path, DIST + COMP + 'period = { dist = "uniform", low = "2 yr", '
                'high = "365.25 d" }\n')
    fails(path, key="companion[0].period.low", words=("below high",))
    path = make(tmp_path, '[central]\nmass = { dist = "log-uniform", low = "1 solMass", '
                'high = "1 solMass" }\n' + DIST + COMP)
    fails(path, key="central.mass.low")


def test_prior_and_parallax_both(tmp_path):
    path = make(tmp_path, DIST + 'parallax = { dist = "fixed", value = "1 mas" }\n' + COMP)
    fails(path, key="distance.parallax", words=("not both",))


def test_bare_number_where_unit_required(tmp_path):
    path = make(tmp_path, DIST + COMP + 'period = { dist = "uniform", low = 1, high = "2 yr" }\n')
    fails(path, key="companion[0].period.low")
    path = make(tmp_path, DIST + COMP + '[[companion]]\nname = "C2"\nastrometry = "pos.csv"\n'
                'inclination = { dist = "normal", mean = 30, sd = "1 deg" }\n')
    fails(path, key="companion[1].inclination.mean")


def test_unit_where_bare_number_required(tmp_path):
    path = make(tmp_path, DIST + COMP + 'eccentricity = { dist = "uniform", low = "0 deg", '
                'high = 1 }\n')
    fails(path, key="companion[0].eccentricity.low", words=("bare number",))


def test_wrong_physical_type(tmp_path):
    path = make(tmp_path, DIST + COMP + 'period = { dist = "uniform", low = "1 kpc", '
                'high = "2 yr" }\n')
    fails(path, key="companion[0].period.low", words=("not a time",))


@pytest.mark.parametrize("sd", ['"0 kpc"', '"-1 kpc"'])
def test_non_positive_sd(tmp_path, sd):
    path = make(tmp_path, f'[distance]\nprior = {{ dist = "normal", mean = "8 kpc", sd = {sd} }}\n'
                + COMP)
    fails(path, key="distance.prior.sd", words=("positive",))


def test_log_uniform_needs_positive_low(tmp_path):
    path = make(tmp_path, DIST + COMP + 'period = { dist = "log-uniform", low = "0 yr", '
                'high = "2 yr" }\n')
    fails(path, key="companion[0].period.low", words=("low > 0",))


def test_missing_and_unknown_prior_keys(tmp_path):
    path = make(tmp_path, DIST + COMP + 'period = { dist = "normal", mean = "1 yr" }\n')
    fails(path, key="companion[0].period.sd", words=("missing",))
    path = make(tmp_path, DIST + COMP + 'period = { dist = "fixed", value = "1 yr", sd = 1 }\n')
    fails(path, key="companion[0].period.sd", words=("unknown key",))
    path = make(tmp_path, DIST + COMP + 'period = "1 yr"\n')
    fails(path, key="companion[0].period", words=("inline table",))


def test_unknown_keys_are_typos(tmp_path):
    fails(make(tmp_path, DIST + COMP + 'perod = { dist = "fixed", value = "1 yr" }\n'),
          key="companion[0].perod", words=("unknown key",))
    fails(make(tmp_path, "[targett]\n" + DIST + COMP), key="targett")
    fails(make(tmp_path, '[target]\nepoch = 2020.0\n' + DIST + COMP), key="target.epoch")
    fails(make(tmp_path, '[instruments.a]\nofset = { dist = "fixed", value = "0 km/s" }\n' + DIST
               + COMP), key="instruments.a.ofset")


def test_toml_syntax_error_names_line(tmp_path):
    path = make(tmp_path, DIST + COMP + "period = { dist = 'fixed', value = \n")
    fails(path, line=7, words=("TOML",))  # DIST: 2 lines, COMP: 4 lines, then the bad one


def test_distance_problems(tmp_path):
    fails(make(tmp_path, COMP), key="distance", words=("missing [distance]",))
    fails(make(tmp_path, "[distance]\n" + COMP), key="distance", words=("no distance",))
    fails(make(tmp_path, '[distance]\nredshift = 0.1\ncosmology = "Planck99"\n' + COMP),
          key="distance.cosmology", words=("Planck18", "WMAP9"))
    fails(make(tmp_path, '[distance]\nredshift = "0.1"\n' + COMP), key="distance.redshift")
    fails(make(tmp_path, '[distance]\nredshift = -0.001\n' + COMP), key="distance.redshift",
          words=("> 0",))
    fails(make(tmp_path, DIST + 'redshift = -1.5\n' + COMP), key="distance.redshift")
    fails(make(tmp_path, DIST + 'redshift = nan\n' + COMP), key="distance.redshift")
    fails(make(tmp_path, DIST + 'cosmology = "WMAP9"\n' + COMP), key="distance.cosmology")
    fails(make(tmp_path, '[distance]\nprior = { dist = "fixed", value = "0 pc" }\n' + COMP),
          key="distance.prior", words=("outside",))


def test_blueshift_with_distance_prior_is_fine(tmp_path):
    t = read_target(make(tmp_path, DIST + "redshift = -0.001\n" + COMP))
    assert t.distance.redshift == -0.001


def test_frame_problems(tmp_path):
    fails(make(tmp_path, '[central]\nframe = "galactic"\n' + DIST + COMP), key="central.frame")
    fails(make(tmp_path, '[central]\nx0 = { dist = "fixed", value = "0 mas" }\n' + DIST + COMP),
          key="central.x0", words=("absolute",))
    fails(make(tmp_path, '[central]\nframe = "absolute"\nsystemic = { dist = "fixed", '
               'value = "0 km/s" }\n' + DIST + COMP), key="central.systemic", words=("vz0",))


def test_table_not_found(tmp_path):
    path = make(tmp_path, DIST + COMP, {"pos.csv": POS})
    fails(path, file=tmp_path / "rv.csv", words=("not found", "companion[0].velocities"))


def test_table_error_propagates_with_line(tmp_path):
    path = make(tmp_path, DIST + COMP, {"pos.csv": POS + "2021,1,1,0,1\n", "rv.csv": RV})
    fails(path, file=tmp_path / "pos.csv", line=4, key="east_err_mas")


def test_companion_level_conflicts(tmp_path):
    both = COMP + ('mean_anomaly = { dist = "uniform", low = "0 deg", high = "90 deg" }\n'
                   'periastron_time = { dist = "fixed", value = 2020.0 }\n')
    fails(make(tmp_path, DIST + both), key="companion[0].periastron_time")
    q = COMP + 'mass_ratio = { dist = "uniform", low = 0, high = 0.5 }\n'
    fails(make(tmp_path, DIST + q), key="companion[0].mass_ratio", words=("body = central",))
    fails(make(tmp_path, DIST + COMP + COMP), key="companion[1].name", words=("twice",))
    fails(make(tmp_path, DIST + COMP + 'eccentricity = { dist = "fixed", value = 1.0 }\n'),
          key="companion[0].eccentricity", words=("outside",))
    circ = COMP + ('eccentricity = { dist = "fixed", value = 0 }\n'
                   'arg_periastron = { dist = "uniform", low = "0 deg", high = "90 deg" }\n')
    fails(make(tmp_path, DIST + circ), key="companion[0].arg_periastron", words=("undefined",))
    plane = (COMP + 'plane = "d"\ninclination = { dist = "fixed", value = "10 deg" }\n'
             + COMP.replace("C1", "C2") + 'plane = "d"\n'
             'inclination = { dist = "fixed", value = "20 deg" }\n')
    fails(make(tmp_path, DIST + plane), key="companion[1].inclination", words=("'d'",))


def test_companion_table_shapes(tmp_path):
    fails(make(tmp_path, DIST), key="companion", words=("no companion",))
    fails(make(tmp_path, DIST + '[companion]\nname = "C1"\nastrometry = "pos.csv"\n'),
          key="companion", words=("[[companion]]",))
    fails(make(tmp_path, DIST + COMP.replace('"pos.csv"', "3")), key="companion[0].astrometry")
    fails(make(tmp_path, "target = 5\n" + DIST + COMP), key="target")


def test_target_file_not_found_binary_or_not_utf8(tmp_path):
    fails(tmp_path / "nope.toml", words=("not found",))
    bad = tmp_path / "bin.toml"
    bad.write_bytes(b"[distance]\n\x00\x01")
    fails(bad, line=2, words=("binary",))
    bad.write_bytes(b"[target]\nname = \"\xe9\"\n")
    fails(bad, line=2, words=("UTF-8",))


# --------------------------------------------------------------------------- properties

PRIOR_TEXT = st.sampled_from([
    '{ dist = "uniform", low = "1 yr", high = "2 yr" }', '{ dist = "isotropic" }',
    '{ dist = "fixed", value = 0 }', '{ dist = "normal", mean = "1 deg", sd = "-1 deg" }',
    '{ dist = "log-uniform", low = 1, high = 2 }', '{ dist = "truncnormal" }', '"3 kpc"',
    '{ dist = "fixed", value = "1 mas" }', "[1, 2]", "nan", "true", '{ }', '"x"'])
KEYS = st.sampled_from(["name", "astrometry", "velocities", "plane", "period", "eccentricity",
                        "inclination", "mass_ratio", "periastron_time", "mean_anomaly", "mass",
                        "frame", "prior", "parallax", "redshift", "cosmology", "offset", "jitter",
                        "x0", "systemic", "reference_epoch", "bogus"])
HEADERS = st.sampled_from(["[target]", "[central]", "[distance]", "[[companion]]",
                           "[instruments.a]", "[instruments]", "[fit]", "[zzz]", "[companion]"])
VALUES = st.one_of(PRIOR_TEXT, st.sampled_from(['"pos.csv"', '"rv.csv"', '"absolute"',
                                                '"missing.csv"', '"../"', '"Planck18"', "0.1",
                                                "-3", "2020.0", '""', "{ a = 1 }"]))
LINES = st.one_of(HEADERS, st.tuples(KEYS, VALUES).map(lambda kv: f"{kv[0]} = {kv[1]}"))


@settings(max_examples=80, deadline=None)
@given(st.one_of(st.lists(LINES, max_size=14).map(lambda lines: "\n".join(lines).encode()),
                 st.binary(max_size=120), st.text(max_size=80).map(str.encode)))
def test_property_garbage_target_raises_input_error_only(tmp_path_factory, data):
    folder = tmp_path_factory.mktemp("junk")
    path = make(folder, "")
    path.write_bytes(data)
    try:
        t = read_target(path)
    except InputError as err:
        assert err.file  # every error names a file
    else:
        assert t.companions and np.isfinite(t.reference_epoch)


FULL = [
    '[target]', 'name = "Invented nucleus"', 'reference_epoch = 2020.0', '[central]',
    'frame = "absolute"',
    'mass = { dist = "log-uniform", low = "1 solMass", high = "1e7 solMass" }',
    'x0 = { dist = "normal", mean = "0 mas", sd = "2 mas" }', '[distance]',
    'parallax = { dist = "normal", mean = "125 uas", sd = "4 uas" }', 'redshift = 0.001',
    '[instruments.a]', 'jitter = { dist = "uniform", low = "0 km/s", high = "1 km/s" }',
    '[[companion]]', 'name = "C1"', 'astrometry = "pos.csv"', 'velocities = "rv.csv"',
    'plane = "d"', 'eccentricity = { dist = "fixed", value = 0 }',
    'inclination = { dist = "isotropic" }', '[[companion]]', 'name = "C2"',
    'velocities = "rv.csv"', 'plane = "d"', 'periastron_time = { dist = "normal", mean = 2020, '
    'sd = 1 }',
]


@settings(max_examples=80, deadline=None)
@given(st.lists(st.tuples(st.integers(0, len(FULL) - 1), st.one_of(st.none(), LINES)),
                max_size=4))
def test_property_mutated_target_raises_input_error_only(tmp_path_factory, edits):
    lines = list(FULL)
    for index, replacement in edits:  # None deletes a line, else it is replaced
        lines[min(index, len(lines) - 1)] = "" if replacement is None else replacement
    folder = tmp_path_factory.mktemp("mut")
    path = make(folder, "\n".join(lines) + "\n")
    try:
        t = read_target(path)
    except InputError as err:
        assert err.file
    else:
        assert len(t.companions) >= 1 and np.isfinite(t.reference_epoch)
