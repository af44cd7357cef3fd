"""Reader of target files (TOML), as in ``input-format.md``.

:func:`read_target` parses the file with :mod:`tomllib` (no code is
executed), reads every table it names (paths relative to the target file)
and returns one validated :class:`~orbitmass.model.data.Target` with every prior
filled in. Every error is one :class:`~orbitmass.exceptions.InputError` that
names the file and the dotted key, or the table file and its line.

Dotted key scheme of the error messages
    TOML paths, with companions numbered from 0 in file order:
    ``target.reference_epoch``, ``central.mass.low``, ``distance.parallax.sd``,
    ``instruments.spec-a.offset.mean``, ``companion[0].period.low``,
    ``companion[1].astrometry``. Table errors name the table file, its line
    and the column.

Units of the priors (internal units, :mod:`orbitmass.units`)
    ``mass`` Msun; ``x0``, ``y0`` mas; ``vx0``, ``vy0`` mas/yr; ``vz0``,
    ``systemic``, instrument ``offset`` and ``jitter`` km/s; distance
    ``prior`` pc; ``parallax`` mas; ``period`` Julian years (rest frame);
    ``inclination``, ``arg_periastron``, ``ascending_node``, ``mean_anomaly``
    radians (given with any angle unit, e.g. ``"30 deg"``); bare numbers for
    ``eccentricity``, ``mass_ratio`` and ``periastron_time`` (Julian year).

Defaults where the target file gives no prior
    ============================  ==============================================
    ``mass``                      LogUniform(1e-3, 1e11) Msun
    ``frame``                     ``"relative"``
    ``systemic`` (relative frame) Uniform(-1000, 1000) km/s when some companion
                                  has velocities, else Fixed(0) km/s (unused)
    ``x0``, ``y0`` (absolute)     Uniform(-1e4, 1e4) mas
    ``vx0``, ``vy0`` (absolute)   Uniform(-1e3, 1e3) mas/yr
    ``vz0`` (absolute)            Uniform(-1e4, 1e4) km/s
    ``period``                    LogUniform(1 d, 1e4 yr), in yr
    ``eccentricity``              Uniform(0, 1)
    ``inclination``               Isotropic()
    ``arg_periastron``            Uniform(0, 2 pi); Fixed(0) when the
                                  eccentricity prior is fixed at 0
    ``ascending_node``            Uniform(0, 2 pi)
    ``mean_anomaly``              Uniform(0, 2 pi), absent when a
                                  ``periastron_time`` prior is given
    ``mass_ratio``                Uniform(0, 1), present only when the
                                  companion's velocity table has
                                  ``body = central`` rows
    instrument ``offset``         Fixed(0) km/s for the zero-point instrument,
                                  Uniform(-100, 100) km/s for every other one
    instrument ``jitter``         Fixed(0) km/s
    ``reference_epoch``           mean epoch of all rows of all tables
    ``target.name``               the target file name without extension
    ``distance.cosmology``        ``"Planck18"``
    ============================  ==============================================

Instruments are ordered as declared (``[instruments.NAME]`` tables in file
order); rows of a velocity table without an ``instrument`` column belong to
the instrument ``"default"``, which needs no declaration (a declared
``[instruments.default]`` gives its priors) and, when undeclared, comes after
the declared ones. The zero point is the first instrument in that order that
some velocity row uses (declared but unused instruments are kept, logged, and
never the zero point unless none is used). Companions sharing a ``plane``
share one inclination and one ascending-node prior (given at most once, or
identically); plane names live apart from companion names, so a plane may
not take the name of a companion.

Names
    Companion, instrument and plane names follow
    :func:`orbitmass.model.data.name_problem`: 1 to 64 letters, digits and
    combining marks of any script, inner spaces and ``- _ + #`` (no dots,
    slashes, quotes or ``$``). The target ``name`` is free text.

Optional tables
    ``[relativity]`` (``redshift_factor``, ``precession_factor``: priors on
    bare numbers with bounds within [-100, 100], a factor not given is fixed
    at 0; ``roemer_delay``: a boolean, default false) -> ``Target.relativity``;
    ``[extended_mass]`` (``fraction``: a prior on bare numbers within [0, 1000];
    ``scale_radius``: an angle or a length, positive) -> ``Target.extended_mass``;
    ``[fit]`` (``walkers`` 2 to 100000, ``seed`` 0 to 2**63 - 1, ``max_steps``
    10 to 10**8; whole numbers) -> ``Target.fit_options``, which the command
    line and :class:`orbitmass.fit.Fit` arguments override. Any other table
    (``[output]``, a misspelt name) is refused.

Limits
    The target file is at most :data:`MAX_TARGET_BYTES` (10 MiB); all its
    tables together hold at most ``orbitmass.io.tables.MAX_ROWS`` rows;
    ``reference_epoch`` and the numbers of a ``periastron_time`` prior lie
    within the Julian years -5000 to 10000, like table epochs. Table paths may
    be relative (to the target file's folder), absolute, or lead outside that
    folder.

Longer than 600 lines because every key of the target file is validated here with its own
error message (file, key, what was expected), which the input contract requires.
"""

from __future__ import annotations

