"""Goodness of fit: chi-square, degrees of freedom, p-values, residuals and likely causes.

Pure functions (no I/O) on a :class:`~orbitmass.model.parameters.ParameterSpace`
and posterior samples in the sampled variables. Every model value comes from
:meth:`orbitmass.model.likelihood.LogPosterior.predict`, the package's orbit
evaluator; this module only compares it with the data.

Datasets
--------
One dataset per companion's positions (key ``"<C>.positions"``) and per
companion and instrument for velocities (``"<C>.velocities.<instrument>"``;
central-body rows of that table belong to the same dataset, since they share
the instrument's zero point and jitter).

Measured values
---------------
A position row gives two values in the form it was measured (east and north
offsets in mas, or separation in mas and position angle in deg with the angle
residual wrapped to +-180 deg); a velocity row one value (km/s). Residuals are
``(O - C) / sigma`` per value; for velocities ``sigma = sqrt(err^2 + jitter^2)``
and ``C`` includes the instrument offset and systemic velocity. The chi-square
of a position row uses the row's 2x2 covariance (its correlation included),
exactly as the likelihood does.

Where the statistics are computed
---------------------------------
At the maximum-posterior point: the retained sample of highest log posterior,
polished by a short Levenberg-Marquardt minimisation of the chi-square (kept
only when its log posterior is higher, see :func:`best_point`). Over posterior
draws: the chi-square of each draw, and a posterior predictive check (Gelman,
Meng & Stern 1996, Statistica Sinica 6, 733) with the chi-square as
discrepancy: for draw s, replicated Gaussian data give a chi-square distributed
as chi2(n) exactly (n values, whitened), so the check is the fraction of draws
with chi2_rep(s) >= chi2_obs(s), drawn without simulating data.

Degrees of freedom (convention)
-------------------------------
Overall: ``dof = n_values - p``, with ``p`` the number of sampled parameters
the data constrain: the rank of the Jacobian of the whitened model values with
respect to the sampled variables at the maximum-posterior point (columns scaled
to unit length, singular values below :data:`RANK_TOLERANCE` of the largest
dropped), plus one for each sampled jitter whose instrument has rows. Exact
degeneracies (mass and distance from positions alone, the node from velocities
alone) and parameters that move no model value are thus not counted; fixed
parameters are not sampled and never counted. Per dataset the share of ``p`` is
the sum of the leverages (diagonal of the hat matrix ``J (J^T J)^+ J^T``; Hoaglin
& Welsch 1978, Am. Stat. 32, 17) of its values, plus its rows' share of each
jitter of its instrument; the shares add up to ``p``, so dataset dofs (not
integers in general) add up to the overall dof.

Status
------
``"poor"`` when the overall p-value is below :data:`P_THRESHOLD` (1e-3), when a
dataset's reduced chi-square is outside its band (the chi-square's central
interval leaving 1e-3 in each tail, i.e. upper or lower tail probability below
1e-3), or when any row lies beyond :data:`ROW_SIGMA` (5) sigma (tail probability
of its row chi-square below that of a 5-sigma Gaussian deviation). Otherwise
``"ok"``. This is a statement about the model and the data; sampling
convergence is ``diagnostics.converged``.

Likely causes
-------------
Chosen per poor dataset from what its residuals show (epoch-ordered):
the noise scale from successive differences (von Neumann 1941, Ann. Math.
Stat. 12, 367: a smooth unmodelled signal cancels in differences, noise does
not), the structure statistic ``1 - eta`` of the von Neumann ratio, the share of
the chi-square a constant removes (velocities), the share of the largest row,
and the size of first-order relativistic terms against the errors.

Longer than 600 lines because the statistics, the degrees-of-freedom convention and the
diagnosis of likely causes use the same residual arrays; split candidates (the report
wording, the cause rules) are marked by section comments.
"""

from __future__ import annotations

import logging
import math
import warnings

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy import optimize, stats

from orbitmass.core import diagnostics
from orbitmass.core.physics import gr_periastron_advance_deg_per_orbit, periastron_speed_kms, semimajor_axis_au
from orbitmass.exceptions import ConvergenceWarning, DegeneracyWarning, PoorFitWarning
from orbitmass.model.likelihood import LogPosterior
from orbitmass.model.parameters import ParameterSpace
from orbitmass.units import C_KMS

__all__ = [
    "P_THRESHOLD",
    "ROW_SIGMA",
    "RANK_TOLERANCE",
    "fit_quality",
    "assess_fit",
    "best_point",
    "residuals_table",
    "quality_markdown",
    "quality_console_lines",
    "issue_warnings",
]

log = logging.getLogger(__name__)

#: Overall and per-dataset tail probability below which a fit is "poor".
P_THRESHOLD = 1e-3
#: A row further than this many sigma from the model makes a fit "poor".
ROW_SIGMA = 5.0
#: Relative singular value below which a direction counts as unconstrained (degrees of freedom).
RANK_TOLERANCE = 1e-6
#: Noise scale (sqrt of the successive-difference reduced chi-square) from which an error
#: column is taken to be in the wrong unit rather than merely underestimated.
UNIT_SCALE = 10.0
#: Structure statistic (1 - von Neumann ratio) * sqrt(n) above which residuals are structured.
STRUCTURE_Z = 4.0
#: Most (draw x value) entries of one block of the posterior-draw chi-squares: a handful of
#: float64 arrays of 2 MiB each, so 200 draws of a 100,000-row table never need 160 MB arrays.
DRAW_BLOCK_VALUES = 2**18

_ROW_P = 2.0 * stats.norm.sf(ROW_SIGMA)
_DOF_CONVENTION = ("n_values - p; p = rank of the whitened model Jacobian in the sampled variables "
                   "(exact degeneracies and fixed parameters excluded) + sampled jitters; per dataset p is "
                   "shared by leverage (hat-matrix diagonal)")


