"""Reference orbit formulas written independently of orbitmass.core.orbit, and a test model term.

References
----------
* Kepler's equation M = E - e sin E solved by scipy.optimize.brentq (reference library).
* Sky positions from the Campbell elements, the classical formula of visual binaries
  (e.g. Heintz 1978, Double Stars, ch. 4; from memory)::

      north = r [cos(nu + w) cos W - sin(nu + w) sin W cos i]
      east  = r [cos(nu + w) sin W + sin(nu + w) cos W cos i]

  and the line-of-sight coordinate z = r sin(nu + w) sin i (Murray & Dermott 1999,
  Solar System Dynamics, eq. 2.122 with the observer on -z; from memory), with
  r = a (1 - e^2) / (1 + e cos nu) and tan(nu/2) = sqrt((1+e)/(1-e)) tan(E/2).
* au per Julian year in km/s from astropy units.

Used by tests/core/test_orbit.py and tests/model/test_likelihood.py.
"""

from __future__ import annotations

import math

import numpy as np
from astropy import units as u
from scipy import optimize

T_REF = 2010.0
KMS = float((1 * u.au / u.yr).to(u.km / u.s).value)  # astropy: au per Julian year in km/s


def eccentric_anomaly(mean, e):
    mean = np.mod(mean, 2 * math.pi)
    return np.array([optimize.brentq(lambda E, m=m: E - e * math.sin(E) - m, 0.0, 2 * math.pi, xtol=1e-15)
                     for m in np.ravel(mean)]).reshape(np.shape(mean))


def campbell(t, P, e, m0, a, i, w, W):
    """(east, north, z) in the unit of ``a`` from the textbook formulas (module docstring), epoch T_REF."""
    E = eccentric_anomaly(m0 + 2 * math.pi / P * (t - T_REF), e)
    nu = 2.0 * np.arctan2(math.sqrt(1 + e) * np.sin(E / 2), math.sqrt(1 - e) * np.cos(E / 2))
    r = a * (1 - e * e) / (1 + e * np.cos(nu))
    uu = nu + w
    north = r * (np.cos(uu) * math.cos(W) - np.sin(uu) * math.sin(W) * math.cos(i))
    east = r * (np.cos(uu) * math.sin(W) + np.sin(uu) * math.cos(W) * math.cos(i))
    z = r * np.sin(uu) * math.sin(i)
    return east, north, z


class ShiftTerm:
    """A model term adding a free constant to every line-of-sight velocity."""

    name = "test-shift"
    parameters = ("shift_kms",)
    linear_safe = True

    def velocity_shift(self, state, basis, vz_kms, extra):
        return np.broadcast_to(extra["shift_kms"], np.shape(vz_kms))
