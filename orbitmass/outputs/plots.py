"""Figures of a fit: corner plot, orbits with data and residuals, walker traces.

One function per figure. Each takes a :class:`~orbitmass.results.Results`
first, every option keyword-only, draws into ``fig`` when given (an empty
:class:`matplotlib.figure.Figure`) and returns the figure. Styling passes
through ``*_kwargs`` dictionaries to the matplotlib calls. The shared look
of :mod:`orbitmass.outputs.style` is applied inside each call only.

New figures are plain :class:`matplotlib.figure.Figure` objects, not pyplot
figures: nothing is registered globally, so many can be made in a loop; save
them with :func:`orbitmass.outputs.style.save_figure`.

Sky-plane convention
    East (increasing right ascension, ``Δα cos δ``) points to the LEFT and
    north up, as the sky is seen; the x axis is therefore inverted.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from orbitmass.exceptions import InputError
from orbitmass.outputs.reports import QUANTITIES, QUANTITY_UNITS, choose_exponent, format_value
from orbitmass.outputs.style import DOUBLE_COLUMN_IN, MARKERS, PALETTE, SINGLE_COLUMN_IN, style_context
from orbitmass.results import QUANTILES, Results

__all__ = ["corner_figure", "orbit_figure", "trace_figure", "axis_label", "default_corner_columns"]

logger = logging.getLogger(__name__)

#: unit text of COLUMN_DOC -> matplotlib (mathtext) form
_MPL_UNITS = {
    "M_sun": r"$M_\odot$",
    "pc": "pc",
    "mas": "mas",
    "au": "au",
    "km/s": r"km s$^{-1}$",
    "mas/yr": r"mas yr$^{-1}$",
    "yr": "yr",
    "Julian yr": "Julian yr",
    "deg": "deg",
    "R_S": r"$R_\mathrm{S}$",
    "": "",
}
_MPL_UNITS_IN_MATH = {
    "M_sun": r"M_\odot",
    "pc": r"\mathrm{pc}",
    "mas": r"\mathrm{mas}",
    "au": r"\mathrm{au}",
    "km/s": r"\mathrm{km\,s^{-1}}",
    "mas/yr": r"\mathrm{mas\,yr^{-1}}",
    "yr": r"\mathrm{yr}",
    "Julian yr": r"\mathrm{yr}",
    "deg": r"\mathrm{deg}",
    "R_S": r"R_\mathrm{S}",
    "": "",
}

TIME_LABEL = "Epoch [Julian yr]"
RV_LABEL = r"$v_\mathrm{LOS}$ [km s$^{-1}$]"
EAST_LABEL = r"$\Delta\alpha\,\cos\delta$ [{unit}]"
NORTH_LABEL = r"$\Delta\delta$ [{unit}]"
#: angular extent (mas) above which sky panels switch to arcsec
ARCSEC_ABOVE_MAS = 5000.0


def _mpl_text(text: str) -> str:
    """User text made safe for matplotlib (no accidental mathtext)."""
    return str(text).replace("$", r"\$")


def _split(column: str, companions: Sequence[str]) -> tuple[str, str, str]:
    """(base, companion, instrument) of a sample column name."""
    head, _, tail = column.partition(".")
    if tail and head in companions:
        return tail, head, ""
    if tail:
        return head, "", tail
    return head, "", ""


def axis_label(
    column: str, companions: Sequence[str] = (), *, exponent: int = 0, show_companion: bool = True
) -> str:
    """Axis label with symbol and unit for a sample column, e.g. ``"$P$ [yr]"``.

    Parameters
    ----------
    column : str
        Column of :attr:`Results.samples`, e.g. ``"mass_msun"`` or ``"C1.period_yr"``.
    companions : sequence of str
        Companion names (to recognise the ``"<C>."`` prefix).
    exponent : int
        Power of ten the plotted values were divided by; shown in the unit,
        e.g. ``"$M$ [$10^{6}\\,M_\\odot$]"``.
    show_companion : bool
        Prefix the companion name.

    Returns
    -------
    str
        A matplotlib (mathtext) label.
    """
    base, comp, inst = _split(column, companions)
    if base not in QUANTITIES:
        return _mpl_text(column)
    symbol = "$" + QUANTITIES[base][1] + "$"
    unit = QUANTITY_UNITS[base]
    if exponent:
        inner = _MPL_UNITS_IN_MATH[unit]
        unit_text = f"$10^{{{exponent}}}" + (r"\," + inner if inner else "") + "$"
    else:
        unit_text = _MPL_UNITS[unit]
    label = symbol
    if inst:
        label += f" {_mpl_text(inst)}"
    if comp and show_companion:
        label = f"{_mpl_text(comp)}: {label}"
    return f"{label} [{unit_text}]" if unit_text else label


def _varies(values: NDArray[np.float64]) -> bool:
    finite = values[np.isfinite(values)]
    return finite.size > 1 and float(np.ptp(finite)) > 0.0


def default_corner_columns(results: Results, max_panels: int = 8) -> list[str]:
    """Key columns for the corner plot, constant ones left out.

    Mass and distance, then per companion period, eccentricity, inclination
    and angular semimajor axis; when that exceeds ``max_panels``, only the
    period and eccentricity of each companion (and, if still too many, the
    first companions that fit).
    """
    samples = results.samples

    def keep(cols):
        return [
            c for c in cols if c in samples.columns and _varies(samples[c].to_numpy(dtype=float))
        ]

    head = keep(["mass_msun", "distance_pc"])
    full = head + keep(
        [
            f"{c}.{b}"
            for c in results.companion_names
            for b in ("period_yr", "eccentricity", "inclination_deg", "semimajor_axis_mas")
        ]
    )
    if len(full) <= max_panels:
        return full
    short = head + keep(
        [f"{c}.{b}" for c in results.companion_names for b in ("period_yr", "eccentricity")]
    )
    if len(short) > max_panels:
        logger.info("corner plot limited to %d panels; pass columns= to choose", max_panels)
        short = short[:max_panels]
    return short


def corner_figure(
    results: Results,
    *,
    columns: Sequence[str] | None = None,
    labels: Sequence[str] | None = None,
    fig: Any = None,
    title_kwargs: Mapping[str, Any] | None = None,
    **corner_kwargs: Any,
) -> Any:
    """Corner plot of the key posterior quantities (via the ``corner`` package).

    Parameters
    ----------
    results : Results
        The posterior.
    columns : sequence of str, optional
        Sample columns to show (default :func:`default_corner_columns`).
    labels : sequence of str, optional
        Axis labels (default: symbol and unit, large numbers scaled by a power of ten).
    fig : matplotlib.figure.Figure, optional
        Empty figure to draw into (default: a new one, 3.5 in wide for up to
        three panels, else 7.2 in).
    title_kwargs : dict, optional
        Passed to ``Axes.set_title`` for the value-and-error titles.
    **corner_kwargs
        Passed to :func:`corner.corner` (overrides the defaults set here).

    Returns
    -------
    matplotlib.figure.Figure
        Panels show 1-D histograms with the 15.9/50/84.1 % quantiles dashed and
        titled with the median and its asymmetric errors; 2-D panels show the
        39.3 % and 86.5 % (1 and 2 sigma for a 2-D Gaussian) contours.

    Raises
    ------
    InputError
        If a column is unknown or constant, or ``labels`` has the wrong length.
    """
    import corner
    from matplotlib.figure import Figure

    companions = results.companion_names
    cols = list(columns) if columns is not None else default_corner_columns(results)
    if not cols:
        raise InputError("no varying column to show in the corner plot", key="columns")
    data = []
    exps = []
    for col in cols:
        if col not in results.samples.columns:
            raise InputError(
                f"unknown sample column {col!r}; expected one of "
                f"{', '.join(results.samples.columns)}",
                key="columns",
            )
        x = results.samples[col].to_numpy(dtype=float)
        if not _varies(x):
            raise InputError(f"column {col!r} is constant; it cannot be shown", key="columns")
        k = choose_exponent(float(np.median(x[np.isfinite(x)])))
        exps.append(k)
        data.append(x / 10.0**k)
    if labels is not None and len(labels) != len(cols):
        raise InputError(f"{len(labels)} labels for {len(cols)} columns", key="labels")
    if labels is None:
        labels = [
            axis_label(c, companions, exponent=k, show_companion=len(companions) > 1)
            for c, k in zip(cols, exps, strict=True)
        ]
    xs = np.column_stack(data)
    xs = xs[np.all(np.isfinite(xs), axis=1)]
    n = len(cols)
    q_lo, q_hi = QUANTILES["q16"], QUANTILES["q84"]
    with style_context():
        if fig is None:
            width = SINGLE_COLUMN_IN if n <= 3 else DOUBLE_COLUMN_IN
            fig = Figure(figsize=(width, width))
        opts: dict[str, Any] = dict(
            labels=list(labels),
            quantiles=[q_lo, 0.5, q_hi],
            show_titles=False,
            color=PALETTE["blue"],
            bins=30,
            smooth=1.0,
            plot_datapoints=False,
            fill_contours=True,
            levels=(1 - math.exp(-0.5), 1 - math.exp(-2.0)),
            max_n_ticks=3 if n > 4 else 4,
            label_kwargs={"fontsize": 9},
            hist_kwargs={"linewidth": 0.9},
            contour_kwargs={"linewidths": 0.7},
        )
        opts.update(corner_kwargs)
        fig = corner.corner(xs, fig=fig, **opts)
        width, height = fig.get_size_inches()
        # margins in inches (corner scales them for 2-in panels)
        title_h = 0.3
        fig.subplots_adjust(
            left=0.75 / width,
            bottom=0.75 / height,
            right=1 - 0.08 / width,
            top=1 - title_h / height,
            wspace=0.06,
            hspace=0.06,
        )
        axes = np.asarray(fig.axes).reshape(n, n)
        # labels at fixed distances (inches) from the panels; y tick labels upright, so
        # the lowest tick of one row cannot run into the highest of the next
        panel_in = (width - 0.83) / (n + (n - 1) * 0.06)
        for i in range(n):
            axes[-1, i].xaxis.set_label_coords(0.5, -0.5 / panel_in)
            if i > 0:
                axes[i, 0].yaxis.set_label_coords(-0.56 / panel_in, 0.5)
                for lab in axes[i, 0].get_yticklabels():
                    lab.set_rotation(0)
        tkw = {"fontsize": 8, "pad": 3}
        tkw.update(title_kwargs or {})
        for i in range(n):
            q = np.quantile(xs[:, i], [q_lo, 0.5, q_hi])
            med, lo, hi = format_value(q[1], q[1] - q[0], q[2] - q[1])
            axes[i, i].set_title(f"${med}^{{+{hi}}}_{{-{lo}}}$", **tkw)
            for ax in axes[i, : i + 1]:
                ax.tick_params(labelsize=7)
    return fig


def _data_sets(results: Results, companion: str | None):
    comps = results.target.companions
    if companion is not None:
        comps = tuple(c for c in comps if c.name == companion)
        if not comps:
            raise InputError(
                f"unknown companion {companion!r}; expected one of "
                f"{', '.join(results.companion_names)}",
                key="companion",
            )
    return comps


def _period_obs(results: Results, name: str, rows: NDArray[np.int64]) -> NDArray[np.float64]:
    col = (
        f"{name}.period_obs_yr"
        if f"{name}.period_obs_yr" in results.samples
        else f"{name}.period_yr"
    )
    return results.samples[col].to_numpy(dtype=float)[rows]


def _time_axis(ax) -> None:
    from matplotlib.ticker import MaxNLocator

    ax.xaxis.set_major_locator(MaxNLocator(nbins=6, integer=True, min_n_ticks=3))


def _instrument_styles(results: Results) -> dict[str, tuple[str, str]]:
    # black is taken by the positions, blue and vermillion by the model curves
    colours = [
        PALETTE[k]
        for k in ("bluish_green", "orange", "reddish_purple", "sky_blue", "black", "yellow")
    ]
    return {
        name: (colours[i % len(colours)], MARKERS[i % len(MARKERS)])
        for i, name in enumerate(results.space.instrument_names)
    }


class _CompanionPanels:
    """Draws the panels of one companion; collects legend entries on the way."""

    def __init__(
        self,
        results: Results,
        comp,
        rows: NDArray[np.int64],
        *,
        n_grid: int,
        draw_kw: dict[str, Any],
        data_kw: dict[str, Any],
        normalised: bool,
    ):
        self.results = results
        self.comp = comp
        self.name = comp.name
        self.rows = rows
        self.n_grid = n_grid
        self.draw_kw = draw_kw
        self.data_kw = data_kw
        self.normalised = normalised
        self.legend: dict[str, Any] = {}
        self.factor, self.unit = 1.0, "mas"
        self.tracks: list[tuple[NDArray[np.float64], NDArray[np.float64]]] = []
        ast = comp.astrometry
        if ast is not None and len(ast):
            self.t_pos = np.asarray(ast.t_yr, float)
            self.east, self.north = ast.east_north()
            self.e_err, self.n_err = ast.east_north_errors()
            self.tracks = self._sky_tracks()
            extent = max(
                [float(np.nanmax(np.abs(np.concatenate([self.east, self.north]))))]
                + [float(np.nanmax(np.abs(np.concatenate(tr)))) for tr in self.tracks]
            )
            if extent > ARCSEC_ABOVE_MAS:
                self.factor, self.unit = 1e-3, "arcsec"

    # ------------------------------------------------------------------ models
    def _sky_tracks(self) -> list[tuple[NDArray[np.float64], NDArray[np.float64]]]:
        """(east, north) over one period (relative frame) or the data span (absolute frame)."""
        res = self.results
        periods = _period_obs(res, self.name, self.rows)
        span = float(np.ptp(self.t_pos))
        pad = 0.05 * span
        times = []
        for p in periods:
            if res.target.frame == "absolute":
                t0 = float(self.t_pos.min()) - pad
                t1 = float(self.t_pos.max()) + pad
                if p <= 5.0 * max(span, 1e-9):  # a full period unless it dwarfs the data
                    t1 = max(t1, t0 + p)
                t = np.linspace(t0, t1, self.n_grid)
            else:
                t = res.space.t_ref + np.linspace(0.0, p, self.n_grid)
            times.append(t)
        if not times:
            return []
        # one vectorised call for all draws, each on its own epochs
        pred = res.predict(self.name, t_astro=np.array(times), rows=np.asarray(self.rows))
        return list(zip(pred["east_mas"], pred["north_mas"], strict=True))

    def _median(self, *, t_astro=None, t_vel=None, central=None) -> dict[str, NDArray[np.float64]]:
        """Pointwise posterior median of the model at data epochs (for residuals)."""
        res = self.results
        out: dict[str, NDArray[np.float64]] = {}
        if t_astro is not None:
            pred = res.predict(self.name, t_astro=t_astro, rows=self.rows)
            out["east_mas"] = np.median(pred["east_mas"], axis=0)
            out["north_mas"] = np.median(pred["north_mas"], axis=0)
        if t_vel is not None:
            central = np.zeros(t_vel.size, bool) if central is None else np.asarray(central, bool)
            rv = np.full(t_vel.size, np.nan)
            for flag in (False, True):
                mask = central == flag
                if mask.any():
                    pred = res.predict(self.name, t_vel=t_vel[mask], central=flag, rows=self.rows)
                    rv[mask] = np.median(pred["rv_kms"], axis=0)
            out["rv_kms"] = rv
        return out

    def _grid(self, t: NDArray[np.float64]) -> NDArray[np.float64]:
        span = max(float(np.ptp(t)), 1e-3)
        p_min = float(np.min(_period_obs(self.results, self.name, self.rows)))
        n_t = int(min(20000, max(self.n_grid, 40.0 * 1.1 * span / max(p_min, 1e-9))))
        return np.linspace(t.min() - 0.05 * span, t.max() + 0.05 * span, n_t)

    def _note(self, label: str, handle: Any) -> None:
        self.legend.setdefault(label, handle)

    def _line_handle(self, **kw):
        from matplotlib.lines import Line2D

        return Line2D([], [], **kw)

    # ------------------------------------------------------------------ panels
    def sky(self, ax) -> None:
        f = self.factor
        for te, tn in self.tracks:
            ax.plot(te * f, tn * f, **self.draw_kw)
        ax.errorbar(
            self.east * f, self.north * f, xerr=self.e_err * f, yerr=self.n_err * f, **self.data_kw
        )
        self._note(
            "positions",
            self._line_handle(color=self.data_kw.get("color"), marker="o", ls="none", ms=3),
        )
        res = self.results
        if res.target.frame == "absolute":
            s = res.samples
            t = np.linspace(float(self.t_pos.min()), float(self.t_pos.max()), 50)
            med = {
                k: float(np.median(s[k])) if k in s else 0.0
                for k in ("x0_mas", "y0_mas", "vx0_mas_per_yr", "vy0_mas_per_yr")
            }
            bx = med["x0_mas"] + med["vx0_mas_per_yr"] * (t - res.space.t_ref)
            by = med["y0_mas"] + med["vy0_mas_per_yr"] * (t - res.space.t_ref)
            ax.plot(bx * f, by * f, ls="--", color=PALETTE["vermillion"], lw=1.0)
            ax.plot(
                [med["x0_mas"] * f],
                [med["y0_mas"] * f],
                marker="+",
                ms=7,
                mew=1.2,
                color=PALETTE["vermillion"],
                ls="none",
            )
            self._note(
                "barycentre (median track)",
                self._line_handle(color=PALETTE["vermillion"], ls="--", marker="+"),
            )
        else:
            ax.plot(
                [0.0], [0.0], marker="*", ms=8, color=PALETTE["vermillion"], ls="none", zorder=4
            )
            self._note(
                "central body",
                self._line_handle(color=PALETTE["vermillion"], marker="*", ls="none", ms=7),
            )
        self._note("posterior draws", self._line_handle(color=self.draw_kw.get("color"), lw=1.0))
        ax.set_aspect("equal", adjustable="datalim")
        ax.invert_xaxis()  # east to the left, as on the sky
        ax.set_xlabel(EAST_LABEL.format(unit=self.unit))
        ax.set_ylabel(NORTH_LABEL.format(unit=self.unit))

    def position_residuals(self, ax) -> None:
        f = self.factor
        model = self._median(t_astro=self.t_pos)
        d_e = (self.east - model["east_mas"]) * f
        d_n = (self.north - model["north_mas"]) * f
        ax.axhline(0.0, color="0.5", lw=0.6)
        kw = {k: v for k, v in self.data_kw.items() if k not in ("color", "marker")}
        ax.errorbar(self.t_pos, d_e, yerr=self.e_err * f, color=PALETTE["blue"], marker="o", **kw)
        ax.errorbar(
            self.t_pos, d_n, yerr=self.n_err * f, color=PALETTE["vermillion"], marker="s", **kw
        )
        self._note(
            r"O − C in $\Delta\alpha\,\cos\delta$",
            self._line_handle(color=PALETTE["blue"], marker="o", ls="none", ms=3),
        )
        self._note(
            r"O − C in $\Delta\delta$",
            self._line_handle(color=PALETTE["vermillion"], marker="s", ls="none", ms=3),
        )
        ax.set_xlabel(TIME_LABEL)
        ax.set_ylabel(f"O − C [{self.unit}]")
        _time_axis(ax)

    def position_time(self, ax_e, ax_n) -> None:
        """East and north offsets against time, with the posterior draws."""
        f = self.factor
        grid = self._grid(self.t_pos)
        pred = self.results.predict(self.name, t_astro=grid, rows=self.rows)
        for ax, y, err, model, label in (
            (ax_e, self.east, self.e_err, pred["east_mas"], EAST_LABEL),
            (ax_n, self.north, self.n_err, pred["north_mas"], NORTH_LABEL),
        ):
            for m in model:
                ax.plot(grid, m * f, **self.draw_kw)
            ax.errorbar(self.t_pos, y * f, yerr=err * f, **self.data_kw)
            ax.set_ylabel(label.format(unit=self.unit))
            ax.tick_params(labelbottom=False)
            _time_axis(ax)

    def velocities(self, ax, res_ax) -> None:
        vel = self.comp.velocities
        t = np.asarray(vel.t_yr, float)
        inst = np.asarray(vel.instrument, dtype=str)
        central = np.asarray(vel.central, bool)
        offsets = self.results.velocity_offsets()
        rv = np.asarray(vel.rv_kms, float) - np.array([offsets.get(i, 0.0) for i in inst])
        err = np.asarray(vel.rv_err_kms, float)
        grid = self._grid(t)
        for y in self.results.predict(self.name, t_vel=grid, rows=self.rows)["rv_kms"]:
            ax.plot(grid, y, **self.draw_kw)
        self._note("posterior draws", self._line_handle(color=self.draw_kw.get("color"), lw=1.0))
        if central.any():
            ckw = dict(self.draw_kw, color=PALETTE["vermillion"])
            for y in self.results.predict(self.name, t_vel=grid, central=True, rows=self.rows)[
                "rv_kms"
            ]:
                ax.plot(grid, y, **ckw)
            self._note(
                "posterior draws, central body",
                self._line_handle(color=PALETTE["vermillion"], lw=1.0),
            )
        model = self._median(t_vel=t, central=central)
        resid = rv - model["rv_kms"]
        resid_err = err
        if self.normalised:
            resid, resid_err = resid / err, np.ones_like(err)
        styles = _instrument_styles(self.results)
        for name in dict.fromkeys(inst):
            colour, marker = styles.get(name, (PALETTE["black"], "o"))
            for flag in (False, True):
                m = (inst == name) & (central == flag)
                if not m.any():
                    continue
                kw = dict(
                    self.data_kw, color=colour, marker=marker, mfc="white" if flag else colour
                )
                ax.errorbar(t[m], rv[m], yerr=err[m], **kw)
                if res_ax is not None:
                    res_ax.errorbar(t[m], resid[m], yerr=resid_err[m], **kw)
            label = "velocities" if list(styles) == ["default"] else _mpl_text(name)
            self._note(label, self._line_handle(color=colour, marker=marker, ls="none", ms=3))
        if central.any():
            self._note(
                "central body (open)",
                self._line_handle(color="0.3", marker="o", mfc="white", ls="none", ms=3),
            )
        ax.set_ylabel(RV_LABEL)
        _time_axis(ax)
        if res_ax is not None:
            res_ax.axhline(0.0, color="0.5", lw=0.6)
            res_ax.set_xlabel(TIME_LABEL)
            res_ax.set_ylabel("(O − C) / σ" if self.normalised else r"O − C [km s$^{-1}$]")
            ax.tick_params(labelbottom=False)
            _time_axis(res_ax)
        else:
            ax.set_xlabel(TIME_LABEL)


def orbit_figure(
    results: Results,
    *,
    n_draws: int = 50,
    seed: int | np.random.Generator = 0,
    companion: str | None = None,
    fig: Any = None,
    residuals: bool = True,
    normalised: bool = False,
    n_grid: int = 400,
    draw_kwargs: Mapping[str, Any] | None = None,
    data_kwargs: Mapping[str, Any] | None = None,
    legend_kwargs: Mapping[str, Any] | None = None,
) -> Any:
    """Data with posterior-draw orbits: sky plane, line-of-sight velocity, residuals.

    One row of panels per companion, with a legend on top of the row.

    - Sky plane (companions with positions): ``n_draws`` posterior orbits
      over one full period (absolute frame: over the data span, extended to
      a period when that is less than five data spans) as thin translucent
      lines, the positions with error bars, the central body at the origin
      (relative frame) or the median barycentre track ``x0 + vx0 (t - t_ref)``
      (absolute frame). East is to the left. Offsets switch from mas to
      arcsec when the orbits exceed 5000 mas.
    - Line-of-sight velocity against time (companions with velocities):
      measured velocities minus the posterior-median offset of their
      instrument, one marker and colour per instrument, central-body rows as
      open markers, posterior-draw curves of the companion and (if measured)
      of the central body.
    - Residuals below: data minus the pointwise posterior median of the
      model, in mas (or arcsec) and km/s, or velocities normalised by their
      errors. A companion with positions only, in a figure where another
      companion has both kinds of data, gets its east and north offsets
      against time in the second column.

    Parameters
    ----------
    results : Results
        The posterior.
    n_draws : int
        Number of posterior draws shown.
    seed : int or numpy.random.Generator
        Chooses the draws.
    companion : str, optional
        Only this companion (default: all, one row each).
    fig : matplotlib.figure.Figure, optional
        Empty figure to draw into (default: 3.5 in wide, or 7.2 in when
        some companion has both positions and velocities).
    residuals : bool
        Add residual panels.
    normalised : bool
        Velocity residuals divided by their errors.
    n_grid : int
        Points per drawn orbit.
    draw_kwargs, data_kwargs, legend_kwargs : dict, optional
        Passed to ``Axes.plot`` (draws), ``Axes.errorbar`` (data) and
        ``SubFigure.legend``.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    InputError
        If ``companion`` is not a companion of the target or ``n_draws`` < 1.
    """
    from matplotlib.figure import Figure

    if n_draws < 1:
        raise InputError(f"n_draws must be at least 1, got {n_draws}", key="n_draws")
    comps = _data_sets(results, companion)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    rows = np.sort(results.draws(n_draws, rng))
    layout = []
    for comp in comps:
        has_sky = comp.astrometry is not None and len(comp.astrometry) > 0
        has_rv = comp.velocities is not None and len(comp.velocities) > 0
        layout.append((comp, has_sky, has_rv))
    wide = any(s and v for _, s, v in layout)
    # row heights (inches): sky panels are square, velocity-only rows need less
    heights = [(4.1 if wide else 4.6) if s else (3.0 if wide else 3.3) for _, s, _ in layout]
    width = DOUBLE_COLUMN_IN if wide else SINGLE_COLUMN_IN
    draw_kw = {"color": PALETTE["blue"], "lw": 0.5, "alpha": 0.2, "zorder": 1}
    draw_kw.update(draw_kwargs or {})
    data_kw = {
        "color": PALETTE["black"],
        "marker": "o",
        "ms": 3.0,
        "ls": "none",
        "elinewidth": 0.6,
        "capsize": 0.0,
        "zorder": 3,
    }
    data_kw.update(data_kwargs or {})
    with style_context():
        if fig is None:
            fig = Figure(figsize=(width, sum(heights)), layout="constrained")
        subfigs = fig.subfigures(len(layout), 1, squeeze=False, height_ratios=heights).ravel()
        for sub, (comp, has_sky, has_rv) in zip(subfigs, layout, strict=True):
            panels = _CompanionPanels(
                results,
                comp,
                rows,
                n_grid=n_grid,
                draw_kw=draw_kw,
                data_kw=data_kw,
                normalised=normalised,
            )
            n_res = 1 if residuals else 0
            if has_sky and has_rv:
                gs = sub.add_gridspec(1 + n_res, 2, height_ratios=[3, 1][: 1 + n_res])
                panels.sky(sub.add_subplot(gs[0, 0]))
                ax_rv = sub.add_subplot(gs[0, 1])
                if residuals:
                    panels.position_residuals(sub.add_subplot(gs[1, 0]))
                panels.velocities(
                    ax_rv, sub.add_subplot(gs[1, 1], sharex=ax_rv) if residuals else None
                )
            elif has_sky and wide:
                gs = sub.add_gridspec(2 + n_res, 2, height_ratios=[1.5, 1.5, 1][: 2 + n_res])
                panels.sky(sub.add_subplot(gs[:, 0]))
                ax_e = sub.add_subplot(gs[0, 1])
                ax_n = sub.add_subplot(gs[1, 1], sharex=ax_e)
                panels.position_time(ax_e, ax_n)
                if residuals:
                    panels.position_residuals(sub.add_subplot(gs[2, 1], sharex=ax_e))
                else:
                    ax_n.tick_params(labelbottom=True)
                    ax_n.set_xlabel(TIME_LABEL)
            elif has_sky:
                gs = sub.add_gridspec(1 + n_res, 1, height_ratios=[3, 1][: 1 + n_res])
                panels.sky(sub.add_subplot(gs[0, 0]))
                if residuals:
                    panels.position_residuals(sub.add_subplot(gs[1, 0]))
            else:
                gs = sub.add_gridspec(1 + n_res, 1, height_ratios=[3, 1][: 1 + n_res])
                ax_rv = sub.add_subplot(gs[0, 0])
                panels.velocities(
                    ax_rv, sub.add_subplot(gs[1, 0], sharex=ax_rv) if residuals else None
                )
            lkw = {
                "loc": "outside upper right",
                "ncols": min(4 if wide else 2, len(panels.legend)),
                "fontsize": 7,
                "columnspacing": 1.2,
                "handletextpad": 0.4,
            }
            lkw.update(legend_kwargs or {})
            sub.legend(list(panels.legend.values()), list(panels.legend.keys()), **lkw)
            sub.suptitle(_mpl_text(comp.name), fontsize=9, x=0.01, ha="left", fontweight="bold")
    return fig


#: sampled-variable name (after the companion/plane prefix) -> matplotlib label
_TRACE_LABELS = {
    "ln_mass": r"$\ln(M/M_\odot)$",
    "ln_distance": r"$\ln(D/\mathrm{pc})$",
    "ln_parallax": r"$\ln(\varpi/\mathrm{mas})$",
    "ln_period": r"$\ln(P/\mathrm{yr})$",
    "sqrte_cosw": r"$\sqrt{e}\,\cos\omega$",
    "sqrte_sinw": r"$\sqrt{e}\,\sin\omega$",
    "cos_i": r"$\cos i$",
    "node": r"$\Omega$ [rad]",
    "omega": r"$\omega$ [rad]",
    "mean_longitude": r"$\lambda_0$ [rad]",
    "mass_ratio": r"$q$",
    "offset": r"$\Delta v$ [km s$^{-1}$]",
    "jitter": r"$\sigma_\mathrm{jit}$ [km s$^{-1}$]",
    "ln_jitter": r"$\ln(\sigma_\mathrm{jit}/\mathrm{km\,s^{-1}})$",
    "x0": "$x_0$ [mas]",
    "y0": "$y_0$ [mas]",
    "vx0": r"$\dot{x}_0$ [mas yr$^{-1}$]",
    "vy0": r"$\dot{y}_0$ [mas yr$^{-1}$]",
    "vz0": r"$v_{z,0}$ [km s$^{-1}$]",
    "systemic": r"$v_\mathrm{sys}$ [km s$^{-1}$]",
}


def _trace_label(name: str) -> str:
    if name in _TRACE_LABELS:
        return _TRACE_LABELS[name]
    head, _, tail = name.partition(".")
    if head in ("offset", "jitter", "ln_jitter"):  # instrument suffix
        return f"{_mpl_text(tail)}: {_TRACE_LABELS[head]}"
    if tail in _TRACE_LABELS:  # companion or plane prefix
        return f"{_mpl_text(head)}: {_TRACE_LABELS[tail]}"
    return _mpl_text(name)


def trace_figure(
    results: Results,
    *,
    max_params: int = 12,
    names: Sequence[str] | None = None,
    fig: Any = None,
    show_log_prob: bool = True,
    max_points: int = 600,
    max_walkers: int = 16,
    trace_kwargs: Mapping[str, Any] | None = None,
) -> Any:
    """Walker traces of the sampled variables, burn-in shaded (a diagnostic figure).

    The walker lines are rasterised inside the vector PDF (a chain has far
    more points than a page can show), and at most ``max_walkers`` evenly
    chosen walkers and ``max_points`` steps per walker are drawn.

    Parameters
    ----------
    results : Results
        The posterior, with its whole chain.
    max_params : int
        At most this many sampled variables (the first ones of
        ``results.space.names``) unless ``names`` is given.
    names : sequence of str, optional
        Sampled variables to show.
    fig : matplotlib.figure.Figure, optional
        Empty figure to draw into.
    show_log_prob : bool
        Add a bottom panel with the log posterior of every walker.
    max_points : int
        Steps plotted per walker at most (the chain is strided beyond that).
    max_walkers : int
        Walkers plotted at most (evenly spaced through the ensemble).
    trace_kwargs : dict, optional
        Passed to ``Axes.plot`` for the walker lines.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    InputError
        For an unknown variable name.
    """
    from matplotlib.collections import LineCollection
    from matplotlib.figure import Figure

    all_names = list(results.space.names)
    chosen = list(names) if names is not None else all_names[:max_params]
    for n in chosen:
        if n not in all_names:
            raise InputError(
                f"unknown sampled variable {n!r}; expected one of {', '.join(all_names)}",
                key="names",
            )
    if len(all_names) > len(chosen) and names is None:
        logger.info("trace figure shows %d of %d sampled variables", len(chosen), len(all_names))
    chain = np.asarray(results.chain)
    n_steps = chain.shape[0]
    walkers = np.unique(np.linspace(0, chain.shape[1] - 1, min(max_walkers, chain.shape[1])).astype(int))
    chain = chain[:, walkers]
    stride = max(1, int(math.ceil(n_steps / max_points)))
    steps = np.arange(0, n_steps, stride)
    log_prob = np.asarray(results.log_prob)[:, walkers] if show_log_prob else None
    panels = [(n, chain[::stride, :, all_names.index(n)], _trace_label(n)) for n in chosen]
    if log_prob is not None and log_prob.ndim == 2 and log_prob.shape[0] == n_steps:
        lp = log_prob[::stride]
        panels.append(("log_prob", np.where(np.isfinite(lp), lp, np.nan), r"$\ln p$"))
    kw = {"color": PALETTE["blue"], "lw": 0.4, "alpha": 0.3, "rasterized": True}
    kw.update(trace_kwargs or {})
    with style_context():
        if fig is None:
            fig = Figure(
                figsize=(DOUBLE_COLUMN_IN, max(2.5, 0.75 * len(panels) + 0.6)), layout="constrained"
            )
        axes = fig.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
        for ax, (_name, y, label) in zip(axes, panels, strict=True):
            if results.burn > 0:
                ax.axvspan(0, results.burn, color="0.88", lw=0, zorder=0)
            ax.add_collection(LineCollection(np.stack([np.broadcast_to(steps[:, None], y.shape), y], axis=-1)
                                             .transpose(1, 0, 2), **{("linewidths" if k == "lw" else k): v
                                                                     for k, v in kw.items()}))
            finite = y[np.isfinite(y)]
            if finite.size:
                pad = 0.05 * (finite.max() - finite.min() or 1.0)
                ax.set_ylim(finite.min() - pad, finite.max() + pad)
            ax.set_ylabel(label, rotation=0, ha="right", va="center", fontsize=8)
            ax.tick_params(labelsize=7)
            ax.set_xlim(0, max(n_steps - 1, 1))
        if results.burn > 0:
            fig.legend(
                handles=[axes[0].patches[0]],
                labels=[f"burn-in ({results.burn} steps)"],
                loc="outside upper right",
                fontsize=7,
            )
        shown = f"{len(chosen)} of {len(all_names)}" if len(chosen) < len(all_names) else "all"
        fig.suptitle(
            f"Walker traces: {shown} sampled variables, {chain.shape[1]} walkers",
            x=0.01,
            ha="left",
            fontsize=8,
        )
        axes[-1].set_xlabel("Step")
    return fig
