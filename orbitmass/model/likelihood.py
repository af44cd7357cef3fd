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

Two evaluation paths
--------------------
:meth:`LogPosterior.log_likelihood_reference` is the plain path: every orbit
through :func:`~orbitmass.core.orbit.evaluate` and :func:`predict_system`,
the same code predictions and figures use. It is the reference, and it is
what runs when a model term of the space lacks the fused form of one of its
hooks (:meth:`orbitmass.core.orbit.FusedOrbit.supports`), or when a fused
form declines for the parameter sets of a call (the Roemer delay's folded
Kepler equation for an eccentricity within ~v/c of 1).

Otherwise :meth:`LogPosterior.log_likelihood` takes the fused path
(:class:`_FusedPlan`): the same model, with each companion's orbit evaluated
by :class:`~orbitmass.core.orbit.FusedOrbit` (the Keplerian formulas and the
terms of :mod:`orbitmass.core.relativity` written out in place) so that its
Kepler equation is solved once on the union of all epochs where its orbit is
needed (positions and velocities taken at the same epoch share one solve),
positions, velocities and residuals are computed in place in work arrays kept
between calls (one set per block size; they are dropped when the posterior is
pickled and are never returned), and the weighted sums of squares are
matrix-vector products. Constant parts (the normalisation of rows whose
jitter is fixed, their inverse variances) are computed once. The two paths
agree to round-off (``tests/model/test_likelihood_fast.py``: 1e-12 relative
without terms; ``tests/model/test_likelihood_terms_fused.py``: 1e-10 with
every combination of terms).
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np
from numpy.typing import NDArray

