"""Benchmark of a whole astrometry-only fit against the number of rows: time and memory per stage.

For 1e3, 1e4 and 1e5 rows (``--rows`` to choose) one east/north table of an invented
orbit (P = 6.5 yr, e = 0.3, 14 yr of data, 1.5 mas errors, 1 % parallax prior) is
simulated with :mod:`validation.simulator`, written as CSV with its target file, and
fitted through the stages of ``orbitmass fit``: reading, the fast path of
:mod:`orbitmass.inference.linear` (its initialisation and sampling reported apart),
goodness of fit, the summary, the run folder (``summary.json``, ``posterior.h5``) and its
figures, tables and reports. Each stage prints its wall time and the peak of traced
allocations (``tracemalloc``; numpy reports its buffers to it); each table size runs in a
fresh process, whose maximum resident set size (``resource.getrusage``) is printed too.
The load average before and after is printed beside the figures. It reports; it never
fails on timing. Usage::

    python benchmarks/bench_rows.py [--quick] [--rows 1000 10000 100000] [--no-products]

``--quick`` runs 1e3 and 1e4 rows without figures. A 1e5-row run takes minutes (tens of
minutes on a loaded machine), so the suite's ``--quick`` mode leaves the section out.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import textwrap
import time
import tracemalloc
from pathlib import Path

if __package__ in (None, ""):  # run as a script: make the repository root importable
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import numpy as np

from validation.simulator import Orbit, System, observe

__all__ = ["run", "table", "fit_rows", "write_target", "SYSTEM"]

#: The invented system every table is simulated from (companion "m"; reference epoch 2017).
SYSTEM = System(mass_msun=1.9, distance_pc=18.0, orbits={"m": Orbit(6.5, 0.3, 63.0, 20.0, 75.0, 2016.0)})
ERR_MAS = 1.5
SEED = 1


def write_target(folder: Path, n_rows: int, seed: int = 8) -> Path:
    """Simulate ``n_rows`` east/north rows of :data:`SYSTEM` over 2010-2024 into ``folder``; the target path."""
    rng = np.random.default_rng(seed)
    t = np.sort(rng.uniform(2010.0, 2024.0, n_rows))
    obs = observe(SYSTEM, "m", t, t)
    east = obs["east_mas"] + rng.normal(0.0, ERR_MAS, n_rows)
    north = obs["north_mas"] + rng.normal(0.0, ERR_MAS, n_rows)
    lines = ["jyear,east_mas,north_mas,east_err_mas,north_err_mas"]
    lines += [f"{a:.7f},{b:.5f},{c:.5f},{ERR_MAS},{ERR_MAS}" for a, b, c in zip(t, east, north)]
    (folder / "pos.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    path = folder / "target.toml"
    path.write_text(textwrap.dedent("""
        [target]
        name = "invented long table"
        reference_epoch = 2017.0
        [central]
        mass = { dist = "log-uniform", low = "0.05 solMass", high = "50 solMass" }
        [distance]
        parallax = { dist = "normal", mean = "55.5 mas", sd = "0.555 mas" }
        [[companion]]
        name = "m"
        astrometry = "pos.csv"
        period = { dist = "log-uniform", low = "0.5 yr", high = "200 yr" }
        """), encoding="utf-8")
    return path


class _Stages:
    """Wall time and traced peak memory of consecutive stages."""

    def __init__(self):
        self.rows: list[dict] = []

    def __call__(self, name: str, func):
        tracemalloc.reset_peak()
        base = tracemalloc.get_traced_memory()[0]
        t0 = time.perf_counter()
        out = func()
        wall = time.perf_counter() - t0
        peak = tracemalloc.get_traced_memory()[1]
        self.rows.append({"stage": name, "wall_s": wall, "peak_mb": peak / 1e6, "extra_peak_mb": (peak - base) / 1e6})
        return out


def fit_rows(n_rows: int, *, products: bool = True) -> dict:
    """Fit one simulated table of ``n_rows`` rows stage by stage, in this process."""
    from orbitmass.inference.linear import fit_linear
    from orbitmass.inference.pipeline import build_space
    from orbitmass.inference.quality import quality_or_failure
    from orbitmass.inference.sampler import SamplerOptions
    from orbitmass.inference.summary import build_summary
    from orbitmass.io.rundir import save_run
    from orbitmass.io.target import read_target
    from orbitmass.outputs.products import write_products
    from orbitmass.results import Results, derive_samples

    stage = _Stages()
    with tempfile.TemporaryDirectory(prefix="orbitmass-bench-rows-") as tmp:
        folder = Path(tmp)
        path = write_target(folder, n_rows)
        tracemalloc.start()
        t_start = time.perf_counter()
        target = stage("read target and table", lambda: read_target(path))
        space = build_space(target)
        options = SamplerOptions(max_steps=20000, min_steps=600, progress=False)
        theta, lp, lin = stage("fast path", lambda: fit_linear(space, np.random.default_rng(SEED), options))
        diag, final, run, init = lin["diagnostics"], lin["space"], lin["run"], lin["init"]

        def summarise():
            samples = derive_samples(final, theta, lp)
            return samples, build_summary(target, final, samples, run, init, SEED, time.perf_counter() - t_start)

        samples, summary = stage("samples and summary", summarise)
        quality, residuals = stage("goodness of fit", lambda: quality_or_failure(final, theta, lp, seed=SEED))
        summary["fit_quality"] = quality
        info = {"init_best_log_posterior": init.best_log_post, "n_grid": init.n_grid,
                "n_evaluations": run.n_evaluations, "sampler": "linear", "residuals": residuals}
        results = Results(target=target, space=final, samples=samples, theta=theta, chain=run.chain,
                          log_prob=run.log_prob, burn=run.burn, thin=run.thin, summary=summary, info=info)
        stage("run folder (no products)", lambda: save_run(results, folder / "run", products=False))
        if products:
            stage("figures, tables, reports", lambda: write_products(results, folder / "products"))
        tracemalloc.stop()
        total = time.perf_counter() - t_start
    mass = samples["mass_msun"].to_numpy()
    return {
        "rows": n_rows, "stages": stage.rows, "total_s": total,
        "fast_path": {"sampler_3d": diag.get("sampler_3d"), "init_s": diag.get("init_seconds"),
                      "sampling_s": diag.get("sampling_seconds_3d"), "n_sets_3d": diag.get("n_evaluations_3d"),
                      "n_grid": init.n_grid, "kish_ess": diag.get("kish_ess")},
        "mass_msun": [float(np.quantile(mass, q)) for q in (0.16, 0.5, 0.84)],
        "max_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,  # kB on Linux
    }


def run(quick: bool, rows: list[int] | None = None, products: bool | None = None) -> dict:
    """Each table size in a fresh process (so its max RSS is its own); returns every result."""
    rows = rows or ([1000, 10_000] if quick else [1000, 10_000, 100_000])
    products = (not quick) if products is None else products
    root = str(Path(__file__).resolve().parent.parent)
    out = {"load_before": os.getloadavg()[0], "results": []}
    for n in rows:
        cmd = [sys.executable, "-m", "benchmarks.bench_rows", "--one", str(n)] + ([] if products else ["--no-products"])
        proc = subprocess.run(cmd, cwd=root, capture_output=True, text=True, check=False,
                              env={**os.environ, "PYTHONPATH": root})
        if proc.returncode != 0:
            raise RuntimeError(f"bench_rows --one {n} failed:\n{proc.stderr[-4000:]}")
        out["results"].append(json.loads(proc.stdout.strip().splitlines()[-1]))
    out["load_after"] = os.getloadavg()[0]
    return out


def table(res: dict) -> str:
    """The printed table."""
    lines = [f"Astrometry-only fit against rows (load average {res['load_before']:.1f} before, "
             f"{res['load_after']:.1f} after); peak = traced allocations during the stage"]
    for r in res["results"]:
        fp = r["fast_path"]
        lines.append(f"  {r['rows']:>7} rows: {r['total_s']:7.1f} s in all, max RSS {r['max_rss_mb']:6.0f} MB; "
                     f"mass {r['mass_msun'][1]:.4f} (+{r['mass_msun'][2] - r['mass_msun'][1]:.4f} "
                     f"-{r['mass_msun'][1] - r['mass_msun'][0]:.4f}) Msun (truth 1.9); {fp['sampler_3d']}")
        for s in r["stages"]:
            lines.append(f"      {s['stage']:<28} {s['wall_s']:8.2f} s  peak {s['peak_mb']:7.1f} MB")
            if s["stage"] == "fast path":
                lines.append(f"        of which initialisation {fp['init_s']:8.2f} s ({fp['n_grid']} grid points), "
                             f"3-D sampling {fp['sampling_s']:.2f} s, {fp['n_sets_3d']} sets evaluated")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="1e3 and 1e4 rows, no figures")
    parser.add_argument("--rows", type=int, nargs="*", help="table sizes (default 1000 10000 100000)")
    parser.add_argument("--no-products", action="store_true", help="leave out figures, tables and reports")
    parser.add_argument("--one", type=int, help=argparse.SUPPRESS)  # one size in this process, JSON out
    args = parser.parse_args(argv)
    if args.one:
        print(json.dumps(fit_rows(args.one, products=not args.no_products)))  # noqa: T201 (benchmark output)
        return 0
    res = run(args.quick, args.rows, products=False if args.no_products else None)
    print(table(res))  # noqa: T201 (benchmark output)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
