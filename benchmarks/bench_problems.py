"""Three reference fits: orbitmass against a plain emcee baseline; a profile of one fit.

Reference problems (invented systems, data simulated with
:mod:`orbitmass.demo.simulate` from a fixed seed, written to a temporary folder):

``covered``
    A star around an invented dark mass, astrometry over about two periods and
    line-of-sight velocities, distance free (wide uniform prior): the orbit
    itself fixes the distance (orbital parallax).
``astrometry``
    A visual binary, relative astrometry only, with a 1 % parallax prior.
``partial_arc``
    Astrometry and velocities over a quarter of the period (periastron inside
    the arc), distance with a 3 % prior.

For each, side by side in one run:

* orbitmass: ``Fit(seed=..., progress=False).fit(target)``; its wall time
  (read, initialise, sample to convergence) from ``summary["diagnostics"]``,
  the effective sample size of the mass it reports, and the same ESS computed
  with ``emcee.autocorr.integrated_time`` on its retained chain;
* the baseline a careful user would write in an afternoon
  (:class:`BaselinePosterior`, :func:`run_baseline`): emcee's
  ``EnsembleSampler`` with its default stretch move, all elements sampled
  directly (ln mass, distance or parallax, ln period, e, cos i, omega, Omega,
  mean anomaly at the reference epoch), a scalar log-posterior written plainly
  with numpy per walker (its own Newton solver of Kepler's equation), walkers
  started in a tiny ball at the true values, run until emcee's
  autocorrelation estimate says the chain is longer than 50 tau for every
  parameter, or a step cap.

Figures: wall time to a converged posterior, ESS of the mass, ESS per second,
likelihood evaluations per effective sample, and the ratio orbitmass /
baseline of ESS per second (both with emcee's estimator). orbitmass's wall
time counts everything from reading the target to the summary, the
initialisation included; the initialisation is split into its stages
(``search``: the period grid, ``polish``: the optimiser, ``walkers``: the
Hessian and the walker draws), timed in the same run (:func:`_stage_clock`).
Usage::

    python benchmarks/bench_problems.py [--quick]
"""

from __future__ import annotations

import argparse
import contextlib
import cProfile
import io
import logging
import math
import pstats
import tempfile
import textwrap
import time
from dataclasses import dataclass, field
from pathlib import Path

import emcee
import numpy as np

from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv
from orbitmass.units import GM_SUN_AU3_PER_YR2, KMS_PER_AU_PER_YR

__all__ = [
    "PROBLEMS",
    "Problem",
    "CompanionData",
    "write_target",
    "make_problem",
    "write_problem",
    "BaselinePosterior",
    "baseline_to_theta",
    "run_baseline",
    "run_orbitmass",
    "profile_fit",
    "run",
]

log = logging.getLogger(__name__)

TWO_PI = 2.0 * math.pi
DATA_SEED = 4040


@dataclass
class CompanionData:
    """One simulated companion: its true orbit and the epochs of its tables (Julian years)."""

    name: str
    truth: TrueOrbit
    t_pos: np.ndarray | None = None
    t_rv: np.ndarray | None = None
    pos_err_mas: float = 0.1
    rv_err_kms: float = 10.0


@dataclass
class Problem:
    """A simulated target written to disk, with what the baseline needs to read it."""

    name: str
    title: str
    target: Path
    reference_epoch: float
    companions: list[CompanionData]
    distance_mode: str  # "distance-uniform", "distance-normal" or "parallax-normal"
    distance_prior: tuple[float, float]  # (low, high) pc, (mean, sd) pc, or (mean, sd) mas
    mass_prior_msun: tuple[float, float]
    period_prior_yr: tuple[float, float]
    files: dict[str, Path] = field(default_factory=dict)


