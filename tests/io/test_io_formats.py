"""Position and velocity tables in ECSV, FITS and VOTable, read with astropy.table.

Each file is written here by astropy.table itself (the reference writer of the three
formats: ECSV 1.0, FITS binary tables, VOTable 1.4) from the same numbers as a CSV table,
and must read to the same arrays as the CSV (exactly, where the units are those of the
CSV suffixes; to 1e-15 relative where astropy converts another unit). Errors go through the
same checks as CSV and name the file, the data row and the column.
"""

from __future__ import annotations

import gzip
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.table import MaskedColumn, Table
from astropy.time import Time

from orbitmass.exceptions import InputError
from orbitmass.io.tables import read_astrometry, read_velocities, table_format
from orbitmass.io.target import read_target

WRITERS = {"ecsv": "ascii.ecsv", "fits": "fits", "vot": "votable", "xml": "votable",
           "fit": "fits"}

POS_CSV = ("jyear,east_mas,north_arcsec,east_err_mas,north_err_uas,rho_mas,theta_deg,"
           "rho_err_mas,theta_err_deg,corr\n"
           "2020.1,1.5,0.001,0.1,100,,,,,0.25\n"
           "2019.5,,,,,12.5,130.0,0.4,1.5,\n"
           "2021.3,-2.25,-0.003,0.3,300,,,,,-0.5\n")
RV_CSV = ("mjd,rv_ms,rv_err_kms,instrument,body\n58000.5,1500,0.1,spec#a,companion\n"
          "58100,-200,0.2,b,central\n")


def pos_table() -> Table:
    """The rows of POS_CSV, with units in the column metadata and no suffixes."""
    t = Table()
    t["jyear"] = [2020.1, 2019.5, 2021.3]
    t["east"] = MaskedColumn([1.5, 0.0, -2.25], mask=[False, True, False], unit=u.mas)
    t["north"] = MaskedColumn([0.001, 0.0, -0.003], mask=[False, True, False], unit=u.arcsec)
    t["east_err"] = MaskedColumn([0.1, 0.0, 0.3], mask=[False, True, False], unit=u.mas)
    t["north_err"] = MaskedColumn([100.0, 0.0, 300.0], mask=[False, True, False], unit=u.uas)
    t["rho"] = MaskedColumn([0.0, 12.5, 0.0], mask=[True, False, True], unit=u.mas)
    t["theta"] = MaskedColumn([0.0, 130.0, 0.0], mask=[True, False, True], unit=u.deg)
    t["rho_err_mas"] = MaskedColumn([0.0, 0.4, 0.0], mask=[True, False, True])
    t["theta_err"] = MaskedColumn([0.0, 1.5, 0.0], mask=[True, False, True], unit=u.deg)
    t["corr"] = MaskedColumn([0.25, 0.0, -0.5], mask=[False, True, False])
    return t


def rv_table() -> Table:
    t = Table()
    t["mjd"] = [58000.5, 58100.0]
    t["rv"] = [1500.0, -200.0] * (u.m / u.s)
    t["rv_err_kms"] = [0.1, 0.2] * (u.km / u.s)
    t["instrument"] = ["spec#a", "b"]
    t["body"] = ["companion", "central"]
    return t


def write(table: Table, path: Path) -> Path:
    suffix = path.name.split(".", 1)[1]
    if suffix.endswith(".gz"):
        plain = path.with_name(path.name[:-3])
        table.write(plain, format="fits")
        path.write_bytes(gzip.compress(plain.read_bytes()))
        plain.unlink()
    else:
        table.write(path, format=WRITERS[suffix])
    return path


def same_astrometry(a, b) -> None:
    for name in ("t_yr", "polar", "value1", "value2", "err1", "err2", "corr"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)


@pytest.mark.parametrize("suffix", ["ecsv", "fits", "fit", "fits.gz", "vot", "xml"])
def test_positions_in_each_format_equal_the_csv(tmp_path, suffix):
    (tmp_path / "p.csv").write_text(POS_CSV, encoding="utf-8")
    csv = read_astrometry(tmp_path / "p.csv")
    other = read_astrometry(write(pos_table(), tmp_path / f"p.{suffix}"))
    same_astrometry(other, csv)
    np.testing.assert_array_equal(other.lines, [2, 1, 3])  # data rows, in epoch order
    assert other.source == str(tmp_path / f"p.{suffix}")


@pytest.mark.parametrize("suffix", ["ecsv", "fits", "vot"])
def test_velocities_in_each_format_equal_the_csv(tmp_path, suffix):
    (tmp_path / "v.csv").write_text(RV_CSV, encoding="utf-8")
    csv = read_velocities(tmp_path / "v.csv")
    other = read_velocities(write(rv_table(), tmp_path / f"v.{suffix}"))
    for name in ("t_yr", "rv_kms", "rv_err_kms", "instrument", "central"):
        np.testing.assert_array_equal(getattr(other, name), getattr(csv, name), err_msg=name)


def test_suffixed_names_with_matching_metadata_units(tmp_path):
    t = Table()
    t["jyear"] = [2020.0, 2021.0]
    t["rv_kms"] = [1.0, 2.0] * (u.km / u.s)  # suffix and metadata agree
    t["rv_err_ms"] = [100.0, 200.0]          # suffix only
    v = read_velocities(write(t, tmp_path / "v.ecsv"))
    np.testing.assert_array_equal(v.rv_kms, [1.0, 2.0])
    np.testing.assert_array_equal(v.rv_err_kms, [0.1, 0.2])


