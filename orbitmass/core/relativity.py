"""Beyond Kepler: relativistic model terms and an extended mass for the orbit evaluator.

Each term is a small frozen class following the plug-in contract of
:mod:`orbitmass.core.orbit` (``name``, ``parameters``, ``linear_safe`` and
the optional hooks ``emission_times``, ``plane_rotation``,
``velocity_shift``). All work on plain floats in internal units (au, Julian
years, km/s, radians), vectorised over parameter sets ``(n_sets, 1)`` and
epochs; constants come from :mod:`orbitmass.units`.

Terms
-----
:class:`RedshiftTerm`
    Gravitational redshift and transverse Doppler shift in the line-of-sight
    velocity, first post-Newtonian order, scaled by ``redshift_factor``.
:class:`RoemerTerm`
    Light-travel time across the orbit (Roemer delay), solved for the
    emission epochs.
:class:`PrecessionTerm`
    Schwarzschild precession of the periastron, scaled by
    ``precession_factor``, advancing with the true anomaly swept.
:class:`ExtendedMassTerm`
    A Plummer sphere of fixed scale radius and sampled mass fraction
    ``extended_mass_fraction``: its retrograde periastron precession.

What the terms need from :class:`~orbitmass.core.orbit.OrbitState`:
``mass_msun`` (total mass, solar masses) for the redshift, the precessions and
the extended mass; ``a_au`` (relative semimajor axis, au; when None it is
taken from Kepler's third law with ``period_rest_yr``); ``ch_au`` (the
line-of-sight Thiele-Innes constants in au) for the Roemer delay;
``distance_pc`` for an extended mass whose scale radius is an angle.

Building the terms of a target: :func:`model_terms` turns the target's
``[relativity]`` and ``[extended_mass]`` tables into the terms and their
priors (the one builder used by the fit and by a reloaded run folder).

Helpers for derived posteriors: :func:`precession_arcmin_per_orbit`,
:func:`redshift_at_periastron_kms`, :func:`periastron_schwarzschild_radii`,
:func:`roemer_delay_range_days`, :func:`plummer_precession_per_orbit`.

Verification (tests/test_relativity.py)
---------------------------------------
Against an independent first post-Newtonian integration (scipy) of an
e = 0.88, 16-yr orbit around 4e6 solar masses at 8 kpc (periastron 1,530
Schwarzschild radii; 11.3 arcmin per orbit, 190 km/s redshift at
periastron, 8.5-day Roemer range), over two orbits: with the osculating
elements at the reference apoastron and the anomalistic period, the engine
with all three relativistic terms differs by at most 0.026 mas and 2.1 km/s
(the velocity difference third order in v/c, at the periastra); with
least-squares elements by 0.034 mas and 0.16 km/s. A Keplerian evaluation
differs by 1.8 mas and 234 km/s; a precession spread uniformly in time
instead of with the true anomaly by 0.17 mas and 4 km/s.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable, Mapping

import numpy as np
from numpy.typing import NDArray

from orbitmass.core.kepler import kepler_cos_sin
from orbitmass.core.orbit import KeplerBasis, OrbitState
from orbitmass.core.physics import semimajor_axis_au
from orbitmass.units import (
    C_AU_PER_YR,
    C_KMS,
    DAYS_PER_YEAR,
    GM_SUN_AU3_PER_YR2,
    KMS_PER_AU_PER_YR,
    RS_AU_PER_MSUN,
)

__all__ = [
    "RedshiftTerm",
    "RoemerTerm",
    "PrecessionTerm",
    "ExtendedMassTerm",
    "CombinedPrecession",
    "model_terms",
    "schwarzschild_precession_per_orbit",
    "plummer_precession_per_orbit",
    "unwrapped_true_anomaly",
    "redshift_shift_kms",
    "precession_arcmin_per_orbit",
    "redshift_at_periastron_kms",
    "periastron_schwarzschild_radii",
    "roemer_delay_range_days",
]

Array = NDArray[np.float64]
TWO_PI = 2.0 * math.pi
#: GM / c^2 of one solar mass in au.
GM_OVER_C2_AU_PER_MSUN = 0.5 * RS_AU_PER_MSUN
ARCMIN_PER_RAD = 180.0 * 60.0 / math.pi


def _semimajor_axis_au(state: OrbitState) -> Array:
    """``state.a_au``, or Kepler's third law from the mass and the rest-frame period."""
    if state.a_au is not None:
        return np.asarray(state.a_au, dtype=float)
    if state.mass_msun is None:
        raise ValueError("a relativistic model term needs OrbitState.a_au or OrbitState.mass_msun")
    return semimajor_axis_au(state.mass_msun, state.period_rest_yr)


def _mass_msun(state: OrbitState) -> Array:
    if state.mass_msun is None:
        raise ValueError("a relativistic model term needs OrbitState.mass_msun")
    return np.asarray(state.mass_msun, dtype=float)


