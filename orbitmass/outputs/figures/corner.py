"""Corner plot of the key posterior quantities (drawn by the ``corner`` package).

Each quantity is shown in its display unit (chosen from its magnitude, as in
the tables) with a power of ten factored out when still needed. The 2-D
contour levels are written in the figure; true values are drawn as lines when
the run knows them (``truths=`` or ``results.truth``).
"""

from __future__ import annotations

import logging
import math
import textwrap
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from orbitmass.exceptions import InputError
from orbitmass.outputs.figures.common import axis_label, display_scale, truth_of, varies
from orbitmass.outputs.formatting import choose_exponent, format_value
from orbitmass.outputs.registry import register
from orbitmass.outputs.style import DOUBLE_COLUMN_IN, PALETTE, SINGLE_COLUMN_IN, save_figure, style_context
from orbitmass.results import QUANTILES, Results

__all__ = ["corner_figure", "default_corner_columns", "CONTOUR_LEVELS", "contour_text"]

logger = logging.getLogger(__name__)

#: probability inside the 2-D contours: 1 - exp(-s^2/2) for s = 1, 2, the mass inside the
#: 1 and 2 sigma ellipses of a 2-D Gaussian (common practice, no source)
CONTOUR_LEVELS = (1 - math.exp(-0.5), 1 - math.exp(-2.0))


def contour_text(levels: Sequence[float] = CONTOUR_LEVELS) -> str:
    """Words for the contour levels, e.g. ``"contours enclose 39.3 % and 86.5 %"``."""
    return "contours enclose " + " and ".join(f"{100 * v:.1f} %" for v in levels) + " of the samples"


def default_corner_columns(results: Results, max_panels: int = 8) -> list[str]:
    """Key columns for the corner plot, constant ones left out.

    Mass and distance, then per companion period, eccentricity, inclination
    and angular semimajor axis; when that exceeds ``max_panels``, only the
    period and eccentricity of each companion (and, if still too many, the
    first companions that fit).
    """
    samples = results.samples

    def keep(cols):
        return [c for c in cols if c in samples.columns and varies(samples[c].to_numpy(dtype=float))]

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
    short = head + keep([f"{c}.{b}" for c in results.companion_names for b in ("period_yr", "eccentricity")])
    if len(short) > max_panels:
        logger.info("corner plot limited to %d panels; pass params= to choose", max_panels)
        short = short[:max_panels]
    return short


