"""Additions to tests/core/test_physics_published.py for orbitmass.core.physics.

tests/core/test_physics_published.py covers every public function; what it lacks is Kepler's third law run
the other way (period -> semi-major axis) against the same external values, done here:
- /work/shared/references.md "Constants": the period of a 1 au orbit about one nominal solar
  mass is 365.256898384 d (computed from IAU 2015 B3 GM_sun and the IAU 2012 au);
- references.md "Visual binaries": published periods, semi-major axes, parallaxes and total
  masses of alpha Cen AB (Akeson et al. 2021), Sirius AB (Bond et al. 2017) and Procyon AB
  (Bond et al. 2015), parallaxes from Hipparcos (van Leeuwen 2007);
- astropy.constants for the Schwarzschild radius of the docstring example.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
import pytest
from astropy import constants as const

from orbitmass.core.physics import (
    au_to_mas,
    mass_msun,
    schwarzschild_radius_au,
    semimajor_axis_au,
)

ONE_AU_PERIOD_D = 365.256898384  # references.md, computed 2 pi sqrt(au^3 / GM_sun)


def test_semimajor_axis_of_the_one_au_period():
    # references.md: P = 365.256898384 d for a = 1 au about 1 M_sun, so the inverse must give 1 au
    a = float(semimajor_axis_au(1.0, ONE_AU_PERIOD_D / 365.25))
    assert a == pytest.approx(1.0, abs=3e-12)  # the period is printed to 1e-9 d (2e-12 relative)
    assert float(mass_msun(1.0, ONE_AU_PERIOD_D / 365.25)) == pytest.approx(1.0, abs=1e-11)


def test_semimajor_axis_against_astropy():
    # a^3 = GM P^2 / (4 pi^2) with astropy's GM_sun, for a massive central object
    mass, period_yr = 4.3e6, 16.05
    ref = np.cbrt(const.GM_sun * mass * (period_yr * u.yr) ** 2 / (4 * np.pi**2)).to_value(u.au)
    assert float(semimajor_axis_au(mass, period_yr)) == pytest.approx(ref, rel=1e-14)


VISUAL_BINARIES = [
    # P (yr), a (arcsec), parallax (mas), published total mass (M_sun): references.md
    (79.762, 17.493, 750.81, 1.9880),  # alpha Cen AB, Akeson et al. 2021
    (50.1284, 7.4957, 379.21, 3.081),  # Sirius AB, Bond et al. 2017
    (40.840, 4.3075, 284.56, 2.070),  # Procyon AB, Bond et al. 2015
]


@pytest.mark.parametrize(("p_yr", "a_arcsec", "plx_mas", "published"), VISUAL_BINARIES)
def test_visual_binary_semimajor_axes_from_published_masses(p_yr, a_arcsec, plx_mas, published):
    # Kepler III the other way: the published mass and period give the angular semi-major
    # axis. references.md allows 1% on the mass for Sirius and Procyon (1e-4 for alpha Cen
    # against its Kepler III value), i.e. 1/3 of that on a = M^(1/3) P^(2/3).
    a_mas = au_to_mas(semimajor_axis_au(published, p_yr), 1000.0 / plx_mas)
    assert float(a_mas) / (a_arcsec * 1000.0) == pytest.approx(1.0, abs=0.01 / 3)


def test_schwarzschild_radius_docstring_example():
    # astropy.constants: 2 G (4e6 M_sun) / c^2 = 0.078965 au
    ref = (2 * const.GM_sun * 4.0e6 / const.c**2).to_value(u.au)
    assert float(schwarzschild_radius_au(4.0e6)) == pytest.approx(ref, rel=1e-14)
    assert round(ref, 6) == 0.078965
