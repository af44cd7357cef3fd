"""Hostile input: wrong types, huge numbers, empty files, binary junk, NaN/inf, duplicated or
unsorted epochs, unicode names, and the command line on garbage.

Each bad input must give exactly one :class:`orbitmass.exceptions.InputError` naming the
file and the key or line (the project's input contract, shared/spec/input-format.md, "Bad
input"); valid input must parse to the right numbers; nothing may raise another exception
or hang (hypothesis deadlines of 10 s per example are the hang guard). This file adds to
tests/io/test_io_target.py and tests/io/test_io_tables.py, which already cover the basic
cases (unknown units, NaN cells, empty tables, NUL bytes, random garbage).

External references used:
- TOML 1.0.0 (toml.io/en/v1.0.0): value types (string, integer, float incl. nan/inf,
  boolean, offset date-time, local date, array, inline table), basic-string escapes and
  quoted keys; integers are arbitrary-precision in Python's tomllib;
- RFC 4180 (CSV): a field containing commas or quotes is quoted and its quotes doubled;
- IEEE 754 binary64: the largest finite double is about 1.7977e308, so 1e308 arcsec in mas
  (x 1e3) overflows; Python's float() documentation for the accepted spellings of nan/inf;
- Unicode: right-to-left scripts, emoji outside the BMP, combining marks and zero-width
  joiners are ordinary characters in UTF-8 text.
"""

from __future__ import annotations

import math
from datetime import timedelta
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from orbitmass.cli import main
from orbitmass.core.elements import campbell_to_thiele_innes, thiele_innes_to_campbell
from orbitmass.exceptions import InputError
from orbitmass.io.tables import astrometry_from_bytes, velocities_from_bytes
from orbitmass.io.target import read_target

POS = "jyear,east_mas,north_mas,east_err_mas,north_err_mas\n2018,1,2,0.1,0.1\n2020,2,3,0.1,0.1\n"
RV = "jyear,rv_kms,rv_err_kms\n2019,10,1\n2023,12,1\n"
DIST = '[distance]\nprior = { dist = "normal", mean = "8.0 kpc", sd = "0.3 kpc" }\n'
COMP = '[[companion]]\nname = "C1"\nastrometry = "pos.csv"\nvelocities = "rv.csv"\n'
HANG_GUARD = timedelta(seconds=10)


def make(folder: Path, toml: str | bytes, tables: dict[str, str | bytes] | None = None) -> Path:
    """Write a target file and its tables (default pos.csv and rv.csv) into folder."""
    for name, content in ({"pos.csv": POS, "rv.csv": RV} if tables is None else tables).items():
        data = content.encode("utf-8") if isinstance(content, str) else content
        (folder / name).write_bytes(data)
    path = folder / "target.toml"
    path.write_bytes(toml.encode("utf-8") if isinstance(toml, str) else toml)
    return path


def one_error(func, *args, file: str | Path | None = None, key: str | None = None,
              line: int | None = None, words: tuple[str, ...] = ()) -> InputError:
    """Call func(*args) and check it raises one InputError naming file, key and line."""
    with pytest.raises(InputError) as info:
        func(*args)
    err = info.value
    if file is not None:
        assert err.file == str(file)
        assert str(file) in str(err)
    if key is not None:
        assert err.key == key, str(err)
    if line is not None:
        assert err.line == line, str(err)
    for w in words:
        assert w in str(err), str(err)
    assert "\n" not in str(err)  # one message, one line
    return err


def toml_string(text: str) -> str:
    """A TOML basic string holding text (TOML 1.0.0 escapes for \\, " and control characters)."""
    out = []
    for ch in text:
        if ch in '\\"':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def csv_cell(text: str) -> str:
    """RFC 4180 quoting: the cell in double quotes, inner quotes doubled."""
    return '"' + text.replace('"', '""') + '"'


# --------------------------------------------------------------------------- wrong types


