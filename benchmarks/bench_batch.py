"""Benchmark of batch fitting: plain loop vs dask with 1 and 2 workers; emcee pool vs vectorised.

Side by side in one run, on 8 small invented targets
(:func:`orbitmass.demo.scenarios.write_example_sample`: visual binaries, 16 epochs,
astrometry and a parallax):

* a plain loop in this process: ``Fit(seed=...).fit(target)`` and the run
  folder (:func:`orbitmass.io.rundir.save_run`) for every target, one after
  the other;
* :func:`orbitmass.batch.fit_batch` on a local dask cluster of 1 and of 2
  worker processes (one thread each), same seeds and options.

Throughput is targets per minute of wall-clock time. The batch time is
measured with the cluster already up (its start and shutdown are reported
apart); the distributed overhead is (1-worker batch - plain loop) / targets.
Every batch must reproduce the loop's mass medians exactly (same seeds).

Second part: parallel walkers for one fit, in sampler steps per second from
the same starting walkers and seed, for a small (16-epoch) and larger data
sets of the same invented orbit:

* ``serial``: emcee evaluates all walkers at once through the vectorised
  posterior (``pool=None``, what :class:`orbitmass.fit.Fit` does);
* ``pool``: an emcee pool, a ``multiprocessing.Pool`` of 2 processes, walkers
  one by one (:func:`orbitmass.inference.sampler.run_sampler` with ``pool=``; chunks as
  multiprocessing chooses); ``halves``: the same in two chunks;
* ``split``: the vectorised posterior evaluated in two halves of the walker
  array, one per process of a pool that holds the posterior (two messages
  per step).

Wall-clock times on a shared machine are noisy; the load average before the
run is reported. Usage::

    python benchmarks/bench_batch.py [--quick]
"""

from __future__ import annotations

import argparse
import logging
import multiprocessing
import os
import tempfile
import time
from pathlib import Path

import numpy as np

from orbitmass.batch import fit_batch, open_client, plan_batch
from orbitmass.demo.scenarios import write_example_sample
from orbitmass.io.target import read_target

__all__ = ["run"]

N_TARGETS = 8
BATCH_SEED = 2026


