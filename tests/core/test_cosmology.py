"""Unit tests of orbitmass.core.cosmology: distances for targets given by redshift.

External references:
- Hogg 1999 (astro-ph/9905116) distance formulas; table values for flat LCDM, H0 = 70 km/s/Mpc,
  Om0 = 0.3, no radiation, as listed (computed, matched by a third-party calculator) in
  /work/shared/references.md, "Cosmological distances";
- astropy.cosmology (FlatLambdaCDM and the named realisations such as Planck18) directly.
"""

from __future__ import annotations

import astropy.cosmology as ac
import astropy.units as u
import pytest

from orbitmass.core.cosmology import cosmology_from_spec, redshift_distance_pc
from orbitmass.exceptions import InputError

HOGG = "flat-lcdm:H0=70,Om0=0.3"

# z, comoving D_C, angular-diameter D_A, luminosity D_L (Mpc): references.md, "Cosmological
# distances, flat LCDM, H0 = 70 km/s/Mpc, Om0 = 0.3, no radiation" (Hogg 1999 formulas).
HOGG_TABLE = [
    (0.5, 1888.625396, 1259.083597, 2832.938094),
    (1.0, 3303.828806, 1651.914403, 6607.657612),
    (2.0, 5179.862074, 1726.620691, 15539.586223),
    (3.0, 6355.685436, 1588.921359, 25422.741745),
]


@pytest.mark.parametrize(("z", "d_c", "d_a", "d_l"), HOGG_TABLE)
def test_angular_diameter_distance_matches_hogg_table(z, d_c, d_a, d_l):
    # references.md: the table is printed to 1e-6 Mpc and agrees with astropy to 1e-6 Mpc
    d_a_mpc = redshift_distance_pc(z, HOGG) / 1e6  # 1 Mpc = 1e6 pc (SI prefix)
    assert d_a_mpc == pytest.approx(d_a, abs=2e-6)


@pytest.mark.parametrize(("z", "d_c", "d_a", "d_l"), HOGG_TABLE)
def test_spec_builds_the_hogg_cosmology(z, d_c, d_a, d_l):
    # Hogg 1999 eqs. (15), (18), (21): in a flat universe D_M = D_C, D_A = D_C / (1 + z),
    # D_L = (1 + z) D_C. The object we build must give all three columns of the table.
    cosmo = cosmology_from_spec(HOGG)
    assert cosmo.comoving_distance(z).to_value(u.Mpc) == pytest.approx(d_c, abs=2e-6)
    assert cosmo.luminosity_distance(z).to_value(u.Mpc) == pytest.approx(d_l, abs=2e-5)
    assert d_a * (1 + z) == pytest.approx(d_c, abs=2e-6)  # the table itself obeys eq. (18)


def test_spec_without_tcmb_has_no_radiation():
    # Hogg 1999 table case: no radiation, i.e. astropy FlatLambdaCDM with Tcmb0 = 0
    cosmo = cosmology_from_spec(HOGG)
    assert isinstance(cosmo, ac.FlatLambdaCDM)
    assert cosmo.H0.to_value(u.km / u.s / u.Mpc) == 70.0
    assert cosmo.Om0 == 0.3
    assert cosmo.Tcmb0.to_value(u.K) == 0.0
    assert cosmo.Ogamma0 == 0.0


def test_spec_with_tcmb_adds_radiation():
    # references.md: with radiation (Wright 2006, PASP 118, 1711 convention, Tcmb = 2.725 K)
    # D_C at z = 1 is 3303.5273 Mpc. astropy also counts massless neutrinos (Neff = 3.04);
    # measured here: 3303.5264 Mpc, 9e-4 Mpc from the Wright value and 0.30 Mpc from the
    # radiation-free 3303.8288 Mpc, so a 2e-3 Mpc tolerance tells the two cases apart.
    cosmo = cosmology_from_spec("flat-lcdm:H0=70,Om0=0.3,Tcmb0=2.725")
    assert cosmo.Tcmb0.to_value(u.K) == 2.725
    assert cosmo.comoving_distance(1.0).to_value(u.Mpc) == pytest.approx(3303.5273, abs=2e-3)


@pytest.mark.parametrize("z", [0.01, 0.5, 1.0, 2.5, 6.0])
def test_against_astropy_flat_lcdm(z):
    # astropy.cosmology.FlatLambdaCDM directly, same parameters
    ref = ac.FlatLambdaCDM(H0=67.0, Om0=0.32, Tcmb0=0.0).angular_diameter_distance(z).to_value(u.pc)
    got = redshift_distance_pc(z, "flat-lcdm:H0=67,Om0=0.32")
    assert got == pytest.approx(ref, rel=1e-13)


def test_planck18_by_name():
    # astropy.cosmology.Planck18 (Planck 2018 paper VI, Table 2, as shipped with astropy)
    assert cosmology_from_spec("Planck18") is ac.Planck18
    for z in (0.1, 1.0, 3.0):
        ref = ac.Planck18.angular_diameter_distance(z).to_value(u.pc)
        assert redshift_distance_pc(z, "Planck18") == pytest.approx(ref, rel=1e-14)


@pytest.mark.parametrize("name", sorted(ac.realizations.available))
def test_every_astropy_realisation_by_name(name):
    # astropy.cosmology.realizations.available lists the names astropy ships
    assert cosmology_from_spec(name) is getattr(ac, name)


@pytest.mark.parametrize("spec", ["Planck2099", "planck18", "FlatLambdaCDM", "", "default_cosmology"])
def test_unknown_name_is_an_input_error_naming_the_key(spec):
    # common practice, no source: a clear InputError naming the key and the offending value
    with pytest.raises(InputError) as info:
        cosmology_from_spec(spec)
    err = info.value
    assert err.key == "distance.cosmology"
    assert repr(spec) in str(err)
    assert "'distance.cosmology'" in str(err)
    assert "Planck18" in str(err)  # the message lists the names that work
    assert isinstance(err, ValueError)  # InputError is also a ValueError (exceptions.py contract)
