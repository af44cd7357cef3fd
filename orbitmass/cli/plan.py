"""``orbitmass plan``: which next epochs shrink the mass posterior of a saved run most.

Parsing and exit codes only; the work is :func:`orbitmass.forecast.plan.plan`.
"""

from __future__ import annotations

import argparse

from orbitmass.cli.predict import load_run_folder
from orbitmass.exceptions import InputError
from orbitmass.forecast._common import epoch_grid, parse_epoch, parse_step_yr, prepare_out_dir
from orbitmass.forecast.plan import parse_costs, plan
from orbitmass.units import parse_quantity

__all__ = ["add_parser", "run"]


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Register ``plan`` on the ``orbitmass`` sub-command parsers."""
    p = subparsers.add_parser(
        "plan", help="rank candidate epochs by the expected shrinkage of the mass posterior",
        description="Rank candidate epochs between A and B (every S) by how much one more position or "
                    "velocity measurement is expected to shrink the posterior of the mass (or of --for "
                    "QUANTITY), positions and velocities each ranked on their own: for each posterior draw the "
                    "Fisher information of the measurement is combined with the current posterior covariance, "
                    "and the expected posterior variances are averaged over the draws (a linearised "
                    "expectation; rough on a short arc). Mass, distance and other scale quantities "
                    "are followed in their logarithm, so the reductions are of the relative uncertainty. Writes "
                    "DIR/plan.csv (ranked), plan_sets.csv (best sets of K measurements, chosen one at a time, "
                    "and K evenly spaced ones for comparison), plan.png/.pdf and plan.md (recommendation in "
                    "plain language). Epochs are Julian years (TDB) or ISO 8601 UTC dates. Nothing is refitted.",
        epilog="example: orbitmass plan run-1 --window 2031 2034 --cadence '30 d' --max-epochs 4 "
               "--precision '0.2 mas' --velocity-precision '2 km/s' --cost positions=1,velocities=3 --out plan-1")
    p.add_argument("run_dir", metavar="RUN_DIR", help="a run folder written by 'orbitmass fit'")
    p.add_argument("--window", nargs=2, required=True, metavar=("A", "B"), help="first and last candidate epoch")
    p.add_argument("--cadence", required=True, metavar="S",
                   help="spacing of candidate epochs: Julian years, or a time such as '14 d'")
    p.add_argument("--max-epochs", type=int, default=3, metavar="K",
                   help="number of measurements in the best sets (default 3)")
    p.add_argument("--precision", default="0.5 mas", metavar="Q",
                   help="1-sigma error per coordinate (east, north) of a new position, with a unit (default '0.5 mas')")
    p.add_argument("--velocity-precision", default="1 km/s", metavar="Q",
                   help="1-sigma error of a new velocity, with a unit (default '1 km/s'); the instrument's fitted "
                        "jitter is added in quadrature")
    p.add_argument("--cost", default=None, metavar="KIND=C,...",
                   help="relative cost of one measurement per kind, e.g. 'positions=1,velocities=2' (default 1 each); "
                        "'pays more' and the mixed set compare reduction per unit cost")
    p.add_argument("--for", dest="quantity", default="mass", metavar="QUANTITY",
                   help="quantity to plan for: mass (default), distance, parallax, C1.period (period with one "
                        "companion), or any column of the run's samples")
    p.add_argument("--instrument", default=None, metavar="NAME",
                   help="instrument of a new velocity (default the run's first instrument)")
    p.add_argument("--draws", type=int, default=200, metavar="N",
                   help="posterior draws the expected variance is averaged over (default 200)")
    p.add_argument("--seed", type=int, default=0, metavar="N", help="seed of the choice of draws (default 0)")
    p.add_argument("--out", required=True, metavar="DIR", help="folder to write (new or empty)")
    p.add_argument("--overwrite", action="store_true",
                   help="replace DIR when it holds an earlier 'orbitmass plan' output and nothing else")
    p.set_defaults(func=run)
    return p


def run(args) -> int:
    """Run ``orbitmass plan``; returns the exit code (errors propagate as OrbitmassError)."""

    a = parse_epoch(args.window[0], key="--window")
    b = parse_epoch(args.window[1], key="--window")
    epochs = epoch_grid(a, b, parse_step_yr(args.cadence, key="--cadence"), key="--window/--cadence")
    if epochs.size > 20000:
        raise InputError(f"{epochs.size} candidate epochs; at most 20000 (use a coarser --cadence)", key="--cadence")
    if args.max_epochs < 1:
        raise InputError(f"expected a whole number >= 1, got {args.max_epochs}", key="--max-epochs")
    if args.draws < 2:
        raise InputError(f"expected at least 2 draws, got {args.draws}", key="--draws")
    prec = parse_quantity(args.precision, "angle", key="--precision")
    vprec = parse_quantity(args.velocity_precision, "speed", key="--velocity-precision")
    costs = parse_costs(args.cost)
    prepare_out_dir(args.out, kind="plan", overwrite=args.overwrite, check_only=True)  # refuse before the work
    fit = load_run_folder(args.run_dir)
    result = plan(fit.results, epochs, quantity=args.quantity, precision_mas=prec, velocity_precision_kms=vprec,
                  costs=costs, max_epochs=args.max_epochs, n_draws=args.draws, seed=args.seed,
                  instrument=args.instrument)
    paths = result.write(args.out, overwrite=args.overwrite, run_dir=str(args.run_dir))
    best = result.table.iloc[0]
    kind = {"positions": "a position", "velocities": "a velocity"}[best["best_kind"]]
    print(f"best single measurement: {kind} at {best['epoch_jyear']:.3f} ({best['date_utc']}), "
          f"expected reduction of sd({result.label}) {best['best_reduction_pct']:.1f} %")
    print(f"plan: {paths['markdown']}")
    print(f"figure: {paths['figure_png']}")
    return 0
