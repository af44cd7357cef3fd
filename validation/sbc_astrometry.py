"""Simulation-based calibration of the astrometry-only fast path.

Same method and statistics as :mod:`validation.sbc` (Talts, Betancourt,
Simpson, Vehtari & Gelman 2018, arXiv:1804.06788): draw a "true" system from
the prior written into the target file, simulate data, fit with default
settings, rank the truth among ``L`` posterior draws. Here the data are sky
positions only, so :mod:`orbitmass.inference.linear` takes the fit; it has
three branches, and each fit records which one ran:

* ``importance``: the three-variable posterior sampled by importance sampling
  about its mode;
* ``mcmc``: the three-variable posterior sampled by the ensemble sampler (when
  the search finds separated modes or the importance weights are poor);
* ``full``: the fast path declined (uneven weights) and every element was
  sampled by the normal path.

Coverage is reported for all fits together and per branch. Unconverged fits are
counted in the coverage, never dropped.

The simulated system (invented numbers), with the priors of every target file:

=====================  =============================================  ===============
quantity               prior                                          drawn as
=====================  =============================================  ===============
total mass             log-uniform 1 to 3 Msun                        exp(U(ln 1, ln 3))
parallax               normal, 50 mas +- 2 mas                        N(50, 2) mas
period                 log-uniform 10 to 60 yr                        exp(U(ln 10, ln 60))
eccentricity           uniform 0 to 0.9                               U(0, 0.9)
inclination            isotropic                                      arccos(U(-1, 1))
omega, Omega           uniform over the circle (defaults)             U(0, 360 deg)
mean anomaly at 2010   uniform over the circle (default)              U(0, 2 pi)
=====================  =============================================  ===============

Data: 20 east/north positions (2 mas errors) at random epochs in 2000-2020,
i.e. a third of an orbit to two orbits, simulated with
:func:`orbitmass.demo.simulate.simulate` (true anomaly and explicit rotations, a
formulation independent of the fitted Thiele-Innes model) plus Gaussian noise.

Run::

    python -m validation.sbc_astrometry --n-fits 200 --out validation/out-astrometry
    python -m validation.sbc_astrometry --quick --out /tmp/sbc-astrometry   # 20 fits, L = 19
"""

from __future__ import annotations

import argparse
import json
import logging
import math
import sys
import tempfile
import textwrap
import time
import warnings
from concurrent.futures import ProcessPoolExecutor
from dataclasses import asdict, dataclass
from multiprocessing import get_context
from pathlib import Path

import numpy as np

from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv
from validation.sbc import COMPANION, format_table, plot_ranks, record_ranks, summarise

__all__ = ["AstrometryDesign", "BRANCHES", "target_toml", "draw_truth", "write_dataset", "fit_one",
           "branch_of", "run_study", "main"]

log = logging.getLogger(__name__)

#: The fast path's branches, as recorded per fit (see module docstring).
BRANCHES = ("importance", "mcmc", "full")


@dataclass(frozen=True)
class AstrometryDesign:
    """The simulated astrometric binary and its observing plan (see module docstring)."""

    mass_msun: tuple[float, float] = (1.0, 3.0)
    parallax_mas: tuple[float, float] = (50.0, 2.0)
    period_yr: tuple[float, float] = (10.0, 60.0)
    ecc_max: float = 0.9
    reference_epoch: float = 2010.0
    t_start: float = 2000.0
    t_end: float = 2020.0
    n_astrometry: int = 20
    pos_err_mas: float = 2.0


def target_toml(design: AstrometryDesign) -> str:
    """Target file text with exactly the priors :func:`draw_truth` draws from."""
    m_lo, m_hi = design.mass_msun
    plx, plx_sd = design.parallax_mas
    p_lo, p_hi = design.period_yr
    return textwrap.dedent(f"""\
        [target]
        name = "SBC astrometric binary"
        reference_epoch = {design.reference_epoch!r}

        [central]
        mass = {{ dist = "log-uniform", low = "{m_lo!r} solMass", high = "{m_hi!r} solMass" }}

        [distance]
        parallax = {{ dist = "normal", mean = "{plx!r} mas", sd = "{plx_sd!r} mas" }}

        [[companion]]
        name = "{COMPANION}"
        astrometry = "positions.csv"
        period = {{ dist = "log-uniform", low = "{p_lo!r} yr", high = "{p_hi!r} yr" }}
        eccentricity = {{ dist = "uniform", low = 0, high = {design.ecc_max!r} }}
        inclination = {{ dist = "isotropic" }}
        """)


