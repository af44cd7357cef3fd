"""Cosmological distances for targets given by redshift (astropy's cosmology does the work).

Examples
--------
Angular-diameter distance at z = 1 in flat LCDM with H0 = 70 km/s/Mpc, Om0 = 0.3 and no
radiation, in Mpc (1651.914403 Mpc with the formulas of Hogg 1999, astro-ph/9905116):

>>> round(redshift_distance_pc(1.0, "flat-lcdm:H0=70,Om0=0.3") / 1e6, 3)
1651.914
"""

from __future__ import annotations

import astropy.cosmology as cosmo_mod
import astropy.units as u

from orbitmass.exceptions import InputError

__all__ = ["cosmology_from_spec", "redshift_distance_pc"]


def cosmology_from_spec(spec: str):
    """An astropy cosmology from a realisation name or a flat-LCDM specification.

    Parameters
    ----------
    spec : str
        Either the name of an astropy realisation (one of
        ``astropy.cosmology.realizations.available``, e.g. ``"Planck18"``), or
        ``"flat-lcdm:H0=<km/s/Mpc>,Om0=<number>[,Tcmb0=<K>]"`` as the target reader
        writes it for a ``distance.cosmology`` table (``Tcmb0`` defaults to 0 K: no
        radiation).

    Returns
    -------
    astropy.cosmology.Cosmology
        The realisation itself, or a new ``FlatLambdaCDM``.

    Raises
    ------
    InputError
        For a name astropy does not ship (key ``distance.cosmology``). The
        ``flat-lcdm:`` form is not validated here (the target reader checks its
        values before it builds the string).
    """
    if spec.startswith("flat-lcdm:"):
        params = dict(item.split("=", 1) for item in spec[len("flat-lcdm:"):].split(","))
        return cosmo_mod.FlatLambdaCDM(H0=float(params["H0"]), Om0=float(params["Om0"]),
                                       Tcmb0=float(params.get("Tcmb0", 0.0)))
    cosmo = getattr(cosmo_mod, spec, None) if spec in cosmo_mod.realizations.available else None
    if cosmo is None:
        raise InputError(f"unknown cosmology {spec!r}; expected an astropy realisation such as "
                         f"{', '.join(cosmo_mod.realizations.available)}", key="distance.cosmology")
    return cosmo


def redshift_distance_pc(z: float, cosmology: str) -> float:
    """Angular-diameter distance at redshift ``z`` in ``cosmology``.

    Parameters
    ----------
    z : float
        Redshift of the target.
    cosmology : str
        Realisation name or ``flat-lcdm:`` specification (see :func:`cosmology_from_spec`).

    Returns
    -------
    float
        Angular-diameter distance, parsecs.
    """
    return float(cosmology_from_spec(cosmology).angular_diameter_distance(z).to_value(u.pc))
