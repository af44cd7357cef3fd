"""The fit pipeline: parameter space, initial search, sampling, resume and checkpoints -> Results.

:class:`orbitmass.fit.Fit` validates its options and the target and calls
:func:`run_fit`. Two sampling paths:

* the astrometry-only fast path (:mod:`orbitmass.inference.linear`) when it
  applies, ``linear`` is on and the fit is not resumed (it is fast enough to
  need no checkpoint); it falls back to the normal path when its importance
  weights are poor or it fails;
* the normal path: the initial search (:mod:`orbitmass.inference.initialise`)
  and the ensemble sampler (:mod:`orbitmass.inference.sampler`) on every
  element (with ``SamplerOptions(blocked=True)`` and several companions,
  block moves per companion and for the shared parameters beside the
  full-dimensional ones: :func:`block_posteriors`), with a checkpoint when a path is given, or continuing the chain of
  a checkpoint (``resume``).

The angle windows are explicit: the initial search returns them, the sampled
space is made from them (:meth:`ParameterSpace.with_windows`), checkpoints
record them, and a resumed fit rebuilds the space from the recorded ones. The
:class:`~orbitmass.results.Results` holds that final space.

A stop request (``stop_flag``) is passed to every stage; the result is then
marked ``interrupted`` in ``summary.json``.
"""

from __future__ import annotations

import logging
import math
import time
from pathlib import Path

import emcee
import numpy as np

from orbitmass.core.cosmology import redshift_distance_pc
from orbitmass.core.relativity import model_terms
from orbitmass.exceptions import InputError
from orbitmass.inference.initialise import elements_chain, initialise_walkers
from orbitmass.inference.linear import LinearPathError, applies, fit_linear
from orbitmass.inference.quality import quality_or_failure
from orbitmass.inference.sampler import SamplerOptions, assess, parameter_blocks, run_sampler
from orbitmass.inference.summary import build_summary
from orbitmass.io.checkpoint import backend_from_checkpoint, load_checkpoint, save_checkpoint
from orbitmass.model.data import Target
from orbitmass.model.likelihood import LogPosterior
from orbitmass.model.parameters import AngleWindows, ParameterSpace, ReferenceState, StatePosterior
from orbitmass.results import Results, derive_samples

__all__ = ["build_space", "block_posteriors", "resolve_seed", "run_fit", "ResumedInit"]

log = logging.getLogger(__name__)


class ResumedInit:
    """What the initialisation found, as recorded in a checkpoint."""

    def __init__(self, meta: dict):
        self.best_log_post = float(meta.get("init_best_log_posterior", float("nan")))
        self.other_modes = list(meta.get("other_modes", []))
        self.n_grid = int(meta.get("n_grid", 0))
        self.interrupted = False


def build_space(target: Target, *, terms=None, term_priors=None) -> ParameterSpace:
    """The parameter space of ``target`` (the distance fixed by a redshift when that is all there is).

    The model terms come from the target's ``[relativity]`` and
    ``[extended_mass]`` tables (:func:`orbitmass.core.relativity.model_terms`:
    a factor fixed at 0 adds no term, so a Newtonian target evaluates plain
    Keplerian orbits) unless ``terms`` is given; ``term_priors`` then holds the
    priors of their parameters.
    """
    z = target.distance.redshift
    d_fixed = redshift_distance_pc(z, target.distance.cosmology) if z is not None else None
    if terms is None:
        terms, built = model_terms(target.relativity, target.extended_mass)
        term_priors = {**built, **(term_priors or {})}
    return ParameterSpace(target, redshift_distance_pc=d_fixed, terms=terms, term_priors=term_priors)


def _term_start(prior) -> float:
    """Starting value of a sampled term parameter: 0 (Newtonian) when the prior allows it, else just inside."""
    low, high = prior.support
    if low < 0.0 < high:
        return 0.0
    return float(low + 1e-3 * (high - low)) if math.isfinite(high) else float(low + 1e-3 * max(abs(low), 1.0))


