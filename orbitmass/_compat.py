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

__all__ = ["MOVED_MODULES", "MOVED_NAMES", "moved_name", "install"]

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


#: (old module, old name) -> (new module, new name): functions that left a module
#: which still exists. The old module's ``__getattr__`` calls :func:`moved_name`.
MOVED_NAMES: dict[tuple[str, str], tuple[str, str]] = {
    ("orbitmass.model", "thiele_innes"): ("orbitmass.core.orbit", "thiele_innes"),
    ("orbitmass.model", "relative_orbit"): ("orbitmass.core.orbit", "relative_orbit"),
    ("orbitmass.compare", "demo_comparison"): ("orbitmass.demo.run", "demo_comparison"),
    ("orbitmass.compare", "add_compare_parser"): ("orbitmass.cli.compare", "add_parser"),
    ("orbitmass.compare", "cmd_compare"): ("orbitmass.cli.compare", "run"),
    ("orbitmass.batch", "write_example_sample"): ("orbitmass.demo.scenarios", "write_example_sample"),
    ("orbitmass.batch", "add_batch_parser"): ("orbitmass.cli.batch", "add_parser"),
    ("orbitmass.batch", "cmd_batch"): ("orbitmass.cli.batch", "run"),
    ("orbitmass.fit", "redshift_distance_pc"): ("orbitmass.core.cosmology", "redshift_distance_pc"),
    ("orbitmass.fit", "priors_used"): ("orbitmass.model.parameters", "priors_used"),
}


def moved_name(module: str, name: str):
    """The object an old ``module.name`` now is, with a deprecation warning.

    For a module's ``__getattr__`` (PEP 562): the new module is imported only
    when the old name is used, so the old module does not import its new home
    (which may sit above it in the import order). Any other name raises
    :class:`AttributeError` as usual.
    """
    target = MOVED_NAMES.get((module, name))
    if target is None:
        raise AttributeError(f"module {module!r} has no attribute {name!r}")
    new_module, new_name = target
    warnings.warn(f"{module}.{name} has moved to {new_module}.{new_name}; the old name will be removed in the "
                  "next release", OrbitmassDeprecationWarning, stacklevel=3)
    return getattr(importlib.import_module(new_module), new_name)


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
