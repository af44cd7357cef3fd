"""One test per reader probe of the hostile-user and paper-readiness reviews.

Each probe is an input a user may hand orbitmass; each must give one clear
InputError naming the file and the key or line (input-format.md, "Bad input"), at read time,
without blocking, or be read as documented. Facts used:
- POSIX: opening a FIFO for reading blocks until a writer opens it unless O_NONBLOCK is
  given; /dev/zero is a character device that never ends (common practice, no source);
- Unicode 15 general categories (Python's unicodedata) for the name character set;
- the speed of light c = 299 792.458 km/s exactly (SI definition of the metre);
- the default-prior table of input-format.md (the contract) for the defaults checked.
"""

from __future__ import annotations

import math
import os
import threading
from pathlib import Path

import pytest

import orbitmass.io.tables as tables
import orbitmass.io.target as target_module
from orbitmass.exceptions import InputError
from orbitmass.io.tables import load_bytes, read_velocities
from orbitmass.io.target import read_target, read_target_name
from orbitmass.model.data import ExtendedMass, FitOptions, Relativity
from orbitmass.model.priors import Fixed, LogUniform, Uniform

POS = "jyear,east_mas,north_mas,east_err_mas,north_err_mas\n2018,1,2,0.1,0.1\n2020,2,3,0.1,0.1\n"
RV = "jyear,rv_kms,rv_err_kms\n2019,10,1\n2023,12,1\n"
DIST = '[distance]\nprior = { dist = "normal", mean = "8.0 kpc", sd = "0.3 kpc" }\n'
COMP = '[[companion]]\nname = "C1"\nastrometry = "pos.csv"\nvelocities = "rv.csv"\n'
POS_ONLY = '[[companion]]\nname = "C1"\nastrometry = "pos.csv"\n'


def make(folder: Path, toml: str | bytes, tables_: dict[str, str | bytes] | None = None) -> Path:
    for name, content in ({"pos.csv": POS, "rv.csv": RV} if tables_ is None else tables_).items():
        (folder / name).write_bytes(content.encode() if isinstance(content, str) else content)
    path = folder / "target.toml"
    path.write_bytes(toml.encode() if isinstance(toml, str) else toml)
    return path


def fails(func, *args, file=None, key=None, line=None, words=(), absent=()) -> InputError:
    with pytest.raises(InputError) as info:
        func(*args)
    err = info.value
    text = str(err)
    if file is not None:
        assert err.file == str(file), text
    if key is not None:
        assert err.key == key, text
    if line is not None:
        assert err.line == line, text
    for w in words:
        assert w in text, text
    for w in absent:
        assert w not in text, text
    assert "\n" not in text
    return err


def within(seconds: float, func, *args):
    """Run func(*args) in a thread; fail (instead of hanging) if it does not return in time."""
    box: dict = {}

    def run():
        try:
            box["value"] = func(*args)
        except BaseException as exc:  # noqa: BLE001 - handed back to the test
            box["error"] = exc

    thread = threading.Thread(target=run, daemon=True)
    thread.start()
    thread.join(seconds)
    assert not thread.is_alive(), f"{func.__name__} still running after {seconds} s"
    if "error" in box:
        raise box["error"]
    return box.get("value")


# --------------------------------------------------------------------------- files


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs POSIX FIFOs")
def test_fifo_as_table_is_refused_at_once(tmp_path):
    fifo = tmp_path / "rv.csv"
    os.mkfifo(fifo)
    path = make(tmp_path, DIST + '[[companion]]\nname = "C1"\nvelocities = "rv.csv"\n', {})
    with pytest.raises(InputError) as info:
        within(5.0, read_target, path)
    assert info.value.file == str(fifo) and "not a regular file" in str(info.value)


