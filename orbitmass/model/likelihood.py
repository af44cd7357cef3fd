"""Data + model -> log-likelihood and log-posterior, vectorised over parameter sets.

The astrometric likelihood is Gaussian per epoch with the row's 2x2 error
covariance, evaluated in the form the row was measured in (east/north, or
separation/position angle with the angle residual wrapped to +-180 deg). The
velocity likelihood is Gaussian with variance sigma^2 + jitter^2 of the row's
instrument, normalisation included so jitter is constrained.

Model of what is observed (angles in mas, velocities in km/s):

* companion k relative to the central body: r_k(t), v_k(t) from its elements,
  computed by :func:`orbitmass.core.orbit.evaluate` with the space's model terms;
* central body about the barycentre: -sum_j f_j r_j, f_j = q_j / (1 + q_j)
  over companions with a sampled mass ratio (test particles have q = 0);
* relative frame: positions are r_k; absolute frame: barycentre position
  (x0, y0) + proper motion (vx0, vy0) * (t - t_ref) + central body + r_k;
* velocity of a companion row: base + v_k - sum_j f_j v_j + offset(instrument);
  of a central-body row: base - sum_j f_j v_j + offset(instrument);
  base = ``systemic`` (relative frame) or ``vz0`` (absolute frame).

The data of every companion are held in public blocks
(:class:`AstrometryBlock`, :class:`VelocityBlock`; :func:`data_blocks` builds
them) that the initial search reads too.
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np
from numpy.typing import NDArray

from orbitmass.core.orbit import OrbitState, evaluate, thiele_innes
from orbitmass.core.physics import semimajor_axis_au
from orbitmass.model.parameters import ParameterSpace

__all__ = ["LogPosterior", "AstrometryBlock", "VelocityBlock", "data_blocks", "orbit_states", "predict_system"]

LOG_2PI = math.log(2.0 * math.pi)


class AstrometryBlock:
    """The astrometry of one companion, precomputed for the likelihood.

    Attributes
    ----------
    t : epochs (Julian yr); ``polar``: rows given as separation/position angle;
    v1, v2 : the measured values (east, north in mas; or rho in mas, theta in deg);
    w11, w22, w12 : coefficients of the row's chi^2 (inverse covariance, the
        cross term doubled); ``const``: the Gaussian normalisation of all rows.
    """

    def __init__(self, astro):
        self.t = np.asarray(astro.t_yr, dtype=float)
        self.polar = np.asarray(astro.polar, dtype=bool)
        self.any_polar = bool(self.polar.any())
        self.v1 = np.asarray(astro.value1, dtype=float)
        self.v2 = np.asarray(astro.value2, dtype=float)
        s1 = np.asarray(astro.err1, dtype=float)
        s2 = np.asarray(astro.err2, dtype=float)
        rho = np.asarray(astro.corr, dtype=float)
        one_m = 1.0 - rho * rho
        self.w11 = 1.0 / (s1 * s1 * one_m)
        self.w22 = 1.0 / (s2 * s2 * one_m)
        self.w12 = -2.0 * rho / (s1 * s2 * one_m)
        self.const = float(-np.sum(LOG_2PI + np.log(s1 * s2) + 0.5 * np.log(one_m)))

    def east_north(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """East and north offsets (mas) of every row, polar rows converted."""
        east = np.where(self.polar, self.v1 * np.sin(np.deg2rad(self.v2)), self.v1)
        north = np.where(self.polar, self.v1 * np.cos(np.deg2rad(self.v2)), self.v2)
        return east, north

    def diagonal_weights(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Approximate inverse variances of east and north (correlation ignored; for searches only)."""
        s1 = 1.0 / np.sqrt(self.w11)
        s2 = 1.0 / np.sqrt(self.w22)
        sig_pol = np.sqrt(s1 * s1 + (np.deg2rad(s2) * self.v1) ** 2)
        se = np.where(self.polar, sig_pol, s1)
        sn = np.where(self.polar, sig_pol, s2)
        return 1.0 / se**2, 1.0 / sn**2

    def log_likelihood(self, east, north) -> NDArray[np.float64]:
        """Gaussian log-likelihood of model positions (n_sets, n_rows) -> (n_sets,)."""
        if self.any_polar:
            rho = np.hypot(east, north)
            theta_deg = np.degrees(np.arctan2(east, north))
            r1 = np.where(self.polar, self.v1 - rho, self.v1 - east)
            dth = np.mod(self.v2 - theta_deg + 180.0, 360.0) - 180.0
            r2 = np.where(self.polar, dth, self.v2 - north)
        else:
            r1 = self.v1 - east
            r2 = self.v2 - north
        chi2 = (self.w11 * r1 * r1 + self.w12 * r1 * r2 + self.w22 * r2 * r2).sum(axis=1)
        return self.const - 0.5 * chi2