@pytest.mark.parametrize(("toml", "key"), [
    ('[target]\nname = true\n' + DIST + COMP, "target.name"),
    ('[target]\nname = 1979-05-27T07:32:00Z\n' + DIST + COMP, "target.name"),
    ('[target]\nname = ["a", "b"]\n' + DIST + COMP, "target.name"),
    ('[target]\nname = { first = "a" }\n' + DIST + COMP, "target.name"),
    ('[target]\nreference_epoch = "2020.0"\n' + DIST + COMP, "target.reference_epoch"),
    ('[target]\nreference_epoch = 2020-01-01\n' + DIST + COMP, "target.reference_epoch"),
    ('[target]\nreference_epoch = true\n' + DIST + COMP, "target.reference_epoch"),
    ('[target]\nreference_epoch = [2020.0]\n' + DIST + COMP, "target.reference_epoch"),
    ('[central]\nframe = ["relative"]\n' + DIST + COMP, "central.frame"),
    ('[central]\nframe = 1\n' + DIST + COMP, "central.frame"),
    ('[central]\nmass = "4e6 solMass"\n' + DIST + COMP, "central.mass"),
    ('[central]\nmass = 4e6\n' + DIST + COMP, "central.mass"),
    ('[central]\nmass = { dist = "uniform", low = true, high = "2 solMass" }\n' + DIST + COMP,
     "central.mass.low"),
    ('[central]\nmass = { dist = "uniform", low = ["1 solMass"], high = "2 solMass" }\n' + DIST
     + COMP, "central.mass.low"),
    ('[central]\nmass = { dist = "uniform", low = 1979-05-27, high = "2 solMass" }\n' + DIST
     + COMP, "central.mass.low"),
    ('[central]\nmass = { dist = 3, low = "1 solMass", high = "2 solMass" }\n' + DIST + COMP,
     "central.mass.dist"),
    ('[central]\nmass = { dist = ["uniform"], low = "1 solMass", high = "2 solMass" }\n' + DIST
     + COMP, "central.mass.dist"),
    ('distance = 8\n' + COMP, "distance"),
    ('[distance]\nprior = ["normal", "8 kpc", "1 kpc"]\n' + COMP, "distance.prior"),
    ('[distance]\nredshift = true\n' + COMP, "distance.redshift"),
    ('[distance]\nredshift = 0.1\ncosmology = 18\n' + COMP, "distance.cosmology"),
    ('instruments = ["a"]\n' + DIST + COMP, "instruments"),
    ('[instruments]\na = "spectrograph"\n' + DIST + COMP, "instruments.a"),
    ('[instruments.a]\noffset = "3 km / s"\n' + DIST + COMP, "instruments.a.offset"),
    ('companion = "C1"\n' + DIST, "companion"),
    ('companion = [1, 2]\n' + DIST, "companion[0]"),
    (DIST + COMP.replace('name = "C1"', "name = 1"), "companion[0].name"),
    (DIST + COMP.replace('"pos.csv"', '["pos.csv"]'), "companion[0].astrometry"),
    (DIST + COMP.replace('"rv.csv"', "false"), "companion[0].velocities"),
    (DIST + COMP + "plane = 3\n", "companion[0].plane"),
    (DIST + COMP + 'eccentricity = { dist = "uniform", low = false, high = 0.5 }\n',
     "companion[0].eccentricity.low"),
    (DIST + COMP + 'periastron_time = { dist = "normal", mean = 2020-01-01, sd = 1 }\n',
     "companion[0].periastron_time.mean"),
])
def test_wrong_types_name_the_key(tmp_path, toml, key):
    path = make(tmp_path, toml)
    one_error(read_target, path, file=path, key=key)


# --------------------------------------------------------------------------- huge numbers


@pytest.mark.parametrize(("header", "row", "column"), [
    ("jyear,east_arcsec,north_mas,east_err_mas,north_err_mas", "2020,1e308,1,1,1", "east_arcsec"),
    ("jyear,east_mas,north_arcsec,east_err_mas,north_err_mas", "2020,1,-1.7e308,1,1",
     "north_arcsec"),
    ("jyear,east_mas,north_mas,east_err_arcsec,north_err_mas", "2020,1,1,1e306,1",
     "east_err_arcsec"),
    ("jyear,rho_arcsec,theta_deg,rho_err_mas,theta_err_deg", "2020,1.7e308,10,1,1", "rho_arcsec"),
    ("jyear,rho_mas,theta_deg,rho_err_arcsec,theta_err_deg", "2020,1,10,1e307,1",
     "rho_err_arcsec"),
])
def test_overflow_in_unit_conversion_of_table_values(header, row, column):
    # IEEE 754: 1e308 arcsec = 1e311 mas is beyond the largest double (1.8e308)
    one_error(astrometry_from_bytes, f"{header}\n2019,1,1,1,1\n{row}\n".encode(), "big.csv",
              file="big.csv", key=column, line=3)