@pytest.mark.skipif(not Path("/dev/zero").exists(), reason="needs /dev/zero")
def test_dev_zero_as_table_is_refused_at_once(tmp_path):
    path = make(tmp_path, DIST + '[[companion]]\nname = "C1"\nvelocities = "/dev/zero"\n', {})
    with pytest.raises(InputError) as info:
        within(5.0, read_target, path)
    assert info.value.file == "/dev/zero" and "not a regular file" in str(info.value)


def test_table_above_the_size_limit_is_refused_without_reading(tmp_path):
    big = tmp_path / "big.csv"
    with open(big, "wb") as fh:  # a sparse file: 1 byte past the limit, no disk used
        fh.truncate(tables.MAX_TABLE_BYTES + 1)
    assert tables.MAX_TABLE_BYTES == 200 * 1024**2  # the documented limit
    fails(within, 5.0, load_bytes, big, file=big, words=("200 MiB",))
    small = tmp_path / "small.csv"
    small.write_bytes(b"x" * 11)
    assert load_bytes(small) == b"x" * 11
    with pytest.raises(InputError):
        load_bytes(small, limit=10)


def test_target_file_above_its_size_limit(tmp_path):
    path = tmp_path / "t.toml"
    with open(path, "wb") as fh:
        fh.truncate(target_module.MAX_TARGET_BYTES + 1)
    fails(read_target, path, file=path, words=("10 MiB",))


def test_row_limit_of_a_table_and_of_a_target(tmp_path, monkeypatch):
    assert tables.MAX_ROWS == 1_000_000  # the documented limit
    monkeypatch.setattr(tables, "MAX_ROWS", 3)
    monkeypatch.setattr(target_module, "MAX_ROWS", 3)
    rv = "jyear,rv_kms,rv_err_kms\n" + "".join(f"{2000 + k},1,1\n" for k in range(4))
    (tmp_path / "rv4.csv").write_text(rv, encoding="utf-8")
    fails(read_velocities, tmp_path / "rv4.csv", file=tmp_path / "rv4.csv", line=5,
          words=("more than 3 data rows",))
    # two tables of two rows each: four rows in the target, above the limit of 3
    path = make(tmp_path, DIST + COMP)
    fails(read_target, path, file=path, key="companion[0]", words=("more than 3 rows",))


def test_absolute_paths_and_paths_outside_the_folder_are_allowed(tmp_path):
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "rv.csv").write_text(RV, encoding="utf-8")
    (tmp_path / "sub").mkdir()
    pos = tmp_path / "elsewhere.csv"
    pos.write_text(POS, encoding="utf-8")
    toml = DIST + (f'[[companion]]\nname = "C1"\nastrometry = "{pos.as_posix()}"\n'
                   'velocities = "../data/rv.csv"\n')
    t = read_target(make(tmp_path / "sub", toml, {}))
    assert len(t.companions[0].astrometry) == 2 and len(t.companions[0].velocities) == 2


def test_bom_at_the_start_of_target_and_table_is_ignored(tmp_path):
    bom = "\ufeff".encode()
    plain = read_target(make(tmp_path, DIST + COMP))
    path = make(tmp_path, bom + ('[target]\nname = "Vexa 9"\n' + DIST + COMP).encode(),
                {"pos.csv": bom + POS.encode(), "rv.csv": bom + RV.encode()})
    t = read_target(path)
    assert t.name == "Vexa 9"
    assert t.companions[0].astrometry.t_yr.tolist() == plain.companions[0].astrometry.t_yr.tolist()
    assert t.companions[0].velocities.rv_kms.tolist() == [10.0, 12.0]
    # the name alone (for seeds derived from it) is the same with and without a BOM
    assert read_target_name(path) == "Vexa 9"
    # the default name is the file stem, also with a BOM
    assert read_target(make(tmp_path, bom + (DIST + COMP).encode())).name == "target"
    assert read_target_name(make(tmp_path, '[target]\nname = "Vexa 9"\n')) == "Vexa 9"


# --------------------------------------------------------------------------- tables