class VelocityBlock:
    """The line-of-sight velocities of one companion's table, precomputed.

    Attributes
    ----------
    t, rv, var : epochs (Julian yr), velocities (km/s), variances (km^2/s^2);
    central : rows measuring the central body; ``companion_rows`` the others;
    inst : index of every row's instrument in ``instrument_names``; ``used``
        the sorted indices that occur.
    """

    def __init__(self, vel, instrument_names):
        self.t = np.asarray(vel.t_yr, dtype=float)
        self.rv = np.asarray(vel.rv_kms, dtype=float)
        self.var = np.asarray(vel.rv_err_kms, dtype=float) ** 2
        self.central = np.asarray(vel.central, dtype=bool)
        self.companion_rows = ~self.central
        lookup = {n: i for i, n in enumerate(instrument_names)}
        self.inst = np.array([lookup[str(n)] for n in vel.instrument], dtype=int)
        self.used = sorted(set(self.inst.tolist()))

    def log_likelihood(self, model_rv, phys, instrument_names) -> NDArray[np.float64]:
        """Gaussian log-likelihood (variance sigma^2 + jitter^2) of model velocities (n_sets, n_rows).

        ``model_rv`` excludes the instrument offsets, which (like the jitter)
        are read from ``phys`` (``offset.<name>``, ``jitter.<name>``).
        """
        offsets = np.stack([phys[f"offset.{n}"] for n in instrument_names], axis=1)
        jitter = np.stack([phys[f"jitter.{n}"] for n in instrument_names], axis=1)
        resid = self.rv[None, :] - model_rv - offsets[:, self.inst]
        var = self.var[None, :] + jitter[:, self.inst] ** 2
        return -0.5 * np.sum(resid * resid / var + np.log(var) + LOG_2PI, axis=1)


def data_blocks(space: ParameterSpace) -> tuple[dict[str, AstrometryBlock], dict[str, VelocityBlock]]:
    """The astrometry and velocity blocks of every companion of ``space.target`` that has such rows."""
    astro: dict[str, AstrometryBlock] = {}
    vel: dict[str, VelocityBlock] = {}
    for comp in space.target.companions:
        if comp.astrometry is not None and len(comp.astrometry):
            astro[comp.name] = AstrometryBlock(comp.astrometry)
        if comp.velocities is not None and len(comp.velocities):
            vel[comp.name] = VelocityBlock(comp.velocities, space.instrument_names)
    return astro, vel


def orbit_states(space: ParameterSpace, phys: Mapping[str, NDArray[np.float64]]) -> dict[str, OrbitState]:
    """The :class:`~orbitmass.core.orbit.OrbitState` of every companion for unpacked quantities ``phys``.

    Element arrays have shape (n_sets, 1); Thiele-Innes constants ``(A, B, F,
    G)`` in mas and ``(C, H)`` in au.
    """
    states = {}
    mass = phys["mass_msun"]
    dist = phys["distance_pc"]
    for comp in space.target.companions:
        name = comp.name
        a_au = semimajor_axis_au(mass, phys[f"{name}.period_yr"])
        a_mas = a_au / dist * 1000.0
        omega = phys[f"{name}.omega"]
        node = phys[f"{name}.node"]
        A, B, F, G, C, H = thiele_innes(1.0, phys[f"{name}.cos_i"], phys[f"{name}.sin_i"], np.cos(omega),
                                        np.sin(omega), np.cos(node), np.sin(node))
        am = a_mas[:, None]
        aa = a_au[:, None]
        states[name] = OrbitState(
            period_rest_yr=phys[f"{name}.period_yr"][:, None],
            period_obs_yr=phys[f"{name}.period_obs_yr"][:, None],
            ecc=phys[f"{name}.ecc"][:, None],
            mean_anomaly_ref=phys[f"{name}.m0"][:, None],
            t_ref_yr=space.t_ref,
            ti_mas=(am * A[:, None], am * B[:, None], am * F[:, None], am * G[:, None]),
            ch_au=(aa * C[:, None], aa * H[:, None]),
            mass_msun=mass[:, None], a_au=aa, distance_pc=dist[:, None])
    return states


