"""Starting walkers without a guess from the user.

Method (stated in the README and the report):

1. **Global linear search.** For every companion, on a grid of observed
   period (uniform in frequency with five points per 1/baseline, at most
   ``max_periods`` points, within the period prior), eccentricity and
   mean anomaly at the reference epoch, the positions are linear in the
   Thiele-Innes constants (A, B, F, G) and the velocities are linear in
   (C, H) and the instrument zero points. Weighted linear least squares
   gives chi^2 at every grid point (Lucy 2014, A&A 563, A126, uses the same
   separation). The design matrices are the Keplerian basis of
   :func:`orbitmass.core.orbit.kepler_basis`; model terms are left out of the
   search (it only finds a start; the polish and the sampler use the full
   model). The period axis is processed in chunks, and a stop request is
   honoured between chunks. This quick grid takes a fraction of a second; when
   it cannot be trusted (:func:`needs_global_search`: central-body velocities,
   a poor best fit, a partial arc whose period may lie beyond the grid, a high
   eccentricity) the global search of :mod:`orbitmass.inference.search` runs
   as well (finer period and eccentricity grids to e = 0.99, periods up to the
   prior's bound, local refinement; tens of seconds) and its candidates come
   first. Every candidate's velocity levels are split into the systemic
   velocity and the instrument offsets consistently with what is fixed
   (:func:`orbitmass.inference.search.split_levels`).
2. **Candidates.** The best grid points at distinct periods are turned into
   Campbell elements (the classical Thiele-Innes inversion; the velocity
   solution fixes the (omega, Omega) ambiguity and, with the astrometric
   size, the distance), then mass by Kepler III.
3. **Optimisation.** Each candidate, with angle windows centred on it, is
   polished by maximising the full log posterior (BFGS with a vectorised
   central-difference gradient, :func:`polish`); the best wins, and other
   solutions within ``10`` in log posterior are reported as competing
   period modes. The best is polished once more with windows centred on it:
   these are the final windows (:attr:`InitialSolution.windows`), from which
   the caller makes the space it samples
   (:meth:`~orbitmass.model.parameters.ParameterSpace.with_windows`). The
   space passed in is never changed.
4. **Walkers.** Drawn from a Gaussian around the optimum with the inverse of
   a finite-difference Hessian as covariance (the Laplace approximation,
   :func:`hessian_covariance`), keeping only draws of finite posterior.

A stop request (``stop_flag``, e.g. after SIGINT) ends the search and the
polish early; walkers are then scattered about the best point so far and the
solution is marked ``interrupted``.

Longer than 600 lines because the quick grid, the escalation rule, the assembly of a
start from candidates and the polish form one procedure that is read top to bottom.
"""

from __future__ import annotations

import logging
import math
import time
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray
from scipy import optimize

from orbitmass.core.elements import thiele_innes_to_campbell
from orbitmass.core.orbit import TWO_PI, kepler_basis
from orbitmass.core.physics import mass_msun as kepler_mass
from orbitmass.inference.search import search_data_from_posterior, search_orbit, split_levels
from orbitmass.model.likelihood import LogPosterior
from orbitmass.model.parameters import AngleWindows, ReferenceState, StatePosterior
from orbitmass.units import KMS_PER_AU_PER_YR

__all__ = ["initialise_walkers", "InitialSolution", "period_grid", "polish", "hessian_covariance",
           "Interrupted", "reference_state_companions", "ARC_FRACTION", "elements_chain"]

log = logging.getLogger(__name__)
#: Most grid points x epochs per chunk of the linear search (bounds memory; a stop request is checked per chunk).
CHUNK_ELEMENTS = 2_000_000
#: A companion whose data span less than this fraction of its period (at the initial mode) is sampled in its
#: state at the reference epoch (:class:`~orbitmass.model.parameters.ReferenceState`) when it qualifies.
ARC_FRACTION = 0.5


@dataclass
class InitialSolution:
    """Result of the initialisation: the walkers and what the search found.

    ``windows`` are the angle windows the walkers and ``best`` are wrapped in
    (None for searches without angle variables, e.g. the fast path's 3-D
    posterior); ``interrupted`` is True when a stop request cut the search or
    the polish short.
    """

    walkers: NDArray[np.float64]
    best: NDArray[np.float64]
    best_log_post: float
    other_modes: list[dict]
    n_grid: int
    windows: AngleWindows | None = None
    interrupted: bool = False
    seconds: dict[str, float] = field(default_factory=dict)
    state: ReferenceState | None = None
    state_walkers: NDArray[np.float64] | None = None


