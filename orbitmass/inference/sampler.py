"""Drive emcee: run until converged or a step cap; no plotting, no file I/O.

Convergence (output contract): every sampled parameter has an effective
sample size of at least ``min_ess`` (400) and the retained chain is longer
than ``min_tau_multiple`` (50) autocorrelation times; in addition the
rank-normalised split R-hat of every parameter must be below ``max_rhat``
(1.01, Vehtari et al. 2021; every walker is one chain, split in halves). The
defaults are :data:`orbitmass.core.diagnostics.MIN_ESS`, ``MIN_TAU_MULTIPLE``
and ``MAX_RHAT``; a stationary chain needs about 100 autocorrelation times for
R-hat < 1.01 (see :mod:`orbitmass.core.diagnostics`). The first ``burn`` steps are
discarded, ``burn = max(2 * tau_max, burn_fraction * n_steps)``.

Moves: differential evolution (ter Braak 2006, Stat. Comput. 16, 239): 90 % of
steps ``DEMove`` with the default scale 2.38 / sqrt(2 n_dim), 10 % with scale
1 (ter Braak's jumps between modes). It follows correlated posteriors better
than the stretch move at the same cost. emcee's ``DESnookerMove`` is not used:
in emcee 3.1.6 it samples an 8-D unit Gaussian with standard deviations of
about 0.80 alone and 0.95 at 20 % of a mixture (measured), which would make
every interval too narrow.
"""

from __future__ import annotations

import logging
import sys
import time
from dataclasses import dataclass, field

import emcee
import numpy as np
from numpy.typing import NDArray

from orbitmass.core import diagnostics

__all__ = ["SamplerOptions", "SamplerRun", "run_sampler", "default_moves"]

log = logging.getLogger(__name__)


def default_moves():
    """The move mixture orbitmass uses (see module docstring)."""
    return [(emcee.moves.DEMove(), 0.9), (emcee.moves.DEMove(gamma0=1.0), 0.1)]


@dataclass(frozen=True)
class SamplerOptions:
    """Options of a sampling run.

    Attributes
    ----------
    n_walkers : int or None
        Walkers; default ``max(64, 4 * n_dim)`` rounded up to even.
    max_steps : int
        Step cap; the run stops there converged or not.
    min_steps : int
        Fewest steps before convergence is checked.
    min_ess, min_tau_multiple, max_rhat : float
        Convergence thresholds (see module docstring).
    burn_fraction : float
        Least fraction of the chain discarded as burn-in.
    max_retained : int
        Retained samples are thinned (by whole autocorrelation times' halves)
        so that at most about this many are kept.
    progress : bool or None
        tqdm progress bar; ``None`` shows it only on a terminal.
    """

    n_walkers: int | None = None
    max_steps: int = 20000
    min_steps: int = 600
    min_ess: float = diagnostics.MIN_ESS
    min_tau_multiple: float = diagnostics.MIN_TAU_MULTIPLE
    max_rhat: float = diagnostics.MAX_RHAT
    burn_fraction: float = 0.2
    max_retained: int = 40000
    progress: bool | None = None


