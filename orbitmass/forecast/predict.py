"""Posterior-predictive positions and velocities at any epochs, and the next orbit events.

:func:`predict` gives, for every companion and epoch, the median and the
68 % and 95 % bands (the five quantiles of ``summary.json``) of the modelled
east/north offsets, separation, position angle and line-of-sight velocity over
posterior draws: the table ``predictions.csv`` of the output contract
(section "Predictions"). The model comes from
:meth:`orbitmass.results.Results.predict`, one call per block of epochs for
all draws at once; measurement noise is not added.

What is predicted
-----------------
``east_mas``, ``north_mas``
    Offsets in the frame of the data: relative to the central body in the
    relative frame; on the external frame (barycentre position, proper
    motion and reflex included) in the absolute frame.
``rho_mas``, ``theta_deg``
    Separation and position angle (north through east) of those offsets,
    per draw. Position-angle quantiles are taken after wrapping the draws of
    each epoch into +-180 deg around their circular mean, so a band never
    straddles the 0/360 deg cut; the median is in [0, 360) and the band
    edges may reach below 0 or above 360 deg when the median is near the cut
    (so that q2.5 <= q16 <= median <= q84 <= q97.5 always holds).
``rv_kms`` (only when the run has velocities)
    Modelled line-of-sight velocity of the companion (positive receding),
    including the systemic velocity (``systemic`` in the relative frame,
    ``vz0`` in the absolute frame) and the reflex of companions with a mass
    ratio; the zero-point offsets of instruments are **not** added (the
    velocity is on the scale of the first, zero-point instrument when its
    offset is fixed at 0, as by default). Blank (NaN) for a companion whose
    orbital plane has no velocity at all (the sign of its line-of-sight
    motion is then unknown).

Next events
-----------
:func:`next_events` gives, per companion, the next periastron passage after
a given epoch and the next maximum and minimum of its velocity, each with the
five quantiles of its date (and of the velocity at the extremum); the method
is that of :func:`orbitmass.forecast._common.orbit_events`.

Examples
--------
>>> import orbitmass                                           # doctest: +SKIP
>>> fit = orbitmass.load("run-1")                              # doctest: +SKIP
>>> table = fit.predict([2030.0, 2030.5])                      # doctest: +SKIP
>>> table[["companion", "epoch_jyear", "rho_mas_median"]]      # doctest: +SKIP
"""

from __future__ import annotations

import logging
from pathlib import Path
from typing import Any, Sequence

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from numpy.typing import ArrayLike, NDArray

from orbitmass.exceptions import InputError
from orbitmass.forecast._common import (
    circular_wrap_deg,
    has_line_of_sight,
    has_velocities,
    jyear_to_iso,
    model_at,
    orbit_events,
    period_obs_column,
    prepare_out_dir,
    quantiles,
    strict_json,
    write_manifest,
)
from orbitmass.outputs.figures.common import EAST_LABEL, NORTH_LABEL, RV_LABEL, TIME_LABEL
from orbitmass.outputs.style import DOUBLE_COLUMN_IN, MARKERS, PALETTE, save_figure, style_context, write_atomic
from orbitmass.results import QUANTILES, Results

__all__ = ["predict", "predictive_draws", "prediction_columns", "next_events", "prediction_figure",
           "write_predictions", "QUANTITIES"]

log = logging.getLogger(__name__)

#: predicted quantities, in the column order of the contract
QUANTITIES = ("east_mas", "north_mas", "rho_mas", "theta_deg", "rv_kms")
_SUFFIX = {"median": "median", "q16": "q16", "q84": "q84", "q2.5": "q2.5", "q97.5": "q97.5"}
#: at most this many draw x epoch values per call of Results.predict
_BLOCK_VALUES = 2_000_000