@pytest.mark.parametrize(("cell", "column"), [
    ("9" * 400, "rv_kms"),            # a 400-digit integer reads as inf
    ("-1e309", "rv_kms"),
    ("1e-400", "rv_err_kms"),          # underflows to 0: not a positive uncertainty
    ("4.9e-325", "rv_err_kms"),
])
def test_out_of_range_numbers_in_velocity_tables(cell, column):
    row = f"2020,{cell},1" if column == "rv_kms" else f"2020,1,{cell}"
    one_error(velocities_from_bytes, f"jyear,rv_kms,rv_err_kms\n{row}\n".encode(), "v.csv",
              file="v.csv", key=column, line=2)


@pytest.mark.parametrize(("header", "row", "column", "word"), [
    # finite but implausible: refused at read time (orbitmass.io.tables, "Plausible ranges")
    ("jyear,east_mas,north_mas,east_err_mas,north_err_mas", "2020,1e308,1,1,1", "east_mas",
     "plausible"),
    ("jyear,east_mas,north_arcsec,east_err_mas,north_err_mas", "2020,1,1e5,1,1", "north_arcsec",
     "plausible"),  # 1e5 arcsec = 1e8 mas > 1e7 mas
    ("jyear,east_mas,north_mas,east_err_mas,north_err_mas", "2020,1,1,1e308,1", "east_err_mas",
     "plausible"),
    ("jyear,east_mas,north_mas,east_err_mas,north_err_mas", "2020,1,1,1,1e-300", "north_err_mas",
     "implausibly small"),
    ("jyear,rho_mas,theta_deg,rho_err_mas,theta_err_deg", "2020,1,400,1,1", "theta_deg",
     "plausible"),
    ("jyear,rho_mas,theta_deg,rho_err_mas,theta_err_deg", "2020,1,40,1,1e3", "theta_err_deg",
     "plausible"),
])
def test_implausible_positions_are_refused(header, row, column, word):
    one_error(astrometry_from_bytes, f"{header}\n2019,1,1,1,1\n{row}\n".encode(), "big.csv",
              file="big.csv", key=column, line=3, words=(word,))


@pytest.mark.parametrize(("row", "column", "word"), [
    ("2020,-1e308,1", "rv_kms", "speed of light"),
    ("2020,299792.458,1", "rv_kms", "speed of light"),  # CODATA/SI: c = 299792.458 km/s exactly
    ("2020,1,1e-300", "rv_err_kms", "implausibly small"),
    ("2020,1e5,1e-8", "rv_err_kms", "implausibly small"),  # below 1e-12 x 1e5 km/s
    ("2020,1,1e308", "rv_err_kms", "speed of light"),
])
def test_implausible_velocities_are_refused(row, column, word):
    one_error(velocities_from_bytes, f"jyear,rv_kms,rv_err_kms\n2019,1,1\n{row}\n".encode(),
              "v.csv", file="v.csv", key=column, line=3, words=(word,))


def test_edges_of_the_plausible_ranges_still_parse():
    a = astrometry_from_bytes(b"jyear,east_mas,north_arcsec,east_err_mas,north_err_mas\n"
                              b"2020,1e7,-1e4,1e-4,1e7\n", "ok.csv")
    assert (a.value1[0], a.value2[0], a.err1[0], a.err2[0]) == (1e7, -1e7, 1e-4, 1e7)
    v = velocities_from_bytes(b"jyear,rv_ms,rv_err_ms\n2020,-2.9e8,1\n", "ok.csv")
    assert v.rv_kms[0] == pytest.approx(-2.9e5, rel=1e-15)
    assert v.rv_err_kms[0] == pytest.approx(1e-3, rel=1e-15)


