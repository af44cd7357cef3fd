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
:class:`CombinedPrecession`
    The two precessions at once, as one in-plane rotation (what
    :func:`model_terms` builds when both are on).

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

Verification (tests/core/test_relativity.py)
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

Longer than 600 lines because each of the four terms keeps its formula, source and
neglected effects in its own docstring beside the code, and the derived-quantity helpers
reuse their internals.
"""

from __future__ import annotations

import functools
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
        Most quadrature nodes in the eccentric anomaly (fewer are used where
        the orbits' eccentricity allows, see the code comment).
    """
    a, ecc, frac, b = (np.asarray(x, dtype=float) for x in (a_au, ecc, fraction, scale_radius_au))
    # The trapezoid error falls as exp(-N sigma), sigma the distance from the real axis of the
    # integrand's nearest pole: for b -> 0 the root of 1 - e cos E = 0, Im E = acosh(1 / e) (a larger
    # b moves the poles further out). N = 40 / sigma nodes (at least 32, at most n_nodes) keep the
    # error below ~1e-12 relative (the tests check 1e-9 against 8192 nodes).
    e_max = float(np.max(ecc)) if np.size(ecc) else 0.0
    sigma = math.acosh(1.0 / e_max) if 0.0 < e_max < 1.0 else math.inf
    n_nodes = int(min(n_nodes, max(32, 2 * math.ceil(20.0 / sigma)))) if math.isfinite(sigma) else min(n_nodes, 32)
    cos_e, weights, weights_cos = _trapezoid_half_circle(n_nodes)
    ecc_safe = np.maximum(ecc, 1e-8)
    # in units of a: rho = r / a, g = a^2 (-R / (G M_ext)) (G M_ext = fraction * G M); Int g (cos E - e) dE
    # as two sums
    rho = 1.0 - ecc_safe[..., None] * cos_e
    q = rho * rho + ((b / a) ** 2)[..., None]
    g = rho / (q * np.sqrt(q))
    integral = g @ weights_cos - ecc_safe * (g @ weights)
    out = np.sqrt(1.0 - ecc * ecc) * frac * integral / ecc_safe
    if np.shape(mass_msun) != out.shape:  # the mass does not enter (G M cancels) but sets the shape
        out = np.broadcast_to(out, np.broadcast_shapes(out.shape, np.shape(mass_msun))).copy()
    return out


