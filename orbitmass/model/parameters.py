"""The sampled parameter vector: layout, transforms, priors and unpacking.

A :class:`ParameterSpace` is built from a :class:`~orbitmass.model.data.Target`. It
decides which quantities are sampled and in which variable, evaluates the log
prior in the sampled variables (Jacobians included), and turns a block of
sampled vectors ``theta`` of shape ``(n_sets, n_dim)`` into physical
quantities (plain floats, internal units).

Sampled variables
-----------------
=========================  ===================================================
variable                   meaning (prior is always stated on the physical
                           quantity; the Jacobian of the transform is added)
=========================  ===================================================
``ln_mass``                ln of the total mass (Msun)
``ln_distance``            ln of the distance (pc), when a distance prior is given
``ln_parallax``            ln of the parallax (mas), when a parallax prior is given
``<C>.ln_period``          ln of the rest-frame period (yr)
``<C>.sqrte_cosw``,        sqrt(e) cos(omega), sqrt(e) sin(omega): uniform on the
``<C>.sqrte_sinw``         unit disc is uniform in e and omega (Jacobian 2)
``<C>.omega``              omega alone, when e is fixed and non-zero
``<P>.cos_i``              cos(inclination) of plane P (a companion's own plane by
                           default); isotropic = uniform in cos i
``<P>.node``               position angle of the ascending node Omega (rad)
``<C>.mean_longitude``     lambda = M0 + omega at the reference epoch (rad); better
                           defined than M0 for nearly circular orbits
``<C>.mass_ratio``         companion / central body mass, with central-body velocities
``offset.<inst>``          instrument zero point (km/s)
``jitter.<inst>``          extra RV scatter (km/s), or ``ln_jitter.<inst>`` for a
                           log-uniform prior
``x0``, ``y0``, ``vx0``,   absolute frame: barycentre position (mas) and proper
``vy0``, ``vz0``           motion (mas/yr) at the reference epoch, and its
                           line-of-sight velocity (km/s)
``systemic``               relative frame: barycentre velocity (km/s) if not fixed
=========================  ===================================================

Angles on the circle (``node``, ``mean_longitude``, ``omega``) are sampled on a
window of one full turn centred where the initialisation put them, so the
posterior is proper and has no wall at the mode. The windows are an explicit,
immutable :class:`AngleWindows` value: a space is built with them (default:
centred on 0) and never changes them; :meth:`ParameterSpace.windows_from`
computes windows centred on some draws and :meth:`ParameterSpace.with_windows`
returns a new space that uses them (the initial search does this, and a
:class:`~orbitmass.results.Results` holds the final space).

The module is longer than the 600-line guide: layout, priors, unpacking,
packing and windows of the one sampled vector belong together (each is the
inverse or the density of another).

Model terms (:mod:`orbitmass.core.orbit`) are carried as ``space.terms``; each
parameter a term declares is a sampled variable of that name (kind
``"linear"``, with the prior given in ``term_priors``) or fixed when its prior
is fixed, and :meth:`ParameterSpace.unpack` returns it under its own name. Without any line-of-sight
information on a plane, (omega, Omega) and (omega + 180 deg, Omega + 180 deg)
predict the same positions: the node window is then half a turn and the prior
density sums the two equivalent points.
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field, replace
from typing import Mapping, Sequence

import numpy as np
from numpy.typing import NDArray

from orbitmass.core.kepler import kepler_cos_sin
from orbitmass.core.physics import semimajor_axis_au
from orbitmass.exceptions import InputError
from orbitmass.model.data import Companion, Target
from orbitmass.model.priors import Isotropic, LogUniform, Prior, Uniform
from orbitmass.units import GM_SUN_AU3_PER_YR2, KMS_PER_AU_PER_YR

__all__ = ["Variable", "AngleWindows", "ParameterSpace", "priors_used", "ReferenceState", "StatePosterior"]

TWO_PI = 2.0 * math.pi
LN2 = math.log(2.0)


@dataclass(frozen=True)
class Variable:
    """One sampled variable (immutable).

    ``kind`` is ``"linear"`` (the physical quantity itself), ``"log"`` (its
    natural log), ``"angle"`` (an angle on a window ``[centre - width/2,
    centre + width/2)``), or ``"special"`` (handled by the space: the
    eccentricity vector and cos i).
    """

    name: str
    kind: str
    prior: Prior | None = None
    centre: float = 0.0
    width: float = TWO_PI
    label: str = ""


@dataclass(frozen=True)
class AngleWindows:
    """The sampling windows of the angle variables: name -> (centre, width) in rad.

    Immutable. Build one with :meth:`ParameterSpace.windows_from` (centred on
    draws), :meth:`from_mapping` (from a checkpoint or run folder) or take
    ``space.windows``.
    """

    items: tuple[tuple[str, float, float], ...] = ()

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Sequence[float]]) -> AngleWindows:
        """Windows from ``{name: [centre, width]}`` (the JSON form written to checkpoints and run folders)."""
        return cls(tuple((str(k), float(v[0]), float(v[1])) for k, v in mapping.items()))

    def as_dict(self) -> dict[str, list[float]]:
        """``{name: [centre, width]}`` (JSON-ready)."""
        return {name: [centre, width] for name, centre, width in self.items}

    def get(self, name: str) -> tuple[float, float] | None:
        """(centre, width) of variable ``name``, or None."""
        for n, centre, width in self.items:
            if n == name:
                return centre, width
        return None


@dataclass
class _CompanionLayout:
    name: str
    plane: str
    ecc_mode: str  # "vector", "fixed-circular", "fixed"
    ecc_fixed: float = 0.0
    phase_from_tp: bool = False
    tp_fixed: float | None = None
    has_q: bool = False
    idx: dict[str, int] = field(default_factory=dict)


class ParameterSpace:
    """Layout of the sampled vector for one target.

    Parameters
    ----------
    target : Target
        The validated target (data and priors).
    redshift_distance_pc : float or None
        Angular-diameter distance (pc) when the distance is fixed by a
        redshift alone.
    windows : AngleWindows or mapping, optional
        Centres (and widths) of the angle windows; default centred on 0. A
        space built with windows has final windows (:attr:`windows_final`).
    terms : sequence of model terms
        Model terms of :mod:`orbitmass.core.orbit` (empty: Keplerian orbits).
    term_priors : mapping, optional
        Prior of every parameter the terms declare (a fixed prior fixes it).
    """

    def __init__(self, target: Target, redshift_distance_pc: float | None = None, *,
                 windows: AngleWindows | Mapping | None = None, terms: Sequence = (),
                 term_priors: Mapping[str, Prior] | None = None):
        self.target = target
        self.terms = tuple(terms)
        self.t_ref = float(target.reference_epoch)
        z = target.distance.redshift
        self.one_plus_z = 1.0 + (float(z) if z is not None else 0.0)
        self.variables: list[Variable] = []
        self.index: dict[str, int] = {}
        self.fixed_distance_pc = redshift_distance_pc
        cp = target.central_priors

        self._add_positive("ln_mass", cp["mass"], "total mass")
        dist = target.distance
        if dist.parallax is not None:
            self.distance_mode = "parallax"
            self._add_positive("ln_parallax", dist.parallax, "parallax")
        elif dist.prior is not None:
            self.distance_mode = "distance"
            self._add_positive("ln_distance", dist.prior, "distance")
        elif redshift_distance_pc is not None:
            self.distance_mode = "fixed"
        else:
            raise InputError("no distance information: give [distance] prior, parallax or redshift",
                             file=target.source, key="distance")

        # planes: companions sharing a `plane` key share cos i and node
        self.planes: dict[str, dict] = {}
        for comp in target.companions:
            pname = comp.plane if comp.plane else f"{comp.name}"
            info = self.planes.setdefault(pname, {"members": [], "los": False})
            info["members"].append(comp.name)
            info["los"] = info["los"] or comp.has_velocities
        for pname, info in self.planes.items():
            first = next(c for c in target.companions if c.name == info["members"][0])
            inc = first.priors["inclination"]
            node = first.priors["ascending_node"]
            info["inc_prior"] = inc
            info["node_prior"] = node
            info["i_var"] = None if inc.fixed else self._add(Variable(f"{pname}.cos_i", "special", inc, label="cos i"))
            width = TWO_PI if info["los"] else math.pi
            info["node_var"] = None if node.fixed else self._add(
                Variable(f"{pname}.node", "angle", node, width=width, label="Omega"))

        self.companions: list[_CompanionLayout] = []
        for comp in target.companions:
            self.companions.append(self._layout_companion(comp))

        # instruments
        self.instrument_names = list(target.instruments)
        self.offset_idx: dict[str, int | None] = {}
        self.jitter_idx: dict[str, int | None] = {}
        for name, inst in target.instruments.items():
            self.offset_idx[name] = None if inst.offset.fixed else self._add(
                Variable(f"offset.{name}", "linear", inst.offset, label=f"offset {name}"))
            if inst.jitter.fixed:
                self.jitter_idx[name] = None
            elif isinstance(inst.jitter, LogUniform):
                self.jitter_idx[name] = self._add(Variable(f"ln_jitter.{name}", "log", inst.jitter,
                                                           label=f"jitter {name}"))
            else:
                self.jitter_idx[name] = self._add(Variable(f"jitter.{name}", "linear", inst.jitter,
                                                           label=f"jitter {name}"))
        self.frame_idx: dict[str, int | None] = {}
        keys = ("x0", "y0", "vx0", "vy0", "vz0") if target.frame == "absolute" else ("systemic",)
        for key in keys:
            pr = cp[key]
            self.frame_idx[key] = None if pr.fixed else self._add(Variable(key, "linear", pr, label=key))
        # parameters of the model terms
        term_priors = dict(term_priors or {})
        self.term_parameters: dict[str, Prior] = {}
        self.term_idx: dict[str, int | None] = {}
        for term in self.terms:
            for pname in term.parameters:
                if pname in self.term_parameters:
                    continue
                if pname not in term_priors:
                    raise InputError(f"model term {term.name!r} needs a prior for its parameter {pname!r}",
                                     file=target.source, key=pname)
                pr = term_priors[pname]
                self.term_parameters[pname] = pr
                self.term_idx[pname] = None if pr.fixed else self._add(Variable(pname, "linear", pr, label=pname))
        self.ndim = len(self.variables)
        self.names = [v.name for v in self.variables]
        self.windows_final = False
        if windows is not None:
            self._apply_windows(windows if isinstance(windows, AngleWindows) else AngleWindows.from_mapping(windows))
            self.windows_final = True

    # ------------------------------------------------------------------ layout
    def _add(self, var: Variable) -> int:
        if var.name in self.index:
            raise InputError(f"duplicate parameter {var.name!r} (companion names must be unique)",
                             file=self.target.source, key=var.name)
        self.index[var.name] = len(self.variables)
        self.variables.append(var)
        return self.index[var.name]

    def _add_positive(self, name: str, prior: Prior, label: str) -> int | None:
        if prior.fixed:
            return None
        return self._add(Variable(name, "log", prior, label=label))

    def _layout_companion(self, comp: Companion) -> _CompanionLayout:
        pr = comp.priors
        pname = comp.plane if comp.plane else comp.name
        ecc = pr["eccentricity"]
        if ecc.fixed and float(ecc.value) == 0.0:
            mode, e0 = "fixed-circular", 0.0
        elif ecc.fixed:
            mode, e0 = "fixed", float(ecc.value)
        else:
            mode, e0 = "vector", 0.0
        lay = _CompanionLayout(name=comp.name, plane=pname, ecc_mode=mode, ecc_fixed=e0)
        n = comp.name
        if pr["period"].fixed:
            lay.idx["ln_period"] = -1
        else:
            lay.idx["ln_period"] = self._add(Variable(f"{n}.ln_period", "log", pr["period"], label=f"P {n}"))
        if mode == "vector":
            lay.idx["h"] = self._add(Variable(f"{n}.sqrte_cosw", "special", ecc, label="sqrt(e) cos w"))
            lay.idx["k"] = self._add(Variable(f"{n}.sqrte_sinw", "special", ecc, label="sqrt(e) sin w"))
        elif mode == "fixed" and not pr["arg_periastron"].fixed:
            lay.idx["omega"] = self._add(Variable(f"{n}.omega", "angle", pr["arg_periastron"], label="omega"))
        if "periastron_time" in pr:
            lay.phase_from_tp = True
            tp = pr["periastron_time"]
            if tp.fixed:
                lay.tp_fixed = float(tp.value)
            else:
                lay.idx["lambda"] = self._add(Variable(f"{n}.mean_longitude", "angle", tp, label="lambda"))
        else:
            m0 = pr["mean_anomaly"]
            if m0.fixed:
                lay.idx["lambda"] = -1
            else:
                lay.idx["lambda"] = self._add(Variable(f"{n}.mean_longitude", "angle", m0, label="lambda"))
        if "mass_ratio" in pr:
            lay.has_q = True
            if not pr["mass_ratio"].fixed:
                lay.idx["q"] = self._add(Variable(f"{n}.mass_ratio", "linear", pr["mass_ratio"], label="q"))
        return lay

    def companion(self, name: str) -> Companion:
        """The data and priors of companion ``name``."""
        return next(c for c in self.target.companions if c.name == name)

    # --------------------------------------------------------------- unpacking
    def unpack(self, theta: NDArray[np.float64]) -> dict[str, NDArray[np.float64]]:
        """Physical quantities for a block of sampled vectors.

        Parameters
        ----------
        theta : ndarray, shape (n_sets, n_dim)

        Returns
        -------
        dict
            Arrays of shape (n_sets,): ``mass_msun``, ``distance_pc``, and per
            companion ``<C>.period_yr`` (rest frame), ``<C>.period_obs_yr``,
            ``<C>.ecc``, ``<C>.omega``, ``<C>.cos_i``, ``<C>.sin_i``,
            ``<C>.node``, ``<C>.m0`` (mean anomaly at the reference epoch),
            ``<C>.q``; ``offset.<inst>``, ``jitter.<inst>``, frame terms.
        """
        theta = np.atleast_2d(theta)
        n = theta.shape[0]
        cp = self.target.central_priors
        out: dict[str, NDArray[np.float64]] = {}

        def get(idx, prior, kind="linear"):
            if idx is None or idx == -1:
                return np.full(n, float(prior.value))
            col = theta[:, idx]
            return np.exp(col) if kind == "log" else col

        out["mass_msun"] = get(self.index.get("ln_mass"), cp["mass"], "log")
        if self.distance_mode == "parallax":
            plx = get(self.index.get("ln_parallax"), self.target.distance.parallax, "log")
            out["distance_pc"] = 1000.0 / plx
        elif self.distance_mode == "distance":
            out["distance_pc"] = get(self.index.get("ln_distance"), self.target.distance.prior, "log")
        else:
            out["distance_pc"] = np.full(n, float(self.fixed_distance_pc))

        for pname, info in self.planes.items():
            if info["i_var"] is None:
                inc = float(info["inc_prior"].value)
                cos_i = np.full(n, math.cos(inc))
            else:
                cos_i = theta[:, info["i_var"]]
            sin_i = np.sqrt(np.clip(1.0 - cos_i * cos_i, 0.0, None))
            node = get(info["node_var"], info["node_prior"])
            for member in info["members"]:
                out[f"{member}.cos_i"] = cos_i
                out[f"{member}.sin_i"] = sin_i
                out[f"{member}.node"] = node

        for lay in self.companions:
            comp = self.companion(lay.name)
            pr = comp.priors
            c = lay.name
            period = get(lay.idx["ln_period"], pr["period"], "log")
            out[f"{c}.period_yr"] = period
            out[f"{c}.period_obs_yr"] = period * self.one_plus_z
            if lay.ecc_mode == "vector":
                h = theta[:, lay.idx["h"]]
                k = theta[:, lay.idx["k"]]
                out[f"{c}.ecc"] = h * h + k * k
                out[f"{c}.omega"] = np.arctan2(k, h)
            else:
                out[f"{c}.ecc"] = np.full(n, lay.ecc_fixed)
                if lay.ecc_mode == "fixed-circular":
                    out[f"{c}.omega"] = np.zeros(n)
                else:
                    out[f"{c}.omega"] = get(lay.idx.get("omega"), pr["arg_periastron"])
            if lay.phase_from_tp and lay.tp_fixed is not None:
                m0 = TWO_PI * (self.t_ref - lay.tp_fixed) / out[f"{c}.period_obs_yr"]
            elif lay.idx["lambda"] == -1:
                m0 = np.full(n, float(pr["mean_anomaly"].value))
            else:
                m0 = theta[:, lay.idx["lambda"]] - out[f"{c}.omega"]
            out[f"{c}.m0"] = m0
            if lay.has_q:
                out[f"{c}.q"] = get(lay.idx.get("q"), pr["mass_ratio"])
            else:
                out[f"{c}.q"] = np.zeros(n)

        for name in self.instrument_names:
            inst = self.target.instruments[name]
            out[f"offset.{name}"] = get(self.offset_idx[name], inst.offset)
            jidx = self.jitter_idx[name]
            kind = "log" if (jidx is not None and self.variables[jidx].kind == "log") else "linear"
            out[f"jitter.{name}"] = get(jidx, inst.jitter, kind)
        for key, idx in self.frame_idx.items():
            out[key] = get(idx, cp[key])
        for pname, idx in self.term_idx.items():
            out[pname] = get(idx, self.term_parameters[pname])
        return out

    def term_values(self, phys: Mapping[str, NDArray[np.float64]]) -> dict[str, NDArray[np.float64]]:
        """The ``extra`` mapping of :func:`orbitmass.core.orbit.evaluate`: term parameters as (n_sets, 1)."""
        return {pname: np.asarray(phys[pname])[:, None] for pname in self.term_parameters}

    # ------------------------------------------------------------------ priors
    def log_prior(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """Log prior density in the sampled variables, shape (n_sets,).

        Includes the Jacobian of every transform, so that the physical
        quantities follow the stated priors exactly. Variables are grouped
        by prior family and evaluated in one numpy call per group
        (:class:`_PriorPlan`, built once per set of windows); the result
        agrees with :meth:`log_prior_reference` to round-off.
        """
        plan = self.__dict__.get("_prior_plan")
        if plan is None:
            plan = self._prior_plan = _PriorPlan(self)
        return plan(np.atleast_2d(theta))

    def log_prior_reference(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """Log prior density variable by variable (the plain reference of :meth:`log_prior`)."""
        theta = np.atleast_2d(theta)
        lp = np.zeros(theta.shape[0])
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            for var in self.variables:
                x = theta[:, self.index[var.name]]
                if var.kind == "log":
                    val = np.exp(x)
                    lp += var.prior.log_pdf(val) + x
                elif var.kind == "linear":
                    lp += var.prior.log_pdf(x)
                elif var.kind == "angle":
                    half = 0.5 * var.width
                    inside = (x >= var.centre - half) & (x < var.centre + half)
                    lp += np.where(inside, 0.0, -np.inf)
            for pname, info in self.planes.items():
                if info["i_var"] is not None:
                    c = theta[:, info["i_var"]]
                    inside = (c > -1.0) & (c < 1.0)
                    prior = info["inc_prior"]
                    if isinstance(prior, Isotropic):
                        lp += np.where(inside, -LN2, -np.inf)
                    else:
                        cc = np.clip(c, -1.0, 1.0)
                        inc = np.arccos(cc)
                        lp += np.where(inside, prior.log_pdf(inc) - np.log(np.sqrt(1 - cc * cc)), -np.inf)
                if info["node_var"] is not None:
                    node = theta[:, info["node_var"]]
                    lp += self._circular_log_pdf(info["node_prior"], node, info["los"], pname)
            for lay in self.companions:
                lp += self._companion_log_prior(lay, theta)
        lp[~np.isfinite(lp)] = -np.inf
        return lp

    @staticmethod
    def wrapped_log_pdf(prior: Prior, angle: NDArray[np.float64]) -> NDArray[np.float64]:
        """Log density of an angle prior given on [0, 2 pi) (or any range) at ``angle`` mod 2 pi."""
        if isinstance(prior, Uniform) and prior.high - prior.low >= TWO_PI - 1e-12:
            return np.full(angle.shape, -math.log(TWO_PI))
        low, _ = prior.support
        base = low if math.isfinite(low) else -math.pi
        wrapped = np.mod(angle - base, TWO_PI) + base
        return prior.log_pdf(wrapped)

    def _circular_log_pdf(self, prior: Prior, node, los: bool, pname: str):
        lp = self.wrapped_log_pdf(prior, node)
        if not los:
            # (omega, Omega) ~ (omega + pi, Omega + pi): sum the equivalent points
            lp = np.logaddexp(lp, self.wrapped_log_pdf(prior, node + math.pi))
        return lp

    def _companion_log_prior(self, lay: _CompanionLayout, theta):
        comp = self.companion(lay.name)
        pr = comp.priors
        n = theta.shape[0]
        lp = np.zeros(n)
        if lay.ecc_mode == "vector":
            h = theta[:, lay.idx["h"]]
            k = theta[:, lay.idx["k"]]
            e = h * h + k * k
            omega = np.arctan2(k, h)
            inside = e < 1.0
            lp += np.where(inside, pr["eccentricity"].log_pdf(e) + LN2, -np.inf)
            lp += self.wrapped_log_pdf(pr["arg_periastron"], omega)
        elif lay.ecc_mode == "fixed" and "omega" in lay.idx:
            lp += self.wrapped_log_pdf(pr["arg_periastron"], theta[:, lay.idx["omega"]])
        if lay.idx.get("lambda", -1) >= 0:
            lam = theta[:, lay.idx["lambda"]]
            m0 = lam - self._omega(lay, theta)
            if lay.phase_from_tp:
                period = np.exp(theta[:, lay.idx["ln_period"]]) if lay.idx["ln_period"] >= 0 \
                    else np.full(n, float(pr["period"].value))
                lp += self.periastron_time_log_pdf(pr["periastron_time"], m0, period * self.one_plus_z)
            else:
                lp += self.wrapped_log_pdf(pr["mean_anomaly"], m0)
        return lp

    def _omega(self, lay: _CompanionLayout, theta):
        n = theta.shape[0]
        if lay.ecc_mode == "vector":
            return np.arctan2(theta[:, lay.idx["k"]], theta[:, lay.idx["h"]])
        if "omega" in lay.idx:
            return theta[:, lay.idx["omega"]]
        if lay.ecc_mode == "fixed-circular":
            return np.zeros(n)
        return np.full(n, float(self.companion(lay.name).priors["arg_periastron"].value))

    def periastron_time_log_pdf(self, prior: Prior, m0, period_obs):
        """Density of M0 implied by a prior on the periastron time (periodic in P)."""
        t0 = self.t_ref - np.mod(m0, TWO_PI) / TWO_PI * period_obs
        low, high = prior.support
        if isinstance(prior, Uniform):
            count = np.floor((high - t0) / period_obs) - np.ceil((low - t0) / period_obs) + 1.0
            with np.errstate(divide="ignore"):
                return np.log(np.clip(count, 0.0, None)) - math.log(high - low) + np.log(period_obs / TWO_PI)
        mean = getattr(prior, "mean", 0.5 * (low + high))
        sd = getattr(prior, "sd", 0.25 * (high - low))
        k0 = np.round((mean - t0) / period_obs)
        span = int(min(50, math.ceil(8.0 * sd / max(float(np.min(period_obs)), 1e-12)) + 1))
        acc = np.full(t0.shape, -np.inf)
        for j in range(-span, span + 1):
            acc = np.logaddexp(acc, prior.log_pdf(t0 + (k0 + j) * period_obs))
        return acc + np.log(period_obs / TWO_PI)

    # ----------------------------------------------------------------- packing
    def pack(self, values: dict[str, NDArray[np.float64] | float]) -> NDArray[np.float64]:
        """Sampled vectors from physical quantities (inverse of :meth:`unpack`).

        ``values`` holds the keys :meth:`unpack` returns (per plane, those of
        its first member are used); angles are placed in their windows.
        """
        arrays = {k: np.atleast_1d(np.asarray(v, dtype=float)) for k, v in values.items()}
        n = max(a.size for a in arrays.values())
        theta = np.zeros((n, self.ndim))

        def put(name, val):
            if name in self.index:
                theta[:, self.index[name]] = val

        put("ln_mass", np.log(arrays["mass_msun"]))
        put("ln_distance", np.log(arrays["distance_pc"]))
        put("ln_parallax", np.log(1000.0 / arrays["distance_pc"]))
        for pname, info in self.planes.items():
            first = info["members"][0]
            if info["i_var"] is not None:
                theta[:, info["i_var"]] = arrays[f"{first}.cos_i"]
            if info["node_var"] is not None:
                theta[:, info["node_var"]] = arrays[f"{first}.node"]
        for lay in self.companions:
            c = lay.name
            if lay.idx["ln_period"] >= 0:
                theta[:, lay.idx["ln_period"]] = np.log(arrays[f"{c}.period_yr"])
            omega = arrays.get(f"{c}.omega", np.zeros(n))
            if lay.ecc_mode == "vector":
                s = np.sqrt(arrays[f"{c}.ecc"])
                theta[:, lay.idx["h"]] = s * np.cos(omega)
                theta[:, lay.idx["k"]] = s * np.sin(omega)
            elif "omega" in lay.idx:
                theta[:, lay.idx["omega"]] = omega
            if lay.idx.get("lambda", -1) >= 0:
                theta[:, lay.idx["lambda"]] = arrays[f"{c}.m0"] + omega
            if "q" in lay.idx:
                theta[:, lay.idx["q"]] = arrays[f"{c}.q"]
        for name in self.instrument_names:
            if self.offset_idx[name] is not None:
                theta[:, self.offset_idx[name]] = arrays.get(f"offset.{name}", 0.0)
            jidx = self.jitter_idx[name]
            if jidx is not None:
                j = arrays.get(f"jitter.{name}", np.full(n, 0.0))
                theta[:, jidx] = np.log(j) if self.variables[jidx].kind == "log" else j
        for key, idx in self.frame_idx.items():
            if idx is not None:
                theta[:, idx] = arrays.get(key, 0.0)
        for pname, idx in self.term_idx.items():
            if idx is not None:
                theta[:, idx] = arrays.get(pname, 0.0)
        return self.wrap_angles(theta)

    def wrap_angles(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """Bring every angle into its window (the model is periodic, so this moves nothing physical).

        For a half-turn node window the companion's omega (and mean longitude)
        move by half a turn with the node, which leaves positions unchanged.
        """
        theta = np.array(theta, dtype=float, copy=True)
        for var in self.variables:
            if var.kind != "angle":
                continue
            j = self.index[var.name]
            lo = var.centre - 0.5 * var.width
            turns = np.floor((theta[:, j] - lo) / var.width)
            theta[:, j] -= turns * var.width
            if var.width < TWO_PI and var.name.endswith(".node"):
                odd = np.mod(turns, 2.0) != 0
                pname = var.name[: -len(".node")]
                for member in self.planes[pname]["members"]:
                    lay = next(l for l in self.companions if l.name == member)
                    self._rotate_omega(lay, theta, odd)
        return theta

    def _rotate_omega(self, lay: _CompanionLayout, theta, mask):
        """omega -> omega + pi (and lambda with it) where ``mask``."""
        if lay.ecc_mode == "vector":
            theta[mask, lay.idx["h"]] *= -1.0
            theta[mask, lay.idx["k"]] *= -1.0
        elif "omega" in lay.idx:
            theta[mask, lay.idx["omega"]] += math.pi
        if lay.idx.get("lambda", -1) >= 0:
            theta[mask, lay.idx["lambda"]] += math.pi

    # ----------------------------------------------------------------- windows
    @property
    def windows(self) -> AngleWindows:
        """The angle windows in force (immutable)."""
        return AngleWindows(tuple((v.name, float(v.centre), float(v.width)) for v in self.variables
                                  if v.kind == "angle"))

    def windows_from(self, theta0: NDArray[np.float64]) -> AngleWindows:
        """Windows of this space's widths centred on the circular mean of the rows of ``theta0``."""
        theta0 = np.atleast_2d(theta0)
        items = []
        for var in self.variables:
            if var.kind == "angle":
                col = theta0[:, self.index[var.name]]
                factor = TWO_PI / var.width
                items.append((var.name, float(np.angle(np.mean(np.exp(1j * factor * col)))) / factor,
                              float(var.width)))
        return AngleWindows(tuple(items))

    def with_windows(self, windows: AngleWindows | Mapping) -> ParameterSpace:
        """A new space, equal to this one but with ``windows`` (final); this one is unchanged."""
        if not isinstance(windows, AngleWindows):
            windows = AngleWindows.from_mapping(windows)
        new = copy.copy(self)
        new.variables = list(self.variables)
        new._apply_windows(windows)
        new.windows_final = True
        return new

    def _apply_windows(self, windows: AngleWindows) -> None:
        self._prior_plan = None  # built from the windows: rebuilt on the next call
        for k, var in enumerate(self.variables):
            w = windows.get(var.name) if var.kind == "angle" else None
            if w is not None:
                self.variables[k] = replace(var, centre=w[0], width=w[1])

    def set_centres(self, theta0: NDArray[np.float64]) -> None:
        """Centre the windows of this space on ``theta0`` in place (test fixtures only).

        Library code never calls this: it uses :meth:`windows_from` and
        :meth:`with_windows`. Refused on a space whose windows are final.

        Raises
        ------
        RuntimeError
            When :attr:`windows_final` is set.
        """
        if self.windows_final:
            raise RuntimeError("the angle windows of this space are final; "
                               "use space.with_windows(space.windows_from(theta)) for a new space")
        self._apply_windows(self.windows_from(theta0))

    def sample_prior(self, rng: np.random.Generator, n: int) -> NDArray[np.float64]:
        """Draw ``n`` sampled vectors from the prior (for initialisation and calibration)."""
        values: dict[str, NDArray[np.float64]] = {}
        cp = self.target.central_priors
        values["mass_msun"] = cp["mass"].sample(rng, n)
        d = self.target.distance
        if self.distance_mode == "parallax":
            values["distance_pc"] = 1000.0 / np.abs(d.parallax.sample(rng, n))
        elif self.distance_mode == "distance":
            values["distance_pc"] = np.abs(d.prior.sample(rng, n))
        else:
            values["distance_pc"] = np.full(n, self.fixed_distance_pc)
        for pname, info in self.planes.items():
            first = info["members"][0]
            values[f"{first}.cos_i"] = np.cos(info["inc_prior"].sample(rng, n))
            values[f"{first}.node"] = info["node_prior"].sample(rng, n)
        for lay in self.companions:
            pr = self.companion(lay.name).priors
            c = lay.name
            values[f"{c}.period_yr"] = pr["period"].sample(rng, n)
            values[f"{c}.ecc"] = pr["eccentricity"].sample(rng, n)
            values[f"{c}.omega"] = pr["arg_periastron"].sample(rng, n)
            if lay.phase_from_tp:
                tp = pr["periastron_time"].sample(rng, n)
                values[f"{c}.m0"] = TWO_PI * (self.t_ref - tp) / (values[f"{c}.period_yr"] * self.one_plus_z)
            else:
                values[f"{c}.m0"] = pr["mean_anomaly"].sample(rng, n)
            if lay.has_q:
                values[f"{c}.q"] = pr["mass_ratio"].sample(rng, n)
        for name in self.instrument_names:
            inst = self.target.instruments[name]
            values[f"offset.{name}"] = inst.offset.sample(rng, n)
            values[f"jitter.{name}"] = inst.jitter.sample(rng, n)
        for key in self.frame_idx:
            values[key] = cp[key].sample(rng, n)
        for pname, prior in self.term_parameters.items():
            values[pname] = prior.sample(rng, n)
        return self.pack(values)

    def semimajor_axes(self, phys: dict[str, NDArray[np.float64]], name: str):
        """(a_au, a_mas) of companion ``name`` by Kepler III (rest-frame period)."""
        a_au = semimajor_axis_au(phys["mass_msun"], phys[f"{name}.period_yr"])
        a_mas = a_au / phys["distance_pc"] * 1000.0
        return a_au, a_mas


