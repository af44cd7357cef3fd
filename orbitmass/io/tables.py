"""Readers of position and velocity tables, as in ``input-format.md``.

Formats, chosen by the file suffix (case-insensitive)
    ``.ecsv`` (Enhanced CSV), ``.fits``, ``.fit``, ``.fits.gz``, ``.fit.gz``
    (the first table HDU) and ``.vot``, ``.xml`` (VOTable, the first table)
    are read with :mod:`astropy.table`; every other suffix (``.csv``,
    ``.txt``, ...) is read as CSV. In the astropy formats a column may be
    named as in CSV (``east_mas``) or without the unit suffix (``east``), the
    unit then coming from the column metadata (any unit astropy converts:
    ``deg`` or ``rad`` for an offset, ``m / s`` for a velocity); a suffix and
    a metadata unit that disagree are an error. An astropy ``Time`` column is
    read as the epoch (TDB Julian years). After reading, every format goes
    through the same checks and gives the same messages; errors in the
    astropy formats name the 1-based data row instead of a line.

CSV files
    UTF-8 text (an optional byte-order mark is ignored) with one header line
    and one row per measurement, comma-separated, decimal point (a
    semicolon-delimited file with decimal commas is refused with a message
    that says so). Blank lines are skipped; a line whose first non-blank
    character is ``#`` is a comment. A ``#`` elsewhere is an ordinary
    character (an instrument may be named ``spec#a``). Column names are
    matched case-insensitively, ignoring surrounding blanks. Every error is
    one :class:`~orbitmass.exceptions.InputError` naming the file, the
    1-based line in that file (comment and header lines counted) and the
    column.

Limits (refused before any other work)
    a table file above :data:`MAX_TABLE_BYTES` (200 MiB) or with more than
    :data:`MAX_ROWS` (1,000,000) data rows; anything that is not a regular
    file (a FIFO, a device such as ``/dev/zero``, a socket, a folder).

Plausible ranges (values outside are refused with the row and column)
    offsets ``east``, ``north`` within +-1e7 mas (about 2.8 degrees);
    separations ``rho`` in [0, 1e7] mas; position angles within +-360 deg;
    velocities below the speed of light in size; uncertainties positive,
    at most 1e7 mas (offsets, separations), 360 deg (position angles) or
    the speed of light (velocities), and at least 1e-12 times the largest
    size of the values of their column (and at least 1e-12 mas, deg or
    km/s); epochs within the Julian years -5000 to 10000.

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
    Instrument names follow the rules of
    :func:`orbitmass.model.data.name_problem` (letters and digits of any
    script, spaces and ``- _ + #``, at most 64 characters). Velocities are
    returned in km/s.

Rows are returned sorted by epoch (stable sort: rows with equal epochs keep
their file order); duplicated epochs are allowed.

Longer than 600 lines because every format (CSV, ECSV, FITS, VOTable) goes through one
validation path that must name the file, line and column of each bad value; keeping the
checks beside the readers keeps the error wording in one place.
"""

from __future__ import annotations

import csv
import difflib
import gzip
import io
import logging
import math
import os
import re
import stat
import warnings
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from astropy.time import Time
from numpy.typing import NDArray

from orbitmass.exceptions import InputError
from orbitmass.model.data import Astrometry, Velocities, name_problem
from orbitmass.units import C_KMS, DAYS_PER_YEAR, JD_J2000

__all__ = [
    "read_astrometry",
    "read_velocities",
    "astrometry_from_bytes",
    "velocities_from_bytes",
    "load_bytes",
    "table_format",
    "DEFAULT_INSTRUMENT",
    "EPOCH_COLUMNS",
    "EPOCH_RANGE_JYEAR",
    "MAX_TABLE_BYTES",
    "MAX_ROWS",
    "MAX_OFFSET_MAS",
    "MIN_RELATIVE_ERROR",
]

logger = logging.getLogger(__name__)