@functools.lru_cache(maxsize=16)
def _trapezoid_half_circle(n_nodes: int) -> tuple[Array, Array, Array]:
    """Nodes ``cos E`` on [0, pi] and the weights (times ``cos E``) of the ``n_nodes``-point trapezoid rule of
    the full circle, for integrands even in ``E`` (read-only arrays)."""
    half = n_nodes // 2
    nodes = np.linspace(0.0, TWO_PI, n_nodes, endpoint=False)[: half + 1]
    weights = np.full(half + 1, 2.0)
    weights[0] = 1.0
    if n_nodes % 2 == 0:
        weights[half] = 1.0
    weights *= TWO_PI / n_nodes
    cos_e = np.cos(nodes)
    out = (cos_e, weights, weights * cos_e)
    for arr in out:
        arr.flags.writeable = False
    return out


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

    def shift_coefficients(self, state: OrbitState, extra: Mapping[str, Any]) -> tuple[Array, Array]:
        """Per-set ``(k_v2, k_r)`` of the shift ``k_v2 (dX^2 + dY^2) + k_r / (1 - e cos E)`` (km/s).

        ``k_v2 = f n^2 a^2 / (2 c)``, ``k_r = f G M / (a c)``; also the fused
        form of :meth:`velocity_shift` (:class:`orbitmass.core.orbit.FusedOrbit`).
        """
        factor = np.asarray(extra["redshift_factor"], dtype=float)
        a = _semimajor_axis_au(state)
        # per-set constants (n_sets, 1) first, so the epoch arrays see few operations
        gm_over_a = GM_SUN_AU3_PER_YR2 * _mass_msun(state) / a * (KMS_PER_AU_PER_YR ** 2 / C_KMS)
        half_v2 = 0.5 / C_KMS * ((TWO_PI * KMS_PER_AU_PER_YR / np.asarray(state.period_rest_yr, dtype=float)) * a) ** 2
        return factor * half_v2, factor * gm_over_a

    def velocity_shift(self, state: OrbitState, basis: KeplerBasis, vz_kms, extra: Mapping[str, Any]) -> Array:
        """The shift ``f (v^2/(2c) + GM/(rc))`` in km/s, shape of ``vz_kms``."""
        k_v2, k_r = self.shift_coefficients(state, extra)
        ecc = np.asarray(state.ecc, dtype=float)
        shift = (basis.dX * basis.dX + basis.dY * basis.dY) * k_v2
        shift += k_r / (1.0 - ecc * basis.cos_E)
        return shift


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

    Solution, exact for the Keplerian ``z`` and in one Kepler solve: in mean
    anomaly, ``M_obs = M_emit + sigma z(E)`` with ``sigma = n_obs s``, ``s =
    P_obs / (P_rest c)``, ``M_emit = E - e sin E`` and ``z = C (cos E - e) + H
    sqrt(1 - e^2) sin E``, so

        M_obs + sigma C e = E - p sin E + q cos E,    p = e - sigma H sqrt(1 - e^2),   q = sigma C,

    and with ``e* = sqrt(p^2 + q^2)``, ``phi = atan2(q, p)`` (``p sin E - q
    cos E = e* sin(E - phi)``) this is Kepler's equation

        M* = E* - e* sin E*,    E* = E - phi,    M* = M_obs + sigma C e - phi

    (the light-time equation of a Keplerian orbit folded into Kepler's
    equation; derived here, the trigonometric identity is common practice, no
    source). One solve gives ``E`` at the emission epoch for every observed
    epoch; ``t_emit = t_obs - s z``. :meth:`emission_times` returns the
    Keplerian basis at ``t_emit`` with the epochs, so
    :func:`orbitmass.core.orbit.evaluate` needs no second solve. ``e* < 1``
    unless ``e`` is within ``~v / c`` of 1; otherwise Newton's method on the
    light-time equation (``f(t) = t + s z(t) - t_obs``, ``f' = 1 + s v_z``,
    common practice, no source) runs instead, one Kepler solve per step,
    until the error estimate after a step, ``|f''| step^2 / (2 f')``, is below
    ``tol_s`` (default 10 ms) everywhere.

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

    def _fold(self, state: OrbitState) -> tuple:
        """Per-set constants of the light-time equation folded into Kepler's equation (class docstring).

        Returns ``(s, n_obs, e, sqrt(1 - e^2), sigma, p, q, e_star)``.
        """
        if state.ch_au is None:
            raise ValueError("the Roemer delay needs the line-of-sight constants (OrbitState.ch_au)")
        C, H = state.ch_au
        period_obs = np.asarray(state.period_obs_yr, dtype=float)
        yr_per_au = period_obs / np.asarray(state.period_rest_yr, dtype=float) / C_AU_PER_YR
        n_obs = TWO_PI / period_obs
        ecc = np.asarray(state.ecc, dtype=float)
        root = np.sqrt(1.0 - ecc * ecc)
        sigma = n_obs * yr_per_au
        p = ecc - sigma * H * root
        q = sigma * C
        return yr_per_au, n_obs, ecc, root, sigma, p, q, np.hypot(p, q)

    def emission_fold(self, state: OrbitState, extra: Mapping[str, Any]) -> tuple[Array, Array, Array] | None:
        """The fused form of :meth:`emission_times` (:class:`orbitmass.core.orbit.FusedOrbit`).

        Returns ``(mean_shift, e_star, phi)``: the eccentric anomaly at the
        emission epoch is ``E = E* + phi``, ``E*`` the root of Kepler's
        equation ``M_obs + mean_shift = E* - e_star sin E*`` (class
        docstring); or None when ``e_star >= 1`` for some parameter set (the
        caller then uses :meth:`emission_times`, whose Newton iterations
        handle that case).
        """
        _, _, ecc, _, _, p, q, e_star = self._fold(state)
        if not (np.size(e_star) and float(np.max(e_star)) < 1.0):
            return None
        phi = np.arctan2(q, p)
        return q * ecc - phi, e_star, phi

    def emission_times(self, t_obs_yr, state: OrbitState, extra: Mapping[str, Any],
                       solve: Callable[[Any], KeplerBasis]) -> tuple[Array, KeplerBasis | None]:
        """Emission epochs (Julian years) for the observed epochs ``t_obs_yr``, and the Keplerian basis there.

        Returns ``(t_emit, basis)``; ``basis`` is None after the Newton
        iterations (the caller then solves at ``t_emit``).
        """
        yr_per_au, n_obs, ecc, root, sigma, p, q, e_star = self._fold(state)
        C, H = state.ch_au
        t_obs = np.asarray(t_obs_yr, dtype=float)
        if np.size(e_star) and float(np.max(e_star)) < 1.0:
            phi = np.arctan2(q, p)
            mean_obs = state.mean_anomaly_ref + n_obs * (t_obs - state.t_ref_yr)
            cos_s, sin_s = kepler_cos_sin(mean_obs + (q * ecc - phi), e_star)
            cos_phi, sin_phi = np.cos(phi), np.sin(phi)
            cos_e = cos_s * cos_phi - sin_s * sin_phi
            sin_e = sin_s * cos_phi + cos_s * sin_phi
            X = cos_e - ecc
            Y = root * sin_e
            inv = 1.0 / (1.0 - ecc * cos_e)
            z_au = C * X + H * Y
            basis = KeplerBasis(cos_E=cos_e, sin_E=sin_e, X=X, Y=Y, dX=-sin_e * inv, dY=(root * inv) * cos_e,
                                mean_anomaly=mean_obs - sigma * z_au)
            return t_obs - yr_per_au * z_au, basis
        tol_yr = self.tol_s / (DAYS_PER_YEAR * 86400.0)
        t = t_obs
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


class _Apsidal:
    """The in-plane rotation shared by the precession terms: ``delta = (Delta omega / 2 pi) (nu - nu_ref)``.

    A subclass gives ``precession_per_orbit(state, extra)`` (rad); the
    rotation follows from it (:func:`_apsidal_rotation`), and so does its
    fused form :meth:`apsidal_advance` (:class:`orbitmass.core.orbit.FusedOrbit`).
    """

    def plane_rotation(self, state: OrbitState, basis: KeplerBasis, extra: Mapping[str, Any]):
        """``(delta, d delta / dM)`` in rad, shape of the basis."""
        return _apsidal_rotation(self.precession_per_orbit(state, extra), state, basis)

    def apsidal_advance(self, state: OrbitState, extra: Mapping[str, Any]) -> Array:
        """The advance per orbit (rad) of the rotation, per parameter set."""
        return self.precession_per_orbit(state, extra)


@dataclass(frozen=True)
class PrecessionTerm(_Apsidal):
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



@dataclass(frozen=True)
class ExtendedMassTerm(_Apsidal):
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



@dataclass(frozen=True)
class CombinedPrecession(_Apsidal):
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
        precessions = [CombinedPrecession(parts=tuple(precessions), name="+".join(t.name for t in precessions))]
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
