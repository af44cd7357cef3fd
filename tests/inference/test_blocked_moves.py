"""Blocked differential-evolution moves leave the posterior unchanged.

Checks against outside references:

* a correlated 12-D multivariate normal (blocks of 4 coordinates, correlations
  inside and across blocks): moments and marginal distributions of the chain
  against the exact ones, the marginals by a Kolmogorov-Smirnov test against
  ``scipy.stats.norm`` (draws thinned by the autocorrelation time so that they
  are nearly independent); the invariance of a Metropolis kernel with a
  symmetric proposal is Metropolis et al. (1953) / Hastings (1970), and the
  test follows the common practice of checking an MCMC move on a Gaussian
  (common practice, no source);
* the part of the posterior a companion's block move evaluates differs from
  the whole posterior by a term that does not depend on that companion;
* a two-companion joint fit sampled with the block moves and with the plain
  full-dimensional moves from the same start: the same quantiles within Monte
  Carlo error (the plain moves are the reference here, themselves checked
  against known distributions in ``tests/test_sampler.py``).
"""

from __future__ import annotations

import emcee
import numpy as np
import pytest
from scipy import stats

from orbitmass.inference.sampler import (
    BlockedDEMove,
    SamplerOptions,
    default_moves,
    default_walkers,
    parameter_blocks,
    run_sampler,
)

BLOCKS = [[0, 1, 2, 3], [4, 5, 6, 7], [8, 9, 10, 11]]


class Gaussian:
    """Vectorised log density of N(mean, cov) up to a constant."""

    def __init__(self, mean, cov):
        self.mean = np.asarray(mean, float)
        self.prec = np.linalg.inv(cov)
        self.n_sets = 0

    def __call__(self, x):
        self.n_sets += len(x)
        d = x - self.mean
        return -0.5 * np.einsum("ni,ij,nj->n", d, self.prec, d)


def _correlated_normal(d, rng):
    a = rng.normal(size=(d, d))
    scales = np.exp(rng.uniform(-2.0, 2.0, d))
    spd = a @ a.T + 0.5 * d * np.eye(d)  # symmetric positive definite, strong correlations
    corr = spd / np.sqrt(np.outer(np.diag(spd), np.diag(spd)))
    return rng.normal(0.0, 3.0, d), corr * np.outer(scales, scales)


def _check_against_normal(x, mean, cov, ess):
    sd_true = np.sqrt(np.diag(cov))
    # Monte Carlo error of a mean: sd / sqrt(ESS); of a standard deviation: sd / sqrt(2 ESS) (common practice)
    assert np.all(np.abs(x.mean(axis=0) - mean) < 4.5 * sd_true / np.sqrt(ess))
    ratio = x.std(axis=0) / sd_true
    assert np.all(np.abs(ratio - 1.0) < 4.5 / np.sqrt(2.0 * ess))
    # correlation matrix: error of a correlation about (1 - r^2) / sqrt(ESS) (common practice); 5 of them
    r_true = cov / np.outer(sd_true, sd_true)
    r = np.corrcoef(x.T)
    assert np.all(np.abs(r - r_true) < 5.0 * (1.0 - r_true**2) / np.sqrt(ess) + 1e-9)
    # marginals against scipy.stats.norm: the KS distance of all draws, its p-value for ESS
    # independent draws (the draws are autocorrelated and the walkers dependent; taking the
    # effective sample size as the sample size is common practice, no source)
    pvals = [stats.kstwo.sf(stats.kstest(x[:, k], stats.norm(mean[k], sd_true[k]).cdf).statistic, int(ess))
             for k in range(mean.size)]
    # 12 tests: the smallest p-value of 12 independent uniforms is below 1e-3 with probability 1.2 %
    assert min(pvals) > 1e-3, pvals


def test_block_moves_alone_sample_a_correlated_normal():
    rng = np.random.default_rng(11)
    mean, cov = _correlated_normal(12, rng)
    target = Gaussian(mean, cov)
    n_walkers = 16  # fewer than the dimension: only block moves can mix with that
    p0 = rng.multivariate_normal(mean, cov, size=n_walkers)
    sampler = emcee.EnsembleSampler(n_walkers, 12, target, vectorize=True,
                                    moves=[(BlockedDEMove(BLOCKS), 0.9), (BlockedDEMove(BLOCKS, gamma0=1.0), 0.1)])
    sampler.random_state = np.random.RandomState(4).get_state()
    sampler.run_mcmc(p0, 24000, progress=False)
    chain = sampler.get_chain(discard=4000)
    from orbitmass.core import diagnostics  # local: only this test needs the estimators directly
    tau = diagnostics.integrated_time(chain)
    ess = float(np.min(diagnostics.effective_sample_size(chain, tau)))
    assert ess > 1000
    assert np.max(diagnostics.split_rhat(chain)) < 1.01
    _check_against_normal(chain.reshape(-1, 12), mean, cov, ess)


def test_default_mixture_with_blocks_converges_on_a_correlated_normal():
    rng = np.random.default_rng(12)
    mean, cov = _correlated_normal(12, rng)
    target = Gaussian(mean, cov)
    p0 = rng.multivariate_normal(mean, 1e-4 * cov, size=20)  # a tight start, as from a polish
    run = run_sampler(target, p0, seed=5, options=SamplerOptions(max_steps=30000, progress=False, blocked=True),
                      blocks=BLOCKS)
    assert run.converged
    x, _ = run.retained()
    _check_against_normal(x, mean, cov, float(np.min(run.ess)))