#: Instrument name given to the rows of a velocity table without an ``instrument`` column.
DEFAULT_INSTRUMENT = "default"
#: Accepted epoch columns.
EPOCH_COLUMNS = ("jyear", "mjd", "jd", "date")
#: plausible epochs (Julian years): catches MJD or JD values in a jyear column
EPOCH_RANGE_JYEAR = (-5000.0, 10000.0)
#: Largest table file read (bytes): 200 MiB.
MAX_TABLE_BYTES = 200 * 1024**2
#: Most data rows in one table (and in all tables of one target together).
MAX_ROWS = 1_000_000
#: Largest size of an offset, separation or offset uncertainty (mas): about 2.8 degrees.
MAX_OFFSET_MAS = 1e7
#: Smallest uncertainty relative to the largest size of the values of its column.
MIN_RELATIVE_ERROR = 1e-12

#: MJD of J2000.0 (MJD = JD - 2400000.5).
_MJD_J2000 = JD_J2000 - 2400000.5

# unit suffix -> (multiplier, divisor) to the internal unit, exact by the SI prefixes
# (1 arcsec = 1e3 mas = 1e6 uas; 1 km/s = 1e3 m/s); one rounding per value.
_ANGLE = {"uas": (1.0, 1e3), "mas": (1.0, 1.0), "arcsec": (1e3, 1.0)}
_DEGREE = {"deg": (1.0, 1.0)}
_SPEED = {"kms": (1.0, 1.0), "ms": (1.0, 1e3)}
# unit suffix -> astropy unit string (for the astropy formats)
_SUFFIX_UNITS = {"uas": "uas", "mas": "mas", "arcsec": "arcsec", "deg": "deg", "kms": "km / s",
                 "ms": "m / s"}
_INTERNAL_SUFFIX = {"angle": "mas", "degree": "deg", "speed": "kms"}

_CARTESIAN = ("east", "north", "east_err", "north_err")
_POLAR = ("rho", "theta", "rho_err", "theta_err")
_POSITION_UNITS = {q: _ANGLE for q in _CARTESIAN + ("rho", "rho_err")}
_POSITION_UNITS.update(theta=_DEGREE, theta_err=_DEGREE)
_VELOCITY_UNITS = {"rv": _SPEED, "rv_err": _SPEED}

_BODIES = {"companion": False, "central": True}

# check -> (low, high, what, unit): the plausible range of a value, both ends included
_RANGES = {
    "offset": (-MAX_OFFSET_MAS, MAX_OFFSET_MAS, "offset", "mas"),
    "separation": (0.0, MAX_OFFSET_MAS, "separation", "mas"),
    "angle": (-360.0, 360.0, "position angle", "deg"),
    "speed": (-C_KMS, C_KMS, "velocity", "km/s (the speed of light)"),
    "offset_err": (0.0, MAX_OFFSET_MAS, "uncertainty", "mas"),
    "angle_err": (0.0, 360.0, "uncertainty", "deg"),
    "speed_err": (0.0, C_KMS, "uncertainty", "km/s (the speed of light)"),
}
_FORMATS = {".ecsv": "ecsv", ".fits": "fits", ".fit": "fits", ".fits.gz": "fits.gz",
            ".fit.gz": "fits.gz", ".vot": "votable", ".xml": "votable"}


def _show(value: float) -> str:
    """A number as a user wrote it, without Python internals (``np.float64(...)``)."""
    return f"{float(value):.10g}"


# --------------------------------------------------------------------------- files


