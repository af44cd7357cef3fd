"""The joint refit: one fit of the union of several runs' data (one central mass, one distance)."""

from __future__ import annotations

import logging
from collections.abc import Sequence
from typing import Any

from orbitmass.compare.merge import combined_target
from orbitmass.compare.posteriors import RunLike
from orbitmass.fit import Fit

__all__ = ["combined_refit"]

log = logging.getLogger(__name__)


def combined_refit(
    runs: Sequence[RunLike],
    *,
    seed: int | None,
    labels: Sequence[str] | None = None,
    same_companion: str = "rename",
    priors_from: str | None = None,
    **fit_options: Any,
):
    """Fit the union of the runs' data jointly (one central mass, one distance).

    Parameters
    ----------
    runs : sequence of Fit, Results, Target or path
        The runs to combine (see :func:`combined_target` for the rules).
    seed : int or None
        Seed of the joint fit.
    labels, same_companion, priors_from
        As in :func:`combined_target`.
    **fit_options
        Passed to :class:`~orbitmass.fit.Fit` (``max_steps``, ``progress``, ``n_walkers``...).

    Returns
    -------
    Fit
        The fitted joint run.
    """
    target = combined_target(runs, labels=labels, same_companion=same_companion, priors_from=priors_from)
    log.info("joint refit of %s: %d companions", target.name, len(target.companions))
    fit_options.setdefault("progress", False)
    return Fit(seed=seed, **fit_options).fit(target)
