"""Readers of position and velocity tables (CSV), as in ``input-format.md``.

A table is UTF-8 text with one header line and one row per measurement.
Blank lines are skipped; a line whose first non-blank character is ``#`` is a
comment, and a ``#`` elsewhere starts a comment that runs to the end of its
line. Column names are matched case-insensitively, ignoring surrounding
blanks. Every error is one :class:`~orbitmass.exceptions.InputError` naming
the file, the 1-based line in that file (comment and header lines counted)
and the column.

Epoch columns (exactly one per table)
    ``jyear`` (Julian year, TDB), ``mjd`` and ``jd`` (TDB, converted with
    ``jyear = 2000 + (jd - 2451545.0) / 365.25``), or ``date``: ISO 8601
    date or date-time in UTC (``2021-03-04``, ``2021-03-04T05:06:07.8``,
    ``2021-03-04 05:06:07``), converted with ``astropy.time.Time(...,
    scale="utc").tdb.jyear``.

Position tables
    ``east_<u>``, ``north_<u>``, ``east_err_<u>``, ``north_err_<u>`` and/or
    ``rho_<u>``, ``theta_deg``, ``rho_err_<u>``, ``theta_err_deg``, with
    ``<u>`` one of ``uas``, ``mas``, ``arcsec`` (each column its own unit);
    optional ``corr`` (an empty ``corr`` cell means 0). Each row fills
    exactly one of the two groups and leaves the other empty. Offsets and
    separations are returned in mas, position angles in degrees.

Velocity tables
    ``rv_kms`` or ``rv_ms``; ``rv_err_kms`` or ``rv_err_ms``; optional
    ``instrument`` (a name, no empty cells; without the column every row
    belongs to the instrument ``"default"``); optional ``body``:
    ``companion`` or ``central`` (an empty cell means ``companion``).
    Velocities are returned in km/s.

Rows are returned sorted by epoch (stable sort: rows with equal epochs keep
their file order); duplicated epochs are allowed.
"""

from __future__ import annotations

import csv
import logging
import math
import os
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from astropy.time import Time
from numpy.typing import NDArray

from orbitmass.exceptions import InputError
from orbitmass.model.data import Astrometry, Velocities
from orbitmass.units import DAYS_PER_YEAR, JD_J2000

__all__ = [
    "read_astrometry",
    "read_velocities",
    "astrometry_from_bytes",
    "velocities_from_bytes",
    "load_bytes",
    "DEFAULT_INSTRUMENT",
    "EPOCH_COLUMNS",
]

logger = logging.getLogger(__name__)

#: Instrument name given to the rows of a velocity table without an ``instrument`` column.
DEFAULT_INSTRUMENT = "default"
#: Accepted epoch columns.
EPOCH_COLUMNS = ("jyear", "mjd", "jd", "date")
#: plausible epochs (Julian years): catches MJD or JD values in a jyear column
EPOCH_RANGE_JYEAR = (-5000.0, 10000.0)

#: MJD of J2000.0 (MJD = JD - 2400000.5).
_MJD_J2000 = JD_J2000 - 2400000.5

# unit suffix -> (multiplier, divisor) to the internal unit, exact by the SI prefixes
# (1 arcsec = 1e3 mas = 1e6 uas; 1 km/s = 1e3 m/s); one rounding per value.
_ANGLE = {"uas": (1.0, 1e3), "mas": (1.0, 1.0), "arcsec": (1e3, 1.0)}
_DEGREE = {"deg": (1.0, 1.0)}
_SPEED = {"kms": (1.0, 1.0), "ms": (1.0, 1e3)}

_CARTESIAN = ("east", "north", "east_err", "north_err")
_POLAR = ("rho", "theta", "rho_err", "theta_err")
_POSITION_UNITS = {q: _ANGLE for q in _CARTESIAN + ("rho", "rho_err")}
_POSITION_UNITS.update(theta=_DEGREE, theta_err=_DEGREE)
_VELOCITY_UNITS = {"rv": _SPEED, "rv_err": _SPEED}

_BODIES = {"companion": False, "central": True}


# --------------------------------------------------------------------------- files