def load_bytes(path: str | os.PathLike[str], *, key: str = "", where: str = "",
               limit: int = MAX_TABLE_BYTES) -> bytes:
    """Read a whole input file, turning every OS error into an InputError.

    Only regular files are read: a FIFO, a device (``/dev/zero``), a socket
    or a folder is refused at once, without blocking or reading from it.

    Parameters
    ----------
    path : str or path-like
        File to read.
    key : str
        Key that named the file (e.g. ``companion[0].astrometry``), for messages.
    where : str
        File that named it (the target file), for messages.
    limit : int
        Largest size read, in bytes (default :data:`MAX_TABLE_BYTES`).

    Returns
    -------
    bytes
        The file content.

    Raises
    ------
    InputError
        When the file does not exist, is not a regular file, is larger than
        ``limit`` or cannot be read.
    """
    named = f" (named by '{key}' in {where})" if key and where else ""
    source = str(path)
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except FileNotFoundError:
        raise InputError(f"file not found{named}", file=source) from None
    except IsADirectoryError:
        raise InputError(f"is a directory, expected a file{named}", file=source) from None
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot read file{named}: {exc.strerror or exc}", file=source) from None
    try:
        info = os.fstat(fd)
        if stat.S_ISDIR(info.st_mode):
            raise InputError(f"is a directory, expected a file{named}", file=source)
        if not stat.S_ISREG(info.st_mode):
            raise InputError(f"is not a regular file (a FIFO, device or socket){named}; "
                             "orbitmass reads only regular files", file=source)
        too_big = f"is larger than the limit of {limit / 1024**2:.0f} MiB{named}"
        if info.st_size > limit:
            raise InputError(too_big, file=source)
        chunks, size = [], 0
        while size <= limit:
            chunk = os.read(fd, min(1 << 24, limit + 1 - size))
            if not chunk:
                break
            chunks.append(chunk)
            size += len(chunk)
    except OSError as exc:
        raise InputError(f"cannot read file{named}: {exc.strerror or exc}", file=source) from None
    finally:
        os.close(fd)
    data = b"".join(chunks)
    if len(data) > limit:
        raise InputError(too_big, file=source)
    return data


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


def table_format(source: str) -> str:
    """The format of a table file from its suffix: csv, ecsv, fits, fits.gz or votable.

    Examples
    --------
    >>> table_format("pos.FITS.gz"), table_format("rv.vot"), table_format("rv.txt")
    ('fits.gz', 'votable', 'csv')
    """
    name = Path(source).name.lower()
    for suffix in sorted(_FORMATS, key=len, reverse=True):
        if name.endswith(suffix):
            return _FORMATS[suffix]
    return "csv"


# --------------------------------------------------------------------------- grid


@dataclass
class _Grid:
    """Header and rows of one table as stripped strings, with file line (or row) numbers.

    ``by_row``: the numbers in ``lines`` are 1-based data rows (astropy
    formats), named "row N" in messages, not file lines.
    """

    source: str
    columns: list[str]
    header_line: int | None
    rows: list[list[str]]
    lines: list[int]
    by_row: bool = False

    def error(self, message: str, *, row: int | None = None, column: str = "") -> InputError:
        if self.by_row:
            prefix = "" if row is None else f"row {self.lines[row]}: "
            return InputError(prefix + message, file=self.source, key=column)
        line = self.header_line if row is None else self.lines[row]
        return InputError(message, file=self.source, line=line, key=column)

    def cells(self, column: str) -> list[str]:
        j = self.columns.index(column)
        return [r[j] for r in self.rows]


_BLANK = re.compile(r"\s")


def _split(line: str, source: str, lineno: int) -> list[str]:
    if '"' not in line:  # no quoting: the csv module would split at every comma too
        if _BLANK.search(line) is None:
            return line.split(",")
        return [f.strip() for f in line.split(",")]
    try:
        fields = next(csv.reader([line], strict=True, skipinitialspace=True))
    except csv.Error as exc:
        raise InputError(f"malformed CSV line ({exc})", file=source, line=lineno) from None
    return [f.strip() for f in fields]


_NOT_COMMAS = ("orbitmass reads comma-separated tables with a decimal point; decimal commas "
               "(1,5) are not read: save the table with ',' between fields and '.' in numbers")


def _check_header(header: list[str], source: str, lineno: int) -> None:
    for delimiter, label in ((";", "';'"), ("\t", "a tab"), ("|", "'|'")):
        if any(delimiter in name for name in header):
            raise InputError(f"the delimiter looks like {label}, not a comma; {_NOT_COMMAS}",
                             file=source, line=lineno)
    for j, name in enumerate(header):
        if not name:
            raise InputError(f"column {j + 1} of the header has no name", file=source,
                             line=lineno)
        if header.index(name) != j:
            raise InputError(f"column '{name}' appears twice in the header", file=source,
                             line=lineno, key=name)


