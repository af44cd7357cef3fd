"""How the cost grows: with the number of epochs, and with the number of companions.

1. Time per likelihood evaluation (one parameter set, in a block of 64 as
   emcee passes them) for 10, 100, 1000 and 10000 epochs, each epoch with a
   position and a velocity (:func:`benchmarks.bench_likelihood.simulated_problem`).
2. Wall time to a converged posterior of a joint fit of 1, 2, 4 and 8
   companions around one central mass (several ``[[companion]]`` blocks in one
   target: they share the mass and the distance; relative frame), 25 epochs of
   astrometry and 12 of velocities per companion, distance with a 3 % prior.
   ``--quick`` fits only 1 and 2 companions. The growth is summarised by the
   exponent ``b`` of ``wall ~ n_companions^b`` (least-squares slope of log wall
   time against log companions), and split into its factors: steps to
   convergence, walkers, and the cost of one evaluation (wall = steps x
   walkers x seconds per evaluation, up to the initialisation and the checks).
   Each count is fitted with the default sampler (the full-dimensional
   moves and ``max(64, 4 n_dim)`` walkers) and, for the counts in
   ``--blocked``, side by side with the opt-in block moves (per companion and
   for the shared parameters, 64 walkers; ``SamplerOptions(blocked=True)``,
   see :mod:`orbitmass.inference.sampler`). Per fit
   it prints the initialisation and sampling seconds, steps, walkers, the
   largest split R-hat, the smallest ESS and the ESS of the mass, and whether
   it converged (R-hat < 1.01 and the contract's ESS and tau criteria).
   ``us/eval`` counts a companion-only evaluation of a block move as one
   parameter set, so it is not comparable between the two samplers; wall
   time is.

Usage::

    python benchmarks/bench_scaling.py [--quick] [--counts 1 2 4 8] [--blocked 4]
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path

import numpy as np

from benchmarks.bench_likelihood import (
    N_SETS,
    median_seconds,
    parameter_sets,
    posteriors,
    simulated_problem,
)
from benchmarks.bench_problems import CompanionData, Problem, baseline_to_theta, make_problem
from orbitmass.demo.simulate import TrueOrbit

__all__ = ["JOINT_MASS_MSUN", "JOINT_DISTANCE_PC", "JOINT_ORBITS", "joint_problem", "epoch_scaling",
           "companion_scaling", "growth_exponent", "run"]

JOINT_MASS_MSUN = 3.1e6
JOINT_DISTANCE_PC = 9800.0
#: invented orbits of the joint-fit companions: (period yr, e, i deg, omega deg, Omega deg, T_p)
JOINT_ORBITS = [
    (12.0, 0.55, 62.0, 30.0, 210.0, 2014.2),
    (17.5, 0.35, 128.0, 300.0, 95.0, 2019.6),
    (9.0, 0.7, 40.0, 150.0, 330.0, 2011.9),
    (24.0, 0.25, 101.0, 75.0, 20.0, 2008.4),
    (6.5, 0.45, 75.0, 250.0, 160.0, 2013.1),
    (30.0, 0.6, 145.0, 110.0, 270.0, 2020.3),
    (14.5, 0.15, 55.0, 200.0, 45.0, 2017.7),
    (20.0, 0.8, 88.0, 340.0, 120.0, 2010.6),
]


def joint_problem(folder: Path, n_companions: int, *, n_pos: int = 25, n_rv: int = 12,
                  seed: int = 31) -> Problem:
    """A target with ``n_companions`` companions of one central mass (data simulated, written)."""
    rng = np.random.default_rng([seed, n_companions])
    comps = []
    for k in range(n_companions):
        period, ecc, inc, omega, node, tp = JOINT_ORBITS[k]
        truth = TrueOrbit(mass_msun=JOINT_MASS_MSUN, distance_pc=JOINT_DISTANCE_PC, period_yr=period,
                          eccentricity=ecc, inclination_deg=inc, arg_periastron_deg=omega,
                          ascending_node_deg=node, periastron_time=tp)
        t_pos = np.sort(rng.uniform(2004.0, 2026.5, n_pos))
        t_rv = np.sort(rng.uniform(2008.0, 2026.5, n_rv))
        comps.append(CompanionData(f"S{k + 1}", truth, t_pos, t_rv, 0.15, 15.0))
    return make_problem(folder, f"joint-{n_companions}", comps, reference_epoch=2016.0,
                        distance_mode="distance-normal",
                        distance_prior=(JOINT_DISTANCE_PC, 0.03 * JOINT_DISTANCE_PC),
                        mass_prior_msun=(1e4, 1e9), period_prior_yr=(1.0, 200.0), rng=rng)


def epoch_scaling(sizes: tuple[int, ...], repeats: int, n_sets: int = N_SETS) -> list[dict]:
    """Microseconds per parameter set of the vectorised posterior for each epoch count."""
    out = []
    with tempfile.TemporaryDirectory(prefix="orbitmass-bench-scale-") as tmp:
        for n in sizes:
            prob = simulated_problem(Path(tmp) / f"n{n}", n)
            space, post, base = posteriors(prob)
            theta = baseline_to_theta(space, base, parameter_sets(base, n_sets, np.random.default_rng(5)))
            seconds = median_seconds(lambda post=post, theta=theta: post(theta), repeats)
            us = seconds / n_sets * 1e6
            out.append({"n_epochs": n, "us_per_set": us, "ns_per_set_epoch": us * 1e3 / n,
                        "evaluations_per_s": n_sets / seconds})
    return out


def _one_fit(target, seed: int, max_steps: int, plain: bool) -> dict:
    """One joint fit with the block moves, or with the default full-dimensional moves alone (``plain``)."""
    import time

    from orbitmass.inference import pipeline
    from orbitmass.inference.sampler import SamplerOptions, default_walkers

    t0 = time.perf_counter()
    space = pipeline.build_space(target)
    walkers = max(64, 4 * space.ndim) if plain else default_walkers(space)
    walkers += walkers % 2
    options = SamplerOptions(max_steps=max_steps, progress=False, blocked=not plain)  # blocked: opt-in
    res = pipeline.run_fit(target, space, seed=seed, n_walkers=walkers, options=options, t_start=t0)
    d = res.summary["diagnostics"]
    mass = res.summary["derived"]["mass_msun"]
    return {"wall_seconds": float(d["wall_seconds"]), "converged": bool(d["converged"]),
            "sampling_seconds": float(d["sampling_seconds"]),
            "init_seconds": float(d["wall_seconds"]) - float(d["sampling_seconds"]),
            "n_steps": int(d["n_steps"]), "n_walkers": int(d["n_walkers"]), "n_dim": int(space.ndim),
            "n_evaluations": int(d["n_evaluations"]), "ess_mass": float(d["ess_mass"]),
            "ess_min": float(d["ess_min"]), "rhat_max": float(d["rhat_max"]), "tau_max": float(d["tau_max"]),
            "mass_median_msun": float(mass["median"]),
            "mass_in_95": bool(mass["q2.5"] <= JOINT_MASS_MSUN <= mass["q97.5"])}


def companion_scaling(counts: tuple[int, ...], repeats: int | dict[int, int], *, n_pos: int = 25,
                      n_rv: int = 12, max_steps: int = 20000, plain: bool = False) -> list[dict]:
    """Wall time to convergence of joint fits with each number of companions (median of repeats).

    ``repeats`` is one count for all, or a count per number of companions;
    ``plain`` fits with the full-dimensional moves alone (the reference).
    """
    from orbitmass.io.target import read_target

    out = []
    with tempfile.TemporaryDirectory(prefix="orbitmass-bench-joint-") as tmp:
        for n in counts:
            prob = joint_problem(Path(tmp) / f"c{n}", n, n_pos=n_pos, n_rv=n_rv)
            target = read_target(prob.target)
            n_rep = repeats.get(n, 1) if isinstance(repeats, dict) else repeats
            runs = [_one_fit(target, 301 + k, max_steps, plain) for k in range(n_rep)]

            def med(key, runs=runs):
                return float(np.median([r[key] for r in runs]))
            out.append({
                "n_companions": n,
                "sampler": "plain" if plain else "blocked",
                "n_dim": runs[0]["n_dim"],
                "n_pos_per_companion": n_pos,
                "n_rv_per_companion": n_rv,
                "wall_seconds": med("wall_seconds"),
                "init_seconds": med("init_seconds"),
                "sampling_seconds": med("sampling_seconds"),
                "converged": all(r["converged"] for r in runs),
                "hit_cap": not all(r["converged"] for r in runs),
                "n_steps": med("n_steps"),
                "n_walkers": int(runs[0]["n_walkers"]),
                "us_per_evaluation": float(np.median([r["sampling_seconds"] / r["n_evaluations"] * 1e6
                                                      for r in runs])),
                "rhat_max": max(r["rhat_max"] for r in runs),
                "ess_min": min(r["ess_min"] for r in runs),
                "tau_max": med("tau_max"),
                "ess_mass": med("ess_mass"),
                "ess_mass_per_s": float(np.median([r["ess_mass"] / r["wall_seconds"] for r in runs])),
                "mass_in_95": all(r["mass_in_95"] for r in runs),
                "true_mass_msun": JOINT_MASS_MSUN,
                "repeats": n_rep,
                "runs": runs,
            })
    return out


def growth_exponent(counts, values) -> float | None:
    """Least-squares slope of log ``values`` against log ``counts`` (None with fewer than two points)."""
    x = np.log(np.asarray(counts, dtype=float))
    y = np.log(np.asarray(values, dtype=float))
    if x.size < 2:
        return None
    return float(np.polyfit(x, y, 1)[0])


def exponents(rows: list[dict]) -> dict:
    """Growth exponents of the wall time and of its factors over the companion counts measured."""
    counts = [r["n_companions"] for r in rows]
    keys = {"wall_seconds": "wall_seconds", "n_steps": "n_steps", "n_walkers": "n_walkers",
            "us_per_evaluation": "us_per_evaluation", "sampling_seconds": "sampling_seconds"}
    return {name: growth_exponent(counts, [r[key] for r in rows]) for name, key in keys.items()}


def run(quick: bool, sizes: tuple[int, ...] = (10, 100, 1000, 10000),
        counts: tuple[int, ...] | None = None, repeats: int | None = None,
        fit_repeats: int | dict[int, int] | None = None, n_pos: int = 25, n_rv: int = 12,
        max_steps: int = 20000, blocked_counts: tuple[int, ...] = ()) -> dict:
    """Run both scalings.

    Parameters
    ----------
    quick : bool
        Companions 1 and 2 only, one fit each, three timing repeats; otherwise
        1, 2, 4 and 8 companions, three fits for 1, two for 2 and one for 4 and
        8 (they take minutes; the median is reported), seven timing repeats.
    sizes, counts, repeats, fit_repeats, n_pos, n_rv, max_steps
        Override the settings (for smoke tests).
    blocked_counts : tuple of int
        Companion counts also fitted with the opt-in block moves
        (``SamplerOptions(blocked=True)``; side by side, in the same run), e.g. ``(4,)``.

    Returns
    -------
    dict
        ``"epochs"`` (list of per-size figures), ``"companions"`` (list of
        per-count figures of the default sampler), ``"blocked"`` (the same for ``blocked_counts``),
        ``"load"`` (load averages before and after), ``"exponents"`` (growth exponents of the wall time
        and its factors with the number of companions; target: wall <= 1),
        ``"settings"``.
    """
    counts = counts or ((1, 2) if quick else (1, 2, 4, 8))
    repeats = repeats or (3 if quick else 7)
    fit_repeats = fit_repeats or (1 if quick else {1: 3, 2: 2, 4: 1, 8: 1})
    import os

    load_before = os.getloadavg()
    rows = companion_scaling(counts, fit_repeats, n_pos=n_pos, n_rv=n_rv, max_steps=max_steps, plain=True)
    blocked = companion_scaling(tuple(blocked_counts), 1, n_pos=n_pos, n_rv=n_rv,
                                max_steps=max_steps) if blocked_counts else []
    return {
        "epochs": epoch_scaling(sizes, repeats),
        "companions": rows,
        "blocked": blocked,
        "load": {"before": list(load_before), "after": list(os.getloadavg())},
        "exponents": exponents(rows),
        "settings": {"timing_repeats": repeats, "n_sets": N_SETS,
                     "epochs": "each epoch has a position and a velocity",
                     "joint": f"{n_pos} positions and {n_rv} velocities per companion, 3 % distance prior",
                     "quick": quick},
    }


def table(result: dict) -> str:
    """Plain-text table of :func:`run` output."""
    lines = [f"Likelihood cost against epochs ({result['settings']['n_sets']} sets per call)",
             f"{'epochs':>7} {'us/set':>10} {'ns/set/epoch':>13}"]
    for r in result["epochs"]:
        lines.append(f"{r['n_epochs']:>7d} {r['us_per_set']:>10.2f} {r['ns_per_set_epoch']:>13.1f}")
    lines.append(f"Joint fits ({result['settings']['joint']}; median of the runs)")
    lines.append(f"{'sampler':>8} {'comp':>5} {'n_dim':>6} {'runs':>5} {'init s':>7} {'sample s':>9} {'wall s':>8} "
                 f"{'steps':>7} {'walkers':>8} {'tau':>6} {'R-hat':>7} {'ESSmin':>7} {'ESS(M)':>8} {'conv':>5} "
                 f"{'M in95':>7}")
    for r in list(result["companions"]) + list(result.get("blocked", [])):
        lines.append(f"{r.get('sampler', 'default'):>8} {r['n_companions']:>5d} {r['n_dim']:>6d} {r['repeats']:>5d} "
                     f"{r.get('init_seconds', float('nan')):>7.1f} {r['sampling_seconds']:>9.1f} "
                     f"{r['wall_seconds']:>8.1f} {r['n_steps']:>7.0f} {r.get('n_walkers', 0):>8d} "
                     f"{r.get('tau_max', float('nan')):>6.0f} {r.get('rhat_max', float('nan')):>7.4f} "
                     f"{r.get('ess_min', float('nan')):>7.0f} {r['ess_mass']:>8.0f} "
                     f"{'yes' if r['converged'] else 'no':>5} {'yes' if r.get('mass_in_95') else 'no':>7}")
    if result.get("load"):
        lines.append("load averages (1, 5, 15 min) before: " + ", ".join(f"{v:.2f}" for v in result["load"]["before"])
                     + "; after: " + ", ".join(f"{v:.2f}" for v in result["load"]["after"]))
    ex = result.get("exponents") or {}
    if ex.get("wall_seconds") is not None:
        def fmt(key):
            return "n/a" if ex.get(key) is None else f"{ex[key]:.2f}"
        verdict = "met" if ex["wall_seconds"] <= 1.0 else "NOT met"
        lines.append(f"growth exponent b (wall ~ companions^b): {fmt('wall_seconds')} (target <= 1: {verdict}); "
                     f"sampling time alone {fmt('sampling_seconds')}; factors: steps {fmt('n_steps')}, "
                     f"walkers {fmt('n_walkers')}, us per evaluation {fmt('us_per_evaluation')}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    """Command-line entry: run and print the table."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="1 and 2 companions, fewer repeats")
    parser.add_argument("--counts", type=int, nargs="*", help="companion counts (default 1 2 4 8)")
    parser.add_argument("--fit-repeats", type=int, help="fits per count (default 3, 2, 1, 1)")
    parser.add_argument("--blocked", type=int, nargs="*", default=[],
                        help="counts also fitted with the opt-in block moves, side by side")
    parser.add_argument("--json", help="also write the result to this JSON file")
    args = parser.parse_args(argv)
    result = run(args.quick, counts=tuple(args.counts) if args.counts else None,
                 fit_repeats=args.fit_repeats, blocked_counts=tuple(args.blocked))
    print(table(result))  # noqa: T201 (benchmark script output)
    if args.json:
        import json

        Path(args.json).write_text(json.dumps(result, indent=1, default=float), encoding="utf-8")


if __name__ == "__main__":
    main()