import datetime
import difflib
import hashlib
import json
import logging
import math
import os
import re
import tomllib
from pathlib import Path
from typing import Any

import astropy.units as u
import numpy as np

from orbitmass.exceptions import InputError
from orbitmass.io.tables import (
    DEFAULT_INSTRUMENT,
    EPOCH_RANGE_JYEAR,
    MAX_ROWS,
    astrometry_from_bytes,
    decode_text,
    load_bytes,
    velocities_from_bytes,
)
from orbitmass.model.data import (
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
from orbitmass.model.priors import (
    FAMILIES,
    Fixed,
    Isotropic,
    LogUniform,
    Normal,
    Prior,
    Uniform,
    make_prior,
    optional_keys,
)
from orbitmass.units import DAYS_PER_YEAR, parse_quantity

__all__ = ["read_target", "read_target_name", "parse_prior", "DEFAULT_PRIORS", "MAX_TARGET_BYTES",
           "FIT_LIMITS"]

logger = logging.getLogger(__name__)

_TWO_PI = 2.0 * math.pi

#: Default priors (internal units) of the central body, companions and instruments.
DEFAULT_PRIORS: dict[str, Prior] = {
    "mass": LogUniform(1e-3, 1e11),
    "systemic": Uniform(-1000.0, 1000.0),
    "systemic_no_velocities": Fixed(0.0),
    "x0": Uniform(-1e4, 1e4),
    "y0": Uniform(-1e4, 1e4),
    "vx0": Uniform(-1e3, 1e3),
    "vy0": Uniform(-1e3, 1e3),
    "vz0": Uniform(-1e4, 1e4),
    "period": LogUniform(1.0 / DAYS_PER_YEAR, 1e4),
    "eccentricity": Uniform(0.0, 1.0),
    "inclination": Isotropic(),
    "arg_periastron": Uniform(0.0, _TWO_PI),
    "ascending_node": Uniform(0.0, _TWO_PI),
    "mean_anomaly": Uniform(0.0, _TWO_PI),
    "mass_ratio": Uniform(0.0, 1.0),
    "offset_first": Fixed(0.0),
    "offset": Uniform(-100.0, 100.0),
    "jitter": Fixed(0.0),
}

# key -> physical type of its values (None: bare numbers; "orientation": angle in radians)
_CENTRAL_UNITS: dict[str, str | None] = {
    "mass": "mass",
    "x0": "angle",
    "y0": "angle",
    "vx0": "angular speed",
    "vy0": "angular speed",
    "vz0": "speed",
    "systemic": "speed",
}
_COMPANION_UNITS: dict[str, str | None] = {
    "period": "time",
    "eccentricity": None,
    "inclination": "orientation",
    "arg_periastron": "orientation",
    "ascending_node": "orientation",
    "mean_anomaly": "orientation",
    "periastron_time": None,
    "mass_ratio": None,
}
_ABSOLUTE_ONLY = ("x0", "y0", "vx0", "vy0", "vz0")
_PLANE_KEYS = ("inclination", "ascending_node")

#: Largest target file read (bytes): 10 MiB.
MAX_TARGET_BYTES = 10 * 1024**2

# physical ranges: key -> (low, high, low included, high included)
_RANGES: dict[str, tuple[float, float, bool, bool]] = {
    "mass": (0.0, math.inf, False, False),
    "period": (0.0, math.inf, False, False),
    "distance": (0.0, math.inf, False, False),
    "parallax": (0.0, math.inf, False, False),
    "eccentricity": (0.0, 1.0, True, False),
    "mass_ratio": (0.0, math.inf, True, False),
    "jitter": (0.0, math.inf, True, False),
    "inclination": (0.0, math.pi, True, True),
    "periastron_time": (*EPOCH_RANGE_JYEAR, True, True),
    "factor": (-100.0, 100.0, True, True),
    "fraction": (0.0, 1000.0, True, True),
}
# ranges that must hold the whole prior (its bounds, or the mean of a normal prior), not
# just meet it; the upper end of a closed-open range is allowed as a bound (uniform 0 to 1)
_CONTAINED = ("eccentricity", "mass_ratio", "jitter", "inclination", "periastron_time",
              "factor", "fraction")
_RANGE_UNITS = {"inclination": ("deg", 180.0 / math.pi), "mass": ("solMass", 1.0),
                "period": ("yr", 1.0), "distance": ("pc", 1.0), "parallax": ("mas", 1.0),
                "jitter": ("km/s", 1.0)}

_TOP_LEVEL = ("target", "central", "distance", "instruments", "companion", "relativity",
              "extended_mass", "fit")

#: ``[fit]`` key -> (lowest, highest) whole number accepted
FIT_LIMITS: dict[str, tuple[int, int]] = {
    "walkers": (2, 100_000),
    "seed": (0, 2**63 - 1),
    "max_steps": (10, 10**8),
}


# --------------------------------------------------------------------------- helpers


def _show(value: object, depth: int = 0) -> str:
    """A TOML value as it would be written in the file (no Python reprs), shortened."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        text = value if len(value) <= 60 else value[:57] + "..."
        if "'" not in text and text.isprintable():
            return f"'{text}'"
        return json.dumps(text, ensure_ascii=False)  # TOML basic-string escapes (\\n, \\")
    if isinstance(value, int):
        digits = len(str(abs(value)))
        return str(value) if digits <= 30 else f"an integer of {digits} digits"
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, datetime.date | datetime.time):
        return f"the date/time {value.isoformat()}"
    if depth > 1:
        return "..."
    if isinstance(value, list):
        return "[" + ", ".join(_show(v, depth + 1) for v in value[:4]) \
            + (", ..." if len(value) > 4 else "") + "]"
    if isinstance(value, dict):
        items = [f"{k} = {_show(v, depth + 1)}" for k, v in list(value.items())[:4]]
        return "{ " + ", ".join(items) + (", ..." if len(value) > 4 else "") + " }"
    return str(value)


def _table(value: object, key: str, where: str) -> dict[str, Any]:
    if not isinstance(value, dict):
        raise InputError(f"expected a table ([{key}] or {{ ... }}), got {_show(value)}",
                         file=where, key=key)
    return value


def _no_unknown(table: dict[str, Any], allowed: tuple[str, ...], prefix: str, where: str) -> None:
    for k in table:
        if k not in allowed:
            close = difflib.get_close_matches(str(k), allowed, n=1, cutoff=0.6)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            raise InputError(f"unknown key '{k}'{hint}; allowed here: {', '.join(allowed)}",
                             file=where, key=f"{prefix}.{k}" if prefix else k)


def _bare_number(value: object, key: str, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise InputError(f"expected a bare number, got {_show(value)}", file=where, key=key)
    try:
        number = float(value)
    except OverflowError:
        raise InputError(f"{_show(value)} is too large for a floating-point number", file=where,
                         key=key) from None
    if not math.isfinite(number):
        raise InputError(f"expected a finite number, got {_show(value)}", file=where, key=key)
    return number


def _string(value: object, key: str, where: str) -> str:
    if not isinstance(value, str) or not value.strip():
        raise InputError(f"expected a non-empty string, got {_show(value)}", file=where, key=key)
    return value.strip()


def _name(value: object, key: str, where: str, what: str) -> str:
    if not isinstance(value, str):
        raise InputError(f"expected a {what} name (a string), got {_show(value)}", file=where,
                         key=key)
    name = value
    problem = name_problem(name)
    if problem:
        raise InputError(f"{what} name {_show(name)} {problem}", file=where, key=key)
    return name


def _check_range(prior: Prior, kind: str, key: str, where: str) -> None:
    low, high, low_in, high_in = _RANGES[kind]
    unit, scale = _RANGE_UNITS.get(kind, ("", 1.0))
    if prior.fixed:
        v = prior.support[0]
        ok = (v > low or (low_in and v == low)) and (v < high or (high_in and v == high))
    elif kind in _CONTAINED:
        a, b = (prior.mean, prior.mean) if isinstance(prior, Normal) else prior.support
        ok = (a > low or (low_in and a == low)) and b <= high and a < b or (
            isinstance(prior, Normal) and low <= a <= high)
    else:
        a, b = prior.support
        ok = b > low and a < high
    if not ok:
        span = (f"{'[' if low_in else '('}{low * scale:g}, {high * scale:g}"
                f"{']' if high_in else ')'}{' ' + unit if unit else ''}")
        where_ = "its mean lies" if isinstance(prior, Normal) and kind in _CONTAINED else "it lies"
        raise InputError(f"the prior {prior.describe(unit, scale)} is not allowed here: "
                         f"{where_} outside {span}", file=where, key=key)


def parse_prior(
    spec: object,
    key: str,
    physical_type: str | None,
    where: str,
    *,
    allow_isotropic: bool = False,
) -> Prior:
    """Build a prior from its inline table ``{ dist = ..., ... }``.

    Parameters
    ----------
    spec : dict
        The TOML inline table.
    key : str
        Dotted key of the prior (e.g. ``companion[0].period``), for messages.
    physical_type : str or None
        Physical type of the values (a key of ``orbitmass.units.INTERNAL_UNITS``),
        ``"orientation"`` for orbit angles (any angle unit, returned in radians),
        or None when they are bare numbers.
    where : str
        The target file, for messages.
    allow_isotropic : bool
        Whether ``dist = "isotropic"`` is accepted (inclination only).

    Returns
    -------
    Prior
        The prior, values in internal units (orientation angles in radians).

    Raises
    ------
    InputError
        On an unknown ``dist``, missing or unknown keys, a bare number where a
        unit is required (or the reverse), ``sd <= 0``, ``low >= high`` or a
        log-uniform ``low <= 0``.

    Examples
    --------
    >>> parse_prior({"dist": "uniform", "low": "1 kpc", "high": "2 kpc"}, "distance.prior",
    ...             "length", "t.toml")
    Uniform(low=1000.0, high=2000.0)
    """
    if not isinstance(spec, dict):
        raise InputError(f"expected a prior as an inline table like {{ dist = \"uniform\", "
                         f"low = ..., high = ... }}, got {_show(spec)}", file=where, key=key)
    dist = spec.get("dist")
    allowed = [d for d in FAMILIES if allow_isotropic or d != "isotropic"]
    if dist not in allowed:
        hint = " ('isotropic' is for inclination only)" if dist == "isotropic" else ""
        raise InputError(f"unknown prior dist {_show(dist)}{hint}; expected one of "
                         f"{', '.join(allowed)}", file=where, key=f"{key}.dist")
    cls, required = FAMILIES[dist]
    optional = tuple(optional_keys(cls))
    _no_unknown(spec, ("dist",) + required + optional, key, where)
    if optional and physical_type is not None and any(k not in spec for k in optional):
        raise InputError(f"a {dist} prior on a quantity with units needs "
                         f"{', '.join(required + optional)}", file=where, key=key)
    values: dict[str, float] = {}
    for name in required + tuple(k for k in optional if k in spec):
        sub = f"{key}.{name}"
        if name not in spec:
            raise InputError(f"missing '{name}': a {dist} prior needs {', '.join(required)}",
                             file=where, key=sub)
        if physical_type is None or name in cls.shape_keys:  # shape parameters are bare numbers
            values[name] = _bare_number(spec[name], sub, where)
        elif physical_type == "orientation":  # validated as an angle, converted by astropy
            parse_quantity(spec[name], "angle", key=sub, where=where)
            values[name] = float(u.Quantity(spec[name]).to_value(u.rad))
        else:
            values[name] = parse_quantity(spec[name], physical_type, key=sub, where=where)
    if "sd" in values and not values["sd"] > 0.0:
        raise InputError(f"sd must be positive, got {_show(spec['sd'])}", file=where,
                         key=f"{key}.sd")
    if "low" in values and "high" in values and not values["low"] < values["high"]:
        raise InputError(f"low ({_show(spec['low'])}) must be below high "
                         f"({_show(spec['high'])})", file=where, key=f"{key}.low")
    if dist == "log-uniform" and not values["low"] > 0.0:
        raise InputError(f"a log-uniform prior needs low > 0, got {_show(spec['low'])}",
                         file=where, key=f"{key}.low")
    try:
        return make_prior(dist, values)
    except InputError as exc:  # a range the family checks (e.g. beta: alpha > 0)
        raise InputError(exc.reason, file=where, key=f"{key}.{exc.key}") from None


# --------------------------------------------------------------------------- sections


def _read_toml(path: str | os.PathLike[str]) -> tuple[dict[str, Any], bytes, str]:
    where = str(path)
    data = load_bytes(path, limit=MAX_TARGET_BYTES)
    text = decode_text(data, where)
    try:
        doc = tomllib.loads(text)
    except RecursionError:
        raise InputError("TOML nested too deeply to read", file=where) from None
    except tomllib.TOMLDecodeError as exc:
        match = re.search(r"line (\d+)", str(exc))
        line = int(match.group(1)) if match else None
        raise InputError(f"TOML syntax error: {exc}", file=where, line=line) from None
    for k in doc:
        if k == "output":
            raise InputError("there is no [output] table: the run folder and what goes in it "
                             "are chosen on the command line (--out) or when saving a fit",
                             file=where, key=k)
        if k not in _TOP_LEVEL:
            close = difflib.get_close_matches(str(k), _TOP_LEVEL, n=1, cutoff=0.6)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            raise InputError(f"unknown table or key '{k}'{hint}; a target file has the tables "
                             f"{', '.join(_TOP_LEVEL)}", file=where, key=k)
    return doc, data, where


def _central(doc: dict[str, Any], where: str) -> tuple[str, dict[str, Prior]]:
    central = _table(doc.get("central", {}), "central", where)
    _no_unknown(central, ("frame",) + tuple(_CENTRAL_UNITS), "central", where)
    frame = central.get("frame", "relative")
    if frame not in ("relative", "absolute"):
        raise InputError(f"frame must be \"relative\" or \"absolute\", got {_show(frame)}",
                         file=where, key="central.frame")
    if frame == "absolute":
        keys: tuple[str, ...] = ("mass",) + _ABSOLUTE_ONLY
        if "systemic" in central:
            raise InputError("no 'systemic' in the absolute frame: vz0 is the line-of-sight "
                             "velocity there", file=where, key="central.systemic")
    else:
        keys = ("mass", "systemic")
        for k in _ABSOLUTE_ONLY:
            if k in central:
                raise InputError(f"'{k}' applies only with frame = \"absolute\"", file=where,
                                 key=f"central.{k}")
    priors: dict[str, Prior] = {}
    for k in keys:
        if k in central:
            priors[k] = parse_prior(central[k], f"central.{k}", _CENTRAL_UNITS[k], where)
        else:
            priors[k] = DEFAULT_PRIORS[k]
    _check_range(priors["mass"], "mass", "central.mass", where)
    return frame, priors


def _distance(doc: dict[str, Any], where: str) -> Distance:
    if "distance" not in doc:
        raise InputError("missing [distance] table: give prior, parallax and/or redshift",
                         file=where, key="distance")
    dist = _table(doc["distance"], "distance", where)
    _no_unknown(dist, ("prior", "parallax", "redshift", "cosmology"), "distance", where)
    if "prior" in dist and "parallax" in dist:
        raise InputError("give ONE of 'prior' (distance) and 'parallax', not both", file=where,
                         key="distance.parallax")
    prior = parallax = redshift = None
    if "prior" in dist:
        prior = parse_prior(dist["prior"], "distance.prior", "length", where)
        _check_range(prior, "distance", "distance.prior", where)
    if "parallax" in dist:
        parallax = parse_prior(dist["parallax"], "distance.parallax", "angle", where)
        _check_range(parallax, "parallax", "distance.parallax", where)
    if "redshift" in dist:
        redshift = _bare_number(dist["redshift"], "distance.redshift", where)
        if not redshift > -1.0:
            raise InputError(f"redshift must be > -1, got {redshift:g}", file=where,
                             key="distance.redshift")
        if prior is None and parallax is None and not redshift > 0.0:
            raise InputError(f"a redshift alone sets the distance and must be > 0, got "
                             f"{redshift:g}; add a distance prior or parallax for a "
                             "blueshifted or zero-redshift host", file=where,
                             key="distance.redshift")
    if prior is None and parallax is None and redshift is None:
        raise InputError("no distance information: give prior, parallax and/or redshift",
                         file=where, key="distance")
    cosmology = "Planck18"
    if "cosmology" in dist:
        if redshift is None:
            raise InputError("'cosmology' is used only with a redshift", file=where,
                             key="distance.cosmology")
        from astropy.cosmology import realizations  # start-up time: loaded only when needed

        cosmology = dist["cosmology"]
        if isinstance(cosmology, dict):
            cosmology = _flat_lcdm_spec(cosmology, where)
        elif not isinstance(cosmology, str) or cosmology not in realizations.available:
            raise InputError(f"unknown cosmology {_show(cosmology)}; expected one of "
                             f"{', '.join(realizations.available)}, or an inline table "
                             "{ H0 = \"70 km / (s Mpc)\", Om0 = 0.3 } for a flat Lambda-CDM model",
                             file=where, key="distance.cosmology")
    return Distance(prior=prior, parallax=parallax, redshift=redshift, cosmology=cosmology)


def _flat_lcdm_spec(table: dict, where: str) -> str:
    """``{ H0 = "70 km / (s Mpc)", Om0 = 0.3, Tcmb0 = "0 K" }`` -> ``"flat-lcdm:H0=70.0,Om0=0.3,Tcmb0=0.0"``.

    H0 in km/s/Mpc, Om0 bare in (0, 1], Tcmb0 in K (default 0: no radiation).
    """
    _no_unknown(table, ("H0", "Om0", "Tcmb0"), "distance.cosmology", where)
    for key in ("H0", "Om0"):
        if key not in table:
            raise InputError(f"missing key {key!r} of the flat Lambda-CDM model", file=where,
                             key=f"distance.cosmology.{key}")
    try:
        h0 = float(u.Quantity(table["H0"]).to_value(u.km / u.s / u.Mpc)) if isinstance(table["H0"], str) else None
    except (TypeError, ValueError, u.UnitsError):
        h0 = None
    if h0 is None or not math.isfinite(h0) or h0 <= 0:
        raise InputError(f"expected a Hubble constant such as '70 km / (s Mpc)', got {_show(table['H0'])}",
                         file=where, key="distance.cosmology.H0")
    om0 = _bare_number(table["Om0"], "distance.cosmology.Om0", where)
    if not 0.0 < om0 <= 1.0:
        raise InputError(f"Om0 must be in (0, 1], got {om0:g}", file=where, key="distance.cosmology.Om0")
    tcmb = 0.0
    if "Tcmb0" in table:
        try:
            tcmb = float(u.Quantity(table["Tcmb0"]).to_value(u.K)) if isinstance(table["Tcmb0"], str) else -1.0
        except (TypeError, ValueError, u.UnitsError):
            tcmb = -1.0
        if not (math.isfinite(tcmb) and tcmb >= 0):
            raise InputError(f"expected a temperature such as '2.725 K', got {_show(table['Tcmb0'])}",
                             file=where, key="distance.cosmology.Tcmb0")
    return f"flat-lcdm:H0={float(h0)!r},Om0={float(om0)!r},Tcmb0={float(tcmb)!r}"


def _declared_instruments(doc: dict[str, Any], where: str) -> dict[str, dict[str, Prior]]:
    table = _table(doc.get("instruments", {}), "instruments", where)
    declared: dict[str, dict[str, Prior]] = {}
    for name, spec in table.items():
        key = f"instruments.{name}"
        _name(name, key, where, "instrument")
        spec = _table(spec, key, where)
        _no_unknown(spec, ("offset", "jitter"), key, where)
        declared[name] = {}
        for k in ("offset", "jitter"):
            if k in spec:
                declared[name][k] = parse_prior(spec[k], f"{key}.{k}", "speed", where)
        if "jitter" in declared[name]:
            _check_range(declared[name]["jitter"], "jitter", f"{key}.jitter", where)
    return declared


def _companion_priors(
    spec: dict[str, Any], key: str, where: str, velocities: Velocities | None
) -> dict[str, Prior]:
    given: dict[str, Prior] = {}
    for k, ptype in _COMPANION_UNITS.items():
        if k in spec:
            given[k] = parse_prior(spec[k], f"{key}.{k}", ptype, where,
                                   allow_isotropic=k == "inclination")
            if k in _RANGES:
                _check_range(given[k], k, f"{key}.{k}", where)
    if "mean_anomaly" in given and "periastron_time" in given:
        raise InputError("give either mean_anomaly or periastron_time, not both", file=where,
                         key=f"{key}.periastron_time")
    has_central = velocities is not None and bool(np.any(velocities.central))
    if "mass_ratio" in given and not has_central:
        raise InputError("a mass_ratio prior needs central-body velocities (rows with "
                         "body = central in the velocity table); without them the companion is "
                         "a test particle", file=where, key=f"{key}.mass_ratio")
    priors = dict(given)
    for k in ("period", "eccentricity", "inclination", "arg_periastron", "ascending_node"):
        priors.setdefault(k, DEFAULT_PRIORS[k])
    if "periastron_time" not in priors:
        priors.setdefault("mean_anomaly", DEFAULT_PRIORS["mean_anomaly"])
    if has_central:
        priors.setdefault("mass_ratio", DEFAULT_PRIORS["mass_ratio"])
    circular = priors["eccentricity"] == Fixed(0.0)
    if circular:
        if "arg_periastron" in given and given["arg_periastron"] != Fixed(0.0):
            raise InputError("with eccentricity fixed at 0 the argument of periastron is "
                             "undefined; remove this prior (it is held at 0)", file=where,
                             key=f"{key}.arg_periastron")
        priors["arg_periastron"] = Fixed(0.0)
    return priors


def _companion_tables(
    spec: dict[str, Any], key: str, where: str, base: Path
) -> tuple[Astrometry | None, Velocities | None, list[bytes]]:
    blobs: list[bytes] = []
    tables: list[Astrometry | Velocities | None] = []
    for k, parse in (("astrometry", astrometry_from_bytes), ("velocities", velocities_from_bytes)):
        if k not in spec:
            tables.append(None)
            continue
        rel = _string(spec[k], f"{key}.{k}", where)
        path = base / rel  # an absolute path replaces base; ../ may leave the folder: allowed
        data = load_bytes(path, key=f"{key}.{k}", where=where)
        blobs.append(data)
        tables.append(parse(data, str(path)))
    astrometry, velocities = tables
    if astrometry is None and velocities is None:
        raise InputError("no data: give 'astrometry' and/or 'velocities' (paths to tables)",
                         file=where, key=key)
    return astrometry, velocities, blobs  # type: ignore[return-value]


class _About:
    """Context that prefixes every InputError raised inside it with ``label``."""

    def __init__(self, label: str):
        self.label = label

    def __enter__(self) -> _About:
        return self

    def __exit__(self, kind, exc, tb) -> bool:
        if isinstance(exc, InputError) and not getattr(exc, "_labelled", False):
            new = InputError(f"{self.label}: {exc.reason}", file=exc.file, line=exc.line,
                             key=exc.key)
            new._labelled = True  # type: ignore[attr-defined]
            raise new from None
        return False


def _label(i: int, name: str) -> str:
    return f"companion[{i}] {_show(name)}"


def _share_planes(drafts: list[dict[str, Any]], where: str) -> None:
    names = {d["name"]: i for i, d in enumerate(drafts)}
    planes: dict[str, list[int]] = {}
    for i, d in enumerate(drafts):
        if d["plane"] is not None:
            if d["plane"] in names:
                other = names[d["plane"]]
                raise InputError(
                    f"{_label(i, d['name'])}: plane {_show(d['plane'])} has the name of "
                    f"{_label(other, drafts[other]['name'])}; plane names must differ from "
                    "companion names (choose e.g. \"disk\")", file=where, key=f"companion[{i}].plane")
            planes.setdefault(d["plane"], []).append(i)
    for members in planes.values():
        for k in _PLANE_KEYS:
            explicit = [(i, drafts[i]["given"][k]) for i in members if k in drafts[i]["given"]]
            if not explicit:
                continue
            first_i, first = explicit[0]
            for i, prior in explicit[1:]:
                if prior != first:
                    raise InputError(f"{_label(i, drafts[i]['name'])}: companions in plane "
                                     f"{_show(drafts[i]['plane'])} share one {k}; its prior "
                                     f"differs from that of {_label(first_i, drafts[first_i]['name'])}",
                                     file=where, key=f"companion[{i}].{k}")
            for i in members:
                drafts[i]["priors"][k] = first


def _instruments(
    declared: dict[str, dict[str, Prior]], companions: list[Companion], where: str
) -> dict[str, Instrument]:
    names = list(declared)
    for i, comp in enumerate(companions):
        v = comp.velocities
        if v is None:
            continue
        unknown = [j for j, n in enumerate(v.instrument) if n not in declared
                   and n != DEFAULT_INSTRUMENT]
        if unknown:
            j = min(unknown, key=lambda jj: v.lines[jj])
            raise InputError(
                f"{_label(i, comp.name)}: instrument {_show(str(v.instrument[j]))} is not "
                f"declared; add an [instruments.{v.instrument[j]}] table to {where}"
                + (f" (declared: {', '.join(declared)})" if declared else ""),
                file=v.source, line=int(v.lines[j]), key="instrument")
        if DEFAULT_INSTRUMENT in v.instrument and DEFAULT_INSTRUMENT not in names:
            names.append(DEFAULT_INSTRUMENT)
    used = {str(n) for c in companions if c.velocities is not None for n in c.velocities.instrument}
    for name in names:
        if name not in used:
            logger.warning("%s: instrument %r is declared but no velocity row uses it", where,
                           name)
    zero_point = next((n for n in names if n in used), names[0] if names else "")
    out: dict[str, Instrument] = {}
    for name in names:
        spec = declared.get(name, {})
        offset = spec.get("offset", DEFAULT_PRIORS["offset_first" if name == zero_point
                                                   else "offset"])
        out[name] = Instrument(name=name, offset=offset,
                               jitter=spec.get("jitter", DEFAULT_PRIORS["jitter"]))
    return out


def _relativity(doc: dict[str, Any], where: str) -> Relativity | None:
    if "relativity" not in doc:
        return None
    table = _table(doc["relativity"], "relativity", where)
    _no_unknown(table, ("redshift_factor", "precession_factor", "roemer_delay"), "relativity",
                where)
    factors: dict[str, Prior] = {}
    for k in ("redshift_factor", "precession_factor"):
        if k in table:
            factors[k] = parse_prior(table[k], f"relativity.{k}", None, where)
            _check_range(factors[k], "factor", f"relativity.{k}", where)
    roemer = table.get("roemer_delay", False)
    if not isinstance(roemer, bool):
        raise InputError(f"expected true or false, got {_show(roemer)}", file=where,
                         key="relativity.roemer_delay")
    return Relativity(**factors, roemer_delay=roemer)


def _scale_radius(value: object, key: str, where: str) -> tuple[float | None, float | None]:
    """(mas, au) of a scale radius given as an angle or a length; the other is None."""
    if isinstance(value, str):
        try:
            q = u.Quantity(value)
        except (TypeError, ValueError):
            q = None
        if q is not None and q.isscalar:
            for ptype, unit in (("angle", u.mas), ("length", u.au)):
                if q.unit.is_equivalent(unit):
                    with np.errstate(over="ignore", invalid="ignore"):
                        number = float(q.to_value(unit))
                    if not (math.isfinite(number) and number > 0.0):
                        raise InputError(f"the scale radius must be positive and finite, got "
                                         f"{_show(value)}", file=where, key=key)
                    return (number, None) if ptype == "angle" else (None, number)
    raise InputError(f"expected an angle such as \"10 mas\" or a length such as \"500 au\", "
                     f"got {_show(value)}", file=where, key=key)


def _extended_mass(doc: dict[str, Any], where: str) -> ExtendedMass | None:
    if "extended_mass" not in doc:
        return None
    table = _table(doc["extended_mass"], "extended_mass", where)
    _no_unknown(table, ("fraction", "scale_radius"), "extended_mass", where)
    for k in ("fraction", "scale_radius"):
        if k not in table:
            raise InputError(f"missing '{k}': [extended_mass] needs fraction (a prior on bare "
                             "numbers) and scale_radius (an angle or a length)", file=where,
                             key=f"extended_mass.{k}")
    fraction = parse_prior(table["fraction"], "extended_mass.fraction", None, where)
    _check_range(fraction, "fraction", "extended_mass.fraction", where)
    mas, au = _scale_radius(table["scale_radius"], "extended_mass.scale_radius", where)
    return ExtendedMass(fraction=fraction, scale_radius_mas=mas, scale_radius_au=au)


def _fit_options(doc: dict[str, Any], where: str) -> FitOptions:
    if "fit" not in doc:
        return FitOptions()
    table = _table(doc["fit"], "fit", where)
    _no_unknown(table, tuple(FIT_LIMITS), "fit", where)
    values: dict[str, int] = {}
    for k, (low, high) in FIT_LIMITS.items():
        if k not in table:
            continue
        v = table[k]
        if isinstance(v, bool) or not isinstance(v, int) or not low <= v <= high:
            raise InputError(f"expected a whole number from {low} to {high:,}, got {_show(v)}",
                             file=where, key=f"fit.{k}")
        values[k] = v
    return FitOptions(**values)


def _reference_epoch(head: dict[str, Any], companions: list[Companion], where: str) -> float:
    if "reference_epoch" in head:
        epoch = _bare_number(head["reference_epoch"], "target.reference_epoch", where)
        low, high = EPOCH_RANGE_JYEAR
        if not low <= epoch <= high:
            raise InputError(f"reference_epoch {epoch:g} lies outside the Julian years "
                             f"{low:.0f} to {high:.0f} (the range of table epochs)", file=where,
                             key="target.reference_epoch")
        return epoch
    epochs = [tab.t_yr for c in companions for tab in (c.astrometry, c.velocities)
              if tab is not None]
    return float(np.mean(np.concatenate(epochs)))


# --------------------------------------------------------------------------- public


def read_target_name(path: str | os.PathLike[str]) -> str:
    """The name :func:`read_target` gives a target file, without reading its tables.

    The file is decoded as :func:`read_target` decodes it (a byte-order mark
    is ignored), so the name, and any seed derived from it, does not depend
    on how an editor saved the file.

    Parameters
    ----------
    path : str or path-like
        The target file.

    Returns
    -------
    str
        ``target.name`` (blanks at both ends removed), or the file name
        without its extension when the file gives none.

    Raises
    ------
    InputError
        When the file cannot be read or is not valid TOML, or ``target.name``
        is not a non-empty string.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.toml"
    >>> _ = p.write_bytes("\\ufeff[target]\\nname = 'Vexa 9'\\n".encode())
    >>> read_target_name(p)
    'Vexa 9'
    """
    doc, _, where = _read_toml(path)
    head = _table(doc.get("target", {}), "target", where)
    return _string(head["name"], "target.name", where) if "name" in head else Path(path).stem


def read_target(path: str | os.PathLike[str]) -> Target:
    """Read a target file and every table it names.

    Parameters
    ----------
    path : str or path-like
        The target file (TOML); table paths in it are relative to its folder.

    Returns
    -------
    Target
        Data in internal units, every prior resolved (defaults in the module
        docstring), ``reference_epoch`` resolved, ``data_sha256`` the SHA-256
        of the target file bytes followed by each table's bytes in companion
        order (astrometry before velocities).

    Raises
    ------
    InputError
        On any problem, naming the file and the dotted key or table line.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "c1.csv").write_text("jyear,rv_kms,rv_err_kms\\n2020,1,0.1\\n2022,2,0.1\\n")
    >>> _ = (d / "t.toml").write_text('[distance]\\nparallax = { dist = "fixed", '
    ...     'value = "2 mas" }\\n[[companion]]\\nname = "C1"\\nvelocities = "c1.csv"\\n')
    >>> t = read_target(d / "t.toml")
    >>> t.reference_epoch, t.distance.parallax, list(t.instruments)
    (2021.0, Fixed(value=2.0), ['default'])
    """
    doc, data, where = _read_toml(path)
    base = Path(path).parent
    head = _table(doc.get("target", {}), "target", where)
    _no_unknown(head, ("name", "reference_epoch"), "target", where)
    name = _string(head["name"], "target.name", where) if "name" in head else Path(path).stem
    frame, central_priors = _central(doc, where)
    distance = _distance(doc, where)
    declared = _declared_instruments(doc, where)
    relativity = _relativity(doc, where)
    extended_mass = _extended_mass(doc, where)
    fit_options = _fit_options(doc, where)

    entries = doc.get("companion")
    if entries is None:
        raise InputError("no companion: add at least one [[companion]] table", file=where,
                         key="companion")
    if not isinstance(entries, list) or not entries:
        raise InputError("expected one or more [[companion]] tables (double brackets)",
                         file=where, key="companion")
    allowed = ("name", "astrometry", "velocities", "plane") + tuple(_COMPANION_UNITS)
    drafts: list[dict[str, Any]] = []
    blobs = [data]
    n_rows = 0
    for i, spec in enumerate(entries):
        key = f"companion[{i}]"
        spec = _table(spec, key, where)
        cname = _name(spec["name"], f"{key}.name", where, "companion") if "name" in spec \
            else f"C{i + 1}"
        with _About(_label(i, cname)):
            _no_unknown(spec, allowed, key, where)
            if any(d["name"] == cname for d in drafts):
                raise InputError(f"companion name {_show(cname)} is used twice", file=where,
                                 key=f"{key}.name")
            plane = _name(spec["plane"], f"{key}.plane", where, "plane") if "plane" in spec \
                else None
            astrometry, velocities, table_bytes = _companion_tables(spec, key, where, base)
            n_rows += sum(len(tab) for tab in (astrometry, velocities) if tab is not None)
            if n_rows > MAX_ROWS:
                raise InputError(f"the tables of this target hold more than {MAX_ROWS:,} rows "
                                 "together, the limit of one target", file=where, key=key)
            blobs.extend(table_bytes)
            priors = _companion_priors(spec, key, where, velocities)
        given = {k: priors[k] for k in _PLANE_KEYS if k in spec}
        drafts.append(dict(name=cname, plane=plane, astrometry=astrometry,
                           velocities=velocities, priors=priors, given=given))
    _share_planes(drafts, where)
    companions = [Companion(name=d["name"], astrometry=d["astrometry"],
                            velocities=d["velocities"], priors=d["priors"], plane=d["plane"])
                  for d in drafts]
    instruments = _instruments(declared, companions, where)
    has_velocities = any(c.has_velocities for c in companions)
    if frame == "relative" and not has_velocities and "systemic" not in doc.get("central", {}):
        central_priors["systemic"] = DEFAULT_PRIORS["systemic_no_velocities"]
    zero = next(iter(instruments.values()), None)
    if (frame == "relative" and has_velocities and zero is not None and not zero.offset.fixed
            and not central_priors["systemic"].fixed):
        logger.warning("%s: the systemic velocity and the offset of the first instrument %r "
                       "are both sampled; only their priors separate them", where, zero.name)
    reference_epoch = _reference_epoch(head, companions, where)
    digest = hashlib.sha256()
    for blob in blobs:
        digest.update(blob)
    return Target(name=name, reference_epoch=reference_epoch, frame=frame,
                  central_priors=central_priors, distance=distance, instruments=instruments,
                  companions=tuple(companions), source=where, data_sha256=digest.hexdigest(),
                  relativity=relativity, extended_mass=extended_mass, fit_options=fit_options)