def _initialise(post: LogPosterior, n_walkers: int, rng, max_periods: int, stop_flag):
    """The initial search (Keplerian), then the polish and walkers of the full model.

    With model terms the search and a first polish run on the Keplerian orbits
    (the term parameters left out); their mode, with every sampled term
    parameter at its start (:func:`_term_start`), is polished under the full
    model, which sets the walkers. Polishing the full model straight from the
    coarse search stalls on precise data (the factors wander while the orbit is
    still far off).
    """
    space = post.space
    if not space.terms:
        return initialise_walkers(post, n_walkers, rng, max_periods=max_periods, stop_flag=stop_flag)
    kepler_space = build_space(space.target, terms=())
    kepler = initialise_walkers(LogPosterior(kepler_space, blocks=(post.astrometry, post.velocities)), n_walkers,
                                rng, max_periods=max_periods, stop_flag=stop_flag)
    return _scattered_start(post, kepler_space, kepler, n_walkers, rng, stop_flag)


def _scattered_start(post, kepler_space, kepler, n_walkers, rng, stop_flag):
    """Polish the full model from the Keplerian solution ``kepler``; walkers about the result."""
    space = post.space
    values = dict(kepler_space.with_windows(kepler.windows).unpack(kepler.best[None, :]))  # physical values
    for pname, prior in space.term_parameters.items():
        if not prior.fixed:
            values[pname] = _term_start(prior)
    start = space.pack(values)[0]
    init = initialise_walkers(post, n_walkers, rng, stop_flag=stop_flag, start=start)
    init.n_grid = kepler.n_grid
    init.other_modes = kepler.other_modes
    init.interrupted = init.interrupted or kepler.interrupted
    return init


def block_posteriors(post: LogPosterior):
    """Blocks of the block moves and, per block, the part of the posterior it changes.

    A companion's block changes only the prior and the likelihood of that
    companion's own rows when no companion pulls the central body (no
    sampled or fixed mass ratio: every other row is independent of its
    elements); that part is a :class:`LogPosterior` over the same space with
    only those rows. The shared block, and every block when some companion
    has a mass ratio, is scored by the whole posterior (None).

    Returns
    -------
    (blocks, partial) : lists, or (None, None) with a single companion
    """
    space = post.space
    found = parameter_blocks(space, owners=True)
    if found is None:
        return None, None
    blocks, owners = found
    if any(lay.has_q for lay in space.companions):
        return blocks, None
    partial = []
    for name in owners:
        if name is None:
            partial.append(None)
            continue
        astro = {name: post.astrometry[name]} if name in post.astrometry else {}
        vel = {name: post.velocities[name]} if name in post.velocities else {}
        partial.append(LogPosterior(space, blocks=(astro, vel), fused=post.fused))
    return blocks, partial


def resolve_seed(seed: int | None) -> int:
    """``seed``, or a fresh one from the operating system's entropy when it is None."""
    return seed if seed is not None else int(np.random.SeedSequence().entropy % (2**31))


