"""Helpers shared by the figure modules: axis labels from the quantity table, safe text.

Labels are built from :data:`orbitmass.model.quantities.QUANTITIES` (symbol) and
the display unit chosen by :func:`orbitmass.model.quantities.display_unit`
from the magnitude of the plotted values, so figures, tables and reports show
a quantity in the same unit. No function here touches matplotlib's global
state; figures are :class:`matplotlib.figure.Figure` objects made in the
figure modules.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from numpy.typing import NDArray

from orbitmass.model.quantities import QUANTITIES, UNITS, Unit, display_unit

__all__ = ["mpl_text", "mpl_unit", "split_column", "axis_label", "varies", "display_scale", "truth_of",
           "TIME_LABEL", "RV_LABEL", "EAST_LABEL", "NORTH_LABEL"]

TIME_LABEL = "Epoch [Julian yr]"
RV_LABEL = r"$v_\mathrm{LOS}$ [km s$^{-1}$]"
EAST_LABEL = r"$\Delta\alpha\,\cos\delta$ [{unit}]"
NORTH_LABEL = r"$\Delta\delta$ [{unit}]"


def mpl_text(text: str) -> str:
    """User text made safe for matplotlib (no accidental mathtext)."""
    return str(text).replace("$", r"\$")


def mpl_unit(unit: Unit) -> str:
    r"""matplotlib text of a unit outside math: ``"pc"``, ``r"km s$^{-1}$"``, ``r"$M_\odot$"``."""
    if unit.key == "Julian yr":
        return "Julian yr"
    return unit.latex.replace(r"\,", " ")


def split_column(column: str, companions: Sequence[str]) -> tuple[str, str, str]:
    """(base, companion, instrument) of a sample column name."""
    head, _, tail = column.partition(".")
    if tail and head in companions:
        return tail, head, ""
    if tail:
        return head, "", tail
    return head, "", ""


def varies(values: NDArray[np.float64]) -> bool:
    """True when the finite values are not all equal (and there are at least two)."""
    finite = values[np.isfinite(values)]
    return finite.size > 1 and float(np.ptp(finite)) > 0.0


def display_scale(column: str, values: NDArray[np.float64], companions: Sequence[str] = (),
                  unit: str | None = None) -> tuple[Unit, float]:
    """Display unit and factor for plotted ``values`` of ``column`` (from their median)."""
    finite = np.asarray(values, float)
    finite = finite[np.isfinite(finite)]
    med = float(np.median(finite)) if finite.size else 0.0
    return display_unit(column, med, companions, override=unit)


def axis_label(
    column: str,
    companions: Sequence[str] = (),
    *,
    exponent: int = 0,
    show_companion: bool = True,
    unit: Unit | str | None = None,
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
    unit : Unit or str, optional
        Display unit (default: the stored unit of the quantity).

    Returns
    -------
    str
        A matplotlib (mathtext) label.
    """
    base, comp, inst = split_column(column, companions)
    q = QUANTITIES.get(base)
    if q is None:
        return mpl_text(column)
    u = UNITS[q.unit] if unit is None else (UNITS[unit] if isinstance(unit, str) else unit)
    symbol = "$" + q.latex + "$"
    if exponent:
        unit_text = f"$10^{{{exponent}}}" + (r"\," + u.math if u.math else "") + "$"
    else:
        unit_text = mpl_unit(u)
    label = symbol
    if inst:
        label += f" {mpl_text(inst)}"
    if comp and show_companion:
        label = f"{mpl_text(comp)}: {label}"
    return f"{label} [{unit_text}]" if unit_text else label


def truth_of(results: Any, truths: Mapping[str, float] | None) -> dict[str, float]:
    """Known true values (stored units) by sample column: ``truths``, else ``results.truth``.

    ``results.truth`` (or ``results.info["truth"]``) is used when the run carries
    one, e.g. a fit of simulated data; an empty dict when nothing is known.
    """
    if truths is not None:
        return {str(k): float(v) for k, v in truths.items()}
    known = getattr(results, "truth", None)
    if known is None:
        known = (getattr(results, "info", None) or {}).get("truth")
    if isinstance(known, Mapping):
        return {str(k): float(v) for k, v in known.items()}
    return {}
