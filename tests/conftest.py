"""Shared fixtures. Builders shared by several test modules live in tests/helpers/."""

from __future__ import annotations

import numpy as np
import pytest


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)