def _grid(text: str, source: str) -> _Grid:
    header: list[str] | None = None
    header_line = 0
    rows: list[list[str]] = []
    lines: list[int] = []
    for lineno, raw in enumerate(text.split("\n"), start=1):
        stripped = raw.strip()
        if not stripped or stripped.startswith("#"):
            continue
        fields = _split(raw, source, lineno)
        if header is None:
            header = [f.lower() for f in fields]
            header_line = lineno
            _check_header(header, source, lineno)
            continue
        if len(fields) != len(header):
            hint = ""
            if ";" in raw:
                hint = f"; the delimiter looks like ';': {_NOT_COMMAS}"
            elif len(fields) > len(header):
                hint = "; decimal commas are not read: write 1.5, not 1,5"
            raise InputError(
                f"expected {len(header)} comma-separated field{'s' * (len(header) != 1)} as in "
                f"the header on line {header_line}, found {len(fields)}{hint}", file=source,
                line=lineno)
        if len(rows) == MAX_ROWS:
            raise InputError(f"more than {MAX_ROWS:,} data rows, the limit of one table",
                             file=source, line=lineno)
        rows.append(fields)
        lines.append(lineno)
    if header is None:
        raise InputError("empty table: expected a header line and at least one data row",
                         file=source)
    if not rows:
        raise InputError("no data rows after the header", file=source, line=header_line)
    return _Grid(source, header, header_line, rows, lines)


# --------------------------------------------------------------------------- astropy formats


def _read_astropy(data: bytes, source: str, fmt: str):
    from astropy.table import Table  # start-up time: loaded only when needed

    if fmt == "fits.gz":
        try:
            with gzip.GzipFile(fileobj=io.BytesIO(data)) as fh:
                data = fh.read(MAX_TABLE_BYTES + 1)
        except (OSError, EOFError, zlib.error) as exc:
            raise InputError(f"cannot decompress the gzip file ({exc})", file=source) from None
        if len(data) > MAX_TABLE_BYTES:
            raise InputError(f"decompresses to more than {MAX_TABLE_BYTES / 1024**2:.0f} MiB, "
                             "the limit of one table", file=source)
        fmt = "fits"
    stream: object
    if fmt == "ecsv":  # astropy reads ECSV from a list of lines, never from a path here
        stream, reader = decode_text(data, source).split("\n"), "ascii.ecsv"
    else:
        stream, reader = io.BytesIO(data), fmt
    label = {"ascii.ecsv": "ECSV", "fits": "FITS", "votable": "VOTable"}[reader]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            table = Table.read(stream, format=reader)
        except Exception as exc:  # noqa: BLE001 - astropy raises assorted errors on bad files
            reason = str(exc).split("\n")[0].rstrip(".") or type(exc).__name__
            raise InputError(f"cannot read the file as {label} ({reason})", file=source) from None
    for w in caught:  # e.g. several tables in one file, or VOTable specification notes
        if "truncated" in str(w.message):  # missing bytes would be read as zeros
            raise InputError(f"the {label} file is truncated ({w.message})", file=source)
        logger.warning("%s: %s", source, w.message)
    return table