def unwrapped_true_anomaly(basis: KeplerBasis, ecc) -> Array:
    """True anomaly (rad) counted continuously over the orbits, from a Keplerian basis.

    Uses the unwrapped eccentric anomaly ``E = M + e sin E`` (``M`` is
    ``basis.mean_anomaly``, not wrapped) and ``nu - E = 2 atan(beta sin E /
    (1 - beta cos E))`` with ``beta = e / (1 + sqrt(1 - e^2))`` (Kepler's
    equation and the standard true-eccentric anomaly relation, common practice,
    no source), so ``nu`` grows by ``2 pi`` per orbit and is continuous.

    Parameters
    ----------
    basis : KeplerBasis
        Must carry ``mean_anomaly``.
    ecc : array
        Eccentricity, broadcastable against the basis.
    """
    if basis.mean_anomaly is None:
        raise ValueError("the Keplerian basis carries no mean anomaly; build it with kepler_basis")
    ecc = np.asarray(ecc, dtype=float)
    beta = ecc / (1.0 + np.sqrt(1.0 - ecc * ecc))
    ecc_anomaly = basis.mean_anomaly + ecc * basis.sin_E
    return ecc_anomaly + 2.0 * np.arctan2(beta * basis.sin_E, 1.0 - beta * basis.cos_E)


def _apsidal_rotation(per_orbit_rad, state: OrbitState, basis: KeplerBasis) -> tuple[Array, Array]:
    """Rotation ``delta = (Delta omega / 2 pi) (nu - nu_ref)`` and its rate ``d delta / dM``.

    ``nu`` is the unwrapped true anomaly at the basis epochs, ``nu_ref`` at the
    reference epoch; ``d nu / dM = sqrt(1 - e^2) / (1 - e cos E)^2`` (Kepler's
    second law, common practice, no source).
    """
    ecc = np.asarray(state.ecc, dtype=float)
    scale = np.asarray(per_orbit_rad, dtype=float) / TWO_PI
    nu = unwrapped_true_anomaly(basis, ecc)
    m_ref = np.asarray(state.mean_anomaly_ref, dtype=float)
    # nu at the reference epoch, from the same relation (one Kepler solve per parameter set)
    cos_e0, sin_e0 = kepler_cos_sin(m_ref, ecc)
    ref = KeplerBasis(cos_E=cos_e0, sin_E=sin_e0, X=None, Y=None, dX=None, dY=None, mean_anomaly=m_ref)
    nu_ref = unwrapped_true_anomaly(ref, ecc)
    delta = scale * nu - scale * nu_ref
    one_minus = 1.0 - ecc * basis.cos_E
    rate = (scale * np.sqrt(1.0 - ecc * ecc)) / (one_minus * one_minus)
    return delta, rate


def schwarzschild_precession_per_orbit(mass_msun, a_au, ecc) -> Array:
    """Schwarzschild periastron advance per orbit (rad), first post-Newtonian order.

    ``Delta omega = 6 pi G M / (c^2 a (1 - e^2))`` (Einstein 1915; e.g. Weinberg
    1972, Gravitation and Cosmology, section 8.6, from memory). The same value
    as :func:`orbitmass.core.physics.gr_periastron_advance_deg_per_orbit`, in
    radians.
    """
    ecc = np.asarray(ecc, dtype=float)
    return 6.0 * math.pi * GM_OVER_C2_AU_PER_MSUN * np.asarray(mass_msun, dtype=float) / (
        np.asarray(a_au, dtype=float) * (1.0 - ecc * ecc))


def plummer_precession_per_orbit(mass_msun, a_au, ecc, fraction, scale_radius_au, *, n_nodes: int = 256) -> Array:
    """Periastron precession per orbit (rad, negative = retrograde) from a Plummer sphere.

    A Plummer sphere of mass ``fraction * M`` and scale radius ``b`` about the
    central mass adds the radial force per unit mass (Plummer 1911; Binney &
    Tremaine 2008, section 2.2.2, from memory)

        R(r) = -G M_ext r / (r^2 + b^2)^(3/2)          (outward positive).

    Gauss's form of Lagrange's planetary equations for a purely radial
    perturbing force (no tangential or normal part) gives
    ``d omega / dt = -sqrt(1 - e^2) R cos(nu) / (n a e)`` (e.g. Murray &
    Dermott 1999, Solar System Dynamics, eq. 2.165, from memory). Integrated
    over one unperturbed Keplerian orbit with ``dt = dM / n``,
    ``dM = (1 - e cos E) dE``, ``cos nu = (cos E - e) / (1 - e cos E)`` and
    ``n^2 a^3 = G M``:

        Delta omega = -(sqrt(1 - e^2) a^2 / (G M e)) * Int_0^{2 pi} R(a (1 - e cos E)) (cos E - e) dE.

    The integrand is smooth and periodic in ``E``, so the trapezoid rule on
    ``n_nodes`` uniform nodes converges exponentially; it is evaluated on a
    trailing axis, vectorised over parameter sets. First order in the
    fraction; a point-mass-like force (``b -> 0``) gives no precession, a
    uniform core (``b`` much larger than the orbit) gives
    ``-3 pi G M_ext sqrt(1 - e^2) a^3 / (G M b^3)``.

    Parameters
    ----------
    mass_msun, a_au, ecc, fraction, scale_radius_au : array
        Central mass, semimajor axis, eccentricity, Plummer mass / central
        mass, Plummer scale radius (au); broadcast together.
    n_nodes : int
        Quadrature nodes in the eccentric anomaly.
    """
    mass, a, ecc, frac, b = np.broadcast_arrays(*(np.asarray(x, dtype=float) for x in
                                                  (mass_msun, a_au, ecc, fraction, scale_radius_au)))
    # the integrand is even in E: the nodes on [0, pi] with the trapezoid weights of the full circle
    half = n_nodes // 2
    nodes = np.linspace(0.0, TWO_PI, n_nodes, endpoint=False)[: half + 1]
    weights = np.full(half + 1, 2.0)
    weights[0] = 1.0
    if n_nodes % 2 == 0:
        weights[half] = 1.0
    cos_e = np.cos(nodes)
    ecc_safe = np.maximum(ecc, 1e-8)[..., None]
    r = a[..., None] * (1.0 - ecc_safe * cos_e)
    # R / (G M_ext) in 1/au^2; G M_ext = fraction * G M
    q = r * r + b[..., None] ** 2
    force = -r / (q * np.sqrt(q))
    integral = (TWO_PI / n_nodes) * ((force * (cos_e - ecc_safe)) @ weights)
    return -np.sqrt(1.0 - ecc * ecc) * a * a * frac * integral / np.maximum(ecc, 1e-8)


