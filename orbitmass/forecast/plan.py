"""Which next epochs weigh the mass best: expected posterior shrinkage from a new measurement.

Method
------
The quantity planned for (the total mass by default; any sampled or derived
quantity with ``quantity=``) is followed as ``f = ln q`` for positive scale
quantities (mass, distance, parallax, periods, semimajor axes, periastron
distances, speeds, component masses) and as ``f = q`` otherwise, so the
numbers are relative uncertainties for the former.

1. *Current posterior.* The retained samples in the sampled variables
   ``theta`` (dimension ``d``) are standardised, ``z = (theta - mean) / sd``;
   their correlation matrix ``R`` is the current posterior covariance in
   ``z``. ``f`` is linearised over the posterior by least squares,
   ``g = R^-1 cov(z, f)`` (for ``ln M`` this is exactly the ``ln_mass``
   axis), so ``var f ~= g' R g``.
2. *Information of a new measurement.* For ``S`` posterior draws ``z_s``
   (default 200) the model of the measurement at epoch ``t`` is
   differentiated by central finite differences in every ``z_j`` (step
   ``1e-3`` posterior sd), through :meth:`orbitmass.results.Results.predict`
   for all draws, steps and epochs in one block: ``J_s(t)``, rows east and
   north (mas) for a position, the line-of-sight velocity (km/s, plus 1 for
   the offset of the assumed instrument when it is sampled) for a velocity.
   With the measurement covariance ``N`` (``sigma_pos^2`` per coordinate;
   ``sigma_v^2 + jitter^2`` with the posterior-median jitter of the assumed
   instrument), the Fisher information of the measurement if draw ``s`` were
   the truth is ``F_s(t) = J_s' N^-1 J_s``.
3. *Expected posterior.* Each draw's information is combined with the
   current posterior as for Gaussians: ``C_s(t) = (R^-1 + F_s(t))^-1``; the
   expected posterior variance of ``f`` is the average over the draws,
   ``V(t) = mean_s g' C_s(t) g`` (a Bayesian, "pre-posterior" expectation).
   Averaging the variances, not the information, matters where the draws
   disagree on the sign of a derivative: the two mirror orientations of an
   astrometric orbit give velocities of opposite sign, and an averaged
   information matrix would then see two independent measurements where
   there is one. The expected shrinkage factor of the sd is
   ``sqrt(V / g' R g)``; the expected reduction ``1 - factor`` (in %) is what
   the table ranks.
4. *Sets of epochs.* Greedy: start from ``R^-1``, add (per draw) the ``F_s``
   of the measurement with the largest reduction per unit cost, repeat ``K`` times
   (each epoch at most once per kind and companion). Greedy selection of an
   information (D/A-optimal-like) criterion is standard practice in
   experimental design (common practice, no source). The same is computed for
   ``K`` evenly spaced epochs in the window, as a yardstick.

Velocity zero point: in a run with velocities the systemic velocity (``vz0``
in the absolute frame) and the assumed instrument's offset are sampled
variables (or fixed by the user, hence known) and enter ``J`` as above. A run
without velocities has no such variable, yet a first velocity's zero point is
unknown: it is added as one more variable with the default systemic-velocity
prior (sd ``NEW_LEVEL_SD_KMS``), shared by all new velocities, so a single
velocity carries almost no information on the scale and sets of velocities
gain from differences between phases.

Kinds of measurement are planned separately (a position, i.e. an east/north
pair of the companion; a velocity of the companion), each with its own cost
(default 1 each); "pays more" compares reduction per unit cost.

Limits (said in every recommendation): this is a linearised (Laplace)
expectation. It does not see gains from resolving a multimodal posterior (a
period alias, the (omega, Omega) ambiguity a first velocity removes) and it is
approximate when the posterior is far from Gaussian (a short arc); the
measurement noise is the stated precision, not a promise.

Longer than 600 lines because the planning method, its table, its figure and its
recommendation text share the linearised-variance machinery and read best together.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter
from numpy.typing import ArrayLike, NDArray

from orbitmass.exceptions import InputError
from orbitmass.forecast._common import (
    jyear_to_iso,
    model_at,
    orbit_events,
    period_obs_column,
    prepare_out_dir,
    quantiles,
    reference_row,
    strict_json,
    write_manifest,
)
from orbitmass.forecast.predict import predictive_draws
from orbitmass.outputs.figures.common import TIME_LABEL
from orbitmass.outputs.style import DOUBLE_COLUMN_IN, PALETTE, save_figure, style_context, write_atomic
from orbitmass.results import Results

__all__ = ["plan", "Plan", "resolve_quantity", "parse_costs", "KINDS"]

log = logging.getLogger(__name__)

#: kinds of measurement planned for
KINDS = ("positions", "velocities")
#: relative finite-difference step, in posterior sd of each sampled variable
FD_STEP = 1e-3
#: prior sd (km/s) of the unknown zero point of new velocities in a run without velocities: the
#: default systemic-velocity prior, uniform over +-1000 km/s (input format), sd = 2000 / sqrt(12)
NEW_LEVEL_SD_KMS = 2000.0 / math.sqrt(12.0)
#: memory for the per-draw information matrices (bytes); beyond it fewer draws are used
MAX_FISHER_BYTES = 1e8
_LOG_SUFFIXES = ("mass_msun", "distance_pc", "parallax_mas", "schwarzschild_radius_au", ".period_yr",
                 ".period_obs_yr", ".semimajor_axis_mas", ".semimajor_axis_au", ".periastron_au",
                 ".periastron_rs", ".periastron_speed_kms", ".semi_amplitude_kms")
_ALIASES = {"mass": "mass_msun", "distance": "distance_pc", "parallax": "parallax_mas"}
_ONE = {"positions": "position", "velocities": "velocity"}
_SYMBOL = {"mass_msun": "M", "distance_pc": "D", "parallax_mas": "parallax"}
_WORDS = {"mass_msun": "total mass", "distance_pc": "distance", "parallax_mas": "parallax"}


def resolve_quantity(results: Results, name: str) -> str:
    """The samples column a quantity name means.

    Accepts a column (``mass_msun``, ``C1.period_yr``), a short name
    (``mass``, ``distance``, ``parallax``), or a companion quantity without
    its unit (``C1.period``; ``period`` alone when there is one companion).

    Raises
    ------
    InputError
        On an unknown name, listing what is available.
    """
    cols = [c for c in results.samples.columns if c != "log_posterior"]
    key = _ALIASES.get(name, name)
    if key in cols:
        return key
    cands = [c for c in cols if c.startswith(key + "_") or c.split(".", 1)[-1].startswith(key + "_")]
    if len(results.companion_names) == 1:
        cands += [c for c in cols if c == f"{results.companion_names[0]}.{key}"]
    cands = sorted(set(cands))
    if len(cands) == 1:
        return cands[0]
    if len(cands) > 1:
        raise InputError(f"{name!r} is ambiguous: one of {', '.join(cands)}", key="--for")
    raise InputError(f"no quantity {name!r} in this run; available: {', '.join(cols)}", key="--for")


def parse_costs(text: str | Mapping[str, float] | None) -> dict[str, float]:
    """Costs per kind from ``"positions=1,velocities=2"`` (or a mapping); missing kinds cost 1.

    >>> parse_costs("velocities=2.5")
    {'positions': 1.0, 'velocities': 2.5}
    """
    costs = {k: 1.0 for k in KINDS}
    if text is None:
        return costs
    items = text.items() if isinstance(text, Mapping) else (
        part.split("=", 1) if "=" in part else (part, "") for part in str(text).split(",") if part.strip())
    for k, v in items:
        k = str(k).strip()
        if k not in KINDS:
            raise InputError(f"unknown kind {k!r} in the costs; expected {' or '.join(KINDS)}, e.g. "
                             "'positions=1,velocities=2'", key="--cost")
        try:
            value = float(v)
        except (TypeError, ValueError):
            raise InputError(f"cost of {k} must be a positive number, got {v!r}", key="--cost") from None
        if not (math.isfinite(value) and value > 0):
            raise InputError(f"cost of {k} must be a positive number, got {v!r}", key="--cost")
        costs[k] = value
    return costs


def _log_scale(col: str, x: NDArray) -> bool:
    return col.endswith(_LOG_SUFFIXES) and bool(np.all(x > 0))


@dataclass
class Plan:
    """Result of :func:`plan`.

    Attributes
    ----------
    quantity : str
        Samples column planned for; ``log_scale`` says whether ``f = ln q``.
    sd_now : float
        Posterior sd of ``f`` now (from the samples).
    table : DataFrame
        One row per candidate epoch and companion, ranked (column ``rank``):
        ``epoch_jyear``, ``date_utc``, ``companion``, per kind
        ``<kind>_sd_after`` (expected sd of ``f``) and
        ``<kind>_reduction_pct``, ``<kind>_reduction_per_cost`` and
        ``<kind>_rank`` (the candidates ranked for that kind alone);
        ``best_kind`` (the kind that pays more per unit cost),
        ``best_reduction_pct``, ``orbital_phase`` (fraction of the period
        since periastron, reference orbit) and ``nearest_event``.
    sets : DataFrame
        Greedy sets: ``set`` (``positions``, ``velocities``, ``mixed`` = any
        kind, cost-aware, ``even-positions``, ``even-velocities``), ``step``,
        ``epoch_jyear``, ``date_utc``, ``companion``, ``kind``, ``cost``,
        ``cumulative_cost``, ``sd_after`` and ``reduction_pct`` (cumulative).
    events : list
        Periastron passages and velocity extrema in the window.
    options : dict
        Inputs (precisions, costs, draws, instrument, seed, window) and
        ``reference_orbit`` (period and periastron time per companion of the
        highest-posterior draw, which the phases refer to).
    """

    quantity: str
    log_scale: bool
    sd_now: float
    table: pd.DataFrame
    sets: pd.DataFrame
    events: list
    options: dict
    target: str = ""
    curves: dict = field(default_factory=dict)

    # ----------------------------------------------------------------- text
    @property
    def label(self) -> str:
        """What the uncertainty is of (``ln mass_msun`` or the quantity)."""
        name = _SYMBOL.get(self.quantity, self.quantity)
        return f"ln {name}" if self.log_scale else name

    def markdown(self, figure: str | None = "plan.png") -> str:
        """Short plain-language recommendation (Markdown)."""
        o = self.options
        rel = (lambda s: f"{100 * s:.2g} %") if self.log_scale else (lambda s: f"{s:.3g}")
        what_q = _WORDS.get(self.quantity, self.quantity)
        if self.log_scale:
            now = (f"its relative uncertainty (the sd of {self.label} over the posterior) is now "
                   f"{rel(self.sd_now)}")
        else:
            now = f"its posterior sd is now {rel(self.sd_now)}"
        lines = [f"# Observing plan: {self.target}", ""]
        lines.append(f"Goal: shrink the uncertainty of the {what_q} (`{self.quantity}`): {now}. "
                     f"Candidate epochs {o['window'][0]:.3f} to {o['window'][1]:.3f} every {o['cadence_yr']:.4g} yr; "
                     f"a new position measured to {o['precision_mas']:g} mas per coordinate, a new velocity to "
                     f"{o['velocity_precision_kms']:g} km/s"
                     + (f" (instrument {o['instrument']}; its posterior-median jitter, {o['jitter_kms']:.3g} km/s, "
                        "added in quadrature)"
                        if o.get("instrument") else "")
                     + f"; costs: positions {o['costs']['positions']:g}, velocities {o['costs']['velocities']:g}.")
        lines.append("")
        best = self.table.iloc[0]
        lines.append(f"**Best single measurement:** a {_ONE[best['best_kind']]} of {best['companion']} at "
                     f"{best['epoch_jyear']:.3f} ({best['date_utc']}){_event_text(best['nearest_event'])}: the "
                     f"uncertainty is expected to shrink by {best['best_reduction_pct']:.1f} % "
                     f"(from {rel(self.sd_now)} to {rel(best[best['best_kind'] + '_sd_after'])}).")
        n = len(self.table)
        n_pos = int((self.table["best_kind"] == "positions").sum())
        lines.append("")
        top_pos = self.table["positions_reduction_pct"].max()
        top_vel = self.table["velocities_reduction_pct"].max()
        lines.append(f"Per unit cost, positions pay more at {n_pos} of {n} candidate epochs and velocities at "
                     f"{n - n_pos}. Largest single gains: positions {top_pos:.1f} %, velocities {top_vel:.1f} %.")
        lines.append("")
        lines.append(f"Best sets of {o['max_epochs']} measurements (chosen one at a time, each adding the largest "
                     "further reduction; reductions are of the uncertainty now):")
        lines.append("")
        for name in ("mixed", "positions", "velocities"):
            s = self.sets[self.sets["set"] == name]
            if s.empty:
                continue
            even = self.sets[self.sets["set"] == f"even-{name}"] if name != "mixed" else None
            what = {"mixed": "any kind, cost-aware", "positions": "positions only",
                    "velocities": "velocities only"}[name]
            picks = ", ".join(f"{r.epoch_jyear:.3f} ({r.date_utc}, {_ONE[r.kind]})" for r in s.itertuples())
            text = (f"- **{len(s)} epochs, {what}:** {picks}: expected reduction "
                    f"{s['reduction_pct'].iloc[-1]:.1f} % (cost {s['cumulative_cost'].iloc[-1]:g})")
            if even is not None and not even.empty:
                text += f"; {len(even)} evenly spaced epochs would give {even['reduction_pct'].iloc[-1]:.1f} %"
            lines.append(text + ".")
        lines.append("")
        if self.events:
            ev = "; ".join(f"{e['event'].replace('_', ' ')} of {e['companion']} {e['epoch_jyear']['median']:.3f} "
                           f"({e['date_utc']})" for e in self.events[:12])
            lines.append(f"Orbit phase in the window: {ev}.")
            lines.append("")
        if figure:
            lines.append(f"![Expected uncertainty reduction against date]({figure})")
            lines.append("")
        lines.append(f"Method: for each of {o['n_draws']} posterior draws, the Fisher information of the new "
                     "measurement "
                     "(model derivatives by finite differences through the orbit model) is combined with the "
                     "current posterior covariance in the sampled variables, and the resulting posterior "
                     "variances are averaged over the draws; the number is the "
                     f"expected posterior sd of {self.label} after adding the measurement. It is a linearised "
                     "expectation: gains from resolving a multimodal posterior (a period alias, or the orientation "
                     "ambiguity a first velocity removes) are not counted. On a short arc (no periastron seen, "
                     "a small part of the period covered) the posterior is far from Gaussian and the numbers "
                     "are rough, and the dates of the events they point to are themselves uncertain: check "
                     "them with `orbitmass predict`, and refit and plan again after each new measurement.")
        if not o.get("run_has_velocities"):
            lines.append("")
            lines.append("This run has no velocities: a first velocity also fixes which way the orbit is "
                         "oriented along the line of sight, a gain this estimate does not include.")
            if o.get("velocity_zero_point_sd_kms"):
                lines.append(f"The zero point of new velocities (the systemic velocity) is unknown and counted as "
                             f"one more free variable (prior sd {o['velocity_zero_point_sd_kms']:.0f} km/s, the "
                             "default systemic-velocity prior): a single velocity then says almost nothing about "
                             "the orbit's scale; the velocity sets need at least two epochs at different phases.")
        return "\n".join(lines) + "\n"

    # ----------------------------------------------------------------- figure
    def figure(self):
        """Expected uncertainty reduction against date, per kind, with periastron passages and velocity extrema.

        Returns
        -------
        matplotlib.figure.Figure
        """

        colours = {"positions": PALETTE["blue"], "velocities": PALETTE["vermillion"]}
        styles = {"positions": "-", "velocities": "--"}
        has_curve = bool(self.curves)
        with style_context():
            fig = Figure(figsize=(DOUBLE_COLUMN_IN, 4.2 if has_curve else 2.6), layout="constrained")
            axes = fig.subplots(2 if has_curve else 1, 1, sharex=True, squeeze=False,
                                     gridspec_kw={"height_ratios": [1.6, 1]} if has_curve else None)
            ax = axes[0, 0]
            comps = list(dict.fromkeys(self.table["companion"]))
            tab = self.table.sort_values("epoch_jyear")
            for ci, c in enumerate(comps):
                t = tab[tab["companion"] == c]
                for kind in KINDS:
                    lab = f"position ({self.options['precision_mas']:g} mas)" if kind == "positions" else \
                        f"velocity ({self.options['velocity_precision_kms']:g} km/s)"
                    if len(comps) > 1:
                        lab = f"{c}: {lab}"
                    ax.plot(t["epoch_jyear"], t[f"{kind}_reduction_pct"], color=colours[kind], ls=styles[kind],
                            lw=1.2, alpha=1.0 if ci == 0 else 0.6, label=lab)
            mixed = self.sets[self.sets["set"] == "mixed"]
            for r in mixed.itertuples():
                y = tab[(tab["companion"] == r.companion) & np.isclose(tab["epoch_jyear"], r.epoch_jyear)]
                if len(y):
                    ax.plot([r.epoch_jyear], [y[f"{r.kind}_reduction_pct"].iloc[0]], marker="o", ms=5, mfc="none",
                            color=colours[r.kind], lw=0)
                    ax.annotate(str(r.step), (r.epoch_jyear, y[f"{r.kind}_reduction_pct"].iloc[0]),
                                textcoords="offset points", xytext=(4 if r.step % 2 else -9, 4), fontsize=7)
            ax.plot([], [], marker="o", mfc="none", color="black", lw=0,
                    label=f"best {len(mixed)} (any kind), in order;\n{mixed['reduction_pct'].iloc[-1]:.1f} % together"
                    if len(mixed) else "best set")
            ax.set_ylabel(f"expected reduction of\nsd({self.label}) [%]")
            ax.set_ylim(bottom=0)
            ax.set_title(f"{self.target}: one more measurement", loc="left")
            _phase_axis(ax, self.options.get("reference_orbit", {}))
            for a in axes[:, 0]:
                _mark_events(a, self.events, label=a is ax)
            ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7)
            if has_curve:
                a2 = axes[1, 0]
                for ci, (c, cur) in enumerate(self.curves.items()):
                    col = [PALETTE["bluish_green"], PALETTE["reddish_purple"], PALETTE["orange"]][ci % 3]
                    a2.fill_between(cur["t"], cur["q16"], cur["q84"], color=col, alpha=0.3, lw=0)
                    a2.plot(cur["t"], cur["median"], color=col, lw=1.0, label=f"{c} (median, 68 %)")
                a2.set_ylabel(next(iter(self.curves.values()))["label"])
                a2.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=7)
            axes[-1, 0].set_xlabel(TIME_LABEL)
        return fig

    # ----------------------------------------------------------------- files
    def write(self, out_dir: str | Path, *, overwrite: bool = False, run_dir: str = "") -> dict[str, Path]:
        """Write ``plan.csv`` (ranked), ``plan_sets.csv``, ``plan.md``, ``plan.json``, ``plan.png``/``.pdf``.

        ``out_dir`` must be new or empty, or an earlier plan folder with
        ``overwrite`` (nothing else is ever replaced).
        """

        out = prepare_out_dir(out_dir, kind="plan", overwrite=overwrite)
        paths = {"table": write_atomic(out / "plan.csv", self.table.to_csv(index=False, float_format="%.8g")),
                 "sets": write_atomic(out / "plan_sets.csv", self.sets.to_csv(index=False, float_format="%.8g")),
                 "markdown": write_atomic(out / "plan.md", self.markdown("plan.png")),
                 "json": write_atomic(out / "plan.json", strict_json(
                     {"target": self.target, "quantity": self.quantity, "log_scale": self.log_scale,
                      "sd_now": self.sd_now, "options": self.options, "events": self.events,
                      "best": self.table.iloc[0].to_dict(), "method": __doc__.split("Method\n------\n")[1]}))}
        fig = self.figure()
        paths["figure_png"], paths["figure_pdf"] = save_figure(fig, out / "plan")
        write_manifest(out, kind="plan", files=[p.name for p in paths.values()], run_dir=run_dir)
        return paths


def _event_text(ev: str) -> str:
    return f", {ev}" if ev else ""


def _phase_axis(ax, ref_orbit: Mapping[str, Mapping[str, float]]) -> None:
    """Orbital phase of the first companion (reference orbit; 0 = periastron) on the top axis."""
    if not ref_orbit:
        return
    name, orb = next(iter(ref_orbit.items()))
    per, tp = float(orb["period_obs_yr"]), float(orb["periastron_jyear"])
    if not (math.isfinite(per) and per > 0 and math.isfinite(tp)):
        return
    top = ax.secondary_xaxis("top", functions=(lambda t: (t - tp) / per, lambda ph: tp + ph * per))
    top.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v % 1.0:.2f}".rstrip("0").rstrip(".")))
    top.set_xlabel(f"orbital phase of {name} (0 = periastron, reference orbit)", fontsize=8)
    top.tick_params(labelsize=7)


def _mark_events(ax, events, *, label: bool) -> None:
    seen = set()
    for e in events:
        t = e["epoch_jyear"]["median"]
        if e["event"] == "periastron":
            kw = {"color": "black", "ls": ":", "lw": 0.9}
            lab = "periastron"
        elif e["event"] == "velocity_max":
            kw = {"color": "#7f7f7f", "ls": "-.", "lw": 0.7}
            lab = "velocity max / min"
        else:
            kw = {"color": "#7f7f7f", "ls": "-.", "lw": 0.7}
            lab = "velocity max / min"
        ax.axvline(t, label=lab if (label and lab not in seen) else None, **kw)
        seen.add(lab)


# ---------------------------------------------------------------------- core
def _standardised(results: Results):
    theta = np.asarray(results.theta, dtype=float)
    mean = theta.mean(axis=0)
    sd = theta.std(axis=0)
    if np.any(~np.isfinite(sd)) or np.any(sd <= 0):
        bad = [results.space.names[j] for j in np.flatnonzero(~(sd > 0))]
        raise InputError(f"the posterior has no spread in {', '.join(bad)}; cannot plan", key="run")
    z = (theta - mean) / sd
    R = np.corrcoef(z, rowvar=False) if theta.shape[1] > 1 else np.ones((1, 1))
    return mean, sd, z, np.atleast_2d(R)


def _jacobians(results, rows, mean, sd, companion, epochs, kind, offset_index):
    """Per-draw model derivatives in the standardised variables: (n_draws, n_epochs, n_obs, d)."""
    theta0 = np.asarray(results.theta, dtype=float)[rows]
    n, d = theta0.shape
    steps = np.zeros((2 * d, d))
    for j in range(d):
        steps[2 * j, j] = FD_STEP * sd[j]
        steps[2 * j + 1, j] = -FD_STEP * sd[j]
    block = (theta0[:, None, :] + steps[None, :, :]).reshape(n * 2 * d, d)
    if kind == "positions":
        m = model_at(results, block, companion, t_astro=epochs)
        vals = np.stack([m["east_mas"], m["north_mas"]], axis=-1)  # (n*2d, n_t, 2)
    else:
        m = model_at(results, block, companion, t_vel=epochs)
        vals = m["rv_kms"][..., None]
    vals = vals.reshape(n, d, 2, len(epochs), vals.shape[-1])
    J = (vals[:, :, 0] - vals[:, :, 1]) / (2 * FD_STEP)  # (n, d, n_t, n_obs): d model / d z_j
    J = np.moveaxis(J, 1, -1)  # (n, n_t, n_obs, d)
    if kind == "velocities" and offset_index is not None:
        J[..., 0, offset_index] += sd[offset_index]
    return J


def _draw_mean_var(P_base: NDArray, F: NDArray, g: NDArray) -> NDArray:
    """Mean over the draw axis (second to last of the stack) of g' (P_base + F_s)^-1 g."""
    return _expected_var(P_base, F, g).mean(axis=-1)