def _astropy_column(col, name: str, quantities: dict, source: str) -> tuple[str, list[str]]:
    """(column name as in CSV, cells as strings) of one astropy column."""
    import astropy.units as u  # start-up time: loaded only when needed

    if isinstance(col, Time):
        return "jyear", [repr(float(v)) for v in np.atleast_1d(col.tdb.jyear)]
    if getattr(col, "ndim", 1) != 1:
        raise InputError(f"column '{name}' holds arrays, expected one value per row",
                         file=source, key=name)
    unit = getattr(col, "unit", None)
    unit = None if unit is None or unit == u.dimensionless_unscaled else unit
    values = col
    if name in quantities:  # no suffix: the unit comes from the metadata
        allowed = quantities[name]
        kind = "degree" if allowed is _DEGREE else "speed" if allowed is _SPEED else "angle"
        if unit is None:
            example = _INTERNAL_SUFFIX[kind]
            raise InputError(f"column '{name}' has no unit in its metadata; give one (e.g. "
                             f"{_SUFFIX_UNITS[example]}) or name it {name}_{example}",
                             file=source, key=name)
        suffix = next((s for s in allowed if unit == u.Unit(_SUFFIX_UNITS[s])), None)
        if suffix is None:
            suffix = _INTERNAL_SUFFIX[kind]
            try:
                with np.errstate(over="ignore", invalid="ignore"):
                    values = u.Quantity(col).to_value(_SUFFIX_UNITS[suffix])
            except (u.UnitsError, ValueError, TypeError):  # also units astropy did not recognise
                want = ", ".join(_SUFFIX_UNITS[s] for s in allowed)
                raise InputError(f"column '{name}' has unit {unit}, which does not convert to "
                                 f"{want}", file=source, key=name) from None
            if hasattr(col, "mask"):
                values = np.ma.masked_array(values, mask=np.ma.getmaskarray(col))
        name = f"{name}_{suffix}"
    elif unit is not None:
        quantity = next((q for q in sorted(quantities, key=len, reverse=True)
                         if name.startswith(q + "_") and name[len(q) + 1:] in quantities[q]), "")
        if quantity and unit != u.Unit(_SUFFIX_UNITS[name[len(quantity) + 1:]]):
            raise InputError(f"column '{name}' has unit {unit} in its metadata but its name "
                             f"says {_SUFFIX_UNITS[name[len(quantity) + 1:]]}; keep one",
                             file=source, key=name)
    mask = np.ma.getmaskarray(values) if hasattr(values, "mask") else np.zeros(len(col), bool)
    raw = np.ma.getdata(values) if hasattr(values, "mask") else np.asarray(values)
    if raw.dtype.kind == "f":
        cells = ["" if m else repr(float(v)) for v, m in zip(raw.tolist(), mask, strict=True)]
    elif raw.dtype.kind == "S":
        cells = ["" if m else v.decode("utf-8", "replace").strip()
                 for v, m in zip(raw.tolist(), mask, strict=True)]
    else:
        cells = ["" if m else str(v).strip() for v, m in zip(raw.tolist(), mask, strict=True)]
    return name, cells


def _grid_astropy(data: bytes, source: str, fmt: str, quantities: dict) -> _Grid:
    table = _read_astropy(data, source, fmt)
    if len(table) > MAX_ROWS:
        raise InputError(f"{len(table):,} data rows, above the limit of {MAX_ROWS:,} for one "
                         "table", file=source)
    if not table.colnames:
        raise InputError("empty table: no columns", file=source)
    if len(table) == 0:
        raise InputError("no data rows", file=source)
    columns: list[str] = []
    cells: list[list[str]] = []
    for colname in table.colnames:
        name = str(colname).strip().lower()
        name, values = _astropy_column(table[colname], name, quantities, source)
        if name in columns:
            raise InputError(f"column '{name}' appears twice", file=source, key=name)
        columns.append(name)
        cells.append(values)
    rows = [list(r) for r in zip(*cells, strict=True)]
    return _Grid(source, columns, None, rows, list(range(1, len(rows) + 1)), by_row=True)


def _read_grid(data: bytes, source: str, quantities: dict) -> _Grid:
    fmt = table_format(source)
    if fmt == "csv":
        return _grid(decode_text(data, source), source)
    return _grid_astropy(data, source, fmt, quantities)


# --------------------------------------------------------------------------- columns


_Scale = tuple[float, float]


def _classify(
    grid: _Grid, quantities: dict[str, dict[str, _Scale]], plain: tuple[str, ...]
) -> dict[str, tuple[str, _Scale]]:
    """Map each quantity (``east``, ``rv_err``, ...) or plain column to (column, scale)."""
    found: dict[str, tuple[str, _Scale]] = {}
    by_length = sorted(quantities, key=len, reverse=True)
    accepted = [f"{q}_{s}" for q in quantities for s in quantities[q]] + list(plain) \
        + list(EPOCH_COLUMNS)
    for name in grid.columns:
        if name in EPOCH_COLUMNS or name in plain:
            quantity, scale = name, (1.0, 1.0)
        else:
            quantity = next((q for q in by_length if name.startswith(q + "_")), "")
            suffix = name[len(quantity) + 1:] if quantity else ""
            if not quantity or suffix not in quantities[quantity]:
                close = difflib.get_close_matches(name, accepted, n=1, cutoff=0.7)
                hint = f" (did you mean '{close[0]}'?)" if close else ""
                if quantity and "_" not in suffix:
                    allowed = ", ".join(quantities[quantity])
                    raise grid.error(f"unknown unit suffix '{suffix}' in column '{name}'{hint}; "
                                     f"allowed suffixes for {quantity}: {allowed}", column=name)
                listing = sorted(f"{q}_<{'|'.join(quantities[q])}>" for q in quantities) \
                    + list(plain) + list(EPOCH_COLUMNS)
                raise grid.error(f"unknown column '{name}'{hint}; accepted columns: "
                                 f"{', '.join(listing)}", column=name)
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