def load_bytes(path: str | os.PathLike[str], *, key: str = "", where: str = "") -> bytes:
    """Read a whole input file, turning every OS error into an InputError.

    Parameters
    ----------
    path : str or path-like
        File to read.
    key : str
        Key that named the file (e.g. ``companion[0].astrometry``), for messages.
    where : str
        File that named it (the target file), for messages.

    Returns
    -------
    bytes
        The file content.

    Raises
    ------
    InputError
        When the file does not exist, is a directory or cannot be read.
    """
    named = f" (named by '{key}' in {where})" if key and where else ""
    try:
        return Path(path).read_bytes()
    except FileNotFoundError:
        raise InputError(f"file not found{named}", file=str(path)) from None
    except IsADirectoryError:
        raise InputError(f"is a directory, expected a file{named}", file=str(path)) from None
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot read file{named}: {exc}", file=str(path)) from None


def decode_text(data: bytes, source: str) -> str:
    """Decode UTF-8 input (an optional byte-order mark is dropped), refusing binary data.

    Parameters
    ----------
    data : bytes
        File content.
    source : str
        File name, for messages.

    Returns
    -------
    str
        The text with line ends normalised to ``"\\n"``.

    Raises
    ------
    InputError
        On NUL bytes (a binary file) or bytes that are not UTF-8.
    """
    if b"\x00" in data:
        line = data[: data.index(b"\x00")].count(b"\n") + 1
        raise InputError("contains NUL bytes: a binary file, expected UTF-8 text", file=source,
                         line=line)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(f"not UTF-8 text (byte {data[exc.start]:#04x} at offset {exc.start})",
                         file=source, line=line) from None
    return text.replace("\r\n", "\n").replace("\r", "\n")


# --------------------------------------------------------------------------- CSV grid


@dataclass
class _Grid:
    """Header and rows of one CSV file as stripped strings, with file line numbers."""

    source: str
    columns: list[str]
    header_line: int
    rows: list[list[str]]
    lines: list[int]

    def error(self, message: str, *, row: int | None = None, column: str = "") -> InputError:
        line = self.header_line if row is None else self.lines[row]
        return InputError(message, file=self.source, line=line, key=column)

    def cells(self, column: str) -> list[str]:
        j = self.columns.index(column)
        return [r[j] for r in self.rows]


def _split(line: str, source: str, lineno: int) -> list[str]:
    try:
        fields = next(csv.reader([line], strict=True, skipinitialspace=True))
    except csv.Error as exc:
        raise InputError(f"malformed CSV line ({exc})", file=source, line=lineno) from None
    return [f.strip() for f in fields]


def _grid(text: str, source: str) -> _Grid:
    header: list[str] | None = None
    header_line = 0
    rows: list[list[str]] = []
    lines: list[int] = []
    for lineno, raw in enumerate(text.split("\n"), start=1):
        stripped = raw.strip()
        if not stripped or stripped.startswith("#"):
            continue
        content = raw.split("#", 1)[0]
        if not content.strip():
            continue
        fields = _split(content, source, lineno)
        if header is None:
            header = [f.lower() for f in fields]
            header_line = lineno
            for j, name in enumerate(header):
                if not name:
                    raise InputError(f"column {j + 1} of the header has no name", file=source,
                                     line=lineno)
                if header.index(name) != j:
                    raise InputError(f"column '{name}' appears twice in the header", file=source,
                                     line=lineno, key=name)
            continue
        if len(fields) != len(header):
            raise InputError(
                f"expected {len(header)} comma-separated fields as in the header on line "
                f"{header_line}, found {len(fields)}", file=source, line=lineno)
        rows.append(fields)
        lines.append(lineno)
    if header is None:
        raise InputError("empty table: expected a header line and at least one data row",
                         file=source)
    if not rows:
        raise InputError("no data rows after the header", file=source, line=header_line)
    return _Grid(source, header, header_line, rows, lines)


# --------------------------------------------------------------------------- columns


_Scale = tuple[float, float]


