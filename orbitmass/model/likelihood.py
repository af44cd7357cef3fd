"""Data + model -> log-likelihood and log-posterior, vectorised over parameter sets.

The astrometric likelihood is Gaussian per epoch with the row's 2x2 error
covariance, evaluated in the form the row was measured in (east/north, or
separation/position angle with the angle residual wrapped to +-180 deg). The
velocity likelihood is Gaussian with variance sigma^2 + jitter^2 of the row's
instrument, normalisation included so jitter is constrained.

Model of what is observed (angles in mas, velocities in km/s):

* companion k relative to the central body: r_k(t), v_k(t) from its elements;
* central body about the barycentre: -sum_j f_j r_j, f_j = q_j / (1 + q_j)
  over companions with a sampled mass ratio (test particles have q = 0);
* relative frame: positions are r_k; absolute frame: barycentre position
  (x0, y0) + proper motion (vx0, vy0) * (t - t_ref) + central body + r_k;
* velocity of a companion row: base + v_k - sum_j f_j v_j + offset(instrument);
  of a central-body row: base - sum_j f_j v_j + offset(instrument);
  base = ``systemic`` (relative frame) or ``vz0`` (absolute frame).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from orbitmass.core.kepler import kepler_cos_sin
from orbitmass.core.orbit import thiele_innes
from orbitmass.core.physics import semimajor_axis_au
from orbitmass.model.parameters import ParameterSpace
from orbitmass.units import KMS_PER_AU_PER_YR

__all__ = ["LogPosterior"]

TWO_PI = 2.0 * math.pi
LOG_2PI = math.log(2.0 * math.pi)


class _AstroBlock:
    """Precomputed astrometry of one companion."""

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


class _VelBlock:
    """Precomputed velocities of one companion's table."""

    def __init__(self, vel, instrument_names):
        self.t = np.asarray(vel.t_yr, dtype=float)
        self.rv = np.asarray(vel.rv_kms, dtype=float)
        self.var = np.asarray(vel.rv_err_kms, dtype=float) ** 2
        self.central = np.asarray(vel.central, dtype=bool)
        self.companion_rows = ~self.central
        lookup = {n: i for i, n in enumerate(instrument_names)}
        self.inst = np.array([lookup[str(n)] for n in vel.instrument], dtype=int)
        self.used = sorted(set(self.inst.tolist()))