def write_target(folder: Path, companions: list[CompanionData], *, rng: np.random.Generator,
                 reference_epoch: float, distance_toml: str, mass_prior_msun: tuple[float, float],
                 period_prior_yr: tuple[float, float], name: str = "simulated") -> tuple[Path, dict]:
    """Write a target file and noisy simulated tables for one or more companions.

    Parameters
    ----------
    folder : Path
        Created if missing; the files are written inside.
    companions : list of CompanionData
        Each gets a ``[[companion]]`` block; velocities carry no instrument
        column (one instrument, no offset) and the frame is relative.
    rng : numpy.random.Generator
        Noise generator.
    reference_epoch : float
        Julian year written as ``target.reference_epoch``.
    distance_toml : str
        The body of the ``[distance]`` table.
    mass_prior_msun, period_prior_yr : tuple of float
        Log-uniform prior bounds of the total mass and of every period.

    Returns
    -------
    (Path, dict)
        The target file and ``{"<name>.pos": path, "<name>.rv": path}``.
    """
    folder.mkdir(parents=True, exist_ok=True)
    lo_m, hi_m = mass_prior_msun
    lo_p, hi_p = period_prior_yr
    text = textwrap.dedent(f"""\
        # invented system, simulated data (orbitmass benchmark)
        [target]
        name = "{name}"
        reference_epoch = {reference_epoch!r}

        [central]
        mass = {{ dist = "log-uniform", low = "{lo_m!r} solMass", high = "{hi_m!r} solMass" }}

        [distance]
        {distance_toml}
        """)
    files: dict[str, Path] = {}
    for comp in companions:
        block = ["", "[[companion]]", f'name = "{comp.name}"']
        if comp.t_pos is not None:
            sim = simulate(comp.truth, comp.t_pos)
            n = len(comp.t_pos)
            path = folder / f"{comp.name}_pos.csv"
            write_positions_csv(path, comp.t_pos, sim["east_mas"] + rng.normal(0, comp.pos_err_mas, n),
                                sim["north_mas"] + rng.normal(0, comp.pos_err_mas, n), comp.pos_err_mas)
            block.append(f'astrometry = "{path.name}"')
            files[f"{comp.name}.pos"] = path
        if comp.t_rv is not None:
            sim = simulate(comp.truth, comp.t_rv)
            n = len(comp.t_rv)
            path = folder / f"{comp.name}_rv.csv"
            write_velocities_csv(path, comp.t_rv, sim["rv_companion_kms"] + rng.normal(0, comp.rv_err_kms, n),
                                 comp.rv_err_kms)
            block.append(f'velocities = "{path.name}"')
            files[f"{comp.name}.rv"] = path
        block.append(f'period = {{ dist = "log-uniform", low = "{lo_p!r} yr", high = "{hi_p!r} yr" }}')
        text += "\n".join(block) + "\n"
    target = folder / "target.toml"
    target.write_text(text, encoding="utf-8")
    return target, files


#: the invented reference systems (report units)
PROBLEMS: dict[str, dict] = {
    "covered": {
        "title": "astrometry + velocities, free distance",
        "truth": TrueOrbit(mass_msun=2.4e6, distance_pc=31000.0, period_yr=11.5, eccentricity=0.62,
                           inclination_deg=71.0, arg_periastron_deg=140.0, ascending_node_deg=305.0,
                           periastron_time=2016.8),
        "pos": (2005.0, 2026.5, 30, 0.1),  # first, last epoch, count, error (mas)
        "rv": (2007.0, 2026.5, 20, 15.0),  # first, last epoch, count, error (km/s)
        "reference_epoch": 2016.0,
        "distance_mode": "distance-uniform",
        "distance_prior": (5000.0, 100000.0),
        "mass_prior_msun": (1e4, 1e9),
        "period_prior_yr": (1.0, 200.0),
    },
    "astrometry": {
        "title": "astrometry only, 1% parallax prior",
        "truth": TrueOrbit(mass_msun=2.3, distance_pc=1000.0 / 35.0, period_yr=22.0, eccentricity=0.35,
                           inclination_deg=48.0, arg_periastron_deg=75.0, ascending_node_deg=20.0,
                           periastron_time=2011.3),
        "pos": (1998.0, 2026.5, 30, 1.5),
        "rv": None,
        "reference_epoch": 2012.0,
        "distance_mode": "parallax-normal",
        "distance_prior": (35.0, 0.35),
        "mass_prior_msun": (0.05, 50.0),
        "period_prior_yr": (2.0, 500.0),
    },
    "partial_arc": {
        "title": "quarter-orbit arc, astrometry + velocities",
        "truth": TrueOrbit(mass_msun=5.2e6, distance_pc=12500.0, period_yr=60.0, eccentricity=0.5,
                           inclination_deg=115.0, arg_periastron_deg=250.0, ascending_node_deg=60.0,
                           periastron_time=2019.0),
        "pos": (2011.5, 2026.5, 24, 0.15),
        "rv": (2013.0, 2026.5, 12, 20.0),
        "reference_epoch": 2019.0,
        "distance_mode": "distance-normal",
        "distance_prior": (12500.0, 375.0),
        "mass_prior_msun": (1e4, 1e9),
        "period_prior_yr": (5.0, 1000.0),
    },
}