def _classify(
    grid: _Grid, quantities: dict[str, dict[str, _Scale]], plain: tuple[str, ...]
) -> dict[str, tuple[str, _Scale]]:
    """Map each quantity (``east``, ``rv_err``, ...) or plain column to (column, scale)."""
    found: dict[str, tuple[str, _Scale]] = {}
    by_length = sorted(quantities, key=len, reverse=True)
    for name in grid.columns:
        if name in EPOCH_COLUMNS or name in plain:
            quantity, scale = name, (1.0, 1.0)
        else:
            quantity = next((q for q in by_length if name.startswith(q + "_")), "")
            if not quantity:
                accepted = sorted(
                    f"{q}_<{'|'.join(quantities[q])}>" for q in quantities
                ) + list(plain) + list(EPOCH_COLUMNS)
                raise grid.error(f"unknown column '{name}'; accepted columns: "
                                 f"{', '.join(accepted)}", column=name)
            suffix = name[len(quantity) + 1:]
            if suffix not in quantities[quantity]:
                allowed = ", ".join(quantities[quantity])
                raise grid.error(f"unknown unit suffix '{suffix}' in column '{name}'; "
                                 f"allowed suffixes for {quantity}: {allowed}", column=name)
            scale = quantities[quantity][suffix]
        if quantity in found:
            raise grid.error(f"columns '{found[quantity][0]}' and '{name}' both give "
                             f"{quantity}; keep one", column=name)
        found[quantity] = (name, scale)
    epochs = [c for c in EPOCH_COLUMNS if c in found]
    if not epochs:
        raise grid.error(f"missing epoch column: expected one of {', '.join(EPOCH_COLUMNS)}")
    if len(epochs) > 1:
        raise grid.error(f"two epoch columns ({', '.join(epochs)}); keep exactly one of "
                         f"{', '.join(EPOCH_COLUMNS)}", column=epochs[1])
    return found


def _number(grid: _Grid, row: int, column: str, text: str, scale: _Scale = (1.0, 1.0)) -> float:
    if not text:
        raise grid.error(f"empty cell in column '{column}', expected a number", row=row,
                         column=column)
    try:
        value = float(text)
    except ValueError:
        raise grid.error(f"cannot read {text!r} in column '{column}' as a number", row=row,
                         column=column) from None
    if not math.isfinite(value):
        raise grid.error(f"{text!r} in column '{column}' is NaN or infinite; expected a finite "
                         "number", row=row, column=column)
    return value * scale[0] / scale[1]


def _values(grid: _Grid, column: str, scale: _Scale = (1.0, 1.0), *, check: str = "") -> NDArray:
    """Numbers of one column, in internal units; ``check``: "" | "positive" | "nonnegative"."""
    out = np.empty(len(grid.rows))
    for i, text in enumerate(grid.cells(column)):
        out[i] = _number(grid, i, column, text, scale)
        _check_value(grid, i, column, text, out[i], check)
    return out


def _check_value(grid: _Grid, row: int, column: str, text: str, value: float, check: str) -> None:
    if check == "positive" and not value > 0.0:
        raise grid.error(f"uncertainty {text!r} in column '{column}' must be positive",
                         row=row, column=column)
    if check == "nonnegative" and value < 0.0:
        raise grid.error(f"separation {text!r} in column '{column}' must not be negative",
                         row=row, column=column)
    if check == "corr" and not abs(value) < 1.0:
        raise grid.error(f"correlation {text!r} in column '{column}' must lie strictly between "
                         "-1 and 1", row=row, column=column)
    if not math.isfinite(value):
        raise grid.error(f"{text!r} in column '{column}' overflows", row=row, column=column)


def _date_to_jyear(grid: _Grid, row: int, text: str) -> float:
    if not text:
        raise grid.error("empty cell in column 'date'", row=row, column="date")
    for fmt in ("isot", "iso"):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                jyear = float(Time(text, format=fmt, scale="utc").tdb.jyear)
            except Exception:  # noqa: BLE001 - astropy/erfa raise assorted errors on bad dates
                continue
        for w in caught:  # e.g. ERFA "dubious year" outside the leap-second table
            logger.warning("%s:%d: date %r: %s", grid.source, grid.lines[row], text, w.message)
        return jyear
    raise grid.error(f"cannot read {text!r} as an ISO 8601 UTC date such as 2021-03-04 or "
                     "2021-03-04T05:06:07.5", row=row, column="date")


