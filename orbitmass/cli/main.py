"""The ``orbitmass`` command: the parser, the table of commands, :func:`main`.

Each command is a module of :mod:`orbitmass.cli` with ``add_parser(subparsers)``
(adds its sub-parser and returns it) and ``run(args) -> int`` (does the work,
returns the exit code, raises :class:`~orbitmass.exceptions.OrbitmassError` on
bad input). :data:`COMMANDS` lists them in the order of ``orbitmass --help``;
a new command is one module and one entry here.
"""

from __future__ import annotations

import argparse
import logging
import sys

from orbitmass._version import __version__
from orbitmass.cli import batch, compare, demo, export, fit, plan, predict, report
from orbitmass.cli.common import EXIT_INPUT, run_command

__all__ = ["main", "build_parser", "COMMANDS"]

#: command name -> module with add_parser(subparsers) and run(args) -> int
COMMANDS = {
    "fit": fit,
    "demo": demo,
    "report": report,
    "compare": compare,
    "batch": batch,
    "predict": predict,
    "plan": plan,
    "export": export,
}


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``orbitmass`` command."""
    parser = argparse.ArgumentParser(
        prog="orbitmass",
        description="Weigh dark central objects from the orbits of things tracked around them: "
                    "orbit fits (Keplerian, optionally with relativistic terms) of positions and line-of-sight "
                    "velocities, with posteriors for "
                    "the enclosed mass, the distance and every orbital element.",
    )
    parser.add_argument("--version", action="version", version=f"orbitmass {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress of initialisation and sampling")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in COMMANDS.values():
        module.add_parser(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``orbitmass`` command; returns the exit code.

    0 success; 1 ran but did not converge; 2 bad input or usage; 130 interrupted.
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return EXIT_INPUT
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="%(levelname)s %(name)s: %(message)s")
    return run_command(COMMANDS[args.command].run, args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
