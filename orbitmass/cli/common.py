"""Shared pieces of the command line: argument types, exit codes, the error-to-exit-code mapping.

Exit codes: :data:`EXIT_OK` 0 success; :data:`EXIT_NOT_CONVERGED` 1 the fit ran
but did not converge; :data:`EXIT_INPUT` 2 bad input or options (one clear
message, no traceback); :data:`EXIT_INTERRUPTED` 130 interrupted (what is
finished is saved).
"""

from __future__ import annotations

import argparse
import contextlib
import math
import sys
import warnings
from collections.abc import Callable, Iterator, Sequence

from orbitmass.exceptions import InputError, OrbitmassError, OrbitmassWarning, PoorFitWarning, RunFolderError
from orbitmass.io.target import FIT_LIMITS
from orbitmass.model.quantities import display_unit, quantity

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
    "whole_int",
    "walkers_count",
    "step_cap",
    "fit_settings",
    "parse_params",
    "parse_units",
    "option_hint",
    "captured_warnings",
    "print_warnings",
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


def whole_int(text: str) -> int:
    """argparse type: any whole number (its range is checked by the command, in one line)."""
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None


#: argparse type of ``--walkers`` (range checked by :func:`fit_settings`)
walkers_count = whole_int
#: argparse type of ``--max-steps`` (range checked by :func:`fit_settings`)
step_cap = whole_int
_FLAGS = {"n_walkers": ("--walkers", "walkers"), "max_steps": ("--max-steps", "max_steps")}


def fit_settings(args: argparse.Namespace, file_options: dict, *, default_max_steps: int | None = 20000) -> dict:
    """Keyword arguments of :class:`orbitmass.fit.Fit` from the target's ``[fit]`` table and the flags.

    ``file_options`` is ``Target.fit_options.as_fit_kwargs()``; a flag that was
    given (not None) overrides the table, the table overrides the defaults.

    Raises
    ------
    InputError
        A ``--walkers`` or ``--max-steps`` outside the range the ``[fit]`` table
        accepts (:data:`orbitmass.io.target.FIT_LIMITS`), named by its flag.
    """
    given = {"seed": getattr(args, "seed", None), "n_walkers": getattr(args, "walkers", None),
             "max_steps": getattr(args, "max_steps", None)}
    for key, (flag, limit) in _FLAGS.items():
        low, high = FIT_LIMITS[limit]
        value = given[key]
        if value is not None and not low <= value <= high:
            raise InputError(f"expected a whole number from {low} to {high}, got {value}", key=flag)
    out = dict(file_options)
    out.update({k: v for k, v in given.items() if v is not None})
    out.setdefault("max_steps", default_max_steps)
    out.setdefault("seed", None)
    out.setdefault("n_walkers", None)
    return out


def parse_params(text: str | None) -> list[str] | None:
    """``--params a,b,c`` as a list of sample columns (None when not given)."""
    if text is None:
        return None
    names = [t.strip() for t in text.split(",") if t.strip()]
    if not names:
        raise InputError("expected sample columns separated by commas, e.g. mass_msun,distance_pc", key="--params")
    return names


def parse_units(text: str | None, companions: Sequence[str] = ()) -> dict[str, str] | None:
    """``--units key=unit,...`` as a dict, each pair checked against the quantity table.

    Raises
    ------
    InputError
        A pair without ``=``, an unknown quantity or a unit it cannot be shown in.
    """
    if text is None:
        return None
    out: dict[str, str] = {}
    for pair in (t.strip() for t in text.split(",")):
        if not pair:
            continue
        key, sep, unit = (s.strip() for s in pair.partition("="))
        if not sep or not key or not unit:
            raise InputError(f"expected QUANTITY=UNIT pairs separated by commas (e.g. distance_pc=kpc), got "
                             f"{pair!r}", key="--units")
        if quantity(key, companions) is None:
            raise InputError(f"{key!r} is not a quantity orbitmass reports (e.g. mass_msun, distance_pc, "
                             "C.period_yr)", key="--units")
        try:
            display_unit(key, 1.0, companions, override=unit)
        except ValueError as exc:
            raise InputError(str(exc), key="--units") from None
        out[key] = unit
    return out or None


def option_hint(exc: RunFolderError, flag: str = "--overwrite") -> RunFolderError:
    """The error with the library's neutral "pass overwrite" worded as this command's flag."""
    if getattr(exc, "remedy", None) != "overwrite":
        return exc
    text = str(exc).replace("pass overwrite", f"pass {flag}")
    if flag not in text:
        text += f" (pass {flag} to replace it)"
    new = RunFolderError(text)
    new.remedy = None
    return new


@contextlib.contextmanager
def captured_warnings() -> Iterator[list[warnings.WarningMessage]]:
    """Record every warning of the block; orbitmass's own are kept for :func:`print_warnings`,
    any other is shown again, as Python would, when the block ends."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", OrbitmassWarning)  # others keep the filters in force
        yield caught
    for w in caught:
        if not issubclass(w.category, OrbitmassWarning):
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno, source=w.source)


def print_warnings(caught: Sequence[warnings.WarningMessage], *, skip: tuple[type, ...] = (PoorFitWarning,)) -> int:
    """Print orbitmass's warnings once each (``warning: ...`` on stderr); returns how many were printed."""
    seen: list[str] = []
    for w in caught:
        if issubclass(w.category, OrbitmassWarning) and not issubclass(w.category, skip):
            text = str(w.message)
            if text not in seen:
                seen.append(text)
                print(f"warning: {text}", file=sys.stderr)
    return len(seen)


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
