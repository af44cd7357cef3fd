"""The problem statement: priors, the data containers, the sampled parameter
space and the likelihood (one residual term per kind of data).

Until 0.2, ``orbitmass.model`` was the module holding ``thiele_innes`` and
``relative_orbit``; those now live in :mod:`orbitmass.core.orbit` and are
reachable here for one more release with a deprecation warning.
"""

from __future__ import annotations

import warnings

_MOVED = {"thiele_innes": "orbitmass.core.orbit", "relative_orbit": "orbitmass.core.orbit"}


def __getattr__(name: str):
    if name in _MOVED:
        import importlib  # only for the deprecated names

        from orbitmass.exceptions import OrbitmassDeprecationWarning

        warnings.warn(f"orbitmass.model.{name} has moved to {_MOVED[name]}.{name}",
                      OrbitmassDeprecationWarning, stacklevel=2)
        return getattr(importlib.import_module(_MOVED[name]), name)
    raise AttributeError(f"module 'orbitmass.model' has no attribute {name!r}")