@pytest.mark.parametrize(("prior", "key"), [
    ('[distance]\nprior = { dist = "normal", mean = "1e308 kpc", sd = "1 kpc" }\n' + COMP,
     "distance.prior.mean"),
    (DIST + COMP + 'period = { dist = "log-uniform", low = "1 yr", high = "1e308 Gyr" }\n',
     "companion[0].period.high"),
    (DIST + COMP + 'inclination = { dist = "normal", mean = "1e308 deg", sd = "1 deg" }\n',
     "companion[0].inclination.mean"),
])
def test_overflow_in_unit_conversion_of_priors(tmp_path, prior, key):
    path = make(tmp_path, prior)
    one_error(read_target, path, file=path, key=key, words=("finite",))


@pytest.mark.parametrize(("toml", "key"), [
    ("[target]\nreference_epoch = 1" + "0" * 400 + "\n" + DIST + COMP, "target.reference_epoch"),
    (DIST + COMP + 'eccentricity = { dist = "uniform", low = 0, high = 1' + "0" * 400 + " }\n",
     "companion[0].eccentricity.high"),
    ("[distance]\nredshift = 1" + "0" * 400 + "\n" + COMP, "distance.redshift"),
])
def test_integer_beyond_float_range_in_target(tmp_path, toml, key):
    path = make(tmp_path, toml)
    one_error(read_target, path, file=path, key=key)


def test_epochs_near_float_max_give_input_error(tmp_path):
    path = make(tmp_path, DIST + '[[companion]]\nname = "C1"\nvelocities = "rv.csv"\n',
                {"rv.csv": "jyear,rv_kms,rv_err_kms\n1.7e308,1,1\n1.7e308,2,1\n"})
    one_error(read_target, path)


def test_huge_but_finite_prior_values_are_accepted_or_refused_cleanly(tmp_path):
    # finite numbers at the edge of the float range: a prior, not an error, where it is valid
    t = read_target(make(tmp_path, '[central]\nmass = { dist = "log-uniform", low = "1 solMass", '
                                   'high = "1e308 solMass" }\n' + DIST + COMP))
    assert t.central_priors["mass"].high == 1e308
    path = make(tmp_path, '[central]\nmass = { dist = "log-uniform", low = "1 solMass", '
                          'high = "1e309 solMass" }\n' + DIST + COMP)
    one_error(read_target, path, file=path, key="central.mass.high", words=("finite",))


# --------------------------------------------------------------------------- NaN and inf


@pytest.mark.parametrize(("toml", "key"), [
    (DIST + COMP + 'periastron_time = { dist = "normal", mean = nan, sd = 1 }\n',
     "companion[0].periastron_time.mean"),
    (DIST + COMP + 'periastron_time = { dist = "normal", mean = 2020, sd = +inf }\n',
     "companion[0].periastron_time.sd"),
    (DIST + COMP + 'eccentricity = { dist = "uniform", low = -nan, high = 0.5 }\n',
     "companion[0].eccentricity.low"),
    ("[target]\nreference_epoch = -inf\n" + DIST + COMP, "target.reference_epoch"),
    ('[distance]\nprior = { dist = "normal", mean = "nan pc", sd = "1 pc" }\n' + COMP,
     "distance.prior.mean"),
    ('[central]\nmass = { dist = "uniform", low = "1 solMass", high = "inf solMass" }\n' + DIST
     + COMP, "central.mass.high"),
    (DIST + COMP + 'inclination = { dist = "uniform", low = "-inf deg", high = "10 deg" }\n',
     "companion[0].inclination.low"),
    ('[instruments.a]\njitter = { dist = "uniform", low = "0 km / s", high = "NaN km / s" }\n'
     + DIST + COMP, "instruments.a.jitter.high"),
])
def test_nan_and_inf_in_target(tmp_path, toml, key):
    path = make(tmp_path, toml)
    one_error(read_target, path, file=path, key=key)


@pytest.mark.parametrize("spelling", ["nan", "NaN", "-nan", "+nan", "inf", "-inf", "+Infinity",
                                      "INF", "1e999", "-1e999"])
