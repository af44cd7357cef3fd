"""Figures of a comparison: the mass posteriors side by side, and mass against radius.

Both functions take a :class:`~orbitmass.compare.comparison.Comparison` and return a
:class:`matplotlib.figure.Figure` not registered with pyplot (journal style of
:mod:`orbitmass.outputs.style`, Okabe-Ito colours).
"""

from __future__ import annotations

import textwrap
from typing import Any

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import LogFormatterSciNotation

from orbitmass.compare.references import Reference
from orbitmass.model.quantities import display_unit
from orbitmass.outputs.reports import choose_exponent
from orbitmass.outputs.style import MARKERS, PALETTE, SINGLE_COLUMN_IN, style_context
from orbitmass.results import quantile_block
from orbitmass.units import RS_AU_PER_MSUN

__all__ = ["comparison_figure", "enclosed_mass_figure", "RUN_COLOURS", "schwarzschild_axis_label", "tension_text"]

#: characters per line of the tension list under the figure (6 pt text, single column)
_TEXT_WIDTH = 68
#: colours of the runs (Okabe & Ito, via orbitmass.outputs.style); black is kept for the joint fit
RUN_COLOURS = tuple(PALETTE[k] for k in ("blue", "vermillion", "bluish_green", "orange", "reddish_purple", "sky_blue"))


def _rows(cmp) -> list[tuple[str, Any, str]]:
    rows = [(r.label, r, RUN_COLOURS[k % len(RUN_COLOURS)]) for k, r in enumerate(cmp.runs)]
    if cmp.combined is not None:
        rows.append((cmp.combined.label, cmp.combined, PALETTE["black"]))
    rows += [(f.label, f, "#6E6E6E") for f in cmp.references]
    return rows


def _scale(cmp) -> tuple[int, float]:
    meds = [np.median(r.mass_msun) for r in cmp.runs] + [f.mass_msun for f in cmp.references]
    k = choose_exponent(float(np.median(meds)))
    return k, 10.0**k


def tension_text(pair) -> str:
    """One line of the figure's tension list for a :class:`~orbitmass.compare.tension.PairComparison`.

    A resolved tension is given with its Monte Carlo error; a lower bound from
    the samples is given as such, with the normal approximation beside it.
    """
    head = f"{_plain(pair.a)} vs {_plain(pair.b)}: "
    if pair.tension_is_lower_bound:
        return (head + f"> {pair.tension_sigma:.1f} σ from the samples (lower bound); "
                f"normal approx. {pair.sigma_normal_approx:.1f} σ")
    err = pair.tension_sigma_mc_error
    return head + (f"{pair.tension_sigma:.2f} ± {err:.2f} σ" if err else f"{pair.tension_sigma:.2f} σ")