def test_semicolon_table_with_decimal_commas(tmp_path):
    path = tmp_path / "rv.csv"
    path.write_text("jyear;rv_kms;rv_err_kms\n2020,5;1,5;0,1\n", encoding="utf-8")
    fails(read_velocities, path, file=path, line=1,
          words=("delimiter looks like ';'", "decimal commas"))
    path.write_text("jyear,rv_kms,rv_err_kms\n2020.5,1,5,0,1\n", encoding="utf-8")
    fails(read_velocities, path, file=path, line=2, words=("decimal commas are not read",))


def test_unknown_column_suggests_the_close_name(tmp_path):
    path = tmp_path / "rv.csv"
    path.write_text("jyear,rv_kms,rv_error_kms\n2020,1,1\n", encoding="utf-8")
    fails(read_velocities, path, file=path, key="rv_error_kms",
          words=("unknown column 'rv_error_kms'", "did you mean 'rv_err_kms'"),
          absent=("unit suffix",))


def test_epoch_message_has_no_python_internals(tmp_path):
    path = tmp_path / "rv.csv"
    path.write_text("jyear,rv_kms,rv_err_kms\n58000.5,1,1\n", encoding="utf-8")
    fails(read_velocities, path, key="jyear", words=("epoch 58000.5",), absent=("np.", "float64"))


def test_huge_offset_through_the_target_names_the_table(tmp_path):
    pos = "jyear,east_mas,north_mas,east_err_mas,north_err_mas\n2018,1e308,2,0.1,0.1\n"
    path = make(tmp_path, DIST + POS_ONLY, {"pos.csv": pos})
    fails(read_target, path, file=tmp_path / "pos.csv", line=2, key="east_mas",
          words=("companion[0] 'C1'", "plausible range"))


# --------------------------------------------------------------------------- names


@pytest.mark.parametrize("name", ["S2.a", ".."])
def test_dotted_companion_names_are_refused_at_read_time(tmp_path, name):
    path = make(tmp_path, DIST + COMP.replace('"C1"', f'"{name}"'))
    fails(read_target, path, file=path, key="companion[0].name", words=("'.'", "letters, digits"))


def test_plane_named_like_a_companion_is_refused(tmp_path):
    toml = (DIST + COMP + '[[companion]]\nname = "C2"\nastrometry = "pos.csv"\nplane = "C1"\n')
    fails(read_target, make(tmp_path, toml), key="companion[1].plane",
          words=("companion[1] 'C2'", "companion[0] 'C1'", "plane names must differ"))
    toml = (DIST + COMP + 'plane = "disk"\n'
            '[[companion]]\nname = "C2"\nastrometry = "pos.csv"\nplane = "disk"\n')
    t = read_target(make(tmp_path, toml))
    assert [c.plane for c in t.companions] == ["disk", "disk"]


# --------------------------------------------------------------------------- target file


def test_quantity_string_holding_a_list(tmp_path):
    toml = ('[central]\nmass = { dist = "uniform", low = "[1, 100] solMass", '
            'high = "1e3 solMass" }\n' + DIST + COMP)
    fails(read_target, make(tmp_path, toml), key="central.mass.low",
          words=("'[1, 100] solMass'", "one number and a unit"))


def test_companion_without_data_is_named(tmp_path):
    path = make(tmp_path, DIST + COMP + '[[companion]]\nname = "ghost"\n')
    fails(read_target, path, file=path, key="companion[1]", words=("companion[1] 'ghost'", "no data"))


def test_every_per_companion_error_names_the_companion(tmp_path):
    toml = DIST + COMP + ('[[companion]]\nname = "ghost"\nastrometry = "pos.csv"\n'
                          'period = { dist = "uniform", low = "2 yr", high = "1 yr" }\n')
    fails(read_target, make(tmp_path, toml), key="companion[1].period.low",
          words=("companion[1] 'ghost'", "below high"))
    toml = DIST + COMP + '[[companion]]\nname = "ghost"\nastrometry = "nope.csv"\n'
    fails(read_target, make(tmp_path, toml), words=("companion[1] 'ghost'", "not found"))