class _HalvesPool:
    """A pool whose ``map`` sends the walkers in as many chunks as processes."""

    def __init__(self, pool, processes: int):
        self.pool = pool
        self.processes = processes

    def map(self, func, iterable):
        items = list(iterable)
        chunk = max(1, -(-len(items) // self.processes))
        return self.pool.map(func, items, chunksize=chunk)


_WORKER_POSTERIOR = None  # the posterior held by each process of the split pool


def _hold_posterior(post) -> None:
    global _WORKER_POSTERIOR
    _WORKER_POSTERIOR = post


def _evaluate_chunk(theta: np.ndarray) -> np.ndarray:
    return _WORKER_POSTERIOR(theta)


class _SplitPosterior:
    """Vectorised posterior that evaluates the walker array in equal parts in a pool."""

    def __init__(self, pool, processes: int):
        self.pool = pool
        self.processes = processes

    def __call__(self, theta: np.ndarray) -> np.ndarray:
        parts = np.array_split(np.atleast_2d(theta), self.processes)
        return np.concatenate(self.pool.map(_evaluate_chunk, parts, chunksize=1))


def _plain_loop(targets: list[Path], out: Path, options: dict, products: bool) -> dict[str, float]:
    from orbitmass.fit import Fit
    from orbitmass.io.rundir import save_run

    medians = {}
    for job in plan_batch([str(p) for p in targets], out, seed=BATCH_SEED, fit_options=options):
        fit = Fit(seed=job.seed, progress=False, **options).fit(job.target_file)
        save_run(fit.results, Path(job.run_dir), products=products)
        medians[job.name] = fit.summary["derived"]["mass_msun"]["median"]
    return medians


def _batch(targets: list[Path], out: Path, workers: int, options: dict, products: bool) -> dict:
    t0 = time.perf_counter()
    with open_client(workers=workers) as client:
        client.wait_for_workers(workers)
        # warm-up: each worker imports orbitmass and its dependencies before the clock starts
        client.run(read_target, str(targets[0]))
        t_up = time.perf_counter()
        cat = fit_batch(
            [str(p) for p in targets],
            out,
            client=client,
            seed=BATCH_SEED,
            fit_options=options,
            products=products,
            progress=False,
        )
        t_done = time.perf_counter()
    t_closed = time.perf_counter()
    return {
        "catalogue": cat,
        "startup_s": t_up - t0,
        "batch_s": t_done - t_up,
        "shutdown_s": t_closed - t_done,
    }


def _posterior(data: Path, n_epochs: int):
    from orbitmass.io.target import read_target
    from orbitmass.model.likelihood import LogPosterior
    from orbitmass.model.parameters import ParameterSpace

    # seed 5: the same invented truth whatever n_epochs (drawn first), reference epoch 2020.0
    path = write_example_sample(data / f"pool-{n_epochs}", 1, seed=5, n_epochs=n_epochs)[0]
    return LogPosterior(ParameterSpace(read_target(path)))


def _pool_comparison(data: Path, sizes: tuple[int, ...], steps: int, processes: int) -> list[dict]:
    """Sampler steps per second: vectorised serial vs a process pool (one fit per size).

    The walkers are initialised once on the smallest data set and reused for
    the larger ones (same invented orbit, same reference epoch), so that the
    timing does not wait for an initialisation on thousands of epochs.
    """
    from orbitmass.inference.initialise import initialise_walkers
    from orbitmass.inference.sampler import SamplerOptions, run_sampler

    small = _posterior(data, min(sizes))
    n_walkers = max(64, 4 * small.space.ndim)
    walkers = initialise_walkers(small, n_walkers, np.random.default_rng(1), max_periods=500).walkers
    options = SamplerOptions(max_steps=steps, min_steps=steps, progress=False)
    out = []
    with multiprocessing.Pool(processes) as pool:
        for n_epochs in sizes:
            post = small if n_epochs == min(sizes) else _posterior(data, n_epochs)
            t0 = time.perf_counter()
            post(walkers)
            eval_ms = (time.perf_counter() - t0) * 1e3
            rate = {}
            for label, p in (
                ("serial", None),
                ("pool", pool),
                ("halves", _HalvesPool(pool, processes)),
            ):
                run = run_sampler(post, walkers, seed=3, options=options, pool=p)
                rate[label] = steps / run.sampling_seconds
            with multiprocessing.Pool(processes, _hold_posterior, (post,)) as split_pool:
                run = run_sampler(_SplitPosterior(split_pool, processes), walkers, seed=3, options=options)
                rate["split"] = steps / run.sampling_seconds
            out.append(
                {
                    "n_epochs": n_epochs,
                    "n_walkers": n_walkers,
                    "steps": steps,
                    "posterior_ms_per_call_all_walkers": eval_ms,
                    "serial_vectorised_steps_per_s": rate["serial"],
                    "pool_steps_per_s": rate["pool"],
                    "pool_halves_steps_per_s": rate["halves"],
                    "split_vectorised_steps_per_s": rate["split"],
                    "speedup_pool": rate["pool"] / rate["serial"],
                    "speedup_pool_halves": rate["halves"] / rate["serial"],
                    "speedup_split": rate["split"] / rate["serial"],
                }
            )
    return out


def run(quick: bool) -> dict:
    """Run the benchmark.

    Parameters
    ----------
    quick : bool
        About a minute in total: 300-step chains (not converged) and a short
        pool comparison, instead of chains run to convergence (several minutes).

    Returns
    -------
    dict
        ``"throughput"``: one entry per path (``loop``, ``dask-1``,
        ``dask-2``) with seconds, fits per minute and cluster start/stop
        seconds; ``"overhead_s_per_fit"`` and ``"overhead_fraction"`` of the
        1-worker dask path against the loop; ``"speedup_2_vs_1"``;
        ``"same_results"`` (mass medians identical across the paths);
        ``"pool"``: the emcee pool comparison per data-set size; ``"settings"``.
    """
    logging.getLogger("distributed").setLevel(logging.ERROR)
    options = {"max_steps": 200, "min_steps": 200} if quick else {}
    products = False
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    with tempfile.TemporaryDirectory(prefix="orbitmass-bench-batch-") as tmp:
        tmp = Path(tmp)
        targets = write_example_sample(tmp / "data", N_TARGETS, seed=1)
        pool_results = _pool_comparison(tmp, (16, 2000) if quick else (16, 2000, 20000), 60 if quick else 300, 2)
        t0 = time.perf_counter()
        loop_medians = _plain_loop(targets, tmp / "loop", options, products)
        loop_s = time.perf_counter() - t0
        runs = {"loop": {"batch_s": loop_s, "startup_s": 0.0, "shutdown_s": 0.0}}
        same = True
        for workers in (1, 2):
            res = _batch(targets, tmp / f"dask-{workers}", workers, options, products)
            cat = res.pop("catalogue")
            same &= dict(zip(cat["name"], cat["mass_msun_median"], strict=True)) == loop_medians
            same &= bool((cat["status"] != "failed").all())
            runs[f"dask-{workers}"] = res
    throughput = []
    for path, res in runs.items():
        throughput.append({"path": path, **res, "fits_per_min": 60.0 * N_TARGETS / res["batch_s"]})
    overhead = (runs["dask-1"]["batch_s"] - loop_s) / N_TARGETS
    return {
        "throughput": throughput,
        "overhead_s_per_fit": overhead,
        "overhead_fraction": overhead / (loop_s / N_TARGETS),
        "speedup_2_vs_1": runs["dask-1"]["batch_s"] / runs["dask-2"]["batch_s"],
        "same_results": bool(same),
        "pool": pool_results,
        "settings": {
            "n_targets": N_TARGETS,
            "fit_options": options or "defaults (run to convergence, cap 20000 steps)",
            "products": products,
            "cpu_count": os.cpu_count(),
            "load_average_1min_before": load,
            "timer": "wall clock (time.perf_counter)",
            "quick": quick,
        },
    }


def _table(result: dict) -> str:
    """Plain-text table of :func:`run` output."""
    s = result["settings"]
    lines = [
        f"Batch throughput, {s['n_targets']} small targets ({s['fit_options']}; "
        f"figures {'on' if s['products'] else 'off'}; {s['cpu_count']} CPUs, "
        f"load {s['load_average_1min_before']:.2f} before)",
        f"{'path':<8} {'batch s':>8} {'fits/min':>9} {'start s':>8} {'stop s':>7}",
    ]
    for row in result["throughput"]:
        lines.append(
            f"{row['path']:<8} {row['batch_s']:>8.1f} {row['fits_per_min']:>9.1f} "
            f"{row['startup_s']:>8.1f} {row['shutdown_s']:>7.1f}"
        )
    lines.append(
        f"dask overhead (1 worker vs loop): {result['overhead_s_per_fit']:+.2f} s per fit "
        f"({100 * result['overhead_fraction']:+.0f} %); 2 vs 1 workers: "
        f"{result['speedup_2_vs_1']:.2f}x; same results as the loop: {result['same_results']}"
    )
    lines.append("emcee walkers, one fit: steps/s, vectorised serial vs multiprocessing Pool(2)")
    lines.append(
        f"{'epochs':>7} {'walkers':>8} {'ms/call':>8} {'serial':>8} {'pool':>8} {'halves':>8} "
        f"{'split':>8} {'pool x':>7} {'halves x':>9} {'split x':>8}"
    )
    for row in result["pool"]:
        lines.append(
            f"{row['n_epochs']:>7d} {row['n_walkers']:>8d} "
            f"{row['posterior_ms_per_call_all_walkers']:>8.2f} "
            f"{row['serial_vectorised_steps_per_s']:>8.1f} {row['pool_steps_per_s']:>8.1f} "
            f"{row['pool_halves_steps_per_s']:>8.1f} {row['split_vectorised_steps_per_s']:>8.1f} "
            f"{row['speedup_pool']:>7.2f} {row['speedup_pool_halves']:>9.2f} "
            f"{row['speedup_split']:>8.2f}"
        )
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    """Command-line entry: run and print the table."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="about a minute instead of several")
    args = parser.parse_args(argv)
    print(_table(run(args.quick)))  # noqa: T201 (benchmark script output)


if __name__ == "__main__":
    main()