class _PriorPlan:
    """The log prior of a space with its per-variable Python work done once.

    Uniform, log-uniform and normal priors of linear and log variables are
    evaluated as groups (one array of bounds or means per family), the angle
    windows as one bounds check, isotropic inclinations and whole-turn uniform
    angle priors as constants; anything else (other families, periastron-time
    phases, non-uniform angle priors) is evaluated by the same code as
    :meth:`ParameterSpace.log_prior_reference`.
    """

    def __init__(self, space: ParameterSpace):
        self.const = 0.0
        self.other_vars: list[Variable] = []
        by_family: dict[str, list[tuple[int, bool, Prior]]] = {}
        ang_cols, ang_lo, ang_hi = [], [], []
        for var in space.variables:
            j = space.index[var.name]
            if var.kind == "angle":
                half = 0.5 * var.width
                ang_cols.append(j)
                ang_lo.append(var.centre - half)
                ang_hi.append(var.centre + half)
            elif var.kind in ("log", "linear"):
                fam = type(var.prior).__name__
                if fam in ("Uniform", "LogUniform", "Normal"):
                    by_family.setdefault(fam, []).append((j, var.kind == "log", var.prior))
                else:
                    self.other_vars.append(var)
        # one gather and one bounds check for every bounded column (strict bounds as the
        # neighbouring float, so x < hi is x <= nextafter(hi, -inf))
        b_cols, b_log, b_lo, b_hi = [], [], [], []
        norm_pos, norm_mu, norm_sd, lu_pos = [], [], [], []
        for fam, items in by_family.items():
            for j, is_log, p in items:
                pos = len(b_cols)
                b_cols.append(j)
                b_log.append(is_log)
                if fam == "Normal":
                    b_lo.append(-math.inf)
                    b_hi.append(math.inf)
                    norm_pos.append(pos)
                    norm_mu.append(p.mean)
                    norm_sd.append(p.sd)
                    self.const += -math.log(p.sd) - 0.5 * math.log(TWO_PI)
                else:
                    b_lo.append(p.low)
                    b_hi.append(p.high)
                    if fam == "Uniform":
                        self.const += -math.log(p.high - p.low)
                    else:
                        lu_pos.append(pos)
                        self.const += -math.log(math.log(p.high / p.low))
        for j, lo, hi in zip(ang_cols, ang_lo, ang_hi):
            b_cols.append(j)
            b_log.append(False)
            b_lo.append(lo)
            b_hi.append(float(np.nextafter(hi, -math.inf)))
        self.n_value_cols = len(b_cols) - len(ang_cols)
        # planes: isotropic cos i is a constant inside (-1, 1); whole-turn uniform nodes a constant
        self.other_planes: list[tuple[str, dict, bool, bool]] = []  # (name, info, inc generic, node generic)
        for pname, info in space.planes.items():
            inc_generic = node_generic = False
            if info["i_var"] is not None:
                if isinstance(info["inc_prior"], Isotropic):
                    b_cols.append(info["i_var"])
                    b_log.append(False)
                    b_lo.append(float(np.nextafter(-1.0, math.inf)))
                    b_hi.append(float(np.nextafter(1.0, -math.inf)))
                    self.const -= LN2
                else:
                    inc_generic = True
            if info["node_var"] is not None:
                c = _full_turn_constant(info["node_prior"])
                if c is None:
                    node_generic = True
                else:
                    self.const += c if info["los"] else c + LN2  # logaddexp(c, c)
            if inc_generic or node_generic:
                self.other_planes.append((pname, info, inc_generic, node_generic))
        self.b_cols = np.array(b_cols, dtype=np.intp)
        self.b_log = np.array(b_log, dtype=bool)
        self.any_log = bool(self.b_log.any())
        self.log_weight = self.b_log.astype(float)
        self.b_lo, self.b_hi = np.array(b_lo), np.array(b_hi)
        self.norm = (np.array(norm_pos, dtype=np.intp), np.array(norm_mu), np.array(norm_sd))
        self.lu_pos = np.array(lu_pos, dtype=np.intp)
        # companions: the eccentricity vector inside the unit disc with a uniform e prior, and
        # whole-turn uniform omega and mean-anomaly priors, are constants plus one check
        ecc_h, ecc_k, ecc_lo, ecc_hi = [], [], [], []
        self.other_companions: list[_CompanionLayout] = []
        for lay in space.companions:
            pr = space.companion(lay.name).priors
            simple = True
            c = 0.0
            if lay.ecc_mode == "vector":
                ep = pr["eccentricity"]
                cw = _full_turn_constant(pr["arg_periastron"])
                if not isinstance(ep, Uniform) or cw is None:
                    simple = False
                else:
                    c += -math.log(ep.high - ep.low) + LN2 + cw
            elif lay.ecc_mode == "fixed" and "omega" in lay.idx:
                cw = _full_turn_constant(pr["arg_periastron"])
                simple = simple and cw is not None
                c += cw or 0.0
            if lay.idx.get("lambda", -1) >= 0:
                cm = None if lay.phase_from_tp else _full_turn_constant(pr["mean_anomaly"])
                simple = simple and cm is not None
                c += cm or 0.0
            if not simple:
                self.other_companions.append(lay)
                continue
            self.const += c
            if lay.ecc_mode == "vector":
                ep = pr["eccentricity"]
                ecc_h.append(lay.idx["h"])
                ecc_k.append(lay.idx["k"])
                ecc_lo.append(ep.low)
                ecc_hi.append(ep.high)
        self.ecc = (np.array(ecc_h, dtype=np.intp), np.array(ecc_k, dtype=np.intp), np.array(ecc_lo),
                    np.array(ecc_hi))
        self.space = space

    def __call__(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        space = self.space
        n = theta.shape[0]
        ok = np.ones(n, dtype=bool)
        lp = np.full(n, self.const)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            if self.b_cols.size:
                x = theta[:, self.b_cols]
                val = np.exp(x, out=x.copy(), where=self.b_log) if self.any_log else x
                ok &= ((val >= self.b_lo) & (val <= self.b_hi)).all(axis=1)
                if self.any_log:
                    lp += x @ self.log_weight
                pos, mu, sd = self.norm
                if pos.size:
                    z = (val[:, pos] - mu) / sd
                    lp -= 0.5 * np.einsum("ij,ij->i", z, z)
                if self.lu_pos.size:
                    lp -= np.log(val[:, self.lu_pos]).sum(axis=1)
            h_cols, k_cols, e_lo, e_hi = self.ecc
            if h_cols.size:
                h = theta[:, h_cols]
                k = theta[:, k_cols]
                e = h * h + k * k
                ok &= np.all((e < 1.0) & (e >= e_lo) & (e <= e_hi), axis=1)
            for var in self.other_vars:
                x = theta[:, space.index[var.name]]
                lp += var.prior.log_pdf(np.exp(x)) + x if var.kind == "log" else var.prior.log_pdf(x)
            for pname, info, inc_generic, node_generic in self.other_planes:
                if inc_generic:
                    c = theta[:, info["i_var"]]
                    inside = (c > -1.0) & (c < 1.0)
                    cc = np.clip(c, -1.0, 1.0)
                    lp += np.where(inside, info["inc_prior"].log_pdf(np.arccos(cc)) - np.log(np.sqrt(1 - cc * cc)),
                                   -np.inf)
                if node_generic:
                    lp += space._circular_log_pdf(info["node_prior"], theta[:, info["node_var"]], info["los"], pname)
            for lay in self.other_companions:
                lp += space._companion_log_prior(lay, theta)
        lp[~ok] = -np.inf
        lp[~np.isfinite(lp)] = -np.inf
        return lp


def _full_turn_constant(prior: Prior) -> float | None:
    """The log density of a uniform prior over a whole turn or more (as wrapped), else None."""
    if isinstance(prior, Uniform) and prior.high - prior.low >= TWO_PI - 1e-12:
        return -math.log(TWO_PI)
    return None


def priors_used(space) -> list[dict[str, str]]:
    """Every prior in force, in report units: list of {"parameter", "prior"}."""
    deg = 180.0 / math.pi
    t = space.target
    out = [{"parameter": "total mass", "prior": t.central_priors["mass"].describe("Msun")}]
    d = t.distance
    if d.parallax is not None:
        out.append({"parameter": "parallax", "prior": d.parallax.describe("mas")})
    if d.prior is not None:
        out.append({"parameter": "distance", "prior": d.prior.describe("pc")})
    if d.redshift is not None:
        how = "fixes the distance (angular-diameter distance)" if space.distance_mode == "fixed" \
            else "sets the time dilation"
        out.append({"parameter": "redshift", "prior": f"z = {d.redshift} ({d.cosmology}); {how}"})
    units = {"x0": "mas", "y0": "mas", "vx0": "mas/yr", "vy0": "mas/yr", "vz0": "km/s", "systemic": "km/s"}
    for key in space.frame_idx:
        out.append({"parameter": key, "prior": t.central_priors[key].describe(units[key])})
    for name, inst in t.instruments.items():
        out.append({"parameter": f"offset {name}", "prior": inst.offset.describe("km/s")})
        out.append({"parameter": f"jitter {name}", "prior": inst.jitter.describe("km/s")})
    for comp in t.companions:
        for key, prior in comp.priors.items():
            if key in ("inclination", "arg_periastron", "ascending_node", "mean_anomaly"):
                text = prior.describe("deg", deg)
            elif key == "period":
                text = prior.describe("yr") + " (rest frame)"
            elif key == "periastron_time":
                text = prior.describe("Julian yr")
            else:
                text = prior.describe("")
            out.append({"parameter": f"{comp.name} {key.replace('_', ' ')}", "prior": text})
        if comp.plane:
            out.append({"parameter": f"{comp.name} plane",
                        "prior": f"shares inclination and node with plane {comp.plane!r}"})
    return out


class ReferenceState:
    """Sample some companions in their state at the reference epoch instead of their elements.

    For a companion that the data follow over a small fraction of its orbit,
    the elements (ln P, sqrt(e) cos w, sqrt(e) sin w, cos i, Omega, lambda) are
    strongly and non-linearly correlated, while what the data measure is nearly
    linear: the sky position and motion at the reference epoch (and the
    line-of-sight velocity where there are velocities). The six element
    columns of such a companion are replaced, in place and in this order, by

    ``north_mas, east_mas`` (sky position relative to the central body),
    ``depth_asinh`` = asinh(z / rho) (z the line-of-sight depth, +z away from
    the observer, as an angle at the distance; rho the sky separation),
    ``vnorth_mas_yr, veast_mas_yr`` (sky motion) and ``vz_atanh`` =
    atanh(vz / vz_max), vz_max = sqrt(2 GM / r - v_sky^2) the largest
    line-of-sight speed of a bound orbit at that place (for a companion
    without velocities; with velocities it is ``vz_kms``, the measured
    quantity, because vz_max grows with the distance and the scaled variable
    would tie the distance to it). The two last
    transforms take away the heavy tail of the depth and the hard wall of
    the escape speed, which the arc leaves unconstrained; they are triangular
    (z depends on the sky position and zeta, vz on eta and the others) and add
    log r (mas) + log(vz_max) - 2 log cosh(eta) to the log-Jacobian.

    Every other column is the same as in the element space. The map to the
    elements is the classical inversion of a bound Kepler orbit (specific
    angular momentum, eccentricity vector, Kepler's equation); states of
    unbound orbits have no elements and get log density -inf.

    Jacobian (exact). With mass and distance held fixed, the Delaunay
    variables (M, omega, Omega, L, G, H), L = sqrt(mu a), G = L sqrt(1 - e^2),
    H = G cos i, are canonical, so d^3r d^3v = dM dw dW dL dG dH (Goldstein,
    Classical Mechanics, canonical transformations preserve phase volume)
    = (1/2) mu^(3/2) a^(1/2) e da de dcos(i) dw dW dM. With
    da = (2/3) a dln P, dh dk = (1/2) de dw and dlambda dw = dM dw,
    d^3r d^3v = (2/3) mu^(3/2) a^(3/2) e dlnP dh dk dcos(i) dW dlambda; the
    sky units add (1000/d)^5 (five coordinates in mas or mas/yr) and
    ``KMS_PER_AU_PER_YR`` (vz in km/s). The density of the state variables is
    the element-space posterior times |d theta / d (r, v)| =
    1 / [(2/3) mu^(3/2) a^(3/2) e (1000/d)^5 K], times the factors of the
    depth and vz transforms below; mass and distance columns
    are common to both spaces, so the whole Jacobian is this block product.
    Checked against a finite-difference determinant in
    ``tests/inference/test_reference_state.py``.

    When the mass is sampled, its column is replaced by the log acceleration
    scale ln(GM / r^3) of the first such companion (r its distance from the
    central body in au at the reference epoch): on an arc the curvature
    measures GM / r^3, not M; ln M = ln(GM/r^3) + 3 ln r - ln G Msun is
    triangular in the other variables with unit diagonal, so it adds nothing
    to the Jacobian.

    Without velocities, a state and its mirror (z, vz) -> (-z, -vz) have the
    same elements up to (omega, Omega) -> (omega + pi, Omega + pi), which the
    half-turn node window identifies; both copies map to the same wrapped
    element vector with the same Jacobian, so sampling either (or both)
    gives the element-space posterior.

    Only companions with an eccentricity vector, free period, their own free
    plane (cos i and node sampled, not shared) and a sampled mean longitude
    qualify (:meth:`eligible`), and only without redshift time dilation.
    """

    STATE_NAMES = ("north_mas", "east_mas", "depth_asinh", "vnorth_mas_yr", "veast_mas_yr", "vz_atanh")

    def __init__(self, space: ParameterSpace, names: Sequence[str]):
        self.space = space
        self.companions = tuple(names)
        self.cols: dict[str, NDArray[np.intp]] = {}
        # vz as atanh(vz / vz_max) only without velocities: with them vz (km/s) is what is measured, and
        # vz_max grows with the distance, so the scaled variable would tie the distance to it
        self.vz_scaled = {name: not space.companion(name).has_velocities for name in self.companions}
        for name in self.companions:
            if name not in self.eligible(space):
                raise ValueError(f"companion {name!r} cannot be sampled in its reference state")
            lay = next(l for l in space.companions if l.name == name)
            info = space.planes[lay.plane]
            self.cols[name] = np.array([lay.idx["ln_period"], lay.idx["h"], lay.idx["k"], info["i_var"],
                                        info["node_var"], lay.idx["lambda"]], dtype=np.intp)
        self.names = list(space.names)
        for name, cols in self.cols.items():
            for j, sname in zip(cols, self.STATE_NAMES):
                self.names[j] = f"{name}.{sname if sname != 'vz_atanh' or self.vz_scaled[name] else 'vz_kms'}"
        # the mass column becomes ln(GM / r^3) of the first companion (yr^-2, r its 3-D distance in au): the
        # acceleration the arc's curvature measures
        self.accel_col = space.index.get("ln_mass")
        if self.accel_col is not None and self.companions:
            self.names[self.accel_col] = f"{self.companions[0]}.ln_accel"
        self.ndim = space.ndim

    @staticmethod
    def eligible(space: ParameterSpace) -> list[str]:
        """Companions whose six element columns can be replaced by a reference state."""
        if space.one_plus_z != 1.0:
            return []
        out = []
        for lay in space.companions:
            info = space.planes[lay.plane]
            if (lay.ecc_mode == "vector" and lay.idx.get("ln_period", -1) >= 0 and not lay.phase_from_tp
                    and lay.idx.get("lambda", -1) >= 0 and len(info["members"]) == 1
                    and info["i_var"] is not None and info["node_var"] is not None):
                out.append(lay.name)
        return out

    # ------------------------------------------------------------------ maps
    def _mu_d(self, theta_or_u):
        """GM (au^3/yr^2) and distance (pc) per row; the columns are common to both spaces."""
        with np.errstate(over="ignore", invalid="ignore"):  # state columns read as elements: unused
            phys = self.space.unpack(theta_or_u)
        return GM_SUN_AU3_PER_YR2 * phys["mass_msun"], phys["distance_pc"], phys

    def to_state(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """State vectors ``u`` from element vectors ``theta`` (rows)."""
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        u = theta.copy()
        mu, d, phys = self._mu_d(theta)
        first = True
        for name, cols in self.cols.items():
            e = phys[f"{name}.ecc"]
            w = phys[f"{name}.omega"]
            cos_i = phys[f"{name}.cos_i"]
            sin_i = phys[f"{name}.sin_i"]
            node = phys[f"{name}.node"]
            period = phys[f"{name}.period_yr"]
            a = np.cbrt(mu * period ** 2 / (4.0 * math.pi ** 2))
            cw, sw, cW, sW = np.cos(w), np.sin(w), np.cos(node), np.sin(node)
            p_vec = np.stack([cw * cW - sw * sW * cos_i, cw * sW + sw * cW * cos_i, sw * sin_i])
            q_vec = np.stack([-sw * cW - cw * sW * cos_i, -sw * sW + cw * cW * cos_i, cw * sin_i])
            cE, sE = kepler_cos_sin(phys[f"{name}.m0"], e)
            root = np.sqrt(1.0 - e * e)
            X, Y = cE - e, root * sE
            inv = 1.0 / (1.0 - e * cE)
            dX, dY = -sE * inv, root * cE * inv
            n = TWO_PI / period
            r = a * (X * p_vec + Y * q_vec)  # au, (north, east, z)
            v = a * n * (dX * p_vec + dY * q_vec)  # au/yr
            s = 1000.0 / d
            u[:, cols[0]], u[:, cols[1]] = r[0] * s, r[1] * s
            u[:, cols[2]] = np.arcsinh(r[2] / np.hypot(r[0], r[1]))
            u[:, cols[3]], u[:, cols[4]] = v[0] * s, v[1] * s
            if self.vz_scaled[name]:
                v_max = np.sqrt(2.0 * mu / np.sqrt(np.sum(r * r, axis=0)) - v[0] ** 2 - v[1] ** 2)
                u[:, cols[5]] = np.arctanh(v[2] / v_max)
            else:
                u[:, cols[5]] = v[2] * KMS_PER_AU_PER_YR
            if first and self.accel_col is not None:
                u[:, self.accel_col] = np.log(mu) - 1.5 * np.log(np.sum(r * r, axis=0))
            first = False
        return u

    def to_elements(self, u: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Element vectors (wrapped into the space's windows) and log |d theta / d u| per row.

        Rows whose state is not a bound orbit (or is degenerate: e = 0, h = 0)
        get NaN elements and a log Jacobian of -inf.
        """
        u = np.atleast_2d(np.asarray(u, dtype=float))
        theta = u.copy()
        mu, d, _ = self._mu_d(u)
        s = d / 1000.0
        log_jac = np.zeros(u.shape[0])
        bad = np.zeros(u.shape[0], dtype=bool)
        depth = {}
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            for name, cols in self.cols.items():  # z = rho sinh(zeta): dz / dzeta = rho cosh(zeta) = r
                rho = np.hypot(u[:, cols[0]], u[:, cols[1]])
                depth[name] = (rho * np.sinh(u[:, cols[2]]), rho * np.cosh(u[:, cols[2]]))
                log_jac += np.log(depth[name][1])
            if self.accel_col is not None:  # GM = (GM / r^3) r^3 with the first companion's r
                r_au = depth[self.companions[0]][1] * s
                mu = np.exp(u[:, self.accel_col]) * r_au ** 3
                theta[:, self.accel_col] = np.log(mu / GM_SUN_AU3_PER_YR2)
            for name, cols in self.cols.items():
                z_mas, r_mas = depth[name]
                r = np.stack([u[:, cols[0]] * s, u[:, cols[1]] * s, z_mas * s])
                rn = r_mas * s
                # vz = v_max tanh(eta), v_max the largest |vz| of a bound orbit: dvz / deta = v_max / cosh^2
                if self.vz_scaled[name]:
                    v_max = np.sqrt(2.0 * mu / rn - (u[:, cols[3]] ** 2 + u[:, cols[4]] ** 2) * s * s)
                    eta = u[:, cols[5]]
                    vz = v_max * np.tanh(eta)
                    log_jac += np.log(v_max * KMS_PER_AU_PER_YR) - 2.0 * (np.logaddexp(eta, -eta) - LN2)
                else:
                    vz = u[:, cols[5]] / KMS_PER_AU_PER_YR
                v = np.stack([u[:, cols[3]] * s, u[:, cols[4]] * s, vz])
                v2 = np.sum(v * v, axis=0)
                energy = 0.5 * v2 - mu / rn
                a = -mu / (2.0 * energy)
                h = np.cross(r, v, axis=0)
                hn = np.sqrt(np.sum(h * h, axis=0))
                rv = np.sum(r * v, axis=0)
                evec = np.cross(v, h, axis=0) / mu - r / rn
                e = np.sqrt(np.sum(evec * evec, axis=0))
                W = h / hn
                p_vec = evec / e
                q_vec = np.cross(W, p_vec, axis=0)
                cos_i = W[2]
                node = np.arctan2(W[0], -W[1])
                omega = np.arctan2(p_vec[2], q_vec[2])
                cE = (1.0 - rn / a) / e
                sE = rv / (e * np.sqrt(mu * a))
                E = np.arctan2(sE, cE)
                m0 = E - e * np.sin(E)
                period = TWO_PI * np.sqrt(a ** 3 / mu)
                ok = (energy < 0.0) & (e > 0.0) & (e < 1.0) & (hn > 0.0) & np.isfinite(period)
                bad |= ~ok
                se = np.sqrt(e)
                theta[:, cols[0]] = np.log(period)
                theta[:, cols[1]] = se * np.cos(omega)
                theta[:, cols[2]] = se * np.sin(omega)
                theta[:, cols[3]] = cos_i
                theta[:, cols[4]] = node
                theta[:, cols[5]] = m0 + omega
                log_jac -= (math.log(2.0 / 3.0) + 1.5 * np.log(mu * a) + np.log(e)
                            - 5.0 * np.log(s) + math.log(KMS_PER_AU_PER_YR))
        theta[bad] = np.nan
        log_jac[bad] = -np.inf
        good = ~bad
        if good.any():
            theta[good] = self.space.wrap_angles(theta[good])
        return theta, log_jac

    def wrap_angles(self, u: NDArray[np.float64]) -> NDArray[np.float64]:
        """Wrap the angle columns that remain elements; state columns are left as they are."""
        u = np.atleast_2d(np.asarray(u, dtype=float))
        if not self.cols:
            return self.space.wrap_angles(u)
        state_cols = np.concatenate(list(self.cols.values()))
        out = self.space.wrap_angles(u)
        out[:, state_cols] = u[:, state_cols]
        return out


class StatePosterior:
    """The log posterior of an element-space posterior ``post`` in the variables of ``state`` (a ReferenceState).

    ``log p_u(u) = log p_theta(theta(u)) + log |d theta / d u|``: the same
    posterior, so the physical quantities follow the documented priors
    exactly. ``space`` is the :class:`ReferenceState` (it has ``wrap_angles``
    and ``ndim`` like a parameter space); ``n_sets`` counts evaluations.
    """

    def __init__(self, post, state: ReferenceState):
        self.post = post
        self.space = state
        self.n_sets = 0

    def __call__(self, u: NDArray[np.float64]) -> NDArray[np.float64]:
        u = np.atleast_2d(u)
        self.n_sets += u.shape[0]
        theta, log_jac = self.space.to_elements(u)
        out = np.full(u.shape[0], -np.inf)
        ok = np.isfinite(log_jac)
        if ok.any():
            out[ok] = self.post(theta[ok]) + log_jac[ok]
        out[~np.isfinite(out)] = -np.inf
        return out
