"""Old module paths, kept importable for one release with a deprecation warning.

Until version 0.2 the package was flat (``orbitmass.kepler``,
``orbitmass.likelihood``, ...). Those names now live in subpackages; this
module maps each old path to its new module so that ``import orbitmass.kepler``
still works and warns once with :class:`OrbitmassDeprecationWarning`. The old
path is an alias of the new module (the same object), so attributes set on one
are seen through the other. Remove this module in the release after 0.2.
"""

from __future__ import annotations

import importlib
import importlib.abc
import importlib.util
import sys
import warnings

from orbitmass.exceptions import OrbitmassDeprecationWarning

__all__ = ["MOVED_MODULES", "install"]

#: old dotted path -> new dotted path
MOVED_MODULES: dict[str, str] = {
    "orbitmass.kepler": "orbitmass.core.kepler",
    "orbitmass.elements": "orbitmass.core.elements",
    "orbitmass.physics": "orbitmass.core.physics",
    "orbitmass.diagnostics": "orbitmass.core.diagnostics",
    "orbitmass.priors": "orbitmass.model.priors",
    "orbitmass.data": "orbitmass.model.data",
    "orbitmass.parameters": "orbitmass.model.parameters",
    "orbitmass.likelihood": "orbitmass.model.likelihood",
    "orbitmass.initialise": "orbitmass.inference.initialise",
    "orbitmass.sampler": "orbitmass.inference.sampler",
    "orbitmass.linear": "orbitmass.inference.linear",
    "orbitmass.style": "orbitmass.outputs.style",
    "orbitmass.plots": "orbitmass.outputs.plots",
    "orbitmass.reports": "orbitmass.outputs.reports",
    "orbitmass.simulate": "orbitmass.demo.simulate",
}


class _AliasLoader(importlib.abc.Loader):
    def __init__(self, new: str):
        self.new = new

    def create_module(self, spec):
        warnings.warn(f"{spec.name} has moved to {self.new}; the old path will be removed in the next release",
                      OrbitmassDeprecationWarning, stacklevel=4)
        return importlib.import_module(self.new)

    def exec_module(self, module):  # the new module is already executed
        return None


class _MovedModuleFinder(importlib.abc.MetaPathFinder):
    """Answers only for the names in :data:`MOVED_MODULES`."""

    def find_spec(self, fullname, path=None, target=None):
        new = MOVED_MODULES.get(fullname)
        if new is None:
            return None
        return importlib.util.spec_from_loader(fullname, _AliasLoader(new))


def install() -> None:
    """Register the finder once (idempotent)."""
    if not any(isinstance(f, _MovedModuleFinder) for f in sys.meta_path):
        sys.meta_path.append(_MovedModuleFinder())