class LogPosterior:
    """Callable log-posterior for emcee with ``vectorize=True``.

    Parameters
    ----------
    space : ParameterSpace
        Layout of the sampled vector.

    Notes
    -----
    ``n_sets`` counts parameter sets evaluated (likelihood evaluations);
    instances pickle, so they can go to worker processes.
    """

    def __init__(self, space: ParameterSpace):
        self.space = space
        self.t_ref = space.t_ref
        self.absolute = space.target.frame == "absolute"
        self.astro: dict[str, _AstroBlock] = {}
        self.vel: dict[str, _VelBlock] = {}
        for comp in space.target.companions:
            if comp.astrometry is not None and len(comp.astrometry):
                self.astro[comp.name] = _AstroBlock(comp.astrometry)
            if comp.velocities is not None and len(comp.velocities):
                self.vel[comp.name] = _VelBlock(comp.velocities, space.instrument_names)
        self.reflex = [lay.name for lay in space.companions if lay.has_q]
        self.n_sets = 0

    def __call__(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        theta = np.atleast_2d(theta)
        lp = self.space.log_prior(theta)
        ok = np.isfinite(lp)
        if ok.any():
            lp[ok] += self.log_likelihood(theta[ok])
        lp[~np.isfinite(lp)] = -np.inf
        return lp

    # ---------------------------------------------------------------- orbits
    def _orbit_parts(self, phys, name):
        """Per-companion cached quantities for evaluating its relative orbit."""
        space = self.space
        period = phys[f"{name}.period_yr"][:, None]
        period_obs = phys[f"{name}.period_obs_yr"][:, None]
        ecc = phys[f"{name}.ecc"][:, None]
        a_au = semimajor_axis_au(phys["mass_msun"], phys[f"{name}.period_yr"])
        a_mas = a_au / phys["distance_pc"] * 1000.0
        omega = phys[f"{name}.omega"]
        node = phys[f"{name}.node"]
        cos_i = phys[f"{name}.cos_i"]
        sin_i = phys[f"{name}.sin_i"]
        cw, sw, cW, sW = np.cos(omega), np.sin(omega), np.cos(node), np.sin(node)
        A, B, F, G, C, H = thiele_innes(1.0, cos_i, sin_i, cw, sw, cW, sW)
        am = a_mas[:, None]
        aa = a_au[:, None]
        return {
            "period": period,
            "period_obs": period_obs,
            "ecc": ecc,
            "root": np.sqrt(1.0 - ecc * ecc),
            "m0": phys[f"{name}.m0"][:, None],
            "ti": (am * A[:, None], am * B[:, None], am * F[:, None], am * G[:, None]),
            "ch": (aa * C[:, None], aa * H[:, None]),
            "t_ref": space.t_ref,
        }

    @staticmethod
    def _anomaly(parts, t):
        mean_anom = parts["m0"] + (TWO_PI / parts["period_obs"]) * (t[None, :] - parts["t_ref"])
        return kepler_cos_sin(mean_anom, parts["ecc"])

    @staticmethod
    def _positions(parts, cos_E, sin_E):
        A, B, F, G = parts["ti"]
        X = cos_E - parts["ecc"]
        Y = parts["root"] * sin_E
        return B * X + G * Y, A * X + F * Y  # east, north

    @staticmethod
    def _velocity(parts, cos_E, sin_E):
        C, H = parts["ch"]
        rate = (TWO_PI * KMS_PER_AU_PER_YR / parts["period"]) / (1.0 - parts["ecc"] * cos_E)
        return rate * (H * parts["root"] * cos_E - C * sin_E)

    def predict(self, phys, name, t_astro=None, t_vel=None, central_rows=None, all_parts=None):
        """Model positions and velocities of companion ``name``'s system.

        Returns east/north (mas) at ``t_astro`` in the frame of the data
        (relative or absolute), and the modelled velocity (km/s, without
        instrument offsets, with systemic/vz0) at ``t_vel`` for companion rows
        and central-body rows as ``central_rows`` says. ``all_parts`` caches
        :meth:`_orbit_parts` of every companion across calls.
        """
        if all_parts is None:
            all_parts = {c: self._orbit_parts(phys, c) for c in phys["_companions"]}
        parts = all_parts[name]
        out = {}
        n_a = 0 if t_astro is None else len(t_astro)
        n_v = 0 if t_vel is None else len(t_vel)
        if n_a and n_v:  # one Kepler solve for both kinds of epoch
            cE_all, sE_all = self._anomaly(parts, np.concatenate([t_astro, t_vel]))
        elif n_a or n_v:
            cE_all, sE_all = self._anomaly(parts, t_astro if n_a else t_vel)
        if n_a:
            cE, sE = cE_all[:, :n_a], sE_all[:, :n_a]
            east, north = self._positions(parts, cE, sE)
            if self.absolute:
                dt = (t_astro - self.t_ref)[None, :]
                east = east + phys["x0"][:, None] + phys["vx0"][:, None] * dt
                north = north + phys["y0"][:, None] + phys["vy0"][:, None] * dt
                for j in self.reflex:
                    f = (phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"]))[:, None]
                    cj, sj = self._anomaly(all_parts[j], t_astro)
                    ej, nj = self._positions(all_parts[j], cj, sj)
                    east = east - f * ej
                    north = north - f * nj
            out["east_mas"], out["north_mas"] = east, north
        if n_v:
            cE, sE = cE_all[:, n_a:], sE_all[:, n_a:]
            v_rel = self._velocity(parts, cE, sE)
            comp_mask = np.ones(len(t_vel), bool) if central_rows is None else ~np.asarray(central_rows)
            v = v_rel * comp_mask[None, :]
            for j in self.reflex:
                f = (phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"]))[:, None]
                if j == name:
                    vj = v_rel
                else:
                    cj, sj = self._anomaly(all_parts[j], t_vel)
                    vj = self._velocity(all_parts[j], cj, sj)
                v = v - f * vj
            base = phys["vz0"] if self.absolute else phys["systemic"]
            out["rv_kms"] = v + base[:, None]
        return out

    # ------------------------------------------------------------ likelihood
    def log_likelihood(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """Log-likelihood of every row of ``theta`` (n_sets, n_dim) -> (n_sets,)."""
        theta = np.atleast_2d(theta)
        n = theta.shape[0]
        self.n_sets += n
        phys = self.space.unpack(theta)
        phys["_companions"] = [c.name for c in self.space.target.companions]
        ll = np.zeros(n)
        all_parts = {c: self._orbit_parts(phys, c) for c in phys["_companions"]}
        for comp in self.space.target.companions:
            name = comp.name
            ab = self.astro.get(name)
            vb = self.vel.get(name)
            pred = self.predict(phys, name,
                                t_astro=None if ab is None else ab.t,
                                t_vel=None if vb is None else vb.t,
                                central_rows=None if vb is None else vb.central,
                                all_parts=all_parts)
            if ab is not None:
                ll += self._astro_ll(ab, pred["east_mas"], pred["north_mas"])
            if vb is not None:
                ll += self._vel_ll(vb, pred["rv_kms"], phys)
        return ll

    @staticmethod
    def _astro_ll(ab: _AstroBlock, east, north):
        if ab.any_polar:
            rho = np.hypot(east, north)
            theta_deg = np.degrees(np.arctan2(east, north))
            r1 = np.where(ab.polar, ab.v1 - rho, ab.v1 - east)
            dth = np.mod(ab.v2 - theta_deg + 180.0, 360.0) - 180.0
            r2 = np.where(ab.polar, dth, ab.v2 - north)
        else:
            r1 = ab.v1 - east
            r2 = ab.v2 - north
        chi2 = (ab.w11 * r1 * r1 + ab.w12 * r1 * r2 + ab.w22 * r2 * r2).sum(axis=1)
        return ab.const - 0.5 * chi2

    def _vel_ll(self, vb: _VelBlock, model_rv, phys):
        names = self.space.instrument_names
        offsets = np.stack([phys[f"offset.{names[i]}"] for i in range(len(names))], axis=1)
        jitter = np.stack([phys[f"jitter.{names[i]}"] for i in range(len(names))], axis=1)
        resid = vb.rv[None, :] - model_rv - offsets[:, vb.inst]
        var = vb.var[None, :] + jitter[:, vb.inst] ** 2
        return -0.5 * np.sum(resid * resid / var + np.log(var) + LOG_2PI, axis=1)
