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

Blocked moves (joint fits of several companions): with ``blocks`` given (lists
of coordinate indices, e.g. one companion's elements; :func:`parameter_blocks`
makes them from a parameter space), part of the steps are
:class:`BlockedDEMove`: every walker proposes a differential-evolution jump on
one block of coordinates only (one block per half-ensemble update), the block
drawn at random independently of the state, with the scale 2.38 / sqrt(2 n_block) of that block. The proposal is
symmetric (the pair of complementary walkers (a, b) and (b, a) are equally
likely, and the block choice does not depend on the state), so the Metropolis
ratio is the posterior ratio and the kernel leaves the same posterior
invariant; a mixture of such kernels with the full-dimensional moves does
too. A block jump needs only as many complementary walkers as the block has
coordinates, so the ensemble need not grow with the total dimension
(:func:`default_walkers`). They are off by default (``SamplerOptions.blocked``):
measured, they shorten a four-companion relative-frame fit but mix the shared
parameters of a drifting frame (mass, distance, frame) more slowly than the
full-dimensional moves (docs/performance.md).
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

__all__ = ["SamplerOptions", "SamplerRun", "run_sampler", "default_moves", "BlockedDEMove", "parameter_blocks",
           "default_walkers", "least_walkers"]

log = logging.getLogger(__name__)


#: Fraction of steps that are block moves when blocks are given (the rest: the full-dimensional mixture).
BLOCK_FRACTION = 0.9


def default_moves(blocks=None, partial=None):
    """The move mixture orbitmass uses (see module docstring).

    Parameters
    ----------
    blocks : sequence of sequences of int, optional
        Coordinate blocks; with two or more, :data:`BLOCK_FRACTION` of the
        steps are :class:`BlockedDEMove` (90 % of them with the block's
        default scale, 10 % with scale 1) and the rest the full-dimensional
        differential-evolution mixture.
    partial : sequence of callables or None, optional
        Per-block partial posteriors of :class:`BlockedDEMove`.
    """
    if blocks is None or len(blocks) < 2:
        return [(emcee.moves.DEMove(), 0.9), (emcee.moves.DEMove(gamma0=1.0), 0.1)]
    # fewer walkers than 2 n_dim are fine here: the block moves make the kernel irreducible
    full = [(emcee.moves.DEMove(live_dangerously=True), 0.9),
            (emcee.moves.DEMove(gamma0=1.0, live_dangerously=True), 0.1)]
    f = BLOCK_FRACTION
    return [(BlockedDEMove(blocks, partial=partial), 0.9 * f),
            (BlockedDEMove(blocks, gamma0=1.0, partial=partial), 0.1 * f),
            *[(m, w * (1.0 - f)) for m, w in full]]


class BlockedDEMove(emcee.moves.RedBlueMove):
    """Differential evolution on one block of coordinates at a time (see module docstring).

    Parameters
    ----------
    blocks : sequence of sequences of int
        Disjoint coordinate blocks; every coordinate should be in one (a
        coordinate in none is never moved by this move).
    gamma0 : float, optional
        Scale of the jump; default 2.38 / sqrt(2 n_block) of the chosen block.
    sigma : float
        Relative spread of the scale (as in emcee's ``DEMove``).
    partial : sequence of callables or None, optional
        One per block (None where there is none): a vectorised function
        ``g_b`` such that ``log_post(y) - log_post(x) = g_b(y) - g_b(x)``
        whenever ``x`` and ``y`` differ only in block ``b`` (e.g. the prior
        plus the likelihood of the data that block ``b`` alone predicts).
        A jump on block ``b`` is then scored as ``log_post(x) + g_b(y) -
        g_b(x)``, which is the same number up to round-off but costs only
        the part of the posterior that changes; blocks without one are
        scored by the full posterior.
    """

    def __init__(self, blocks, gamma0: float | None = None, sigma: float = 1.0e-5, partial=None, **kwargs):
        self.blocks = [np.asarray(b, dtype=int) for b in blocks]
        if not self.blocks or any(b.size == 0 for b in self.blocks):
            raise ValueError("BlockedDEMove needs non-empty blocks")
        flat = np.concatenate(self.blocks)
        if np.unique(flat).size != flat.size:
            raise ValueError("blocks of BlockedDEMove overlap")
        self.partial = list(partial) if partial is not None else [None] * len(self.blocks)
        if len(self.partial) != len(self.blocks):
            raise ValueError("BlockedDEMove needs one partial function (or None) per block")
        self.gamma0 = gamma0
        self.sigma = sigma
        self.n_partial_sets = 0
        self._choice = None
        kwargs.setdefault("live_dangerously", True)  # a block needs walkers > its size only
        super().__init__(**kwargs)

    def get_proposal(self, s, c, random):
        c = np.concatenate(c, axis=0)
        ns, _ = s.shape
        nc = c.shape[0]
        a = random.randint(nc, size=ns)
        b = (a + 1 + random.randint(nc - 1, size=ns)) % nc  # a different walker, uniformly
        # one block for this half of the ensemble (drawn independently of the state), so that
        # its part of the posterior is evaluated in one vectorised call
        k = int(random.randint(len(self.blocks)))
        block = self.blocks[k]
        g0 = self.gamma0 if self.gamma0 is not None else 2.38 / np.sqrt(2.0 * block.size)
        gamma = g0 * (1.0 + self.sigma * random.randn(ns, 1))
        q = s.copy()
        q[:, block] += gamma * (c[b][:, block] - c[a][:, block])
        self._choice = k
        return q, np.zeros(ns, dtype=np.float64)

    def _score(self, model, s, s_lp, q):
        """Log posterior of the proposals ``q`` (the rows ``s`` with one block moved)."""
        g = self.partial[self._choice]
        if g is None:
            return model.compute_log_prob_fn(q)[0]
        n = q.shape[0]
        both = g(np.concatenate([q, s]))
        self.n_partial_sets += 2 * n
        new, old = both[:n], both[n:]
        ok = np.isfinite(old) & np.isfinite(s_lp)
        with np.errstate(invalid="ignore"):
            out = np.where(ok, s_lp + new - old, -np.inf)
        if not ok.all():  # a walker off the support: score it by the whole posterior
            out[~ok] = model.compute_log_prob_fn(q[~ok])[0]
        return out

    def propose(self, model, state):
        """One update of each half of the ensemble (emcee's red-blue scheme) with block jumps."""
        nwalkers, _ = state.coords.shape
        accepted = np.zeros(nwalkers, dtype=bool)
        all_inds = np.arange(nwalkers)
        inds = all_inds % self.nsplits
        if self.randomize_split:
            model.random.shuffle(inds)
        for split in range(self.nsplits):
            s1 = inds == split
            sets = [state.coords[inds == j] for j in range(self.nsplits)]
            s = sets[split]
            c = sets[:split] + sets[split + 1:]
            q, factors = self.get_proposal(s, c, model.random)
            s_lp = state.log_prob[s1]
            new_lp = self._score(model, s, s_lp, q)
            lnpdiff = factors + new_lp - s_lp
            acc = lnpdiff > np.log(model.random.rand(lnpdiff.size))
            accepted[all_inds[s1][acc]] = True
            new_state = emcee.State(q, log_prob=new_lp, blobs=None)
            state = self.update(state, new_state, accepted, s1)
        return state, accepted


