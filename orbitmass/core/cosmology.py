"""Cosmological distances for targets given by redshift (astropy's cosmology does the work).

Examples
--------
>>> round(redshift_distance_pc(1.0, "flat-lcdm:H0=70,Om0=0.3") / 1e6, 3)  # Hogg 1999 convention; references.md
1651.914
"""

from __future__ import annotations

import astropy.cosmology as cosmo_mod
import astropy.units as u

from orbitmass.exceptions import InputError

__all__ = ["cosmology_from_spec", "redshift_distance_pc"]


def cosmology_from_spec(spec: str):
    """An astropy cosmology from a realisation name (``"Planck18"``) or ``"flat-lcdm:H0=..,Om0=..,Tcmb0=.."``."""
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
    """Angular-diameter distance (pc) at redshift ``z`` in ``cosmology`` (see :func:`cosmology_from_spec`)."""
    return float(cosmology_from_spec(cosmology).angular_diameter_distance(z).to_value(u.pc))
