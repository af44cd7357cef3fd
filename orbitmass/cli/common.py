"""Shared pieces of the command line: argument types, exit codes, the error-to-exit-code mapping.

Exit codes: :data:`EXIT_OK` 0 success; :data:`EXIT_NOT_CONVERGED` 1 the fit ran
but did not converge; :data:`EXIT_INPUT` 2 bad input or options (one clear
message, no traceback); :data:`EXIT_INTERRUPTED` 130 interrupted (what is
finished is saved).
"""

from __future__ import annotations

import argparse
import math
import sys
from collections.abc import Callable

from orbitmass.exceptions import OrbitmassError

__all__ = [
    "EXIT_OK",
    "EXIT_NOT_CONVERGED",
    "EXIT_INPUT",
    "EXIT_INTERRUPTED",
    "positive_int",
    "positive_float",
    "whole_number",
    "seed",
    "fmt_interval",
    "run_command",
]

EXIT_OK, EXIT_NOT_CONVERGED, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


def positive_int(text: str) -> int:
    """argparse type: a whole number > 0."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got {text!r}") from None
    if value <= 0:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got {text!r}")
    return value


def whole_number(text: str) -> int:
    """argparse type: a whole number >= 0."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0, got {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0, got {text!r}")
    return value


#: argparse type of a seed: a whole number >= 0
seed = whole_number


def positive_float(text: str) -> float:
    """argparse type: a finite number > 0 (e.g. seconds)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}") from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return value


def fmt_interval(block: dict) -> str:
    """``median (+up / -down)`` of a quantile block (68 % interval)."""
    med, lo, hi = block["median"], block["q16"], block["q84"]
    return f"{med:.4g} (+{hi - med:.2g} / -{med - lo:.2g})"


def run_command(run: Callable[[argparse.Namespace], int], args: argparse.Namespace) -> int:
    """Run a command and map what escapes it to an exit code, with one line on stderr.

    :class:`~orbitmass.exceptions.OrbitmassError` (bad input, unusable folders)
    gives :data:`EXIT_INPUT`, :class:`KeyboardInterrupt` :data:`EXIT_INTERRUPTED`;
    anything else is a bug and keeps its traceback.
    """
    try:
        return run(args)
    except OrbitmassError as exc:
        print(f"orbitmass: error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("orbitmass: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
