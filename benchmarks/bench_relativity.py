"""Benchmark of the model terms: a likelihood evaluation with every Beyond-Kepler term on against a Keplerian one.

Side by side in one run, on one invented star (an e = 0.88, 16-yr orbit
around 4.1e6 solar masses at 8.2 kpc, data from the first post-Newtonian
integration of :func:`orbitmass.demo.simulate_pn.simulate_pn`) observed at
90 epochs (a position and a velocity at each), for 64 parameter sets
scattered about the truth:

* ``kepler``: the target without ``[relativity]`` / ``[extended_mass]``
  (plain Keplerian orbits);
* ``all terms``: the same data with ``redshift_factor`` and
  ``precession_factor`` sampled, ``roemer_delay = true`` and a sampled
  extended mass (Plummer sphere) -- the four terms of
  :mod:`orbitmass.core.relativity` at once;
* ``all terms, reference``: the same posterior on the plain reference path
  (``LogPosterior(space, fused=False)``: every orbit through
  :func:`orbitmass.core.orbit.evaluate` and the terms' hooks), the cost
  before the terms entered the fused path.

Each figure is the process CPU time of one
:class:`orbitmass.model.likelihood.LogPosterior` call on the (64, n_dim)
block (prior included, as emcee calls it), in microseconds per parameter set:
the median over rounds (7 with ``--quick``, else 21) of one timed batch of
each posterior in turn (batches of at least 20 ms), the order reversed every
other round. The ratio all terms / kepler, the figure of merit (target: at
most 2), is the median of the ratios within a round, so that the two figures
of a ratio are taken side by side under the same load; its quartiles over
the rounds show the spread. The largest relative difference between the
fused and the reference log-likelihood of the block is printed too, and the
load average of the machine at the start and the end.

Usage::

    python -m benchmarks.bench_relativity [--quick]
"""

from __future__ import annotations

import argparse
import os
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np

from orbitmass.demo.simulate import TrueOrbit, write_positions_csv, write_velocities_csv
from orbitmass.demo.simulate_pn import simulate_pn
from orbitmass.inference.pipeline import build_space
from orbitmass.io.target import read_target
from orbitmass.model.likelihood import LogPosterior

__all__ = ["TRUTH", "write_target", "parameter_sets", "run"]

N_SETS = 64
N_EPOCHS = 90

#: invented star of the benchmark
TRUTH = TrueOrbit(mass_msun=4.1e6, distance_pc=8200.0, period_yr=16.0, eccentricity=0.88, inclination_deg=134.0,
                  arg_periastron_deg=66.0, ascending_node_deg=228.0, periastron_time=2018.4)

_TARGET = """\
[target]
name = "benchmark star"
reference_epoch = 2018.0
[central]
mass = { dist = "log-uniform", low = "1e5 solMass", high = "1e8 solMass" }
[distance]
prior = { dist = "uniform", low = "1 kpc", high = "40 kpc" }
[[companion]]
name = "S"
astrometry = "pos.csv"
velocities = "vel.csv"
period = { dist = "log-uniform", low = "5 yr", high = "50 yr" }
"""

_TERMS = """
[relativity]
redshift_factor = { dist = "uniform", low = -1, high = 3 }
precession_factor = { dist = "uniform", low = -1, high = 3 }
roemer_delay = true
[extended_mass]
fraction = { dist = "uniform", low = 0, high = 0.05 }
scale_radius = "20 mas"
"""