def comparison_figure(cmp):
    """Mass posteriors: densities (top), 68/95 % intervals (middle), the tensions (bottom).

    The bottom panel lists every comparison's tension (:func:`tension_text`):
    where the samples give only a lower bound, the normal approximation is
    shown beside it, labelled.

    Returns
    -------
    matplotlib.figure.Figure
        A single-column figure (not registered with pyplot).
    """
    rows = _rows(cmp)
    k, scale = _scale(cmp)
    lo = min(d.quantiles()["q2.5"] for _, d, _ in rows)
    hi = max(d.quantiles()["q97.5"] for _, d, _ in rows)
    log_x = lo > 0 and hi / lo > 10  # masses spanning decades: log axis
    if log_x:
        k, scale = 0, 1.0
        grid = np.geomspace(lo / 1.5, hi * 1.5, 1200)
    else:
        grid = np.linspace(lo - 0.25 * (hi - lo), hi + 0.25 * (hi - lo), 600)
    n = len(rows)
    lines = [wrapped for p in cmp.pairs
             for wrapped in textwrap.wrap(tension_text(p), width=_TEXT_WIDTH, subsequent_indent="    ")]
    text_h = 0.2 + 0.115 * len(lines) if lines else 0.0
    plots_h = 1.7 + 0.22 * n
    with style_context():
        gap = 0.55 if lines else 0.0  # inches between the mass axis (tick labels and label) and the list
        fig = Figure(figsize=(SINGLE_COLUMN_IN, plots_h + text_h + gap))
        # hspace is in units of the mean height of the two rows
        outer = fig.add_gridspec(2 if lines else 1, 1, height_ratios=[plots_h, text_h] if lines else [1],
                                 hspace=gap / ((plots_h + text_h) / 2) if lines else 0.0)
        gs = outer[0].subgridspec(2, 1, height_ratios=[1.5, 0.3 + 0.22 * n], hspace=0.06)
        ax_d = fig.add_subplot(gs[0])
        ax_i = fig.add_subplot(gs[1], sharex=ax_d)
        if lines:
            ax_t = fig.add_subplot(outer[1])
            ax_t.set_axis_off()
            ax_t.text(0.0, 1.0, "tension (Gaussian-equivalent):\n" + "\n".join(lines), transform=ax_t.transAxes,
                      ha="left", va="top", fontsize=6.0, color="#222222", linespacing=1.35)
        for j, (label, d, colour) in enumerate(rows):
            is_ref = isinstance(d, Reference)
            y = d.pdf(grid)
            y = y / y.max() if y.max() > 0 else y
            lw = 1.4 if d is cmp.combined else 1.0
            ax_d.plot(grid / scale, y, ls="--" if is_ref else "-", lw=lw, color=colour)
            if not is_ref:
                ax_d.fill_between(grid / scale, 0, y, color=colour, alpha=0.12, lw=0)
            q = d.quantiles()
            yv = n - 1 - j
            marker = "D" if is_ref else ("s" if d is cmp.combined else "o")
            ax_i.plot([q["q2.5"] / scale, q["q97.5"] / scale], [yv, yv], color=colour, lw=0.9)
            ax_i.plot([q["q16"] / scale, q["q84"] / scale], [yv, yv], color=colour, lw=3.0,
                      solid_capstyle="butt")
            centre = d.mass_msun if is_ref else q["median"]  # a reference: its quoted value
            ax_i.plot([centre / scale], [yv], marker=marker, color=colour, mfc="white",
                      mew=1.0, ms=4.5)
        ax_d.set_ylim(0, 1.08)
        ax_d.set_ylabel("density (peak = 1)")
        ax_d.tick_params(labelbottom=False)
        note = "bars: median, 68 % (thick), 95 % (thin)"
        if cmp.references:
            note += "; dashed: reference values"
        ax_d.set_title(note, loc="right", fontsize=6.5, color="#444444")
        ax_i.set_yticks(range(n), [_plain(r[0]) for r in rows][::-1])
        ax_i.set_ylim(-0.6, n - 0.4)
        ax_i.set_xlabel(f"total mass $M$ [{_mass_unit(k)}]")
        ax_i.set_xlim(grid[0] / scale, grid[-1] / scale)
        if log_x:
            ax_i.set_xscale("log")
    return fig