def prediction_columns(with_velocities: bool) -> list[str]:
    """Column names of ``predictions.csv``, in order (output contract, section "Predictions").

    >>> prediction_columns(False)[:4]
    ['companion', 'epoch_jyear', 'east_mas_median', 'east_mas_q16']
    >>> len(prediction_columns(True))
    27
    """
    cols = ["companion", "epoch_jyear"]
    for q in QUANTITIES:
        if q == "rv_kms" and not with_velocities:
            continue
        cols += [f"{q}_{_SUFFIX[k]}" for k in QUANTILES]
    return cols


def _epochs(epochs: ArrayLike) -> NDArray[np.float64]:
    t = np.atleast_1d(np.asarray(epochs, dtype=float))
    if t.ndim != 1 or t.size == 0:
        raise InputError("expected at least one epoch (Julian years)", key="epochs")
    if not np.all(np.isfinite(t)):
        raise InputError("epochs must be finite Julian years", key="epochs")
    return t


def _companions(results: Results, companions: Sequence[str] | None) -> list[str]:
    names = results.companion_names
    if companions is None:
        return names
    bad = [c for c in companions if c not in names]
    if bad:
        raise InputError(f"no companion {bad[0]!r} in this run (companions: {', '.join(names)})", key="companion")
    return list(companions)