@pytest.mark.parametrize(("header", "template", "column"), [
    ("mjd,rv_kms,rv_err_kms", "{x},1,1", "mjd"),
    ("jd,rv_kms,rv_err_kms", "{x},1,1", "jd"),
    ("jyear,rho_mas,theta_deg,rho_err_mas,theta_err_deg", "2020,1,{x},1,1", "theta_deg"),
    ("jyear,rho_mas,theta_deg,rho_err_mas,theta_err_deg", "2020,1,2,1,{x}", "theta_err_deg"),
    ("jyear,east_uas,north_mas,east_err_mas,north_err_mas", "2020,{x},1,1,1", "east_uas"),
])
def test_nan_and_inf_spellings_in_tables(spelling, header, template, column):
    # every spelling Python's float() turns into nan/inf (and overflowing literals)
    data = f"{header}\n{template.format(x='1')}\n{template.format(x=spelling)}\n".encode()
    parse = velocities_from_bytes if "rv_kms" in header else astrometry_from_bytes
    one_error(parse, data, "n.csv", file="n.csv", key=column, line=3)


# --------------------------------------------------------------------------- empty and junk


@pytest.mark.parametrize("content", [b"", b"\xef\xbb\xbf", b"\n\n  \n", b"# only a comment\n",
                                     b"\t\r\n"])
def test_empty_target_file(tmp_path, content):
    # an empty document is valid TOML; the missing [distance] table is the error
    path = make(tmp_path, content)
    one_error(read_target, path, file=path, key="distance")


@pytest.mark.parametrize("content", [b"", b"\xef\xbb\xbf", b"\n\n", b"# c\n# d\n"])
def test_empty_table_named_by_target(tmp_path, content):
    path = make(tmp_path, DIST + COMP, {"pos.csv": POS, "rv.csv": content})
    one_error(read_target, path, file=tmp_path / "rv.csv", words=("empty",))


JUNK = {
    "utf-16 with BOM": "[distance]\n".encode("utf-16"),
    "utf-32": "[distance]\n".encode("utf-32"),
    "gzip": b"\x1f\x8b\x08\x00\x00\x00\x00\x00\x00\x03\xcb\x48\xcd\xc9\xc9\x07\x00",
    "pdf": b"%PDF-1.7\n%\xe2\xe3\xcf\xd3\n1 0 obj\n<< /Type /Catalog >>\nendobj\n",
    "latin-1": "[target]\nname = \"Ge\xf6rg\"\n".encode("latin-1"),
    "lone surrogate": b"[target]\nname = \"\xed\xa0\x80\"\n",
    "overlong slash": b"[target]\nname = \"\xc0\xaf\"\n",
    "truncated utf-8": b"[target]\nname = \"\xe2\x82\"\n",
    "NUL in name": b"[target]\nname = \"a\x00b\"\n",
}


@pytest.mark.parametrize("junk", sorted(JUNK))
def test_binary_junk_target(tmp_path, junk):
    path = make(tmp_path, JUNK[junk])
    err = one_error(read_target, path, file=path)
    assert err.line is not None or err.key  # says where


@pytest.mark.parametrize("junk", sorted(JUNK))
def test_binary_junk_tables(junk):
    for parse in (astrometry_from_bytes, velocities_from_bytes):
        err = one_error(parse, JUNK[junk], "junk.csv", file="junk.csv")
        assert err.line is not None


def test_field_beyond_csv_limit_is_an_input_error():
    data = b"jyear,rv_kms,rv_err_kms\n2020,1," + b"1" * 200_000 + b"\n"
    one_error(velocities_from_bytes, data, "long.csv", file="long.csv", line=2)


@pytest.mark.parametrize("nested", ["x = " + "[" * 5000 + "]" * 5000,
                                    "[target]\nname = " + "{a=" * 3000 + "1" + "}" * 3000])
def test_deeply_nested_toml(tmp_path, nested):
    path = make(tmp_path, nested + "\n" + DIST + COMP)
    one_error(read_target, path, file=path)


# --------------------------------------------------------------------------- epochs


@settings(max_examples=40, deadline=HANG_GUARD)
@given(rows=st.lists(st.tuples(st.sampled_from([2001.5, 2003.25, 2010.0, 2010.5]),
                               st.integers(-1000, 1000), st.integers(1, 100)),
                     min_size=1, max_size=12))
