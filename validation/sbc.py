"""Simulation-based calibration (SBC) of orbitmass fits.

Method: Talts, Betancourt, Simpson, Vehtari & Gelman (2018), "Validating
Bayesian inference algorithms with simulation-based calibration",
arXiv:1804.06788. For each simulation a "true" parameter set is drawn from
the prior, a dataset is drawn from the model given it, and the posterior is
sampled. If the sampler and the likelihood are right, the rank of the true
value among ``L`` independent posterior draws is uniform on ``0 .. L`` (their
Theorem 1), and the central 68 % and 95 % credible intervals contain the
truth in 68 % and 95 % of the simulations.

The simulated system is a visual binary observed in astrometry and
line-of-sight velocities (invented numbers), with proper, fairly narrow
priors so the data are informative and the fits are fast:

=====================  =============================================  ============
quantity               prior (written into every target file)         drawn as
=====================  =============================================  ============
total mass             log-uniform 1 to 3 Msun                        exp(U(ln 1, ln 3))
distance               normal, mean 20 pc, sd 1 pc                    N(20, 1)
period                 log-uniform 8 to 16 yr                         exp(U(ln 8, ln 16))
eccentricity           uniform 0 to 0.8                               U(0, 0.8)
inclination            isotropic                                      arccos(U(-1, 1))
omega, Omega           uniform over the circle (defaults)             U(0, 360 deg)
mean anomaly at 2010   uniform over the circle (default)              U(0, 2 pi)
=====================  =============================================  ============

Data: 16 positions (east, north; 3 mas errors) and 10 velocities (1 km/s
errors) at random epochs over 2000-2020, i.e. 1.25 to 2.5 orbits, simulated
with :func:`orbitmass.demo.simulate.simulate` (true anomaly and explicit rotations,
a formulation independent of the fitted Thiele-Innes model) plus Gaussian
noise of the stated errors.

For total mass, distance and period the script records the rank of the truth
among ``L`` posterior draws picked at random from the retained (already
thinned) samples, and whether the truth lies inside the central 68 %
(``q16``-``q84``) and 95 % (``q2.5``-``q97.5``) intervals of the summary.
Coverage error bars are binomial, ``sqrt(p (1 - p) / n)``. Rank uniformity is
tested with a chi-square over equal-width rank bins.

Configurations (``--config``; the priors of each are written into every
target file exactly as drawn):

* ``binary`` (default): the system above.
* ``arc``: a partial arc, 20 positions (1 mas) and 6 velocities (0.5 km/s)
  over 2000-2015 of orbits with a log-uniform period of 100 to 300 yr (5 to
  15 % of the orbit), eccentricity uniform 0 to 0.8; mass and distance as
  above. Fits of it are sampled in the reference state
  (:class:`orbitmass.model.parameters.ReferenceState`).
* ``disk``: two clumps on circular orbits (e fixed at 0) in one plane
  (``plane = "disk"``: shared isotropic inclination and uniform node), each
  with 10 positions (0.05 mas) and 10 velocities (5 km/s) over 2010-2022;
  mass log-uniform 1e6 to 1e7 Msun, distance normal 8000 +- 400 pc, periods
  log-uniform 200 to 600 yr; the first clump's period is ranked.

Unconverged fits are counted in the coverage (not dropped) and reported as
``n_unconverged``; a fit that raises counts as a miss.

Run::

    python -m validation.sbc --n-fits 200 --out validation/out      # full (~20 min, 2 cores)
    python -m validation.sbc --config arc --n-fits 100 --out validation/out/sbc_arc
    python -m validation.sbc --quick --out /tmp/sbc                 # 20 fits, L = 19

It writes ``sbc.json`` (settings, per-fit records, per-quantity results) and
``sbc_ranks.png`` / ``sbc_ranks.pdf`` (rank histograms) into ``--out``,
replacing an earlier result of this script there, and prints a table.
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
from concurrent.futures import ProcessPoolExecutor
from dataclasses import asdict, dataclass
from multiprocessing import get_context
from pathlib import Path

import numpy as np
from scipy import stats

from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv

__all__ = ["Design", "CONFIGS", "QUANTITIES", "target_toml", "draw_truth", "draw_truths", "clump_names",
           "write_dataset", "rank_of",
           "record_ranks", "fit_one", "summarise", "run_sbc", "plot_ranks", "format_table", "main"]

log = logging.getLogger(__name__)

#: Companion name used in the simulated targets.
COMPANION = "B"

#: quantity -> (column of the posterior samples, attribute of TrueOrbit, label, unit)
QUANTITIES: dict[str, tuple[str, str, str, str]] = {
    "mass_msun": ("mass_msun", "mass_msun", "total mass $M$", r"M$_\odot$"),
    "distance_pc": ("distance_pc", "distance_pc", "distance $D$", "pc"),
    "period_yr": (f"{COMPANION}.period_yr", "period_yr", "period $P$", "yr"),
}

#: Nominal probabilities of the central intervals checked, with their summary keys.
INTERVALS: dict[str, tuple[float, str, str]] = {
    "68": (0.6826894921370859, "q16", "q84"),  # central 1-sigma mass of a Gaussian, erf(1/sqrt 2)
    "95": (0.95, "q2.5", "q97.5"),
}


@dataclass(frozen=True)
class Design:
    """The simulated system and observing plan (see module docstring).

    Attributes
    ----------
    mass_msun : (float, float)
        Bounds of the log-uniform total-mass prior (Msun).
    distance_pc : (float, float)
        Mean and sd of the normal distance prior (pc).
    period_yr : (float, float)
        Bounds of the log-uniform period prior (yr).
    ecc_max : float
        Upper bound of the uniform eccentricity prior.
    reference_epoch : float
        Julian year at which the mean anomaly is counted.
    t_start, t_end : float
        Observing window (Julian years).
    n_astrometry, n_velocities : int
        Number of position and velocity epochs.
    pos_err_mas, rv_err_kms : float
        Gaussian noise of each coordinate (mas) and each velocity (km/s).
    """

    mass_msun: tuple[float, float] = (1.0, 3.0)
    distance_pc: tuple[float, float] = (20.0, 1.0)
    period_yr: tuple[float, float] = (8.0, 16.0)
    ecc_max: float = 0.8
    reference_epoch: float = 2010.0
    t_start: float = 2000.0
    t_end: float = 2020.0
    n_astrometry: int = 16
    n_velocities: int = 10
    pos_err_mas: float = 3.0
    rv_err_kms: float = 1.0
    config: str = "binary"
    n_clumps: int = 1


#: The configurations of ``--config`` (see the module docstring).
CONFIGS: dict[str, Design] = {
    "binary": Design(),
    # partial arcs: 15 yr of 100-300 yr orbits (5-15 % of the orbit), positions and a few velocities
    "arc": Design(config="arc", period_yr=(100.0, 300.0), ecc_max=0.8, reference_epoch=2007.5,
                  t_start=2000.0, t_end=2015.0, n_astrometry=20, n_velocities=6, pos_err_mas=1.0,
                  rv_err_kms=0.5),
    # a disk: two clumps on circular orbits in one plane, 12 yr of 200-600 yr orbits
    "disk": Design(config="disk", mass_msun=(1.0e6, 1.0e7), distance_pc=(8000.0, 400.0),
                   period_yr=(200.0, 600.0), reference_epoch=2016.0, t_start=2010.0, t_end=2022.0,
                   n_astrometry=10, n_velocities=10, pos_err_mas=0.05, rv_err_kms=5.0, n_clumps=2),
}


def clump_names(design: Design) -> list[str]:
    """Companion names of the design: ``B`` first (the one whose period is ranked), then ``C``, ``D``, ..."""
    return [chr(ord(COMPANION) + k) for k in range(max(design.n_clumps, 1))]


def target_toml(design: Design) -> str:
    """Target file text with exactly the priors :func:`draw_truth` draws from."""
    m_lo, m_hi = design.mass_msun
    d_mean, d_sd = design.distance_pc
    p_lo, p_hi = design.period_yr
    head = textwrap.dedent(f"""\
        [target]
        name = "SBC {design.config}"
        reference_epoch = {design.reference_epoch!r}

        [central]
        mass = {{ dist = "log-uniform", low = "{m_lo!r} solMass", high = "{m_hi!r} solMass" }}

        [distance]
        prior = {{ dist = "normal", mean = "{d_mean!r} pc", sd = "{d_sd!r} pc" }}
        """)
    if design.config == "disk":
        blocks = [textwrap.dedent(f"""\
            [[companion]]
            name = "{name}"
            plane = "disk"
            astrometry = "positions_{name}.csv"
            velocities = "velocities_{name}.csv"
            period = {{ dist = "log-uniform", low = "{p_lo!r} yr", high = "{p_hi!r} yr" }}
            eccentricity = {{ dist = "fixed", value = 0 }}
            inclination = {{ dist = "isotropic" }}
            """) for name in clump_names(design)]
        return head + "\n" + "\n".join(blocks)
    return head + "\n" + textwrap.dedent(f"""\
        [[companion]]
        name = "{COMPANION}"
        astrometry = "positions.csv"
        velocities = "velocities.csv"
        period = {{ dist = "log-uniform", low = "{p_lo!r} yr", high = "{p_hi!r} yr" }}
        eccentricity = {{ dist = "uniform", low = 0, high = {design.ecc_max!r} }}
        inclination = {{ dist = "isotropic" }}
        """)


def draw_truth(design: Design, rng: np.random.Generator) -> TrueOrbit:
    """One parameter set from the prior of :func:`target_toml` (the first companion of :func:`draw_truths`)."""
    return draw_truths(design, rng)[0]


def draw_truths(design: Design, rng: np.random.Generator) -> list[TrueOrbit]:
    """Parameter sets of every companion from the prior of :func:`target_toml`.

    Log-uniform: ``exp(U(ln lo, ln hi))``; isotropic inclination:
    ``arccos(U(-1, 1))``; angles and the mean anomaly at the reference epoch
    uniform over the circle (the target's default priors). In the disk
    configuration the clumps share mass, distance, inclination and node (one
    draw), each has its own period and mean anomaly, and e = 0 (then omega is
    0 and the mean anomaly is the argument of latitude).
    """
    mass = math.exp(rng.uniform(math.log(design.mass_msun[0]), math.log(design.mass_msun[1])))
    distance = rng.normal(*design.distance_pc)
    out = []
    inc_deg = node_deg = None
    for _ in clump_names(design):
        period = math.exp(rng.uniform(math.log(design.period_yr[0]), math.log(design.period_yr[1])))
        if design.config == "disk":
            ecc, omega_deg = 0.0, 0.0
            if inc_deg is None:
                inc_deg = math.degrees(math.acos(rng.uniform(-1.0, 1.0)))
                node_deg = float(rng.uniform(0.0, 360.0))
        else:
            ecc = rng.uniform(0.0, design.ecc_max)
            inc_deg = math.degrees(math.acos(rng.uniform(-1.0, 1.0)))
            omega_deg, node_deg = rng.uniform(0.0, 360.0, 2)
        mean_anomaly = rng.uniform(0.0, 2.0 * math.pi)
        t_peri = design.reference_epoch - mean_anomaly / (2.0 * math.pi) * period
        out.append(TrueOrbit(mass_msun=float(mass), distance_pc=float(distance), period_yr=float(period),
                             eccentricity=float(ecc), inclination_deg=float(inc_deg),
                             arg_periastron_deg=float(omega_deg), ascending_node_deg=float(node_deg),
                             periastron_time=float(t_peri)))
    return out


def write_dataset(folder: Path, design: Design, truth, rng: np.random.Generator) -> Path:
    """Write a target file and noisy simulated tables for ``truth`` (a TrueOrbit, or a list of one per
    companion); returns the target path."""
    folder.mkdir(parents=True, exist_ok=True)
    truths = truth if isinstance(truth, list) else [truth]
    for name, one in zip(clump_names(design), truths):
        suffix = f"_{name}" if design.config == "disk" else ""
        t_pos = np.sort(rng.uniform(design.t_start, design.t_end, design.n_astrometry))
        t_rv = np.sort(rng.uniform(design.t_start, design.t_end, design.n_velocities))
        sky = simulate(one, t_pos)
        noise = rng.normal(0.0, design.pos_err_mas, (2, design.n_astrometry))
        write_positions_csv(folder / f"positions{suffix}.csv", t_pos, sky["east_mas"] + noise[0],
                            sky["north_mas"] + noise[1], design.pos_err_mas,
                            comment="simulated for simulation-based calibration")
        rv = simulate(one, t_rv)["rv_companion_kms"] + rng.normal(0.0, design.rv_err_kms,
                                                                     design.n_velocities)
        write_velocities_csv(folder / f"velocities{suffix}.csv", t_rv, rv, design.rv_err_kms,
                             comment="simulated for simulation-based calibration")
    path = folder / "target.toml"
    path.write_text(target_toml(design), encoding="utf-8")
    return path


def rank_of(truth: float, draws: np.ndarray) -> int:
    """Number of ``draws`` below ``truth`` (0 .. len(draws)), Talts et al. (2018), Alg. 1."""
    return int(np.count_nonzero(np.asarray(draws) < truth))


def record_ranks(record: dict, results, truth, rng: np.random.Generator, n_draws: int) -> None:
    """Put into ``record`` the rank of each truth among ``n_draws`` random posterior draws
    (Talts et al. 2018, Alg. 1), its summary quantiles, and the fit's convergence diagnostics."""
    samples, summary = results.samples, results.summary
    pick = rng.choice(len(samples), size=n_draws, replace=len(samples) < n_draws)
    for key, (column, attr, _, _) in QUANTITIES.items():
        block = (summary["companions"][COMPANION][column.split(".", 1)[1]] if "." in column
                 else summary["derived"][column])
        record[key] = {"rank": rank_of(getattr(truth, attr), samples[column].to_numpy()[pick]),
                       **{k: float(v) for k, v in block.items()}}
    diag = summary["diagnostics"]
    record["diagnostics"] = {k: diag.get(k) for k in ("converged", "n_steps", "tau_max", "ess_min",
                                                       "rhat_max", "n_samples")}


def fit_one(task: dict) -> dict:
    """Simulate, fit and rank one SBC replicate.

    Parameters
    ----------
    task : dict
        ``index``, ``seed`` (base seed), ``n_draws`` (L), ``max_steps``,
        ``folder`` (where the replicate's files go) and ``design`` (a dict of
        :class:`Design` fields).

    Returns
    -------
    dict
        ``index``, ``truth`` (TrueOrbit fields), per quantity the ``rank``
        and the summary quantiles, the fit's convergence diagnostics and its
        wall time (s); or ``error`` with the message if the fit raised an
        orbitmass error.
    """
    from orbitmass.exceptions import OrbitmassError
    from orbitmass.fit import Fit

    design = Design(**{k: tuple(v) if isinstance(v, list) else v for k, v in task["design"].items()})
    rng = np.random.default_rng([task["seed"], task["index"]])
    truths = draw_truths(design, rng)
    truth = truths[0]
    path = write_dataset(Path(task["folder"]), design, truths, rng)
    fit_seed = int(rng.integers(2**31 - 1))
    record: dict = {"index": task["index"], "truth": asdict(truth), "fit_seed": fit_seed}
    t0 = time.perf_counter()
    try:
        fit = Fit(seed=fit_seed, max_steps=task["max_steps"], progress=False).fit(path)
    except OrbitmassError as exc:
        record["error"] = str(exc)
        return record
    record_ranks(record, fit.results_, truth, rng, task["n_draws"])
    diag = fit.results_.summary["diagnostics"]
    record["diagnostics"]["reference_state"] = diag.get("reference_state", {}).get("companions", [])
    record["wall_seconds"] = time.perf_counter() - t0
    return record


def _bins(n_draws: int, n_fits: int) -> int:
    """Equal-width rank bins for the chi-square: a divisor of L + 1, >= ~5 expected per bin."""
    n_values = n_draws + 1
    best = 1
    for b in range(1, n_values + 1):
        if n_values % b == 0 and n_fits / b >= 5.0:
            best = b
    return best


def summarise(records: list[dict], n_draws: int) -> dict:
    """Coverage with binomial errors and rank-uniformity statistics per quantity.

    Returns
    -------
    dict
        Per quantity: ``n``; ``coverage68``, ``coverage68_err``, ``coverage95``,
        ``coverage95_err`` (error ``sqrt(p (1 - p) / n)`` of the measured
        fraction ``p``); ``z68``, ``z95`` (offset from the nominal probability
        in binomial sigmas of the nominal, ``sqrt(p0 (1 - p0) / n)``);
        ``ranks``; ``bin_counts`` over ``n_bins`` equal rank bins;
        ``chi2``, ``dof`` and ``p_uniform`` (chi-square test of equal counts).
    """
    ok = [r for r in records if "error" not in r]
    out: dict = {}
    for key, (_, attr, _, _) in QUANTITIES.items():
        # every fit counts, converged or not; a fit that raised counts as a miss (no interval)
        n = len(records)
        unconverged = sum(1 for r in ok if not r.get("diagnostics", {}).get("converged", True))
        res: dict = {"n": n, "n_unconverged": unconverged}
        for name, (p0, lo, hi) in INTERVALS.items():
            inside = [("error" not in r) and r[key][lo] <= r["truth"][attr] <= r[key][hi] for r in records]
            p = float(np.mean(inside)) if n else float("nan")
            res[f"coverage{name}"] = p
            res[f"coverage{name}_err"] = math.sqrt(p * (1 - p) / n) if n else float("nan")
            res[f"z{name}"] = (p - p0) / math.sqrt(p0 * (1 - p0) / n) if n else float("nan")
        ranks = np.array([r[key]["rank"] for r in ok], dtype=int)
        n_bins = _bins(n_draws, n)
        counts = np.bincount(ranks * n_bins // (n_draws + 1), minlength=n_bins)
        if n and n_bins > 1:
            chi2, p_uniform = stats.chisquare(counts)
        else:
            chi2, p_uniform = float("nan"), float("nan")
        res.update(ranks=ranks.tolist(), n_bins=n_bins, bin_counts=counts.tolist(),
                   chi2=float(chi2), dof=n_bins - 1, p_uniform=float(p_uniform))
        out[key] = res
    return out


def run_sbc(n_fits: int, *, seed: int = 1, n_draws: int = 99, max_steps: int = 20000,
            workers: int = 2, design: Design | None = None,
            work_dir: str | Path | None = None) -> dict:
    """Run ``n_fits`` SBC replicates and summarise them.

    Parameters
    ----------
    n_fits : int
        Number of simulated datasets.
    seed : int
        Base seed; replicate ``k`` uses ``numpy.random.default_rng([seed, k])``.
    n_draws : int
        ``L``, posterior draws per replicate the truth is ranked among.
    max_steps : int
        Step cap of each fit.
    workers : int
        Parallel processes (1: in this process).
    design : Design, optional
        The simulated system (default :class:`Design`).
    work_dir : path, optional
        Keep the replicates' files here (default: a temporary folder, removed).

    Returns
    -------
    dict
        ``settings``, ``wall_seconds``, ``n_failed``, ``records`` and
        ``results`` (:func:`summarise`).
    """
    design = design or Design()
    t0 = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="orbitmass-sbc-") as tmp:
        base = Path(work_dir) if work_dir is not None else Path(tmp)
        tasks = [{"index": k, "seed": seed, "n_draws": n_draws, "max_steps": max_steps,
                  "folder": str(base / f"fit{k:04d}"), "design": asdict(design)}
                 for k in range(n_fits)]
        records = []
        if workers <= 1:
            for task in tasks:
                records.append(fit_one(task))
                _log_progress(records[-1], len(records), n_fits, t0)
        else:
            with ProcessPoolExecutor(max_workers=workers, mp_context=get_context("spawn")) as pool:
                for record in pool.map(fit_one, tasks):
                    records.append(record)
                    _log_progress(record, len(records), n_fits, t0)
    wall = time.perf_counter() - t0
    from orbitmass import __version__

    settings = {"orbitmass_version": __version__, "n_fits": n_fits, "seed": seed,
                "n_draws": n_draws, "max_steps": max_steps,
                "workers": workers, "design": asdict(design),
                "method": "Talts et al. (2018), arXiv:1804.06788"}
    n_conv = sum(1 for r in records if r.get("diagnostics", {}).get("converged"))
    return {"settings": settings, "wall_seconds": wall,
            "n_failed": sum(1 for r in records if "error" in r), "n_converged": n_conv,
            "records": records, "results": summarise(records, n_draws)}


def _log_progress(record: dict, done: int, total: int, t0: float) -> None:
    if "error" in record:
        log.warning("fit %d failed: %s", record["index"], record["error"])
    log.info("%d/%d fits done (%.0f s)", done, total, time.perf_counter() - t0)


def plot_ranks(result: dict, path_without_suffix: str | Path) -> list[Path]:
    """Rank histograms of mass, distance and period, with the 99 % band of uniform ranks.

    The grey band is the 0.5-99.5 % range of a bin count under uniform ranks,
    ``Binomial(n, 1 / n_bins)`` (as in Talts et al. 2018, Fig. 1). Written as
    PNG and PDF with :func:`orbitmass.outputs.style.save_figure`.
    """
    from matplotlib.figure import Figure

    from orbitmass.outputs.style import PALETTE, figure_size, save_figure, style_context

    n_draws = result["settings"]["n_draws"]
    with style_context():
        fig = Figure(figsize=figure_size(2, 0.36))
        axes = fig.subplots(1, len(QUANTITIES), sharey=True)
        top = 0.0
        for ax, (key, (_, _, label, unit)) in zip(axes, QUANTITIES.items(), strict=True):
            res = result["results"][key]
            n, n_bins = res["n"], res["n_bins"]
            edges = np.linspace(0, n_draws + 1, n_bins + 1)
            lo, hi = stats.binom.ppf([0.005, 0.995], n, 1.0 / n_bins)
            ax.axhspan(lo, hi, color="0.82", lw=0, zorder=0, label="99 % range if uniform")
            ax.stairs(res["bin_counts"], edges, fill=True, color=PALETTE["blue"], alpha=0.6,
                      zorder=1, label="simulations")
            ax.stairs(res["bin_counts"], edges, color=PALETTE["blue"], lw=1.0, zorder=2)
            ax.axhline(n / n_bins, color=PALETTE["black"], lw=0.8, ls="--", zorder=3,
                       label="expected")
            ax.set_xlim(0, n_draws + 1)
            top = max(top, hi, max(res["bin_counts"]))
            ax.set_xlabel(f"rank of the truth (0-{n_draws})")
            ax.set_title(
                f"{label} ({unit})\n68 %: {res['coverage68']:.2f} ± {res['coverage68_err']:.2f}, "
                f"95 %: {res['coverage95']:.2f} ± {res['coverage95_err']:.2f}", fontsize=7)
        axes[0].set_ylabel(f"simulations per bin (of {result['results']['mass_msun']['n']})")
        axes[0].set_ylim(0, top * 1.1)  # shared by all panels
        handles, labels = axes[0].get_legend_handles_labels()
        fig.legend(handles, labels, loc="lower center", ncol=3, fontsize=7, frameon=False)
        fig.tight_layout(rect=(0, 0.07, 1, 1))
        return save_figure(fig, path_without_suffix)


def format_table(result: dict) -> str:
    """A plain-text table of coverage and rank uniformity per quantity."""
    rows = [f"SBC: {result['settings']['n_fits']} fits, L = {result['settings']['n_draws']} "
            f"draws, {result['n_failed']} failed, {result['n_converged']} converged, "
            f"{result['wall_seconds']:.0f} s wall",
            f"{'quantity':<12} {'68% coverage':>16} {'95% coverage':>16} {'chi2/dof':>10} "
            f"{'p(uniform)':>10}"]
    for key, res in result["results"].items():
        rows.append(f"{key:<12} {res['coverage68']:>9.3f} ± {res['coverage68_err']:.3f} "
                    f"{res['coverage95']:>9.3f} ± {res['coverage95_err']:.3f} "
                    f"{res['chi2']:>6.1f}/{res['dof']:<3d} {res['p_uniform']:>10.3f}")
    rows.append("nominal: 68% interval 0.683, 95% interval 0.950; errors sqrt(p(1-p)/n); unconverged fits "
                "counted (" + ", ".join(f"{k} {v['n_unconverged']}" for k, v in result["results"].items()) + ")")
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    """Command line of the SBC study (see module docstring)."""
    parser = argparse.ArgumentParser(prog="python -m validation.sbc", description=__doc__.split("\n")[0])
    parser.add_argument("--n-fits", type=int, default=200, help="simulated datasets (default 200)")
    parser.add_argument("--draws", type=int, default=None,
                        help="posterior draws L the truth is ranked among (default 99; 19 with --quick)")
    parser.add_argument("--max-steps", type=int, default=None,
                        help="step cap of each fit (default 20000; 3000 with --quick)")
    parser.add_argument("--seed", type=int, default=1, help="base seed (default 1)")
    parser.add_argument("--workers", type=int, default=2, help="parallel processes (default 2)")
    parser.add_argument("--out", default="validation/out", help="folder for sbc.json and figures")
    parser.add_argument("--keep", action="store_true", help="keep each replicate's files in OUT/fits")
    parser.add_argument("--quick", action="store_true", help="20 fits, L = 19, 3000 steps")
    parser.add_argument("--config", choices=sorted(CONFIGS), default="binary",
                        help="simulated system: binary (default), arc (5-15 %% of the orbit) or disk "
                             "(two clumps on circular orbits in one plane)")
    args = parser.parse_args(argv)
    if args.quick:
        n_fits = 20 if args.n_fits == 200 else args.n_fits
        n_draws, max_steps = args.draws or 19, args.max_steps or 3000
    else:
        n_fits, n_draws, max_steps = args.n_fits, args.draws or 99, args.max_steps or 20000
    if n_fits < 1 or n_draws < 1 or max_steps < 1 or args.workers < 1:
        parser.error("--n-fits, --draws, --max-steps and --workers must be positive")
    logging.basicConfig(level=logging.WARNING, format="%(asctime)s %(message)s")
    log.setLevel(logging.INFO)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    result = run_sbc(n_fits, seed=args.seed, n_draws=n_draws, max_steps=max_steps,
                     workers=args.workers, design=CONFIGS[args.config],
                     work_dir=out / "fits" if args.keep else None)
    from orbitmass.outputs.style import write_atomic

    write_atomic(out / "sbc.json", json.dumps(result, indent=1, default=float) + "\n")
    plot_ranks(result, out / "sbc_ranks")
    sys.stdout.write(format_table(result) + "\n")
    sys.stdout.write(f"written: {out / 'sbc.json'}, {out / 'sbc_ranks.png'}, {out / 'sbc_ranks.pdf'}\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