def _distance_toml(mode: str, prior: tuple[float, float]) -> str:
    a, b = prior
    if mode == "distance-uniform":
        return f'prior = {{ dist = "uniform", low = "{a!r} pc", high = "{b!r} pc" }}'
    if mode == "distance-normal":
        return f'prior = {{ dist = "normal", mean = "{a!r} pc", sd = "{b!r} pc" }}'
    return f'parallax = {{ dist = "normal", mean = "{a!r} mas", sd = "{b!r} mas" }}'


def make_problem(folder: Path, name: str, companions: list[CompanionData], *, reference_epoch: float,
                 distance_mode: str, distance_prior: tuple[float, float], mass_prior_msun: tuple[float, float],
                 period_prior_yr: tuple[float, float], rng: np.random.Generator, title: str = "") -> Problem:
    """Write a simulated target (see :func:`write_target`) and describe it as a :class:`Problem`.

    ``distance_mode`` is ``"distance-uniform"`` (``distance_prior`` = low,
    high in pc), ``"distance-normal"`` (mean, sd in pc) or
    ``"parallax-normal"`` (mean, sd in mas).
    """
    target, files = write_target(folder, companions, rng=rng, reference_epoch=reference_epoch,
                                 distance_toml=_distance_toml(distance_mode, distance_prior),
                                 mass_prior_msun=mass_prior_msun, period_prior_yr=period_prior_yr,
                                 name=f"benchmark {name}")
    return Problem(name=name, title=title, target=target, reference_epoch=reference_epoch,
                   companions=companions, distance_mode=distance_mode, distance_prior=distance_prior,
                   mass_prior_msun=mass_prior_msun, period_prior_yr=period_prior_yr, files=files)


def write_problem(name: str, folder: Path, data_seed: int = DATA_SEED) -> Problem:
    """Simulate reference problem ``name`` (a key of :data:`PROBLEMS`) into ``folder``."""
    spec = PROBLEMS[name]
    rng = np.random.default_rng([data_seed, list(PROBLEMS).index(name)])
    t_pos = t_rv = None
    pos_err, rv_err = 0.1, 10.0
    if spec["pos"] is not None:
        first, last, n, pos_err = spec["pos"]
        t_pos = np.sort(rng.uniform(first, last, n))
    if spec["rv"] is not None:
        first, last, n, rv_err = spec["rv"]
        t_rv = np.sort(rng.uniform(first, last, n))
    comp = CompanionData("S1", spec["truth"], t_pos, t_rv, pos_err, rv_err)
    return make_problem(folder, name, [comp], reference_epoch=spec["reference_epoch"],
                        distance_mode=spec["distance_mode"], distance_prior=spec["distance_prior"],
                        mass_prior_msun=spec["mass_prior_msun"], period_prior_yr=spec["period_prior_yr"],
                        rng=rng, title=spec["title"])


# ---------------------------------------------------------------------------- baseline
def _kepler_newton(mean: np.ndarray, ecc: float) -> np.ndarray:
    """Eccentric anomaly by Newton's method from E0 = M + e sin M, until max |dE| < 1e-12."""
    big_e = mean + ecc * np.sin(mean)
    for _ in range(50):
        step = (big_e - ecc * np.sin(big_e) - mean) / (1.0 - ecc * np.cos(big_e))
        big_e = big_e - step
        if np.max(np.abs(step)) < 1e-12:
            break
    return big_e


