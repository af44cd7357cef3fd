"""Exceptions and warning classes of orbitmass.

Every error a user can cause derives from :class:`OrbitmassError`; errors in
input files are :class:`InputError`, which also is a ``ValueError`` and names
the file, the line or key, and what was expected.
"""

from __future__ import annotations

__all__ = [
    "OrbitmassError",
    "InputError",
    "NotFittedError",
    "RunFolderError",
    "OrbitmassWarning",
    "ConvergenceWarning",
    "DegeneracyWarning",
    "PoorFitWarning",
]


class OrbitmassError(Exception):
    """Base class of every orbitmass error."""


class InputError(OrbitmassError, ValueError):
    """A target file, table or option is malformed.

    Parameters
    ----------
    message : str
        What is wrong and what was expected.
    file : str, optional
        Path of the offending file.
    line : int, optional
        1-based line number in that file.
    key : str, optional
        Dotted key (TOML) or column name (table).
    """

    def __init__(self, message: str, *, file: str = "", line: int | None = None, key: str = ""):
        self.file = str(file) if file else ""
        self.line = line
        self.key = key
        self.reason = message
        super().__init__(self._compose())

    def _compose(self) -> str:
        where = []
        if self.file:
            where.append(self.file if self.line is None else f"{self.file}:{self.line}")
        elif self.line is not None:
            where.append(f"line {self.line}")
        if self.key:
            where.append(f"'{self.key}'")
        prefix = ", ".join(where)
        return f"{prefix}: {self.reason}" if prefix else self.reason


class NotFittedError(OrbitmassError, AttributeError):
    """A result was asked of a fit object that has not been fitted or loaded."""


class RunFolderError(OrbitmassError, OSError):
    """A run folder cannot be written (exists and is not empty) or read."""


class OrbitmassWarning(UserWarning):
    """Base class of orbitmass warnings."""


class ConvergenceWarning(OrbitmassWarning):
    """The chain did not meet the convergence criteria of the output contract."""


class DegeneracyWarning(OrbitmassWarning):
    """The data cannot separate two solutions (e.g. the (omega, Omega) ambiguity)."""


class PoorFitWarning(OrbitmassWarning):
    """The model is implausible for the data (goodness of fit, ``summary.json`` ``fit_quality``).

    Separate from :class:`ConvergenceWarning`: a chain can be converged on a
    model that does not describe the data (errors in the wrong unit, a missing
    velocity zero point or companion).
    """


class OrbitmassDeprecationWarning(OrbitmassWarning, DeprecationWarning):
    """An old name or module path that still works but will be removed in the next release."""