def _epochs(grid: _Grid, found: dict[str, tuple[str, _Scale]]) -> NDArray[np.float64]:
    column = next(c for c in EPOCH_COLUMNS if c in found)
    if column == "date":
        return np.array([_date_to_jyear(grid, i, t) for i, t in enumerate(grid.cells("date"))])
    values = _values(grid, column)
    if column == "mjd":
        t = 2000.0 + (values - _MJD_J2000) / DAYS_PER_YEAR
    elif column == "jd":
        t = 2000.0 + (values - JD_J2000) / DAYS_PER_YEAR
    else:
        t = values
    bad = np.nonzero(~((t >= EPOCH_RANGE_JYEAR[0]) & (t <= EPOCH_RANGE_JYEAR[1])))[0]
    if bad.size:
        row = int(bad[0])
        raise grid.error(f"epoch {values[row]!r} ({column}) lies outside the Julian years "
                         f"{EPOCH_RANGE_JYEAR[0]:.0f} to {EPOCH_RANGE_JYEAR[1]:.0f}; is the column named for "
                         "its format (jyear, mjd, jd or date)?", row=row, column=column)
    return t


def _sorted(t_yr: NDArray, lines: list[int], *arrays: NDArray) -> list[NDArray]:
    order = np.argsort(t_yr, kind="stable")
    out = [np.ascontiguousarray(t_yr[order]), np.asarray(lines, dtype=np.int64)[order]]
    return out + [np.ascontiguousarray(a[order]) for a in arrays]


# --------------------------------------------------------------------------- positions


def _position_form(grid: _Grid, found: dict, form: tuple[str, ...]) -> bool:
    present = [q for q in form if q in found]
    if present and len(present) < len(form):
        missing = [q for q in form if q not in found]
        names = ", ".join(f"{q}_deg" if q.startswith("theta") else f"{q}_<uas|mas|arcsec>"
                          for q in missing)
        raise grid.error(f"column '{found[present[0]][0]}' needs its companions: missing {names}",
                         column=found[present[0]][0])
    return bool(present)


def astrometry_from_bytes(data: bytes, source: str) -> Astrometry:
    """Parse a position table from its bytes.

    Parameters
    ----------
    data : bytes
        File content (UTF-8 CSV).
    source : str
        File name, used in messages and stored as ``Astrometry.source``.

    Returns
    -------
    Astrometry
        Rows sorted by epoch; offsets and separations in mas, angles in deg.

    Raises
    ------
    InputError
        On any malformed content (see the module docstring).
    """
    grid = _grid(decode_text(data, source), source)
    found = _classify(grid, _POSITION_UNITS, ("corr",))
    has_cart = _position_form(grid, found, _CARTESIAN)
    has_polar = _position_form(grid, found, _POLAR)
    if not (has_cart or has_polar):
        raise grid.error("no position columns: expected east_<u>, north_<u>, east_err_<u>, "
                         "north_err_<u> or rho_<u>, theta_deg, rho_err_<u>, theta_err_deg "
                         "(u = uas, mas, arcsec)")
    t_yr = _epochs(grid, found)
    n = len(grid.rows)
    polar = np.zeros(n, dtype=bool)
    vals = np.zeros((4, n))
    corr = np.zeros(n)
    checks = ("", "", "positive", "positive")
    for i, row in enumerate(grid.rows):
        filled = {}
        for form, present in ((_CARTESIAN, has_cart), (_POLAR, has_polar)):
            if not present:
                continue
            cells = [row[grid.columns.index(found[q][0])] for q in form]
            if all(cells):
                filled[form] = cells
            elif any(cells):
                empty = found[form[cells.index("")]][0]
                raise grid.error(f"empty cell in column '{empty}': fill all of "
                                 f"{', '.join(found[q][0] for q in form)} or none", row=i,
                                 column=empty)
        if len(filled) != 1:
            what = "both position groups are filled" if filled else "no position given"
            raise grid.error(f"{what}: each row needs exactly one of east/north (with errors) "
                             "or rho/theta (with errors)", row=i)
        form, cells = next(iter(filled.items()))
        polar[i] = form is _POLAR
        for k, (q, text) in enumerate(zip(form, cells, strict=True)):
            name, scale = found[q]
            check = "nonnegative" if q == "rho" else checks[k]
            vals[k, i] = _number(grid, i, name, text, scale)
            _check_value(grid, i, name, text, vals[k, i], check)
        if "corr" in found and row[grid.columns.index("corr")]:
            corr[i] = _number(grid, i, "corr", row[grid.columns.index("corr")])
            _check_value(grid, i, "corr", row[grid.columns.index("corr")], corr[i], "corr")
    t_yr, lines, polar, v1, v2, e1, e2, corr = _sorted(t_yr, grid.lines, polar, *vals, corr)
    return Astrometry(t_yr=t_yr, polar=polar, value1=v1, value2=v2, err1=e1, err2=e2, corr=corr,
                      source=source, lines=lines)


