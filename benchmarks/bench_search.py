"""Benchmark of the global orbit search: time and peak memory against the number of rows.

Simulates position tables of 1e3, 1e4 and 1e5 rows (``--quick``: 1e3 and
1e4) of one orbit (P = 6.5 yr, e = 0.3, 14 yr of data, 1.5 mas errors) with
:mod:`validation.simulator`, runs :func:`orbitmass.inference.search.search_orbit`
on each and prints wall time, process CPU time, the peak of traced Python
allocations (``tracemalloc``; numpy reports its buffers to it), the number of
grid points and the recovered period and eccentricity. It reports; it never
fails on timing. Usage::

    python benchmarks/bench_search.py [--quick] [--rows 1000 10000 100000]
"""

from __future__ import annotations

import argparse
import json
import time
import tracemalloc

import numpy as np

from orbitmass.inference.search import SearchData, search_orbit
from validation.simulator import Orbit, System, observe

__all__ = ["run"]


def _data(n_rows: int, seed: int = 8) -> SearchData:
    rng = np.random.default_rng(seed)
    sysm = System(mass_msun=1.9, distance_pc=18.0, orbits={"m": Orbit(6.5, 0.3, 63.0, 20.0, 75.0, 2016.0)})
    t = np.sort(rng.uniform(2010.0, 2024.0, n_rows))
    obs = observe(sysm, "m", t, t)
    w = np.full(n_rows, 1.0 / 1.5**2)
    return SearchData(name="m", t_ref_yr=2017.0, period_bounds_yr=(0.5, 200.0), astro_t_yr=t,
                      east_mas=obs["east_mas"] + rng.normal(0, 1.5, n_rows),
                      north_mas=obs["north_mas"] + rng.normal(0, 1.5, n_rows), w_east=w, w_north=w)


def run(rows: list[int]) -> list[dict]:
    """Time and memory of one search per table size; returns one dict per size."""
    out = []
    for n in rows:
        data = _data(n)
        tracemalloc.start()
        wall, cpu = time.perf_counter(), time.process_time()
        cands, n_grid = search_orbit(data)
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        best = cands[0]
        out.append({"rows": n, "wall_s": wall, "cpu_s": cpu, "peak_mb": peak / 1e6, "grid_points": n_grid,
                    "period_yr": best["period_obs"], "ecc": best["ecc"], "chi2_per_row": best["chi2"] / (2 * n)})
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--rows", type=int, nargs="*")
    parser.add_argument("--json", help="also write the results to this JSON file")
    args = parser.parse_args(argv)
    rows = args.rows or ([1000, 10_000] if args.quick else [1000, 10_000, 100_000])
    res = run(rows)
    print(f"{'rows':>8} {'wall s':>8} {'cpu s':>8} {'peak MB':>8} {'grid pts':>10} {'P yr':>8} {'e':>6} "
          f"{'chi2/row':>8}   (truth P 6.5 yr, e 0.3)")
    for r in res:
        print(f"{r['rows']:>8} {r['wall_s']:>8.2f} {r['cpu_s']:>8.2f} {r['peak_mb']:>8.1f} {r['grid_points']:>10} "
              f"{r['period_yr']:>8.4f} {r['ecc']:>6.3f} {r['chi2_per_row']:>8.3f}")
    if args.json:
        with open(args.json, "x", encoding="utf-8") as fh:
            json.dump(res, fh, indent=1)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