class Interrupted(Exception):
    """Raised inside an optimisation when the stop flag is set (carries nothing; caught here)."""


def _stopped(stop_flag) -> bool:
    return stop_flag is not None and bool(stop_flag())


def period_grid(t: NDArray[np.float64], prior, one_plus_z: float, max_periods: int) -> NDArray[np.float64]:
    baseline = float(np.ptp(t)) if t.size > 1 else 1.0
    baseline = max(baseline, 1e-3)
    low, high = prior.support
    low_obs, high_obs = low * one_plus_z, high * one_plus_z
    if prior.fixed:
        return np.array([float(prior.value) * one_plus_z])
    spacing = np.diff(np.unique(t))
    typical = float(np.median(spacing)) if spacing.size else baseline
    p_min = max(low_obs, 2.0 * typical, 1e-6)
    p_max = min(high_obs, 50.0 * baseline)
    if p_max <= p_min:
        p_min, p_max = low_obs, high_obs
    f_lo, f_hi = 1.0 / p_max, 1.0 / p_min
    n_f = int(min(max_periods, max(60, (f_hi - f_lo) * baseline * 5)))
    if n_f >= max_periods:
        return np.exp(np.linspace(np.log(p_min), np.log(p_max), max_periods))
    return 1.0 / np.linspace(f_hi, f_lo, n_f)


def weighted_lsq(design, y, w):
    """Batched weighted least squares. design (..., n, k), y (n,), w (n,) -> coef (..., k), chi2 (...)."""
    dw = design * w[:, None]
    normal = np.einsum("...nk,...nl->...kl", dw, design)
    rhs = np.einsum("...nk,n->...k", dw, y)
    k = design.shape[-1]
    normal = normal + 1e-12 * np.trace(normal, axis1=-2, axis2=-1)[..., None, None] * np.eye(k) + 1e-300 * np.eye(k)
    coef = np.linalg.solve(normal, rhs[..., None])[..., 0]
    resid = y - np.einsum("...nk,...k->...n", design, coef)
    chi2 = np.einsum("...n,n->...", resid * resid, w)
    return coef, chi2


