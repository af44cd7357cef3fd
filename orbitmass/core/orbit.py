"""THE orbit evaluator: positions and line-of-sight velocities of companions.

Every part of orbitmass that needs an orbit (the likelihood, the initial
search, the astrometry-only fast path, predictions and figures) gets it from
this module, so a change of the model (a relativistic term, an extended mass)
is made in one place.

Pure functions on plain floats in internal units (mas, au, Julian years, km/s,
radians). Shapes broadcast: element arrays are usually ``(n_sets, 1)`` and
epochs ``(n_epochs,)`` or ``(1, n_epochs)``, giving ``(n_sets, n_epochs)``.

Conventions (see :mod:`orbitmass.core.elements`)
------------------------------------------------
In the orbital plane, with ``E`` the eccentric anomaly, the normalised
coordinates of the companion relative to the central body are

    X = cos E - e,    Y = sqrt(1 - e^2) sin E                      (in units of a)

and their time derivatives, in units of ``a`` per unit of mean anomaly,

    dX/dM = -sin E / (1 - e cos E),    dY/dM = sqrt(1 - e^2) cos E / (1 - e cos E).

The sky offsets and the line-of-sight (receding, +z away from the observer)
coordinate are linear in them through the Thiele-Innes constants:

    north = A X + F Y,   east = B X + G Y,   z = C X + H Y,
    v_z   = n_rest (C dX/dM + H dY/dM)          with n_rest = 2 pi / P_rest.

``A, B, F, G`` are in mas (``a`` in mas) for positions, ``C, H`` in au for
velocities (``a`` in au; ``KMS_PER_AU_PER_YR`` turns au/yr into km/s).

Two levels
----------
:func:`kepler_basis` gives ``X, Y, dX/dM, dY/dM`` at given epochs; the
design matrices of the initial search and the fast path's linear algebra use
it directly (positions and velocities are linear in the constants).
:func:`evaluate` combines the basis with the constants of a set of elements
and applies the model terms: it is what the likelihood, predictions and
figures call.

Model terms (the plug-in contract)
----------------------------------
A model term is an object with

``name`` : str
    Short identifier (``"redshift"``, ``"roemer"``, ...).
``parameters`` : tuple of str
    Names of the extra physical quantities it reads from ``extra`` (for
    example ``("redshift_factor",)``); the parameter space samples or fixes
    them from the target's priors.
``linear_safe`` : bool
    False when the term makes positions or velocities non-linear in the
    Thiele-Innes constants; the fast path and linear searches then decline.

and any of these optional hooks, applied by :func:`evaluate` in this order:

``emission_times(t_obs_yr, state, extra, solve) -> t_emit_yr`` or ``(t_emit_yr, basis)``
    Light-travel time: return the epochs at which the light observed at
    ``t_obs_yr`` was emitted. ``solve(t)`` evaluates the Keplerian state at
    any epochs (so the term can iterate, e.g. for the Romer delay). A term
    that has the Keplerian basis at ``t_emit_yr`` at hand may return it too
    (or None in its place); :func:`evaluate` then uses it instead of solving
    Kepler's equation again.
``plane_rotation(state, basis, extra) -> (delta, delta_rate)``
    A rotation of the orbit in its plane by ``delta`` (rad, shape of the
    basis), e.g. a periastron advance that grows with the true anomaly swept,
    and its rate ``d delta / dM`` (per unit of mean anomaly) so that the
    velocity is rotated consistently.
``velocity_shift(state, basis, vz_kms, extra) -> dv_kms``
    An additive shift of the line-of-sight velocity (km/s), e.g. the
    gravitational redshift and transverse Doppler shift.

``state`` is the :class:`OrbitState` being evaluated; ``extra`` a mapping of
parameter name to array (broadcastable to ``(n_sets, 1)``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping, Protocol, Sequence, runtime_checkable

import numpy as np
from numpy.typing import NDArray

from orbitmass.core.kepler import kepler_cos_sin
from orbitmass.units import KMS_PER_AU_PER_YR

__all__ = [
    "TWO_PI",
    "thiele_innes",
    "KeplerBasis",
    "kepler_basis",
    "OrbitState",
    "ModelTerm",
    "evaluate",
    "relative_orbit",
]

TWO_PI = 2.0 * math.pi

Array = NDArray[np.float64]


def thiele_innes(a, cos_i, sin_i, cos_w, sin_w, cos_W, sin_W):
    """Thiele-Innes constants (A, B, F, G, C, H) in the unit of ``a``.

    Takes cosines and sines so callers that already hold them avoid
    recomputing trigonometric functions.

    Examples
    --------
    A face-on orbit (i = 0) with omega = Omega = 0 maps X to north, Y to east:

    >>> A, B, F, G, C, H = thiele_innes(1.0, 1.0, 0.0, 1.0, 0.0, 1.0, 0.0)
    >>> (A, B, F, G, C, H)
    (1.0, 0.0, -0.0, 1.0, 0.0, 0.0)
    """
    A = a * (cos_w * cos_W - sin_w * sin_W * cos_i)
    B = a * (cos_w * sin_W + sin_w * cos_W * cos_i)
    F = a * (-sin_w * cos_W - cos_w * sin_W * cos_i)
    G = a * (-sin_w * sin_W + cos_w * cos_W * cos_i)
    C = a * sin_w * sin_i
    H = a * cos_w * sin_i
    return A, B, F, G, C, H


@dataclass(frozen=True)
class KeplerBasis:
    """Normalised in-plane coordinates and their rates at a set of epochs.

    All arrays share one broadcast shape, typically ``(n_sets, n_epochs)``.
    ``cos_E``, ``sin_E``: the eccentric anomaly; ``X``, ``Y``: position in
    units of ``a``; ``dX``, ``dY``: derivatives with respect to the mean
    anomaly (multiply by ``2 pi / P`` for a rate per year).
    ``mean_anomaly``: the mean anomaly (rad), not wrapped, so a term can count
    the orbits swept since the reference epoch (None if not known).
    """

    cos_E: Array
    sin_E: Array
    X: Array
    Y: Array
    dX: Array
    dY: Array
    mean_anomaly: Array | None = None


def kepler_basis(t_yr, *, t_ref_yr: float, period_obs_yr, ecc, mean_anomaly_ref,
                 velocities: bool = True) -> KeplerBasis:
    """The Keplerian basis ``X, Y, dX/dM, dY/dM`` at epochs ``t_yr``.

    Parameters
    ----------
    t_yr : array
        Epochs, Julian years on the observed timeline.
    t_ref_yr : float
        Reference epoch at which ``mean_anomaly_ref`` holds.
    period_obs_yr, ecc, mean_anomaly_ref : array
        Observed-timeline period (yr), eccentricity, mean anomaly at the
        reference epoch (rad); broadcastable against ``t_yr``.
    velocities : bool
        Compute ``dX``, ``dY`` (else they are ``None``).
    """
    mean = mean_anomaly_ref + (TWO_PI / period_obs_yr) * (np.asarray(t_yr) - t_ref_yr)
    cos_E, sin_E = kepler_cos_sin(mean, ecc)
    root = np.sqrt(1.0 - ecc * ecc)
    X = cos_E - ecc
    Y = root * sin_E
    if velocities:
        inv = 1.0 / (1.0 - ecc * cos_E)
        dX = -sin_E * inv
        dY = root * cos_E * inv
    else:
        dX = dY = None
    return KeplerBasis(cos_E=cos_E, sin_E=sin_E, X=X, Y=Y, dX=dX, dY=dY, mean_anomaly=mean)


@dataclass(frozen=True)
class OrbitState:
    """The elements of one companion's relative orbit for ``n_sets`` parameter sets.

    Arrays broadcast against the epochs (usually shape ``(n_sets, 1)``).

    Attributes
    ----------
    period_rest_yr, period_obs_yr : rest-frame and observed period (yr); they
        differ by (1 + z) for a redshifted system.
    ecc : eccentricity.
    mean_anomaly_ref : mean anomaly at ``t_ref_yr`` (rad).
    t_ref_yr : reference epoch (Julian year).
    ti_mas : (A, B, F, G) in mas, or None when no positions are wanted.
    ch_au : (C, H) in au, or None when no velocities are wanted.
    mass_msun, a_au, distance_pc : total mass, semimajor axis, distance (model
        terms read them; may be None when no term needs them).
    """

    period_rest_yr: Any
    period_obs_yr: Any
    ecc: Any
    mean_anomaly_ref: Any
    t_ref_yr: float
    ti_mas: tuple | None = None
    ch_au: tuple | None = None
    mass_msun: Any = None
    a_au: Any = None
    distance_pc: Any = None


@runtime_checkable
class ModelTerm(Protocol):
    """What a model term declares (see the module docstring for the hooks)."""

    name: str
    parameters: tuple[str, ...]
    linear_safe: bool


def evaluate(state: OrbitState, t_yr, *, positions: bool = True, velocities: bool = True,
             terms: Sequence[ModelTerm] = (), extra: Mapping[str, Any] | None = None) -> dict[str, Array]:
    """Sky position (mas) and line-of-sight velocity (km/s) of the companion relative to the central body.

    Parameters
    ----------
    state : OrbitState
        Elements and Thiele-Innes constants.
    t_yr : array, shape (n_epochs,) or broadcastable
        Observed epochs (Julian years).
    positions, velocities : bool
        Which outputs to compute (positions need ``state.ti_mas``, velocities
        ``state.ch_au``).
    terms : sequence of model terms
        Applied in the order of the module docstring; empty = Keplerian.
    extra : mapping
        Values of the terms' parameters.

    Returns
    -------
    dict
        ``east_mas``, ``north_mas`` and/or ``vz_kms``, each ``(n_sets, n_epochs)``.
    """
    extra = {} if extra is None else extra
    t = np.asarray(t_yr, dtype=float)

    def solve(tt) -> KeplerBasis:
        return kepler_basis(tt, t_ref_yr=state.t_ref_yr, period_obs_yr=state.period_obs_yr, ecc=state.ecc,
                            mean_anomaly_ref=state.mean_anomaly_ref, velocities=True)

    emitted = None  # a hook may return (t_emit, basis at t_emit): then no second Kepler solve
    for term in terms:
        hook = getattr(term, "emission_times", None)
        if hook is not None:
            t = hook(t, state, extra, solve)
            t, emitted = t if isinstance(t, tuple) else (t, None)
    rotations = [term for term in terms if getattr(term, "plane_rotation", None) is not None]
    shifts = [term for term in terms if getattr(term, "velocity_shift", None) is not None]
    if emitted is not None and (emitted.dX is not None or not (velocities or rotations)):
        basis = emitted
    else:
        basis = kepler_basis(t, t_ref_yr=state.t_ref_yr, period_obs_yr=state.period_obs_yr, ecc=state.ecc,
                             mean_anomaly_ref=state.mean_anomaly_ref, velocities=velocities or bool(rotations))
    for term in rotations:
        basis = _rotate_basis(basis, *term.plane_rotation(state, basis, extra))
    out: dict[str, Array] = {}
    if positions:
        A, B, F, G = state.ti_mas
        out["north_mas"] = A * basis.X + F * basis.Y
        out["east_mas"] = B * basis.X + G * basis.Y
    if velocities:
        C, H = state.ch_au
        vz = (TWO_PI * KMS_PER_AU_PER_YR / state.period_rest_yr) * (C * basis.dX + H * basis.dY)
        for term in shifts:
            vz = vz + term.velocity_shift(state, basis, vz, extra)
        out["vz_kms"] = vz
    return out


def _rotate_basis(basis: KeplerBasis, delta, delta_rate) -> KeplerBasis:
    """Rotate the in-plane position by ``delta`` (rad); the rates get the rotation's own rate too.

    With R(delta) the rotation matrix, r' = R r and
    dr'/dM = R dr/dM + (d delta/dM) R'(delta) r, R' = dR/d delta.
    """
    c, s = np.cos(delta), np.sin(delta)
    X, Y = basis.X, basis.Y
    Xr = c * X - s * Y
    Yr = s * X + c * Y
    if basis.dX is None:
        return KeplerBasis(cos_E=basis.cos_E, sin_E=basis.sin_E, X=Xr, Y=Yr, dX=None, dY=None,
                           mean_anomaly=basis.mean_anomaly)
    dXr = c * basis.dX - s * basis.dY - delta_rate * Yr
    dYr = s * basis.dX + c * basis.dY + delta_rate * Xr
    return KeplerBasis(cos_E=basis.cos_E, sin_E=basis.sin_E, X=Xr, Y=Yr, dX=dXr, dY=dYr,
                       mean_anomaly=basis.mean_anomaly)


def relative_orbit(t_yr, *, t_ref_yr: float, period_obs_yr, period_rest_yr, ecc, mean_anomaly_ref,
                   ti_mas: tuple | None, ch_au: tuple | None) -> dict[str, Array]:
    """Keplerian position (mas) and line-of-sight velocity (km/s), no model terms.

    A convenience wrapper of :func:`evaluate` kept for callers of the
    former ``orbitmass.model.relative_orbit``.
    """
    state = OrbitState(period_rest_yr=period_rest_yr, period_obs_yr=period_obs_yr, ecc=ecc,
                       mean_anomaly_ref=mean_anomaly_ref, t_ref_yr=t_ref_yr, ti_mas=ti_mas, ch_au=ch_au)
    return evaluate(state, t_yr, positions=ti_mas is not None, velocities=ch_au is not None)
