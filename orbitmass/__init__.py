"""orbitmass: weigh dark central objects from the orbits of things tracked around them.

Fit Keplerian orbits (Thiele-Innes form, sampled with emcee) to measured
positions and line-of-sight velocities of companions, and get posteriors for
the enclosed mass, the distance and every orbital element.

>>> import orbitmass
>>> sorted(n for n in orbitmass.__all__ if n[0].islower())
['load', 'read_target']
"""

from __future__ import annotations

from orbitmass import _compat  # noqa: E402
from orbitmass._version import __version__  # noqa: E402
from orbitmass.exceptions import (  # noqa: E402
    ConvergenceWarning,
    DegeneracyWarning,
    InputError,
    NotFittedError,
    OrbitmassDeprecationWarning,
    OrbitmassError,
    RunFolderError,
)
from orbitmass.fit import Fit, load  # noqa: E402
from orbitmass.io.target import read_target  # noqa: E402
from orbitmass.results import Results  # noqa: E402

_compat.install()

__all__ = [
    "__version__",
    "Fit",
    "load",
    "read_target",
    "Results",
    "OrbitmassError",
    "InputError",
    "NotFittedError",
    "RunFolderError",
    "ConvergenceWarning",
    "DegeneracyWarning",
    "OrbitmassDeprecationWarning",
]
