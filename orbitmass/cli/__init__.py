"""Command line: argument parsing and exit codes only; everything else is the public API.

Exit codes: 0 success; 1 the fit ran but did not converge; 2 bad input or
options (one clear message, no traceback); 130 interrupted (samples so far
are saved).
"""

from __future__ import annotations

import argparse
import logging
import signal
import sys
from pathlib import Path

from orbitmass import __version__
from orbitmass.exceptions import OrbitmassError

__all__ = ["main", "build_parser"]

EXIT_OK, EXIT_NOT_CONVERGED, EXIT_INPUT, EXIT_INTERRUPTED = 0, 1, 2, 130


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got {text!r}") from None
    if value <= 0:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got {text!r}")
    return value


def _seed(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0, got {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0, got {text!r}")
    return value


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``orbitmass`` command."""
    parser = argparse.ArgumentParser(
        prog="orbitmass",
        description="Weigh dark central objects from the orbits of things tracked around them: "
                    "Keplerian fits of positions and line-of-sight velocities, with posteriors for "
                    "the enclosed mass, the distance and every orbital element.",
    )
    parser.add_argument("--version", action="version", version=f"orbitmass {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress of initialisation and sampling")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("fit", help="fit one target file and write a run folder",
                       description="Fit the target file TARGET (TOML, see the input format) and write the "
                                   "run folder DIR: summary.json, posterior.h5, report, figures, tables.")
    p.add_argument("target", metavar="TARGET", help="target file (.toml)")
    p.add_argument("--out", required=True, metavar="DIR", help="run folder to write (must be new or empty)")
    p.add_argument("--seed", type=_seed, default=None, metavar="N", help="random seed (same seed, same result)")
    p.add_argument("--walkers", type=_positive_int, default=None, metavar="N",
                   help="ensemble size (default max(64, 4 x parameters))")
    p.add_argument("--max-steps", type=_positive_int, default=20000, metavar="N",
                   help="step cap of the sampler (default 20000)")
    p.add_argument("--overwrite", action="store_true", help="replace DIR if it exists and is not empty")
    p.add_argument("--resume", action="store_true",
                   help="continue a stopped fit from the checkpoint in DIR")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.add_argument("--no-fast-path", action="store_true",
                   help="sample every element even where the astrometry-only fast path (Thiele-Innes "
                        "constants integrated out) applies")

    p = sub.add_parser("demo", help="write invented example data, fit it and report",
                       description="Write the invented demo data (a star around the dark mass of an invented "
                                   "dwarf galaxy, and a visual binary), fit both and write their reports.")
    p.add_argument("--out", default="orbitmass-demo", metavar="DIR", help="folder to write (default ./orbitmass-demo)")
    p.add_argument("--seed", type=_seed, default=1, metavar="N", help="random seed of the fits (default 1)")
    p.add_argument("--overwrite", action="store_true", help="replace DIR if it exists and is not empty")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")

    p = sub.add_parser("report", help="re-render figures, tables and reports of a saved run",
                       description="Re-render every figure, table and report page of RUN_DIR from its saved "
                                   "posterior, without refitting.")
    p.add_argument("run_dir", metavar="RUN_DIR", help="a run folder written by 'orbitmass fit'")

    from orbitmass.batch import add_batch_parser
    from orbitmass.compare import add_compare_parser

    add_compare_parser(sub)
    add_batch_parser(sub)
    from orbitmass.cli import plan as plan_cmd
    from orbitmass.cli import predict as predict_cmd

    predict_cmd.add_parser(sub)
    plan_cmd.add_parser(sub)
    return parser


def _fmt_mass(block: dict) -> str:
    med, lo, hi = block["median"], block["q16"], block["q84"]
    return f"{med:.4g} (+{hi - med:.2g} / -{med - lo:.2g})"


def _cmd_fit(args) -> int:
    from orbitmass.fit import Fit
    from orbitmass.io.checkpoint import CHECKPOINT_NAME
    from orbitmass.io.rundir import save_run
    from orbitmass.io.target import read_target

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
    print(f"total mass: {_fmt_mass(fit.summary['derived']['mass_msun'])} Msun")
    print(f"distance:   {_fmt_mass(fit.summary['derived']['distance_pc'])} pc")
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


def _cmd_demo(args) -> int:
    from orbitmass.demo.run import run_demo

    results = run_demo(Path(args.out), seed=args.seed, overwrite=args.overwrite,
                       progress=False if args.no_progress else None)
    print(f"demo data and runs written to {Path(args.out).resolve()}")
    for res in results:
        s = res.summary
        d = s["diagnostics"]
        print(f"\n{s['target']}")
        truth = res.truth
        print(f"  total mass: {_fmt_mass(s['derived']['mass_msun'])} Msun   (invented truth {truth.mass_msun:.4g})")
        print(f"  distance:   {_fmt_mass(s['derived']['distance_pc'])} pc   (invented truth {truth.distance_pc:.4g})")
        print(f"  converged: {'yes' if d['converged'] else 'NO'}; ESS of the mass {d['ess_mass']:.0f}; "
              f"{d['wall_seconds']:.1f} s")
        print(f"  report: {res.run_dir / 'report.md'}  (also report.html)")
    cmp_dir = Path(args.out) / "comparison-demo" / "comparison"
    if (cmp_dir / "comparison.md").is_file():
        print(f"\ncomparison of two invented teams' datasets and their joint refit: {cmp_dir / 'comparison.md'}")
    print("\njoint fit of two stars on a drifting frame (example, not run by the demo):\n"
          f"  orbitmass fit {Path(args.out) / 'data' / 'quillon-joint' / 'target.toml'} --out quillon-joint-run")
    return EXIT_OK


def _cmd_report(args) -> int:
    from orbitmass.fit import load

    fit = load(args.run_dir)
    path = fit.report(args.run_dir)
    print(f"report: {path}")
    return EXIT_OK


def _cmd_batch(args) -> int:
    from orbitmass.batch import cmd_batch

    return cmd_batch(args)


def _cmd_compare(args) -> int:
    from orbitmass.compare import cmd_compare

    return cmd_compare(args)


def _cmd_module(name: str):
    def call(args) -> int:
        import importlib

        return importlib.import_module(f"orbitmass.cli.{name}").run(args)

    return call


COMMANDS = {"fit": _cmd_fit, "demo": _cmd_demo, "report": _cmd_report, "batch": _cmd_batch,
            "compare": _cmd_compare, "predict": _cmd_module("predict"), "plan": _cmd_module("plan")}


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``orbitmass`` command; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return EXIT_INPUT
    logging.basicConfig(level=logging.INFO if args.verbose else logging.WARNING,
                        format="%(levelname)s %(name)s: %(message)s")
    try:
        return COMMANDS[args.command](args)
    except OrbitmassError as exc:
        print(f"orbitmass: error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("orbitmass: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
