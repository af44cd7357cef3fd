"""``orbitmass fit``: fit one target file and write a run folder.

Order of the work: read the target (bad input stops here), check and lock the
run folder (:func:`orbitmass.io.rundir.prepare_run_folder`: a bad ``--out``
stops here, before any sampling), sample, publish the run folder, print the
summary, the goodness of fit and orbitmass's warnings once each.
"""

from __future__ import annotations

import argparse
import re
import signal
import sys
from pathlib import Path

from orbitmass.cli.common import (
    EXIT_INPUT,
    EXIT_INTERRUPTED,
    EXIT_NOT_CONVERGED,
    EXIT_OK,
    captured_warnings,
    fit_settings,
    option_hint,
    parse_params,
    parse_units,
    print_warnings,
    seed,
    step_cap,
    walkers_count,
)
from orbitmass.exceptions import DegeneracyWarning, InputError, RunFolderError
from orbitmass.fit import Fit
from orbitmass.inference.quality import quality_console_lines
from orbitmass.io.checkpoint import CHECKPOINT_NAME
from orbitmass.io.rundir import prepare_run_folder, save_run, target_paths, write_products
from orbitmass.io.target import read_target
from orbitmass.outputs.formatting import summary_text

__all__ = ["add_parser", "run", "print_summary", "print_quality", "add_display_options"]

NAME = "fit"

_PRECEDENCE = ("Options also come from the target file's [fit] table (walkers, seed, max_steps); a flag given "
               "here overrides the table, and the table overrides the defaults.")


def add_display_options(p: argparse.ArgumentParser) -> None:
    """``--params`` and ``--units``, shared by ``fit`` and ``report``."""
    p.add_argument("--params", default=None, metavar="COL,...",
                   help="sample columns of the corner plot and the tables, separated by commas, e.g. "
                        "'mass_msun,distance_pc,B.period_yr' (default: the key quantities)")
    p.add_argument("--units", default=None, metavar="QUANTITY=UNIT,...",
                   help="display units of figures, tables and reports, e.g. 'distance_pc=pc' "
                        "(default: chosen from each quantity's magnitude); summary.json keeps its fixed units")


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Add ``fit`` to the sub-parsers; returns its parser."""
    p = subparsers.add_parser("fit", help="fit one target file and write a run folder",
                              description="Fit the target file TARGET (TOML, see the input format) and write the "
                                          "run folder DIR: summary.json, posterior.h5, report, figures, tables. "
                                          + _PRECEDENCE)
    p.add_argument("target", metavar="TARGET", help="target file (.toml)")
    p.add_argument("--out", required=True, metavar="DIR", help="run folder to write (must be new or empty)")
    p.add_argument("--seed", type=seed, default=None, metavar="N",
                   help="random seed (same seed, same result); without it (and without [fit] seed) a random "
                        "seed is drawn and recorded in summary.json under provenance.seed")
    p.add_argument("--walkers", type=walkers_count, default=None, metavar="N",
                   help="ensemble size, 2 to 100000 and at least twice the number of sampled parameters "
                        "(default: [fit] walkers, else max(64, 4 x parameters))")
    p.add_argument("--max-steps", type=step_cap, default=None, metavar="N",
                   help="step cap of the sampler, 10 to 100000000 (default: [fit] max_steps, else 20000)")
    p.add_argument("--overwrite", action="store_true",
                   help="replace DIR if it holds an earlier orbitmass run (and nothing else)")
    p.add_argument("--resume", action="store_true",
                   help="continue a stopped fit from the checkpoint in DIR")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.add_argument("--no-fast-path", action="store_true",
                   help="sample every element even where the astrometry-only fast path (Thiele-Innes "
                        "constants integrated out) applies")
    add_display_options(p)
    return p


def print_summary(summary: dict, units: dict | None = None) -> None:
    """The console summary of a fit: mass, distance, convergence (stdout)."""
    comps = list((summary.get("companions") or {}))
    units = units or {}
    derived = summary["derived"]
    for label, key in (("total mass", "mass_msun"), ("distance", "distance_pc")):
        print(f"{label + ':':<12}{summary_text(key, derived[key], companions=comps, unit=units.get(key))}")
    d = summary["diagnostics"]
    print(f"converged:  {'yes' if d['converged'] else 'NO'} (min ESS {d['ess_min']:.0f}, "
          f"tau max {d['tau_max']:.1f}, R-hat max {d['rhat_max']:.3f}, {d['wall_seconds']:.1f} s)")


def print_quality(summary: dict) -> bool:
    """Goodness of fit: one line on stdout when ok, the warning block on stderr when poor; True when poor."""
    fq = summary.get("fit_quality")
    if not fq:
        return False
    lines = quality_console_lines(fq)
    poor = fq.get("status") == "poor"
    for line in lines:
        print(line, file=sys.stderr if poor else sys.stdout)
    return poor


def _walkers_error(exc: InputError, given: int | None, from_flag: bool, target_file: str) -> InputError:
    """The library's "n_walkers = N is too small" worded for the flag or the [fit] key that set it."""
    if exc.key != "walkers" or given is None:
        return exc
    reason = re.sub(r"^n_walkers = \d+ is too small", f"{given} walkers are too few", exc.reason)
    if from_flag:
        return InputError(reason, key="--walkers")
    return InputError(reason, key="fit.walkers", file=target_file)