def _floats(grid: _Grid, column: str, scale: _Scale = (1.0, 1.0)) -> tuple[NDArray, NDArray] | None:
    """Fast path: (values in internal units, empty mask) of a column, or None when some
    cell is not a finite number (the per-cell path then finds and names it)."""
    cells = grid.cells(column)
    empty = np.fromiter((not c for c in cells), dtype=bool, count=len(cells))
    try:
        values = np.array([c or "nan" for c in cells], dtype=float)
    except ValueError:
        return None
    with np.errstate(over="ignore", invalid="ignore"):
        values = values * scale[0] / scale[1]
    if not np.all(np.isfinite(values[~empty])):
        return None
    return values, empty


def _all_plausible(values: NDArray, check: str) -> bool:
    """Vectorised ``_check_value``: True when no value of the array would be refused."""
    if not np.all(np.isfinite(values)):
        return False
    if check == "corr":
        return bool(np.all(np.abs(values) < 1.0))
    if check not in _RANGES:
        return True
    low, high, _, _ = _RANGES[check]
    if check.endswith("_err") and not np.all(values > 0.0):
        return False
    if check == "speed":
        return bool(np.all(np.abs(values) < high))
    return bool(np.all((values >= low) & (values <= high)))


def _values(grid: _Grid, column: str, scale: _Scale = (1.0, 1.0), *, check: str = "") -> NDArray:
    """Numbers of one column, in internal units, each passed through ``_check_value``."""
    fast = _floats(grid, column, scale)
    if fast is not None and not fast[1].any() and _all_plausible(fast[0], check):
        return fast[0]
    out = np.empty(len(grid.rows))
    for i, text in enumerate(grid.cells(column)):
        out[i] = _number(grid, i, column, text, scale)
        _check_value(grid, i, column, text, out[i], check)
    return out


def _check_value(grid: _Grid, row: int, column: str, text: str, value: float, check: str) -> None:
    """Refuse a value outside its plausible range; ``check`` a key of ``_RANGES``, "corr" or ""."""
    if not math.isfinite(value):
        raise grid.error(f"{text!r} in column '{column}' overflows", row=row, column=column)
    if check == "corr" and not abs(value) < 1.0:
        raise grid.error(f"correlation {text!r} in column '{column}' must lie strictly between "
                         "-1 and 1", row=row, column=column)
    if check not in _RANGES:
        return
    low, high, what, unit = _RANGES[check]
    if check.endswith("_err") and not value > 0.0:
        raise grid.error(f"uncertainty {text!r} in column '{column}' must be positive",
                         row=row, column=column)
    if check == "separation" and value < 0.0:
        raise grid.error(f"separation {text!r} in column '{column}' must not be negative",
                         row=row, column=column)
    inside = low <= value <= high if check != "speed" else abs(value) < high
    if not inside:
        span = f"at most {_show(high)}" if low == 0.0 else f"within +-{_show(high)}"
        raise grid.error(f"{what} {text!r} in column '{column}' is outside the plausible range: "
                         f"{span} {unit}", row=row, column=column)


def _check_relative_errors(grid: _Grid, rows: NDArray[np.intp], value_col: str,
                           err_col: str, values: NDArray, errors: NDArray) -> None:
    """Refuse an uncertainty below MIN_RELATIVE_ERROR of the largest value of its column."""
    if rows.size == 0:
        return
    scale = max(float(np.max(np.abs(values[rows]))), 1.0)
    floor = MIN_RELATIVE_ERROR * scale
    bad = rows[errors[rows] < floor]
    if bad.size:
        i = int(bad[0])
        text = grid.rows[i][grid.columns.index(err_col)]
        raise grid.error(f"uncertainty {text!r} in column '{err_col}' is implausibly small: "
                         f"below {MIN_RELATIVE_ERROR:g} times the largest value of column "
                         f"'{value_col}' (or of 1 in its unit); is its unit right?", row=i,
                         column=err_col)


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
            logger.warning("%s: row %d: date %r: %s", grid.source, grid.lines[row], text,
                           w.message)
        return jyear
    raise grid.error(f"cannot read {text!r} as an ISO 8601 UTC date such as 2021-03-04 or "
                     "2021-03-04T05:06:07.5", row=row, column="date")


