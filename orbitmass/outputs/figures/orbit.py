"""Orbit figure: data with posterior-draw orbits on the sky and in velocity, and residuals.

Sky-plane convention
    East (increasing right ascension, ``Δα cos δ``) points to the LEFT and
    north up, as the sky is seen; the x axis is therefore inverted.

Figures are plain :class:`matplotlib.figure.Figure` objects (nothing
registered with pyplot, no global state changed); the shared look of
:mod:`orbitmass.outputs.style` is applied inside the call only.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from orbitmass.exceptions import InputError
from orbitmass.outputs.figures.common import EAST_LABEL, NORTH_LABEL, RV_LABEL, TIME_LABEL, mpl_text
from orbitmass.outputs.registry import register
from orbitmass.outputs.style import DOUBLE_COLUMN_IN, MARKERS, PALETTE, SINGLE_COLUMN_IN, save_figure, style_context
from orbitmass.results import Results

__all__ = ["orbit_figure", "ARCSEC_ABOVE_MAS"]

#: velocity axis when instrument offsets were subtracted from the measured velocities
RV_LABEL_OFFSETS = r"$v_\mathrm{LOS} - \Delta v_\mathrm{inst}$ [km s$^{-1}$]"
#: angular extent (mas) above which sky panels switch to arcsec
ARCSEC_ABOVE_MAS = 5000.0


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
    from matplotlib.ticker import MaxNLocator  # start-up time: loaded only when needed

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
        from matplotlib.lines import Line2D  # start-up time: loaded only when needed

        return Line2D([], [], **kw)

    # ------------------------------------------------------------------ panels
    def sky(self, ax) -> None:
        f = self.factor
        for te, tn in self.tracks:
            ax.plot(te * f, tn * f, **self.draw_kw)
        polar = np.asarray(self.comp.astrometry.polar, bool)
        for mask, mfc, label in ((~polar, None, "positions"), (polar, "white", "positions (ρ, θ; open)")):
            if not mask.any():
                continue
            kw = dict(self.data_kw, mfc=mfc or self.data_kw.get("color"))
            ax.errorbar(self.east[mask] * f, self.north[mask] * f, xerr=self.e_err[mask] * f,
                        yerr=self.n_err[mask] * f, **kw)
            self._note(label, self._line_handle(color=self.data_kw.get("color"), marker="o",
                                                mfc=kw["mfc"], ls="none", ms=3))
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
        self._orientation_marks(ax)
        ax.set_aspect("equal", adjustable="datalim")
        ax.invert_xaxis()  # east to the left, as on the sky
        ax.set_xlabel(EAST_LABEL.format(unit=self.unit))
        ax.set_ylabel(NORTH_LABEL.format(unit=self.unit))

    def marks(self) -> dict[str, NDArray[np.float64]]:
        """Sky positions (mas, relative orbit) of the periastron and the ascending node, and two
        points of the median-draw track that show the direction of motion."""
        res, name = self.results, self.name
        s = res.samples.iloc[self.rows]
        out: dict[str, NDArray[np.float64]] = {}
        col = f"{name}.periastron_time_jyr"
        if col in s:
            pred = res.predict(name, t_astro=np.array([float(np.median(s[col]))]), rows=self.rows)
            out["periastron"] = np.array([np.median(pred["east_mas"][:, 0]),
                                          np.median(pred["north_mas"][:, 0])])
        need = [f"{name}.{k}" for k in ("semimajor_axis_mas", "eccentricity", "arg_periastron_deg",
                                        "ascending_node_deg")]
        if res.target.frame != "absolute" and all(c in s for c in need):
            a, e, w, node = (float(np.median(s[c])) for c in need)
            # the node lies on the line of nodes at position angle Omega, true anomaly -omega:
            # r = a (1 - e^2) / (1 + e cos omega) (Kepler ellipse; common practice, no source)
            r = a * (1 - e * e) / (1 + e * np.cos(np.radians(w)))
            out["node"] = np.array([r * np.sin(np.radians(node)), r * np.cos(np.radians(node))])
            out["node_line"] = np.array([np.sin(np.radians(node)), np.cos(np.radians(node))])
        if self.tracks:
            te, tn = self.tracks[0]
            out["motion"] = self._arrow_step(np.asarray(te, float), np.asarray(tn, float))
        return out

    def _arrow_step(self, te: NDArray[np.float64], tn: NDArray[np.float64]) -> NDArray[np.float64]:
        """Two points of the track, three grid steps apart, where the track is farthest from
        every measured position (so no data marker hides the arrow)."""
        n = len(te)
        ks = np.arange(n // 10, max(n // 10 + 1, n - n // 10 - 3))
        ks = ks[ks + 3 < n]
        ks = ks if ks.size else np.array([0])
        gap = np.min(np.hypot(te[ks, None] - self.east[None, :], tn[ks, None] - self.north[None, :]), axis=1)
        k = int(ks[np.argmax(gap)])  # tracks exist only with positions, so east/north are set
        k1 = min(k + 3, n - 1)
        return np.array([[te[k], tn[k]], [te[k1], tn[k1]]])

    def _orientation_marks(self, ax) -> None:
        f = self.factor
        marks = self.marks()
        if "node_line" in marks:
            # through the central body, a little beyond the farthest point of the drawn orbits
            extent = max(float(np.nanmax(np.hypot(*tr))) for tr in self.tracks) * f
            d = marks["node_line"] * extent * 1.05
            ax.plot([-d[0], d[0]], [-d[1], d[1]], ls=":", color="0.45", lw=0.8, zorder=2)
            ax.plot(*(marks["node"] * f), marker="^", ms=5, color="0.25", ls="none", zorder=4)
            self._note("line of nodes, ascending node",
                       self._line_handle(color="0.25", ls=":", marker="^", ms=4))
        if "periastron" in marks:
            ax.plot(*(marks["periastron"] * f), marker="D", ms=4.5, mfc="white",
                    color=PALETTE["vermillion"], ls="none", zorder=5)
            self._note("periastron", self._line_handle(color=PALETTE["vermillion"], marker="D",
                                                       mfc="white", ls="none", ms=4))
        if "motion" in marks:
            (x0, y0), (x1, y1) = marks["motion"] * f
            ax.annotate("", xy=(x1, y1), xytext=(x0, y0), zorder=5,
                        arrowprops={"arrowstyle": "-|>", "color": PALETTE["blue"], "lw": 1.2,
                                    "mutation_scale": 10})
            self._note("direction of motion", self._line_handle(color=PALETTE["blue"], marker=">",
                                                                ls="-", ms=4))

    def position_residuals(self, ax) -> None:
        """Data minus the median model, in the form each row was measured.

        East/north rows: O - C in Δα cos δ and Δδ (filled markers). Separation and
        position-angle rows: O - C in ρ and ρ Δθ (open markers; Δθ in radians times
        the model separation, so both are lengths on the sky).
        """
        model = self._median(t_astro=self.t_pos)
        ast = self.comp.astrometry
        polar = np.asarray(ast.polar, bool)
        d1 = self.east - model["east_mas"]
        d2 = self.north - model["north_mas"]
        e1, e2 = np.array(self.e_err, float), np.array(self.n_err, float)
        if polar.any():
            rho_m = np.hypot(model["east_mas"], model["north_mas"])
            theta_m = np.degrees(np.arctan2(model["east_mas"], model["north_mas"]))
            dtheta = (np.asarray(ast.value2, float) - theta_m + 180.0) % 360.0 - 180.0
            d1 = np.where(polar, np.asarray(ast.value1, float) - rho_m, d1)
            d2 = np.where(polar, rho_m * np.radians(dtheta), d2)
            e1 = np.where(polar, np.asarray(ast.err1, float), e1)
            e2 = np.where(polar, rho_m * np.radians(np.asarray(ast.err2, float)), e2)
        # residuals are small: their own unit, mas unless they exceed the arcsec threshold
        big = float(np.nanmax(np.abs(np.concatenate([d1, d2, e1, e2])))) > ARCSEC_ABOVE_MAS
        f, unit = (1e-3, "arcsec") if big else (1.0, "mas")
        ax.axhline(0.0, color="0.5", lw=0.6)
        kw = {k: v for k, v in self.data_kw.items() if k not in ("color", "marker")}
        rows = (
            (~polar, d1, e1, PALETTE["blue"], "o", r"O − C in $\Delta\alpha\,\cos\delta$", None),
            (~polar, d2, e2, PALETTE["vermillion"], "s", r"O − C in $\Delta\delta$", None),
            (polar, d1, e1, PALETTE["blue"], "o", r"O − C in $\rho$ (open)", "white"),
            (polar, d2, e2, PALETTE["vermillion"], "s", r"O − C in $\rho\,\Delta\theta$ (open)", "white"),
        )
        for mask, d, e, colour, marker, label, mfc in rows:
            if not mask.any():
                continue
            ax.errorbar(self.t_pos[mask], d[mask] * f, yerr=e[mask] * f, color=colour, marker=marker,
                        mfc=mfc or colour, **kw)
            self._note(label, self._line_handle(color=colour, marker=marker, mfc=mfc or colour,
                                                ls="none", ms=3))
        ax.set_xlabel(TIME_LABEL)
        ax.set_ylabel(f"O − C [{unit}]")
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
            label = "velocities" if list(styles) == ["default"] else mpl_text(name)
            self._note(label, self._line_handle(color=colour, marker=marker, ls="none", ms=3))
        if central.any():
            self._note(
                "central body (open)",
                self._line_handle(color="0.3", marker="o", mfc="white", ls="none", ms=3),
            )
        shifted = any(abs(offsets.get(i, 0.0)) > 0 for i in set(inst))
        ax.set_ylabel(RV_LABEL_OFFSETS if shifted else RV_LABEL)
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
    from matplotlib.figure import Figure  # start-up time: loaded only when needed

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
            # the companion's name titles its first panel (a figure-level title would collide
            # with the legend above the panels in a single-column figure)
            sub.axes[0].set_title(f"Companion {mpl_text(comp.name)}", loc="left", fontsize=9,
                                  fontweight="bold")
            _common_time_range(sub)
    return fig


def _common_time_range(sub) -> None:
    """One time range for every time axis of a companion's panels (positions and velocities)."""
    time_axes = [ax for ax in sub.axes if ax.get_xlabel() == TIME_LABEL]
    time_axes += [ax for ax in sub.axes if ax not in time_axes and any(
        ax.get_shared_x_axes().joined(ax, t) for t in time_axes)]
    if len(time_axes) < 2:
        return
    lo = min(ax.get_xlim()[0] for ax in time_axes)
    hi = max(ax.get_xlim()[1] for ax in time_axes)
    for ax in time_axes:
        ax.set_xlim(lo, hi)




def caption(results: Results) -> str:
    """Caption of :func:`orbit_figure`."""
    text = ("Orbits: measured positions (east to the left, north up) and line-of-sight velocities "
            "with 1 sigma error bars, and the model of 50 posterior draws as thin lines; "
            "velocities are shown with the posterior-median instrument offsets removed. "
            "Lower panels: data minus the pointwise posterior-median model.")
    if results.target.frame == "absolute":
        text += (" Dashed vermillion line: the posterior-median track of the barycentre over the "
                 f"astrometric epochs; the + marks it at the reference epoch {results.space.t_ref:.2f}.")
    else:
        text += " The star marks the central body."
    return text


def _render(results: Results, out_dir: Path, **_ignored: Any) -> list[Path]:
    return save_figure(orbit_figure(results), Path(out_dir) / "orbit", dpi=200)


register("orbit", _render, kind="figure", files=("orbit.png", "orbit.pdf"),
         description="data with posterior-draw orbits: sky plane, velocities, residuals")
