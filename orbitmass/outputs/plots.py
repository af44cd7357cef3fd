"""Figures of a fit (compatibility module): see :mod:`orbitmass.outputs.figures`.

The corner, orbit and trace figures live in :mod:`orbitmass.outputs.figures.corner`,
:mod:`~orbitmass.outputs.figures.orbit` and :mod:`~orbitmass.outputs.figures.trace`;
their names stay importable from here.
"""

from __future__ import annotations

from orbitmass.outputs.figures.common import EAST_LABEL, NORTH_LABEL, RV_LABEL, TIME_LABEL, axis_label
from orbitmass.outputs.figures.corner import corner_figure, default_corner_columns
from orbitmass.outputs.figures.orbit import ARCSEC_ABOVE_MAS, orbit_figure
from orbitmass.outputs.figures.trace import trace_figure

__all__ = ["corner_figure", "orbit_figure", "trace_figure", "axis_label", "default_corner_columns",
           "TIME_LABEL", "RV_LABEL", "EAST_LABEL", "NORTH_LABEL", "ARCSEC_ABOVE_MAS"]