def redshift_shift_kms(mass_msun, r_au, speed_kms) -> Array:
    """First post-Newtonian redshift of the line-of-sight velocity (km/s), unscaled.

    ``c z - v_z = v^2 / (2 c) + G M / (r c)``: see :class:`RedshiftTerm`.
    """
    gm_over_r_kms2 = GM_SUN_AU3_PER_YR2 * np.asarray(mass_msun, dtype=float) / np.asarray(r_au, dtype=float) \
        * KMS_PER_AU_PER_YR ** 2
    return (0.5 * np.asarray(speed_kms, dtype=float) ** 2 + gm_over_r_kms2) / C_KMS


@dataclass(frozen=True)
class RedshiftTerm:
    """Gravitational redshift and transverse Doppler shift, first post-Newtonian order.

    The observed redshift of light emitted by a star moving with velocity
    ``v`` (line-of-sight part ``v_z``, positive receding) at distance ``r``
    from a mass ``M``, received far away, is (e.g. Misner, Thorne & Wheeler
    1973; Alexander 2005, Phys. Rep. 419, 65, from memory)

        1 + z = gamma (1 + v_z / c) (1 - 2 G M / (r c^2))^(-1/2),
        gamma = (1 - v^2 / c^2)^(-1/2).

    Expanded to second order in ``v / c`` (with ``G M / r ~ v^2``), ``c z =
    v_z + v^2 / (2 c) + G M / (r c)``; the term adds

        dv = f * (v^2 / (2 c) + G M / (r c))       (km/s)

    to the Keplerian ``v_z``, with ``f`` the ``redshift_factor`` (0 Newton,
    1 general relativity). Dropped: the third-order terms
    ``v_z (v^2 / 2 + G M / r) / c^2``, about ``|v_z| v^2 / c^2``: at most
    ``v^3 / c^2`` = 4.5 km/s at the periastron of an e = 0.88, 16-yr orbit
    around 4e6 solar masses (``v = 7,400 km/s``; 1.9 km/s for the orientation
    of the tests), ~0.1 km/s at ten periastron distances; and the
    fourth-order ones (below 0.2 km/s at periastron). The tests compare the
    expansion with the exact expression evaluated in mpmath. At third order
    the split between orbital velocity and redshift also depends on the
    coordinates in which the orbit is written.

    ``v`` and ``r`` are taken from the (possibly rotated) in-plane basis:
    ``r = a sqrt(X^2 + Y^2) = a (1 - e cos E)`` (a rotation keeps the
    length; Kepler's equation, common practice, no source), ``v^2 = n^2 a^2
    (dX^2 + dY^2)`` with ``n = 2 pi / P_rest`` (no square roots: they cost
    more than the rest of the term).
    """

    name: str = "redshift"
    parameters: tuple[str, ...] = ("redshift_factor",)
    linear_safe: bool = False

    def velocity_shift(self, state: OrbitState, basis: KeplerBasis, vz_kms, extra: Mapping[str, Any]) -> Array:
        """The shift ``f (v^2/(2c) + GM/(rc))`` in km/s, shape of ``vz_kms``."""
        factor = np.asarray(extra["redshift_factor"], dtype=float)
        a = _semimajor_axis_au(state)
        ecc = np.asarray(state.ecc, dtype=float)
        # per-set constants (n_sets, 1) first, so the epoch arrays see few operations
        gm_over_a = GM_SUN_AU3_PER_YR2 * _mass_msun(state) / a * (KMS_PER_AU_PER_YR ** 2 / C_KMS)
        half_v2 = 0.5 / C_KMS * ((TWO_PI * KMS_PER_AU_PER_YR / np.asarray(state.period_rest_yr, dtype=float)) * a) ** 2
        shift = (basis.dX * basis.dX + basis.dY * basis.dY) * (factor * half_v2)
        shift += (factor * gm_over_a) / (1.0 - ecc * basis.cos_E)
        return shift


