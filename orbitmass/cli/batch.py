"""``orbitmass batch``: fit many targets on dask and write a catalogue."""

from __future__ import annotations

import argparse
import importlib.util
import os
import sys
from pathlib import Path
from typing import Any

from orbitmass.batch import INSTALL_HINT, STATUS_CONVERGED, STATUS_FAILED, STATUS_NOT_CONVERGED, fit_batch
from orbitmass.batch.catalogue import FIT_POOR, base_status
from orbitmass.cli.common import (
    EXIT_INTERRUPTED,
    EXIT_NOT_CONVERGED,
    EXIT_OK,
    fit_settings,
    positive_float,
    positive_int,
    seed,
    step_cap,
    walkers_count,
    whole_number,
)

__all__ = ["add_parser", "run"]

NAME = "batch"


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Add the ``batch`` subcommand to the ``orbitmass`` argument parser.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``parser.add_subparsers()``.

    Returns
    -------
    argparse.ArgumentParser
        The subcommand's parser (its handler is :func:`run`).
    """
    p = subparsers.add_parser(
        "batch",
        help="fit many targets on a dask cluster and write a catalogue",
        description="Fit every target file (or glob pattern, quoted) on dask.distributed: a local "
        "cluster of N worker processes, or a running cluster at --scheduler. Each target gets "
        "the run folder DIR/runs/<name>, as 'orbitmass fit' writes it; DIR/catalogue.csv (and "
        ".parquet with pyarrow) lists every target's mass, distance, elements, diagnostics "
        "and status (with ', poor fit' when the goodness of fit is poor; column fit_status). Rerunning the "
        "same command skips finished targets. Each target file's [fit] table (walkers, seed, max_steps) "
        "applies where the flags below are not given; a flag given overrides it. Needs "
        f"{INSTALL_HINT}.",
    )
    p.add_argument("targets", nargs="+", metavar="TARGET_OR_GLOB", help="target files or glob patterns")
    p.add_argument("--out", required=True, metavar="DIR", help="batch folder (runs/ and catalogue)")
    where = p.add_mutually_exclusive_group()
    where.add_argument(
        "--workers",
        type=positive_int,
        default=None,
        metavar="N",
        help="worker processes of a local cluster (default: CPU cores)",
    )
    where.add_argument(
        "--scheduler",
        default=None,
        metavar="ADDRESS",
        help="address of a running dask scheduler, e.g. tcp://host:8786",
    )
    p.add_argument(
        "--seed",
        type=seed,
        default=None,
        metavar="N",
        help="batch seed; each target's seed derives from it and the target name (given, it overrides "
        "[fit] seed; default: a target's [fit] seed, else the seed derived from 0)",
    )
    p.add_argument(
        "--walkers",
        type=walkers_count,
        default=None,
        metavar="N",
        help="ensemble size, 2 to 100000 (default: [fit] walkers, else max(64, 4 x parameters))",
    )
    p.add_argument(
        "--max-steps",
        type=step_cap,
        default=None,
        metavar="N",
        help="step cap of each fit, 10 to 100000000 (default: [fit] max_steps, else 20000)",
    )
    p.add_argument(
        "--retries",
        type=whole_number,
        default=1,
        metavar="N",
        help="extra attempts for a fit that crashes unexpectedly (default 1)",
    )
    p.add_argument(
        "--target-timeout",
        type=positive_float,
        default=None,
        metavar="SECONDS",
        help="wall-clock limit of each target's fit; a fit still running then is stopped and the target "
        "recorded as failed (reason 'timeout'); default: no limit",
    )
    p.add_argument(
        "--no-figures",
        action="store_true",
        help="write only summary.json, posterior.h5 and the inputs per run (faster); "
        "'orbitmass report RUN_DIR' adds figures and reports later",
    )
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.add_argument("--no-fast-path", action="store_true",
                   help="sample every element even where the astrometry-only fast path applies")
    return p


def _show_dashboard(client) -> None:
    link = getattr(client, "dashboard_link", None)
    if link:
        note = "" if importlib.util.find_spec("bokeh") is not None else " (pip install bokeh to see it)"
        print(f"dask dashboard: {link}{note}", file=sys.stderr)


def run(args: argparse.Namespace) -> int:
    """Run ``orbitmass batch``: 0 every target converged; 1 some did not converge or failed; 130 interrupted.

    Errors of the whole batch raise :class:`~orbitmass.exceptions.OrbitmassError`
    (exit code 2 in the CLI).
    """
    # dask logs every connection at INFO level, in this process and in local workers (which take
    # the environment along): only its warnings unless --verbose
    os.environ.setdefault("DASK_LOGGING__DISTRIBUTED", "info" if getattr(args, "verbose", False) else "warning")
    given = fit_settings(args, {}, default_max_steps=None)  # range checks; only the flags given are passed
    options: dict[str, Any] = {k: v for k, v in given.items() if k != "seed" and v is not None}
    if args.no_fast_path:
        options["linear"] = False
    catalogue_path = Path(args.out) / "catalogue.csv"
    try:
        catalogue = fit_batch(
            args.targets,
            args.out,
            workers=args.workers,
            scheduler=args.scheduler,
            seed=args.seed,
            fit_options=options,
            products=not args.no_figures,
            retries=args.retries,
            progress=False if args.no_progress else None,
            on_client=_show_dashboard,
            timeout=args.target_timeout,
        )
    except KeyboardInterrupt:
        print(f"orbitmass: interrupted; {catalogue_path} marks unfinished targets; rerun the same command "
              "to resume", file=sys.stderr)
        return EXIT_INTERRUPTED
    counts = catalogue["status"].map(lambda s: base_status(str(s))).value_counts()
    n_conv = int(counts.get(STATUS_CONVERGED, 0))
    n_not = int(counts.get(STATUS_NOT_CONVERGED, 0))
    n_fail = int(counts.get(STATUS_FAILED, 0))
    n_kept = int(catalogue["skipped"].sum())
    poor = catalogue[catalogue["fit_status"] == FIT_POOR]
    print(f"{len(catalogue)} targets: {n_conv} converged, {n_not} not converged, {n_fail} failed "
          f"({n_kept} complete runs kept from before)" + (f"; {len(poor)} poor fits" if len(poor) else ""))
    for row in catalogue[catalogue["status"] == STATUS_FAILED].itertuples():
        print(f"failed: {row.name}: {row.error}", file=sys.stderr)
    for row in poor.itertuples():
        print(f"warning: poor fit: {row.name}: the model does not describe its data; see "
              f"{Path(row.run_dir) / 'report.md'}", file=sys.stderr)
    for row in catalogue[catalogue["note"].notna()].itertuples():
        print(f"note: {row.name}: {row.note}", file=sys.stderr)
    print(f"catalogue: {catalogue_path}")
    return EXIT_OK if n_conv == len(catalogue) else EXIT_NOT_CONVERGED
