"""All products of a run (figures, tables, reports) through the renderer registry.

:func:`write_products` is what :func:`orbitmass.io.rundir.write_products` calls.
It uses no pyplot and changes no global matplotlib state: the figures are
:class:`matplotlib.figure.Figure` objects saved with their own canvas.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from pathlib import Path

# imported for their registrations (figures, tables, reports)
from orbitmass.outputs import figures, reports, tables  # noqa: F401
from orbitmass.outputs.registry import RENDERERS, render_all
from orbitmass.results import Results

__all__ = ["write_products", "RENDERERS"]


def write_products(
    results: Results,
    out_dir: str | os.PathLike[str],
    *,
    names: Sequence[str] | None = None,
    params: Sequence[str] | None = None,
    units: Mapping[str, str] | None = None,
    truths: Mapping[str, float] | None = None,
) -> Path:
    """Figures, tables and reports of ``results`` into ``out_dir``; returns report.md's path.

    Parameters
    ----------
    results : Results
    out_dir : str or path-like
        Destination folder (created if missing).
    names : sequence of str, optional
        Renderers to run (default: every registered one, see
        :data:`orbitmass.outputs.registry.RENDERERS`).
    params : sequence of str, optional
        Sample columns of the corner plot and the tables.
    units : dict, optional
        Display-unit overrides, base key or column -> unit key.
    truths : dict, optional
        Known true values for the corner plot (default ``results.truth`` if any).
    """
    out = Path(out_dir)
    render_all(results, out, names=names, params=params, units=units, truths=truths)
    return out / "report.md"
