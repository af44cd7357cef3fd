"""Derived physics of a Keplerian orbit, vectorised on plain floats.

Every function takes and returns plain floats or numpy arrays in the units its
names carry (``mass_msun``, ``a_au``, ``period_yr``, ``..._kms``, ...); angles
are radians unless the name says otherwise. The constants come from
:mod:`orbitmass.units`: the IAU 2015 nominal solar mass parameter GM_sun
(``GM_SUN_AU3_PER_YR2`` = 39.4769264089, not 4 pi^2 = 39.4784176044, which
belongs to the Gaussian constant of IAU 1976 and to the rounded
``M = a^3 / P^2`` of textbooks), the IAU 2012 au, the Julian year and the
exact speed of light.

Masses are the mass that enters Kepler's third law, i.e. the **total** mass
of central body and companion. For the reflex motion of the central body
use :func:`reflex_fraction` with ``q = m_companion / m_central``.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

from orbitmass.units import (
    C_AU_PER_YR,
    DAYS_PER_YEAR,
    GM_SUN_AU3_PER_YR2,
    KMS_PER_AU_PER_YR,
    RS_AU_PER_MSUN,
)

__all__ = [
    "semimajor_axis_au",
    "mass_msun",
    "period_yr",
    "schwarzschild_radius_au",
    "periastron_au",
    "apoastron_au",
    "periastron_speed_kms",
    "light_crossing_time_days",
    "semi_amplitude_kms",
    "reflex_fraction",
    "au_to_mas",
    "mas_to_au",
    "gr_periastron_advance_deg_per_orbit",
]

FloatArray = NDArray[np.float64]

_FOUR_PI2 = 4.0 * math.pi**2
#: milliarcseconds subtended by 1 au at 1 pc (definition of the parsec).
_MAS_PER_AU_AT_PC = 1000.0


def _f(x: ArrayLike) -> FloatArray:
    return np.asarray(x, dtype=np.float64)


def semimajor_axis_au(mass_msun: ArrayLike, period_yr: ArrayLike) -> FloatArray:
    """Semi-major axis from Kepler's third law, ``a^3 = GM P^2 / (4 pi^2)``.

    Parameters
    ----------
    mass_msun : array_like
        Total mass (central body + companion), solar masses.
    period_yr : array_like
        Orbital period, Julian years.

    Returns
    -------
    ndarray
        Semi-major axis of the relative orbit, au.

    Examples
    --------
    >>> print(f"{float(semimajor_axis_au(1.0, 1.0)):.10f}")
    0.9999874090
    """
    return np.cbrt(GM_SUN_AU3_PER_YR2 * _f(mass_msun) * _f(period_yr) ** 2 / _FOUR_PI2)


def mass_msun(a_au: ArrayLike, period_yr: ArrayLike) -> FloatArray:
    """Total mass from Kepler's third law, ``M = 4 pi^2 a^3 / (GM_sun P^2)``.

    Parameters
    ----------
    a_au : array_like
        Semi-major axis of the relative orbit, au.
    period_yr : array_like
        Orbital period, Julian years.

    Returns
    -------
    ndarray
        Total mass, solar masses.

    Examples
    --------
    >>> print(f"{float(mass_msun(1.0, 1.0)):.8f}")
    1.00003777
    """
    return _FOUR_PI2 * _f(a_au) ** 3 / (GM_SUN_AU3_PER_YR2 * _f(period_yr) ** 2)


def period_yr(a_au: ArrayLike, mass_msun: ArrayLike) -> FloatArray:
    """Orbital period from Kepler's third law, ``P = 2 pi sqrt(a^3 / GM)``.

    Parameters
    ----------
    a_au : array_like
        Semi-major axis of the relative orbit, au.
    mass_msun : array_like
        Total mass, solar masses.

    Returns
    -------
    ndarray
        Period, Julian years.

    Examples
    --------
    A 1 au orbit about one nominal solar mass, in days:

    >>> print(f"{float(period_yr(1.0, 1.0)) * 365.25:.9f}")
    365.256898384
    """
    return 2.0 * math.pi * np.sqrt(_f(a_au) ** 3 / (GM_SUN_AU3_PER_YR2 * _f(mass_msun)))


def schwarzschild_radius_au(mass_msun: ArrayLike) -> FloatArray:
    """Schwarzschild radius ``2 GM / c^2``.

    Parameters
    ----------
    mass_msun : array_like
        Mass, solar masses.

    Returns
    -------
    ndarray
        Schwarzschild radius, au (1.974e-8 au = 2953.25 m per solar mass).

    Examples
    --------
    >>> print(f"{float(schwarzschild_radius_au(4.0e6)):.6f}")
    0.078965
    """
    return RS_AU_PER_MSUN * _f(mass_msun)


def periastron_au(a_au: ArrayLike, e: ArrayLike) -> FloatArray:
    """Periastron distance ``a (1 - e)`` of the relative orbit.

    Parameters
    ----------
    a_au : array_like
        Semi-major axis, au.
    e : array_like
        Eccentricity in ``[0, 1)``.

    Returns
    -------
    ndarray
        Periastron distance, au.

    Examples
    --------
    >>> float(periastron_au(1000.0, 0.5))
    500.0
    """
    return _f(a_au) * (1.0 - _f(e))


def apoastron_au(a_au: ArrayLike, e: ArrayLike) -> FloatArray:
    """Apoastron distance ``a (1 + e)`` of the relative orbit.

    Parameters
    ----------
    a_au : array_like
        Semi-major axis, au.
    e : array_like
        Eccentricity in ``[0, 1)``.

    Returns
    -------
    ndarray
        Apoastron distance, au.

    Examples
    --------
    >>> float(apoastron_au(1000.0, 0.5))
    1500.0
    """
    return _f(a_au) * (1.0 + _f(e))


def periastron_speed_kms(mass_msun: ArrayLike, a_au: ArrayLike, e: ArrayLike) -> FloatArray:
    """Relative speed at periastron from the vis-viva equation.

    ``v^2 = GM (2 / r - 1 / a)`` at ``r = a (1 - e)`` gives
    ``v = sqrt(GM (1 + e) / (a (1 - e)))``.

    Parameters
    ----------
    mass_msun : array_like
        Total mass, solar masses.
    a_au : array_like
        Semi-major axis of the relative orbit, au.
    e : array_like
        Eccentricity in ``[0, 1)``.

    Returns
    -------
    ndarray
        Speed of the companion relative to the central body at periastron, km/s.

    Examples
    --------
    Circular 1 au orbit about one solar mass (the Earth's mean speed):

    >>> print(f"{float(periastron_speed_kms(1.0, 1.0, 0.0)):.4f}")
    29.7847
    """
    e = _f(e)
    v2 = GM_SUN_AU3_PER_YR2 * _f(mass_msun) * (1.0 + e) / (_f(a_au) * (1.0 - e))
    return KMS_PER_AU_PER_YR * np.sqrt(v2)


def light_crossing_time_days(length_au: ArrayLike) -> FloatArray:
    """Time light takes to cross a length.

    Parameters
    ----------
    length_au : array_like
        Length, au.

    Returns
    -------
    ndarray
        Light travel time, days (1 au: 499.005 s = 0.0057755 d).

    Examples
    --------
    >>> print(f"{float(light_crossing_time_days(1.0)) * 86400:.3f}")
    499.005
    """
    return _f(length_au) / C_AU_PER_YR * DAYS_PER_YEAR


def semi_amplitude_kms(
    a_au: ArrayLike, period_yr: ArrayLike, inclination: ArrayLike, e: ArrayLike
) -> FloatArray:
    """Line-of-sight velocity semi-amplitude of the relative orbit.

    ``K = 2 pi a sin i / (P sqrt(1 - e^2))``. Multiply by
    :func:`reflex_fraction` for the reflex motion of the central body, or by
    ``1 - reflex_fraction(q)`` for the companion about the barycentre.

    Parameters
    ----------
    a_au : array_like
        Semi-major axis of the relative orbit, au.
    period_yr : array_like
        Period, Julian years.
    inclination : array_like
        Inclination, radians.
    e : array_like
        Eccentricity in ``[0, 1)``.

    Returns
    -------
    ndarray
        Semi-amplitude of the relative line-of-sight velocity, km/s.

    Examples
    --------
    >>> import numpy as np
    >>> print(f"{float(semi_amplitude_kms(1.0, 1.0, np.pi / 2, 0.0)):.4f}")
    29.7853
    """
    e = _f(e)
    k_au_per_yr = (
        2.0 * math.pi * _f(a_au) * np.abs(np.sin(_f(inclination))) / _f(period_yr)
    ) / np.sqrt(1.0 - e * e)
    return KMS_PER_AU_PER_YR * k_au_per_yr


def reflex_fraction(q: ArrayLike) -> FloatArray:
    """Share of the relative orbit described by the central body, ``q / (1 + q)``.

    Parameters
    ----------
    q : array_like
        Mass ratio ``m_companion / m_central`` (``>= 0``).

    Returns
    -------
    ndarray
        ``m_companion / (m_central + m_companion)``: the central body's orbit
        about the barycentre is this fraction of the relative orbit (in size
        and in velocity); the companion's is the rest.

    Examples
    --------
    >>> float(reflex_fraction(1.0))
    0.5
    """
    q = _f(q)
    return q / (1.0 + q)


def au_to_mas(a_au: ArrayLike, distance_pc: ArrayLike) -> FloatArray:
    """Angle subtended by a length at a distance (small angles).

    Parameters
    ----------
    a_au : array_like
        Length, au.
    distance_pc : array_like
        Distance, parsecs.

    Returns
    -------
    ndarray
        Angle, milliarcseconds (1 au at 1 pc = 1000 mas, by the definition of
        the parsec).

    Examples
    --------
    >>> float(au_to_mas(1000.0, 8000.0))
    125.0
    """
    return _MAS_PER_AU_AT_PC * _f(a_au) / _f(distance_pc)


def mas_to_au(sma_mas: ArrayLike, distance_pc: ArrayLike) -> FloatArray:
    """Length that subtends an angle at a distance; inverse of :func:`au_to_mas`.

    Parameters
    ----------
    sma_mas : array_like
        Angle, milliarcseconds.
    distance_pc : array_like
        Distance, parsecs.

    Returns
    -------
    ndarray
        Length, au.

    Examples
    --------
    >>> float(mas_to_au(125.0, 8000.0))
    1000.0
    """
    return _f(sma_mas) * _f(distance_pc) / _MAS_PER_AU_AT_PC


def gr_periastron_advance_deg_per_orbit(
    mass_msun: ArrayLike, a_au: ArrayLike, e: ArrayLike
) -> FloatArray:
    """General-relativistic periastron advance per orbit (first post-Newtonian order).

    ``Delta omega = 6 pi G M / (c^2 a (1 - e^2))`` radians per orbit.

    Parameters
    ----------
    mass_msun : array_like
        Total mass, solar masses.
    a_au : array_like
        Semi-major axis of the relative orbit, au.
    e : array_like
        Eccentricity in ``[0, 1)``.

    Returns
    -------
    ndarray
        Advance of the periastron per orbit, degrees.

    Examples
    --------
    Mercury (a = 0.387098 au, e = 0.205630), arcseconds per orbit:

    >>> print(f"{float(gr_periastron_advance_deg_per_orbit(1.0, 0.387098, 0.205630)) * 3600:.5f}")
    0.10352
    """
    e = _f(e)
    gm_over_c2_au = 0.5 * RS_AU_PER_MSUN * _f(mass_msun)
    advance_rad = 6.0 * math.pi * gm_over_c2_au / (_f(a_au) * (1.0 - e * e))
    return np.degrees(advance_rad)
