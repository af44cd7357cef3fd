"""Forecasts from a fitted posterior: where the companions will be, and which epochs weigh the mass best.

:mod:`orbitmass.forecast.predict`
    posterior-predictive positions, separation, position angle and velocity at
    any epochs (``predictions.csv``), the next periastron passage and velocity
    extrema, and a figure.
:mod:`orbitmass.forecast.plan`
    ranks candidate epochs (and greedy sets of epochs) by the expected shrinkage
    of the mass posterior (or of another quantity) from a new position or
    velocity measurement.

Both work on a :class:`~orbitmass.results.Results` (``fit.results`` or
``orbitmass.load(run_dir).results``); the model comes from
:meth:`~orbitmass.results.Results.predict`.
"""

from __future__ import annotations

from orbitmass.forecast._common import parse_epoch
from orbitmass.forecast.predict import next_events, predict, write_predictions

__all__ = ["predict", "next_events", "write_predictions", "parse_epoch"]