def corner_figure(
    results: Results,
    *,
    params: Sequence[str] | None = None,
    columns: Sequence[str] | None = None,
    labels: Sequence[str] | None = None,
    truths: Mapping[str, float] | None = None,
    units: Mapping[str, str] | None = None,
    fig: Any = None,
    title_kwargs: Mapping[str, Any] | None = None,
    **corner_kwargs: Any,
) -> Any:
    """Corner plot of the key posterior quantities.

    Parameters
    ----------
    results : Results
        The posterior.
    params : sequence of str, optional
        Sample columns to show (default :func:`default_corner_columns`);
        ``columns`` is the older name of the same option.
    labels : sequence of str, optional
        Axis labels (default: symbol and display unit).
    truths : dict, optional
        Column -> true value in the stored unit; default ``results.truth`` when
        the run carries one. Drawn as vermillion lines.
    units : dict, optional
        Base key or column -> display unit key (e.g. ``{"distance_pc": "pc"}``).
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
        1-D histograms with the 15.9/50/84.1 % quantiles dashed, titled with the
        median and its errors; 2-D panels with the :data:`CONTOUR_LEVELS`
        contours, stated in the upper right of the figure.

    Raises
    ------
    InputError
        If a column is unknown or constant, or ``labels`` has the wrong length.
    """
    import corner  # start-up time: loaded only when needed
    from matplotlib.figure import Figure  # start-up time: loaded only when needed
    from matplotlib.ticker import MaxNLocator  # start-up time: loaded only when needed

    companions = results.companion_names
    chosen = params if params is not None else columns
    cols = list(chosen) if chosen is not None else default_corner_columns(results)
    if not cols:
        raise InputError("no varying column to show in the corner plot", key="params")
    units = dict(units or {})
    data, exps, disp = [], [], []
    for col in cols:
        if col not in results.samples.columns:
            raise InputError(
                f"unknown sample column {col!r}; expected one of {', '.join(results.samples.columns)}",
                key="params",
            )
        x = results.samples[col].to_numpy(dtype=float)
        if not varies(x):
            raise InputError(f"column {col!r} is constant; it cannot be shown", key="params")
        base = col.split(".", 1)[1] if col.split(".", 1)[0] in companions else col.split(".", 1)[0]
        try:
            u, f = display_scale(col, x, companions, units.get(col, units.get(base)))
        except ValueError as err:
            raise InputError(str(err), key="units") from None
        k = choose_exponent(float(np.median(x[np.isfinite(x)]) * f))
        disp.append((u, f))
        exps.append(k)
        data.append(x * f / 10.0**k)
    if labels is not None and len(labels) != len(cols):
        raise InputError(f"{len(labels)} labels for {len(cols)} columns", key="labels")
    if labels is None:
        labels = [
            axis_label(c, companions, exponent=k, show_companion=len(companions) > 1, unit=u)
            for c, k, (u, _) in zip(cols, exps, disp, strict=True)
        ]
    known = truth_of(results, truths)
    truth_row = [known[c] * f / 10.0**k if c in known else None
                 for c, k, (_, f) in zip(cols, exps, disp, strict=True)]
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
            levels=CONTOUR_LEVELS,
            max_n_ticks=3,
            label_kwargs={"fontsize": 9},
            hist_kwargs={"linewidth": 0.9},
            contour_kwargs={"linewidths": 0.7},
        )
        if any(t is not None for t in truth_row):
            opts.update(truths=truth_row, truth_color=PALETTE["vermillion"],
                        range=_ranges_with_truths(xs, truth_row))
        opts.update(corner_kwargs)
        fig = corner.corner(xs, fig=fig, **opts)
        width, height = fig.get_size_inches()
        title_h = 0.3
        fig.subplots_adjust(left=0.75 / width, bottom=0.75 / height, right=1 - 0.08 / width,
                            top=1 - title_h / height, wspace=0.06, hspace=0.06)
        axes = np.asarray(fig.axes).reshape(n, n)
        # labels at fixed distances (inches) from the panels; y tick labels upright, so
        # the lowest tick of one row cannot run into the highest of the next
        panel_in = (width - 0.83) / (n + (n - 1) * 0.06)
        for i in range(n):
            axes[-1, i].xaxis.set_label_coords(0.5, -0.5 / panel_in)
            if i > 0:
                axes[i, 0].yaxis.set_label_coords(-0.56 / panel_in, 0.5)
        # no tick near a panel edge: the last label of one panel cannot touch the first of the next
        for i in range(n):
            for j in range(i + 1):
                ax = axes[i, j]
                ax.xaxis.set_major_locator(_inner_ticks(ax.get_xlim(), MaxNLocator))
                if j < i:
                    ax.yaxis.set_major_locator(_inner_ticks(ax.get_ylim(), MaxNLocator))
                ax.tick_params(labelsize=7)
        for i in range(1, n):
            for lab in axes[i, 0].get_yticklabels():
                lab.set_rotation(0)
        tkw = {"fontsize": 8, "pad": 3}
        tkw.update(title_kwargs or {})
        for i in range(n):
            q = np.quantile(xs[:, i], [q_lo, 0.5, q_hi])
            med, lo, hi = format_value(q[1], q[1] - q[0], q[2] - q[1])
            axes[i, i].set_title(f"${med}^{{+{hi}}}_{{-{lo}}}$", **tkw)
        note = contour_text(opts["levels"])
        if "truths" in opts:
            note += "; vermillion lines: true values"
        if n > 1:
            # inside the empty upper-right panels, wrapped to their width (about 19 characters of
            # 7-pt text per inch), so it cannot run into the titles of the diagonal panels
            box = axes[0, -1].get_position()
            span = box.x1 - axes[0, max(1, n // 2)].get_position().x0  # empty panels of row 1
            chars = max(16, int(span * width * 19))
            text = (note[0].upper() + note[1:]).replace(" %", "\u00a0%")
            fig.text(box.x1, box.y1, textwrap.fill(text, chars), ha="right", va="top", fontsize=7)
    return fig


#: ticks keep this fraction of a panel's width clear at each edge (half a 7-pt label of a 1-inch panel)
_EDGE_CLEAR = 0.12


def _inner_ticks(limits: tuple[float, float], locator_class: Any) -> Any:
    """Two or three round ticks inside the panel, none within :data:`_EDGE_CLEAR` of an edge."""
    from matplotlib.ticker import FixedLocator  # start-up time: loaded only when needed

    lo, hi = sorted(float(v) for v in limits)
    inner_lo, inner_hi = lo + _EDGE_CLEAR * (hi - lo), hi - _EDGE_CLEAR * (hi - lo)
    ticks: list[float] = []
    for nbins in (3, 4, 5, 6):
        ticks = [float(t) for t in locator_class(nbins).tick_values(lo, hi) if inner_lo <= t <= inner_hi]
        if len(ticks) >= 2:
            break
    return FixedLocator(ticks[:3] if len(ticks) <= 3 else ticks[::2][:3])


def _ranges_with_truths(xs: NDArray[np.float64], truth_row: Sequence[float | None]) -> list[tuple[float, float]]:
    """Axis range of each column: the samples, widened to show a true value outside them clear of the edge."""
    out = []
    for i, t in enumerate(truth_row):
        lo, hi = float(np.min(xs[:, i])), float(np.max(xs[:, i]))
        if t is not None and np.isfinite(t):
            near = 0.06 * (max(hi, t) - min(lo, t))  # a line this close to the edge reads as the frame
            if t < lo + near:
                lo = min(lo, t) - near
            elif t > hi - near:
                hi = max(hi, t) + near
        out.append((lo, hi))
    return out


def caption(results: Results, params: Sequence[str] | None = None) -> str:
    """Caption of :func:`corner_figure`."""
    text = ("Corner plot: one- and two-dimensional marginal posteriors of the key quantities. "
            "Dashed lines mark the 15.9, 50 and 84.1 % quantiles, given above each histogram; "
            f"the {contour_text()}, the 1 and 2 sigma regions of a 2-D Gaussian.")
    if truth_of(results, None):
        text += " Vermillion lines: the true values of the simulated data."
    return text


def _render(results: Results, out_dir: Path, *, params=None, truths=None, units=None,
            **_ignored: Any) -> list[Path]:
    fig = corner_figure(results, params=params, truths=truths, units=units)
    return save_figure(fig, Path(out_dir) / "corner", dpi=200)


register("corner", _render, kind="figure", files=("corner.png", "corner.pdf"),
         description="corner plot of the key parameters")