def run_fit(target: Target, space: ParameterSpace, *, seed: int, n_walkers: int, options: SamplerOptions,
            max_periods: int = 3000, checkpoint: str | Path | None = None, resume: bool = False,
            linear: bool = True, fast_walkers: int | None = None, stop_flag=None,
            t_start: float | None = None) -> Results:
    """Sample the posterior of ``target`` and return the :class:`Results`.

    Parameters
    ----------
    target : Target
    space : ParameterSpace
        From :func:`build_space`; not changed.
    seed : int
        Seed of every random choice.
    n_walkers : int
        Walkers of the normal path (even); the fast path takes its own default.
    options : SamplerOptions
    max_periods : int
        Period grid points per companion in the initial search.
    checkpoint : path, optional
        HDF5 checkpoint of the normal path's chain.
    resume : bool
        Continue the chain in ``checkpoint``.
    linear : bool
        Try the astrometry-only fast path first (not when resuming).
    fast_walkers : int, optional
        Walkers of the fast path's 3-D chain (default 64).
    stop_flag : callable, optional
        Returns True when the fit should stop (e.g. after SIGINT).
    t_start : float, optional
        ``time.perf_counter()`` at the start of the fit (for the wall time).

    Returns
    -------
    Results

    Raises
    ------
    InputError
        On a checkpoint that is missing or belongs to other data.
    """
    t0 = time.perf_counter() if t_start is None else t_start
    rng = np.random.default_rng(seed)
    if linear and not resume:  # fast enough that it needs no checkpoint
        res = _linear_path(target, space, rng, options, seed, fast_walkers, max_periods, stop_flag, t0)
        if res is not None:
            return res
    return _sampler_path(target, space, rng, options, seed, n_walkers, max_periods,
                         None if checkpoint is None else Path(checkpoint), resume, stop_flag, t0)


def _linear_path(target, space, rng, options, seed, n_walkers, max_periods, stop_flag, t0) -> Results | None:
    """The astrometry-only fast path, or None when it does not apply or its weights are poor."""
    if not applies(space):
        return None
    try:
        theta, lp, lin = fit_linear(space, rng, options, n_walkers=n_walkers, max_periods=max_periods,
                                    stop_flag=stop_flag)
    except LinearPathError as exc:
        log.warning("astrometry-only fast path failed (%s); sampling every element instead", exc)
        return None
    ldiag = lin["diagnostics"]
    run, init = lin["run"], lin["init"]
    if ldiag["fallback_recommended"] and not run.interrupted:
        log.warning("astrometry-only fast path: importance weights too uneven (Kish ESS %.0f of %d); "
                    "sampling every element instead", ldiag["kish_ess"], ldiag["n_weighted"])
        return None
    final = lin["space"]
    samples = derive_samples(final, theta, lp)
    summary = build_summary(target, final, samples, run, init, seed, time.perf_counter() - t0)
    diag = summary["diagnostics"]
    diag["linear_path"] = ldiag
    if not math.isfinite(diag["acceptance_fraction"]):
        diag["acceptance_fraction"] = None  # importance sampling: no chain, no acceptance
    if "n_steps_3d" in ldiag:
        # MCMC on the three variables: its step counts (the stored chain is thinned
        # to the retained stride); after importance sampling there are no steps
        diag["n_steps"] = ldiag["n_steps_3d"]
        diag["burn"] = ldiag["burn_3d"]
        diag["thin"] = ldiag["thin_3d"]
    info = {"init_best_log_posterior": init.best_log_post, "n_grid": init.n_grid,
            "n_evaluations": run.n_evaluations, "sampler": "linear"}
    summary["fit_quality"], info["residuals"] = quality_or_failure(final, theta, lp, seed=seed,
                                                                  interrupted=bool(run.interrupted))
    return Results(target=target, space=final, samples=samples, theta=theta, chain=run.chain,
                   log_prob=run.log_prob, burn=run.burn, thin=run.thin, summary=summary, info=info)