def test_duplicated_and_unsorted_epochs_parse_sorted_and_stable(rows):
    # few distinct epochs force duplicates; the reader sorts by epoch, keeping file order
    # for equal epochs (module docstring of orbitmass.io.tables), and tracks file lines
    text = "jyear,rv_ms,rv_err_ms\n" + "".join(f"{t},{v},{e}\n" for t, v, e in rows)
    got = velocities_from_bytes(text.encode(), "dup.csv")
    order = sorted(range(len(rows)), key=lambda k: rows[k][0])  # Python's sort is stable
    np.testing.assert_array_equal(got.t_yr, [rows[k][0] for k in order])
    np.testing.assert_allclose(got.rv_kms, [rows[k][1] / 1000 for k in order], rtol=1e-15)
    np.testing.assert_allclose(got.rv_err_kms, [rows[k][2] / 1000 for k in order], rtol=1e-15)
    np.testing.assert_array_equal(got.lines, [k + 2 for k in order])


@settings(max_examples=25, deadline=HANG_GUARD)
@given(epochs=st.lists(st.floats(1990.0, 2030.0), min_size=2, max_size=8),
       perm=st.randoms(use_true_random=False))
def test_row_order_does_not_change_positions(epochs, perm):
    rows = [f"{t!r},{k},{-k},0.5,0.25" for k, t in enumerate(epochs)]
    shuffled = list(rows)
    perm.shuffle(shuffled)
    head = "jyear,east_mas,north_mas,east_err_mas,north_err_mas\n"
    a = astrometry_from_bytes((head + "\n".join(rows) + "\n").encode(), "a.csv")
    b = astrometry_from_bytes((head + "\n".join(shuffled) + "\n").encode(), "b.csv")
    np.testing.assert_array_equal(a.t_yr, np.sort(epochs))
    np.testing.assert_array_equal(b.t_yr, a.t_yr)
    if len(set(epochs)) == len(epochs):  # with ties only the tie order may differ
        np.testing.assert_array_equal(b.value1, a.value1)
        np.testing.assert_array_equal(b.value2, a.value2)


def test_duplicated_epochs_through_the_target(tmp_path):
    rv = "jyear,rv_kms,rv_err_kms\n2021,3,1\n2019,1,1\n2021,2,1\n2019,4,1\n"
    t = read_target(make(tmp_path, DIST + COMP, {"pos.csv": POS, "rv.csv": rv}))
    v = t.companions[0].velocities
    np.testing.assert_array_equal(v.t_yr, [2019, 2019, 2021, 2021])
    np.testing.assert_array_equal(v.rv_kms, [1, 4, 3, 2])
    assert t.reference_epoch == pytest.approx((2018 + 2020 + 2 * 2019 + 2 * 2021) / 6, rel=1e-15)


# --------------------------------------------------------------------------- unicode names

# letters, digits and combining marks of any script are name characters (Unicode general
# categories L, M, N; unicodedata); emoji, quotes, backslashes, tabs and zero-width spaces are not
NAMES = ["Ætherstern", "Ωμέγα-Κένταυρος", "שביט עליון", "نجم الشمال", "e\u0301toile", "汉字 星",
         "ℌ𝔢𝔩𝔩𝔬", "S2+b_1 #3"]
BAD_NAMES = ["🪐 Ringwelt 🌌", "👩🏽‍🚀 crew", "O'Brien \"the second\"", "back\\slash", "tab\there",
             "\u200bzero-width", "S2.a", "..", "a/b", "$x$", "--", "x" * 65]


@pytest.mark.parametrize("name", NAMES)
def test_unicode_names_round_trip(tmp_path, name):
    # target, companion and instrument names keep every character (RTL, combining marks)
    rv = f"jyear,rv_kms,rv_err_kms,instrument\n2019,10,1,{csv_cell(name)}\n2023,12,1,{csv_cell(name)}\n"
    toml = (f"[target]\nname = {toml_string(name)}\n" + DIST
            + f"[instruments.{toml_string(name)}]\n"
            + f"[[companion]]\nname = {toml_string(name)}\nastrometry = \"pos.csv\"\n"
            + 'velocities = "rv.csv"\n')
    t = read_target(make(tmp_path, toml, {"pos.csv": POS, "rv.csv": rv}))
    assert t.name == name
    assert t.companions[0].name == name
    assert list(t.instruments) == [name]
    assert list(t.companions[0].velocities.instrument) == [name, name]