@pytest.mark.parametrize("epoch", ["1e12", "-6000.0", "10000.5"])
def test_reference_epoch_limited_like_table_epochs(tmp_path, epoch):
    path = make(tmp_path, f"[target]\nreference_epoch = {epoch}\n" + DIST + COMP)
    fails(read_target, path, key="target.reference_epoch", words=("-5000 to 10000",))


def test_periastron_time_prior_limited_like_table_epochs(tmp_path):
    path = make(tmp_path, DIST + COMP
                + 'periastron_time = { dist = "uniform", low = 2000, high = 1e9 }\n')
    fails(read_target, path, key="companion[0].periastron_time")


@pytest.mark.parametrize("prior", [
    '{ dist = "uniform", low = 0.5, high = 5 }',
    '{ dist = "uniform", low = -0.1, high = 0.5 }',
    '{ dist = "normal", mean = 2, sd = 0.1 }',
    '{ dist = "fixed", value = 1 }',
])
def test_eccentricity_prior_must_lie_in_zero_one(tmp_path, prior):
    path = make(tmp_path, DIST + COMP + f"eccentricity = {prior}\n")
    fails(read_target, path, key="companion[0].eccentricity", words=("[0, 1)",))


def test_eccentricity_priors_inside_zero_one_are_kept(tmp_path):
    t = read_target(make(tmp_path, DIST + COMP
                         + 'eccentricity = { dist = "uniform", low = 0.5, high = 1 }\n'))
    assert t.companions[0].priors["eccentricity"] == Uniform(0.5, 1.0)


def test_inclination_prior_beyond_180_degrees(tmp_path):
    path = make(tmp_path, DIST + COMP
                + 'inclination = { dist = "uniform", low = "0 deg", high = "200 deg" }\n')
    fails(read_target, path, key="companion[0].inclination", words=("[0, 180] deg",))


def test_messages_do_not_say_a_angle(tmp_path):
    path = make(tmp_path, DIST + COMP + 'inclination = { dist = "normal", mean = "3", sd = "1 deg" }\n')
    fails(read_target, path, key="companion[0].inclination.mean", words=("an angle",),
          absent=("a angle",))


def test_wrong_types_are_shown_as_toml_not_python(tmp_path):
    path = make(tmp_path, '[target]\nname = { first = "a" }\n' + DIST + COMP)
    fails(read_target, path, key="target.name", words=("{ first = 'a' }",), absent=("{'",))
    path = make(tmp_path, "[target]\nreference_epoch = 1" + "0" * 400 + "\n" + DIST + COMP)
    fails(read_target, path, key="target.reference_epoch",
          words=("an integer of 401 digits",), absent=("...",))


# --------------------------------------------------------------------------- tables of the file


def test_fit_table_is_read_into_fit_options(tmp_path):
    t = read_target(make(tmp_path, "[fit]\nwalkers = 48\nseed = 7\nmax_steps = 5000\n" + DIST + COMP))
    assert t.fit_options == FitOptions(walkers=48, seed=7, max_steps=5000)
    assert t.fit_options.as_fit_kwargs() == {"n_walkers": 48, "seed": 7, "max_steps": 5000}
    assert read_target(make(tmp_path, DIST + COMP)).fit_options == FitOptions()


@pytest.mark.parametrize(("line", "key"), [
    ("walkers = 1", "fit.walkers"), ("walkers = 1000001", "fit.walkers"),
    ("max_steps = 1", "fit.max_steps"), ("seed = -1", "fit.seed"), ("seed = 1.5", "fit.seed"),
    ("walkers = true", "fit.walkers"), ('max_steps = "100"', "fit.max_steps"),
    ("steps = 100", "fit.steps"),
])
def test_bad_fit_options(tmp_path, line, key):
    fails(read_target, make(tmp_path, f"[fit]\n{line}\n" + DIST + COMP), key=key)