def draw_truth(design: AstrometryDesign, rng: np.random.Generator) -> TrueOrbit:
    """One parameter set from the prior of :func:`target_toml`.

    The parallax is normal truncated to positive values (the prior the fit
    samples); with 50 +- 2 mas the truncation never acts.
    """
    mass = math.exp(rng.uniform(math.log(design.mass_msun[0]), math.log(design.mass_msun[1])))
    parallax = -1.0
    while parallax <= 0.0:
        parallax = rng.normal(*design.parallax_mas)
    period = math.exp(rng.uniform(math.log(design.period_yr[0]), math.log(design.period_yr[1])))
    ecc = rng.uniform(0.0, design.ecc_max)
    inc_deg = math.degrees(math.acos(rng.uniform(-1.0, 1.0)))
    omega_deg, node_deg = rng.uniform(0.0, 360.0, 2)
    mean_anomaly = rng.uniform(0.0, 2.0 * math.pi)
    t_peri = design.reference_epoch - mean_anomaly / (2.0 * math.pi) * period
    return TrueOrbit(mass_msun=float(mass), distance_pc=float(1000.0 / parallax), period_yr=float(period),
                     eccentricity=float(ecc), inclination_deg=float(inc_deg),
                     arg_periastron_deg=float(omega_deg), ascending_node_deg=float(node_deg),
                     periastron_time=float(t_peri))


def write_dataset(folder: Path, design: AstrometryDesign, truth: TrueOrbit, rng: np.random.Generator) -> Path:
    """Write the target file and a noisy simulated position table; returns the target path."""
    folder.mkdir(parents=True, exist_ok=True)
    t_pos = np.sort(rng.uniform(design.t_start, design.t_end, design.n_astrometry))
    sky = simulate(truth, t_pos)
    noise = rng.normal(0.0, design.pos_err_mas, (2, design.n_astrometry))
    write_positions_csv(folder / "positions.csv", t_pos, sky["east_mas"] + noise[0],
                        sky["north_mas"] + noise[1], design.pos_err_mas,
                        comment="simulated for simulation-based calibration of the fast path")
    path = folder / "target.toml"
    path.write_text(target_toml(design), encoding="utf-8")
    return path


def branch_of(diagnostics: dict) -> str:
    """Which branch ran, from ``summary.json['diagnostics']`` (see :data:`BRANCHES`)."""
    lin = diagnostics.get("linear_path")
    if not lin:
        return "full"
    return "importance" if str(lin.get("sampler_3d", "")).startswith("importance") else "mcmc"


def fit_one(task: dict) -> dict:
    """Simulate, fit (default settings) and rank one replicate; as :func:`validation.sbc.fit_one`."""
    from orbitmass.exceptions import DegeneracyWarning, OrbitmassError
    from orbitmass.fit import Fit

    design = AstrometryDesign(**{k: tuple(v) if isinstance(v, list) else v for k, v in task["design"].items()})
    rng = np.random.default_rng([task["seed"], task["index"]])
    truth = draw_truth(design, rng)
    path = write_dataset(Path(task["folder"]), design, truth, rng)
    fit_seed = int(rng.integers(2**31 - 1))
    record: dict = {"index": task["index"], "truth": asdict(truth), "fit_seed": fit_seed}
    t0 = time.perf_counter()
    try:
        with warnings.catch_warnings():  # the expected half-turn node warning of astrometry-only fits
            warnings.simplefilter("ignore", DegeneracyWarning)
            fit = Fit(seed=fit_seed, progress=False).fit(path)
    except OrbitmassError as exc:
        record["error"] = str(exc)
        return record
    record_ranks(record, fit.results_, truth, rng, task["n_draws"])
    record["branch"] = branch_of(fit.results_.summary["diagnostics"])
    record["wall_seconds"] = time.perf_counter() - t0
    return record