def test_unicode_table_file_names(tmp_path):
    for fname in ("pos ☄.csv", "скорости.csv"):
        (tmp_path / fname).write_text(POS if "pos" in fname else RV, encoding="utf-8")
    toml = DIST + '[[companion]]\nname = "C1"\nastrometry = "pos ☄.csv"\nvelocities = "скорости.csv"\n'
    t = read_target(make(tmp_path, toml, {}))
    assert t.companions[0].velocities.source == str(tmp_path / "скорости.csv")
    path = make(tmp_path, toml.replace("скорости", "нет"), {})
    one_error(read_target, path, file=tmp_path / "нет.csv", words=("not found",))


def test_undeclared_unicode_instrument_is_named_in_the_error(tmp_path):
    rv = "jyear,rv_kms,rv_err_kms,instrument\n2019,10,1,spéc-α\n2023,12,1,spéc-β 🔭\n"
    path = make(tmp_path, DIST + '[instruments."spéc-α"]\n' + COMP, {"pos.csv": POS, "rv.csv": rv})
    one_error(read_target, path, file=tmp_path / "rv.csv", line=3, key="instrument",
              words=("'spéc-β 🔭'",))


@pytest.mark.parametrize("name", BAD_NAMES)
def test_names_outside_the_character_set_are_refused(tmp_path, name):
    # orbitmass.model.data.name_problem: the documented character set, checked at read time
    comp = (f"[[companion]]\nname = {toml_string(name)}\nastrometry = \"pos.csv\"\n")
    path = make(tmp_path, DIST + comp)
    one_error(read_target, path, file=path, key="companion[0].name", words=("name",))
    path = make(tmp_path, DIST + f"[instruments.{toml_string(name)}]\n" + COMP)
    one_error(read_target, path, file=path, key=f"instruments.{name}")
    path = make(tmp_path, DIST + COMP + f"plane = {toml_string(name)}\n")
    one_error(read_target, path, file=path, key="companion[0].plane")
    rv = f"jyear,rv_kms,rv_err_kms,instrument\n2019,10,1,a\n2023,12,1,{csv_cell(name)}\n"
    one_error(velocities_from_bytes, rv.encode(), "rv.csv", file="rv.csv", key="instrument",
              line=3)


name_text = st.text(
    alphabet=st.characters(whitelist_categories=("Lu", "Ll", "Lt", "Lo", "Nd"),
                           whitelist_characters=" -_+#"),
    min_size=1, max_size=20).map(str.strip).filter(lambda s: any(c.isalnum() for c in s))


@settings(max_examples=40, deadline=HANG_GUARD, suppress_health_check=[HealthCheck.too_slow,
                                                                       HealthCheck.function_scoped_fixture])
@given(target=name_text, companion=name_text, instrument=name_text)
def test_property_any_unicode_names_parse(tmp_path, target, companion, instrument):
    # any name of the documented character set survives TOML and CSV quoting ('#' included)
    rv = f"jyear,rv_kms,rv_err_kms,instrument\n2019,10,1,{csv_cell(instrument)}\n"
    toml = (f"[target]\nname = {toml_string(target)}\n" + DIST
            + f"[instruments.{toml_string(instrument)}]\n"
            + f"[[companion]]\nname = {toml_string(companion)}\nvelocities = \"rv.csv\"\n")
    t = read_target(make(tmp_path, toml, {"rv.csv": rv}))
    assert (t.name, t.companions[0].name, list(t.instruments)) == (target, companion, [instrument])
    assert str(t.companions[0].velocities.instrument[0]) == instrument


# --------------------------------------------------------------------------- element conversions

finite_big = st.floats(-1e307, 1e307, allow_nan=False, allow_infinity=False)


@settings(max_examples=200, deadline=HANG_GUARD)
@given(consts=st.tuples(finite_big, finite_big, finite_big, finite_big))
def test_property_thiele_innes_extreme_magnitudes(consts):
    # any finite constants up to 1e307 (and down to subnormals): finite elements in range,
    # no exception or floating-point warning, and the forward map gives them back
    a, inc, omega, node = thiele_innes_to_campbell(*consts)
    assert math.isfinite(a) and a >= 0
    assert 0.0 <= inc <= math.pi
    assert 0.0 <= omega < 2 * math.pi and 0.0 <= node < math.pi
    back = campbell_to_thiele_innes(a, inc, omega, node)[:4]
    scale = max(abs(c) for c in consts)
    for c2, c in zip(back, consts, strict=True):
        assert abs(float(c2) - c) <= 1e-13 * scale + 1e-300


