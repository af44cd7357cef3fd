"""Sky positions and line-of-sight velocities for many parameter sets at once.

Pure functions on plain floats (internal units, angles in radians). Shapes
broadcast: parameters usually have shape ``(n_sets, 1)`` and epochs
``(1, n_epochs)``, giving ``(n_sets, n_epochs)`` outputs.

Conventions (see :mod:`orbitmass.core.elements`): north = A X + F Y, east = B X + G Y,
z = C X + H Y with X = cos E - e, Y = sqrt(1 - e^2) sin E; z and the
line-of-sight velocity are positive away from the observer (receding).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from orbitmass.core.kepler import kepler_cos_sin
from orbitmass.units import KMS_PER_AU_PER_YR

__all__ = ["thiele_innes", "relative_orbit"]

TWO_PI = 2.0 * math.pi


def thiele_innes(a, cos_i, sin_i, cos_w, sin_w, cos_W, sin_W):
    """Thiele-Innes constants (A, B, F, G, C, H) in the unit of ``a``.

    Takes cosines and sines so callers that already hold them avoid
    recomputing trigonometric functions.
    """
    A = a * (cos_w * cos_W - sin_w * sin_W * cos_i)
    B = a * (cos_w * sin_W + sin_w * cos_W * cos_i)
    F = a * (-sin_w * cos_W - cos_w * sin_W * cos_i)
    G = a * (-sin_w * sin_W + cos_w * cos_W * cos_i)
    C = a * sin_w * sin_i
    H = a * cos_w * sin_i
    return A, B, F, G, C, H


def relative_orbit(
    t_yr: NDArray[np.float64],
    *,
    t_ref_yr: float,
    period_obs_yr: NDArray[np.float64],
    period_rest_yr: NDArray[np.float64],
    ecc: NDArray[np.float64],
    mean_anomaly_ref: NDArray[np.float64],
    ti_mas: tuple | None,
    ch_au: tuple | None,
) -> dict[str, NDArray[np.float64]]:
    """Position (mas) and line-of-sight velocity (km/s) of the companion relative to the central body.

    Parameters
    ----------
    t_yr : ndarray, shape (1, n_epochs)
        Observed epochs, Julian years.
    t_ref_yr : float
        Reference epoch (Julian year) at which ``mean_anomaly_ref`` holds.
    period_obs_yr, period_rest_yr : ndarray, shape (n_sets, 1)
        Period on the observed timeline and in the rest frame (they differ by
        (1 + z) for a redshifted system).
    ecc : ndarray, shape (n_sets, 1)
        Eccentricity, 0 <= e < 1.
    mean_anomaly_ref : ndarray, shape (n_sets, 1)
        Mean anomaly at ``t_ref_yr``, radians.
    ti_mas : tuple of 4 arrays or None
        (A, B, F, G) in mas; positions are computed when given.
    ch_au : tuple of 2 arrays or None
        (C, H) in au; the line-of-sight velocity is computed when given.

    Returns
    -------
    dict
        ``east_mas``, ``north_mas`` and/or ``vz_kms``, each (n_sets, n_epochs).
    """
    mean_anom = mean_anomaly_ref + (TWO_PI / period_obs_yr) * (t_yr - t_ref_yr)
    cos_E, sin_E = kepler_cos_sin(mean_anom, ecc)
    root = np.sqrt(1.0 - ecc * ecc)
    out: dict[str, NDArray[np.float64]] = {}
    if ti_mas is not None:
        A, B, F, G = ti_mas
        X = cos_E - ecc
        Y = root * sin_E
        out["north_mas"] = A * X + F * Y
        out["east_mas"] = B * X + G * Y
    if ch_au is not None:
        C, H = ch_au
        rate = (TWO_PI * KMS_PER_AU_PER_YR / period_rest_yr) / (1.0 - ecc * cos_E)
        out["vz_kms"] = rate * (H * root * cos_E - C * sin_E)
    return out
