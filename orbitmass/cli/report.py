"""``orbitmass report``: re-render figures, tables and reports of a saved run."""

from __future__ import annotations

import argparse

from orbitmass.cli.common import EXIT_OK
from orbitmass.fit import load

__all__ = ["add_parser", "run"]

NAME = "report"


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Add ``report`` to the sub-parsers; returns its parser."""
    p = subparsers.add_parser("report", help="re-render figures, tables and reports of a saved run",
                              description="Re-render every figure, table and report page of RUN_DIR from its saved "
                                          "posterior, without refitting.")
    p.add_argument("run_dir", metavar="RUN_DIR", help="a run folder written by 'orbitmass fit'")
    return p


def run(args: argparse.Namespace) -> int:
    """Run ``orbitmass report``: 0, or an error for the caller to map."""
    fit = load(args.run_dir)
    path = fit.report(args.run_dir)
    print(f"report: {path}")
    return EXIT_OK
