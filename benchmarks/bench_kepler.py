"""Benchmark of the Kepler solver: throughput against Newton baselines, accuracy against mpmath.

Side by side in one run, on the same random mean anomalies (uniform in
``[-pi, pi]``) and eccentricities (uniform in ``[0, 0.99)``):

* :func:`orbitmass.core.kepler.solve_kepler` (Markley 1995 starter + one
  fifth-order correction) and :func:`orbitmass.core.kepler.kepler_cos_sin`;
* a vectorised Newton iteration started at ``E0 = M + e sin M`` and iterated
  over the whole array until ``max |dE| < 1e-12``;
* a plain scalar Python Newton loop (same start and stopping rule per
  element) on fewer points;

and the largest error of each against ``mpmath.findroot`` (40 digits) on a
sample. Times are medians of several repeats of the process CPU time;
throughput is in solves per second. Usage::

    python benchmarks/bench_kepler.py [--quick]
"""

from __future__ import annotations

import argparse
import math
import time
from collections.abc import Callable

import mpmath
import numpy as np

from orbitmass.core.kepler import kepler_cos_sin, solve_kepler

__all__ = ["run", "newton_vectorised", "newton_scalar"]

MAX_ECC = 0.99
STOP_RAD = 1e-12


def newton_vectorised(
    mean: np.ndarray, ecc: np.ndarray, tol: float = STOP_RAD
) -> tuple[np.ndarray, int]:
    """Baseline: Newton from ``M + e sin M`` on the whole array until ``max |dE| < tol``."""
    big_e = mean + ecc * np.sin(mean)
    n_iter = 0
    while True:
        step = (big_e - ecc * np.sin(big_e) - mean) / (1.0 - ecc * np.cos(big_e))
        big_e -= step
        n_iter += 1
        if np.max(np.abs(step)) < tol or n_iter >= 100:
            return big_e, n_iter


def newton_scalar(mean: list[float], ecc: list[float], tol: float = STOP_RAD) -> list[float]:
    """Baseline: one plain Python Newton loop per element (math.sin / math.cos)."""
    out = []
    for m, e in zip(mean, ecc, strict=True):
        big_e = m + e * math.sin(m)
        for _ in range(100):
            step = (big_e - e * math.sin(big_e) - m) / (1.0 - e * math.cos(big_e))
            big_e -= step
            if abs(step) < tol:
                break
        out.append(big_e)
    return out


def _median_seconds(func: Callable[[], object], repeats: int, min_batch_s: float = 0.02) -> float:
    """Median CPU time of one call of ``func``, over ``repeats`` batches of calls.

    Each batch repeats the call until it takes at least ``min_batch_s``; the
    process CPU time (``time.process_time``) is used rather than wall time, so
    that other load on a shared machine disturbs the figures less (numpy's
    elementwise functions run in one thread).
    """
    func()  # warm-up
    number = 1
    while True:
        start = time.process_time()
        for _ in range(number):
            func()
        if time.process_time() - start >= min_batch_s or number >= 1 << 16:
            break
        number *= 2
    times = []
    for _ in range(repeats):
        start = time.process_time()
        for _ in range(number):
            func()
        times.append((time.process_time() - start) / number)
    return float(np.median(times))


def _mp_root(mean: float, ecc: float) -> float:
    """Root of E - e sin E = M with mpmath at 40 digits, bracketed in [M - e, M + e]."""
    with mpmath.workdps(40):
        m, e = mpmath.mpf(mean), mpmath.mpf(ecc)
        if e == 0:
            return mean

        def f(x: mpmath.mpf) -> mpmath.mpf:
            return x - e * mpmath.sin(x) - m

        lo, hi = m - e, m + e
        if f(lo) == 0:
            return float(lo)
        if f(hi) == 0:
            return float(hi)
        return float(mpmath.findroot(f, (lo, hi), solver="anderson"))


def _accuracy(rng: np.random.Generator, n_sample: int) -> dict[str, float]:
    """Largest |E - E_mpmath| of each method on a sample that stresses high e, small M."""
    half = n_sample // 2
    mean = np.concatenate(
        [rng.uniform(-np.pi, np.pi, half), 10 ** rng.uniform(-10, 0, n_sample - half)]
    )
    ecc = np.concatenate(
        [rng.uniform(0, MAX_ECC, half), rng.uniform(0.9, MAX_ECC, n_sample - half)]
    )
    reference = np.array([_mp_root(float(m), float(e)) for m, e in zip(mean, ecc, strict=True)])
    cos_e, sin_e = kepler_cos_sin(mean, ecc)
    return {
        "n_sample": float(n_sample),
        "solve_kepler": float(np.max(np.abs(solve_kepler(mean, ecc) - reference))),
        "kepler_cos_sin": float(
            max(
                np.max(np.abs(cos_e - np.cos(reference))), np.max(np.abs(sin_e - np.sin(reference)))
            )
        ),
        "newton_vectorised": float(np.max(np.abs(newton_vectorised(mean, ecc)[0] - reference))),
        "newton_scalar": float(
            np.max(np.abs(np.array(newton_scalar(list(mean), list(ecc))) - reference))
        ),
    }


