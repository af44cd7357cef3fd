"""Simulated observations from known elements, for the demo, tests and calibration.

Deliberately a different formulation from the fitting model: positions come
from the true anomaly and explicit rotations, r = a (1 - e^2) / (1 + e cos nu),

    north = r [cos(w + nu) cos W - sin(w + nu) sin W cos i]
    east  = r [cos(w + nu) sin W + sin(w + nu) cos W cos i]
    z     = r  sin(w + nu) sin i            (positive away from the observer)

and velocities from v_z = K [cos(w + nu) + e cos w] with
K = 2 pi a sin i / (P sqrt(1 - e^2)), while the fit goes through the
Thiele-Innes constants and the eccentric anomaly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from orbitmass.core.kepler import mean_to_true
from orbitmass.core.physics import semimajor_axis_au
from orbitmass.units import KMS_PER_AU_PER_YR

__all__ = ["TrueOrbit", "simulate", "write_positions_csv", "write_velocities_csv"]


@dataclass(frozen=True)
class TrueOrbit:
    """Known elements of a simulated system (report units).

    ``period_yr`` is the rest-frame period; ``periastron_time`` a Julian year
    on the observed timeline; ``mass_ratio`` = companion / central mass.
    """

    mass_msun: float
    distance_pc: float
    period_yr: float
    eccentricity: float
    inclination_deg: float
    arg_periastron_deg: float
    ascending_node_deg: float
    periastron_time: float
    mass_ratio: float = 0.0
    redshift: float = 0.0

    @property
    def semimajor_axis_au(self) -> float:
        """Relative semimajor axis by Kepler III (au)."""
        return float(semimajor_axis_au(self.mass_msun, self.period_yr))

    @property
    def semimajor_axis_mas(self) -> float:
        """Angular relative semimajor axis (mas)."""
        return self.semimajor_axis_au / self.distance_pc * 1000.0


def simulate(orbit: TrueOrbit, t_yr: NDArray[np.float64]) -> dict[str, NDArray[np.float64]]:
    """Noise-free east/north offsets (mas) and velocities (km/s) at epochs ``t_yr``.

    Returns
    -------
    dict
        ``east_mas``, ``north_mas`` (companion minus central body),
        ``rv_companion_kms`` and ``rv_central_kms`` (about the barycentre).
    """
    t = np.asarray(t_yr, dtype=float)
    e = orbit.eccentricity
    p_obs = orbit.period_yr * (1.0 + orbit.redshift)
    mean = 2 * math.pi * (t - orbit.periastron_time) / p_obs
    nu = mean_to_true(mean, e)
    a_mas = orbit.semimajor_axis_mas
    r = a_mas * (1 - e * e) / (1 + e * np.cos(nu))
    i = math.radians(orbit.inclination_deg)
    w = math.radians(orbit.arg_periastron_deg)
    W = math.radians(orbit.ascending_node_deg)
    u = w + nu
    north = r * (np.cos(u) * math.cos(W) - np.sin(u) * math.sin(W) * math.cos(i))
    east = r * (np.cos(u) * math.sin(W) + np.sin(u) * math.cos(W) * math.cos(i))
    K = 2 * math.pi * orbit.semimajor_axis_au * math.sin(i) / (orbit.period_yr * math.sqrt(1 - e * e))
    v_rel = K * KMS_PER_AU_PER_YR * (np.cos(u) + e * math.cos(w))
    q = orbit.mass_ratio
    return {"east_mas": east, "north_mas": north, "rv_companion_kms": v_rel / (1 + q),
            "rv_central_kms": -v_rel * q / (1 + q)}


def write_positions_csv(path, t_yr, east, north, err_mas, *, comment: str = "") -> None:
    """Write an east/north position table in mas with Julian-year epochs."""
    with open(path, "w", encoding="utf-8") as fh:
        if comment:
            fh.write(f"# {comment}\n")
        fh.write("jyear,east_mas,north_mas,east_err_mas,north_err_mas\n")
        for t, x, y, s in zip(t_yr, east, north, np.broadcast_to(err_mas, np.shape(t_yr))):
            fh.write(f"{t:.6f},{x:.6f},{y:.6f},{s:.6f},{s:.6f}\n")


def write_velocities_csv(path, t_yr, rv, err_kms, instrument=None, body=None, *, comment: str = "") -> None:
    """Write a velocity table in km/s (optionally with instrument and body columns)."""
    n = len(t_yr)
    err = np.broadcast_to(err_kms, (n,))
    with open(path, "w", encoding="utf-8") as fh:
        if comment:
            fh.write(f"# {comment}\n")
        head = ["jyear", "rv_kms", "rv_err_kms"]
        if instrument is not None:
            head.append("instrument")
        if body is not None:
            head.append("body")
        fh.write(",".join(head) + "\n")
        for k in range(n):
            row = [f"{t_yr[k]:.6f}", f"{rv[k]:.4f}", f"{err[k]:.4f}"]
            if instrument is not None:
                row.append(str(instrument[k]))
            if body is not None:
                row.append(str(body[k]))
            fh.write(",".join(row) + "\n")