def _los_time_derivatives(basis: KeplerBasis, C, H, ecc, n_per_yr, *, fourth: bool = False) -> list[Array]:
    """``z`` (au) and its first three (or four) time derivatives (au / yr^k) on a Keplerian orbit.

    In units of ``a`` and mean anomaly the relative orbit obeys
    ``r'' = -u r`` with ``u = rho^-3``, ``rho = |r| = 1 - e cos E``; hence
    the third and fourth derivatives are ``-u' r - u r'`` and
    ``-u'' r - 2 u' r' - u r''``, with ``rho' = e sin E / rho``,
    ``rho'' = e cos E / rho^2 - e^2 sin^2 E / rho^3``, ``u' = -3 rho' / rho^4``,
    ``u'' = 12 rho'^2 / rho^5 - 3 rho'' / rho^4`` (Kepler's equation
    differentiated, common practice, no source).
    """
    ecc = np.asarray(ecc, dtype=float)
    inv = 1.0 / (1.0 - ecc * basis.cos_E)
    rho1 = ecc * basis.sin_E * inv
    u0 = inv * inv * inv
    u1 = -3.0 * rho1 * u0 * inv
    # z is linear in (X, Y), so the recursion runs on z and its derivatives per unit mean anomaly
    z0 = C * basis.X + H * basis.Y
    z1 = C * basis.dX + H * basis.dY
    z2 = -u0 * z0
    z3 = -u1 * z0 - u0 * z1
    n = n_per_yr
    out = [z0, n * z1, (n * n) * z2, n**3 * z3]
    if fourth:
        rho2 = inv * (ecc * basis.cos_E * inv - rho1 * rho1)
        u2 = (12.0 * rho1 * rho1 * inv - 3.0 * rho2) * u0 * inv
        out.append(n**4 * (-u2 * z0 - 2.0 * u1 * z1 - u0 * z2))
    return out


def _fourth_derivative_bound(ecc) -> Array:
    """An upper bound of ``|r''''| rho^4`` over the orbit (units of ``a`` and mean anomaly).

    With the relations of :func:`_los_time_derivatives`, ``|r''| = rho^-2``,
    ``|rho'| <= e / sqrt(1 - e^2)``, ``|r'| <= sqrt((1 + e) / (1 - e))`` and
    ``rho >= 1 - e``: ``|u r''| rho^4 <= 1 / (1 - e)``, ``|2 u' r'| rho^4 <= 6
    |rho'| |r'|``, ``|u'' r| rho^4 <= 15 rho'^2 + 3 e / rho`` (triangle
    inequality, common practice, no source).
    """
    ecc = np.asarray(ecc, dtype=float)
    one_m = 1.0 - ecc
    rho1_max = ecc / np.sqrt(1.0 - ecc * ecc)
    return (1.0 + 3.0 * ecc) / one_m + 6.0 * rho1_max * np.sqrt((1.0 + ecc) / one_m) + 15.0 * rho1_max * rho1_max


#: largest change of the eccentric anomaly :func:`_advance_basis` takes on (its series hold there)
ADVANCE_MAX_RAD = 0.05
#: largest error bound (rad) of the eccentric anomaly :func:`_advance_basis` accepts
ADVANCE_MAX_ERROR_RAD = 1e-7


def _advance_basis(basis: KeplerBasis, ecc, d_mean) -> KeplerBasis | None:
    """The Keplerian basis after the mean anomaly moves on by a small ``d_mean`` (rad), without a Kepler solve.

    The eccentric anomaly moves on by its Taylor series in ``d_mean``
    (``E' = rho^-1``, ``E'' = -e sin E rho^-3``, ``E''' = rho^-4 (3 rho'^2 -
    e cos E)`` with ``rho = 1 - e cos E``, ``rho' = e sin E / rho``; Kepler's
    equation differentiated, common practice, no source):

        x = w (1 - rho' w / 2 + (3 rho'^2 - e cos E / rho) w^2 / 6),   w = d_mean / rho.

    Its error, the next term, is bounded by ``w^4 (15 rho'^3 + 11 rho' / rho
    + 1 / rho) / 24`` (the fourth derivative's terms, with ``|rho'| <= e /
    sqrt(1 - e^2)`` and ``1 / rho <= 1 / (1 - e)``): 1.4e-8 rad for the Roemer
    delay of an e = 0.88, 16-yr orbit around 4e6 solar masses (``|w| <=
    6e-3``), i.e. below 1e-3 km/s and 1e-5 mas. The sine and cosine of ``E +
    x`` follow from the angle-addition formulas with the Taylor series of
    ``sin x`` and ``cos x - 1`` (error below 2e-13 for ``|x| <= 0.05``). None
    when the step is too large for that (``|w|`` above
    :data:`ADVANCE_MAX_RAD` or the bound above :data:`ADVANCE_MAX_ERROR_RAD`):
    the caller then solves Kepler's equation.
    """
    ecc = np.asarray(ecc, dtype=float)
    cos_e, sin_e = basis.cos_E, basis.sin_E
    e_cos = ecc * cos_e
    inv = 1.0 / (1.0 - e_cos)
    w = d_mean * inv
    if not np.size(w):
        return None
    w_max = float(np.max(np.abs(w)))
    rho1_max = float(np.max(ecc / np.sqrt(1.0 - ecc * ecc)))
    inv_max = float(np.max(1.0 / (1.0 - ecc)))
    if w_max > ADVANCE_MAX_RAD or w_max**4 * (15.0 * rho1_max**3 + 11.0 * rho1_max * inv_max + inv_max) / 24.0 \
            > ADVANCE_MAX_ERROR_RAD:
        return None
    rho1 = ecc * sin_e * inv
    x = w * (1.0 - 0.5 * rho1 * w + (3.0 * rho1 * rho1 - e_cos * inv) * (w * w) / 6.0)
    x2 = x * x
    sin_x = x * (1.0 - x2 / 6.0 * (1.0 - x2 / 20.0))
    cm1 = -0.5 * x2 * (1.0 - x2 / 12.0 * (1.0 - x2 / 30.0))
    cos_new = cos_e + cos_e * cm1 - sin_e * sin_x
    sin_new = sin_e + sin_e * cm1 + cos_e * sin_x
    root = np.sqrt(1.0 - ecc * ecc)
    inv_new = 1.0 / (1.0 - ecc * cos_new)
    mean = None if basis.mean_anomaly is None else basis.mean_anomaly + d_mean
    return KeplerBasis(cos_E=cos_new, sin_E=sin_new, X=cos_new - ecc, Y=root * sin_new, dX=-sin_new * inv_new,
                       dY=(root * inv_new) * cos_new, mean_anomaly=mean)


