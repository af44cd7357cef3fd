"""The internal unit system and the conversions in and out of it.

Inside orbitmass every quantity is a plain float in one fixed unit:

=================  ===========================================================
quantity           internal unit
=================  ===========================================================
mass               solar masses (M_sun), via the IAU 2015 nominal GM_sun
distance           parsecs (pc)
sky angle          milliarcseconds (mas)
time, epoch        Julian years (yr = 365.25 d); epochs as Julian-year dates
                   (J2000.0 = JD 2451545.0 TDB)
velocity           km/s
proper motion      milliarcseconds per Julian year (mas/yr)
orbit orientation  radians inside the model, degrees in every report
=================  ===========================================================

Astropy quantities are parsed at the boundary (:func:`parse_quantity`) and
converted once; the model and likelihood run on plain floats.
"""

from __future__ import annotations

import math

import astropy.units as u
import numpy as np
from astropy import constants as const

from orbitmass.exceptions import InputError

__all__ = [
    "GM_SUN_AU3_PER_YR2",
    "KMS_PER_AU_PER_YR",
    "C_KMS",
    "C_AU_PER_YR",
    "AU_PER_PC",
    "RS_AU_PER_MSUN",
    "DAYS_PER_YEAR",
    "JD_J2000",
    "INTERNAL_UNITS",
    "parse_quantity",
    "to_internal",
]

#: Julian year in days (IAU).
DAYS_PER_YEAR = 365.25
#: JD of the J2000.0 epoch (TDB).
JD_J2000 = 2451545.0

#: Nominal solar mass parameter in au^3 / Julian yr^2 (IAU 2015 B3 GM_sun, IAU 2012 au).
GM_SUN_AU3_PER_YR2 = float((const.GM_sun * (u.yr**2) / u.au**3).decompose())
#: km/s in one au per Julian year.
KMS_PER_AU_PER_YR = float((u.au / u.yr).to(u.km / u.s))
#: Speed of light in km/s and in au per Julian year.
C_KMS = float(const.c.to(u.km / u.s).value)
C_AU_PER_YR = C_KMS / KMS_PER_AU_PER_YR
#: Astronomical units in one parsec (648000 / pi, IAU 2015 B2).
AU_PER_PC = 648000.0 / math.pi
#: Schwarzschild radius 2 GM_sun / c^2 of one solar mass, in au.
RS_AU_PER_MSUN = 2.0 * GM_SUN_AU3_PER_YR2 / C_AU_PER_YR**2

#: physical type -> internal astropy unit
INTERNAL_UNITS: dict[str, u.UnitBase] = {
    "mass": u.solMass,
    "length": u.pc,
    "angle": u.mas,
    "time": u.yr,
    "speed": u.km / u.s,
    "angular speed": u.mas / u.yr,
}


def to_internal(quantity: u.Quantity, physical_type: str) -> float:
    """Convert an astropy quantity to the internal unit of ``physical_type``.

    Parameters
    ----------
    quantity : Quantity
        Any quantity convertible to the internal unit.
    physical_type : str
        One of the keys of :data:`INTERNAL_UNITS`.

    Returns
    -------
    float
        The value in the internal unit.

    Examples
    --------
    >>> import astropy.units as u
    >>> round(to_internal(1 * u.arcsec, "angle"), 9)  # 1 arcsec = 1000 mas by definition
    1000.0
    """
    return float(quantity.to_value(INTERNAL_UNITS[physical_type]))


def parse_quantity(text: object, physical_type: str, *, key: str, where: str = "") -> float:
    """Parse ``"<number> <unit>"`` and return it in the internal unit.

    Parameters
    ----------
    text : str
        For example ``"8.1 kpc"`` or ``"12 km / s"``. Anything else (a bare
        number, None, a list) is refused with an :class:`InputError`.
    physical_type : str
        Expected physical type, a key of :data:`INTERNAL_UNITS`.
    key : str
        Name of the key being read, used in the error message.
    where : str
        File (and table) being read, used in the error message.

    Returns
    -------
    float
        Finite value in the internal unit.

    Raises
    ------
    InputError
        On a value that is not a string (e.g. a bare number), a string without
        a unit, an unparsable string, more than one number (``"[1, 2] kpc"``),
        a unit of the wrong physical type, or a value that is not finite in
        the internal unit (including overflow on conversion).

    Examples
    --------
    >>> parse_quantity("8.1 kpc", "length", key="distance.prior.mean")
    8100.0
    """
    target_unit = INTERNAL_UNITS[physical_type]
    article = "an" if physical_type[0] in "aeiou" else "a"
    if isinstance(text, bool) or not isinstance(text, str):
        raise InputError(
            f"expected a quantity string like '1.5 {target_unit}' (a number and a unit of "
            f"{physical_type}), got {text!r}",
            file=where,
            key=key,
        )
    try:
        q = u.Quantity(text)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"cannot read {text!r} as '<number> <unit>' ({exc})", file=where, key=key
        ) from None
    if not q.isscalar:
        raise InputError(
            f"{text!r} is not one number and a unit; expected {article} {physical_type} such "
            f"as '1.5 {target_unit}' (a prior's bounds are separate keys, low and high)",
            file=where,
            key=key,
        )
    if q.unit == u.dimensionless_unscaled:
        raise InputError(
            f"{text!r} has no unit; expected {article} {physical_type} such as '1.5 {target_unit}'",
            file=where,
            key=key,
        )
    try:
        with np.errstate(over="ignore", invalid="ignore"):
            value = float(q.to_value(target_unit))
    except u.UnitConversionError:
        raise InputError(
            f"{text!r} is not {article} {physical_type} (cannot convert {q.unit} to {target_unit})",
            file=where,
            key=key,
        ) from None
    if not math.isfinite(value):
        raise InputError(f"{text!r} is not finite", file=where, key=key)
    return value
