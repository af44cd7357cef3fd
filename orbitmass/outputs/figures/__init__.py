"""Figures of a fit, one module each: :mod:`.corner`, :mod:`.orbit`, :mod:`.trace`, :mod:`.residuals`.

Every function takes a :class:`~orbitmass.results.Results` first, every option
keyword-only, draws into ``fig`` when given (an empty
:class:`matplotlib.figure.Figure`) and returns the figure. New figures are
plain ``Figure`` objects, never pyplot figures, and the style is applied with
:func:`orbitmass.outputs.style.style_context` inside each call, so no global
matplotlib state changes; save them with :func:`orbitmass.outputs.style.save_figure`.
Importing a figure module registers its renderer (:mod:`orbitmass.outputs.registry`).
"""

from orbitmass.outputs.figures.common import axis_label
from orbitmass.outputs.figures.corner import corner_figure, default_corner_columns
from orbitmass.outputs.figures.orbit import orbit_figure
from orbitmass.outputs.figures.residuals import residuals_figure
from orbitmass.outputs.figures.trace import trace_figure

__all__ = ["corner_figure", "orbit_figure", "trace_figure", "residuals_figure", "axis_label", "default_corner_columns"]