def test_output_table_is_refused(tmp_path):
    fails(read_target, make(tmp_path, '[output]\nfolder = "x"\n' + DIST + COMP), key="output",
          words=("no [output] table", "--out"))


def test_misspelt_table_suggests_and_lists_only_accepted_tables(tmp_path):
    err = fails(read_target, make(tmp_path, "[relativty]\nroemer_delay = true\n" + DIST + COMP),
                key="relativty", words=("did you mean 'relativity'", "fit", "extended_mass"))
    assert "output" not in str(err)


def test_systemic_velocity_default_follows_the_contract(tmp_path):
    # input-format.md, default-prior table: uniform +-1000 km/s when the target has velocities
    t = read_target(make(tmp_path, DIST + COMP))
    assert t.central_priors["systemic"] == Uniform(-1000.0, 1000.0)
    assert t.instruments["default"].offset == Fixed(0.0)  # the zero point stays fixed
    # fixed only when the target says so
    t = read_target(make(tmp_path, '[central]\nsystemic = { dist = "fixed", value = "0 km / s" }\n'
                         + DIST + COMP))
    assert t.central_priors["systemic"] == Fixed(0.0)
    # no velocities: nothing to constrain it, so it is not sampled
    t = read_target(make(tmp_path, DIST + POS_ONLY))
    assert t.central_priors["systemic"] == Fixed(0.0)


def test_instrument_offsets_follow_the_contract(tmp_path):
    rv = "jyear,rv_kms,rv_err_kms,instrument\n2019,10,1,b\n2023,12,1,a\n"
    t = read_target(make(tmp_path, DIST + "[instruments.a]\n[instruments.b]\n" + COMP,
                         {"pos.csv": POS, "rv.csv": rv}))
    assert t.instruments["a"].offset == Fixed(0.0)  # the first declared is the zero point
    assert t.instruments["b"].offset == Uniform(-100.0, 100.0)
    assert t.central_priors["mass"] == LogUniform(1e-3, 1e11)
    period = t.companions[0].priors["period"]
    assert period.low == pytest.approx(1 / 365.25, rel=1e-15) and period.high == 1e4


def test_relativity_table_of_the_contract(tmp_path):
    toml = ('[relativity]\nredshift_factor = { dist = "uniform", low = -1, high = 3 }\n'
            'precession_factor = { dist = "fixed", value = 1 }\nroemer_delay = true\n')
    t = read_target(make(tmp_path, toml + DIST + COMP))
    assert t.relativity == Relativity(redshift_factor=Uniform(-1.0, 3.0),
                                      precession_factor=Fixed(1.0), roemer_delay=True)
    t = read_target(make(tmp_path, '[relativity]\nroemer_delay = false\n' + DIST + COMP))
    assert t.relativity == Relativity(Fixed(0.0), Fixed(0.0), False)  # factors not given: off
    t = read_target(make(tmp_path, DIST + COMP))
    assert t.relativity is None and t.extended_mass is None


@pytest.mark.parametrize(("body", "key"), [
    ('redshift_factor = { dist = "uniform", low = "-1 km", high = 3 }', "relativity.redshift_factor.low"),
    ('redshift_factor = 1', "relativity.redshift_factor"),
    ('precession_factor = { dist = "uniform", low = -1000, high = 3 }', "relativity.precession_factor"),
    ('roemer_delay = "yes"', "relativity.roemer_delay"),
    ('roemer = true', "relativity.roemer"),
])
def test_bad_relativity_tables(tmp_path, body, key):
    fails(read_target, make(tmp_path, f"[relativity]\n{body}\n" + DIST + COMP), key=key)