def _expected_var(P_base: NDArray, F: NDArray, g: NDArray) -> NDArray:
    """g' (P_base + F)^-1 g for a stack of information matrices F (..., d, d)."""
    A = P_base + F
    x = np.linalg.solve(A, np.broadcast_to(g, A.shape[:-1])[..., None])[..., 0]
    return np.einsum("...i,...i->...", x, np.broadcast_to(g, x.shape))


def plan(results: Results, epochs: ArrayLike, *, quantity: str = "mass", precision_mas: float = 0.5,
         velocity_precision_kms: float = 1.0, costs: Mapping[str, float] | str | None = None, max_epochs: int = 3,
         n_draws: int = 200, seed: int = 0, companions: Sequence[str] | None = None,
         instrument: str | None = None) -> Plan:
    """Rank candidate epochs by the expected shrinkage of a posterior (see the module docstring).

    Parameters
    ----------
    results : Results
        A fit's results.
    epochs : array_like, shape (n_epochs,)
        Candidate epochs (Julian years), e.g. a window at a cadence.
    quantity : str
        What to plan for (:func:`resolve_quantity`): ``"mass"`` (default),
        ``"distance"``, ``"C1.period"``, any samples column.
    precision_mas : float
        1-sigma error of each coordinate of a new position (mas).
    velocity_precision_kms : float
        1-sigma error of a new velocity (km/s); the assumed instrument's
        posterior-median jitter is added in quadrature.
    costs : mapping or str, optional
        Cost per kind (:func:`parse_costs`); default 1 each.
    max_epochs : int
        Size ``K`` of the greedy sets.
    n_draws : int
        Posterior draws over which the Fisher information is averaged.
    seed : int
        Seed of the choice of draws.
    companions : sequence of str, optional
        Companions whose measurements are considered (default all).
    instrument : str, optional
        Instrument of a new velocity (default: the run's first, zero-point
        instrument, when there is one).

    Returns
    -------
    Plan

    Raises
    ------
    InputError
        On an unknown quantity, companion or instrument, or non-positive precisions.
    """
    t = np.atleast_1d(np.asarray(epochs, dtype=float))
    if t.ndim != 1 or t.size == 0 or not np.all(np.isfinite(t)):
        raise InputError("expected at least one finite candidate epoch (Julian years)", key="--window")
    for val, key in ((precision_mas, "--precision"), (velocity_precision_kms, "--velocity-precision")):
        if not (math.isfinite(val) and val > 0):
            raise InputError(f"expected a positive precision, got {val!r}", key=key)
    if not (isinstance(max_epochs, (int, np.integer)) and max_epochs >= 1):
        raise InputError(f"expected a whole number >= 1, got {max_epochs!r}", key="--max-epochs")
    cost = parse_costs(costs)
    names = list(companions) if companions is not None else results.companion_names
    for c in names:
        if c not in results.companion_names:
            raise InputError(f"no companion {c!r} in this run (companions: {', '.join(results.companion_names)})",
                             key="companion")
    col = resolve_quantity(results, quantity)
    space = results.space
    inst_names = list(space.instrument_names)
    if instrument is not None and instrument not in inst_names:
        raise InputError(f"no instrument {instrument!r} in this run (instruments: {', '.join(inst_names) or 'none'})",
                         key="--instrument")
    inst = instrument if instrument is not None else (inst_names[0] if inst_names else None)
    jitter = float(np.median(results.samples[f"jitter_kms.{inst}"])) if inst is not None else 0.0
    offset_index = space.index.get(f"offset.{inst}") if inst is not None else None
    var_v = velocity_precision_kms ** 2 + jitter ** 2

    mean, sd, z, R = _standardised(results)
    x = results.samples[col].to_numpy(dtype=float)
    log_scale = _log_scale(col, x)
    f = np.log(x) if log_scale else x
    ok = np.isfinite(f)
    cov_zf = (z[ok] * (f[ok] - f[ok].mean())[:, None]).mean(axis=0)
    P = np.linalg.pinv(R, hermitian=True)
    g = P @ cov_zf
    var_lin = float(g @ R @ g)
    sd_now = float(np.std(f[ok]))
    if not var_lin > 0:
        raise InputError(f"{col} does not vary with the sampled variables; nothing to plan", key="--for")
    P = np.linalg.inv(R + 1e-12 * np.eye(R.shape[0]))
    rows = results.draws(n_draws, np.random.default_rng(seed))
    # one information matrix per draw, epoch, kind and companion is kept: fewer draws for very many epochs
    per_draw = 8.0 * t.size * (R.shape[0] + 1) ** 2 * len(KINDS) * len(names)
    rows = rows[:max(10, min(len(rows), int(MAX_FISHER_BYTES // per_draw)))]
    run_has_velocities = any(cc.has_velocities for cc in results.target.companions)
    # A run without velocities has no velocity zero point among its variables (no systemic velocity,
    # no offset), yet the zero point of a first velocity is unknown: it joins the variables as one more,
    # with the default prior of the systemic velocity, so that one velocity alone says little about the
    # scale and two at different phases say more (their difference).
    level_sd = NEW_LEVEL_SD_KMS if (not run_has_velocities and offset_index is None
                                    and not any(k in space.index for k in ("systemic", "vz0"))) else None

    # Fisher information per candidate (kind, companion): (n_epochs, d, d)
    fisher: dict[tuple[str, str], NDArray] = {}
    chunk = max(1, int(4_000_000 // max(1, len(rows) * 2 * R.shape[0])))
    for c in names:
        for kind in KINDS:
            Fs = []
            for lo in range(0, t.size, chunk):
                J = _jacobians(results, rows, mean, sd, c, t[lo:lo + chunk], kind, offset_index)
                if level_sd is not None:  # d model / d z_level: level_sd for a velocity, 0 for a position
                    J = np.concatenate([J, np.full(J.shape[:-1] + (1,), level_sd if kind == "velocities" else 0.0)],
                                       axis=-1)
                w = 1.0 / (precision_mas ** 2 if kind == "positions" else var_v)
                good = np.all(np.isfinite(J), axis=(1, 2, 3))
                if not good.any():
                    raise InputError(f"the model of {c} gives no finite derivatives; cannot plan", key="run")
                J[~good] = 0.0  # a draw without a finite model there gains nothing from the measurement
                Fs.append(w * np.einsum("snoi,snoj->nsij", J, J))
            fisher[(kind, c)] = np.concatenate(Fs, axis=0)  # (n_epochs, n_draws, d, d): one per draw
    if level_sd is not None:  # the zero point's prior, in its standardised variable: precision 1
        d0 = P.shape[0]
        P = np.block([[P, np.zeros((d0, 1))], [np.zeros((1, d0)), np.ones((1, 1))]])
        g = np.append(g, 0.0)

    def factor(F):
        return np.sqrt(np.clip(_draw_mean_var(P, F, g), 0, None) / var_lin)

    # reference orbit: phase and events
    t_lo, t_hi = float(t.min()), float(t.max())
    events = orbit_events(results, t_lo, t_hi, companions=names, seed=seed)
    rows_out = []

    ref = reference_row(results)
    ref_orbit: dict[str, dict] = {}
    for c in names:
        per = float(results.samples[period_obs_column(results, c)].iloc[ref])
        tp = float(results.samples[f"{c}.periastron_time_jyr"].iloc[ref])
        ref_orbit[c] = {"period_obs_yr": per, "periastron_jyear": tp}
        phase = ((t - tp) / per) % 1.0
        rec: dict[str, Any] = {"epoch_jyear": t, "date_utc": jyear_to_iso(t), "companion": [c] * t.size,
                               "orbital_phase": phase}
        per_cost = []
        for kind in KINDS:
            fac = factor(fisher[(kind, c)])
            rec[f"{kind}_sd_after"] = sd_now * fac
            rec[f"{kind}_reduction_pct"] = 100.0 * (1.0 - fac)
            rec[f"{kind}_reduction_per_cost"] = (1.0 - fac) / cost[kind]
            per_cost.append(rec[f"{kind}_reduction_per_cost"])
        best = np.where(per_cost[1] > per_cost[0], "velocities", "positions")
        rec["best_kind"] = best
        rec["best_reduction_pct"] = np.where(best == "velocities", rec["velocities_reduction_pct"],
                                             rec["positions_reduction_pct"])
        near = []
        ev_c = [e for e in events if e["companion"] == c]
        for tt in t:
            label = ""
            if ev_c:
                e = min(ev_c, key=lambda e: abs(e["epoch_jyear"]["median"] - tt))
                if abs(e["epoch_jyear"]["median"] - tt) <= 0.05 * per:
                    label = f"near {e['event'].replace('_', ' ')} ({e['epoch_jyear']['median']:.3f})"
            near.append(label)
        rec["nearest_event"] = near
        rows_out.append(pd.DataFrame(rec))
    table = pd.concat(rows_out, ignore_index=True)
    table["_score"] = np.maximum(table["positions_reduction_per_cost"], table["velocities_reduction_per_cost"])
    table = table.sort_values("_score", ascending=False, kind="stable").drop(columns="_score").reset_index(drop=True)
    table.insert(0, "rank", np.arange(1, len(table) + 1))
    for kind in KINDS:  # each kind ranked on its own, by its reduction per unit cost (1 = best)
        order = np.argsort(-table[f"{kind}_reduction_per_cost"].to_numpy(), kind="stable")
        ranks = np.empty(len(table), dtype=int)
        ranks[order] = np.arange(1, len(table) + 1)
        table.insert(table.columns.get_loc(f"{kind}_reduction_per_cost") + 1, f"{kind}_rank", ranks)

    sets = _greedy_sets(fisher, P, g, var_lin, sd_now, t, names, cost, max_epochs)
    curves = _context_curves(results, t, names, seed)
    options = {"window": [t_lo, t_hi], "cadence_yr": float(np.median(np.diff(t))) if t.size > 1 else 0.0,
               "n_epochs": int(t.size), "precision_mas": float(precision_mas),
               "velocity_precision_kms": float(velocity_precision_kms), "costs": cost, "max_epochs": int(max_epochs),
               "n_draws": int(len(rows)), "seed": int(seed), "instrument": inst, "jitter_kms": jitter,
               "companions": names, "sd_linearised": math.sqrt(var_lin),
               "run_has_velocities": run_has_velocities,
               "velocity_zero_point_sd_kms": level_sd,
               "reference_orbit": ref_orbit}
    return Plan(quantity=col, log_scale=log_scale, sd_now=sd_now, table=table, sets=sets, events=events,
                options=options, target=results.target.name, curves=curves)


def _greedy_sets(fisher, P, g, var_lin, sd_now, t, names, cost, K) -> pd.DataFrame:
    out = []
    n_s = next(iter(fisher.values())).shape[1]
    for set_name, kinds in (("mixed", KINDS), ("positions", ("positions",)), ("velocities", ("velocities",))):
        info = np.zeros((n_s,) + P.shape)  # information gathered so far, per draw
        used: set = set()
        total = 0.0
        fac_now = 1.0
        for step in range(1, K + 1):
            best = None
            for kind in kinds:
                for c in names:
                    F = fisher[(kind, c)]
                    fac = np.sqrt(np.clip(_draw_mean_var(P, info[None] + F, g), 0, None) / var_lin)
                    gain = (1 - fac / fac_now) / (cost[kind] if set_name == "mixed" else 1.0)
                    for i in np.argsort(-gain):
                        if (kind, c, i) not in used:
                            if best is None or gain[i] > best[0]:
                                best = (gain[i], kind, c, int(i), fac[i])
                            break
            if best is None:
                break
            _, kind, c, i, fac = best
            used.add((kind, c, i))
            info = info + fisher[(kind, c)][i]
            fac_now = fac
            total += cost[kind]
            out.append({"set": set_name, "step": step, "epoch_jyear": float(t[i]), "date_utc": jyear_to_iso(t[i])[0],
                        "companion": c, "kind": kind, "cost": cost[kind], "cumulative_cost": total,
                        "sd_after": sd_now * fac, "reduction_pct": 100 * (1 - fac)})
    # yardstick: K evenly spaced epochs across the window (first companion)
    idx = np.unique(np.round(np.linspace(0, t.size - 1, K)).astype(int)) if K > 1 else np.array([t.size // 2])
    for kind in KINDS:
        info = np.zeros((n_s,) + P.shape)
        total = 0.0
        for step, i in enumerate(idx, start=1):
            info = info + fisher[(kind, names[0])][i]
            fac = float(np.sqrt(max(float(_draw_mean_var(P, info, g)), 0.0) / var_lin))
            total += cost[kind]
            out.append({"set": f"even-{kind}", "step": step, "epoch_jyear": float(t[i]),
                        "date_utc": jyear_to_iso(t[i])[0], "companion": names[0], "kind": kind, "cost": cost[kind],
                        "cumulative_cost": total, "sd_after": sd_now * fac, "reduction_pct": 100 * (1 - fac)})
    return pd.DataFrame(out)


def _context_curves(results, t, names, seed) -> dict:
    """Predicted velocity (or separation) over the window for the figure's lower panel."""

    grid = np.linspace(float(t.min()), float(t.max()), 400) if t.size > 1 else t
    d = predictive_draws(results, grid, companions=names, n_draws=500, seed=seed)
    out = {}
    for c, dd in d.items():
        use_rv = "rv_kms" in dd and np.isfinite(dd["rv_kms"]).any()
        q = quantiles(dd["rv_kms"] if use_rv else dd["rho_mas"])
        out[c] = {"t": grid, "median": q[0], "q16": q[1], "q84": q[2],
                  "label": r"predicted $v_\mathrm{LOS}$ [km s$^{-1}$]" if use_rv else "predicted separation [mas]"}
    return out