def enclosed_mass_figure(cmp):
    """Mass against radius: each companion at its semimajor axis and periastron.

    Filled markers sit at the semimajor axis, open ones at the periastron
    distance (medians, 68 % error bars in both directions); the band is
    the joint fit's mass (68 % dark, 95 % light), the expectation for a
    point mass. The top axis gives the radius in Schwarzschild radii of
    the joint (or median) mass.

    Returns
    -------
    matplotlib.figure.Figure
    """
    joint = cmp.joint()
    k, scale = _scale(cmp)
    grey = "#444444"
    masses = joint.mass_msun if joint is not None else np.concatenate([r.mass_msun for r in cmp.runs])
    ref_mass = float(np.median(masses))
    rs_au = RS_AU_PER_MSUN * ref_mass
    with style_context():
        fig = Figure(figsize=(SINGLE_COLUMN_IN, 0.9 * SINGLE_COLUMN_IN))
        ax = fig.add_subplot()
        ax.set_xscale("log")
        handles = []
        for j, run in enumerate(cmp.runs):
            colour = RUN_COLOURS[j % len(RUN_COLOURS)]
            mq = run.quantiles()
            y = mq["median"] / scale
            yerr = [[y - mq["q16"] / scale], [mq["q84"] / scale - y]]
            for kc, (comp, rad) in enumerate(run.radii.items()):
                marker = MARKERS[kc % len(MARKERS)]
                aq = quantile_block(rad["semimajor_axis_au"])
                pq = quantile_block(rad["periastron_au"])
                ax.plot([pq["median"], aq["median"]], [y, y], color=colour, lw=0.6, alpha=0.6)
                for qq, face in ((aq, colour), (pq, "white")):
                    xerr = [[qq["median"] - qq["q16"]], [qq["q84"] - qq["median"]]]
                    ax.errorbar([qq["median"]], [y], yerr=yerr, xerr=xerr, fmt=marker, color=colour,
                                mfc=face, mew=0.9, ms=4.5, elinewidth=0.8)
                name = run.label if len(run.radii) == 1 and comp in run.label else f"{run.label}: {comp}"
                handles.append(Line2D([], [], color=colour, marker=marker, lw=0, label=_plain(name)))
        if joint is not None:
            jq = joint.quantiles()
            black = PALETTE["black"]
            ax.axhspan(jq["q2.5"] / scale, jq["q97.5"] / scale, color=black, alpha=0.07, lw=0)
            ax.axhspan(jq["q16"] / scale, jq["q84"] / scale, color=black, alpha=0.15, lw=0)
            ax.axhline(jq["median"] / scale, color=black, lw=0.8)
            handles.append(Line2D([], [], color=black, lw=4, alpha=0.25,
                                  label=_plain(f"point mass from {joint.label} (68/95 %)")))
        handles.append(Line2D([], [], color=grey, marker="o", lw=0, label="at semimajor axis $a$"))
        handles.append(Line2D([], [], color=grey, marker="o", mfc="white", lw=0,
                              label=r"at periastron $r_\mathrm{p}$"))
        if len(handles) == 2 + (joint is not None):
            ax.set_axis_off()
            ax.text(0.5, 0.5, "no companion radii in these runs", transform=ax.transAxes,
                    ha="center")
            return fig
        ax.margins(x=0.12)
        ax.set_xlabel("radius $r$ [au]")
        ax.set_ylabel(f"enclosed mass $M(<r)$ [{_mass_unit(k)}]")
        sec = ax.secondary_xaxis("top", functions=(lambda r: r / rs_au, lambda x: x * rs_au))
        sec.set_xlabel(schwarzschild_axis_label(ref_mass))
        for axis in (ax.xaxis, sec.xaxis):
            _plain_log_ticks(axis)
        ncol = 2 if max(len(h.get_label()) for h in handles) <= 30 else 1
        ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.2), ncol=ncol,
                  fontsize=6.5, handlelength=1.6, handletextpad=0.8, columnspacing=1.0)
        ymin, ymax = ax.get_ylim()
        if ymin > 0 and ymax / ymin > 10:
            ax.set_yscale("log")
    return fig


def schwarzschild_axis_label(mass_msun: float) -> str:
    """Label of a radius axis in Schwarzschild radii of ``mass_msun``, readable for any mass.

    The mass gets its own power of ten (not the one of the mass axis) and the
    length of one Schwarzschild radius is given in its display unit (km for
    stellar masses, au for massive black holes).

    Examples
    --------
    >>> print(schwarzschild_axis_label(1.6))
    $r\\,/\\,R_\\mathrm{S}$ for $M = 1.6\\,M_\\odot$ ($R_\\mathrm{S} = 4.7\\,\\mathrm{km}$)
    """
    mass = _mathtext_number(mass_msun, 3) + r"\,M_\odot"
    rs_au = RS_AU_PER_MSUN * mass_msun
    unit, factor = display_unit("schwarzschild_radius_au", rs_au)
    rs = _mathtext_number(rs_au * factor, 2)
    return rf"$r\,/\,R_\mathrm{{S}}$ for $M = {mass}$ ($R_\mathrm{{S}} = {rs}\,{unit.math}$)"


def _mathtext_number(value: float, digits: int) -> str:
    """``value`` to ``digits`` significant digits as mathtext, a power of ten only when large or small."""
    k = choose_exponent(value)
    mant = f"{float(f'{value / 10.0**k:.{digits}g}'):g}"
    return rf"{mant}\times10^{{{k}}}" if k else mant


def _mass_unit(exponent: int) -> str:
    return rf"$10^{{{exponent}}}\,M_\odot$" if exponent else r"$M_\odot$"


def _plain_log_ticks(axis) -> None:
    """Log x-axis tick labels as plain numbers between 1e-3 and 1e5 (matplotlib picks which)."""
    class _Plain(LogFormatterSciNotation):
        def __call__(self, x, pos=None):
            text = super().__call__(x, pos)
            return f"{x:g}" if text and 1e-3 <= abs(x) < 1e5 else text

    axis.set_major_formatter(_Plain())
    axis.set_minor_formatter(_Plain(labelOnlyBase=False))
    # minor ticks are shorter: pad their labels so they line up with the major ones
    rc = matplotlib.rcParams
    axis.set_tick_params(which="minor", pad=rc["xtick.major.pad"] + rc["xtick.major.size"] - rc["xtick.minor.size"])


def _plain(text: str) -> str:
    return str(text).replace("$", r"\$")