@pytest.mark.parametrize(("radius", "mas", "au"), [
    ('"10 mas"', 10.0, None), ('"0.01 arcsec"', 10.0, None), ('"500 au"', None, 500.0),
    ('"1 pc"', None, 648000 / math.pi),  # IAU 2015 B2: 1 pc = 648000/pi au
])
def test_extended_mass_table_of_the_contract(tmp_path, radius, mas, au):
    toml = (f'[extended_mass]\nfraction = {{ dist = "uniform", low = 0, high = 0.05 }}\n'
            f"scale_radius = {radius}\n")
    e = read_target(make(tmp_path, toml + DIST + COMP)).extended_mass
    assert isinstance(e, ExtendedMass) and e.fraction == Uniform(0.0, 0.05)
    assert e.scale_radius_mas == (None if mas is None else pytest.approx(mas, rel=1e-15))
    assert e.scale_radius_au == (None if au is None else pytest.approx(au, rel=1e-15))


@pytest.mark.parametrize(("body", "key"), [
    ('fraction = { dist = "uniform", low = 0, high = 0.05 }', "extended_mass.scale_radius"),
    ('scale_radius = "10 mas"', "extended_mass.fraction"),
    ('fraction = { dist = "uniform", low = -1, high = 0.05 }\nscale_radius = "10 mas"',
     "extended_mass.fraction"),
    ('fraction = { dist = "fixed", value = 0.1 }\nscale_radius = "10 km / s"',
     "extended_mass.scale_radius"),
    ('fraction = { dist = "fixed", value = 0.1 }\nscale_radius = "-10 mas"',
     "extended_mass.scale_radius"),
    ('fraction = { dist = "fixed", value = 0.1 }\nscale_radius = 10', "extended_mass.scale_radius"),
    ('fraction = { dist = "fixed", value = 0.1 }\nscale_radius = "10 mas"\nprofile = "plummer"',
     "extended_mass.profile"),
])
def test_bad_extended_mass_tables(tmp_path, body, key):
    fails(read_target, make(tmp_path, f"[extended_mass]\n{body}\n" + DIST + COMP), key=key)


def test_the_documented_example_reads(tmp_path):
    # the example target file of docs/input-format.md (its TOML blocks) is valid as written
    import re

    doc = (Path(__file__).resolve().parents[2] / "docs" / "input-format.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```toml\n(.*?)```", doc, re.S)
    (tmp_path / "c1_positions.csv").write_text(POS, encoding="utf-8")
    (tmp_path / "c1_velocities.csv").write_text(
        "jyear,rv_kms,rv_err_kms,instrument\n2019,10,1,spec-a\n2023,12,1,spec-a\n", encoding="utf-8")
    path = tmp_path / "t.toml"
    path.write_text("\n".join(blocks), encoding="utf-8")
    t = read_target(path)
    assert t.fit_options == FitOptions(walkers=64, seed=7, max_steps=20000)
    assert t.relativity.roemer_delay and t.extended_mass.scale_radius_mas == 10.0


def test_name_with_a_newline_gives_a_one_line_message(tmp_path):
    path = make(tmp_path, DIST + COMP.replace('"C1"', '"C\\n1"'))
    err = fails(read_target, path, key="companion[0].name", words=('"C\\n1"', "U+000A"))
    assert "\n" not in str(err)


@pytest.mark.parametrize(("cosmology", "key"), [
    ('{ H0 = "[70, 71] km / (s Mpc)", Om0 = 0.3 }', "distance.cosmology.H0"),
    ('{ H0 = "70 km / (s Mpc)", Om0 = 0.3, Tcmb0 = "[2, 3] K" }', "distance.cosmology.Tcmb0"),
])
def test_list_quantities_in_the_cosmology_table(tmp_path, cosmology, key):
    toml = f"[distance]\nredshift = 0.1\ncosmology = {cosmology}\n" + COMP
    fails(read_target, make(tmp_path, toml), key=key)