@settings(max_examples=100, deadline=HANG_GUARD)
@given(a=st.floats(1e-300, 1e300), inc=st.floats(0.0, math.pi),
       omega=st.floats(-1e6, 1e6), node=st.floats(-1e6, 1e6))
def test_property_campbell_extreme_inputs_stay_finite(a, inc, omega, node):
    # semimajor axes over 600 decades and angles far outside one turn
    consts = campbell_to_thiele_innes(a, inc, omega, node)
    assert all(np.isfinite(c) for c in consts)
    a2, inc2, _, _ = thiele_innes_to_campbell(*consts)
    assert float(a2) == pytest.approx(a, rel=1e-13)


def test_nan_elements_give_nan_not_an_exception():
    # garbage in, NaN out: the conversions never raise on NaN (the readers refuse NaN first)
    consts = campbell_to_thiele_innes(np.nan, 0.3, 0.2, 0.1)
    assert all(np.isnan(c) for c in consts)
    out = thiele_innes_to_campbell(np.nan, 1.0, 2.0, 3.0, np.nan, np.nan)
    assert np.isnan(out[0])


# --------------------------------------------------------------------------- command line


def run_cli(capsys, argv: list[str]) -> tuple[int, str, str]:
    code = main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def assert_one_line_error(code: int, out: str, err: str, *words: str) -> None:
    assert code == 2
    assert "Traceback" not in out + err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("orbitmass: error: ")
    for w in words:
        assert w in lines[0], lines[0]


GARBAGE = {
    "empty": b"",
    "binary": b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR",
    "not toml": b"this is { not = toml\n",
    "utf-16": "[distance]\n".encode("utf-16"),
    "wrong type": b'[target]\nname = 5\n',
    "nan prior": ('[distance]\nprior = { dist = "normal", mean = "nan pc", sd = "1 pc" }\n'
                  + COMP).encode(),
}


@pytest.mark.parametrize("kind", sorted(GARBAGE))
def test_cli_fit_on_garbage_target(tmp_path, capsys, kind):
    path = make(tmp_path, GARBAGE[kind])
    out_dir = tmp_path / "run"
    code, out, err = run_cli(capsys, ["fit", str(path), "--out", str(out_dir), "--no-progress"])
    assert_one_line_error(code, out, err, str(path))
    assert not out_dir.exists()  # no fit started, nothing written


def test_cli_fit_on_garbage_table_names_the_table(tmp_path, capsys):
    path = make(tmp_path, DIST + COMP, {"pos.csv": POS, "rv.csv": "jyear,rv_kms,rv_err_kms\n2019,nan,1\n"})
    code, out, err = run_cli(capsys, ["fit", str(path), "--out", str(tmp_path / "run")])
    assert_one_line_error(code, out, err, f"{tmp_path / 'rv.csv'}:2", "rv_kms")


def test_cli_fit_on_missing_file_and_directory(tmp_path, capsys):
    for target in (tmp_path / "nope.toml", tmp_path):
        code, out, err = run_cli(capsys, ["fit", str(target), "--out", str(tmp_path / "run")])
        assert_one_line_error(code, out, err, str(target))


def test_cli_garbage_leaves_existing_user_files_alone(tmp_path, capsys):
    out_dir = tmp_path / "mine"
    out_dir.mkdir()
    (out_dir / "notes.txt").write_text("keep me", encoding="utf-8")
    path = make(tmp_path, b"\x00\x01junk")
    code, out, err = run_cli(capsys, ["fit", str(path), "--out", str(out_dir)])
    assert_one_line_error(code, out, err)
    assert [p.name for p in out_dir.iterdir()] == ["notes.txt"]
    assert (out_dir / "notes.txt").read_text(encoding="utf-8") == "keep me"


@settings(max_examples=15, deadline=HANG_GUARD, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.one_of(st.binary(max_size=200), st.text(max_size=120).map(str.encode)))
def test_property_cli_on_random_garbage(tmp_path, capsys, data):
    path = tmp_path / "garbage.toml"
    path.write_bytes(data)
    code, out, err = run_cli(capsys, ["fit", str(path), "--out", str(tmp_path / "run")])
    assert_one_line_error(code, out, err)
