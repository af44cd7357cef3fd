"""``orbitmass predict``: posterior-predictive positions and velocities of a saved run.

Parsing and exit codes only; the work is :func:`orbitmass.forecast.predict.write_predictions`.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from orbitmass.exceptions import InputError, RunFolderError
from orbitmass.fit import load
from orbitmass.forecast._common import epoch_grid, parse_epoch, parse_step_yr
from orbitmass.forecast.predict import write_predictions

__all__ = ["add_parser", "run", "read_epochs"]


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``predict`` on the ``orbitmass`` sub-command parsers."""
    p = subparsers.add_parser(
        "predict", help="predict positions, separation, position angle and velocity of a saved run",
        description="Posterior-predictive east/north offsets, separation, position angle and line-of-sight "
                    "velocity (median, 68 % and 95 % bands, measurement noise not added) of every companion "
                    "of RUN_DIR at the given epochs; the next periastron passage and velocity extrema. Writes "
                    "DIR/predictions.csv, predictions.png/.pdf, next_events.json/.md. Epochs are Julian years "
                    "(2031.5) or ISO 8601 UTC dates (2031-07-02).")
    p.add_argument("run_dir", metavar="RUN_DIR", help="a run folder written by 'orbitmass fit'")
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--at", nargs="+", metavar="EPOCH", help="epochs to predict at")
    g.add_argument("--from", dest="start", metavar="A", help="first epoch of a grid (with --to and --step)")
    p.add_argument("--to", dest="stop", metavar="B", help="last epoch of the grid")
    p.add_argument("--step", metavar="S", help="grid step: Julian years, or a time such as '30 d'")
    p.add_argument("--after", metavar="EPOCH", default=None,
                   help="next events count from this epoch (default: the first predicted epoch)")
    p.add_argument("--draws", type=int, default=4000, metavar="N", help="posterior draws used (default 4000)")
    p.add_argument("--seed", type=int, default=0, metavar="N", help="seed of the choice of draws (default 0)")
    p.add_argument("--out", required=True, metavar="DIR", help="folder to write (new or empty)")
    p.add_argument("--overwrite", action="store_true",
                   help="replace DIR when it holds an earlier 'orbitmass predict' output and nothing else")
    p.set_defaults(func=run)
    return p


def read_epochs(args) -> np.ndarray:
    """Epochs (Julian years) from ``--at`` or ``--from/--to/--step``; InputError on bad input."""

    if args.at:
        if args.stop is not None or args.step is not None:
            raise InputError("--to and --step go with --from, not with --at", key="--at")
        return np.array([parse_epoch(a, key="--at") for a in args.at])
    if args.stop is None or args.step is None:
        raise InputError("--from needs --to and --step", key="--from")
    return epoch_grid(parse_epoch(args.start, key="--from"), parse_epoch(args.stop, key="--to"),
                      parse_step_yr(args.step, key="--step"))


def load_run_folder(run_dir: str):

    path = Path(run_dir)
    if not (path / "summary.json").is_file():
        raise RunFolderError(f"{path}: not a run folder (no summary.json); give a folder written by 'orbitmass fit'")
    return load(path)


def run(args) -> int:
    """Run ``orbitmass predict``; returns the exit code (errors propagate as OrbitmassError)."""

    epochs = read_epochs(args)
    if args.draws <= 0:
        raise InputError(f"expected a positive number of draws, got {args.draws}", key="--draws")
    after = None if args.after is None else parse_epoch(args.after, key="--after")
    fit = load_run_folder(args.run_dir)
    paths = write_predictions(fit.results, epochs, args.out, after=after, overwrite=args.overwrite,
                              n_draws=args.draws, seed=args.seed, run_dir=str(args.run_dir))
    print(f"predictions for {epochs.size} epochs: {paths['predictions']}")
    print(f"next events: {paths['events_md']}")
    print(f"figure: {paths['figure_png']}")
    return 0