def parameter_blocks(space, *, owners: bool = False):
    """Coordinate blocks of a parameter space: one per companion (its own elements), one for the rest.

    A companion's block holds its period, eccentricity components, argument
    of periastron, mean longitude, mass ratio, and the inclination and node
    of its plane when no other companion shares that plane. The rest (shared
    block, last) holds the mass, the distance, the frame, the velocity levels
    and jitters, model-term parameters and the orientation of shared planes.

    Parameters
    ----------
    space : ParameterSpace
    owners : bool
        Also return, per block, the companion it belongs to (None for the
        shared block).

    Returns
    -------
    list of lists of int, or None
        None for a single companion (no blocking: the full-dimensional moves
        alone). With ``owners``, a pair (blocks, owner names).
    """
    if len(space.companions) < 2:
        return None
    own: dict[str, list[int]] = {}
    for lay in space.companions:
        idx = [int(i) for i in lay.idx.values() if i is not None and i >= 0]
        plane = space.planes[lay.plane]
        if len(plane["members"]) == 1:
            idx += [int(i) for i in (plane["i_var"], plane["node_var"]) if i is not None]
        if idx:
            own[lay.name] = sorted(idx)
    taken = {k for idx in own.values() for k in idx}
    shared = [k for k in range(space.ndim) if k not in taken]
    blocks = list(own.values()) + ([shared] if shared else [])
    names = list(own) + ([None] if shared else [])
    if len(blocks) < 2:
        return None
    return (blocks, names) if owners else blocks


def default_walkers(space) -> int:
    """Walker count for the block moves: ``max(64, 4 n)`` rounded up to even, ``n`` the largest block or the dimension.

    With blocked moves (:func:`parameter_blocks`) ``n`` is the largest block
    plus one (block moves need walkers beyond the block's size, not the whole
    dimension); without, the dimension.
    """
    blocks = parameter_blocks(space)
    n = space.ndim if blocks is None else max(len(b) for b in blocks) + 1
    walkers = max(64, 4 * n)
    return walkers + walkers % 2


def least_walkers(space) -> int:
    """Fewest walkers allowed: twice the largest block plus one with blocked moves, else twice the dimension."""
    blocks = parameter_blocks(space)
    return 2 * space.ndim if blocks is None else 2 * (max(len(b) for b in blocks) + 1)


@dataclass(frozen=True)
class SamplerOptions:
    """Options of a sampling run.

    Attributes
    ----------
    n_walkers : int or None
        Walkers; default :func:`default_walkers`.
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
    blocked : bool
        Use the block moves when the caller gives blocks; off by default (the
        full-dimensional moves alone, with ``max(64, 4 n_dim)`` walkers): on
        the four-star drifting-frame hard case they mixed the shared block
        more slowly (docs/performance.md). With it on, use
        :func:`default_walkers` walkers.
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
    blocked: bool = False


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
                checkpoint_seconds: float = 60.0, blocks=None, partial=None) -> SamplerRun:
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
    blocks : sequence of sequences of int, optional
        Coordinate blocks for :class:`BlockedDEMove` (see :func:`default_moves`).
    partial : sequence of callables or None, optional
        Per-block partial posteriors (see :class:`BlockedDEMove`); they count
        in ``n_evaluations`` (one parameter set each).

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
    moves = default_moves(blocks, partial) if options.blocked else default_moves()
    sampler = emcee.EnsembleSampler(n_walkers, n_dim, fn, vectorize=vectorize, moves=moves,
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
        n_evaluations=int(getattr(log_prob, "n_sets", 0) - n_eval_start
                          + sum(getattr(m, "n_partial_sets", 0) for m, _ in moves)),
        sampling_seconds=time.perf_counter() - t_start,
        interrupted=interrupted,
    )


class _Scalar:
    """Adapter: a vectorised posterior called one walker at a time (for pools)."""

    def __init__(self, fn):
        self.fn = fn

    def __call__(self, x):
        return float(self.fn(np.asarray(x)[None, :])[0])