def run(args: argparse.Namespace) -> int:
    """Run ``orbitmass fit``: 0 converged, 1 not converged, 130 interrupted (samples saved)."""
    target = read_target(args.target)  # bad input stops here, before anything is written
    settings = fit_settings(args, target.fit_options.as_fit_kwargs())
    params = parse_params(getattr(args, "params", None))
    units = parse_units(getattr(args, "units", None), [c.name for c in target.companions])
    out = Path(args.out)
    try:
        lock = prepare_run_folder(out, overwrite=args.overwrite, resume=args.resume, protected=target_paths(target))
    except RunFolderError as exc:
        raise option_hint(exc) from None
    with lock:
        stop = {"flag": False}

        def handler(signum, frame):
            stop["flag"] = True

        old_int = signal.signal(signal.SIGINT, handler)
        old_term = signal.signal(signal.SIGTERM, handler)
        try:
            with captured_warnings() as caught:
                fit = Fit(seed=settings["seed"], n_walkers=settings["n_walkers"], max_steps=settings["max_steps"],
                          progress=False if args.no_progress else None, checkpoint=out / CHECKPOINT_NAME,
                          resume=args.resume, linear=not args.no_fast_path)
                try:
                    fit.fit(target, stop_flag=lambda: stop["flag"])
                except InputError as exc:
                    raise _walkers_error(exc, settings["n_walkers"], args.walkers is not None,
                                         str(args.target)) from None
        finally:
            signal.signal(signal.SIGINT, old_int)
            signal.signal(signal.SIGTERM, old_term)
        d = fit.summary["diagnostics"]
        keep = (CHECKPOINT_NAME,) if not d["converged"] else ()
        custom = params is not None or units is not None
        products_error = None
        try:
            save_run(fit.results, out, keep=keep, lock=lock, products=not custom)
            if custom:  # the run is published; the products with the chosen columns and units follow
                try:
                    write_products(fit.results, out, params=params, units=units)
                except (InputError, ValueError) as exc:
                    raise RunFolderError(f"{out}: the run is saved (summary.json, posterior.h5), but its figures "
                                         f"and reports were not written: {exc}; write them with: orbitmass report "
                                         f"{out} --params ... --units ...") from None
        except RunFolderError as exc:
            if not lock.published:
                raise
            products_error = exc  # the run is saved: its numbers and quality are still shown below
    print_summary(fit.summary, units)
    poor = print_quality(fit.summary)
    print_warnings(caught)
    if d.get("multimodal") and not any(issubclass(w.category, DegeneracyWarning) for w in caught):
        print("warning: walkers sit in separated period modes; see the report", file=sys.stderr)
    if products_error is None:
        print(f"report: {out / 'report.md'}")
    if poor:
        print(f"warning: the model does not describe the data; see 'Goodness of fit' in {out / 'report.md'} and "
              f"{out / 'residuals.png'}", file=sys.stderr)
    if products_error is not None:
        print(f"orbitmass: error: {products_error}", file=sys.stderr)
        return EXIT_INPUT
    if d.get("interrupted"):
        print(f"interrupted after {d['n_steps']} steps: samples so far are saved, marked not converged; "
              f"continue with: orbitmass fit {args.target} --out {out} --resume", file=sys.stderr)
        return EXIT_INTERRUPTED
    if not d["converged"]:
        print("warning: the fit did not converge (see report.md); results are provisional; "
              "continue with --resume and a larger --max-steps", file=sys.stderr)
        return EXIT_NOT_CONVERGED
    return EXIT_OK