def predict_system(space: ParameterSpace, phys, name, *, t_astro=None, t_vel=None, central_rows=None,
                   states=None):
    """Model positions and velocities of companion ``name``'s system.

    Parameters
    ----------
    space : ParameterSpace
        Frame, mass ratios and model terms of the fit.
    phys : dict
        Unpacked quantities (:meth:`ParameterSpace.unpack`), arrays (n_sets,).
    name : str
        Companion.
    t_astro, t_vel : ndarray, optional
        Epochs (Julian yr), shape (n_epochs,) or (n_sets, n_epochs).
    central_rows : ndarray of bool, optional
        Which ``t_vel`` rows measure the central body (default none).
    states : dict, optional
        :func:`orbit_states` of ``phys`` (computed when not given).

    Returns
    -------
    dict
        ``east_mas``, ``north_mas`` at ``t_astro`` in the frame of the data
        (relative or absolute) and ``rv_kms`` at ``t_vel`` (no instrument
        offsets, systemic / vz0 included), each (n_sets, n_epochs).
    """
    if states is None:
        states = orbit_states(space, phys)
    terms = space.terms
    extra = space.term_values(phys)
    absolute = space.target.frame == "absolute"
    reflex = [lay.name for lay in space.companions if lay.has_q]
    out = {}
    ta = None if t_astro is None else np.asarray(t_astro, dtype=float)
    tv = None if t_vel is None else np.asarray(t_vel, dtype=float)
    n_a = 0 if ta is None else ta.shape[-1]
    n_v = 0 if tv is None else tv.shape[-1]
    if n_a and n_v and ta.ndim == tv.ndim == 1:  # one Kepler solve for both kinds of epoch
        both = evaluate(states[name], np.concatenate([ta, tv]), terms=terms, extra=extra)
        own_a = {k: both[k][:, :n_a] for k in ("east_mas", "north_mas")}
        own_v = both["vz_kms"][:, n_a:]
    else:
        own_a = evaluate(states[name], ta, velocities=False, terms=terms, extra=extra) if n_a else None
        own_v = evaluate(states[name], tv, positions=False, terms=terms, extra=extra)["vz_kms"] if n_v \
            else None
    if n_a:
        east, north = own_a["east_mas"], own_a["north_mas"]
        if absolute:
            dt = ta - space.t_ref
            east = east + phys["x0"][:, None] + phys["vx0"][:, None] * dt
            north = north + phys["y0"][:, None] + phys["vy0"][:, None] * dt
            for j in reflex:
                f = (phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"]))[:, None]
                rj = own_a if j == name else evaluate(states[j], ta, velocities=False, terms=terms,
                                                      extra=extra)
                east = east - f * rj["east_mas"]
                north = north - f * rj["north_mas"]
        out["east_mas"], out["north_mas"] = east, north
    if n_v:
        comp_mask = np.ones(n_v, bool) if central_rows is None else ~np.asarray(central_rows, bool)
        v = own_v * comp_mask
        for j in reflex:
            f = (phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"]))[:, None]
            vj = own_v if j == name else evaluate(states[j], tv, positions=False, terms=terms,
                                                  extra=extra)["vz_kms"]
            v = v - f * vj
        base = phys["vz0"] if absolute else phys["systemic"]
        out["rv_kms"] = v + base[:, None]
    return out


class LogPosterior:
    """Callable log-posterior for emcee with ``vectorize=True``.

    Parameters
    ----------
    space : ParameterSpace
        Layout of the sampled vector; its model terms (``space.terms``) enter
        every orbit.

    Attributes
    ----------
    astrometry, velocities : dict
        :class:`AstrometryBlock` / :class:`VelocityBlock` per companion name.

    Notes
    -----
    ``n_sets`` counts parameter sets evaluated (likelihood evaluations);
    instances pickle, so they can go to worker processes.
    """

    def __init__(self, space: ParameterSpace, *, blocks=None):
        self.space = space
        self.t_ref = space.t_ref
        self.absolute = space.target.frame == "absolute"
        self.astrometry, self.velocities = data_blocks(space) if blocks is None else blocks
        self.reflex = [lay.name for lay in space.companions if lay.has_q]
        self.companion_names = [c.name for c in space.target.companions]
        self.n_sets = 0

    @property
    def astro(self) -> dict[str, AstrometryBlock]:
        """Alias of :attr:`astrometry` (the former attribute name)."""
        return self.astrometry

    @property
    def vel(self) -> dict[str, VelocityBlock]:
        """Alias of :attr:`velocities` (the former attribute name)."""
        return self.velocities

    def with_space(self, space: ParameterSpace) -> LogPosterior:
        """A posterior of the same data for another space of the same target (e.g. other angle windows)."""
        return LogPosterior(space, blocks=(self.astrometry, self.velocities))

    def __call__(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        theta = np.atleast_2d(theta)
        lp = self.space.log_prior(theta)
        ok = np.isfinite(lp)
        if ok.any():
            lp[ok] += self.log_likelihood(theta[ok])
        lp[~np.isfinite(lp)] = -np.inf
        return lp

    # ---------------------------------------------------------------- orbits
    def predict(self, phys, name, t_astro=None, t_vel=None, central_rows=None, states=None):
        """Model positions and velocities of companion ``name``'s system (see :func:`predict_system`)."""
        return predict_system(self.space, phys, name, t_astro=t_astro, t_vel=t_vel, central_rows=central_rows,
                              states=states)

    # ------------------------------------------------------------ likelihood
    def log_likelihood(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """Log-likelihood of every row of ``theta`` (n_sets, n_dim) -> (n_sets,)."""
        theta = np.atleast_2d(theta)
        n = theta.shape[0]
        self.n_sets += n
        phys = self.space.unpack(theta)
        ll = np.zeros(n)
        states = orbit_states(self.space, phys)
        for name in self.companion_names:
            ab = self.astrometry.get(name)
            vb = self.velocities.get(name)
            if ab is None and vb is None:
                continue
            pred = self.predict(phys, name,
                                t_astro=None if ab is None else ab.t,
                                t_vel=None if vb is None else vb.t,
                                central_rows=None if vb is None else vb.central,
                                states=states)
            if ab is not None:
                ll += ab.log_likelihood(pred["east_mas"], pred["north_mas"])
            if vb is not None:
                ll += vb.log_likelihood(pred["rv_kms"], phys, self.space.instrument_names)
        return ll