def _companion_search(post: LogPosterior, comp, max_periods: int, stop_flag=None):
    """Grid search for one companion; returns candidate element dicts sorted by chi^2, and the grid size."""
    space = post.space
    ab = post.astrometry.get(comp.name)
    vb = post.velocities.get(comp.name)
    ts = []
    if ab is not None:
        ts.append(ab.t)
    if vb is not None:
        ts.append(vb.t)
    t_all = np.concatenate(ts)
    pr = comp.priors
    periods = period_grid(t_all, pr["period"], space.one_plus_z, max_periods)
    ecc_prior = pr["eccentricity"]
    if ecc_prior.fixed:
        eccs = np.array([float(ecc_prior.value)])
    else:
        lo, hi = ecc_prior.support
        eccs = np.array([e for e in (0.0, 0.2, 0.4, 0.6, 0.75, 0.85, 0.92, 0.96) if lo <= e <= min(hi, 0.97)])
        if eccs.size == 0:
            eccs = np.array([0.5 * (lo + hi)])
    n_m0 = 12 if eccs.size > 1 else 16
    m0s = np.linspace(0.0, TWO_PI, n_m0, endpoint=False)
    shape = (periods.size, eccs.size, m0s.size)
    chi2 = np.zeros(shape)
    absolute = post.absolute
    n_ast = 4 if absolute else 2
    coef_n = coef_e = coef_v = None
    rv_insts: list[int] = []
    if ab is not None:
        east, north = ab.east_north()
        we, wn = ab.diagonal_weights()
        coef_n, coef_e = np.zeros(shape + (n_ast,)), np.zeros(shape + (n_ast,))
    rows = None
    if vb is not None and vb.companion_rows.any():
        rows = vb.companion_rows
        insts = vb.inst[rows]
        rv_insts = sorted(set(insts.tolist()))
        coef_v = np.zeros(shape + (2 + len(rv_insts),))
    E_ = eccs[None, :, None, None]
    M0 = m0s[None, None, :, None]
    # grid axes: (period, ecc, m0); the period axis in chunks
    n_t = (0 if ab is None else ab.t.size) + (0 if rows is None else int(rows.sum()))
    per_chunk = max(1, CHUNK_ELEMENTS // max(eccs.size * m0s.size * n_t, 1))
    for lo_k in range(0, periods.size, per_chunk):
        if _stopped(stop_flag):
            return None, int(chi2.size)
        sl = slice(lo_k, min(lo_k + per_chunk, periods.size))
        P = periods[sl, None, None, None]
        if ab is not None:
            t = ab.t
            basis = kepler_basis(t, t_ref_yr=space.t_ref, period_obs_yr=P, ecc=E_, mean_anomaly_ref=M0,
                                 velocities=False)
            cols = [basis.X, basis.Y]
            if absolute:
                ones = np.broadcast_to(np.ones_like(t), basis.X.shape)
                cols += [ones, np.broadcast_to(t - space.t_ref, basis.X.shape)]
            design = np.stack(cols, axis=-1)
            cn, chin = weighted_lsq(design, north, wn)
            ce, chie = weighted_lsq(design, east, we)
            chi2[sl] += chin + chie
            coef_n[sl], coef_e[sl] = cn, ce
        if rows is not None:
            t = vb.t[rows]
            basis = kepler_basis(t, t_ref_yr=space.t_ref, period_obs_yr=P, ecc=E_, mean_anomaly_ref=M0)
            # v_z = n_rest (C dX/dM + H dY/dM), n_rest = 2 pi (1 + z) / P_obs (core.orbit docstring)
            rate = TWO_PI * KMS_PER_AU_PER_YR * space.one_plus_z / P
            cols = [rate * basis.dX, rate * basis.dY]
            for i in rv_insts:
                cols.append(np.broadcast_to((insts == i).astype(float), basis.dX.shape))
            design = np.stack(cols, axis=-1)
            crv, chirv = weighted_lsq(design, vb.rv[rows], 1.0 / vb.var[rows])
            chi2[sl] += chirv
            coef_v[sl] = crv
    coef_ast = None if coef_n is None else (coef_n, coef_e)
    coef_rv = None if coef_v is None else (coef_v, rv_insts)
    flat = np.argsort(chi2, axis=None)
    cands = []
    used_lnp: list[float] = []
    for idx in flat:
        ip, ie, im = np.unravel_index(idx, chi2.shape)
        lnp = math.log(periods[ip])
        if any(abs(lnp - u) < 0.03 for u in used_lnp):
            continue
        used_lnp.append(lnp)
        cand = {"period_obs": periods[ip], "ecc": eccs[ie], "m0": m0s[im], "chi2": chi2[ip, ie, im]}
        if coef_ast is not None:
            cn, ce = coef_ast
            cand["ti"] = (cn[ip, ie, im, 0], ce[ip, ie, im, 0], cn[ip, ie, im, 1], ce[ip, ie, im, 1])
            if absolute:
                cand["x0"] = ce[ip, ie, im, 2]
                cand["vx0"] = ce[ip, ie, im, 3]
                cand["y0"] = cn[ip, ie, im, 2]
                cand["vy0"] = cn[ip, ie, im, 3]
        if coef_rv is not None:
            crv, insts = coef_rv
            cand["ch"] = (crv[ip, ie, im, 0], crv[ip, ie, im, 1])
            cand["levels"] = {space.instrument_names[i]: crv[ip, ie, im, 2 + j] for j, i in enumerate(insts)}
        cands.append(cand)
        if len(cands) >= 6:
            break
    return cands, int(chi2.size)


def needs_global_search(post: LogPosterior, comp, cands: list[dict], max_periods: int) -> str | None:
    """Why the quick grid of :func:`_companion_search` is not enough for ``comp``, or None.

    The quick grid (periods up to 50 baselines, eight eccentricities up to 0.96,
    companion velocity rows only) is kept for ordinary data because it takes a
    fraction of a second; the global search of :mod:`orbitmass.inference.search`
    (tens of seconds) runs when:

    * central-body velocities exist (the quick grid does not use them);
    * the period prior reaches well beyond the grid (three times its longest
      period or more) and the best grid period lies in the grid's upper third:
      a partial arc, whose period may be far longer than the grid allows.

    Other hard cases (a coarse grid at high eccentricity, a poor best grid
    point) are left to the polish, which starts from several candidates.
    """
    if not cands:
        return "no grid candidate"
    vb = post.velocities.get(comp.name)
    ab = post.astrometry.get(comp.name)
    if vb is not None and bool(np.any(vb.central)):
        return "central-body velocities"
    t = np.concatenate([x.t for x in (ab, vb) if x is not None])
    grid = period_grid(t, comp.priors["period"], post.space.one_plus_z, max_periods)
    p_hi_prior = comp.priors["period"].support[1] * post.space.one_plus_z
    if p_hi_prior > 3.0 * float(grid.max()) and cands[0]["period_obs"] > float(grid.max()) / 3.0:
        return "partial arc (best period near the end of the grid)"
    return None


def _prior_centre(prior) -> float:
    if prior.fixed:
        return float(prior.value)
    low, high = prior.support
    if hasattr(prior, "mean") and math.isfinite(prior.mean):
        m = float(prior.mean)
        return min(max(m, low), high)
    if prior.dist == "log-uniform":
        return math.sqrt(low * high)
    return 0.5 * (low + high)


def _candidate_values(space, comp, cand, mass_dist):
    """Physical values for one companion from a search candidate."""
    one_plus_z = space.one_plus_z
    period = cand["period_obs"] / one_plus_z
    v: dict[str, float] = {f"{comp.name}.period_yr": period, f"{comp.name}.ecc": cand["ecc"],
                           f"{comp.name}.m0": cand["m0"]}
    a_mas = a_au = None
    omega = node = None
    cos_i = 0.5
    if "ti" in cand:
        A, B, F, G = cand["ti"]
        a_mas, inc, omega, node = (float(x) for x in thiele_innes_to_campbell(A, B, F, G))
        cos_i = math.cos(inc)
    if "ch" in cand:
        C, H = cand["ch"]
        asini = math.hypot(C, H)
        omega_rv = math.atan2(C, H)
        if omega is None:
            omega = omega_rv
            node = 0.0
        else:
            diff = (omega_rv - omega + math.pi) % TWO_PI - math.pi
            if abs(diff) > math.pi / 2:
                omega += math.pi
                node += math.pi
        sin_i = math.sqrt(max(1 - cos_i**2, 0.05**2))
        a_au = asini / sin_i
    v[f"{comp.name}.omega"] = omega if omega is not None else 0.0
    v[f"{comp.name}.node"] = node if node is not None else 0.0
    v[f"{comp.name}.cos_i"] = cos_i
    if a_mas is not None and a_au is not None and a_mas > 0:
        mass_dist["distance_pc"].append(1000.0 * a_au / a_mas)
    if a_au is not None:
        mass_dist["mass_direct"].append(float(kepler_mass(a_au, period)))
    if a_mas is not None:
        mass_dist["a_mas"].append((a_mas, period))
    if comp.name in [lay.name for lay in space.companions if lay.has_q]:
        q = _prior_centre(comp.priors["mass_ratio"])
        if "q" in cand and math.isfinite(cand["q"]):  # from the central-body velocities
            lo, hi = comp.priors["mass_ratio"].support
            q = float(np.clip(cand["q"], lo + 1e-6 * (hi - lo), hi - 1e-6 * (hi - lo)))
        v[f"{comp.name}.q"] = q
    return v


def _assemble(space, per_comp_values, mass_dist, extra):
    values = {}
    for v in per_comp_values:
        values.update(v)
    target = space.target
    cp = target.central_priors
    # distance
    if space.distance_mode == "fixed":
        dist = space.fixed_distance_pc
    elif mass_dist["distance_pc"] and space.distance_mode == "distance":
        dist = float(np.median(mass_dist["distance_pc"]))
    elif space.distance_mode == "parallax":
        dist = 1000.0 / _prior_centre(target.distance.parallax)
        if mass_dist["distance_pc"] and target.distance.parallax.dist in ("uniform", "log-uniform"):
            dist = float(np.median(mass_dist["distance_pc"]))
    else:
        dist = _prior_centre(target.distance.prior)
    dlo, dhi = (target.distance.prior.support if space.distance_mode == "distance" else (0, np.inf))
    dist = float(np.clip(dist, max(dlo, 1e-9), dhi))
    # mass: astrometric size at this distance, else the velocity amplitude
    masses = [float(kepler_mass(a_mas * dist / 1000.0, p)) for a_mas, p in mass_dist["a_mas"]]
    if not masses:
        masses = mass_dist["mass_direct"]
    mass = float(np.median(masses)) if masses else _prior_centre(cp["mass"])
    mlo, mhi = cp["mass"].support
    mass = float(np.clip(mass, mlo * 1.0001, mhi * 0.9999)) if not cp["mass"].fixed else float(cp["mass"].value)
    values["mass_msun"] = mass
    values["distance_pc"] = dist
    for name in space.instrument_names:
        inst = target.instruments[name]
        values[f"offset.{name}"] = _prior_centre(inst.offset) if not inst.offset.fixed else inst.offset.value
        jp = inst.jitter
        values[f"jitter.{name}"] = _prior_centre(jp) if not jp.fixed else jp.value
        if not jp.fixed and jp.dist == "log-uniform":
            values[f"jitter.{name}"] = math.exp(0.25 * math.log(jp.support[1]) + 0.75 * math.log(jp.support[0]))
    # levels from the velocity solution, split consistently with what is fixed
    # (a fixed systemic velocity or zero point keeps its value; free ones take the rest)
    split = extra.get("split")
    base = None if split is None else split["base"]
    if split is not None:
        for name, off in split["offsets"].items():
            if space.offset_idx.get(name) is not None:
                values[f"offset.{name}"] = off
    for key in space.frame_idx:
        pr = cp[key]
        val = _prior_centre(pr)
        if key in ("systemic", "vz0") and base is not None:
            val = base
        if key in extra:
            val = extra[key]
        values[key] = val
    return values


def polish(post, theta0: NDArray[np.float64], max_evals: int, stop_flag=None) -> tuple[NDArray, float]:
    """Maximise the log posterior from ``theta0``: BFGS with a vectorised central-difference gradient.

    One batched posterior call gives the value and the whole gradient, so an
    iteration costs about one vectorised evaluation of 2 n_dim + 1 points.
    ``post`` is any vectorised log density. When ``stop_flag()`` becomes
    true the best point so far is returned (checked at every evaluation).
    """
    d = theta0.size
    big = 1e30

    def value_and_grad(x):
        if _stopped(stop_flag):
            raise Interrupted
        h = 1e-6 * np.maximum(1.0, np.abs(x))
        pts = np.repeat(x[None, :], 2 * d + 1, axis=0)
        idx = np.arange(d)
        pts[1 + idx, idx] += h
        pts[1 + d + idx, idx] -= h
        vals = post(pts)
        f0 = vals[0]
        if not np.isfinite(f0):
            return big, np.zeros(d)
        fp, fm = vals[1: d + 1], vals[d + 1:]
        # one-sided differences where a wall (-inf) is hit on one side
        grad = np.where(np.isfinite(fp) & np.isfinite(fm), (fp - fm) / (2 * h),
                        np.where(np.isfinite(fp), (fp - f0) / h, np.where(np.isfinite(fm), (f0 - fm) / h, 0.0)))
        return -f0, -grad

    best = np.array(theta0, dtype=float)
    try:
        best_val = value_and_grad(best)[0]
    except Interrupted:
        return best, float(post(best[None, :])[0])
    seen = {"x": best, "f": best_val}

    def tracked(x):
        f, g = value_and_grad(x)
        if f < seen["f"]:
            seen["x"], seen["f"] = np.array(x, dtype=float), f
        return f, g

    for _ in range(3):
        try:
            res = optimize.minimize(tracked, best, jac=True, method="BFGS",
                                    options={"maxiter": max_evals, "gtol": 1e-6})
        except Interrupted:
            return seen["x"], -seen["f"]
        if np.isfinite(res.fun) and res.fun < best_val - 1e-7:
            gain = best_val - res.fun
            best, best_val = res.x, res.fun
            if gain < 1e-4:
                break
        else:
            break
    return best, -best_val


def hessian_covariance(post, x0: NDArray[np.float64]) -> NDArray[np.float64]:
    """Covariance from a vectorised central-difference Hessian of the log density ``post`` at ``x0``."""
    d = x0.size
    h = 1e-4 * np.maximum(1.0, np.abs(x0))
    h = np.minimum(h, 1e-3)
    pts = [x0]
    for i in range(d):
        for j in range(i, d):
            for si, sj in ((1, 1), (1, -1), (-1, 1), (-1, -1)):
                p = x0.copy()
                p[i] += si * h[i]
                p[j] += sj * h[j]
                pts.append(p)
    vals = post(np.array(pts))
    f0 = vals[0]
    H = np.zeros((d, d))
    k = 1
    with np.errstate(invalid="ignore"):  # -inf neighbours (a prior wall) give nan entries, handled below
        for i in range(d):
            for j in range(i, d):
                fpp, fpm, fmp, fmm = vals[k: k + 4]
                k += 4
                H[i, j] = H[j, i] = (fpp - fpm - fmp + fmm) / (4 * h[i] * h[j])
    if not np.all(np.isfinite(H)) or not np.isfinite(f0):
        return np.diag((0.01 * np.maximum(1.0, np.abs(x0))) ** 2)
    w, V = np.linalg.eigh(-H)
    floor = 1e-12
    w = np.where(w > floor, w, np.nan)
    if np.all(np.isnan(w)):
        return np.diag((0.01 * np.maximum(1.0, np.abs(x0))) ** 2)
    w = np.where(np.isnan(w), np.nanmin(w), w)
    return (V / w) @ V.T


def initialise_walkers(post: LogPosterior, n_walkers: int, rng: np.random.Generator, *,
                       max_periods: int = 3000, max_evals: int = 2000, stop_flag=None,
                       start: NDArray[np.float64] | None = None) -> InitialSolution:
    """Find the posterior mode from scratch and scatter ``n_walkers`` around it.

    Parameters
    ----------
    post : LogPosterior
        The posterior; its space is not changed (the final windows are returned).
    n_walkers : int
    rng : numpy.random.Generator
    max_periods : int
        Most period grid points per companion in the linear search.
    max_evals : int
        Iterations per BFGS run of the polish.
    stop_flag : callable, optional
        Returns True when the search should stop (e.g. after SIGINT): the
        search and polish end within about a second, walkers are scattered
        about the best point so far and the solution says ``interrupted``.
    start : ndarray, shape (n_dim,), optional
        A starting point (e.g. the mode of a simpler model) to polish instead
        of running the search.

    Returns
    -------
    InitialSolution
        Walkers and best point wrapped in ``windows``; sample with
        ``post.with_space(post.space.with_windows(solution.windows))``.
    """
    space = post.space
    searches = []
    n_grid = 0
    interrupted = False
    clock = [time.perf_counter()]
    for comp in space.target.companions if start is None else ():
        cands, ng = _companion_search(post, comp, max_periods, stop_flag)
        n_grid += ng
        if cands is None:
            interrupted = True
            break
        sdata = search_data_from_posterior(post, comp)
        reason = needs_global_search(post, comp, cands, max_periods)
        if reason is not None:  # a hard case: the global search of inference.search (tens of seconds)
            log.info("%s: global orbit search (%s)", comp.name, reason)
            deep, ng = search_orbit(sdata, stop_flag=stop_flag)
            n_grid += ng
            if _stopped(stop_flag):
                interrupted = True
            cands = deep[:6] + [c for c in deep[6:] if c.get("arc")] + cands[:2]
        for cand in cands:
            if "levels" in cand:
                cand["split"] = split_levels(cand["levels"], sdata)
        searches.append((comp, cands))
        if interrupted:
            break
    results = []
    clock.append(time.perf_counter())
    if start is not None and not _stopped(stop_flag):
        post_c = post.with_space(space.with_windows(space.windows_from(start[None, :])))
        best, val = polish(post_c, post_c.space.wrap_angles(start[None, :])[0], max_evals, stop_flag)
        results.append((val, best, None))
    elif start is None and not interrupted:
        # combinations: best candidate for every companion, alternatives for one at a time
        combos = [[0] * len(searches)]
        for ci, (_, cands) in enumerate(searches):
            for k in range(1, min(len(cands), 4)):
                combo = [0] * len(searches)
                combo[ci] = k
                combos.append(combo)
        for combo in combos:
            if _stopped(stop_flag):
                interrupted = True
                break
            theta = space.pack(_combo_values(space, searches, combo))
            post_c = post.with_space(space.with_windows(space.windows_from(theta)))
            theta = post_c.space.wrap_angles(theta)[0]
            if not np.isfinite(post_c(theta[None, :])[0]):
                theta = _best_prior_draw(post_c, rng, theta)
            best, val = polish(post_c, theta, max_evals, stop_flag)
            results.append((val, best, combo))
    if not results:  # stopped during the search: the prior centres, or the best of a few prior draws
        theta = _best_prior_draw(post, rng, space.pack(_fallback_values(space))[0], n=4 * n_walkers)
        results.append((float(post(theta[None, :])[0]), theta, None))
    results.sort(key=lambda r: -r[0])
    best_val, best, _ = results[0]
    # second polish with windows centred on the best point: the final windows
    windows = space.windows_from(best[None, :])
    final = post.with_space(space.with_windows(windows))
    best = final.space.wrap_angles(best[None, :])[0]
    if _stopped(stop_flag):
        interrupted = True
        best_val = float(final(best[None, :])[0])
    else:
        best, best_val = polish(final, best, max_evals, stop_flag)
        interrupted = interrupted or _stopped(stop_flag)
    others = []
    for val, theta, combo in results[1:]:
        if best_val - val < 10.0:
            names = [c.name for c in space.target.companions]
            here = space.unpack(theta[None, :])
            there = space.unpack(best[None, :])
            periods = {n: float(here[f"{n}.period_yr"][0]) for n in names}
            if all(abs(math.log(periods[n] / float(there[f"{n}.period_yr"][0]))) < 0.02 for n in names):
                continue
            others.append({"delta_log_posterior": float(best_val - val), "period_yr": periods})
    clock.append(time.perf_counter())
    state, state_walkers = None, None
    if interrupted:  # keep the stop prompt: no Hessian, one round of draws about the best point
        cov = np.diag((0.01 * np.maximum(1.0, np.abs(best))) ** 2)
        walkers = _scatter(final, best, cov, n_walkers, rng, max_tries=1)
    else:
        arcs = reference_state_companions(final.space, best) if start is None else []
        if arcs:
            # partial arcs: walkers (and the sampler) in the reference state of those companions
            state = ReferenceState(final.space, arcs)
            post_u = StatePosterior(final, state)
            u_best, _ = polish(post_u, state.to_state(best[None, :])[0], max_evals, stop_flag)
            state_walkers = _scatter(post_u, u_best, hessian_covariance(post_u, u_best), n_walkers, rng)
            walkers = state.to_elements(state_walkers)[0]
            log.info("sampling %s in the state at the reference epoch (data span < %.2f of the period)",
                     ", ".join(arcs), ARC_FRACTION)
        else:
            cov = hessian_covariance(final, best)
            walkers = _scatter(final, best, cov, n_walkers, rng)
    clock.append(time.perf_counter())
    seconds = dict(zip(("search", "polish", "walkers"), np.diff(clock).tolist()))
    log.info("initialised at log posterior %.3f (%d grid points, %d competing modes%s); search %.2f s, "
             "polish %.2f s, walkers %.2f s", best_val, n_grid, len(others), ", interrupted" if interrupted else "",
             seconds["search"], seconds["polish"], seconds["walkers"])
    return InitialSolution(walkers=walkers, best=best, best_log_post=float(best_val),
                           other_modes=others, n_grid=n_grid, windows=windows, interrupted=interrupted,
                           seconds=seconds, state=state, state_walkers=state_walkers)


def reference_state_companions(space, best: NDArray[np.float64], fraction: float = ARC_FRACTION) -> list[str]:
    """Companions to sample in their reference state: eligible, and seen over less than ``fraction`` of the orbit.

    The rule: the span of a companion's epochs (positions and velocities)
    divided by its observed period at the initial mode ``best`` is below
    ``fraction`` (:data:`ARC_FRACTION`), and the companion qualifies for
    :class:`~orbitmass.model.parameters.ReferenceState` (free eccentricity,
    period, own plane and phase; no redshift).
    """
    phys = space.unpack(np.atleast_2d(best))
    out = []
    for name in ReferenceState.eligible(space):
        comp = space.companion(name)
        t = [np.asarray(comp.astrometry.t_yr, float)] if comp.astrometry is not None else []
        if comp.velocities is not None:
            t.append(np.asarray(comp.velocities.t_yr, float))
        t_all = np.concatenate(t) if t else np.zeros(1)
        if float(np.ptp(t_all)) < fraction * float(phys[f"{name}.period_obs_yr"][0]):
            out.append(name)
    return out


def elements_chain(state: ReferenceState, chain: NDArray[np.float64]) -> tuple[NDArray, NDArray]:
    """A chain of state vectors (..., n_dim) as element vectors (wrapped into the space's windows).

    Returns the element chain and log |d theta / d u| of every sample (shape ``chain.shape[:-1]``):
    the element-space log posterior is the sampled one minus it.
    """
    theta, log_jac = state.to_elements(chain.reshape(-1, chain.shape[-1]))
    return theta.reshape(chain.shape), log_jac.reshape(chain.shape[:-1])


def _combo_values(space, searches, combo) -> dict:
    """Physical values of one combination of per-companion search candidates."""
    mass_dist = {"distance_pc": [], "mass_direct": [], "a_mas": []}
    per_comp, extra = [], {}
    for (comp, cands), k in zip(searches, combo):
        cand = cands[k]
        per_comp.append(_candidate_values(space, comp, cand, mass_dist))
        for key in ("x0", "y0", "vx0", "vy0"):
            if key in cand and key not in extra:
                extra[key] = cand[key]
        if "split" in cand and "split" not in extra:
            extra["split"] = cand["split"]
    return _assemble(space, per_comp, mass_dist, extra)


def _fallback_values(space) -> dict:
    """Prior centres of every quantity (a start when the search was stopped before any candidate)."""
    values: dict[str, float] = {}
    for lay in space.companions:
        pr = space.companion(lay.name).priors
        c = lay.name
        values[f"{c}.period_yr"] = _prior_centre(pr["period"])
        values[f"{c}.ecc"] = min(max(_prior_centre(pr["eccentricity"]), 0.0), 0.9)
        values[f"{c}.omega"] = 0.0
        values[f"{c}.node"] = 0.0
        values[f"{c}.cos_i"] = 0.5
        values[f"{c}.m0"] = 0.0
        if lay.has_q:
            values[f"{c}.q"] = _prior_centre(pr["mass_ratio"])
    return _assemble(space, [values], {"distance_pc": [], "mass_direct": [], "a_mas": []}, {})


def _best_prior_draw(post, rng, theta, n: int = 2000):
    """``theta`` if its posterior is finite, else the best of ``n`` prior draws (nudge into the prior support)."""
    if np.isfinite(post(theta[None, :])[0]):
        return theta
    prior_draws = post.space.sample_prior(rng, n)
    lp = post(prior_draws)
    if np.isfinite(lp).any():
        return prior_draws[int(np.argmax(lp))]
    return theta


def _scatter(post, best, cov, n_walkers, rng, max_tries: int = 50):
    d = best.size
    out = []
    scale = 1.0
    tries = 0
    while len(out) < n_walkers and tries < max_tries:
        tries += 1
        draws = rng.multivariate_normal(best, cov * scale, size=4 * n_walkers, method="eigh")
        draws = post.space.wrap_angles(draws)
        lp = post(draws)
        good = draws[np.isfinite(lp) & (lp > np.max(lp[np.isfinite(lp)], initial=-np.inf) - 10.0 * d)] \
            if np.isfinite(lp).any() else draws[:0]
        out.extend(good[: n_walkers - len(out)])
        if len(good) < n_walkers // 4:
            scale *= 0.3
    if len(out) < n_walkers:
        tiny = best + 1e-6 * rng.standard_normal((n_walkers - len(out), d))
        out.extend(tiny)
    return np.array(out[:n_walkers])