def _sampler_path(target, space, rng, options, seed, n_walkers, max_periods, ckpt_path, resume, stop_flag,
                  t0) -> Results:
    """Initial search and ensemble sampler on every element (or the continuation of a checkpoint)."""
    post = LogPosterior(space)
    backend = None
    if resume:
        if ckpt_path is None:
            raise InputError("resume=True needs a checkpoint path", key="checkpoint")
        ckpt = load_checkpoint(ckpt_path)
        meta = ckpt["meta"]
        if meta.get("data_sha256") != target.data_sha256 or meta.get("names") != space.names:
            raise InputError(f"{ckpt_path}: the checkpoint belongs to other data or priors "
                             "(checksum or parameters differ); start a new fit instead of --resume",
                             file=str(ckpt_path))
        windows = AngleWindows.from_mapping({k: v for k, v in meta["windows"].items() if k in space.index})
        seed = int(meta["seed"])
        backend = backend_from_checkpoint(ckpt)
        p0 = None
        init = ResumedInit(meta)
    else:
        init = _initialise(post, n_walkers, rng, max_periods, stop_flag)
        state = getattr(init, "state", None)
        p0 = init.walkers if state is None else init.state_walkers
        windows = init.windows
        meta = {"seed": int(seed), "data_sha256": target.data_sha256, "names": space.names,
                "windows": windows.as_dict(),
                "init_best_log_posterior": init.best_log_post, "other_modes": init.other_modes,
                "n_grid": init.n_grid, "elapsed_seconds": 0.0,
                "reference_state": [] if state is None else list(state.companions)}
    space = space.with_windows(windows)
    post = post.with_space(space)
    # partial arcs: the chain is in the reference state of some companions (inference.initialise)
    state = ReferenceState(space, meta["reference_state"]) if meta.get("reference_state") else None
    sampled = post if state is None else StatePosterior(post, state)
    elapsed_before = float(meta.get("elapsed_seconds", 0.0))
    checkpoint_fn = None
    if ckpt_path is not None:
        def checkpoint_fn(b):
            meta["elapsed_seconds"] = elapsed_before + time.perf_counter() - t0
            save_checkpoint(ckpt_path, b, meta)

    # block moves (opt-in) act on the element posterior; a reference-state chain uses the plain moves
    blocks, partial = block_posteriors(post) if options.blocked and state is None else (None, None)
    if backend is None:  # kept, so that a reference-state chain can be continued (below)
        backend = emcee.backends.Backend()
    run = run_sampler(sampled, p0, seed=int(rng.integers(2**31 - 1)), options=options,
                      backend=backend, stop_flag=stop_flag, checkpoint=checkpoint_fn,
                      blocks=blocks, partial=partial)
    state_diag = None
    while state is not None:  # back to the elements; diagnostics of both, converged only if both pass
        chain, log_jac = elements_chain(state, run.chain)
        verdict = assess(chain, options)
        if verdict["converged"] or not run.converged or run.interrupted or run.n_steps >= options.max_steps:
            break
        # the sampled chain passes, the element chain not yet: continue the same chain a little
        seconds, n_eval = run.sampling_seconds, run.n_evaluations
        run = run_sampler(sampled, None, seed=0, options=options, backend=backend, stop_flag=stop_flag,
                          checkpoint=checkpoint_fn)
        run.sampling_seconds += seconds
        run.n_evaluations += n_eval
    if state is not None:
        state_diag = {"companions": list(state.companions), "names": state.names,
                      "rhat_max": float(np.nanmax(run.rhat)), "ess_min": float(np.min(run.ess))}
        run.chain, run.log_prob = chain, run.log_prob - log_jac  # the element-space log posterior
        run.burn = max(run.burn, verdict["burn"])
        run.tau, run.ess, run.rhat = verdict["tau"], verdict["ess"], verdict["rhat"]
        run.converged = bool(run.converged and verdict["converged"])
    if init.interrupted:
        run.interrupted = True
        run.converged = False
    theta, lp = run.retained()
    samples = derive_samples(space, theta, lp)
    wall = time.perf_counter() - t0 + elapsed_before
    summary = build_summary(target, space, samples, run, init, seed, wall)
    if state_diag is not None:
        summary["diagnostics"]["reference_state"] = state_diag
    info = {"init_best_log_posterior": init.best_log_post, "n_grid": init.n_grid,
            "n_evaluations": run.n_evaluations}
    summary["fit_quality"], info["residuals"] = quality_or_failure(space, theta, lp, seed=seed,
                                                                  interrupted=bool(run.interrupted))
    return Results(target=target, space=space, samples=samples, theta=theta, chain=run.chain,
                   log_prob=run.log_prob, burn=run.burn, thin=run.thin, summary=summary, info=info)
