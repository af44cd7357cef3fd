"""Normalised residuals (O - C) / sigma against epoch, one panel per dataset, with 1, 3, 5 sigma bands.

The values come from ``results.info["residuals"]`` (the residual table of
:func:`orbitmass.inference.quality.residuals_table`, computed at the
maximum-posterior point and saved with the run as ``residuals.csv``): one row
per measured value, in the form it was measured (east and north offsets,
separation and position angle, line-of-sight velocities of the companion or
the central body). Panels follow the datasets of ``summary.json``
``fit_quality`` (each companion's positions, each instrument's velocities);
beyond 20 sigma the vertical axis becomes linear within +-5 and logarithmic
outside, so that grossly wrong data stay on the page without flattening the
bands.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from orbitmass.outputs.figures.common import TIME_LABEL, mpl_text
from orbitmass.outputs.registry import register
from orbitmass.outputs.style import DOUBLE_COLUMN_IN, MARKERS, PALETTE, save_figure, style_context
from orbitmass.results import Results

__all__ = ["residuals_figure", "caption", "KIND_LABELS"]

#: residual kind (column ``kind``) -> legend label, in legend order
KIND_LABELS = {
    "east": "east offset",
    "north": "north offset",
    "separation": "separation",
    "position_angle": "position angle",
    "rv": "velocity (companion)",
    "rv_central": "velocity (central body)",
}
_KIND_STYLE = {
    "east": (PALETTE["blue"], "o", True),
    "north": (PALETTE["vermillion"], "s", True),
    "separation": (PALETTE["bluish_green"], "^", True),
    "position_angle": (PALETTE["orange"], "D", True),
    "rv": (PALETTE["blue"], "o", True),
    "rv_central": (PALETTE["reddish_purple"], "o", False),
}
#: beyond this |(O - C)/sigma| the axis turns symmetric-logarithmic
SYMLOG_ABOVE = 20.0


def _tick_text(value: float, _pos: int = 0) -> str:
    """Plain tick text (``-1000``, ``-5``, ``0``, ``5``, ``100``), no powers of ten to collide near 0."""
    return "0" if value == 0 else f"{value:.0f}".replace("-", "\u2212")


def _table(results: Results) -> dict[str, np.ndarray] | None:
    raw = (getattr(results, "info", None) or {}).get("residuals")
    if not raw or not raw.get("normalised"):
        return None
    return {k: np.asarray(v) for k, v in raw.items()}


def _labels(results: Results) -> dict[str, str]:
    fq = (results.summary or {}).get("fit_quality") or {}
    return {k: str(d.get("label", k)) for k, d in (fq.get("datasets") or {}).items() if isinstance(d, dict)}


def residuals_figure(results: Results, *, fig: Any = None) -> Any:
    """Normalised residuals against epoch per dataset, with +-1, 3, 5 sigma bands.

    Parameters
    ----------
    results : Results
        A fitted run; its ``info["residuals"]`` is plotted. A run without
        residuals (written by an earlier version) gets a figure saying so.
    fig : matplotlib.figure.Figure, optional
        Empty figure to draw into.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure  # start-up time: loaded only when needed
    from matplotlib.lines import Line2D  # start-up time: loaded only when needed
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator  # start-up time: as above

    table = _table(results)
    labels = _labels(results)
    datasets = list(dict.fromkeys(table["dataset"].astype(str))) if table is not None else []
    with style_context():
        if fig is None:
            fig = Figure(figsize=(DOUBLE_COLUMN_IN, max(2.4, 1.9 * max(len(datasets), 1) + 0.5)),
                         layout="constrained")
        if table is None:
            ax = fig.subplots()
            ax.set_axis_off()
            ax.text(0.5, 0.5, "No residuals recorded in this run (written by an earlier version);\n"
                    "fit again to get them.", ha="center", va="center", fontsize=9, transform=ax.transAxes)
            return fig
        axes = fig.subplots(len(datasets), 1, sharex=True, squeeze=False)[:, 0]
        epoch = table["epoch_jyear"].astype(float)
        z = table["normalised"].astype(float)
        kinds = table["kind"].astype(str)
        instruments = table["instrument"].astype(str)
        pad = 0.03 * (np.ptp(epoch) or 1.0)
        for ax, key in zip(axes, datasets, strict=True):
            m = table["dataset"].astype(str) == key
            zmax = float(np.nanmax(np.abs(z[m]))) if np.any(np.isfinite(z[m])) else 0.0
            for lim, shade in ((5.0, "0.94"), (3.0, "0.86"), (1.0, "0.76")):
                ax.axhspan(-lim, lim, color=shade, lw=0, zorder=0)
            for lim in (5.0, -5.0):
                ax.axhline(lim, color="0.35", lw=0.7, ls="--", zorder=1)
            ax.axhline(0.0, color="0.2", lw=0.7, zorder=1)
            handles = []
            insts = [i for i in dict.fromkeys(instruments[m]) if i not in ("None", "nan", "")]
            for kind, text in KIND_LABELS.items():
                sel = m & (kinds == kind)
                if not np.any(sel):
                    continue
                colour, marker, filled = _KIND_STYLE[kind]
                groups = insts if kind.startswith("rv") and len(insts) > 1 else [None]
                for g, inst in enumerate(groups):
                    s = sel if inst is None else sel & (instruments == inst)
                    if not np.any(s):
                        continue
                    mk = MARKERS[g % len(MARKERS)] if inst is not None else marker
                    ax.plot(epoch[s], z[s], ls="none", marker=mk, ms=3.5, mew=0.8, color=colour,
                            mfc=colour if filled else "none", zorder=3)
                    label = text if inst is None else f"{text}, {inst}"
                    handles.append(Line2D([], [], ls="none", marker=mk, ms=4, color=colour,
                                          mfc=colour if filled else "none", label=mpl_text(label)))
            if zmax > SYMLOG_ABOVE:
                ax.set_yscale("symlog", linthresh=5.0, linscale=1.0)
                top_exp = int(np.ceil(np.log10(zmax * 1.2)))
                ax.set_ylim(-(10.0 ** top_exp), 10.0 ** top_exp)
                ticks = [0.0, 5.0] + [10.0 ** k for k in range(2, top_exp + 1)]
                ticks = sorted({-t for t in ticks} | set(ticks))
                ax.yaxis.set_major_locator(FixedLocator(ticks))
                ax.yaxis.set_minor_locator(NullLocator())
                ax.yaxis.set_major_formatter(FuncFormatter(_tick_text))
            else:
                top = max(6.0, 1.15 * zmax)
                ax.set_ylim(-top, top)
            ax.set_ylabel(r"$(O-C)/\sigma$")
            ax.set_title(mpl_text(labels.get(key, key)), loc="left", fontsize=8)
            ax.legend(handles=handles, fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0),
                      borderaxespad=0.0, frameon=False)
            ax.tick_params(labelsize=7)
        axes[0].set_xlim(float(np.min(epoch)) - pad, float(np.max(epoch)) + pad)
        axes[-1].set_xlabel(TIME_LABEL)
        fig.suptitle("Normalised residuals at the maximum-posterior point; bands: 1, 3 sigma (shaded), "
                     "5 sigma (dashed)", x=0.01, ha="left", fontsize=8)
    return fig


def caption(results: Results) -> str:
    """Caption of :func:`residuals_figure`."""
    text = ("Normalised residuals (O − C)/σ of every measured value against epoch, one panel per dataset, "
            "at the maximum-posterior point, in the form each row was measured (east/north offsets, "
            "separation and position angle, velocities with the instrument offset and systemic velocity "
            "included in C; σ includes the fitted jitter). Shaded bands: ±1 and ±3 σ; dashed lines: ±5 σ.")
    table = _table(results)
    if table is not None and np.nanmax(np.abs(table["normalised"].astype(float))) > SYMLOG_ABOVE:
        text += " The vertical axis is linear within ±5 σ and logarithmic beyond."
    if table is None:
        text = "This run recorded no residuals (an earlier version wrote it)."
    return text


def _render(results: Results, out_dir: Path, **_ignored: Any) -> list[Path]:
    return save_figure(residuals_figure(results), Path(out_dir) / "residuals")


register("residuals", _render, kind="figure", files=("residuals.png", "residuals.pdf"),
         description="normalised residuals (O - C)/sigma against epoch per dataset")