@dataclass(frozen=True)
class RoemerTerm:
    """Roemer delay: the light-travel time across the orbit.

    With ``z`` the companion's line-of-sight coordinate relative to the central
    body, positive away from the observer (``z = C X + H Y`` in au, the
    convention of :mod:`orbitmass.core.orbit`), light emitted at ``t_emit``
    reaches the observer ``z(t_emit) / c`` later than light from the central
    body's position would; the constant travel time to the central body is
    absorbed in the epochs. On the observed timeline (stretched by ``1 + z_cos
    = P_obs / P_rest`` for a redshifted system) the emission epochs solve

        f(t_emit) = t_emit + (P_obs / P_rest) z(t_emit) / c - t_obs = 0

    (the Roemer delay, e.g. Alexander 2005, Phys. Rep. 419, 65, from memory).

    Solution, in one Kepler solve where that suffices: with the Keplerian
    derivatives ``z_k = d^k z / dt^k`` at ``t_obs`` (see
    :func:`_los_time_derivatives`), ``Delta = t_emit - t_obs`` solves the
    cubic Taylor model ``Delta + s (z_0 + z_1 Delta + z_2 Delta^2 / 2 + z_3
    Delta^3 / 6) = 0`` (``s = P_obs / (P_rest c)``; one Newton step on the
    polynomial from its linear solution). The series converges with a ratio
    ~``v / c`` per order since ``|Delta| <= r / c``, so twice the next term,
    ``2 s |z_4| Delta^4 / 24``, bounds the error; it is first bounded per
    parameter set (:func:`_fourth_derivative_bound`, with ``|Delta| <= s
    sqrt(C^2 + H^2) rho / slope``), and evaluated per epoch only when that
    bound is not enough. Where the error exceeds
    ``tol_s`` (default 10 ms: a star at 7,700 km/s moves 77 km, below 1e-7
    mas at 8 kpc, in that time) at any epoch, Newton's method on the exact
    equation continues (``f' = 1 + s v_z``, common practice, no source), one
    Kepler solve per step, until the error estimate after a step,
    ``|f''| step^2 / (2 f')`` with ``f'' = s a_z``, is below ``tol_s``
    everywhere. For an e = 0.88, 16-yr orbit around 4e6 solar masses the
    cubic model is enough (the bound per set is 8 ms; tests check the result
    against a root finder to 0.01 s). Positions and velocities are then those at ``t_emit``.

    When the model suffices, the Keplerian basis at ``t_emit`` comes without
    a second Kepler solve (:func:`_advance_basis`: the eccentric anomaly moved
    on by a Taylor step and one Newton step on Kepler's equation, with series
    for the sine and cosine of the small change); :meth:`emission_times`
    returns it with the epochs and :func:`orbitmass.core.orbit.evaluate` uses
    it as it is.

    Neglected: the periastron rotation of other terms inside the delay (the
    delay uses the Keplerian ``z``; the error is at most ``delta * r / c``,
    under a minute per orbit of precession at 12 arcmin per orbit, i.e.
    below 1e-3 mas on the positions); the Shapiro delay (of order
    ``2 G M / c^3 ln(...)``, minutes); and the mass ratio (``z`` is relative to
    the central body, exact for a test particle; for a massive companion the
    delay relative to the barycentre is smaller by ``M / (M + m)``).

    Needs ``state.ch_au``.
    """

    name: str = "roemer"
    parameters: tuple[str, ...] = ()
    linear_safe: bool = False
    tol_s: float = 1e-2
    max_iter: int = 20

    def emission_times(self, t_obs_yr, state: OrbitState, extra: Mapping[str, Any],
                       solve: Callable[[Any], KeplerBasis]) -> tuple[Array, KeplerBasis | None]:
        """Emission epochs (Julian years) for the observed epochs ``t_obs_yr``, and the basis there.

        Returns ``(t_emit, basis)``: ``basis`` is the Keplerian basis at
        ``t_emit`` when it came without another Kepler solve, else None (the
        caller solves).
        """
        if state.ch_au is None:
            raise ValueError("the Roemer delay needs the line-of-sight constants (OrbitState.ch_au)")
        C, H = state.ch_au
        period_obs = np.asarray(state.period_obs_yr, dtype=float)
        yr_per_au = period_obs / np.asarray(state.period_rest_yr, dtype=float) / C_AU_PER_YR
        n_obs = TWO_PI / period_obs
        ecc = np.asarray(state.ecc, dtype=float)
        t_obs = np.asarray(t_obs_yr, dtype=float)
        tol_yr = self.tol_s / (DAYS_PER_YEAR * 86400.0)
        basis = solve(t_obs)
        z_k = _los_time_derivatives(basis, C, H, ecc, n_obs)
        # the linear solution, then one Newton step on the cubic (its nonlinear part is ~v/c smaller)
        slope0 = 1.0 + yr_per_au * z_k[1]
        delta = -yr_per_au * z_k[0] / slope0
        nonlinear = yr_per_au * delta * delta * (0.5 * z_k[2] + delta * z_k[3] / 6.0)
        delta = delta - nonlinear / (slope0 + yr_per_au * delta * (z_k[2] + 0.5 * delta * z_k[3]))
        # error: twice the next term, 2 s |z_4| Delta^4 / 24; first a bound per parameter set
        # (|Delta| <= s |z| / slope, |z| <= sqrt(C^2 + H^2) rho), per epoch only when that is not enough
        los_au = np.hypot(C, H)
        root = np.sqrt((1.0 + ecc) / (1.0 - ecc))
        min_slope = np.maximum(1.0 - yr_per_au * n_obs * los_au * root, 0.5)
        bound = (yr_per_au * los_au) ** 5 * n_obs**4 * _fourth_derivative_bound(ecc) / (12.0 * min_slope**5)
        if not np.size(delta) or float(np.max(bound)) < tol_yr:
            return t_obs + delta, _advance_basis(basis, ecc, n_obs * delta)
        z4 = _los_time_derivatives(basis, C, H, ecc, n_obs, fourth=True)[4]
        delta2 = delta * delta
        error = yr_per_au / 12.0 * np.abs(z4) * delta2 * delta2 / slope0
        if float(np.max(error)) < tol_yr:
            return t_obs + delta, _advance_basis(basis, ecc, n_obs * delta)
        t = t_obs + delta
        for _ in range(self.max_iter):
            basis = solve(t)
            z_au = C * basis.X + H * basis.Y
            slope = 1.0 + yr_per_au * n_obs * (C * basis.dX + H * basis.dY)
            step = (t + yr_per_au * z_au - t_obs) / slope
            t = t - step
            curvature = yr_per_au * n_obs * n_obs * np.abs(z_au) / (1.0 - ecc * basis.cos_E) ** 3
            error = float(np.max(0.5 * curvature * step * step / slope)) if np.size(step) else 0.0
            if error < tol_yr:
                return t, None
        raise ArithmeticError(f"the Roemer delay iteration did not converge in {self.max_iter} steps "
                              f"(error estimate {error * DAYS_PER_YEAR * 86400.0:.3g} s)")


