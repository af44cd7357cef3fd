"""``orbitmass report``: re-render figures, tables and reports of a saved run."""

from __future__ import annotations

import argparse

from orbitmass.cli.common import EXIT_OK, parse_params, parse_units
from orbitmass.cli.fit import add_display_options, print_quality
from orbitmass.fit import load
from orbitmass.io.rundir import check_run_folder_writable, write_products

__all__ = ["add_parser", "run"]

NAME = "report"


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Add ``report`` to the sub-parsers; returns its parser."""
    p = subparsers.add_parser("report", help="re-render figures, tables and reports of a saved run",
                              description="Re-render every figure, table and report page of RUN_DIR from its saved "
                                          "posterior, without refitting.")
    p.add_argument("run_dir", metavar="RUN_DIR", help="a run folder written by 'orbitmass fit'")
    add_display_options(p)
    return p


def run(args: argparse.Namespace) -> int:
    """Run ``orbitmass report``: 0, or an error for the caller to map."""
    check_run_folder_writable(args.run_dir)  # a read-only folder fails here, before loading or drawing
    fit = load(args.run_dir)
    params = parse_params(getattr(args, "params", None))
    units = parse_units(getattr(args, "units", None), fit.results.companion_names)
    path = write_products(fit.results, args.run_dir, params=params, units=units)
    print(f"report: {path}")
    print_quality(fit.summary)  # a poor fit is said again on the console (stderr), an ok one in one line
    return EXIT_OK