def write_target(folder: Path, *, terms: bool, n_epochs: int = N_EPOCHS, seed: int = 7) -> Path:
    """Write the benchmark star's data (relativistic) and a target file with or without every term."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    t = np.sort(rng.uniform(2002.0, 2026.0, n_epochs))
    sim = simulate_pn(TRUTH, t)
    write_positions_csv(folder / "pos.csv", t, sim["east_mas"] + rng.normal(0, 0.2, t.size),
                        sim["north_mas"] + rng.normal(0, 0.2, t.size), 0.2)
    write_velocities_csv(folder / "vel.csv", t, sim["rv_companion_kms"] + rng.normal(0, 10.0, t.size), 10.0)
    path = folder / "target.toml"
    path.write_text(_TARGET + (textwrap.dedent(_TERMS) if terms else ""), encoding="utf-8")
    return path


def parameter_sets(space, rng: np.random.Generator, n: int = N_SETS) -> np.ndarray:
    """``n`` sampled vectors scattered about the truth (term parameters about 1, the fraction about 0.01)."""
    tr = TRUTH
    values = {"mass_msun": tr.mass_msun, "distance_pc": tr.distance_pc, "S.period_yr": tr.period_yr,
              "S.ecc": tr.eccentricity, "S.cos_i": np.cos(np.radians(tr.inclination_deg)),
              "S.omega": np.radians(tr.arg_periastron_deg), "S.node": np.radians(tr.ascending_node_deg),
              "S.m0": 2 * np.pi * (2018.0 - tr.periastron_time) / tr.period_yr, "systemic": 0.0,
              "redshift_factor": 1.0, "precession_factor": 1.0, "extended_mass_fraction": 0.01}
    theta0 = space.pack(values)[0]
    return theta0 + 1e-4 * np.maximum(np.abs(theta0), 1e-2) * rng.standard_normal((n, theta0.size))


def _calls_per_batch(func, min_batch_s: float = 0.02) -> int:
    """Calls of ``func`` per timed batch: doubled until a batch lasts ``min_batch_s`` of CPU time."""
    func()  # warm-up
    calls = 1
    while calls < 1 << 14:
        t0 = time.process_time()
        for _ in range(calls):
            func()
        if time.process_time() - t0 >= min_batch_s:
            break
        calls *= 2
    return calls


def _batch_seconds(func, calls: int) -> float:
    t0 = time.process_time()
    for _ in range(calls):
        func()
    return (time.process_time() - t0) / calls


def run(quick: bool = False) -> dict:
    """Measure the posteriors; returns the figures (microseconds per set) and the ratios to kepler."""
    rounds = 7 if quick else 21
    labels = ("kepler", "all_terms", "all_terms_reference")
    out: dict = {"n_sets": N_SETS, "n_epochs": N_EPOCHS, "rounds": rounds, "load_start": os.getloadavg()}
    with tempfile.TemporaryDirectory() as tmp:
        posts = {}
        for label, terms, fused in zip(labels, (False, True, True), (True, True, False)):
            space = build_space(read_target(write_target(Path(tmp) / label, terms=terms)))
            post = LogPosterior(space, fused=fused)
            theta = parameter_sets(space, np.random.default_rng(3))
            assert np.all(np.isfinite(post(theta))), label  # benchmark sanity, not user input
            func = (lambda p=post, th=theta: p(th))
            posts[label] = (func, _calls_per_batch(func), [t.name for t in space.terms])
        # rounds of one batch each, the order reversed every other round, so that drifting load hits
        # all alike; ratios are taken within a round (side by side) and their median reported
        seconds: dict[str, list[float]] = {label: [] for label in labels}
        for k in range(rounds):
            for label in (labels if k % 2 == 0 else labels[::-1]):
                func, calls, _ = posts[label]
                seconds[label].append(_batch_seconds(func, calls))
        for label in labels:
            out[label] = {"us_per_set": 1e6 * float(np.median(seconds[label])) / N_SETS, "terms": posts[label][2]}
        kep = np.array(seconds["kepler"])
        out["ratio"] = float(np.median(np.array(seconds["all_terms"]) / kep))
        out["ratio_range"] = [float(x) for x in np.quantile(np.array(seconds["all_terms"]) / kep, [0.25, 0.75])]
        out["ratio_reference"] = float(np.median(np.array(seconds["all_terms_reference"]) / kep))
        space = build_space(read_target(write_target(Path(tmp) / "check", terms=True)))
        post = LogPosterior(space)
        theta = parameter_sets(space, np.random.default_rng(3))
        fused, ref = post.log_likelihood(theta), post.log_likelihood_reference(theta)
        out["max_rel_diff_fused_reference"] = float(np.max(np.abs(fused - ref) / np.abs(ref)))
    out["load_end"] = os.getloadavg()
    return out


def table(res: dict) -> str:
    """The figures of :func:`run` as text (also the section of ``python -m benchmarks``)."""
    lines = [
        f"likelihood of {res['n_sets']} parameter sets x {res['n_epochs']} epochs (a position and a velocity each)",
        f"  kepler                 {res['kepler']['us_per_set']:8.2f} us per set",
        f"  all terms              {res['all_terms']['us_per_set']:8.2f} us per set   "
        f"({', '.join(res['all_terms']['terms'])})",
        f"  all terms, reference   {res['all_terms_reference']['us_per_set']:8.2f} us per set",
        f"  ratio all terms / kepler: {res['ratio']:.2f} (target <= 2; quartiles over {res['rounds']} rounds "
        f"{res['ratio_range'][0]:.2f}-{res['ratio_range'][1]:.2f}); reference path / kepler: "
        f"{res['ratio_reference']:.2f}",
        f"  fused against reference: largest relative difference {res['max_rel_diff_fused_reference']:.1e}",
        "  load average (1, 5, 15 min) at start {:.2f} {:.2f} {:.2f}, at end {:.2f} {:.2f} {:.2f}".format(
            *res["load_start"], *res["load_end"]),
    ]
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats")
    print(table(run(ap.parse_args(argv).quick)))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