@dataclass(frozen=True)
class PrecessionTerm:
    """Schwarzschild precession of the periastron, scaled by ``precession_factor``.

    Per orbit the periastron advances by (Einstein 1915; Weinberg 1972,
    section 8.6, from memory)

        Delta omega = f_SP * 6 pi G M / (c^2 a (1 - e^2)),

    ``f_SP`` the ``precession_factor`` (0 Newton, 1 general relativity). The
    orbit is rotated in its plane by

        delta(t) = (Delta omega / 2 pi) * (nu(t) - nu(t_ref)),

    with ``nu`` the true anomaly counted continuously over the orbits, so the
    advance happens where the first post-Newtonian motion puts it: the
    osculating ``omega`` of a 1PN orbit grows as ``(3 G M / (c^2 p)) nu``
    (the quasi-Keplerian solution of Damour & Deruelle 1985, Ann. IHP 43, 107,
    from memory), concentrated near periastron, not uniformly in time. Its rate
    ``d delta / dM = (Delta omega / 2 pi) sqrt(1 - e^2) / (1 - e cos E)^2``
    rotates the velocities consistently. The orientation elements therefore
    hold at the reference epoch ``t_ref``, and the period is the anomalistic
    (periastron-to-periastron) one.

    Neglected: the 1PN changes of the orbit's shape and timing (the different
    radial, angular and time eccentricities of the quasi-Keplerian solution,
    all of relative size ``G M / (c^2 a)``, i.e. ~``G M / c^2`` in position:
    ~0.005 mas at 8 kpc for 4e6 solar masses), which are absorbed in the
    fitted elements to this order.
    """

    name: str = "precession"
    parameters: tuple[str, ...] = ("precession_factor",)
    linear_safe: bool = False

    def precession_per_orbit(self, state: OrbitState, extra: Mapping[str, Any]) -> Array:
        """Periastron advance per orbit (rad) for the state's orbits, scaled by the factor."""
        return np.asarray(extra["precession_factor"], dtype=float) * schwarzschild_precession_per_orbit(
            _mass_msun(state), _semimajor_axis_au(state), state.ecc)

    def plane_rotation(self, state: OrbitState, basis: KeplerBasis, extra: Mapping[str, Any]):
        """``(delta, d delta / dM)`` in rad, shape of the basis."""
        return _apsidal_rotation(self.precession_per_orbit(state, extra), state, basis)


