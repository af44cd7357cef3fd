"""The demo's black-hole star fitted with and without the relativistic terms.

The invented star QD-S4 (:mod:`orbitmass.demo.scenarios`) has data simulated
with general relativity to first post-Newtonian order
(:mod:`orbitmass.demo.simulate_pn`). The demo fits them twice, with the
``[relativity]`` table (``target.toml``) and with Keplerian orbits
(``target-kepler.toml``); :func:`relativity_comparison` states the mass shift
and the fitted factors, :func:`residual_figure` shows the velocity residuals
around periastron under both models.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np

from orbitmass.model.likelihood import predict_system
from orbitmass.outputs.figures.common import TIME_LABEL
from orbitmass.outputs.style import PALETTE, figure_size, save_figure, style_context

__all__ = ["relativity_comparison", "relativity_figure", "residual_figure"]

log = logging.getLogger(__name__)


def _sigma(block: dict) -> float:
    return 0.5 * (block["q84"] - block["q16"])


def relativity_comparison(rel_summary: dict, kepler_summary: dict) -> dict:
    """Mass and distance of the two fits, their shifts (Keplerian minus relativistic), and the factors.

    Returns
    -------
    dict
        ``mass_msun`` / ``distance_pc``: ``{"relativistic": block, "keplerian": block,
        "shift": number, "shift_sigma": shift in the relativistic fit's sigma}``;
        ``factors``: the sampled factors of the relativistic fit (quantile blocks);
        ``converged``: both fits' flags.
    """
    out: dict = {}
    for key in ("mass_msun", "distance_pc"):
        rel, kep = rel_summary["derived"][key], kepler_summary["derived"][key]
        shift = kep["median"] - rel["median"]
        out[key] = {"relativistic": rel, "keplerian": kep, "shift": shift, "shift_sigma": shift / _sigma(rel)}
    out["factors"] = {k: rel_summary["derived"][k] for k in ("redshift_factor", "precession_factor")
                      if k in rel_summary["derived"]}
    out["converged"] = {"relativistic": bool(rel_summary["diagnostics"]["converged"]),
                        "keplerian": bool(kepler_summary["diagnostics"]["converged"])}
    return out


def _velocity_residuals(results, companion: str, t_grid):
    """Residuals of the velocity rows (data - posterior-mean model, offsets removed) and the mean model curve."""
    comp = next(c for c in results.target.companions if c.name == companion)
    vel = comp.velocities
    offsets = results.velocity_offsets()
    rv = np.asarray(vel.rv_kms) - np.array([offsets[str(i)] for i in vel.instrument])
    rows = results.draws(400, np.random.default_rng(0))
    model = np.mean(results.predict(companion, t_vel=np.asarray(vel.t_yr), rows=rows)["rv_kms"], axis=0)
    curve = np.mean(results.predict(companion, t_vel=t_grid, rows=rows)["rv_kms"], axis=0)
    return vel, rv - model, curve


def _redshift_curve(results, companion: str, t_grid):
    """The redshift term of ``results``' model on ``t_grid``: the mean model minus the same with the factor at 0."""
    space = results.space
    idx = space.index.get("redshift_factor")
    if idx is None:
        return None
    theta = results.theta[results.draws(400, np.random.default_rng(0))]
    off = theta.copy()
    off[:, idx] = 0.0
    on_v = predict_system(space, space.unpack(theta), companion, t_vel=t_grid)["rv_kms"]
    off_v = predict_system(space, space.unpack(off), companion, t_vel=t_grid)["rv_kms"]
    return np.mean(on_v - off_v, axis=0)


def residual_figure(rel_results, kepler_results, companion: str, dest_without_suffix, *,
                    periastron_jyr: float, half_width_yr: float = 2.0) -> list[Path]:
    """:func:`relativity_figure` written as PNG and PDF to ``dest_without_suffix``; the paths written."""
    fig = relativity_figure(rel_results, kepler_results, companion, periastron_jyr=periastron_jyr,
                            half_width_yr=half_width_yr)
    written = save_figure(fig, dest_without_suffix)
    log.info("wrote %s", ", ".join(str(p) for p in written))
    return written


def relativity_figure(rel_results, kepler_results, companion: str, *, periastron_jyr: float,
                      half_width_yr: float = 2.0):
    """Velocity residuals around periastron under both models (a :class:`matplotlib.figure.Figure`).

    Top: residuals of the line-of-sight velocities (data minus the
    posterior-mean model, instrument offsets removed) of the Keplerian and
    the relativistic fit against time, within ``half_width_yr`` of the
    periastron. Bottom: the difference of the two models' mean velocity
    curves (Keplerian minus relativistic) on a fine grid, and the redshift term
    of the relativistic fit (its model minus the same with the factor at 0):
    the Keplerian fit absorbs most of that term by changing the orbit, which is
    what biases its mass and distance. The dotted line marks the periastron
    epoch ``periastron_jyr``.
    """
    from matplotlib.figure import Figure  # start-up time: matplotlib only when the figure is drawn
    from matplotlib.ticker import MaxNLocator  # start-up time

    t_grid = np.linspace(periastron_jyr - half_width_yr, periastron_jyr + half_width_yr, 400)
    vel, res_rel, curve_rel = _velocity_residuals(rel_results, companion, t_grid)
    _, res_kep, curve_kep = _velocity_residuals(kepler_results, companion, t_grid)
    t = np.asarray(vel.t_yr)
    err = np.asarray(vel.rv_err_kms)
    near = np.abs(t - periastron_jyr) <= half_width_yr
    with style_context():
        fig = Figure(figsize=figure_size(1, aspect=1.05))
        ax, ax2 = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [1.6, 1.0], "hspace": 0.08})
        ax.axhline(0.0, color=PALETTE["black"], lw=0.6)
        ax.errorbar(t[near] - 0.02, res_kep[near], yerr=err[near], fmt="s", color=PALETTE["vermillion"],
                    ms=3.5, lw=0.8, label="Keplerian orbit")
        ax.errorbar(t[near] + 0.02, res_rel[near], yerr=err[near], fmt="o", color=PALETTE["blue"], ms=3.5,
                    lw=0.8, label="with redshift, precession, Rømer delay")
        ax.axvline(periastron_jyr, color=PALETTE["black"], lw=0.5, ls=":", label="periastron")
        ax.set_ylabel("velocity O − C [km s$^{-1}$]")
        ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=1, borderaxespad=0.2)
        ax2.axhline(0.0, color=PALETTE["black"], lw=0.6)
        ax2.plot(t_grid, curve_kep - curve_rel, color=PALETTE["bluish_green"], lw=1.2,
                 label="Keplerian − relativistic model")
        redshift = _redshift_curve(rel_results, companion, t_grid)
        if redshift is not None:
            ax2.plot(t_grid, redshift, color=PALETTE["orange"], lw=1.2, ls="--",
                     label="redshift term (relativistic fit)")
        lo, hi = ax2.get_ylim()
        ax2.set_ylim(lo, hi + 0.55 * (hi - lo))  # room for the legend above the curves
        ax2.legend(loc="upper left", fontsize=7)
        ax2.axvline(periastron_jyr, color=PALETTE["black"], lw=0.5, ls=":")
        ax2.set_ylabel("velocity [km s$^{-1}$]")
        ax2.set_xlabel(TIME_LABEL)
        ax2.set_xlim(t_grid[0], t_grid[-1])
        ax2.xaxis.set_major_locator(MaxNLocator(5))
    return fig