class BaselinePosterior:
    """The afternoon baseline: one parameter vector in, one log-posterior out.

    Parameters (in this order): ln total mass (Msun), distance (pc) or parallax
    (mas), ln period (yr), eccentricity, cos i, omega (rad), Omega (rad), mean
    anomaly at the reference epoch (rad). Priors are those of the problem's
    target file: log-uniform mass and period, the distance or parallax prior,
    uniform e in [0, 1), isotropic inclination, uniform angles (the likelihood
    is periodic in them, so they are left unbounded). The tables are read with
    ``numpy.loadtxt``.
    """

    names = ("ln_mass", "distance", "ln_period", "ecc", "cos_i", "omega", "node", "m0")

    def __init__(self, problem: Problem):
        if len(problem.companions) != 1:
            raise ValueError("the baseline handles one companion")
        self.problem = problem
        self.t_ref = problem.reference_epoch
        self.mode = problem.distance_mode
        self.dist_a, self.dist_b = problem.distance_prior
        self.ln_m_lo, self.ln_m_hi = (math.log(v) for v in problem.mass_prior_msun)
        self.ln_p_lo, self.ln_p_hi = (math.log(v) for v in problem.period_prior_yr)
        name = problem.companions[0].name
        self.pos = self.rv = None
        if f"{name}.pos" in problem.files:
            # columns: epoch, east, north, east error, north error
            self.pos = np.loadtxt(problem.files[f"{name}.pos"], delimiter=",", skiprows=1, ndmin=2)
        if f"{name}.rv" in problem.files:
            # columns: epoch, velocity, error
            self.rv = np.loadtxt(problem.files[f"{name}.rv"], delimiter=",", skiprows=1, ndmin=2)
        # normalisation constants of the Gaussians, computed once
        self.norm = 0.0
        if self.pos is not None:
            self.norm -= float(np.sum(np.log(TWO_PI * self.pos[:, 3] * self.pos[:, 4])))
        if self.rv is not None:
            self.norm -= float(np.sum(np.log(math.sqrt(TWO_PI) * self.rv[:, 2])))
        self.n_calls = 0

    def log_prior(self, p: np.ndarray) -> float:
        """Log prior (up to a constant), -inf outside the support."""
        ln_m, dist, ln_p, ecc, cos_i = p[0], p[1], p[2], p[3], p[4]
        if not (self.ln_m_lo < ln_m < self.ln_m_hi and self.ln_p_lo < ln_p < self.ln_p_hi):
            return -math.inf
        if not (0.0 <= ecc < 1.0 and -1.0 <= cos_i <= 1.0 and dist > 0.0):
            return -math.inf
        if self.mode == "distance-uniform":
            return 0.0 if self.dist_a <= dist <= self.dist_b else -math.inf
        return -0.5 * ((dist - self.dist_a) / self.dist_b) ** 2

    def log_likelihood(self, p: np.ndarray) -> float:
        """Gaussian log-likelihood of the astrometry and the velocities (normalised)."""
        ln_m, dist, ln_p, ecc, cos_i, omega, node, m0 = p
        distance_pc = 1000.0 / dist if self.mode == "parallax-normal" else dist
        mass, period = math.exp(ln_m), math.exp(ln_p)
        a_au = (GM_SUN_AU3_PER_YR2 * mass * period * period / (4.0 * math.pi**2)) ** (1.0 / 3.0)  # Kepler III
        a_mas = a_au / distance_pc * 1000.0
        sin_i = math.sqrt(max(0.0, 1.0 - cos_i * cos_i))
        cw, sw, cn, sn = math.cos(omega), math.sin(omega), math.cos(node), math.sin(node)
        root = math.sqrt(1.0 - ecc * ecc)
        ll = self.norm
        if self.pos is not None:
            t, east, north, s_e, s_n = self.pos.T
            big_e = _kepler_newton(m0 + TWO_PI * (t - self.t_ref) / period, ecc)
            x = np.cos(big_e) - ecc
            y = root * np.sin(big_e)
            # classical Thiele-Innes constants, north = A x + F y, east = B x + G y
            A = a_mas * (cw * cn - sw * sn * cos_i)
            B = a_mas * (cw * sn + sw * cn * cos_i)
            F = a_mas * (-sw * cn - cw * sn * cos_i)
            G = a_mas * (-sw * sn + cw * cn * cos_i)
            r_e = (east - (B * x + G * y)) / s_e
            r_n = (north - (A * x + F * y)) / s_n
            ll -= 0.5 * float(np.sum(r_e * r_e + r_n * r_n))
        if self.rv is not None:
            t, v, s_v = self.rv.T
            big_e = _kepler_newton(m0 + TWO_PI * (t - self.t_ref) / period, ecc)
            cos_e = np.cos(big_e)
            cos_nu = (cos_e - ecc) / (1.0 - ecc * cos_e)
            sin_nu = root * np.sin(big_e) / (1.0 - ecc * cos_e)
            k_kms = TWO_PI * a_au * sin_i / (period * root) * KMS_PER_AU_PER_YR
            model = k_kms * (cw * cos_nu - sw * sin_nu + ecc * cw)
            r_v = (v - model) / s_v
            ll -= 0.5 * float(np.sum(r_v * r_v))
        return ll

    def __call__(self, p: np.ndarray) -> float:
        self.n_calls += 1
        lp = self.log_prior(p)
        if not math.isfinite(lp):
            return -math.inf
        return lp + self.log_likelihood(p)

    def truth_vector(self) -> np.ndarray:
        """The true values in the sampled parameters."""
        tr = self.problem.companions[0].truth
        dist = 1000.0 / tr.distance_pc if self.mode == "parallax-normal" else tr.distance_pc
        m0 = TWO_PI * (self.t_ref - tr.periastron_time) / tr.period_yr
        return np.array([math.log(tr.mass_msun), dist, math.log(tr.period_yr), tr.eccentricity,
                         math.cos(math.radians(tr.inclination_deg)), math.radians(tr.arg_periastron_deg),
                         math.radians(tr.ascending_node_deg), m0])