from orbitmass.core.orbit import FusedOrbit, OrbitState, evaluate, thiele_innes
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
    # positions and velocities at the same epochs (a model curve): one Kepler solve per companion
    same = n_a > 0 and ta.shape == getattr(tv, "shape", None) and np.array_equal(ta, tv)
    others = {j: evaluate(states[j], ta, positions=absolute, terms=terms, extra=extra)
              for j in reflex if j != name} if same else {}
    if same:
        own_a = evaluate(states[name], ta, terms=terms, extra=extra)
        own_v = own_a["vz_kms"]
    elif n_a and n_v and ta.ndim == tv.ndim == 1:  # one Kepler solve for both kinds of epoch
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
                rj = own_a if j == name else others.get(j) or evaluate(states[j], ta, velocities=False,
                                                                        terms=terms, extra=extra)
                east = east - f * rj["east_mas"]
                north = north - f * rj["north_mas"]
        out["east_mas"], out["north_mas"] = east, north
    if n_v:
        comp_mask = np.ones(n_v, bool) if central_rows is None else ~np.asarray(central_rows, bool)
        v = own_v * comp_mask
        for j in reflex:
            f = (phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"]))[:, None]
            vj = own_v if j == name else (others.get(j) or evaluate(states[j], tv, positions=False, terms=terms,
                                                                    extra=extra))["vz_kms"]
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
    blocks : tuple, optional
        ``(astrometry, velocities)`` blocks to reuse (see :meth:`with_space`).
    fused : bool
        Use the fused path when every model term of the space has its fused
        forms (default); False always takes :meth:`log_likelihood_reference`.

    Attributes
    ----------
    astrometry, velocities : dict
        :class:`AstrometryBlock` / :class:`VelocityBlock` per companion name.

    Notes
    -----
    ``n_sets`` counts parameter sets evaluated (likelihood evaluations);
    instances pickle, so they can go to worker processes (the fused path's
    work arrays are not pickled; a copy makes its own). One instance must not
    be called from several threads at once (the work arrays are shared).
    """

    def __init__(self, space: ParameterSpace, *, blocks=None, fused: bool = True):
        self.space = space
        self.t_ref = space.t_ref
        self.absolute = space.target.frame == "absolute"
        self.astrometry, self.velocities = data_blocks(space) if blocks is None else blocks
        self.reflex = [lay.name for lay in space.companions if lay.has_q]
        self.companion_names = [c.name for c in space.target.companions]
        self.n_sets = 0
        self.fused = bool(fused) and FusedOrbit.supports(space.terms)
        self._plan = _FusedPlan(self) if self.fused else None

    def __getstate__(self):
        state = self.__dict__.copy()
        if state.get("_plan") is not None:
            state["_plan"] = state["_plan"].without_work()
        return state

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
        return LogPosterior(space, blocks=(self.astrometry, self.velocities), fused=self.fused)

    def __call__(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        theta = np.atleast_2d(theta)
        lp = self.space.log_prior(theta)
        ok = np.isfinite(lp)
        if ok.all():
            lp += self.log_likelihood(theta)
        elif ok.any():
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
        """Log-likelihood of every row of ``theta`` (n_sets, n_dim) -> (n_sets,).

        The fused path when the space's model terms allow it, else
        :meth:`log_likelihood_reference` (module docstring).
        """
        if self._plan is None:
            return self.log_likelihood_reference(theta)
        theta = np.atleast_2d(theta)
        phys = self.space.unpack(theta)
        ll = self._plan.evaluate(phys, self.space.term_values(phys))
        if ll is None:
            return self.log_likelihood_reference(theta)
        self.n_sets += theta.shape[0]
        return ll

    def log_likelihood_reference(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """Log-likelihood by the plain path (:func:`predict_system`), the reference of the fused one."""
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



class _FusedPlan:
    """Index maps and constants of the fused likelihood path, built once per posterior.

    For every companion ``j`` whose orbit is needed somewhere: the union
    ``t`` of the epochs where it is needed (its own rows, and, when it pulls
    the central body, the rows of the other companions that see the reflex
    motion), and for every data block the columns of that union it reads
    (``None`` when the block's epochs are the union itself, in order).
    """

    def __init__(self, post: LogPosterior):
        space = post.space
        self.absolute = post.absolute
        self.t_ref = space.t_ref
        self.reflex = list(post.reflex)
        self.instrument_names = list(space.instrument_names)
        need: dict[str, list[NDArray[np.float64]]] = {}
        need_vel: dict[str, bool] = {}
        self.astro = []  # (block, [(j, idx)], n_rows)
        self.vel = []
        for name in post.companion_names:
            ab = post.astrometry.get(name)
            vb = post.velocities.get(name)
            if ab is not None:
                users = [name] + ([j for j in self.reflex if j != name] if self.absolute else [])
                for j in users:
                    need.setdefault(j, []).append(ab.t)
                self.astro.append((name, ab, users))
            if vb is not None:
                users = [name] + [j for j in self.reflex if j != name]
                for j in users:
                    need.setdefault(j, []).append(vb.t)
                    need_vel[j] = True
                self.vel.append((name, vb, users))
        self.union = {j: np.unique(np.concatenate(ts)) for j, ts in need.items()}
        self.dt = {j: t - self.t_ref for j, t in self.union.items()}
        self.need_vel = {j: need_vel.get(j, False) for j in self.union}
        self.kernels = {j: FusedOrbit(self.dt[j], space.terms, velocities=self.need_vel[j]) for j in self.union}

        def columns(j, t):
            u = self.union[j]
            if u.size == t.size and np.array_equal(u, t):
                return None
            return np.searchsorted(u, t)

        self.astro = [(name, ab, [(j, columns(j, ab.t)) for j in users], ab.t - self.t_ref,
                       bool(np.all(ab.w12 == 0.0)) and not ab.any_polar)
                      for name, ab, users in self.astro]
        vel = []
        for name, vb, users in self.vel:
            inst_names = [self.instrument_names[i] for i in vb.used]
            fixed_jitter = all(space.jitter_idx[n] is None for n in inst_names)
            info = {"single": len(vb.used) == 1, "fixed_jitter": fixed_jitter,
                    "any_central": bool(vb.central.any())}
            if fixed_jitter:
                jit = np.array([float(space.target.instruments[n].jitter.value) for n in self.instrument_names])
                var = vb.var + jit[vb.inst] ** 2
                info["inv_var"] = 1.0 / var
                info["const"] = float(-0.5 * np.sum(np.log(var) + LOG_2PI))
            vel.append((name, vb, [(j, columns(j, vb.t)) for j in users], info))
        self.vel = vel
        self._work: dict = {}

    def without_work(self) -> _FusedPlan:
        """A copy without the work arrays (for pickling)."""
        new = object.__new__(_FusedPlan)
        new.__dict__.update(self.__dict__)
        new._work = {}
        return new

    def _buffers(self, n: int) -> dict:
        work = self._work.get(n)
        if work is None:
            if len(self._work) > 8:
                self._work.clear()
            work = {}
            for j, kernel in self.kernels.items():
                work[j] = kernel.work(n)
            for k, (_, ab, _, _, _) in enumerate(self.astro):
                work[("a", k)] = [np.empty((n, ab.t.size)) for _ in range(5)]
            for k, (_, vb, _, _) in enumerate(self.vel):
                work[("v", k)] = [np.empty((n, vb.t.size)) for _ in range(3)]
            self._work[n] = work
        return work

    def evaluate(self, phys: Mapping[str, NDArray[np.float64]], extra: Mapping[str, NDArray[np.float64]]
                 ) -> NDArray[np.float64] | None:
        """Log-likelihood of unpacked quantities ``phys`` (arrays of shape (n_sets,)), ``extra`` the term values.

        None when a model term's fused form declines for these parameter sets
        (the caller then takes the reference path).
        """
        n = phys["mass_msun"].shape[0]
        work = self._buffers(n)
        mass = phys["mass_msun"]
        dist = phys["distance_pc"]
        orbit = {}
        for j, kernel in self.kernels.items():
            period = phys[f"{j}.period_yr"]
            a_au = semimajor_axis_au(mass, period)
            omega = phys[f"{j}.omega"]
            node = phys[f"{j}.node"]
            ti = thiele_innes(1.0, phys[f"{j}.cos_i"], phys[f"{j}.sin_i"], np.cos(omega), np.sin(omega),
                              np.cos(node), np.sin(node))
            state = OrbitState(period_rest_yr=period[:, None], period_obs_yr=phys[f"{j}.period_obs_yr"][:, None],
                               ecc=phys[f"{j}.ecc"][:, None], mean_anomaly_ref=phys[f"{j}.m0"][:, None],
                               t_ref_yr=self.t_ref, ch_au=((a_au * ti[4])[:, None], (a_au * ti[5])[:, None]),
                               mass_msun=mass[:, None], a_au=a_au[:, None], distance_pc=dist[:, None])
            res = kernel(state, extra, work[j])
            if res is None:  # a term's fused form declines for these sets
                return None
            orbit[j] = {"x": res[0], "y": res[1], "vz": res[2],
                        "ti_mas": [c * (a_au / dist * 1000.0) for c in ti[:4]]}
        ll = np.zeros(n)
        for k, (name, ab, users, dt, diagonal) in enumerate(self.astro):
            east, north, gx, gy, tmp = work[("a", k)]
            first = True
            for j, idx in users:
                o = orbit[j]
                A, B, F, G = o["ti_mas"]
                if j != name or (self.absolute and j in self.reflex):
                    f = phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"])
                    coef = -f if j != name else 1.0 - f
                    A, B, F, G = A * coef, B * coef, F * coef, G * coef
                x, y = o["x"], o["y"]
                if idx is not None:
                    x = np.take(x, idx, axis=1, out=gx)
                    y = np.take(y, idx, axis=1, out=gy)
                if first:
                    np.multiply(x, B[:, None], out=east)
                    np.multiply(x, A[:, None], out=north)
                else:
                    east += np.multiply(x, B[:, None], out=tmp)
                    north += np.multiply(x, A[:, None], out=tmp)
                east += np.multiply(y, G[:, None], out=tmp)
                north += np.multiply(y, F[:, None], out=tmp)
                first = False
            if self.absolute:
                east += phys["x0"][:, None]
                east += phys["vx0"][:, None] * dt
                north += phys["y0"][:, None]
                north += phys["vy0"][:, None] * dt
            if ab.any_polar:
                ll += ab.log_likelihood(east, north)
                continue
            np.subtract(ab.v1, east, out=east)
            np.subtract(ab.v2, north, out=north)
            if diagonal:
                chi2 = np.multiply(east, east, out=tmp) @ ab.w11
            else:
                chi2 = np.multiply(east, north, out=tmp) @ ab.w12
                chi2 += np.multiply(east, east, out=tmp) @ ab.w11
            chi2 += np.multiply(north, north, out=tmp) @ ab.w22
            ll += ab.const - 0.5 * chi2
        for k, (name, vb, users, info) in enumerate(self.vel):
            model, tmp, tmp2 = work[("v", k)]
            first = True
            for j, idx in users:
                u = orbit[j]["vz"]
                if idx is not None:
                    u = np.take(u, idx, axis=1, out=tmp2)
                if j != name:
                    f = (phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"]))[:, None]
                    np.multiply(u, f, out=tmp)
                    np.subtract(model, tmp, out=model)
                    continue
                # own orbit: companion rows see it, central rows do not; minus its own reflex pull
                if info["any_central"] or j in self.reflex:
                    weight = vb.companion_rows.astype(float)[None, :]
                    if j in self.reflex:
                        weight = weight - (phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"]))[:, None]
                    np.multiply(u, weight, out=model)
                else:
                    np.copyto(model, u)
                first = False
            if first:  # cannot happen: the own companion is always the first user
                model.fill(0.0)
            base = phys["vz0"] if self.absolute else phys["systemic"]
            if info["single"]:
                level = base + phys[f"offset.{self.instrument_names[vb.used[0]]}"]
                np.subtract(vb.rv, model, out=model)
                np.subtract(model, level[:, None], out=model)
            else:
                offsets = np.stack([phys[f"offset.{nm}"] for nm in self.instrument_names], axis=1)
                np.subtract(vb.rv, model, out=model)
                model -= offsets[:, vb.inst]
                model -= base[:, None]
            if info["fixed_jitter"]:
                ll += info["const"] - 0.5 * (np.multiply(model, model, out=tmp) @ info["inv_var"])
            else:
                jitter = np.stack([phys[f"jitter.{nm}"] for nm in self.instrument_names], axis=1)
                var = vb.var[None, :] + jitter[:, vb.inst] ** 2
                np.multiply(model, model, out=tmp)
                tmp /= var
                tmp += np.log(var)
                ll -= 0.5 * (tmp.sum(axis=1) + LOG_2PI * vb.t.size)
        return ll
