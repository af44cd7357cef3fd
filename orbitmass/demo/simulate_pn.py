"""Simulated relativistic observations: a first post-Newtonian orbit integration.

An independent formulation from the fitting model's relativistic terms
(:mod:`orbitmass.core.relativity`, a rotated Keplerian ellipse): the orbit is
integrated numerically with :func:`scipy.integrate.solve_ivp` from the
Keplerian state at the reference epoch, under the first post-Newtonian
test-particle acceleration in harmonic coordinates (e.g. Damour & Deruelle
1985, Ann. IHP 43, 107; Will 1993, Theory and Experiment in Gravitational
Physics, from memory; test-particle limit of the two-body equation)

    a = -G M / r^2 [ (1 - 4 G M / (r c^2) + v^2 / c^2) r_hat - 4 (r_hat . v) v / c^2 ],

the light-travel time is solved by Newton's method on
``t_emit + z(t_emit) / c = t_obs`` (z positive away from the observer), and
the line-of-sight velocity gets the first-order redshift
``v^2 / (2 c) + G M / (r c)``. Each piece can be switched off (``pn=False``
integrates Newton's law) for Newtonian controls.

The elements are those of :class:`orbitmass.demo.simulate.TrueOrbit`, read as
the osculating Keplerian elements at ``t_ref_yr``; the initial state is built
from the true anomaly and explicit rotations (as in
:mod:`orbitmass.demo.simulate`).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray
from scipy.integrate import solve_ivp

from orbitmass.core.kepler import mean_to_true
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.units import C_AU_PER_YR, GM_SUN_AU3_PER_YR2, KMS_PER_AU_PER_YR

__all__ = ["initial_state", "integrate_orbit", "simulate_pn"]


def initial_state(orbit: TrueOrbit, t_ref_yr: float) -> NDArray[np.float64]:
    """Keplerian position (au) and velocity (au/yr) at ``t_ref_yr`` in (north, east, z).

    ``z`` points away from the observer; the mean anomaly at ``t_ref_yr`` is
    ``2 pi (t_ref - T) / P`` with ``T = orbit.periastron_time``.
    """
    e = orbit.eccentricity
    inc, w, node = (math.radians(x) for x in (orbit.inclination_deg, orbit.arg_periastron_deg,
                                               orbit.ascending_node_deg))
    gm = GM_SUN_AU3_PER_YR2 * orbit.mass_msun
    a = orbit.semimajor_axis_au
    mean = 2.0 * math.pi * (t_ref_yr - orbit.periastron_time) / orbit.period_yr
    nu = float(mean_to_true(np.array(mean), np.array(e)))
    p = a * (1.0 - e * e)
    r = p / (1.0 + e * math.cos(nu))
    u = w + nu
    ci, si, cn, sn, cu, su = math.cos(inc), math.sin(inc), math.cos(node), math.sin(node), math.cos(u), math.sin(u)
    radial = np.array([cu * cn - su * sn * ci, cu * sn + su * cn * ci, su * si])
    transverse = np.array([-su * cn - cu * sn * ci, -su * sn + cu * cn * ci, cu * si])
    h = math.sqrt(gm / p)
    velocity = h * e * math.sin(nu) * radial + h * (1.0 + e * math.cos(nu)) * transverse
    return np.concatenate([r * radial, velocity])


def integrate_orbit(orbit: TrueOrbit, t_ref_yr: float, t_span_yr: tuple[float, float], *, pn: bool = True,
                    rtol: float = 1e-12):
    """Integrate from the Keplerian state at ``t_ref_yr`` over ``t_span_yr``; returns ``y(t)``.

    The result is a callable mapping epochs (array, Julian years) to the state
    ``(6, n)`` (au, au/yr), valid on ``t_span_yr`` (which must contain
    ``t_ref_yr``), integrated forwards and backwards from the reference epoch
    with DOP853.
    """
    gm = GM_SUN_AU3_PER_YR2 * orbit.mass_msun
    inv_c2 = 1.0 / C_AU_PER_YR**2 if pn else 0.0

    def rhs(_t, y):
        x, v = y[:3], y[3:]
        r = math.sqrt(x @ x)
        n = x / r
        acc = -gm / r**2 * ((1.0 + inv_c2 * (v @ v - 4.0 * gm / r)) * n - 4.0 * inv_c2 * (n @ v) * v)
        return np.concatenate([v, acc])

    y0 = initial_state(orbit, t_ref_yr)
    lo, hi = t_span_yr
    pieces = []
    for end in (lo, hi):
        if end != t_ref_yr:
            sol = solve_ivp(rhs, (t_ref_yr, end), y0, method="DOP853", rtol=rtol, atol=1e-12 * orbit.semimajor_axis_au,
                            dense_output=True)
            if not sol.success:
                raise ArithmeticError(f"orbit integration failed: {sol.message}")
            pieces.append((min(t_ref_yr, end), max(t_ref_yr, end), sol.sol))

    def state(t):
        t = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.empty((6, t.size))
        out[:, :] = y0[:, None]
        for start, stop, fn in pieces:
            inside = (t >= start) & (t <= stop)
            if inside.any():
                out[:, inside] = fn(t[inside])
        return out

    return state


def simulate_pn(orbit: TrueOrbit, t_obs_yr, *, t_ref_yr: float | None = None, pn: bool = True,
                redshift: bool = True, roemer: bool = True) -> dict[str, NDArray[np.float64]]:
    """Positions (mas) and line-of-sight velocities (km/s) of a companion on a 1PN orbit.

    Parameters
    ----------
    orbit : TrueOrbit
        Osculating Keplerian elements at ``t_ref_yr`` (``mass_ratio`` and
        ``redshift`` must be 0: a test particle, nearby system).
    t_obs_yr : array
        Observed epochs (Julian years).
    t_ref_yr : float, optional
        Epoch of the initial state; default the apoastron passage before the
        periastron, ``T - P/2``.
    pn, redshift, roemer : bool
        Switch the 1PN acceleration, the redshift of the velocities and the
        light-travel time.

    Returns
    -------
    dict
        ``east_mas``, ``north_mas``, ``rv_companion_kms`` and ``t_emit_yr``.
    """
    if orbit.mass_ratio != 0.0 or orbit.redshift != 0.0:
        raise ValueError("simulate_pn handles a test particle of a nearby system (mass_ratio = redshift = 0)")
    t_obs = np.asarray(t_obs_yr, dtype=float)
    if t_ref_yr is None:
        t_ref_yr = orbit.periastron_time - 0.5 * orbit.period_yr
    margin = 0.01 * orbit.period_yr + 1.0
    span = (min(float(t_obs.min()) - margin, t_ref_yr), max(float(t_obs.max()) + margin, t_ref_yr))
    state = integrate_orbit(orbit, t_ref_yr, span, pn=pn)
    t_emit = t_obs.copy()
    if roemer:
        for _ in range(20):
            y = state(t_emit)
            mismatch = t_emit + y[2] / C_AU_PER_YR - t_obs
            t_emit = t_emit - mismatch / (1.0 + y[5] / C_AU_PER_YR)
            if np.max(np.abs(mismatch)) < 1e-12:
                break
    y = state(t_emit)
    mas_per_au = 1000.0 / orbit.distance_pc
    vz = y[5] * KMS_PER_AU_PER_YR
    if redshift:
        gm = GM_SUN_AU3_PER_YR2 * orbit.mass_msun
        r = np.sqrt((y[:3] ** 2).sum(axis=0))
        v2 = (y[3:] ** 2).sum(axis=0)
        vz = vz + (0.5 * v2 + gm / r) / C_AU_PER_YR * KMS_PER_AU_PER_YR
    return {"north_mas": y[0] * mas_per_au, "east_mas": y[1] * mas_per_au, "rv_companion_kms": vz,
            "t_emit_yr": t_emit}