@dataclass(frozen=True)
class ExtendedMassTerm:
    """An extended mass: a Plummer sphere of fixed scale radius around the central body.

    Its mass is ``extended_mass_fraction`` times the central mass; the scale
    radius is fixed from the target, either as a length (``scale_radius_au``)
    or as an angle (``scale_radius_mas``, turned into au with the state's
    distance: ``b_au = b_mas * distance_pc / 1000``). Give exactly one.

    Precession: the retrograde periastron precession per orbit of
    :func:`plummer_precession_per_orbit` (Gauss's equation for a radial
    perturbing force, orbit-averaged by quadrature), applied as the
    Schwarzschild term is, as an in-plane rotation growing with the true
    anomaly swept, ``delta = (Delta omega / 2 pi) (nu - nu_ref)``.

    Enclosed mass: the mass parameter of the state (Kepler's third law of the
    orbit, ``a^3 / P^2``) is treated as the central point mass in the
    precession formula; at first order in the fraction the extended mass acts
    through this precession only. Neglected: (i) the change of the mean motion
    by the enclosed extended mass (first order in the fraction, roughly the
    fraction enclosed within the orbit): in a one-companion fit it is absorbed
    in the fitted mass, which is then the point mass plus about the enclosed
    extended mass; companions at different radii would see different such
    masses in a joint fit (not modelled in this round); (ii) the short-period
    distortion of the orbit, of order ``fraction * a`` in position within an
    orbit; (iii) the distribution of the advance within the orbit (the Plummer
    precession is not exactly proportional to the true anomaly swept; only
    its secular value per orbit is exact at first order).
    """

    scale_radius_au: float | None = None
    scale_radius_mas: float | None = None
    name: str = "extended_mass"
    parameters: tuple[str, ...] = ("extended_mass_fraction",)
    linear_safe: bool = False

    def __post_init__(self):
        if (self.scale_radius_au is None) == (self.scale_radius_mas is None):
            raise ValueError("ExtendedMassTerm needs exactly one of scale_radius_au, scale_radius_mas")
        value = self.scale_radius_au if self.scale_radius_au is not None else self.scale_radius_mas
        if not (math.isfinite(value) and value > 0.0):
            raise ValueError(f"ExtendedMassTerm scale radius must be positive and finite, got {value!r}")

    def scale_au(self, state: OrbitState):
        """Scale radius in au (converted with ``state.distance_pc`` when given as an angle)."""
        if self.scale_radius_au is not None:
            return self.scale_radius_au
        if state.distance_pc is None:
            raise ValueError("an extended mass with an angular scale radius needs OrbitState.distance_pc")
        return self.scale_radius_mas * np.asarray(state.distance_pc, dtype=float) / 1000.0

    def precession_per_orbit(self, state: OrbitState, extra: Mapping[str, Any]) -> Array:
        """Precession per orbit (rad, negative = retrograde) for the state's orbits."""
        return plummer_precession_per_orbit(_mass_msun(state), _semimajor_axis_au(state), state.ecc,
                                            extra["extended_mass_fraction"], self.scale_au(state))

    def plane_rotation(self, state: OrbitState, basis: KeplerBasis, extra: Mapping[str, Any]):
        """``(delta, d delta / dM)`` in rad, shape of the basis."""
        return _apsidal_rotation(self.precession_per_orbit(state, extra), state, basis)


@dataclass(frozen=True)
class CombinedPrecession:
    """Several periastron precessions (e.g. Schwarzschild and an extended mass) as one in-plane rotation.

    Each part is a term with ``precession_per_orbit(state, extra)`` applied
    as ``delta = (Delta omega / 2 pi) (nu - nu_ref)`` (:class:`PrecessionTerm`,
    :class:`ExtendedMassTerm`). Rotations in the plane add, and so do their
    rates, so rotating once by the sum of the advances per orbit is the same
    as rotating by each in turn (to rounding), at the cost of one: the true
    anomaly and the rotation are computed once.
    """

    parts: tuple = ()
    name: str = "precession"
    linear_safe: bool = False

    @property
    def parameters(self) -> tuple[str, ...]:
        """The parameters of every part, in order."""
        return tuple(p for part in self.parts for p in part.parameters)

    def precession_per_orbit(self, state: OrbitState, extra: Mapping[str, Any]) -> Array:
        """The summed advance per orbit (rad) of the parts."""
        total = 0.0
        for part in self.parts:
            total = total + part.precession_per_orbit(state, extra)
        return total

    def plane_rotation(self, state: OrbitState, basis: KeplerBasis, extra: Mapping[str, Any]):
        """``(delta, d delta / dM)`` in rad, shape of the basis."""
        return _apsidal_rotation(self.precession_per_orbit(state, extra), state, basis)


# ----------------------------------------------------------------------------- building the terms