def run_study(n_fits: int, *, seed: int = 1, n_draws: int = 99, workers: int = 2,
              design: AstrometryDesign | None = None, records_path: Path | None = None) -> dict:
    """Run ``n_fits`` replicates; summary over all fits and per branch.

    With ``records_path``, every finished replicate is also appended to that
    file as one JSON line, so that an interrupted study keeps what it measured.
    """
    design = design or AstrometryDesign()
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="orbitmass-sbc-astrometry-") as tmp:
        tasks = [{"index": k, "seed": seed, "n_draws": n_draws, "folder": str(Path(tmp) / f"fit{k:04d}"),
                  "design": asdict(design)} for k in range(n_fits)]
        records: list[dict] = []

        def keep(record: dict) -> None:
            records.append(record)
            log.info("%d/%d fits done (%.0f s)", len(records), n_fits, time.perf_counter() - t0)
            if records_path is not None:
                with open(records_path, "a", encoding="utf-8") as fh:
                    fh.write(json.dumps(record, default=float) + "\n")

        if workers <= 1:
            for task in tasks:
                keep(fit_one(task))
        else:
            with ProcessPoolExecutor(max_workers=workers, mp_context=get_context("spawn")) as pool:
                for record in pool.map(fit_one, tasks):
                    keep(record)
    from orbitmass import __version__

    by_branch = {b: summarise([r for r in records if r.get("branch") == b], n_draws) for b in BRANCHES
                 if any(r.get("branch") == b for r in records)}
    n_conv = sum(1 for r in records if (r.get("diagnostics") or {}).get("converged"))
    return {"settings": {"orbitmass_version": __version__, "n_fits": n_fits, "seed": seed, "n_draws": n_draws,
                         "workers": workers, "design": asdict(design), "max_steps": "default",
                         "method": "Talts et al. (2018), arXiv:1804.06788"},
            "wall_seconds": time.perf_counter() - t0,
            "n_failed": sum(1 for r in records if "error" in r), "n_converged": n_conv,
            "n_by_branch": {b: sum(1 for r in records if r.get("branch") == b) for b in BRANCHES},
            "converged_by_branch": {b: sum(1 for r in records if r.get("branch") == b
                                           and (r.get("diagnostics") or {}).get("converged")) for b in BRANCHES},
            "records": records, "results": summarise(records, n_draws), "results_by_branch": by_branch}


def main(argv: list[str] | None = None) -> int:
    """Command line of the fast-path SBC study (see module docstring)."""
    parser = argparse.ArgumentParser(prog="python -m validation.sbc_astrometry",
                                     description=__doc__.split("\n")[0])
    parser.add_argument("--n-fits", type=int, default=200, help="simulated datasets (default 200)")
    parser.add_argument("--draws", type=int, default=None, help="posterior draws L (default 99; 19 with --quick)")
    parser.add_argument("--seed", type=int, default=1, help="base seed (default 1)")
    parser.add_argument("--workers", type=int, default=2, help="parallel processes (default 2)")
    parser.add_argument("--out", default="validation/out-astrometry", help="folder for sbc.json and figures")
    parser.add_argument("--quick", action="store_true", help="20 fits, L = 19")
    parser.add_argument("--period-range", nargs=2, type=float, metavar=("LOW", "HIGH"), default=None,
                        help="bounds (yr) of the log-uniform period prior (default 10 60; longer periods "
                             "give partial arcs, where the three-variable chain runs more often)")
    args = parser.parse_args(argv)
    n_fits = 20 if args.quick and args.n_fits == 200 else args.n_fits
    n_draws = args.draws or (19 if args.quick else 99)
    if n_fits < 1 or n_draws < 1 or args.workers < 1:
        parser.error("--n-fits, --draws and --workers must be positive")
    logging.basicConfig(level=logging.WARNING, format="%(asctime)s %(message)s")
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    design = AstrometryDesign()
    if args.period_range is not None:
        low, high = args.period_range
        if not 0 < low < high:
            parser.error("--period-range needs 0 < LOW < HIGH")
        design = AstrometryDesign(period_yr=(low, high))
    log.setLevel(logging.INFO)
    records_path = out / "records.jsonl"
    records_path.unlink(missing_ok=True)  # this script's own file of the previous study in OUT
    result = run_study(n_fits, seed=args.seed, n_draws=n_draws, workers=args.workers, design=design,
                       records_path=records_path)
    from orbitmass.outputs.style import write_atomic

    write_atomic(out / "sbc.json", json.dumps(result, indent=1, default=float) + "\n")
    plot_ranks(result, out / "sbc_ranks")
    lines = [format_table(result)]
    for branch, res in result["results_by_branch"].items():
        lines.append(format_table({**result, "results": res, "settings": {**result["settings"],
                                   "n_fits": result["n_by_branch"][branch]},
                                   "n_converged": result["converged_by_branch"][branch]})
                     .replace("SBC:", f"SBC, {branch} branch:", 1))
    sys.stdout.write("\n\n".join(lines) + "\n")
    sys.stdout.write(f"written: {out / 'sbc.json'}, {out / 'sbc_ranks.png'}\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
