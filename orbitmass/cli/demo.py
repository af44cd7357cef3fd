"""``orbitmass demo``: write the invented example data, fit it and report."""

from __future__ import annotations

import argparse
from pathlib import Path

from orbitmass.cli.common import EXIT_OK, captured_warnings, option_hint, print_warnings, seed
from orbitmass.exceptions import RunFolderError
from orbitmass.outputs.formatting import format_number, summary_text

__all__ = ["add_parser", "run"]

NAME = "demo"


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Add ``demo`` to the sub-parsers; returns its parser."""
    p = subparsers.add_parser("demo", help="write invented example data, fit it and report",
                              description="Write the invented demo data (a star around the dark mass of an invented "
                                          "dwarf galaxy, and a visual binary), fit both and write their reports.")
    p.add_argument("--out", default="orbitmass-demo", metavar="DIR", help="folder to write (default ./orbitmass-demo)")
    p.add_argument("--seed", type=seed, default=1, metavar="N", help="random seed of the fits (default 1)")
    p.add_argument("--overwrite", action="store_true",
                   help="write over DIR if it holds an earlier demo (and nothing else)")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    return p


def _signed(value: float, column: str) -> str:
    """A shift with its sign and display unit, three significant digits (``+71500 M☉``)."""
    text = format_number(value, digits=3, column=column)
    return text if text.startswith("-") else "+" + text


def run(args: argparse.Namespace) -> int:
    """Run ``orbitmass demo``: 0, or an error for the caller to map."""
    # imported here for the start-up time of the CLI: the demo loads orbitmass.compare (matplotlib,
    # astropy.units; about 1.5 s), which `orbitmass --help` and the other commands do not need
    from orbitmass.demo.run import run_demo

    try:
        with captured_warnings() as caught:  # orbitmass's warnings as one "warning: ..." line each
            results = run_demo(Path(args.out), seed=args.seed, overwrite=args.overwrite,
                               progress=False if args.no_progress else None)
    except RunFolderError as exc:
        raise option_hint(exc) from None
    print_warnings(caught)
    print(f"demo data and runs written to {Path(args.out).resolve()}")
    for res in results:
        s = res.summary
        d = s["diagnostics"]
        print(f"\n{s['target']}")
        truth = res.truth
        comps = list(s.get("companions") or {})
        print(f"  total mass: {summary_text('mass_msun', s['derived']['mass_msun'], companions=comps)}   "
              f"(invented truth {format_number(truth.mass_msun, column='mass_msun')})")
        print(f"  distance:   {summary_text('distance_pc', s['derived']['distance_pc'], companions=comps)}   "
              f"(invented truth {format_number(truth.distance_pc, column='distance_pc')})")
        print(f"  converged: {'yes' if d['converged'] else 'NO'}; ESS of the mass {d['ess_mass']:.0f}; "
              f"{d['wall_seconds']:.1f} s")
        print(f"  report: {res.run_dir / 'report.md'}  (also report.html)")
        rel = res.relativity
        if rel:  # the black-hole star: relativistic data fitted with and without the terms
            for key, name in (("redshift_factor", "redshift factor"), ("precession_factor", "precession factor")):
                if key in rel["factors"]:
                    print(f"  {name}: {summary_text(key, rel['factors'][key])}   (general relativity 1, Newton 0)")
            m = rel["mass_msun"]
            print(f"  Keplerian fit of the same data: total mass {summary_text('mass_msun', m['keplerian'])}, "
                  f"shifted by {_signed(m['shift'], 'mass_msun')} ({m['shift_sigma']:+.1f} sigma); distance "
                  f"shifted by {_signed(rel['distance_pc']['shift'], 'distance_pc')} "
                  f"({rel['distance_pc']['shift_sigma']:+.1f} sigma)")
            print(f"  velocity residuals of both models around periastron: {rel['figure'][0]}")
    cmp_dir = Path(args.out) / "comparison-demo" / "comparison"
    if (cmp_dir / "comparison.md").is_file():
        print(f"\ncomparison of two invented teams' datasets and their joint refit: {cmp_dir / 'comparison.md'}")
    print("\njoint fit of two stars on a drifting frame (example, not run by the demo):\n"
          f"  orbitmass fit {Path(args.out) / 'data' / 'quillon-joint' / 'target.toml'} --out quillon-joint-run")
    return EXIT_OK