def baseline_to_theta(space, post: BaselinePosterior, p: np.ndarray) -> np.ndarray:
    """orbitmass sampled vectors (rows) for baseline vectors ``p`` (rows), same physical points.

    ``space`` is the :class:`orbitmass.model.parameters.ParameterSpace` of the same
    target; its single companion must be the problem's.
    """
    p = np.atleast_2d(p)
    name = post.problem.companions[0].name
    dist = 1000.0 / p[:, 1] if post.mode == "parallax-normal" else p[:, 1]
    return space.pack({"mass_msun": np.exp(p[:, 0]), "distance_pc": dist, f"{name}.period_yr": np.exp(p[:, 2]),
                       f"{name}.ecc": p[:, 3], f"{name}.cos_i": p[:, 4], f"{name}.omega": p[:, 5],
                       f"{name}.node": p[:, 6], f"{name}.m0": p[:, 7]})


@contextlib.contextmanager
def _quiet_autocorr():
    """Silence emcee's "chain is shorter than 50 tau" log warnings (the run records it instead)."""
    logger = logging.getLogger("emcee.autocorr")
    level = logger.level
    logger.setLevel(logging.ERROR)
    try:
        yield
    finally:
        logger.setLevel(level)


def run_baseline(problem: Problem, *, seed: int, max_steps: int, n_walkers: int = 32,
                 check_every: int = 250, ball: float = 1e-4) -> dict:
    """Sample ``problem`` with the afternoon baseline until converged or ``max_steps``.

    Walkers start at the truth plus ``ball`` times a standard normal deviate
    (relative for the distance). Every ``check_every`` steps the
    autocorrelation time of every parameter is estimated with
    ``emcee.autocorr.integrated_time`` (``quiet=True``); the run stops when
    the chain is longer than 50 of them. Then the first ``2 max tau`` steps
    are discarded and ESS(mass) = kept steps x walkers / tau(ln mass).

    Returns
    -------
    dict
        Wall time, steps, evaluations, tau, ESS, ESS/s, evaluations per
        effective sample, mass median, ``hit_cap``.
    """
    post = BaselinePosterior(problem)
    rng = np.random.default_rng(seed)
    truth = post.truth_vector()
    ndim = truth.size
    scale = np.ones(ndim)
    scale[1] = truth[1]
    p0 = truth + ball * scale * rng.standard_normal((n_walkers, ndim))
    p0[:, 3] = np.abs(p0[:, 3])
    sampler = emcee.EnsembleSampler(n_walkers, ndim, post)
    sampler._random = np.random.RandomState(seed)  # emcee keeps a RandomState; seed it for repeatability
    t0 = time.perf_counter()
    state = p0
    converged = False
    tau = np.full(ndim, np.inf)
    with _quiet_autocorr():
        while sampler.iteration < max_steps:
            steps = min(check_every, max_steps - sampler.iteration)
            state = sampler.run_mcmc(state, steps, progress=False)
            tau = emcee.autocorr.integrated_time(sampler.get_chain(), quiet=True)
            if np.all(50.0 * tau < sampler.iteration):
                converged = True
                break
        wall = time.perf_counter() - t0
        chain = sampler.get_chain()
        n_steps = chain.shape[0]
        burn = min(int(2 * np.max(tau)), n_steps // 2)
        kept = chain[burn:]
        tau_kept = emcee.autocorr.integrated_time(kept, quiet=True)
    ess_mass = kept.shape[0] * n_walkers / float(tau_kept[0])
    n_eval = post.n_calls
    return {
        "converged": converged,
        "hit_cap": not converged,
        "wall_seconds": wall,
        "n_steps": int(n_steps),
        "n_walkers": n_walkers,
        "n_evaluations": int(n_eval),
        "tau_mass": float(tau_kept[0]),
        "tau_max": float(np.max(tau_kept)),
        "ess_mass": ess_mass,
        "ess_mass_per_s": ess_mass / wall,
        "evaluations_per_ess": n_eval / ess_mass,
        "acceptance_fraction": float(np.mean(sampler.acceptance_fraction)),
        "mass_median_msun": float(np.exp(np.median(kept[:, :, 0]))),
        "us_per_evaluation": wall / n_eval * 1e6,
    }


@contextlib.contextmanager
def _stage_clock():
    """Time the initialisation stages of the fits run inside (search, polish, walkers), in seconds.

    The normal path reports them itself (``InitialSolution.seconds``); for the
    astrometry-only fast path the polish and the Hessian calls inside its
    initialisation are timed here by wrapping them: search = start to the first
    polish, polish = the polish calls, walkers = the rest.
    """
    import orbitmass.inference.linear as linear
    import orbitmass.inference.pipeline as pipeline

    stages: dict[str, float] = {}
    inside = {"on": False, "first": None, "polish": 0.0}
    orig_init, orig_lin, orig_polish = pipeline.initialise_walkers, linear.initialise_linear, linear.polish

    def init_walkers(*args, **kwargs):
        sol = orig_init(*args, **kwargs)
        stages.update(sol.seconds)
        return sol

    def polish(*args, **kwargs):
        t = time.perf_counter()
        if inside["on"] and inside["first"] is None:
            inside["first"] = t
        try:
            return orig_polish(*args, **kwargs)
        finally:
            inside["polish"] += time.perf_counter() - t

    def init_linear(*args, **kwargs):
        inside.update(on=True, first=None, polish=0.0)
        t0 = time.perf_counter()
        try:
            return orig_lin(*args, **kwargs)
        finally:
            total = time.perf_counter() - t0
            inside["on"] = False
            search = (inside["first"] or time.perf_counter()) - t0
            stages.update(search=search, polish=inside["polish"], walkers=max(total - search - inside["polish"], 0.0))

    pipeline.initialise_walkers, linear.initialise_linear, linear.polish = init_walkers, init_linear, polish
    try:
        yield stages
    finally:
        pipeline.initialise_walkers, linear.initialise_linear, linear.polish = orig_init, orig_lin, orig_polish


def run_orbitmass(problem: Problem, *, seed: int, max_steps: int = 20000) -> dict:
    """Fit ``problem`` with orbitmass; its own diagnostics and the emcee-estimator ESS of the mass."""
    from orbitmass.fit import Fit

    with _stage_clock() as stages:
        fit = Fit(seed=seed, progress=False, max_steps=max_steps).fit(problem.target)
    diag = fit.summary["diagnostics"]
    res = fit.results
    mass_idx = res.space.index["ln_mass"]
    kept = res.chain[res.burn:, :, mass_idx]
    with _quiet_autocorr():
        tau = float(emcee.autocorr.integrated_time(kept[:, :, None], quiet=True)[0])
    path, kish = _fast_path(diag)
    # an importance-weighted chain (fast path) carries Kish ESS / N of its draws' information
    ess_emcee = kept.shape[0] * kept.shape[1] / tau * (kish if kish is not None else 1.0)
    wall = float(diag["wall_seconds"])
    return {
        "converged": bool(diag["converged"]),
        "hit_cap": not bool(diag["converged"]),
        "wall_seconds": wall,
        "sampling_seconds": float(diag["sampling_seconds"]),
        "init_search_seconds": float(stages.get("search", float("nan"))),
        "init_polish_seconds": float(stages.get("polish", float("nan"))),
        "init_walkers_seconds": float(stages.get("walkers", float("nan"))),
        "n_steps": int(diag["n_steps"]),
        "n_walkers": int(diag["n_walkers"]),
        "n_evaluations": int(diag["n_evaluations"]),
        "tau_mass": tau,
        "ess_mass": ess_emcee,
        "ess_mass_per_s": ess_emcee / wall,
        "evaluations_per_ess": diag["n_evaluations"] / ess_emcee,
        "ess_mass_orbitmass": float(diag["ess_mass"]),
        "ess_mass_per_s_orbitmass": float(diag["ess_mass"]) / wall,
        "evaluations_per_ess_orbitmass": diag["n_evaluations"] / float(diag["ess_mass"]),
        # null when the fast path used importance sampling (no Markov chain, so no acceptance)
        "acceptance_fraction": None if diag["acceptance_fraction"] is None else float(diag["acceptance_fraction"]),
        "mass_median_msun": float(fit.summary["derived"]["mass_msun"]["median"]),
        "path": path,
        "kish_fraction": 1.0 if kish is None else kish,
    }


def _fast_path(diag: dict) -> tuple[str, float | None]:
    """Which likelihood path a fit ran, as its diagnostics say, and the Kish ESS fraction if weighted.

    The analytic Thiele-Innes path (:mod:`orbitmass.inference.linear`) reports a
    ``method`` and a ``kish_fraction``, at the top level of the diagnostics or
    in a nested block; without them the fit ran the full posterior.
    """
    blocks = [diag] + [v for v in diag.values() if isinstance(v, dict)]
    for block in blocks:
        if "kish_fraction" in block or "method" in block:
            kish = block.get("kish_fraction")
            return str(block.get("method", "fast path")), (float(kish) if kish is not None else None)
    return "full posterior (all elements sampled)", None


def _median_run(runs: list[dict]) -> dict:
    """Medians of the numeric figures of several runs; flags are true if any run set them."""
    out: dict = {}
    for key, val in runs[0].items():
        if isinstance(val, bool):
            out[key] = any(r[key] for r in runs)
        elif isinstance(val, int | float):
            out[key] = float(np.median([r[key] for r in runs]))
        else:
            out[key] = val
    return out


def run(quick: bool, folder: Path | None = None, problems: list[str] | None = None,
        repeats: int | None = None, baseline_max_steps: int | None = None,
        fit_max_steps: int | None = None) -> dict:
    """Run the reference problems.

    Parameters
    ----------
    quick : bool
        One repeat each and a baseline step cap of 1500 (a few seconds a problem;
        the baseline then stops before its convergence test passes, which is recorded)
        instead of three repeats and a cap of 60000.
    folder : Path, optional
        Where to write the simulated data (default: a temporary folder).
    problems : list of str, optional
        Keys of :data:`PROBLEMS` (default: all).
    repeats, baseline_max_steps, fit_max_steps : int, optional
        Override the settings chosen by ``quick`` (for smoke tests).

    Returns
    -------
    dict
        Per problem: ``"orbitmass"`` and ``"baseline"`` (medians of the repeats
        and the individual runs), ``"ratio_ess_per_s"``,
        ``"ratio_evaluations_per_ess"`` (baseline / orbitmass), truth; and
        ``"settings"``.
    """
    repeats = repeats or (1 if quick else 3)
    baseline_max_steps = baseline_max_steps or (1500 if quick else 60000)
    fit_max_steps = fit_max_steps or 20000
    names = problems or list(PROBLEMS)
    out: dict = {}
    with tempfile.TemporaryDirectory(prefix="orbitmass-bench-") as tmp:
        base = Path(folder) if folder is not None else Path(tmp)
        for name in names:
            prob = write_problem(name, base / name)
            om_runs, bl_runs = [], []
            for k in range(repeats):
                om_runs.append(run_orbitmass(prob, seed=101 + k, max_steps=fit_max_steps))
                bl_runs.append(run_baseline(prob, seed=201 + k, max_steps=baseline_max_steps))
            om, bl = _median_run(om_runs), _median_run(bl_runs)
            out[name] = {
                "title": prob.title,
                "true_mass_msun": prob.companions[0].truth.mass_msun,
                "orbitmass": om,
                "baseline": bl,
                "orbitmass_runs": om_runs,
                "baseline_runs": bl_runs,
                "ratio_ess_per_s": om["ess_mass_per_s"] / bl["ess_mass_per_s"],
                # each orbitmass run is paired with the baseline run right after it (same load)
                "ratio_ess_per_s_paired_median": float(np.median(
                    [o["ess_mass_per_s"] / b["ess_mass_per_s"] for o, b in zip(om_runs, bl_runs, strict=True)])),
                "ratio_ess_per_s_orbitmass_estimator": om["ess_mass_per_s_orbitmass"] / bl["ess_mass_per_s"],
                "ratio_wall": bl["wall_seconds"] / om["wall_seconds"],
                "ratio_evaluations_per_ess": bl["evaluations_per_ess"] / om["evaluations_per_ess"],
            }
    out["settings"] = {
        "repeats": repeats,
        "baseline_max_steps": baseline_max_steps,
        "baseline_walkers": 32,
        "baseline_move": "emcee StretchMove (default)",
        "baseline_start": "truth + 1e-4 N(0, 1) (relative for distance)",
        "baseline_stop": "50 tau < steps (emcee.autocorr.integrated_time every 250 steps) or step cap",
        "ess_estimator": "emcee.autocorr.integrated_time on the post-burn chain of ln mass, both codes",
        "fit_max_steps": fit_max_steps,
        "quick": quick,
    }
    return out


def profile_fit(quick: bool, top: int = 25, max_steps: int | None = None) -> dict:
    """cProfile of one orbitmass fit of the ``covered`` problem: top functions by own time.

    In quick mode the fit is capped at 1000 steps (the proportions of the
    profile change little; the full mode profiles a fit run to convergence).

    Returns
    -------
    dict
        ``"text"`` (the pstats table), ``"total_seconds"`` (profiled wall
        time, inflated by the profiler), ``"top"`` (list of function,
        calls, tottime, cumtime).
    """
    from orbitmass.fit import Fit

    with tempfile.TemporaryDirectory(prefix="orbitmass-prof-") as tmp:
        prob = write_problem("covered", Path(tmp) / "covered")
        fit = Fit(seed=7, progress=False, max_steps=max_steps or (1000 if quick else 20000))
        prof = cProfile.Profile()
        t0 = time.perf_counter()
        prof.enable()
        fit.fit(prob.target)
        prof.disable()
        total = time.perf_counter() - t0
    stream = io.StringIO()
    stats = pstats.Stats(prof, stream=stream)
    stats.sort_stats("tottime").print_stats(top)
    rows = []
    for (filename, line, func), (cc, nc, tt, ct, _) in sorted(
            stats.stats.items(), key=lambda kv: kv[1][2], reverse=True)[:top]:
        rows.append({"function": f"{Path(filename).name}:{line}({func})", "calls": int(nc),
                     "tottime_s": float(tt), "cumtime_s": float(ct)})
    text = stream.getvalue()
    text = text[text.find("ncalls"):] if "ncalls" in text else text
    breakdown = {}
    for label, keys in PROFILE_GROUPS.items():
        cum = sum(ct for (filename, _, func), (_, _, _, ct, _) in stats.stats.items()
                  if (Path(filename).name, func) in keys)
        if cum > 0.0:
            breakdown[label] = {"cumtime_s": float(cum), "fraction": float(cum / total)}
    return {"problem": "covered", "total_seconds": total, "n_steps": fit.summary["diagnostics"]["n_steps"],
            "breakdown": breakdown, "top": rows, "text": text}


#: where the time of a fit goes: cumulative time of these functions (file, function), all callers
PROFILE_GROUPS: dict[str, tuple[tuple[str, str], ...]] = {
    "reading the target": (("target.py", "read_target"),),
    "initialisation (search, polish, walkers)": (("initialise.py", "initialise_walkers"),),
    "  period search": (("initialise.py", "_companion_search"),),
    "  polish (BFGS)": (("initialise.py", "polish"),),
    "  walkers (Hessian, draws)": (("initialise.py", "hessian_covariance"), ("initialise.py", "_scatter")),
    "sampling (emcee + checks)": (("sampler.py", "run_sampler"),),
    "  log posterior, all calls": (("likelihood.py", "__call__"),),
    "    log prior": (("parameters.py", "log_prior"),),
    "    log likelihood": (("likelihood.py", "log_likelihood"),),
    "      Kepler solver": (("kepler.py", "kepler_cos_sin"), ("kepler.py", "kepler_cos_sin_rows")),
    "  emcee proposals (differential evolution)": (("de.py", "get_proposal"), ("de_snooker.py", "get_proposal")),
    "  convergence checks": (("sampler.py", "assess"),),
    "derived samples": (("results.py", "derive_samples"),),
}


def table(result: dict) -> str:
    """Plain-text table of :func:`run` output."""
    lines = [
        "Reference problems (median of "
        f"{result['settings']['repeats']} runs; ESS of the mass by emcee's estimator)",
        f"{'problem':<12} {'code':<10} {'wall s':>8} {'steps':>7} {'ESS(M)':>8} {'ESS/s':>9} "
        f"{'eval/ESS':>9} {'M median':>11} {'cap?':>5}",
    ]
    for name, res in result.items():
        if name == "settings":
            continue
        for code in ("orbitmass", "baseline"):
            r = res[code]
            lines.append(
                f"{name:<12} {code:<10} {r['wall_seconds']:>8.1f} {r['n_steps']:>7.0f} {r['ess_mass']:>8.0f} "
                f"{r['ess_mass_per_s']:>9.1f} {r['evaluations_per_ess']:>9.0f} "
                f"{r['mass_median_msun']:>11.4g} {'yes' if r['hit_cap'] else 'no':>5}")
        lines.append(f"{'':<12} ratio ESS/s {res['ratio_ess_per_s']:.1f}x (paired runs "
                     f"{res['ratio_ess_per_s_paired_median']:.1f}x), eval/ESS "
                     f"{res['ratio_evaluations_per_ess']:.1f}x fewer, orbitmass own ESS "
                     f"{res['orbitmass']['ess_mass_orbitmass']:.0f}")
        om = res["orbitmass"]
        lines.append(f"{'':<12} orbitmass path: {om['path']}")
        if "init_search_seconds" in om:
            lines.append(f"{'':<12} orbitmass initialisation (in the wall time): search "
                         f"{om['init_search_seconds']:.2f} s, polish {om['init_polish_seconds']:.2f} s, walkers "
                         f"{om['init_walkers_seconds']:.2f} s; sampling {om['sampling_seconds']:.2f} s")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> None:
    """Command-line entry: run and print the table."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="one repeat, short baseline cap")
    args = parser.parse_args(argv)
    print(table(run(args.quick)))  # noqa: T201 (benchmark script output)


if __name__ == "__main__":
    main()
