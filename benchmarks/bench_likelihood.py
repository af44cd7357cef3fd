"""Benchmark of the model + log-likelihood: all parameter sets in one call against one at a time.

Side by side in one run, on a simulated target with astrometry and
line-of-sight velocities at the same ``n`` epochs (so ``n`` positions and
``n`` velocities; ``n`` = 90 and 100), for 64 parameter sets scattered about
the truth:

* ``vectorised``: one call of :class:`orbitmass.model.likelihood.LogPosterior` on
  the (64, n_dim) block, as emcee calls it with ``vectorize=True`` (the fused
  Keplerian path and the grouped prior);
* ``plain``: the same block through the plain reference paths
  (``LogPosterior(space, fused=False)``: every orbit through
  :func:`orbitmass.core.orbit.evaluate`, and
  ``ParameterSpace.log_prior_reference``), i.e. the code before the fused path;
* ``loop``: a Python loop calling the same posterior one parameter set at a
  time (a ``(1, n_dim)`` block per call), as a per-walker sampler would;
* ``scalar baseline``: the plain per-walker numpy posterior of the reference
  baseline (:class:`benchmarks.bench_problems.BaselinePosterior`) at the same
  points, for scale.

Times are medians over repeats of the process CPU time of one call (batches
long enough for the clock); reported in microseconds per parameter set, with
the ratios loop / vectorised, plain / vectorised and baseline / vectorised.
The log-likelihoods of the paths at the same points are compared and the
largest differences are reported.

The reference target has its positions and velocities at the same epochs, so
the fused path solves Kepler's equation once per epoch for both; the row
``90d`` moves every velocity epoch by a third of the mean spacing (distinct
epochs: two solves per epoch, as in the plain path), to show the gain without
that sharing. Usage::

    python benchmarks/bench_likelihood.py [--quick]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from benchmarks.bench_problems import (
    PROBLEMS,
    BaselinePosterior,
    CompanionData,
    Problem,
    baseline_to_theta,
    make_problem,
)

__all__ = ["median_seconds", "simulated_problem", "parameter_sets", "posteriors", "measure", "run"]

N_SETS = 64


def median_seconds(func: Callable[[], object], repeats: int, min_batch_s: float = 0.02) -> float:
    """Median process CPU time (s) of one call of ``func``.

    The number of calls per timed batch doubles until a batch lasts at least
    ``min_batch_s``; then ``repeats`` batches are timed and the median of the
    per-call times is returned. CPU time of this process (numpy's elementwise
    work runs in one thread) is less disturbed by other load than wall time.
    """
    func()  # warm-up
    calls = 1
    while True:
        t0 = time.process_time()
        for _ in range(calls):
            func()
        elapsed = time.process_time() - t0
        if elapsed >= min_batch_s or calls >= 1 << 14:
            break
        calls *= 2
    per_call = [elapsed / calls]
    for _ in range(repeats - 1):
        t0 = time.process_time()
        for _ in range(calls):
            func()
        per_call.append((time.process_time() - t0) / calls)
    return float(np.median(per_call))


def simulated_problem(folder: Path, n_epochs: int, *, seed: int = 11,
                      t_span: tuple[float, float] = (2005.0, 2026.5), distinct: bool = False) -> Problem:
    """The ``covered`` reference system observed at ``n_epochs`` epochs (astrometry and velocity each).

    ``distinct``: the velocity epochs are moved by a third of the mean spacing
    (no epoch is shared by a position and a velocity).
    """
    spec = PROBLEMS["covered"]
    rng = np.random.default_rng([seed, n_epochs])
    t = np.sort(rng.uniform(t_span[0], t_span[1], n_epochs))
    t_rv = t + (t_span[1] - t_span[0]) / n_epochs / 3.0 if distinct else t.copy()
    comp = CompanionData("S1", spec["truth"], t, t_rv, spec["pos"][3], spec["rv"][3])
    return make_problem(folder, f"covered-{n_epochs}", [comp], reference_epoch=spec["reference_epoch"],
                        distance_mode=spec["distance_mode"], distance_prior=spec["distance_prior"],
                        mass_prior_msun=spec["mass_prior_msun"], period_prior_yr=spec["period_prior_yr"],
                        rng=rng)


def parameter_sets(post: BaselinePosterior, n_sets: int, rng: np.random.Generator,
                   scale: float = 0.01) -> np.ndarray:
    """``n_sets`` baseline parameter vectors scattered about the truth (all inside the prior)."""
    truth = post.truth_vector()
    p = truth + scale * rng.standard_normal((n_sets, truth.size)) * np.maximum(np.abs(truth), 0.1)
    p[:, 3] = np.clip(p[:, 3], 0.0, 0.95)
    p[:, 4] = np.clip(p[:, 4], -0.99, 0.99)
    return p


def posteriors(problem: Problem):
    """(ParameterSpace, LogPosterior, BaselinePosterior) of a written problem."""
    from orbitmass.io.target import read_target
    from orbitmass.model.likelihood import LogPosterior
    from orbitmass.model.parameters import ParameterSpace

    space = ParameterSpace(read_target(problem.target))
    return space, LogPosterior(space), BaselinePosterior(problem)


def measure(problem: Problem, repeats: int, n_sets: int = N_SETS, seed: int = 5, label: str = "") -> dict:
    """Time the paths on ``problem`` for ``n_sets`` parameter sets (see module docstring)."""
    from orbitmass.model.likelihood import LogPosterior

    space, post, base = posteriors(problem)
    plain_post = LogPosterior(space, fused=False)
    p = parameter_sets(base, n_sets, np.random.default_rng(seed))
    theta = baseline_to_theta(space, base, p)
    rows = [theta[i: i + 1] for i in range(n_sets)]

    def vectorised():
        return post(theta)

    def likelihood_only():
        return post.log_likelihood(theta)

    def plain():
        lp = space.log_prior_reference(theta)
        return lp + plain_post.log_likelihood(theta)

    def loop():
        return [post(r) for r in rows]

    def scalar():
        return [base(q) for q in p]

    t_vec = median_seconds(vectorised, repeats)
    t_ll = median_seconds(likelihood_only, repeats)
    t_plain = median_seconds(plain, repeats)
    t_loop = median_seconds(loop, repeats)
    t_scalar = median_seconds(scalar, repeats)
    ll_vec = post.log_likelihood(theta)
    ll_plain = plain_post.log_likelihood(theta)
    ll_loop = np.array([post.log_likelihood(r)[0] for r in rows])
    ll_base = np.array([base.log_likelihood(q) for q in p])
    n_epochs = len(problem.companions[0].t_pos)
    return {
        "n_epochs": n_epochs,
        "label": label or str(n_epochs),
        "n_sets": n_sets,
        "n_dim": space.ndim,
        "us_per_set_vectorised": t_vec / n_sets * 1e6,
        "us_per_set_likelihood_only": t_ll / n_sets * 1e6,
        "us_per_set_plain": t_plain / n_sets * 1e6,
        "us_per_set_loop": t_loop / n_sets * 1e6,
        "us_per_set_scalar_baseline": t_scalar / n_sets * 1e6,
        "evaluations_per_s_vectorised": n_sets / t_vec,
        "evaluations_per_s_loop": n_sets / t_loop,
        "ratio_loop_over_vectorised": t_loop / t_vec,
        "ratio_plain_over_vectorised": t_plain / t_vec,
        "ratio_scalar_baseline_over_vectorised": t_scalar / t_vec,
        "max_abs_diff_loglike_loop": float(np.max(np.abs(ll_loop - ll_vec))),
        "max_rel_diff_loglike_plain": float(np.max(np.abs(ll_plain - ll_vec) / np.abs(ll_plain))),
        "max_abs_diff_loglike_baseline": float(np.max(np.abs(ll_base - ll_vec))),
    }


def run(quick: bool, sizes: tuple[int, ...] = (90, 100), repeats: int | None = None) -> dict:
    """Run the benchmark.

    Parameters
    ----------
    quick : bool
        Three repeats instead of seven.
    sizes : tuple of int
        Epoch counts (each epoch has a position and a velocity).
    repeats : int, optional
        Override the repeat count.

    Returns
    -------
    dict
        ``"sizes"``: one entry per epoch count (see :func:`measure`);
        ``"targets"``: the issue's targets for 90 epochs and whether they are met;
        ``"settings"``.
    """
    repeats = repeats or (3 if quick else 7)
    results = []
    with tempfile.TemporaryDirectory(prefix="orbitmass-bench-ll-") as tmp:
        for n in sizes:
            results.append(measure(simulated_problem(Path(tmp) / f"n{n}", n), repeats))
        if 90 in sizes:
            results.append(measure(simulated_problem(Path(tmp) / "n90d", 90, distinct=True), repeats,
                                   label="90d"))
    ref = next((r for r in results if r["label"] == "90"), results[0])
    return {
        "sizes": results,
        "targets": {
            "n_epochs": ref["n_epochs"],
            "us_per_set": ref["us_per_set_vectorised"],
            "us_per_set_plain": ref["us_per_set_plain"],
            "us_per_set_target": 10.0,
            "us_per_set_met": bool(ref["us_per_set_vectorised"] <= 10.0),
            "ratio_loop": ref["ratio_loop_over_vectorised"],
            "ratio_loop_target": 10.0,
            "ratio_loop_met": bool(ref["ratio_loop_over_vectorised"] >= 10.0),
        },
        "settings": {
            "n_sets": N_SETS,
            "data": "n epochs, each with an east/north position and a velocity; one companion "
                    "(90d: the velocity epochs moved, none shared with a position)",
            "posterior": "LogPosterior(ParameterSpace(target)) called on the whole block (prior + likelihood)",
            "repeats": repeats,
            "timer": "process CPU time, median over repeats",
            "quick": quick,
        },
    }


def table(result: dict) -> str:
    """Plain-text table of :func:`run` output."""
    lines = [
        f"Model + log-likelihood, {result['settings']['n_sets']} parameter sets "
        f"(us per parameter set, median of {result['settings']['repeats']})",
        f"{'epochs':>7} {'vectorised':>11} {'ll only':>9} {'plain':>8} {'loop':>9} {'scalar bl':>10} "
        f"{'plain/vec':>10} {'loop/vec':>9} {'scalar/vec':>11} {'max rel diff':>13}",
    ]
    for r in result["sizes"]:
        lines.append(
            f"{r.get('label', r['n_epochs']):>7} {r['us_per_set_vectorised']:>11.2f} "
            f"{r['us_per_set_likelihood_only']:>9.2f} {r['us_per_set_plain']:>8.2f} "
            f"{r['us_per_set_loop']:>9.1f} {r['us_per_set_scalar_baseline']:>10.1f} "
            f"{r['ratio_plain_over_vectorised']:>9.2f}x "
            f"{r['ratio_loop_over_vectorised']:>8.1f}x {r['ratio_scalar_baseline_over_vectorised']:>10.1f}x "
            f"{r['max_rel_diff_loglike_plain']:>13.1e}")
    t = result["targets"]
    lines.append("vectorised: fused path + grouped prior; plain: the reference paths (the code before them), "
                 "same run; 90d: no epoch shared by a position and a velocity")
    lines.append(
        f"targets at {t['n_epochs']} epochs: <= 10 us per set: {t['us_per_set']:.2f} us, plain path "
        f"{t['us_per_set_plain']:.2f} us "
        f"({'met' if t['us_per_set_met'] else 'NOT met'}); >= 10x the loop: {t['ratio_loop']:.1f}x "
        f"({'met' if t['ratio_loop_met'] else 'NOT met'})")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    """Command-line entry: run and print the table."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats")
    args = parser.parse_args(argv)
    print(table(run(args.quick)))  # noqa: T201 (benchmark script output)


if __name__ == "__main__":
    main()