def _is_off(prior) -> bool:
    """A prior fixed at exactly 0 (the factor, or fraction, switches its term off)."""
    return bool(getattr(prior, "fixed", False)) and float(prior.value) == 0.0


def model_terms(relativity=None, extended_mass=None) -> tuple[tuple, dict]:
    """The model terms of a target and the priors of their parameters.

    Parameters
    ----------
    relativity : object with ``redshift_factor``, ``precession_factor`` (priors) and ``roemer_delay`` (bool), optional
        The target's ``[relativity]`` table (:class:`orbitmass.model.data.Relativity`), or None.
    extended_mass : object with ``fraction`` (prior), ``scale_radius_mas``, ``scale_radius_au``, optional
        The target's ``[extended_mass]`` table (:class:`orbitmass.model.data.ExtendedMass`), or None.

    Returns
    -------
    terms : tuple
        In the order :func:`orbitmass.core.orbit.evaluate` applies them:
        :class:`RoemerTerm` (when ``roemer_delay``), :class:`PrecessionTerm`,
        :class:`ExtendedMassTerm` (both at once as one
        :class:`CombinedPrecession`), :class:`RedshiftTerm`. A factor (or the
        fraction) fixed at exactly 0 adds no term at all, so a Newtonian target
        costs nothing; sampled or fixed at another value, it does.
    priors : dict
        Parameter name -> prior (``redshift_factor``, ``precession_factor``,
        ``extended_mass_fraction``) of every term returned.

    Examples
    --------
    >>> terms, priors = model_terms(None, None)
    >>> terms, priors
    ((), {})
    """
    terms: list = []
    priors: dict = {}
    precessions: list = []
    if relativity is not None:
        if relativity.roemer_delay:
            terms.append(RoemerTerm())
        if not _is_off(relativity.precession_factor):
            precessions.append(PrecessionTerm())
            priors["precession_factor"] = relativity.precession_factor
    if extended_mass is not None and not _is_off(extended_mass.fraction):
        precessions.append(ExtendedMassTerm(scale_radius_au=extended_mass.scale_radius_au,
                                            scale_radius_mas=extended_mass.scale_radius_mas))
        priors["extended_mass_fraction"] = extended_mass.fraction
    if len(precessions) > 1:  # one rotation for both (same result, half the cost)
        precessions = [CombinedPrecession(parts=tuple(precessions))]
    terms += precessions
    if relativity is not None and not _is_off(relativity.redshift_factor):
        terms.append(RedshiftTerm())
        priors["redshift_factor"] = relativity.redshift_factor
    return tuple(terms), priors


# ----------------------------------------------------------------------------- derived quantities

def precession_arcmin_per_orbit(mass_msun, a_au, ecc, precession_factor=1.0) -> Array:
    """Schwarzschild periastron advance per orbit (arcmin), scaled by the factor."""
    return np.asarray(precession_factor, dtype=float) * schwarzschild_precession_per_orbit(
        mass_msun, a_au, ecc) * ARCMIN_PER_RAD


def redshift_at_periastron_kms(mass_msun, a_au, ecc, redshift_factor=1.0) -> Array:
    """Redshift term at periastron (km/s): ``f (v_p^2 / (2c) + G M / (r_p c))``.

    ``r_p = a (1 - e)``, ``v_p^2 = G M (1 + e) / (a (1 - e))`` (vis-viva, common
    practice, no source); equals ``f G M (3 + e) / (2 a (1 - e) c)``.
    """
    ecc = np.asarray(ecc, dtype=float)
    a = np.asarray(a_au, dtype=float)
    mass = np.asarray(mass_msun, dtype=float)
    r_p = a * (1.0 - ecc)
    v_p = np.sqrt(GM_SUN_AU3_PER_YR2 * mass * (1.0 + ecc) / r_p) * KMS_PER_AU_PER_YR
    return np.asarray(redshift_factor, dtype=float) * redshift_shift_kms(mass, r_p, v_p)


def periastron_schwarzschild_radii(mass_msun, a_au, ecc) -> Array:
    """Periastron distance ``a (1 - e)`` in Schwarzschild radii ``2 G M / c^2``."""
    return np.asarray(a_au, dtype=float) * (1.0 - np.asarray(ecc, dtype=float)) / (
        RS_AU_PER_MSUN * np.asarray(mass_msun, dtype=float))


def roemer_delay_range_days(c_au, h_au, ecc) -> Array:
    """Full range of the Roemer delay over an orbit (days): ``(max z - min z) / c``.

    ``z = C (cos E - e) + H sqrt(1 - e^2) sin E`` (au), whose range over the
    eccentric anomaly is ``2 sqrt(C^2 + (1 - e^2) H^2)`` (amplitude of a
    sinusoid, common practice, no source). ``C = a sin(omega) sin(i)``,
    ``H = a cos(omega) sin(i)`` are the line-of-sight Thiele-Innes constants.
    """
    ecc = np.asarray(ecc, dtype=float)
    c_au = np.asarray(c_au, dtype=float)
    h_au = np.asarray(h_au, dtype=float)
    span_au = 2.0 * np.sqrt(c_au * c_au + (1.0 - ecc * ecc) * h_au * h_au)
    return span_au / C_AU_PER_YR * DAYS_PER_YEAR