def predictive_draws(results: Results, epochs: ArrayLike, *, companions: Sequence[str] | None = None,
                     n_draws: int | None = 4000, seed: int = 0) -> dict[str, dict[str, NDArray[np.float64]]]:
    """Model values of posterior draws at ``epochs`` (no noise added).

    Parameters
    ----------
    results : Results
        A fit's results (``fit.results`` or ``orbitmass.load(run_dir).results``).
    epochs : array_like, shape (n_epochs,)
        Julian years on the observed timeline.
    companions : sequence of str, optional
        Default: every companion.
    n_draws : int or None
        Random retained samples to use (None: all).
    seed : int
        Seed of the choice of draws.

    Returns
    -------
    dict
        companion -> quantity (:data:`QUANTITIES`) -> array (n_draws, n_epochs);
        ``theta_deg`` in [0, 360); ``rv_kms`` present when the run has
        velocities (NaN without line-of-sight information for the companion).
    """
    t = _epochs(epochs)
    names = _companions(results, companions)
    n_all = len(results.samples)
    if n_draws is None or n_draws >= n_all:
        rows = np.arange(n_all)
    else:
        rows = results.draws(n_draws, np.random.default_rng(seed))
    with_rv = has_velocities(results)
    block = max(1, _BLOCK_VALUES // max(len(rows), 1))
    out: dict[str, dict[str, NDArray[np.float64]]] = {}
    for c in names:
        los = has_line_of_sight(results, c)
        parts: dict[str, list[NDArray]] = {q: [] for q in ("east_mas", "north_mas", "rv_kms")}
        for lo in range(0, t.size, block):
            tb = t[lo:lo + block]
            m = model_at(results, None, c, t_astro=tb, t_vel=tb if (with_rv and los) else None, rows=rows)
            parts["east_mas"].append(m["east_mas"])
            parts["north_mas"].append(m["north_mas"])
            if with_rv:
                parts["rv_kms"].append(m["rv_kms"] if los else np.full((len(rows), tb.size), np.nan))
        east = np.concatenate(parts["east_mas"], axis=1)
        north = np.concatenate(parts["north_mas"], axis=1)
        d = {"east_mas": east, "north_mas": north, "rho_mas": np.hypot(east, north),
             "theta_deg": np.degrees(np.arctan2(east, north)) % 360.0}
        if with_rv:
            d["rv_kms"] = np.concatenate(parts["rv_kms"], axis=1)
        out[c] = d
    return out


def predict(results: Results, epochs: ArrayLike, *, companions: Sequence[str] | None = None,
            n_draws: int | None = 4000, seed: int = 0) -> pd.DataFrame:
    """Median and 68/95 % bands of the model at ``epochs``: the ``predictions.csv`` table.

    Parameters
    ----------
    results : Results
        A fit's results.
    epochs : array_like, shape (n_epochs,)
        Julian years on the observed timeline (as in the data tables).
    companions : sequence of str, optional
        Default: every companion.
    n_draws : int or None
        Posterior draws used (random retained samples; None: all). With 4000
        draws the 2.5 % quantile sits on ~100 draws: its Monte Carlo error is
        about 0.05 of the band's sd-equivalent (common practice, no source).
    seed : int
        Seed of the choice of draws.

    Returns
    -------
    DataFrame
        One row per companion and epoch, columns :func:`prediction_columns`
        (``companion``, ``epoch_jyear``, then ``q_median``, ``q_q16``,
        ``q_q84``, ``q_q2.5``, ``q_q97.5`` for each quantity; the
        velocity columns only when the run has velocities).

    Raises
    ------
    InputError
        On an unknown companion or non-finite epochs.
    """
    t = _epochs(epochs)
    draws = predictive_draws(results, t, companions=companions, n_draws=n_draws, seed=seed)
    with_rv = has_velocities(results)
    frames = []
    for c, d in draws.items():
        cols: dict[str, Any] = {"companion": [c] * t.size, "epoch_jyear": t}
        for q in QUANTITIES:
            if q not in d:
                continue
            x = d[q]
            if q == "theta_deg":
                x = circular_wrap_deg(x, axis=0)
            if np.all(np.isnan(x)):
                qs = np.full((len(QUANTILES), t.size), np.nan)
            else:
                qs = quantiles(x, axis=0)
            for k, row in zip(QUANTILES, qs):
                cols[f"{q}_{_SUFFIX[k]}"] = row
        frames.append(pd.DataFrame(cols))
    table = pd.concat(frames, ignore_index=True)
    return table[prediction_columns(with_rv)]


def next_events(results: Results, after: float, *, companions: Sequence[str] | None = None,
                n_draws: int = 500, seed: int = 0) -> dict[str, dict[str, Any]]:
    """The next periastron passage and velocity maximum and minimum after ``after``, per companion.

    Parameters
    ----------
    results : Results
        A fit's results.
    after : float
        Julian year from which "next" counts.
    companions : sequence of str, optional
        Default: every companion.
    n_draws : int
        Posterior draws used.
    seed : int
        Seed of the choice of draws.

    Returns
    -------
    dict
        companion -> {``"periastron"``, ``"velocity_max"``, ``"velocity_min"``}
        -> event (see :func:`orbitmass.forecast._common.orbit_events`: date
        quantiles ``epoch_jyear``, ``date_utc``, ``p_before_start`` = the
        probability that this passage in fact came before ``after``, and
        ``rv_kms`` quantiles for extrema) or None when not defined (circular
        orbit; no line-of-sight information for extrema). Also
        ``"period_obs_yr"`` (quantiles) for context.
    """
    names = _companions(results, companions)
    out: dict[str, dict[str, Any]] = {}
    for c in names:
        period = results.samples[period_obs_column(results, c)].to_numpy()
        span = float(np.nanquantile(period, 0.975)) * 1.05
        evs = orbit_events(results, after, after + span, companions=[c], n_draws=n_draws, seed=seed)
        entry: dict[str, Any] = {"periastron": None, "velocity_max": None, "velocity_min": None}
        for ev in evs:
            if entry.get(ev["event"]) is None:
                entry[ev["event"]] = ev
        q = quantiles(period[np.isfinite(period)])
        entry["period_obs_yr"] = {k: float(v) for k, v in zip(QUANTILES, q)}
        entry["line_of_sight"] = has_line_of_sight(results, c)
        out[c] = entry
    return out


def _fmt_event(ev: dict | None, what: str) -> str:
    if ev is None:
        return f"- {what}: not defined for this run"
    b = ev["epoch_jyear"]
    text = (f"- {what}: **{b['median']:.3f}** ({ev['date_utc']}); 68 %: {b['q16']:.3f} to {b['q84']:.3f}, "
            f"95 %: {b['q2.5']:.3f} to {b['q97.5']:.3f}")
    if "rv_kms" in ev and ev["rv_kms"]["median"] is not None:
        v = ev["rv_kms"]
        text += f"; velocity {v['median']:.1f} km/s (68 %: {v['q16']:.1f} to {v['q84']:.1f})"
    if ev.get("p_before_start"):
        text += f"; probability it came before the start: {ev['p_before_start']:.2f}"
    return text


def events_markdown(events: dict[str, dict[str, Any]], after: float, target: str) -> str:
    """Plain-language Markdown of :func:`next_events`."""
    lines = [f"# Next orbit events: {target}", "",
             f"After epoch {after:.3f} ({jyear_to_iso(after)[0]}). Dates are Julian years (TDB) on the observed "
             "timeline, with the posterior median and the 68 % and 95 % intervals; velocities are the modelled "
             "companion line-of-sight velocity including the systemic velocity, without instrument offsets.", ""]
    for c, e in events.items():
        lines.append(f"## {c}")
        lines.append("")
        lines.append(_fmt_event(e["periastron"], "next periastron passage"))
        if e["line_of_sight"]:
            lines.append(_fmt_event(e["velocity_max"], "next velocity maximum"))
            lines.append(_fmt_event(e["velocity_min"], "next velocity minimum"))
        else:
            lines.append("- velocity extrema: not defined (no velocities on this orbital plane, so the sign "
                         "of the line-of-sight motion is unknown)")
        p = e["period_obs_yr"]
        lines.append(f"- period (observed timeline): {p['median']:.4g} yr (68 %: {p['q16']:.4g} to {p['q84']:.4g})")
        lines.append("")
    return "\n".join(lines)


# ---------------------------------------------------------------------- figure
def prediction_figure(results: Results, epochs: ArrayLike, *, events: dict | None = None,
                      companions: Sequence[str] | None = None, n_draws: int = 1000, n_tracks: int = 60,
                      seed: int = 0):
    """Predicted sky track and velocity curve with 68/95 % bands and the data.

    One row per companion: the sky plane (east to the left) with the data,
    posterior-draw tracks over the data and prediction span and the median
    predicted positions at ``epochs``; east and north offsets against time
    with bands; and, where the run has velocities, the velocity curve with
    bands and the velocities measured (zero-point offsets of the instruments
    removed with their posterior medians). The predicted span is shaded and
    the next periastron passages (``events``, from :func:`next_events`)
    are marked.

    Returns
    -------
    matplotlib.figure.Figure
    """

    t_pred = _epochs(epochs)
    names = _companions(results, companions)
    with_rv = has_velocities(results)
    n_cols = 3 if with_rv else 2
    blue, verm, grey = PALETTE["blue"], PALETTE["vermillion"], "#7f7f7f"
    offsets = results.velocity_offsets()
    with style_context():
        fig = Figure(figsize=(DOUBLE_COLUMN_IN, 2.6 * len(names) + 0.8), layout="constrained")
        axes = fig.subplots(len(names), n_cols, squeeze=False)
        for r, c in enumerate(names):
            comp = results.space.companion(c)
            t_data = []
            if comp.astrometry is not None and len(comp.astrometry):
                t_data.append(np.asarray(comp.astrometry.t_yr))
            if comp.velocities is not None and len(comp.velocities):
                t_data.append(np.asarray(comp.velocities.t_yr))
            t_all = np.concatenate(t_data + [t_pred])
            lo, hi = float(t_all.min()), float(t_all.max())
            pad = 0.02 * (hi - lo if hi > lo else 1.0)
            grid = np.linspace(lo - pad, hi + pad, 600)
            d = predictive_draws(results, grid, companions=[c], n_draws=n_draws, seed=seed)[c]
            # sky
            ax = axes[r, 0]
            for k in range(min(n_tracks, d["east_mas"].shape[0])):
                ax.plot(d["east_mas"][k], d["north_mas"][k], color=grey, lw=0.4, alpha=0.25, zorder=1,
                        label="posterior-draw tracks" if k == 0 else None)
            in_pred = (grid >= t_pred.min()) & (grid <= t_pred.max())
            med_e, med_n = np.median(d["east_mas"], axis=0), np.median(d["north_mas"], axis=0)
            if t_pred.size > 1:
                ax.plot(med_e[in_pred], med_n[in_pred], color=verm, lw=1.4, zorder=3, label="predicted track (median)")
            pt = predictive_draws(results, t_pred[:: max(1, t_pred.size // 25)], companions=[c],
                                  n_draws=n_draws, seed=seed)[c]
            e_q, n_q = quantiles(pt["east_mas"]), quantiles(pt["north_mas"])
            ax.errorbar(e_q[0], n_q[0], xerr=[e_q[0] - e_q[3], e_q[4] - e_q[0]],
                        yerr=[n_q[0] - n_q[3], n_q[4] - n_q[0]], fmt="D", ms=2.5, color=verm, lw=0.7,
                        zorder=4, label="predicted positions (95 %)")
            if comp.astrometry is not None and len(comp.astrometry):
                east, north = comp.astrometry.east_north()
                se, sn = comp.astrometry.east_north_errors()
                ax.errorbar(east, north, xerr=se, yerr=sn, fmt="o", ms=2.5, color=blue, lw=0.6, zorder=5,
                            label="positions measured")
            if results.target.frame == "relative":
                ax.plot([0], [0], marker="+", color="black", ms=7, lw=0, zorder=6, label="central body")
            ax.set_xlabel(EAST_LABEL.format(unit="mas"))
            ax.set_ylabel(NORTH_LABEL.format(unit="mas"))
            ax.set_aspect("equal", adjustable="datalim")
            if not ax.xaxis_inverted():
                ax.invert_xaxis()  # east to the left, as on the sky
            ax.set_title(f"{c}: sky track", loc="left")
            # east/north vs time
            ax = axes[r, 1]
            for q, colour, lab in (("east_mas", blue, "east"), ("north_mas", PALETTE["bluish_green"], "north")):
                qs = quantiles(d[q])
                ax.fill_between(grid, qs[3], qs[4], color=colour, alpha=0.18, lw=0)
                ax.fill_between(grid, qs[1], qs[2], color=colour, alpha=0.35, lw=0)
                ax.plot(grid, qs[0], color=colour, lw=1.0, label=f"{lab} offset (median, 68/95 % bands)")
            if comp.astrometry is not None and len(comp.astrometry):
                ax.errorbar(comp.astrometry.t_yr, east, yerr=se, fmt="o", ms=2.2, color=blue, lw=0.5)
                ax.errorbar(comp.astrometry.t_yr, north, yerr=sn, fmt="s", ms=2.2, color=PALETTE["bluish_green"],
                            lw=0.5)
            ax.set_xlabel(TIME_LABEL)
            ax.set_ylabel("offset [mas]")
            ax.set_title(f"{c}: positions", loc="left")
            time_axes = [ax]
            if with_rv:
                ax = axes[r, 2]
                if "rv_kms" in d and np.isfinite(d["rv_kms"]).any():
                    qs = quantiles(d["rv_kms"])
                    ax.fill_between(grid, qs[3], qs[4], color=verm, alpha=0.18, lw=0, label="velocity: 95 % band")
                    ax.fill_between(grid, qs[1], qs[2], color=verm, alpha=0.35, lw=0, label="velocity: 68 % band")
                    ax.plot(grid, qs[0], color=verm, lw=1.0, label="velocity: median")
                    vel = comp.velocities
                    if vel is not None and len(vel):
                        own = ~np.asarray(vel.central)
                        insts = [str(x) for x in vel.instrument]
                        for k, name in enumerate(dict.fromkeys(insts)):
                            m = own & (np.array(insts) == name)
                            if m.any():
                                rv = np.asarray(vel.rv_kms)[m] - offsets.get(name, 0.0)
                                ax.errorbar(np.asarray(vel.t_yr)[m], rv, yerr=np.asarray(vel.rv_err_kms)[m],
                                            fmt=MARKERS[k % len(MARKERS)], ms=2.5, color=blue, lw=0.5,
                                            label=f"velocity measured ({name}, offset removed)")
                else:
                    ax.text(0.5, 0.5, "no line-of-sight information\nfor this orbital plane", ha="center",
                            va="center", transform=ax.transAxes)
                ax.set_xlabel(TIME_LABEL)
                ax.set_ylabel(RV_LABEL)
                ax.set_title(f"{c}: velocity", loc="left")
                time_axes.append(ax)
            for ax in time_axes:
                ax.axvspan(float(t_pred.min()), float(t_pred.max()) if t_pred.size > 1 else float(t_pred.min()) + pad,
                           color=PALETTE["yellow"], alpha=0.3, lw=0, zorder=0, label="predicted span")
                ev = (events or {}).get(c, {}).get("periastron")
                t_ev = None if ev is None else ev["epoch_jyear"]["median"]
                if t_ev is not None and grid[0] <= t_ev <= grid[-1]:
                    ax.axvline(t_ev, color="black", ls="--", lw=0.7, label="next periastron")
        handles: dict[str, Any] = {}
        for ax in axes.flat:
            for h, lab in zip(*ax.get_legend_handles_labels()):
                handles.setdefault(lab, h)
        fig.legend(list(handles.values()), list(handles.keys()), loc="outside lower center", ncol=4, fontsize=7)
    return fig


# ---------------------------------------------------------------------- files
def write_predictions(results: Results, epochs: ArrayLike, out_dir: str | Path, *, after: float | None = None,
                      overwrite: bool = False, n_draws: int | None = 4000, seed: int = 0,
                      run_dir: str = "") -> dict[str, Path]:
    """Write ``predictions.csv``, ``predictions.png``/``.pdf``, ``next_events.json``/``.md`` into ``out_dir``.

    Parameters
    ----------
    results : Results
        A fit's results.
    epochs : array_like
        Julian years.
    out_dir : path
        New or empty folder, or an earlier predictions folder with ``overwrite``
        (see :func:`orbitmass.forecast._common.prepare_out_dir`); nothing else
        is ever replaced.
    after : float, optional
        Epoch from which the next events count (default: the earliest of ``epochs``).
    overwrite : bool
        Replace an earlier predictions folder.
    n_draws, seed : int
        Draws used and their seed.
    run_dir : str
        Recorded in the manifest.

    Returns
    -------
    dict
        File role -> path.
    """

    t = _epochs(epochs)
    prepare_out_dir(out_dir, kind="predictions", overwrite=overwrite, check_only=True)  # refuse before the work
    table = predict(results, t, n_draws=n_draws, seed=seed)
    after = float(t.min()) if after is None else float(after)
    events = next_events(results, after, seed=seed)
    fig = prediction_figure(results, t, events=events, seed=seed, n_draws=min(1000, n_draws or 1000))
    out = prepare_out_dir(out_dir, kind="predictions", overwrite=overwrite)
    paths: dict[str, Path] = {}
    paths["predictions"] = write_atomic(out / "predictions.csv", table.to_csv(index=False, float_format="%.10g"))
    paths["events_json"] = write_atomic(out / "next_events.json", strict_json(
        {"target": results.target.name, "after_jyear": after, "companions": events}))
    paths["events_md"] = write_atomic(out / "next_events.md", events_markdown(events, after, results.target.name))
    png, pdf = save_figure(fig, out / "predictions")
    paths["figure_png"], paths["figure_pdf"] = png, pdf
    write_manifest(out, kind="predictions", files=[p.name for p in paths.values()], run_dir=run_dir,
                   extra={"n_epochs": int(t.size), "seed": int(seed),
                          "n_draws": None if n_draws is None else int(min(n_draws, len(results.samples)))})
    log.info("predictions written to %s", out)
    return paths

