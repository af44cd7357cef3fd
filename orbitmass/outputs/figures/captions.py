"""Captions of the figures of a run, by figure name (what each figure shows, in words)."""

from __future__ import annotations

from orbitmass.outputs.figures import corner, orbit, residuals, trace
from orbitmass.results import Results

__all__ = ["figure_caption", "CAPTIONS"]

#: figure name -> caption function taking the Results
CAPTIONS = {"corner": corner.caption, "orbit": orbit.caption, "trace": trace.caption,
            "residuals": residuals.caption}


def figure_caption(name: str, results: Results) -> str:
    """Caption of the figure ``name`` (``""`` for a figure without one)."""
    func = CAPTIONS.get(name)
    return func(results) if func is not None else ""
