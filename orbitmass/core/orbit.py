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

Fused forms (optional)
----------------------
:class:`FusedOrbit`, the likelihood's hot path, evaluates an orbit in place in
work arrays kept between calls. It takes a term only when the term also states
its hooks in one of these fixed forms (per-set coefficients; the per-epoch
arithmetic is the evaluator's), and otherwise the caller uses
:func:`evaluate`:

``emission_fold(state, extra) -> (mean_shift, ecc_solve, phi)`` or None
    For ``emission_times``: the eccentric anomaly at the emission epoch is
    ``E = E' + phi``, with ``E'`` the root of Kepler's equation
    ``M + mean_shift = E' - ecc_solve sin E'`` (``M`` the mean anomaly at the
    observed epoch). None when this form does not hold for some parameter set.
``apsidal_advance(state, extra) -> advance`` (rad per orbit)
    For ``plane_rotation``: the rotation is ``delta = (advance / 2 pi) (nu -
    nu_ref)``, ``nu`` the true anomaly counted continuously, ``nu_ref`` its
    value at the reference epoch (the mean anomaly ``mean_anomaly_ref``).
``shift_coefficients(state, extra) -> (k_v2, k_r)``
    For ``velocity_shift``: ``dv = k_v2 (dX^2 + dY^2) + k_r / (1 - e cos E)``
    (km/s), not depending on ``vz_kms``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping, Protocol, Sequence, runtime_checkable

import numpy as np
from numpy.typing import NDArray

from orbitmass.core.kepler import kepler_cos_sin, kepler_cos_sin_rows, rows_work
from orbitmass.units import KMS_PER_AU_PER_YR

__all__ = [
    "TWO_PI",
    "thiele_innes",
    "KeplerBasis",
    "kepler_basis",
    "OrbitState",
    "ModelTerm",
    "evaluate",
    "FusedOrbit",
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


class FusedOrbit:
    """One companion's orbit on a fixed grid of epochs, evaluated in place (the likelihood's hot path).

    The same model as :func:`evaluate` with the same terms, for every epoch of
    ``dt_yr`` (epochs minus the reference epoch), written out for speed: one
    Kepler solve (:func:`~orbitmass.core.kepler.kepler_cos_sin_rows`) on the
    whole block, then every step in place in the work arrays of
    :meth:`work` (kept by the caller between calls), using the terms' fused
    forms (module docstring):

    * emission times: the folded Kepler equation, solved in place of the
      observed-epoch one (same cost), ``E = E' + phi``;
    * apsidal rotations: their advances per orbit add; ``nu`` from the
      unwrapped eccentric anomaly and ``nu - E = 2 atan(beta sin E / (1 -
      beta cos E))`` (``1 - beta cos E > 0``, so ``atan`` of the quotient
      equals the ``atan2`` of :mod:`orbitmass.core.relativity`), ``nu_ref``
      from one more column of the same Kepler solve (the reference epoch with
      the observed-epoch eccentricity); the rotated orbit in polar form
      (:meth:`_apsidal`), with ``cos psi``, ``sin psi`` from ``t = tan(psi /
      2)``: ``2 / (1 + t^2) - 1`` and ``2 t / (1 + t^2)`` (a ``tan`` costs a
      small fraction of a ``sin`` plus a ``cos``);
    * velocity shifts: their coefficients add.

    Agrees with :func:`evaluate` to round-off
    (``tests/model/test_likelihood_terms_fused.py``).

    Parameters
    ----------
    dt_yr : ndarray, shape (n_epochs,)
        Observed epochs minus ``t_ref_yr`` of the states evaluated.
    terms : sequence of model terms
        Each with the fused form of each of its hooks (:meth:`supports`).
    velocities : bool
        Compute the line-of-sight velocity too.
    """

    def __init__(self, dt_yr, terms: Sequence[ModelTerm] = (), *, velocities: bool = True):
        if not self.supports(terms):
            raise ValueError("a model term lacks the fused form of one of its hooks; use evaluate()")
        self.dt = np.asarray(dt_yr, dtype=float)
        self.m = self.dt.size
        self.velocities = bool(velocities)
        self.fold = [t for t in terms if getattr(t, "emission_times", None) is not None]
        self.advances = [t for t in terms if getattr(t, "plane_rotation", None) is not None]
        self.shifts = [t for t in terms if getattr(t, "velocity_shift", None) is not None]
        # the reference epoch as one more column of the Kepler solve (nu_ref of the rotations)
        self.dt_solve = np.append(self.dt, 0.0) if self.advances else self.dt

    @staticmethod
    def supports(terms: Sequence[ModelTerm]) -> bool:
        """True when every hook of every term has its fused form (and at most one term has emission times)."""
        forms = {"emission_times": "emission_fold", "plane_rotation": "apsidal_advance",
                 "velocity_shift": "shift_coefficients"}
        n_emission = 0
        for term in terms:
            for hook, form in forms.items():
                if getattr(term, hook, None) is not None:
                    if getattr(term, form, None) is None:
                        return False
                    n_emission += hook == "emission_times"
        return n_emission <= 1

    def work(self, n_sets: int) -> dict[str, Array]:
        """Work arrays for blocks of ``n_sets`` parameter sets."""
        n, m, k = n_sets, self.m, self.dt_solve.size
        names = ["X", "Y", "t1", "t2", "inv"]
        if self.velocities:
            names += ["vz", "dx", "dy"]
        if self.fold and not self.advances:
            names += ["cos_e", "sin_e"]
        if self.advances:
            names += ["nu", "c", "s"]
        work = {name: np.empty((n, m)) for name in names}
        for name in ("mean", "cos_k", "sin_k") + (("ecc",) if self.fold and self.advances else ()):
            work[name] = np.empty((n, k))
        work["kepler"] = rows_work(n, k)
        return work

    def __call__(self, state: OrbitState, extra: Mapping[str, Any], work: Mapping[str, Array]):
        """``(X, Y, vz_kms)`` at the epochs: the (rotated) normalised positions and the velocity (None if not asked).

        ``state`` holds ``(n_sets, 1)`` arrays with ``ch_au`` (au), ``a_au``
        and ``mass_msun`` as the terms need them; ``ti_mas`` is not used (the
        caller applies ``A, B, F, G`` to ``X, Y``). The arrays returned are
        work arrays, overwritten by the next call. Returns None when a term's
        fused form declines (the caller then uses :func:`evaluate`).
        """
        w = work
        m = self.m
        ecc = state.ecc
        m0 = state.mean_anomaly_ref
        mean, cos_k, sin_k = w["mean"], w["cos_k"], w["sin_k"]
        np.multiply(TWO_PI / state.period_obs_yr, self.dt_solve, out=mean)
        np.add(mean, m0, out=mean)  # the extra column (dt = 0) is m0 exactly
        e_solve = ecc
        phi = 0.0
        if self.fold:
            folded = self.fold[0].emission_fold(state, extra)
            if folded is None:
                return None
            shift, e_solve, phi = folded
            if self.advances:
                np.add(mean[:, :m], shift, out=mean[:, :m])
                ecc_all = w["ecc"]
                np.copyto(ecc_all[:, :m], e_solve)
                ecc_all[:, m:] = ecc
                kepler_cos_sin_rows(mean, ecc_all, cos_k, sin_k, w["kepler"])
            else:
                np.add(mean, shift, out=mean)
                kepler_cos_sin_rows(mean, e_solve, cos_k, sin_k, w["kepler"])
        else:
            kepler_cos_sin_rows(mean, ecc, cos_k, sin_k, w["kepler"])
        cos_s, sin_s = (cos_k[:, :m], sin_k[:, :m]) if self.advances else (cos_k, sin_k)
        t1, t2 = w["t1"], w["t2"]
        if self.advances:  # unwrapped eccentric anomaly less phi, M' + e' sin E'; then the rotated orbit
            nu = w["nu"]
            np.multiply(sin_s, e_solve, out=nu)
            np.add(nu, mean[:, :m], out=nu)
            return self._apsidal(state, extra, w, cos_s, sin_s, phi)
        if self.fold:  # E = E' + phi
            cos_e, sin_e = w["cos_e"], w["sin_e"]
            _add_angle(cos_s, sin_s, np.cos(phi), np.sin(phi), cos_e, sin_e, t1)
        else:
            cos_e, sin_e = cos_s, sin_s
        root = np.sqrt(1.0 - ecc * ecc)
        X, Y = w["X"], w["Y"]
        np.subtract(cos_e, ecc, out=X)
        np.multiply(sin_e, root, out=Y)
        if not self.velocities:
            return X, Y, None
        vz = w["vz"]
        k_c, k_h = self._velocity_constants(state)
        if not self.shifts:
            # v_z = n_rest (C dX/dM + H dY/dM) = n_rest (H sqrt(1-e^2) cos E - C sin E) / (1 - e cos E)
            np.multiply(cos_e, k_h * root, out=vz)
            np.multiply(sin_e, k_c, out=t1)
            np.subtract(vz, t1, out=vz)
            np.multiply(cos_e, ecc, out=t1)
            np.subtract(1.0, t1, out=t1)
            np.divide(vz, t1, out=vz)
            return X, Y, vz
        inv, dx, dy = w["inv"], w["dx"], w["dy"]
        np.multiply(cos_e, ecc, out=inv)
        np.subtract(1.0, inv, out=inv)
        np.divide(1.0, inv, out=inv)  # 1 / (1 - e cos E)
        np.multiply(sin_e, inv, out=dx)  # -dX/dM
        np.multiply(cos_e, inv, out=dy)
        np.multiply(dy, root, out=dy)  # dY/dM
        np.multiply(dy, k_h, out=vz)
        np.multiply(dx, k_c, out=t1)
        np.subtract(vz, t1, out=vz)
        k_v2, k_r = self._shift_coefficients(state, extra)
        np.multiply(dx, dx, out=t1)
        np.multiply(dy, dy, out=t2)
        np.add(t1, t2, out=t1)
        np.multiply(t1, k_v2, out=t1)
        np.add(vz, t1, out=vz)
        np.multiply(inv, k_r, out=t1)
        np.add(vz, t1, out=vz)
        return X, Y, vz

    @staticmethod
    def _velocity_constants(state: OrbitState):
        """``n_rest C`` and ``n_rest H`` in km/s."""
        n_rest = TWO_PI * KMS_PER_AU_PER_YR / state.period_rest_yr
        return n_rest * state.ch_au[0], n_rest * state.ch_au[1]

    def _shift_coefficients(self, state: OrbitState, extra):
        k_v2, k_r = 0.0, 0.0
        for term in self.shifts:
            a, b = term.shift_coefficients(state, extra)
            k_v2, k_r = k_v2 + a, k_r + b
        return k_v2, k_r

    def _apsidal(self, state, extra, w, cos_s, sin_s, phi):
        """The orbit rotated by the summed apsidal rotations, in polar form.

        With ``rho = 1 - e cos E = r / a`` and ``psi = nu + delta = (1 + k) nu -
        k nu_ref`` (``k`` = advance / 2 pi): ``X_r = rho cos psi``, ``Y_r = rho
        sin psi``; their rates per unit of mean anomaly, with ``d rho / dM = e
        sin E / rho`` and ``d psi / dM = (1 + k) sqrt(1 - e^2) / rho^2``
        (Kepler's second law, common practice, no source), are ``(e sin E cos
        psi - g sin psi) / rho`` and ``(e sin E sin psi + g cos psi) / rho``
        with ``g = (1 + k) sqrt(1 - e^2)``; so ``dX_r^2 + dY_r^2 = ((e sin
        E)^2 + g^2) / rho^2``. ``cos psi``, ``sin psi`` from ``t = tan(psi /
        2)``. ``E = E' + phi`` enters through ``beta cos E`` and ``beta sin E``
        only (angle addition with the per-set ``beta cos phi``, ``beta sin
        phi``), and ``e = beta (1 + sqrt(1 - e^2))``.
        """
        m = self.m
        ecc = state.ecc
        root = np.sqrt(1.0 - ecc * ecc)
        advance = 0.0
        for term in self.advances:
            advance = advance + term.apsidal_advance(state, extra)
        scale = advance / TWO_PI
        beta = ecc / (1.0 + root)
        # nu at the reference epoch, from the extra column of the solve
        c0, s0 = w["cos_k"][:, m:], w["sin_k"][:, m:]
        nu_ref = state.mean_anomaly_ref + ecc * s0 + 2.0 * np.arctan2(beta * s0, 1.0 - beta * c0)
        nu, c, s, t1 = w["nu"], w["c"], w["s"], w["t1"]
        if self.fold:
            _add_angle(cos_s, sin_s, beta * np.cos(phi), beta * np.sin(phi), c, s, t1)  # beta cos E, beta sin E
        else:
            np.multiply(cos_s, beta, out=c)
            np.multiply(sin_s, beta, out=s)
        rho, es = w["inv"], w["t2"]
        np.multiply(c, 1.0 + root, out=rho)
        np.subtract(1.0, rho, out=rho)  # 1 - e cos E
        if self.velocities:
            np.multiply(s, 1.0 + root, out=es)  # e sin E
        np.subtract(1.0, c, out=c)
        np.divide(s, c, out=s)
        np.arctan(s, out=s)
        np.add(nu, s, out=nu)
        np.add(nu, s, out=nu)  # nu - phi
        half = 0.5 + 0.5 * scale
        np.multiply(nu, half, out=nu)
        np.add(nu, half * phi - (0.5 * scale) * nu_ref, out=nu)  # psi / 2
        np.tan(nu, out=nu)
        np.multiply(nu, nu, out=c)
        np.add(c, 1.0, out=c)
        np.divide(2.0, c, out=c)
        np.multiply(nu, c, out=s)  # sin psi
        np.subtract(c, 1.0, out=c)  # cos psi
        X, Y = w["X"], w["Y"]
        np.multiply(rho, c, out=X)
        np.multiply(rho, s, out=Y)
        if not self.velocities:
            return X, Y, None
        vz = w["vz"]
        inv = np.divide(1.0, rho, out=rho)
        g = (1.0 + scale) * root
        k_c, k_h = self._velocity_constants(state)
        # v_z rho = cos psi (e sin E k_c + g k_h) + sin psi (e sin E k_h - g k_c)
        np.multiply(es, k_c, out=t1)
        np.add(t1, g * k_h, out=t1)
        np.multiply(t1, c, out=vz)
        np.multiply(es, k_h, out=t1)
        np.subtract(t1, g * k_c, out=t1)
        np.multiply(t1, s, out=t1)
        np.add(vz, t1, out=vz)
        if self.shifts:
            k_v2, k_r = self._shift_coefficients(state, extra)
            # + k_v2 ((e sin E)^2 + g^2) / rho + k_r
            np.multiply(es, es, out=t1)
            np.add(t1, g * g, out=t1)
            np.multiply(t1, inv, out=t1)
            np.multiply(t1, k_v2, out=t1)
            np.add(vz, t1, out=vz)
            np.add(vz, k_r, out=vz)
        np.multiply(vz, inv, out=vz)
        return X, Y, vz


def _add_angle(cos_a, sin_a, k_cos_b, k_sin_b, out_cos, out_sin, tmp) -> None:
    """``k cos(a + b)`` and ``k sin(a + b)`` into ``out_cos``, ``out_sin`` from ``cos a``, ``sin a`` (arrays) and
    ``k cos b``, ``k sin b`` (per-set constants); ``tmp`` is scratch of the arrays' shape."""
    np.multiply(sin_a, k_sin_b, out=tmp)
    np.multiply(cos_a, k_cos_b, out=out_cos)
    np.subtract(out_cos, tmp, out=out_cos)
    np.multiply(cos_a, k_sin_b, out=tmp)
    np.multiply(sin_a, k_cos_b, out=out_sin)
    np.add(out_sin, tmp, out=out_sin)


def relative_orbit(t_yr, *, t_ref_yr: float, period_obs_yr, period_rest_yr, ecc, mean_anomaly_ref,
                   ti_mas: tuple | None, ch_au: tuple | None) -> dict[str, Array]:
    """Keplerian position (mas) and line-of-sight velocity (km/s), no model terms.

    A convenience wrapper of :func:`evaluate` kept for callers of the
    former ``orbitmass.model.relative_orbit``.
    """
    state = OrbitState(period_rest_yr=period_rest_yr, period_obs_yr=period_obs_yr, ecc=ecc,
                       mean_anomaly_ref=mean_anomaly_ref, t_ref_yr=t_ref_yr, ti_mas=ti_mas, ch_au=ch_au)
    return evaluate(state, t_yr, positions=ti_mas is not None, velocities=ch_au is not None)