# ------------------------------------------------------------------ layout
class _Values:
    """Every measured value of a target, in the form it was measured, grouped in datasets."""

    def __init__(self, space: ParameterSpace):
        self.space = space
        t = space.target
        obs, sig, epoch, kind, comp, inst, line, unit, dset, row, second, corr = ([] for _ in range(12))
        self.datasets: list[dict] = []
        self.blocks: list[dict] = []  # per companion: where its values sit
        n_row = 0
        for c in t.companions:
            block = {"name": c.name, "astro": None, "vel": None}
            a = c.astrometry
            if a is not None and len(a):
                d = len(self.datasets)
                self.datasets.append({"key": f"{c.name}.positions", "label": f"{c.name} positions",
                                      "companion": c.name, "kind": "positions", "instrument": None})
                start = len(obs)
                for k in range(len(a)):
                    polar = bool(a.polar[k])
                    names = ("separation", "position_angle") if polar else ("east", "north")
                    units = ("mas", "deg") if polar else ("mas", "mas")
                    for j, (v, s) in enumerate(((a.value1[k], a.err1[k]), (a.value2[k], a.err2[k]))):
                        obs.append(float(v))
                        sig.append(float(s))
                        epoch.append(float(a.t_yr[k]))
                        kind.append(names[j])
                        unit.append(units[j])
                        comp.append(c.name)
                        inst.append("")
                        line.append(int(a.lines[k]) if len(a.lines) == len(a) else -1)
                        dset.append(d)
                        row.append(n_row)
                        second.append(j == 1)
                        corr.append(float(a.corr[k]))
                    n_row += 1
                block["astro"] = (start, len(obs), np.asarray(a.polar, bool))
            v = c.velocities
            if v is not None and len(v):
                start = len(obs)
                index = {}
                for name in space.instrument_names:
                    if np.any(v.instrument == name):
                        index[name] = len(self.datasets)
                        self.datasets.append({"key": f"{c.name}.velocities.{name}",
                                              "label": f"{c.name} velocities ({name})",
                                              "companion": c.name, "kind": "velocities", "instrument": name})
                for k in range(len(v)):
                    obs.append(float(v.rv_kms[k]))
                    sig.append(float(v.rv_err_kms[k]))
                    epoch.append(float(v.t_yr[k]))
                    kind.append("rv_central" if bool(v.central[k]) else "rv")
                    unit.append("km/s")
                    comp.append(c.name)
                    inst.append(str(v.instrument[k]))
                    line.append(int(v.lines[k]) if len(v.lines) == len(v) else -1)
                    dset.append(index[str(v.instrument[k])])
                    row.append(n_row)
                    second.append(False)
                    corr.append(0.0)
                    n_row += 1
                block["vel"] = (start, len(obs))
            self.blocks.append(block)
        self.obs = np.asarray(obs, float)
        self.err = np.asarray(sig, float)
        self.epoch = np.asarray(epoch, float)
        self.kind = np.asarray(kind, dtype=object)
        self.companion = np.asarray(comp, dtype=object)
        self.instrument = np.asarray(inst, dtype=object)
        self.line = np.asarray(line, int)
        self.unit = np.asarray(unit, dtype=object)
        self.dataset = np.asarray(dset, int)
        self.row = np.asarray(row, int)
        self.second = np.asarray(second, bool)
        self.corr = np.asarray(corr, float)
        self.is_pa = self.kind == "position_angle"
        self.is_rv = np.isin(self.kind, ["rv", "rv_central"])
        self.n_rows = n_row
        self.row_dof = np.bincount(self.row, minlength=n_row).astype(float)
        self.post = LogPosterior(space)

    @property
    def n(self) -> int:
        return int(self.obs.size)

    def model(self, theta: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Model values (n_sets, n) in the measured form, and sigma (n_sets, n) (jitter included)."""
        theta = np.atleast_2d(theta)
        space = self.space
        phys = space.unpack(theta)
        phys["_companions"] = [c.name for c in space.target.companions]
        n_sets = theta.shape[0]
        model = np.empty((n_sets, self.n))
        sigma = np.broadcast_to(self.err, (n_sets, self.n)).copy()
        for comp, block in zip(space.target.companions, self.blocks):
            a, v = comp.astrometry, comp.velocities
            pred = self.post.predict(phys, comp.name,
                                     t_astro=None if block["astro"] is None else np.asarray(a.t_yr, float),
                                     t_vel=None if block["vel"] is None else np.asarray(v.t_yr, float),
                                     central_rows=None if block["vel"] is None else np.asarray(v.central, bool))
            if block["astro"] is not None:
                start, stop, polar = block["astro"]
                east, north = pred["east_mas"], pred["north_mas"]
                first = np.where(polar[None, :], np.hypot(east, north), east)
                pa = np.mod(np.degrees(np.arctan2(east, north)), 360.0)
                second = np.where(polar[None, :], pa, north)
                model[:, start:stop:2] = first
                model[:, start + 1:stop:2] = second
            if block["vel"] is not None:
                start, stop = block["vel"]
                offsets = np.stack([phys[f"offset.{str(n)}"] for n in v.instrument], axis=1)
                jitter = np.stack([phys[f"jitter.{str(n)}"] for n in v.instrument], axis=1)
                model[:, start:stop] = pred["rv_kms"] + offsets
                sigma[:, start:stop] = np.sqrt(np.asarray(v.rv_err_kms, float)[None, :] ** 2 + jitter**2)
        return model, sigma

    def residuals(self, model: NDArray[np.float64]) -> NDArray[np.float64]:
        """O - C (n_sets, n), position-angle residuals wrapped to +-180 deg."""
        r = self.obs[None, :] - model
        r[:, self.is_pa] = np.mod(r[:, self.is_pa] + 180.0, 360.0) - 180.0
        return r

    def whiten(self, resid: NDArray[np.float64], sigma: NDArray[np.float64]) -> NDArray[np.float64]:
        """Whitened residuals: z for single values and first of a pair, decorrelated second of a pair."""
        z = resid / sigma
        w = z.copy()
        k = np.nonzero(self.second)[0]
        rho = self.corr[k]
        w[:, k] = (z[:, k] - rho * z[:, k - 1]) / np.sqrt(1.0 - rho * rho)
        return w


# ------------------------------------------------------------- best point
def _model_columns(space: ParameterSpace) -> list[int]:
    """Sampled variables that can move model values (every one but the jitters)."""
    return [k for k, name in enumerate(space.names) if name.split(".")[0] not in ("jitter", "ln_jitter")]


def _steps(theta0, scale):
    return np.where(scale > 0, 1e-4 * scale, 1e-6 * (1.0 + np.abs(theta0)))


def _jacobian(vals: _Values, theta0, sigma0, cols, h) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Whitened residuals at ``theta0`` (n,) and their Jacobian (n, len(cols)), sigma held at ``sigma0``.

    Central differences in one vectorised model call; one-sided where a step leaves the
    model's domain (e.g. e >= 1), zero where both do.
    """
    block = [theta0]
    for k in cols:
        for sgn in (1.0, -1.0):
            x = theta0.copy()
            x[k] += sgn * h[k]
            block.append(x)
    with np.errstate(all="ignore"):
        model, _ = vals.model(np.asarray(block))
        w = vals.whiten(vals.residuals(model), sigma0[None, :])
    base = w[0]
    J = np.zeros((vals.n, len(cols)))
    for j, k in enumerate(cols):
        plus, minus = w[1 + 2 * j], w[2 + 2 * j]
        if np.all(np.isfinite(plus)) and np.all(np.isfinite(minus)):
            J[:, j] = (plus - minus) / (2 * h[k])
        elif np.all(np.isfinite(plus)):
            J[:, j] = (plus - base) / h[k]
        elif np.all(np.isfinite(minus)):
            J[:, j] = (base - minus) / h[k]
    return base, J


def best_point(space: ParameterSpace, theta: NDArray[np.float64], log_post: NDArray[np.float64], *,
               polish: bool = True, max_iterations: int = 60) -> tuple[NDArray[np.float64], dict]:
    """The maximum-posterior point: the best retained sample, polished by least squares.

    Parameters
    ----------
    space : ParameterSpace
    theta : ndarray, shape (n_samples, n_dim)
        Retained samples in the sampled variables.
    log_post : ndarray, shape (n_samples,)
        Their log posterior.
    polish : bool
        From the best sample, minimise the chi-square (jitters held) with
        Levenberg-Marquardt (``scipy.optimize.least_squares``) on the whitened
        residuals, the Jacobian by vectorised central differences. The result
        is kept only when its log posterior is higher than the best sample's,
        so the point stays the highest-posterior one found.
    max_iterations : int
        Jacobian evaluations allowed to the polish.

    Returns
    -------
    theta_best : ndarray, shape (n_dim,)
    info : dict
        ``how`` ("best sample" or "polished"), ``log_posterior``,
        ``log_posterior_best_sample``, ``n_evaluations`` (parameter sets).
    """
    theta = np.atleast_2d(np.asarray(theta, float))
    log_post = np.asarray(log_post, float)
    vals = _Values(space)
    post = vals.post
    i = int(np.argmax(np.where(np.isfinite(log_post), log_post, -np.inf)))
    x0 = theta[i].copy()
    lp0 = float(post(x0[None, :])[0])
    info = {"how": "best sample", "log_posterior": lp0, "log_posterior_best_sample": lp0, "n_evaluations": 0}
    cols = _model_columns(space)
    if not polish or not cols or vals.n == 0 or not np.isfinite(lp0):
        return x0, info
    scale = theta.std(axis=0) if theta.shape[0] > 1 else np.zeros(space.ndim)
    h = _steps(x0, scale)
    _, sigma0 = vals.model(x0[None, :])
    sigma0 = sigma0[0]
    count = [0]

    def full(y):
        x = x0.copy()
        x[cols] = y
        return x

    def resid(y):
        count[0] += 1
        with np.errstate(all="ignore"):
            m, _ = vals.model(full(y)[None, :])
            w = vals.whiten(vals.residuals(m), sigma0[None, :])[0]
        return np.where(np.isfinite(w), w, 1e8)

    def jac(y):
        count[0] += 2 * len(cols) + 1
        return _jacobian(vals, full(y), sigma0, cols, h)[1]

    method = "lm" if vals.n >= len(cols) else "trf"
    try:
        with np.errstate(all="ignore"):
            res = optimize.least_squares(resid, x0[cols], jac=jac, method=method, x_scale="jac",
                                         max_nfev=max_iterations * (1 if method == "trf" else len(cols) + 1))
            x = space.wrap_angles(full(res.x)[None, :])[0]
            lp = float(post(x[None, :])[0])
    except (ValueError, np.linalg.LinAlgError) as exc:  # a degenerate start: keep the sample
        log.info("least-squares polish of the best sample failed (%s)", exc)
        lp = -np.inf
    info["n_evaluations"] = int(count[0])
    if np.isfinite(lp) and lp > lp0:
        info.update(how="polished", log_posterior=lp)
        return x, info
    return x0, info


# --------------------------------------------------------------- statistics
def _dof_shares(vals: _Values, theta0: NDArray[np.float64], sigma0: NDArray[np.float64],
                scale: NDArray[np.float64]) -> tuple[int, NDArray[np.float64], list[str]]:
    """Rank of the whitened Jacobian, per-value leverages, and the variables that move the model."""
    space = vals.space
    cols = _model_columns(space)
    if not cols or vals.n == 0:
        return 0, np.zeros(vals.n), []
    _, J = _jacobian(vals, theta0, sigma0, cols, _steps(theta0, scale))
    norms = np.linalg.norm(J, axis=0)
    live = norms > 0
    if not live.any():
        return 0, np.zeros(vals.n), []
    Jn = J[:, live] / norms[live]
    u, s, _ = np.linalg.svd(Jn, full_matrices=False)
    rank = int(np.sum(s > RANK_TOLERANCE * s[0]))
    leverage = np.sum(u[:, :rank] ** 2, axis=1)
    names = [space.names[k] for k, ok in zip(cols, live) if ok]
    return rank, leverage, names


def _tail_p(chi2: float, dof: float) -> tuple[float | None, float | None]:
    if dof <= 0:
        return None, None
    return float(stats.chi2.sf(chi2, dof)), float(stats.chi2.cdf(chi2, dof))


def _series_stats(epoch, z, groups):
    """Von Neumann ratio pieces of epoch-ordered residual series (one per group)."""
    num = den = 0.0
    n_total = n_diff = 0
    for g in np.unique(groups):
        m = groups == g
        order = np.argsort(epoch[m], kind="stable")
        x = z[m][order]
        if x.size < 2:
            continue
        num += float(np.sum(np.diff(x) ** 2))
        den += float(np.sum((x - x.mean()) ** 2))
        n_total += x.size
        n_diff += x.size - 1
    local = num / (2.0 * n_diff) if n_diff else float("nan")
    eta = num / (2.0 * den) if den > 0 else 1.0
    structure = (1.0 - eta) * math.sqrt(n_total + 1) if n_total >= 8 else 0.0
    return local, eta, structure


def _relativistic_scale(space, phys, vals, d, comp) -> tuple[float, str] | None:
    """Size of first-order relativistic terms against the median error of dataset ``d``."""
    if getattr(space.target, "relativity", None):
        return None
    m = float(phys["mass_msun"][0])
    p = float(phys[f"{comp}.period_yr"][0])
    e = float(phys[f"{comp}.ecc"][0])
    a_au = float(semimajor_axis_au(m, p))
    sel = vals.dataset == d
    med = float(np.median(vals.err[sel]))
    if vals.is_rv[sel].any():
        vp = float(periastron_speed_kms(m, a_au, e))
        shift = vp * vp / C_KMS * (1.0 / (1.0 + e) + 0.5)  # gravitational redshift + transverse Doppler
        return shift / med, f"{shift:.3g} km/s at periastron"
    dw = math.radians(float(gr_periastron_advance_deg_per_orbit(m, a_au, e)))
    a_mas = a_au / float(phys["distance_pc"][0]) * 1000.0
    span = float(np.ptp(vals.epoch[sel])) if sel.sum() > 1 else 0.0
    shift = a_mas * (1.0 + e) * dw * max(span / p, 1.0)
    return shift / med, f"{shift:.3g} mas of periastron advance over the data"


def _zero_point_text(space, inst: str) -> str:
    fixed = []
    base = "vz0" if space.target.frame == "absolute" else "systemic"
    if space.frame_idx.get(base) is None:
        fixed.append(f"the {base} velocity is fixed")
    if space.offset_idx.get(inst) is None:
        fixed.append(f"the offset of {inst} is fixed")
    return " and ".join(fixed) if fixed else "the zero-point priors are too narrow to absorb it"


def _diagnose(space, vals, phys, d, info, z, resid, sigma, row_chi2) -> list[dict]:
    """Likely causes for a poor dataset ``d``, most likely first."""
    ds = vals.datasets[d]
    sel = vals.dataset == d
    label = ds["label"]
    causes: list[dict] = []
    upper = info["p_value"] is not None and info["p_value"] < P_THRESHOLD
    lower = info["p_lower"] is not None and info["p_lower"] < P_THRESHOLD
    n_values = int(sel.sum())
    zz = z[sel].copy()
    const_share, const_kms = 0.0, 0.0
    if ds["kind"] == "velocities":
        w = 1.0 / sigma[sel] ** 2
        mean = float(np.sum(resid[sel] * w) / np.sum(w))
        const_share = float(mean * mean * np.sum(w) / max(info["chi2"], 1e-300))
        const_kms = mean
        zz = (resid[sel] - mean) / sigma[sel]
    groups = np.where(vals.second[sel], 1, 0)
    local, eta, structure = _series_stats(vals.epoch[sel], zz, groups)
    noise_scale = math.sqrt(local) if np.isfinite(local) else float("nan")
    info["noise_scale"] = noise_scale
    info["structure"] = structure
    info["constant_share"] = const_share
    rows = np.unique(vals.row[sel])
    top = float(row_chi2[rows].max() / max(info["chi2"], 1e-300)) if rows.size else 0.0

    def add(code, text):
        causes.append({"code": code, "dataset": ds["key"], "message": f"{label}: {text}"})

    far = rows[stats.chi2.sf(row_chi2[rows], vals.row_dof[rows]) < _ROW_P]
    if upper and far.size:
        rest = info["chi2"] - float(row_chi2[far].sum())
        rest_dof = info["dof"] - float(vals.row_dof[far].sum())
        if rest_dof > 0 and stats.chi2.sf(rest, rest_dof) >= P_THRESHOLD:
            k = np.nonzero(vals.row == far[np.argmax(row_chi2[far])])[0][0]
            where = f"line {vals.line[k]}, " if vals.line[k] > 0 else ""
            add("outlier", f"{far.size} row(s) beyond {ROW_SIGMA:g} sigma (worst: {where}epoch {vals.epoch[k]:.3f}); "
                "without them the rest fits: outliers, typing errors or wrong epochs")
            return causes

    if upper and ds["kind"] == "velocities" and const_share > 0.5:
        add("velocity_zero_point",
            f"the residuals share a constant offset of {const_kms:+.3g} km/s (it accounts for "
            f"{100 * const_share:.0f} % of the chi-square) while {_zero_point_text(space, ds['instrument'])}: "
            "a missing velocity zero point (heliocentric rather than barycentric velocities?); sample the "
            "systemic velocity or give the instrument an offset prior")
    if upper and np.isfinite(noise_scale) and noise_scale >= UNIT_SCALE:
        hint = " (about 1000: e.g. arcsec read as mas, m/s as km/s, or uas as mas)" \
            if 300 <= noise_scale <= 3000 else ""
        add("error_units",
            f"the scatter between neighbouring epochs is {noise_scale:.3g} times the quoted errors "
            f"(reduced chi-square {info['reduced_chi2']:.3g}): the errors look too small by ~{noise_scale:.3g}"
            f"{hint}; check the unit of the error column")
    if upper:  # a periastron signal the model lacks: before the generic "structured" reading
        rel = _relativistic_scale(space, phys, vals, d, ds["companion"])
        scatter = max(noise_scale, 1.0) if np.isfinite(noise_scale) else 1.0
        if rel is not None and rel[0] > scatter:
            add("relativistic", f"first-order relativistic terms reach {rel[1]}, {rel[0]:.3g} times the median "
                "error, and the model has none: add the relativistic terms")
    if upper and structure > STRUCTURE_Z and not (causes and causes[0]["code"] == "velocity_zero_point"
                                                   and const_share > 0.9):
        add("missing_companion",
            f"the residuals are correlated in time (von Neumann ratio {eta:.2f}, 1 for white noise; "
            f"noise between neighbouring epochs only {noise_scale:.3g} times the errors): a signal the model "
            "lacks, e.g. a second companion; or the fit sits on a wrong orbit (a period alias; see the "
            "other modes and the orbit figure)")
    if upper and top > 0.5 and n_values > 4:
        r = rows[np.argmax(row_chi2[rows])]
        k = np.nonzero(vals.row == r)[0][0]
        where = f"line {vals.line[k]}" if vals.line[k] > 0 else f"epoch {vals.epoch[k]:.3f}"
        add("outlier", f"one row ({where}, epoch {vals.epoch[k]:.3f}) carries {100 * top:.0f} % of the "
            "chi-square: an outlier, a typing error or a wrong epoch")
    white_excess = np.isfinite(noise_scale) and noise_scale >= 1.5 and structure <= STRUCTURE_Z
    if upper and not causes and white_excess and ds["kind"] == "velocities" \
            and space.jitter_idx.get(ds["instrument"]) is None:
        add("jitter", f"white residuals {noise_scale:.3g} times the errors: extra velocity scatter "
            f"(stellar jitter or an instrument floor of ~{np.median(sigma[sel]) * math.sqrt(max(local - 1, 0)):.3g}"
            f" km/s); give instrument {ds['instrument']} a jitter prior")
    if upper and white_excess and not any(c["code"] == "error_units" for c in causes) and not (
            causes and causes[0]["code"] in ("velocity_zero_point", "missing_companion", "outlier")):
        add("error_units", f"white residuals {noise_scale:.3g} times the errors: the errors look underestimated "
            "(or an error column is in a smaller unit than stated)")
    if lower:
        factor = 1.0 / math.sqrt(max(info["reduced_chi2"], 1e-300))
        add("error_units", f"reduced chi-square {info['reduced_chi2']:.3g} is far below 1: the errors look "
            f"too large by ~{factor:.3g} (an error column in a larger unit than stated?)")
    if not causes:
        add("model", "the model does not describe these data; inspect the residual figure")
    return causes


def assess_fit(space: ParameterSpace, theta: NDArray[np.float64], log_post: NDArray[np.float64], *,
               rng: np.random.Generator | None = None, n_draws: int = 200,
               polish: bool = True) -> tuple[dict, pd.DataFrame]:
    """Goodness of fit of a posterior: the ``fit_quality`` block and the residual table.

    Parameters
    ----------
    space : ParameterSpace
    theta : ndarray, shape (n_samples, n_dim)
        Retained posterior samples in the sampled variables.
    log_post : ndarray, shape (n_samples,)
        Their log posterior.
    rng : numpy.random.Generator, optional
        Draws for the posterior statistics and the predictive check
        (default: a generator seeded with 0, so results repeat).
    n_draws : int
        Posterior draws used (at most the number of samples).
    polish : bool
        Polish the best sample (see :func:`best_point`).

    Returns
    -------
    fit_quality : dict
        The ``fit_quality`` block of ``summary.json`` (output contract,
        "Goodness of fit"): ``chi2``, ``dof``, ``reduced_chi2``, ``p_value``,
        ``status``, ``datasets`` (same numbers per dataset), and
        ``reasons``, ``likely_causes``, ``n_values``, ``n_parameters`` (p of
        the dof convention), ``model_parameters`` (sampled variables that move
        some model value, plus sampled jitters), ``n_degenerate_directions``
        (how many of their combinations the data leave undetermined),
        ``point``, ``posterior``, ``thresholds``, ``dof_convention``.
    residuals : DataFrame
        One row per measured value: ``companion``, ``kind``, ``epoch_jyear``,
        ``instrument``, ``observed``, ``model``, ``sigma``, ``normalised``,
        ``unit``, ``line``, ``dataset``.
    """
    # floating-point noise of far-off trial points (polish, posterior draws) is not the user's
    # concern; every number returned is checked or reported as it is
    with np.errstate(all="ignore"):
        return _assess(space, theta, log_post, rng=rng, n_draws=n_draws, polish=polish)


def _assess(space, theta, log_post, *, rng, n_draws, polish):
    rng = np.random.default_rng(0) if rng is None else rng
    theta = np.atleast_2d(np.asarray(theta, float))
    vals = _Values(space)
    x0, point = best_point(space, theta, log_post, polish=polish)
    model0, sigma0 = vals.model(x0[None, :])
    model0, sigma0 = model0[0], sigma0[0]
    resid = vals.residuals(model0[None, :])[0]
    z = resid / sigma0
    w = vals.whiten(resid[None, :], sigma0[None, :])[0]
    chi2_values = w * w
    row_chi2 = np.bincount(vals.row, weights=chi2_values, minlength=vals.n_rows)
    row_p = stats.chi2.sf(row_chi2, vals.row_dof)
    scale = theta.std(axis=0) if theta.shape[0] > 1 else np.zeros(space.ndim)
    rank, leverage, constrained = _dof_shares(vals, x0, sigma0, scale)

    n_d = len(vals.datasets)
    share = np.bincount(vals.dataset, weights=leverage, minlength=n_d) if vals.n else np.zeros(n_d)
    n_jitter = 0
    for name in space.instrument_names:
        if space.jitter_idx.get(name) is None:
            continue
        rows = vals.instrument == name
        if rows.any():
            n_jitter += 1
            share += np.bincount(vals.dataset[rows], minlength=n_d) / rows.sum()
            constrained.append(space.names[space.jitter_idx[name]])
    p_total = rank + n_jitter
    phys = space.unpack(x0[None, :])

    # posterior draws and the predictive check
    idx = rng.choice(theta.shape[0], size=min(n_draws, theta.shape[0]), replace=False)
    chi2_draw = np.zeros((idx.size, n_d))
    step = max(1, DRAW_BLOCK_VALUES // max(vals.n, 1))  # draws per block: bounded memory on long tables
    for k in range(0, idx.size, step):
        with np.errstate(all="ignore"):
            m_draw, s_draw = vals.model(theta[idx[k: k + step]])
            w_draw = vals.whiten(vals.residuals(m_draw), s_draw)
        for d in range(n_d):
            chi2_draw[k: k + step, d] = np.sum(w_draw[:, vals.dataset == d] ** 2, axis=1)
    n_per = np.bincount(vals.dataset, minlength=n_d)
    rep = rng.chisquare(np.maximum(n_per, 1), size=(idx.size, n_d)) if n_d else np.zeros((idx.size, 0))

    def posterior_block(obs_draws, rep_draws):
        ok = np.isfinite(obs_draws)
        q = np.quantile(obs_draws[ok], [0.5, 0.15865525393145707, 0.8413447460685429]) if ok.any() \
            else [float("nan")] * 3
        return {"chi2_median": float(q[0]), "chi2_q16": float(q[1]), "chi2_q84": float(q[2]),
                "ppc_p_value": float(np.mean(rep_draws[ok] >= obs_draws[ok])) if ok.any() else None,
                "n_draws": int(ok.sum())}

    datasets: dict[str, dict] = {}
    reasons: list[str] = []
    causes: list[dict] = []
    for d, ds in enumerate(vals.datasets):
        sel = vals.dataset == d
        chi2 = float(chi2_values[sel].sum())
        dof = float(n_per[d] - share[d])
        dof = 0.0 if abs(dof) < 1e-9 else dof
        p_up, p_low = _tail_p(chi2, dof)
        rows = np.unique(vals.row[sel])
        far = rows[row_p[rows] < _ROW_P]
        band = [float(stats.chi2.ppf(P_THRESHOLD, dof) / dof), float(stats.chi2.isf(P_THRESHOLD, dof) / dof)] \
            if dof > 0 else None
        info = {
            "chi2": chi2, "dof": dof, "reduced_chi2": chi2 / dof if dof > 0 else None, "p_value": p_up,
            "status": "ok", "label": ds["label"], "companion": ds["companion"], "kind": ds["kind"],
            "instrument": ds["instrument"], "n_rows": int(rows.size), "n_values": int(n_per[d]),
            "n_parameters": float(share[d]), "p_lower": p_low, "band_reduced_chi2": band,
            "max_abs_normalised": float(np.max(np.abs(z[sel]))),
            "n_rows_beyond_5_sigma": int(far.size),
            "posterior": posterior_block(chi2_draw[:, d], rep[:, d]),
        }
        poor_here = False
        if p_up is not None and p_up < P_THRESHOLD:
            reasons.append(f"{ds['label']}: reduced chi-square {info['reduced_chi2']:.3g} for {dof:.1f} degrees "
                           f"of freedom is above its band {band[1]:.3g} (p = {_fmt_p(p_up)})")
            poor_here = True
        if p_low is not None and p_low < P_THRESHOLD:
            reasons.append(f"{ds['label']}: reduced chi-square {info['reduced_chi2']:.3g} for {dof:.1f} degrees "
                           f"of freedom is below its band {band[0]:.3g} (lower-tail p = {_fmt_p(p_low)})")
            poor_here = True
        if far.size:
            worst = np.nonzero(vals.row == far[np.argmax(row_chi2[far])])[0]
            reasons.append(f"{ds['label']}: {far.size} row(s) beyond {ROW_SIGMA:g} sigma (worst at epoch "
                           f"{vals.epoch[worst[0]]:.3f}, |O-C|/sigma = {np.max(np.abs(z[worst])):.3g})")
            poor_here = True
        if poor_here:
            info["status"] = "poor"
            if not (p_up is not None and p_up < P_THRESHOLD) and far.size:
                # only outlying rows: name them as the cause
                info_c = dict(info, p_value=0.0)
                dc = _diagnose(space, vals, phys, d, info_c, z, resid, sigma0, row_chi2)
                dc = [c for c in dc if c["code"] == "outlier"] or [{
                    "code": "outlier", "dataset": ds["key"],
                    "message": f"{ds['label']}: rows beyond {ROW_SIGMA:g} sigma: outliers, typing errors or wrong "
                               "epochs"}]
            else:
                dc = _diagnose(space, vals, phys, d, info, z, resid, sigma0, row_chi2)
            info["likely_causes"] = [c["code"] for c in dc]
            excess = chi2 - dof
            causes.extend(dict(c, _excess=excess) for c in dc)
        datasets[ds["key"]] = info

    chi2 = float(chi2_values.sum())
    dof = float(vals.n - p_total)
    p_up, _ = _tail_p(chi2, dof)
    if p_up is not None and p_up < P_THRESHOLD:
        reasons.insert(0, f"overall: chi-square {chi2:.4g} for {dof:.0f} degrees of freedom (p = {_fmt_p(p_up)})")
        if not causes:
            worst = max(datasets.values(), key=lambda x: x["reduced_chi2"] or 0.0)
            causes.append({"code": "model", "dataset": None,
                           "message": f"no single dataset is implausible on its own; {worst['label']} has the "
                                      f"largest reduced chi-square ({worst['reduced_chi2']:.3g})"})
    # the dataset that departs most from its expectation first; a dataset's own order is kept
    causes = [{k: v for k, v in c.items() if k != "_excess"}
              for c in sorted(causes, key=lambda c: -c.get("_excess", 0.0))]
    status = "poor" if reasons else "ok"
    obs_total = chi2_draw.sum(axis=1) if n_d else np.zeros(idx.size)
    rep_total = rep.sum(axis=1) if n_d else np.zeros(idx.size)
    fq = {
        "chi2": chi2,
        "dof": dof,
        "reduced_chi2": chi2 / dof if dof > 0 else None,
        "p_value": p_up,
        "status": status,
        "datasets": datasets,
        "reasons": reasons,
        "likely_causes": causes,
        "n_values": int(vals.n),
        "n_rows": int(vals.n_rows),
        "n_parameters": int(p_total),
        "model_parameters": constrained,
        "n_degenerate_directions": int(len(constrained) - p_total),
        "point": {**point, "theta": {n: float(v) for n, v in zip(space.names, x0)}},
        "posterior": posterior_block(obs_total, rep_total),
        "thresholds": {"p_value": P_THRESHOLD, "row_sigma": ROW_SIGMA},
        "dof_convention": _DOF_CONVENTION,
    }
    return fq, _table(vals, model0, sigma0)


def fit_quality(space: ParameterSpace, theta: NDArray[np.float64], log_post: NDArray[np.float64], *,
                rng: np.random.Generator | None = None, n_draws: int = 200, polish: bool = True) -> dict:
    """The ``fit_quality`` block alone (see :func:`assess_fit`)."""
    return assess_fit(space, theta, log_post, rng=rng, n_draws=n_draws, polish=polish)[0]


def quality_or_failure(space: ParameterSpace, theta: NDArray[np.float64], log_post: NDArray[np.float64], *,
                       seed: int, interrupted: bool = False) -> tuple[dict, dict]:
    """The ``fit_quality`` block and the residual table (JSON-ready columns) of a finished run.

    A failure here must not lose a finished sampling run: it is logged and the
    block says "poor" with the reason, so the fit is not presented as a good one.
    After an interruption (Ctrl-C) the statistics are taken at the best retained
    sample without the polish and with few posterior draws, so that the program
    still stops within a couple of seconds.
    """
    quick = {"polish": False, "n_draws": 20} if interrupted else {}
    try:
        fq, residuals = assess_fit(space, theta, log_post, rng=np.random.default_rng([int(seed), 11]), **quick)
    except (ValueError, FloatingPointError, np.linalg.LinAlgError, KeyError, IndexError) as exc:
        log.exception("goodness of fit could not be computed")
        reason = f"goodness of fit could not be computed ({type(exc).__name__}: {exc})"
        return {"chi2": None, "dof": None, "reduced_chi2": None, "p_value": None, "status": "poor",
                "datasets": {}, "reasons": [reason], "likely_causes": []}, {}
    return fq, residuals.to_dict(orient="list")


def residuals_table(space: ParameterSpace, theta_point: NDArray[np.float64]) -> pd.DataFrame:
    """Normalised residuals of every measured value at one point ``theta_point`` (n_dim,).

    Columns as in :func:`assess_fit` (without the dataset statistics).
    """
    vals = _Values(space)
    model, sigma = vals.model(np.asarray(theta_point, float)[None, :])
    return _table(vals, model[0], sigma[0])


def _table(vals: _Values, model: NDArray[np.float64], sigma: NDArray[np.float64]) -> pd.DataFrame:
    """The residual table of one point (``model``, ``sigma`` of shape (n,))."""
    resid = vals.residuals(model[None, :])[0]
    return pd.DataFrame({
        "companion": vals.companion.astype(str), "kind": vals.kind.astype(str), "epoch_jyear": vals.epoch,
        "instrument": vals.instrument.astype(str), "observed": vals.obs, "model": model, "sigma": sigma,
        "normalised": resid / sigma, "unit": vals.unit.astype(str), "line": vals.line,
        "dataset": [vals.datasets[d]["key"] for d in vals.dataset],
    })


# --------------------------------------------------------------- rendering
def _fmt(x, spec=".3g") -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    return format(x, spec)


def _fmt_p(p) -> str:
    if p is None:
        return "n/a"
    return "< 1e-300" if p == 0 else format(p, ".2g")


def quality_markdown(fq: dict) -> str:
    """Markdown for a report: a warning block when the fit is poor, a short table otherwise.

    Parameters
    ----------
    fq : dict
        The ``fit_quality`` block.

    Returns
    -------
    str
    """
    lines = []
    if fq.get("status") == "poor" and fq.get("chi2") is None:
        lines.append("> **Goodness of fit unknown: treat this fit as unchecked.**")
    elif fq.get("status") == "poor":
        lines.append(f"> **Poor fit: the model is implausible for these data** (chi-square {_fmt(fq['chi2'], '.4g')} "
                     f"for {_fmt(fq['dof'], '.0f')} degrees of freedom, p = {_fmt_p(fq['p_value'])}). "
                     "The numbers below are not trustworthy until this is resolved.")
    if fq.get("status") == "poor":
        lines.append(">")
        for r in fq.get("reasons", []):
            lines.append(f"> - {r}")
        if fq.get("likely_causes"):
            lines.append(">")
            lines.append("> Likely causes:")
            for c in fq["likely_causes"]:
                lines.append(f"> - {c['message']}")
        lines.append("")
    lines.append("| Dataset | values | dof | chi-square | reduced chi-square | p-value | max abs(O-C)/sigma | status |")
    lines.append("|---|---:|---:|---:|---:|---:|---:|---|")
    for d in fq.get("datasets", {}).values():
        lines.append(f"| {d['label']} | {d['n_values']} | {_fmt(d['dof'], '.1f')} | {_fmt(d['chi2'], '.4g')} | "
                     f"{_fmt(d['reduced_chi2'])} | {_fmt_p(d['p_value'])} | {_fmt(d['max_abs_normalised'], '.2f')} | "
                     f"{d['status']} |")
    lines.append(f"| all | {_fmt(fq.get('n_values'), 'd')} | {_fmt(fq['dof'], '.0f')} | {_fmt(fq['chi2'], '.4g')} | "
                 f"{_fmt(fq['reduced_chi2'])} | {_fmt_p(fq['p_value'])} | | {fq['status']} |")
    post = fq.get("posterior", {})
    if post.get("ppc_p_value") is not None:
        lines.append("")
        lines.append(f"At the maximum-posterior point ({fq['point']['how']}). Over {post['n_draws']} posterior draws "
                     f"the chi-square is {_fmt(post['chi2_median'], '.4g')} (16-84 %: {_fmt(post['chi2_q16'], '.4g')}"
                     f"-{_fmt(post['chi2_q84'], '.4g')}); posterior predictive p-value {post['ppc_p_value']:.2f}.")
    return "\n".join(lines) + "\n"


def quality_console_lines(fq: dict) -> list[str]:
    """Lines for the command line: one when the fit is ok, a warning with reasons and causes when poor."""
    head = (f"chi-square {_fmt(fq['chi2'], '.4g')} for {_fmt(fq['dof'], '.0f')} dof "
            f"(reduced {_fmt(fq['reduced_chi2'])}, p = {_fmt_p(fq['p_value'])})")
    if fq.get("status") != "poor":
        return [f"fit quality: ok, {head}"]
    out = [f"WARNING: poor fit, {head}"]
    out += [f"  {r}" for r in fq.get("reasons", [])]
    out += [f"  likely cause: {c['message']}" for c in fq.get("likely_causes", [])]
    return out


# ---------------------------------------------------------------- warnings
def issue_warnings(summary: dict) -> None:
    """Warn (``warnings.warn``) about what a fit's ``summary`` says is wrong or weak.

    * :class:`~orbitmass.exceptions.ConvergenceWarning` when
      ``diagnostics.converged`` is false, naming each parameter and criterion
      missed (:func:`orbitmass.core.diagnostics.convergence_failures`);
    * :class:`~orbitmass.exceptions.DegeneracyWarning` for separated period
      modes among the walkers, for the (omega, Omega) ambiguity of a companion
      without velocities, and for quantities of a velocity-only companion that
      only the priors determine (``prior_dominated``);
    * :class:`~orbitmass.exceptions.PoorFitWarning` when ``fit_quality.status``
      is ``"poor"``, naming the datasets and the likely causes.

    Warnings point at the caller of the caller (``Fit.fit``'s caller).
    """
    diag = summary.get("diagnostics", {})
    if diag and not diag.get("converged", True):
        per = diag.get("per_parameter", {})
        names = list(per)
        n_kept = int(diag.get("n_steps", 0)) - int(diag.get("burn", 0))
        failures = diagnostics.convergence_failures(
            names, [per[n].get("tau", np.nan) for n in names], [per[n].get("ess", np.nan) for n in names],
            [per[n].get("rhat", np.nan) for n in names], n_kept)
        why = "interrupted before convergence" if diag.get("interrupted") else "not converged"
        detail = "; ".join(failures[:6]) + (f"; and {len(failures) - 6} more" if len(failures) > 6 else "")
        warnings.warn(f"sampling {why} after {diag.get('n_steps')} steps: "
                      f"{detail or 'effective sample size below 400'}; do not quote these intervals",
                      ConvergenceWarning, stacklevel=3)
    for comp, modes in (diag.get("period_modes") or {}).items():
        if modes > 1:
            warnings.warn(f"{comp}.period: the walkers sit in {modes} separated period modes; the data do not "
                          "single out one orbit", DegeneracyWarning, stacklevel=3)
    for comp in diag.get("omega_node_ambiguous") or []:
        warnings.warn(f"{comp}: without velocities (omega, Omega) and (omega + 180 deg, Omega + 180 deg) fit "
                      "equally; the node is reported on a half turn", DegeneracyWarning, stacklevel=3)
    for comp, block in (summary.get("companions") or {}).items():
        dominated = block.get("prior_dominated") if isinstance(block, dict) else None
        if dominated:
            warnings.warn(f"{comp}: velocities only; {', '.join(dominated)} follow the priors, not the data "
                          "(the data give M sin^3 i, a sin i and the mass function)", DegeneracyWarning,
                          stacklevel=3)
    fq = summary.get("fit_quality")
    if fq and fq.get("status") == "poor":
        poor = [d["label"] for d in fq.get("datasets", {}).values() if d.get("status") == "poor"] or ["all data"]
        causes = "; ".join(c["message"] for c in fq.get("likely_causes", [])[:3])
        warnings.warn(f"poor fit in {', '.join(poor)} (chi-square {_fmt(fq['chi2'], '.4g')} for "
                      f"{_fmt(fq['dof'], '.0f')} dof, p = {_fmt_p(fq['p_value'])}). Likely: {causes}",
                      PoorFitWarning, stacklevel=3)
