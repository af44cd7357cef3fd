"""An independent orbit simulator for the validation suites.

Shares no code with orbitmass: Kepler's equation is solved with
:func:`scipy.optimize.newton` (vectorised, from ``E = M + e sin M``), the
orbit is placed on the sky with explicit 3-D rotation matrices, and velocities
are the analytic time derivative of the same vector, so a wrong convention or
a wrong formula in the fitted model cannot cancel against the same mistake
here.

Conventions (the project's, stated in README.md and docs/input-format.md):
x = north, y = east (east = increasing RA), z = away from the observer; the
orbit is rotated from the periastron frame by R_z(Omega) R_x(i) R_z(omega)
(the classical visual-binary rotation, Green 1985, *Spherical Astronomy*,
ch. 17, from memory), so that north = r [cos(w+nu) cos W - sin(w+nu) sin W cos i],
east = r [cos(w+nu) sin W + sin(w+nu) cos W cos i], z = r sin(w+nu) sin i and
the ascending node (where z grows, the companion recedes) lies at position
angle Omega. Time: Julian years; Kepler III with GM_sun = 39.4769264089
au^3/yr^2 (references.md, computed from the IAU 2015 nominal GM_sun and the
IAU 2012 au); 1 au/yr = 4.74047046353 km/s.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

GM_SUN_AU3_YR2 = 39.4769264089  # references.md, computed
KMS_PER_AU_YR = 4.74047046353  # references.md, computed


@dataclass(frozen=True)
class Orbit:
    """Elements of one companion (degrees, Julian years, solar masses)."""

    period_yr: float
    ecc: float
    inc_deg: float
    omega_deg: float
    node_deg: float
    tp_jyear: float
    mass_ratio: float = 0.0


@dataclass
class System:
    """A central mass, its distance, companions and an optional drifting frame."""

    mass_msun: float
    distance_pc: float
    orbits: dict[str, Orbit]
    frame: dict[str, float] = field(default_factory=dict)  # x0, y0 (mas), vx0, vy0 (mas/yr), vz0 (km/s)
    t_ref: float = 2020.0


def _eccentric_anomaly(mean: np.ndarray, e: float) -> np.ndarray:
    m = np.mod(mean, 2 * math.pi)
    start = m + e * np.sin(m) if e < 0.8 else np.full_like(m, math.pi)
    return optimize.newton(lambda E: E - e * np.sin(E) - m, start, fprime=lambda E: 1 - e * np.cos(E),
                           tol=1e-14, maxiter=200)


def _rotation(inc: float, omega: float, node: float) -> np.ndarray:
    def rz(a):
        return np.array([[math.cos(a), -math.sin(a), 0.0], [math.sin(a), math.cos(a), 0.0], [0.0, 0.0, 1.0]])

    def rx(a):
        return np.array([[1.0, 0.0, 0.0], [0.0, math.cos(a), -math.sin(a)], [0.0, math.sin(a), math.cos(a)]])

    return rz(node) @ rx(inc) @ rz(omega)


def relative_state(system: System, name: str, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Position (au) and velocity (au/yr) of companion ``name`` relative to the central body, (3, n)."""
    orb = system.orbits[name]
    mass = system.mass_msun
    a = (GM_SUN_AU3_YR2 * mass * orb.period_yr**2 / (4 * math.pi**2)) ** (1 / 3)
    e = orb.ecc
    n = 2 * math.pi / orb.period_yr
    E = _eccentric_anomaly(n * (np.asarray(t, float) - orb.tp_jyear), e)
    b = a * math.sqrt(1 - e * e)
    Edot = n / (1 - e * np.cos(E))
    pos_plane = np.vstack([a * (np.cos(E) - e), b * np.sin(E), np.zeros_like(E)])
    vel_plane = np.vstack([-a * np.sin(E) * Edot, b * np.cos(E) * Edot, np.zeros_like(E)])
    R = _rotation(math.radians(orb.inc_deg), math.radians(orb.omega_deg), math.radians(orb.node_deg))
    return R @ pos_plane, R @ vel_plane


def observe(system: System, name: str, t_pos: np.ndarray, t_rv: np.ndarray, *, absolute: bool = False):
    """Noise-free east/north (mas) of the companion and line-of-sight velocities (km/s).

    Returns a dict with ``east_mas``, ``north_mas`` (at ``t_pos``), ``rv_companion_kms``
    and ``rv_central_kms`` (at ``t_rv``, about the barycentre, plus vz0 in the absolute frame).
    In the absolute frame positions are on the external frame: barycentre track + the
    central body's reflex + the relative orbit (every companion's reflex included).
    """
    mas_per_au = 1000.0 / system.distance_pc
    pos, _ = relative_state(system, name, t_pos)
    east = pos[1] * mas_per_au
    north = pos[0] * mas_per_au
    out = {}
    if absolute:
        f = system.frame
        dt = np.asarray(t_pos) - system.t_ref
        east = east + f.get("x0", 0.0) + f.get("vx0", 0.0) * dt
        north = north + f.get("y0", 0.0) + f.get("vy0", 0.0) * dt
        for other, orb in system.orbits.items():
            if orb.mass_ratio:
                po, _ = relative_state(system, other, t_pos)
                frac = orb.mass_ratio / (1 + orb.mass_ratio)
                east = east - frac * po[1] * mas_per_au
                north = north - frac * po[0] * mas_per_au
    out["east_mas"], out["north_mas"] = east, north
    _, vel = relative_state(system, name, t_rv)
    v_rel = vel[2] * KMS_PER_AU_YR
    reflex = np.zeros_like(v_rel)
    for other, orb in system.orbits.items():
        if orb.mass_ratio:
            _, vo = relative_state(system, other, t_rv)
            reflex = reflex + orb.mass_ratio / (1 + orb.mass_ratio) * vo[2] * KMS_PER_AU_YR
    base = system.frame.get("vz0", 0.0)
    out["rv_companion_kms"] = base + v_rel - reflex
    out["rv_central_kms"] = base - reflex
    return out


def to_polar(east: np.ndarray, north: np.ndarray, east_err: np.ndarray, north_err: np.ndarray):
    """Separation (mas) and position angle (deg, north through east) with first-order errors."""
    rho = np.hypot(east, north)
    theta = np.degrees(np.arctan2(east, north)) % 360.0
    rho_err = np.sqrt((east * east_err) ** 2 + (north * north_err) ** 2) / rho
    theta_err = np.degrees(np.sqrt((north * east_err) ** 2 + (east * north_err) ** 2) / rho**2)
    return rho, theta, rho_err, theta_err