def test_other_units_are_converted_by_astropy(tmp_path):
    t = Table()
    t["jyear"] = [2020.0]
    t["east"] = [1e-6] * u.deg
    t["north"] = [2e-9] * u.rad
    t["east_err"] = [1.0] * u.mas
    t["north_err"] = [1.0] * u.mas
    a = read_astrometry(write(t, tmp_path / "p.ecsv"))
    # astropy.units: 1 deg = 3.6e6 mas; 1 rad = 180/pi deg
    assert a.value1[0] == pytest.approx((1e-6 * u.deg).to_value(u.mas), rel=1e-15)
    assert a.value2[0] == pytest.approx((2e-9 * u.rad).to_value(u.mas), rel=1e-15)


def test_time_column_is_the_epoch(tmp_path):
    t = Table()
    t["date"] = Time(["2021-03-04T05:06:07", "2022-01-01T00:00:00"], scale="utc")
    t["rv"] = [1.0, 2.0] * (u.km / u.s)
    t["rv_err"] = [0.5, 0.5] * (u.km / u.s)
    v = read_velocities(write(t, tmp_path / "v.ecsv"))
    expected = Time(["2021-03-04T05:06:07", "2022-01-01T00:00:00"], scale="utc").tdb.jyear
    np.testing.assert_allclose(v.t_yr, expected, rtol=0, atol=1e-12)  # astropy UTC -> TDB


def test_errors_name_file_row_and_column(tmp_path):
    t = rv_table()
    t["rv_err_kms"] = [0.1, -0.2] * (u.km / u.s)
    path = write(t, tmp_path / "v.fits")
    with pytest.raises(InputError) as info:
        read_velocities(path)
    err = info.value
    assert err.file == str(path) and err.key == "rv_err_kms" and err.line is None
    assert "row 2:" in str(err) and "must be positive" in str(err)


@pytest.mark.parametrize(("column", "unit", "words"), [
    ("east", None, ("no unit", "east_mas")),
    ("east", u.km / u.s, ("does not convert",)),
    ("east_mas", u.arcsec, ("its name says mas",)),
])
def test_column_unit_problems(tmp_path, column, unit, words):
    t = Table()
    t["jyear"] = [2020.0]
    t[column] = [1.0] if unit is None else [1.0] * unit
    t["north_mas"] = [1.0]
    t["east_err_mas"] = [1.0]
    t["north_err_mas"] = [1.0]
    path = write(t, tmp_path / "p.ecsv")
    with pytest.raises(InputError) as info:
        read_astrometry(path)
    assert info.value.file == str(path) and info.value.key == column
    for w in words:
        assert w in str(info.value), str(info.value)


def test_same_messages_as_csv_for_an_unknown_column(tmp_path):
    t = rv_table()
    t.rename_column("rv_err_kms", "rv_error_kms")
    with pytest.raises(InputError) as info:
        read_velocities(write(t, tmp_path / "v.vot"))
    assert info.value.key == "rv_error_kms" and "did you mean 'rv_err_kms'" in str(info.value)


@pytest.mark.parametrize("suffix", ["ecsv", "fits", "fits.gz", "vot"])
def test_corrupt_files_give_one_input_error(tmp_path, suffix):
    path = tmp_path / f"bad.{suffix}"
    path.write_bytes(b"SIMPLE  = this is not a table\n" * 3)
    with pytest.raises(InputError) as info:
        read_velocities(path)
    assert info.value.file == str(path) and "\n" not in str(info.value)


def test_target_reads_a_fits_table(tmp_path):
    write(rv_table()[:1], tmp_path / "v.fits")
    (tmp_path / "t.toml").write_text(
        '[distance]\nprior = { dist = "normal", mean = "1 kpc", sd = "0.1 kpc" }\n'
        '[instruments."spec#a"]\n[[companion]]\nname = "C1"\nvelocities = "v.fits"\n',
        encoding="utf-8")
    t = read_target(tmp_path / "t.toml")
    assert list(t.instruments) == ["spec#a"]
    assert t.companions[0].velocities.rv_kms[0] == 1.5


def test_format_by_suffix():
    assert [table_format(n) for n in ("a.csv", "a.ECSV", "a.fit", "a.fits.gz", "a.xml",
                                      "a.vot", "a.txt", "a")] == \
        ["csv", "ecsv", "fits", "fits.gz", "votable", "votable", "csv", "csv"]


def test_unrecognised_unit_in_the_metadata(tmp_path):
    path = tmp_path / "v.ecsv"
    path.write_text("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: jyear, datatype: float64}\n"
                    "# - {name: rv, unit: furlongs_per_fortnight, datatype: float64}\n"
                    "# - {name: rv_err_kms, datatype: float64}\n# schema: astropy-2.0\n"
                    "jyear rv rv_err_kms\n2020.0 1.0 0.5\n", encoding="utf-8")
    with pytest.raises(InputError) as info:
        read_velocities(path)
    assert info.value.key == "rv" and "does not convert" in str(info.value)


def test_truncated_fits_file_is_refused(tmp_path):
    path = write(rv_table(), tmp_path / "v.fits")
    data = path.read_bytes()
    path.write_bytes(data[: len(data) - 1000])  # FITS files are blocks of 2880 bytes
    with pytest.raises(InputError) as info:
        read_velocities(path)
    assert info.value.file == str(path) and "truncated" in str(info.value)