def read_astrometry(path: str | os.PathLike[str]) -> Astrometry:
    """Read a position table (CSV) into an :class:`~orbitmass.model.data.Astrometry`.

    Parameters
    ----------
    path : str or path-like
        The CSV file (columns described in the module docstring).

    Returns
    -------
    Astrometry
        Epochs in Julian years (TDB), sorted; east/north offsets and
        separations in mas, position angles and their errors in degrees.

    Raises
    ------
    InputError
        Naming the file, line and column of the first problem.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "pos.csv"
    >>> _ = p.write_text("jyear,east_arcsec,north_mas,east_err_uas,north_err_mas\\n"
    ...                  "2020.5,0.1,-20,500,0.5\\n")
    >>> a = read_astrometry(p)
    >>> float(a.value1[0]), float(a.value2[0]), float(a.err1[0])
    (100.0, -20.0, 0.5)
    """
    return astrometry_from_bytes(load_bytes(path), str(path))


# --------------------------------------------------------------------------- velocities


def velocities_from_bytes(data: bytes, source: str) -> Velocities:
    """Parse a velocity table from its bytes.

    Parameters
    ----------
    data : bytes
        File content (UTF-8 CSV).
    source : str
        File name, used in messages and stored as ``Velocities.source``.

    Returns
    -------
    Velocities
        Rows sorted by epoch, velocities in km/s.

    Raises
    ------
    InputError
        On any malformed content (see the module docstring).
    """
    grid = _grid(decode_text(data, source), source)
    found = _classify(grid, _VELOCITY_UNITS, ("instrument", "body"))
    for q in ("rv", "rv_err"):
        if q not in found:
            raise grid.error(f"missing column {q}_kms or {q}_ms")
    t_yr = _epochs(grid, found)
    rv = _values(grid, *found["rv"])
    rv_err = _values(grid, *found["rv_err"], check="positive")
    n = len(grid.rows)
    instrument = np.full(n, DEFAULT_INSTRUMENT, dtype=object)
    if "instrument" in found:
        for i, name in enumerate(grid.cells("instrument")):
            if not name:
                raise grid.error("empty cell in column 'instrument', expected an instrument "
                                 "name", row=i, column="instrument")
            instrument[i] = name
    central = np.zeros(n, dtype=bool)
    if "body" in found:
        for i, body in enumerate(grid.cells("body")):
            if body.lower() not in _BODIES and body:
                raise grid.error(f"body {body!r} is neither 'companion' nor 'central'", row=i,
                                 column="body")
            central[i] = _BODIES.get(body.lower(), False)
    t_yr, lines, rv, rv_err, instrument, central = _sorted(
        t_yr, grid.lines, rv, rv_err, instrument, central)
    return Velocities(t_yr=t_yr, rv_kms=rv, rv_err_kms=rv_err, instrument=instrument.astype(str),
                      central=central, source=source, lines=lines)


def read_velocities(path: str | os.PathLike[str]) -> Velocities:
    """Read a line-of-sight velocity table (CSV) into a :class:`~orbitmass.model.data.Velocities`.

    Parameters
    ----------
    path : str or path-like
        The CSV file (columns described in the module docstring).

    Returns
    -------
    Velocities
        Epochs in Julian years (TDB), sorted; velocities and errors in km/s;
        instrument names (``"default"`` without an ``instrument`` column);
        ``central`` True for ``body = central`` rows.

    Raises
    ------
    InputError
        Naming the file, line and column of the first problem.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "rv.csv"
    >>> _ = p.write_text("mjd,rv_ms,rv_err_kms\\n51544.5,1500,0.2\\n")
    >>> v = read_velocities(p)
    >>> float(v.t_yr[0]), float(v.rv_kms[0]), str(v.instrument[0])
    (2000.0, 1.5, 'default')
    """
    return velocities_from_bytes(load_bytes(path), str(path))