def _epochs(grid: _Grid, found: dict[str, tuple[str, _Scale]]) -> NDArray[np.float64]:
    column = next(c for c in EPOCH_COLUMNS if c in found)
    if column == "date":
        t = np.array([_date_to_jyear(grid, i, t) for i, t in enumerate(grid.cells("date"))])
    else:
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
        text = grid.rows[row][grid.columns.index(column)]
        raise grid.error(f"epoch {text} ({column}) lies outside the Julian years "
                         f"{EPOCH_RANGE_JYEAR[0]:.0f} to {EPOCH_RANGE_JYEAR[1]:.0f}; is the "
                         "column named for its format (jyear, mjd, jd or date)?", row=row,
                         column=column)
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


_POSITION_CHECKS = {_CARTESIAN: ("offset", "offset", "offset_err", "offset_err"),
                    _POLAR: ("separation", "angle", "offset_err", "angle_err")}


def astrometry_from_bytes(data: bytes, source: str) -> Astrometry:
    """Parse a position table from its bytes.

    Parameters
    ----------
    data : bytes
        File content (CSV, or ECSV, FITS or VOTable by the suffix of ``source``).
    source : str
        File name, used to choose the format (:func:`table_format`), in
        messages and stored as ``Astrometry.source``.

    Returns
    -------
    Astrometry
        Rows sorted by epoch; offsets and separations in mas, angles in deg.

    Raises
    ------
    InputError
        On any malformed content (see the module docstring).
    """
    grid = _read_grid(data, source, _POSITION_UNITS)
    found = _classify(grid, _POSITION_UNITS, ("corr",))
    has_cart = _position_form(grid, found, _CARTESIAN)
    has_polar = _position_form(grid, found, _POLAR)
    if not (has_cart or has_polar):
        raise grid.error("no position columns: expected east_<u>, north_<u>, east_err_<u>, "
                         "north_err_<u> or rho_<u>, theta_deg, rho_err_<u>, theta_err_deg "
                         "(u = uas, mas, arcsec)")
    t_yr = _epochs(grid, found)
    fast = _positions_fast(grid, found, has_cart, has_polar)
    if fast is not None:
        polar, vals, corr = fast
    else:
        polar, vals, corr = _positions_by_row(grid, found, has_cart, has_polar)
    for form, rows in ((_CARTESIAN, np.nonzero(~polar)[0]), (_POLAR, np.nonzero(polar)[0])):
        for k in (0, 1):
            if rows.size:
                _check_relative_errors(grid, rows, found[form[k]][0], found[form[k + 2]][0],
                                       vals[k], vals[k + 2])
    t_yr, lines, polar, v1, v2, e1, e2, corr = _sorted(t_yr, grid.lines, polar, *vals, corr)
    return Astrometry(t_yr=t_yr, polar=polar, value1=v1, value2=v2, err1=e1, err2=e2, corr=corr,
                      source=source, lines=lines)


def _positions_fast(grid: _Grid, found: dict, has_cart: bool, has_polar: bool):
    """(polar, values (4, n), corr) read column by column, or None when any cell would be
    refused (then :func:`_positions_by_row` finds the first problem and names it)."""
    n = len(grid.rows)
    polar = np.zeros(n, dtype=bool)
    vals = np.zeros((4, n))
    filled_count = np.zeros(n, dtype=int)
    for form, present in ((_CARTESIAN, has_cart), (_POLAR, has_polar)):
        if not present:
            continue
        columns = [_floats(grid, found[q][0], found[q][1]) for q in form]
        if any(c is None for c in columns):
            return None
        empties = np.array([c[1] for c in columns])
        full = ~empties.any(axis=0)
        if np.any(empties.any(axis=0) & ~empties.all(axis=0)):  # a partly filled group
            return None
        for k, (values, _) in enumerate(columns):
            if not _all_plausible(values[full], _POSITION_CHECKS[form][k]):
                return None
            vals[k, full] = values[full]
        filled_count += full
        if form is _POLAR:
            polar = full
    if np.any(filled_count != 1):
        return None
    corr = np.zeros(n)
    if "corr" in found:
        column = _floats(grid, "corr")
        if column is None:
            return None
        values, empty = column
        corr = np.where(empty, 0.0, values)
        if not _all_plausible(corr, "corr"):
            return None
    return polar, vals, corr


