"""The problem statement: priors, the data containers, the sampled parameter
space and the likelihood (one residual term per kind of data).

Until 0.2, ``orbitmass.model`` was the module holding ``thiele_innes`` and
``relative_orbit``; those now live in :mod:`orbitmass.core.orbit` and are
reachable here for one more release with a deprecation warning.
"""

from __future__ import annotations

from orbitmass._compat import moved_name


def __getattr__(name: str):
    return moved_name(__name__, name)