@dataclass
class SamplerRun:
    """What a sampling run produced (arrays over the whole chain)."""

    chain: NDArray[np.float64]  # (n_steps, n_walkers, n_dim)
    log_prob: NDArray[np.float64]  # (n_steps, n_walkers)
    acceptance_fraction: float
    burn: int
    thin: int
    tau: NDArray[np.float64]
    ess: NDArray[np.float64]
    rhat: NDArray[np.float64]
    converged: bool
    n_evaluations: int
    sampling_seconds: float
    interrupted: bool = False
    modes: dict[str, int] = field(default_factory=dict)

    @property
    def n_steps(self) -> int:
        """Steps run."""
        return int(self.chain.shape[0])

    def retained(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Retained samples (after burn-in and thinning), flattened: (n, n_dim), (n,)."""
        c = self.chain[self.burn:: self.thin]
        lp = self.log_prob[self.burn:: self.thin]
        return c.reshape(-1, c.shape[-1]), lp.reshape(-1)


def assess(chain, options: SamplerOptions) -> dict:
    """Burn-in, tau, ESS, R-hat and the convergence verdict for a chain so far.

    The cheap criteria (tau-based ESS and chain length in tau) are checked
    first; rank-normalised ESS and R-hat, which need sorting, are computed on
    the chain thinned by a quarter of tau (it keeps their values: draws closer
    than tau carry little extra information) and only when the cheap ones pass
    or ``full`` is requested.
    """
    n_steps, n_walkers, n_dim = chain.shape
    tau = diagnostics.integrated_time(chain[n_steps // 2:]) if n_steps >= 8 else np.full(n_dim, np.inf)
    burn = int(max(2.0 * np.max(tau), options.burn_fraction * n_steps))
    burn = min(burn, n_steps - 4) if n_steps > 8 else 0
    kept = chain[burn:]
    tau = diagnostics.integrated_time(kept)
    tau_max = float(np.max(tau))
    ess_tau = kept.shape[0] * n_walkers / tau
    cheap_ok = bool(np.all(ess_tau >= options.min_ess) and kept.shape[0] > options.min_tau_multiple * tau_max)
    step = max(1, int(tau_max / 4))
    sub = kept[::step]
    ess = np.minimum(diagnostics.bulk_ess(sub) * step, ess_tau)
    rhat = diagnostics.split_rhat(sub)
    converged = bool(cheap_ok and np.all(ess >= options.min_ess) and np.all(rhat < options.max_rhat))
    return {"burn": burn, "tau": tau, "ess": ess, "rhat": rhat, "converged": converged}


def run_sampler(log_prob, p0: NDArray[np.float64] | None, *, seed: int, options: SamplerOptions,
                backend=None, stop_flag=None, pool=None, checkpoint=None,
                checkpoint_seconds: float = 60.0) -> SamplerRun:
    """Run emcee from walkers ``p0`` until converged, the step cap, or a stop request.

    Parameters
    ----------
    log_prob : callable
        Vectorised log posterior: (n_walkers, n_dim) -> (n_walkers,).
    p0 : ndarray, shape (n_walkers, n_dim), or None
        Starting walkers; ``None`` continues the chain held by ``backend``.
    seed : int
        Seed of emcee's random state (so runs repeat exactly); unused when
        continuing from ``backend``, whose saved random state is used.
    options : SamplerOptions
    backend : emcee.backends.Backend, optional
        In-memory backend holding a chain to continue (see
        :func:`orbitmass.io.checkpoint.backend_from_checkpoint`).
    stop_flag : callable, optional
        Returns True when the run should stop early (e.g. after SIGINT).
    pool : object with ``map``, optional
        Evaluates walkers in parallel (then the posterior is called per walker).
    checkpoint : callable, optional
        ``checkpoint(backend)`` is called every ``checkpoint_seconds``, at
        every convergence check and when the run stops.

    Returns
    -------
    SamplerRun
    """
    t_start = time.perf_counter()
    if backend is None:
        backend = emcee.backends.Backend()
    resuming = p0 is None
    if resuming:
        if not backend.initialized or backend.iteration == 0:
            raise ValueError("no starting walkers and no chain to continue")
        n_walkers, n_dim = backend.shape
    else:
        n_walkers, n_dim = p0.shape
        backend.reset(n_walkers, n_dim)
    vectorize = pool is None
    fn = log_prob if vectorize else _Scalar(log_prob)
    sampler = emcee.EnsembleSampler(n_walkers, n_dim, fn, vectorize=vectorize, moves=default_moves(),
                                    backend=backend, pool=pool)
    if resuming:
        state = sampler._previous_state
    else:
        rs = np.random.RandomState(seed)  # emcee draws from a legacy RandomState; seed it
        state = emcee.State(p0, random_state=rs.get_state())
    progress = sys.stderr.isatty() if options.progress is None else options.progress
    done = backend.iteration
    chunk = max(options.min_steps - done, 200)
    interrupted = False
    verdict = None
    n_eval_start = getattr(log_prob, "n_sets", 0)
    last_save = time.perf_counter()
    while done < options.max_steps:
        chunk = int(min(chunk, options.max_steps - done))
        for step_state in sampler.sample(state, iterations=chunk, progress=progress, store=True):
            state = step_state
            if stop_flag is not None and stop_flag():
                interrupted = True
                break
            if checkpoint is not None and time.perf_counter() - last_save > checkpoint_seconds:
                checkpoint(backend)
                last_save = time.perf_counter()
        done = sampler.iteration
        if interrupted:
            break
        verdict = assess(sampler.get_chain(), options)
        if checkpoint is not None:
            checkpoint(backend)
            last_save = time.perf_counter()
        if verdict["converged"]:
            break
        tau_max = float(np.max(verdict["tau"]))
        need = int(options.min_tau_multiple * tau_max * 1.25 + verdict["burn"]) - done
        ess_ratio = options.min_ess / max(float(np.min(verdict["ess"])), 1.0)
        need = max(need, int(done * (ess_ratio - 1.0) * 1.1))
        # grow geometrically: a convergence check costs far more than one step
        chunk = int(np.clip(max(need, done // 3), 300, max(done, 500)))
        log.info("step %d: tau_max %.1f, min ESS %.0f, max R-hat %.3f; continuing %d steps",
                 done, tau_max, float(np.min(verdict["ess"])), float(np.max(verdict["rhat"])), chunk)
    if interrupted and checkpoint is not None and backend.iteration > 0:
        checkpoint(backend)
    chain = sampler.get_chain()
    lp = sampler.get_log_prob()
    if verdict is None or interrupted:
        verdict = assess(chain, options) if chain.shape[0] >= 8 else {
            "burn": 0, "tau": np.full(n_dim, np.nan), "ess": np.zeros(n_dim), "rhat": np.full(n_dim, np.nan),
            "converged": False}
        verdict["converged"] = False if interrupted else verdict["converged"]
    kept_steps = chain.shape[0] - verdict["burn"]
    thin = 1
    tau_max = float(np.nanmax(verdict["tau"])) if np.isfinite(verdict["tau"]).any() else 1.0
    while kept_steps // thin * n_walkers > options.max_retained and thin < max(1.0, tau_max / 2):
        thin += 1
    return SamplerRun(
        chain=chain,
        log_prob=lp,
        acceptance_fraction=float(np.mean(backend.accepted / max(backend.iteration, 1))),
        burn=verdict["burn"],
        thin=thin,
        tau=verdict["tau"],
        ess=verdict["ess"],
        rhat=verdict["rhat"],
        converged=verdict["converged"],
        n_evaluations=int(getattr(log_prob, "n_sets", 0) - n_eval_start),
        sampling_seconds=time.perf_counter() - t_start,
        interrupted=interrupted,
    )


class _Scalar:
    """Adapter: a vectorised posterior called one walker at a time (for pools)."""

    def __init__(self, fn):
        self.fn = fn

    def __call__(self, x):
        return float(self.fn(np.asarray(x)[None, :])[0])