def _positions_by_row(grid: _Grid, found: dict, has_cart: bool, has_polar: bool):
    """(polar, values (4, n), corr) read row by row; raises at the first refused cell."""
    n = len(grid.rows)
    polar = np.zeros(n, dtype=bool)
    vals = np.zeros((4, n))
    corr = np.zeros(n)
    index = {q: grid.columns.index(found[q][0]) for q in found}
    for i, row in enumerate(grid.rows):
        filled = {}
        for form, present in ((_CARTESIAN, has_cart), (_POLAR, has_polar)):
            if not present:
                continue
            cells = [row[index[q]] for q in form]
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
            vals[k, i] = _number(grid, i, name, text, scale)
            _check_value(grid, i, name, text, vals[k, i], _POSITION_CHECKS[form][k])
        if "corr" in found and row[index["corr"]]:
            corr[i] = _number(grid, i, "corr", row[index["corr"]])
            _check_value(grid, i, "corr", row[index["corr"]], corr[i], "corr")
    return polar, vals, corr


def read_astrometry(path: str | os.PathLike[str]) -> Astrometry:
    """Read a position table into an :class:`~orbitmass.model.data.Astrometry`.

    Parameters
    ----------
    path : str or path-like
        The table (CSV, ECSV, FITS or VOTable by its suffix; columns described
        in the module docstring).

    Returns
    -------
    Astrometry
        Epochs in Julian years (TDB), sorted; east/north offsets and
        separations in mas, position angles and their errors in degrees.

    Raises
    ------
    InputError
        Naming the file, line (or row) and column of the first problem.

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
        File content (CSV, or ECSV, FITS or VOTable by the suffix of ``source``).
    source : str
        File name, used to choose the format (:func:`table_format`), in
        messages and stored as ``Velocities.source``.

    Returns
    -------
    Velocities
        Rows sorted by epoch, velocities in km/s.

    Raises
    ------
    InputError
        On any malformed content (see the module docstring).
    """
    grid = _read_grid(data, source, _VELOCITY_UNITS)
    found = _classify(grid, _VELOCITY_UNITS, ("instrument", "body"))
    for q in ("rv", "rv_err"):
        if q not in found:
            raise grid.error(f"missing column {q}_kms or {q}_ms")
    t_yr = _epochs(grid, found)
    rv = _values(grid, *found["rv"], check="speed")
    rv_err = _values(grid, *found["rv_err"], check="speed_err")
    _check_relative_errors(grid, np.arange(rv.size), found["rv"][0], found["rv_err"][0], rv,
                           rv_err)
    n = len(grid.rows)
    instrument = np.full(n, DEFAULT_INSTRUMENT, dtype=object)
    if "instrument" in found:
        checked: set[str] = set()
        for i, name in enumerate(grid.cells("instrument")):
            if name in checked:
                instrument[i] = name
                continue
            if not name:
                raise grid.error("empty cell in column 'instrument', expected an instrument "
                                 "name", row=i, column="instrument")
            problem = name_problem(name)
            checked.add(name)
            if problem:
                raise grid.error(f"instrument name {name!r} {problem}", row=i,
                                 column="instrument")
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
    """Read a line-of-sight velocity table into a :class:`~orbitmass.model.data.Velocities`.

    Parameters
    ----------
    path : str or path-like
        The table (CSV, ECSV, FITS or VOTable by its suffix; columns described
        in the module docstring).

    Returns
    -------
    Velocities
        Epochs in Julian years (TDB), sorted; velocities and errors in km/s;
        instrument names (``"default"`` without an ``instrument`` column);
        ``central`` True for ``body = central`` rows.

    Raises
    ------
    InputError
        Naming the file, line (or row) and column of the first problem.

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