def run(quick: bool) -> dict:
    """Run the benchmark.

    Parameters
    ----------
    quick : bool
        A few seconds in total (smaller arrays, fewer repeats) instead of about twenty.

    Returns
    -------
    dict
        ``"throughput"``: one entry per array size with solves per second of
        each method, the Newton iteration count and the speed-up of
        ``solve_kepler`` over the vectorised Newton baseline;
        ``"scalar_newton_per_s"``: the plain Python loop; ``"max_error_rad"``:
        the largest errors against mpmath; ``"settings"``: what was run.
    """
    rng = np.random.default_rng(20240603)
    sizes = [1_000, 10_000] if quick else [1_000, 10_000, 100_000, 1_000_000]
    repeats = 5 if quick else 9
    batch_s = 0.01 if quick else 0.05
    throughput = []
    for n in sizes:
        mean = rng.uniform(-np.pi, np.pi, n)
        ecc = rng.uniform(0.0, MAX_ECC, n)
        t_markley = _median_seconds(lambda m=mean, e=ecc: solve_kepler(m, e), repeats, batch_s)
        t_cos_sin = _median_seconds(lambda m=mean, e=ecc: kepler_cos_sin(m, e), repeats, batch_s)
        t_newton = _median_seconds(lambda m=mean, e=ecc: newton_vectorised(m, e), repeats, batch_s)
        throughput.append(
            {
                "n": n,
                "solve_kepler_per_s": n / t_markley,
                "kepler_cos_sin_per_s": n / t_cos_sin,
                "newton_vectorised_per_s": n / t_newton,
                "newton_iterations": newton_vectorised(mean, ecc)[1],
                "speedup_vs_newton": t_newton / t_markley,
            }
        )
    n_scalar = 2_000 if quick else 20_000
    mean_list = list(rng.uniform(-np.pi, np.pi, n_scalar))
    ecc_list = list(rng.uniform(0.0, MAX_ECC, n_scalar))
    t_scalar = _median_seconds(lambda: newton_scalar(mean_list, ecc_list), 3, batch_s)
    return {
        "throughput": throughput,
        "scalar_newton_per_s": n_scalar / t_scalar,
        "scalar_newton_n": n_scalar,
        "max_error_rad": _accuracy(rng, 300 if quick else 3000),
        "settings": {
            "eccentricity": f"uniform [0, {MAX_ECC})",
            "mean_anomaly": "uniform [-pi, pi]",
            "newton_stop": f"max |dE| < {STOP_RAD:g}",
            "repeats": repeats,
            "timer": "process CPU time, median over repeats",
            "quick": quick,
        },
    }


def _table(result: dict) -> str:
    """Plain-text table of :func:`run` output."""
    lines = [
        "Kepler solver throughput (solves/s, median of "
        f"{result['settings']['repeats']} repeats; e {result['settings']['eccentricity']}, "
        f"M {result['settings']['mean_anomaly']})",
        f"{'n':>9} {'solve_kepler':>13} {'kepler_cos_sin':>15} {'Newton (vec)':>13} "
        f"{'iter':>5} {'speed-up':>9}",
    ]
    for row in result["throughput"]:
        lines.append(
            f"{row['n']:>9d} {row['solve_kepler_per_s']:>13.3e} "
            f"{row['kepler_cos_sin_per_s']:>15.3e} "
            f"{row['newton_vectorised_per_s']:>13.3e} {row['newton_iterations']:>5d} "
            f"{row['speedup_vs_newton']:>8.1f}x"
        )
    lines.append(
        f"plain Python Newton loop: {result['scalar_newton_per_s']:.3e} solves/s "
        f"({result['scalar_newton_n']} points)"
    )
    err = result["max_error_rad"]
    lines.append(
        f"max |E - E_mpmath| on {int(err['n_sample'])} points (half with e >= 0.9, M < 1):"
    )
    for key in ("solve_kepler", "kepler_cos_sin", "newton_vectorised", "newton_scalar"):
        lines.append(f"  {key:<18} {err[key]:.2e} rad")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    """Command-line entry: run and print the table."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="a few seconds instead of twenty")
    args = parser.parse_args(argv)
    print(_table(run(args.quick)))  # noqa: T201 (benchmark script output)


if __name__ == "__main__":
    main()
