"""Names that left a module that still exists stay reachable for one release, with a warning.

Source of the list: the public names (``__all__``) of the flat 0.1 modules
``orbitmass.compare``, ``orbitmass.batch``, ``orbitmass.fit`` and ``orbitmass.model``
(project history, commit 69a905b); each must resolve to the object at its new home.
"""

from __future__ import annotations

import importlib

import pytest

from orbitmass._compat import MOVED_NAMES
from orbitmass.exceptions import OrbitmassDeprecationWarning


@pytest.mark.parametrize(("old", "new"), sorted(MOVED_NAMES.items()), ids=lambda k: ".".join(k))
def test_moved_name_warns_and_is_the_new_object(old, new):
    old_module, old_name = old
    module = importlib.import_module(old_module)
    with pytest.warns(OrbitmassDeprecationWarning, match=rf"{old_module}\.{old_name} has moved"):
        obj = getattr(module, old_name)
    assert obj is getattr(importlib.import_module(new[0]), new[1])


@pytest.mark.parametrize("module", sorted({m for m, _ in MOVED_NAMES}))
def test_unknown_names_still_raise_attribute_error(module):
    with pytest.raises(AttributeError, match="no attribute 'no_such_name'"):
        getattr(importlib.import_module(module), "no_such_name")
