"""Shared fixtures. Builders shared by several test modules live in tests/helpers/."""

from __future__ import annotations

import numpy as np
import pytest

# re-exported for test files written before tests/helpers existed; they fail
# tests/test_package_structure.py::test_tests_import_no_other_test_module with the line to change
from tests.helpers.targets import make_target  # noqa: F401


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)
