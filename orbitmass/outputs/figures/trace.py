"""Walker traces of the sampled variables (a diagnostic figure), burn-in shaded.

Figures are plain :class:`matplotlib.figure.Figure` objects; the walker lines
are rasterised inside the vector PDF.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from orbitmass.exceptions import InputError
from orbitmass.model.quantities import PHASE_NAME, QUANTITIES
from orbitmass.outputs.figures.common import axis_label, mpl_text
from orbitmass.outputs.registry import register
from orbitmass.outputs.style import DOUBLE_COLUMN_IN, PALETTE, save_figure, style_context
from orbitmass.results import Results

__all__ = ["sampled_text", "trace_figure", "trace_label"]

logger = logging.getLogger(__name__)


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
    # lambda = M0 + omega, the mean argument of latitude at the reference epoch (PHASE_NAME)
    "mean_longitude": r"$\lambda = M_0+\omega$ [rad]",
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


#: sampled-variable name -> plain-text symbol (reports and tables), the same variables as above
_TRACE_TEXT = {
    "ln_mass": "ln(M/M☉)",
    "ln_distance": "ln(D/pc)",
    "ln_parallax": "ln(ϖ/mas)",
    "ln_period": "ln(P/yr)",
    "sqrte_cosw": "√e cos ω",
    "sqrte_sinw": "√e sin ω",
    "cos_i": "cos i",
    "node": "Ω [rad]",
    "omega": "ω [rad]",
    "mean_longitude": "λ = M₀ + ω [rad]",
    "mass_ratio": "q",
    "offset": "Δv [km/s]",
    "jitter": "σ_jit [km/s]",
    "ln_jitter": "ln(σ_jit/(km/s))",
    "x0": "x₀ [mas]",
    "y0": "y₀ [mas]",
    "vx0": "ẋ₀ [mas/yr]",
    "vy0": "ẏ₀ [mas/yr]",
    "vz0": "v_z,0 [km/s]",
    "systemic": "v_sys [km/s]",
}


def sampled_text(name: str) -> str:
    """Plain-text symbol of a sampled variable (companion prefix or instrument suffix kept).

    Examples
    --------
    >>> sampled_text("QD-S4.mean_longitude"), sampled_text("offset.south-ifu"), sampled_text("redshift_factor")
    ('QD-S4: λ = M₀ + ω [rad]', 'south-ifu: Δv [km/s]', 'f_z')
    """
    if name in _TRACE_TEXT:
        return _TRACE_TEXT[name]
    head, _, tail = name.partition(".")
    if head in ("offset", "jitter", "ln_jitter"):
        return f"{tail}: {_TRACE_TEXT[head]}"
    if tail in _TRACE_TEXT:
        return f"{head}: {_TRACE_TEXT[tail]}"
    if name in QUANTITIES:
        return QUANTITIES[name].text
    return name


def trace_label(name: str) -> str:
    """mathtext label of a sampled variable (companion prefix or instrument suffix kept)."""
    if name in _TRACE_LABELS:
        return _TRACE_LABELS[name]
    head, _, tail = name.partition(".")
    if head in ("offset", "jitter", "ln_jitter"):  # instrument suffix
        return f"{mpl_text(tail)}: {_TRACE_LABELS[head]}"
    if tail in _TRACE_LABELS:  # companion or plane prefix
        return f"{mpl_text(head)}: {_TRACE_LABELS[tail]}"
    if name in QUANTITIES:  # a term parameter sampled as it is reported (e.g. the redshift factor)
        return axis_label(name)
    return mpl_text(name)


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
    from matplotlib.collections import LineCollection  # start-up time: loaded only when needed
    from matplotlib.figure import Figure  # start-up time: loaded only when needed

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
    n_walkers_total = chain.shape[1]
    walkers = np.unique(np.linspace(0, chain.shape[1] - 1, min(max_walkers, chain.shape[1])).astype(int))
    chain = chain[:, walkers]
    stride = max(1, int(math.ceil(n_steps / max_points)))
    steps = np.arange(0, n_steps, stride)
    log_prob = np.asarray(results.log_prob)[:, walkers] if show_log_prob else None
    panels = [(n, chain[::stride, :, all_names.index(n)], trace_label(n)) for n in chosen]
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
        walk = (f"{chain.shape[1]} of {n_walkers_total} walkers" if chain.shape[1] < n_walkers_total
                else f"all {n_walkers_total} walkers")
        fig.suptitle(
            f"Walker traces: {shown} sampled variables, {walk}",
            x=0.01,
            ha="left",
            fontsize=8,
        )
        axes[-1].set_xlabel("Step")
    return fig


def caption(results: Results) -> str:
    """Caption of :func:`trace_figure`."""
    chain = np.asarray(results.chain)
    n_w = chain.shape[1] if chain.ndim == 3 else 0
    shown = min(16, n_w)
    text = (f"Walker traces of the sampled variables against step ({shown} of {n_w} walkers drawn); "
            "the bottom panel is the log posterior.")
    if results.burn > 0:
        text += f" The grey band is the burn-in ({results.burn} steps), discarded."
    if any("mean_longitude" in n for n in results.space.names):
        text += f" λ is the {PHASE_NAME}."
    lin = ((results.summary or {}).get("diagnostics") or {}).get("linear_path") or {}
    if str(lin.get("sampler_3d", "")).startswith("importance"):
        text += (" Fast path: the rows are not a Markov chain in time but the retained draws "
                 "of the three sampled variables, arranged for display.")
    return text


def _render(results: Results, out_dir: Path, **_ignored: Any) -> list[Path]:
    # a diagnostic of many noisy lines: a lower resolution keeps the PNG light
    return save_figure(trace_figure(results), Path(out_dir) / "trace", dpi=110)


register("trace", _render, kind="figure", files=("trace.png", "trace.pdf"),
         description="walker traces of the sampled variables")