def test_block_move_changes_one_block_per_walker():
    rng = np.random.RandomState(3)
    move = BlockedDEMove(BLOCKS)
    s = np.zeros((50, 12))
    c = [np.random.default_rng(1).normal(size=(40, 12))]
    q, factors = move.get_proposal(s, c, rng)
    assert np.all(factors == 0.0)  # symmetric proposal
    changed = {k for k, block in enumerate(BLOCKS) if np.any(q[:, block] != 0.0)}
    assert len(changed) == 1  # one block per half-ensemble update
    assert np.all(q[:, BLOCKS[changed.pop()]] != 0.0)
    with pytest.raises(ValueError, match="overlap"):
        BlockedDEMove([[0, 1], [1, 2]])


def test_moves_without_blocks_are_the_plain_mixture():
    moves = default_moves(None)
    assert all(isinstance(m, emcee.moves.DEMove) for m, _ in moves)
    assert sum(w for _, w in default_moves(BLOCKS)) == pytest.approx(1.0)


def _joint_target(tmp_path, n_comp):
    from benchmarks.bench_scaling import joint_problem  # local: the benchmark's problem builder
    from orbitmass import read_target  # local: only the joint-fit tests read a target

    return read_target(joint_problem(tmp_path, n_comp).target)


def test_parameter_blocks_of_a_joint_fit(tmp_path):
    from orbitmass.inference.pipeline import build_space  # local: tests of the sampler alone do not need it

    space = build_space(_joint_target(tmp_path, 3))
    blocks = parameter_blocks(space)
    names = [[space.names[k] for k in b] for b in blocks]
    assert len(blocks) == 4
    for k, comp in enumerate(("S1", "S2", "S3")):
        assert all(n.startswith(comp + ".") for n in names[k])
        assert len(names[k]) == 6  # cos i, node, ln P, two eccentricity components, mean longitude
    assert "ln_mass" in names[-1] and "ln_distance" in names[-1]
    assert sorted(k for b in blocks for k in b) == list(range(space.ndim))
    assert default_walkers(space) == 64
    single = build_space(_joint_target(tmp_path / "one", 1))
    assert parameter_blocks(single) is None


def test_companion_score_equals_the_whole_posterior_difference(tmp_path):
    # the log-likelihood is a sum over the companions' rows, so moving one companion's elements
    # changes only its own rows and the prior (common practice, no source); checked on prior draws
    from orbitmass.inference.pipeline import block_posteriors, build_space  # local: fit-level test
    from orbitmass.model.likelihood import LogPosterior  # local: fit-level test

    space = build_space(_joint_target(tmp_path, 3))
    post = LogPosterior(space)
    blocks, partial = block_posteriors(post)
    assert partial[-1] is None  # the shared block is scored by the whole posterior
    rng = np.random.default_rng(6)
    x = space.sample_prior(rng, 20)
    for block, part in zip(blocks[:-1], partial[:-1]):
        y = x.copy()
        y[:, block] = space.sample_prior(rng, 20)[:, block]
        whole = post(y) - post(x)
        assert np.all(np.isfinite(whole))
        scale = np.abs(post(y)) + np.abs(post(x))
        assert np.all(np.abs((part(y) - part(x)) - whole) <= 1e-12 * scale)


@pytest.mark.slow
def test_joint_fit_same_quantiles_with_block_moves(tmp_path):
    from orbitmass.inference.initialise import initialise_walkers  # local: fit-level test
    from orbitmass.inference.pipeline import block_posteriors, build_space  # local: fit-level test
    from orbitmass.model.likelihood import LogPosterior  # local: fit-level test

    space = build_space(_joint_target(tmp_path, 2))
    post = LogPosterior(space)
    init = initialise_walkers(post, 64, np.random.default_rng(2))
    space = space.with_windows(init.windows)
    post = post.with_space(space)
    opts = SamplerOptions(progress=False)
    plain = run_sampler(post, init.walkers, seed=8, options=opts)
    blocks, partial = block_posteriors(post)  # as the pipeline samples: companion-only scores
    blocked = run_sampler(post, init.walkers, seed=9, options=SamplerOptions(progress=False, blocked=True),
                          blocks=blocks, partial=partial)
    assert plain.converged and blocked.converged
    xp, _ = plain.retained()
    xb, _ = blocked.retained()
    for k, name in enumerate(space.names):
        sd = xp[:, k].std()
        # MC error of a quantile ~ sqrt(p(1-p)/ESS)/density; for a near-normal marginal about
        # 1.25 sd / sqrt(ESS) at the median and 1.6 sd / sqrt(ESS) at the 16/84 % points
        # (common practice, no source); the two runs' errors add in quadrature, 4.5 of them
        err = np.hypot(1.0 / np.sqrt(plain.ess[k]), 1.0 / np.sqrt(blocked.ess[k]))
        qp = np.percentile(xp[:, k], [16, 50, 84])
        qb = np.percentile(xb[:, k], [16, 50, 84])
        assert np.all(np.abs(qp - qb) < 4.5 * 1.6 * sd * err), (name, qp, qb)
