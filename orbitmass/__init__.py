"""orbitmass: weigh dark central objects from the orbits of things tracked around them."""

from __future__ import annotations

__version__ = "0.1.0"

__all__ = ["__version__"]
