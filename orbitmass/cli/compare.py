"""``orbitmass compare``: compare saved runs with each other and with reference values."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from orbitmass.cli.common import EXIT_NOT_CONVERGED, EXIT_OK, option_hint, positive_int, seed
from orbitmass.exceptions import InputError, RunFolderError
from orbitmass.outputs.formatting import summary_text

__all__ = ["add_parser", "run"]

NAME = "compare"


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Add the ``compare`` command to the ``orbitmass`` sub-parsers; returns its parser."""
    p = subparsers.add_parser(
        "compare",
        help="compare the mass posteriors of saved runs, and fit their data jointly",
        description="Compare the mass posteriors of the run folders RUN_DIR... pairwise and "
        "against "
        "reference values (difference, ratio, tension in sigma, overlap), optionally refit "
        "the union of their data as one central body, and write comparison.json, "
        "comparison.md and figures into DIR.",
    )
    p.add_argument("run_dirs", nargs="+", metavar="RUN_DIR", help="run folders written by 'orbitmass fit'")
    p.add_argument(
        "--reference",
        action="append",
        default=[],
        metavar="'[NAME=]M +- ERR UNIT'",
        help="a reference mass, e.g. 'gas disc=4.1e6 +- 0.1e6 solMass' or '4.1e6 +0.2e6 -0.1e6 solMass' (repeatable)",
    )
    p.add_argument(
        "--label",
        action="append",
        default=None,
        metavar="NAME",
        help="name of each run, in RUN_DIR order (repeat once per run; default: folder names)",
    )
    p.add_argument("--out", required=True, metavar="DIR", help="folder to write (must be new or empty)")
    p.add_argument(
        "--refit",
        action="store_true",
        help="also fit the union of the runs' data as one central body (written to DIR/combined)",
    )
    p.add_argument(
        "--same-companion",
        choices=("rename", "merge"),
        default="rename",
        help="with --refit, a companion name found in several runs: 'rename' (different bodies, "
        "default) or 'merge' (one body: concatenate its data)",
    )
    p.add_argument(
        "--priors-from",
        default=None,
        metavar="LABEL",
        help="with --refit, take central priors and distance from this run when they differ",
    )
    p.add_argument(
        "--seed",
        type=seed,
        default=1,
        metavar="N",
        help="seed of the resampling and of the refit (default 1)",
    )
    p.add_argument(
        "--max-steps",
        type=positive_int,
        default=20000,
        metavar="N",
        help="step cap of the refit (default 20000)",
    )
    p.add_argument("--overwrite", action="store_true",
                   help="replace DIR if it holds an earlier comparison (and nothing else)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    return p


def run(args: argparse.Namespace) -> int:
    """Run ``orbitmass compare``: 0, or 1 when the joint refit did not converge.

    Errors are raised as :class:`~orbitmass.exceptions.OrbitmassError` for the caller to map.
    """
    # imported here for the start-up time of the CLI: orbitmass.compare loads matplotlib and
    # astropy.units (about 1.5 s), which `orbitmass --help` and the other commands do not need
    from orbitmass.compare import compare_folders, parse_reference

    if args.label is not None and len(args.label) != len(args.run_dirs):
        raise InputError(f"{len(args.label)} --label for {len(args.run_dirs)} run folders; give one per RUN_DIR, "
                         "in order", key="--label")
    refs = [parse_reference(text, key="--reference") for text in args.reference]
    try:
        cmp = compare_folders(args.run_dirs, args.out, references=refs, labels=args.label, refit=args.refit,
                              same_companion=args.same_companion, priors_from=args.priors_from, seed=args.seed,
                              max_steps=args.max_steps, overwrite=args.overwrite,
                              progress=False if args.no_progress else None)
    except RunFolderError as exc:
        raise option_hint(exc) from None
    except InputError as exc:  # the library's option named as this command's flag
        if "with priors_from" not in exc.reason:
            raise
        raise InputError(exc.reason.replace("with priors_from", "with --priors-from LABEL"), file=exc.file,
                         line=exc.line, key=exc.key) from None
    for p in cmp.pairs:
        print(f"{p.a} vs {p.b}: {p.statement}")
    code = EXIT_OK
    if cmp.combined is not None:
        print(f"joint refit: total mass {summary_text('mass_msun', cmp.combined.quantiles())}")
        if cmp.combined.converged is False:
            print("warning: the joint refit did not converge; results are provisional", file=sys.stderr)
            code = EXIT_NOT_CONVERGED
    print(f"comparison: {Path(args.out) / 'comparison.md'}")
    return code
