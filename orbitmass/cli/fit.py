"""``orbitmass fit``: fit one target file and write a run folder."""

from __future__ import annotations

import argparse
import signal
import sys
from pathlib import Path

from orbitmass.cli.common import (
    EXIT_INTERRUPTED,
    EXIT_NOT_CONVERGED,
    EXIT_OK,
    fmt_interval,
    positive_int,
    seed,
)
from orbitmass.exceptions import OrbitmassError
from orbitmass.fit import Fit
from orbitmass.io.checkpoint import CHECKPOINT_NAME
from orbitmass.io.rundir import save_run
from orbitmass.io.target import read_target

__all__ = ["add_parser", "run"]

NAME = "fit"


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Add ``fit`` to the sub-parsers; returns its parser."""
    p = subparsers.add_parser("fit", help="fit one target file and write a run folder",
                              description="Fit the target file TARGET (TOML, see the input format) and write the "
                                          "run folder DIR: summary.json, posterior.h5, report, figures, tables.")
    p.add_argument("target", metavar="TARGET", help="target file (.toml)")
    p.add_argument("--out", required=True, metavar="DIR", help="run folder to write (must be new or empty)")
    p.add_argument("--seed", type=seed, default=None, metavar="N", help="random seed (same seed, same result)")
    p.add_argument("--walkers", type=positive_int, default=None, metavar="N",
                   help="ensemble size (default max(64, 4 x parameters))")
    p.add_argument("--max-steps", type=positive_int, default=20000, metavar="N",
                   help="step cap of the sampler (default 20000)")
    p.add_argument("--overwrite", action="store_true", help="replace DIR if it exists and is not empty")
    p.add_argument("--resume", action="store_true",
                   help="continue a stopped fit from the checkpoint in DIR")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.add_argument("--no-fast-path", action="store_true",
                   help="sample every element even where the astrometry-only fast path (Thiele-Innes "
                        "constants integrated out) applies")
    return p


def run(args: argparse.Namespace) -> int:
    """Run ``orbitmass fit``: 0 converged, 1 not converged, 130 interrupted (samples saved)."""
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise OrbitmassError(f"{out}: exists and is not a folder; choose another --out")
    non_empty = out.is_dir() and any(out.iterdir())
    if non_empty and not (args.overwrite or args.resume):
        raise OrbitmassError(f"{out}: folder exists and is not empty; choose another --out, pass --overwrite "
                             "to replace it, or --resume to continue a stopped fit")
    checkpoint = out / CHECKPOINT_NAME
    if args.resume and not checkpoint.is_file():
        raise OrbitmassError(f"{out}: no checkpoint ({CHECKPOINT_NAME}) to resume from")
    target = read_target(args.target)  # bad input stops here, before anything is written
    out.mkdir(parents=True, exist_ok=True)
    stop = {"flag": False}

    def handler(signum, frame):
        stop["flag"] = True

    old_int = signal.signal(signal.SIGINT, handler)
    old_term = signal.signal(signal.SIGTERM, handler)
    try:
        fit = Fit(seed=args.seed, n_walkers=args.walkers, max_steps=args.max_steps,
                  progress=False if args.no_progress else None, checkpoint=checkpoint, resume=args.resume,
                  linear=not args.no_fast_path)
        fit.fit(target, stop_flag=lambda: stop["flag"])
    finally:
        signal.signal(signal.SIGINT, old_int)
        signal.signal(signal.SIGTERM, old_term)
    d = fit.summary["diagnostics"]
    keep = (CHECKPOINT_NAME,) if not d["converged"] else ()
    save_run(fit.results, out, overwrite=True, keep=keep)
    print(f"total mass: {fmt_interval(fit.summary['derived']['mass_msun'])} Msun")
    print(f"distance:   {fmt_interval(fit.summary['derived']['distance_pc'])} pc")
    print(f"converged: {'yes' if d['converged'] else 'NO'} (min ESS {d['ess_min']:.0f}, "
          f"tau max {d['tau_max']:.1f}, R-hat max {d['rhat_max']:.3f}, {d['wall_seconds']:.1f} s)")
    if d.get("multimodal"):
        print("warning: walkers sit in separated period modes; see the report", file=sys.stderr)
    print(f"report: {out / 'report.md'}")
    if d.get("interrupted"):
        print(f"interrupted after {d['n_steps']} steps: samples so far are saved, marked not converged; "
              f"continue with: orbitmass fit {args.target} --out {out} --resume", file=sys.stderr)
        return EXIT_INTERRUPTED
    if not d["converged"]:
        print("warning: the fit did not converge (see report.md); results are provisional; "
              "continue with --resume and a larger --max-steps", file=sys.stderr)
        return EXIT_NOT_CONVERGED
    return EXIT_OK
