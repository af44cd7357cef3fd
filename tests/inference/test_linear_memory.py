"""Bounded memory of the astrometry-only fast path (orbitmass.inference.linear) on long tables.

* the blocked normal equations (blocks over parameter sets and over epochs) against the
  same sums without blocks, and against a design matrix built from an independent Kepler
  solution (scipy.optimize.newton) and solved by numpy.linalg;
* the expansion to all elements with a solution passed in against the one it computes;
* the traced peak memory (tracemalloc) of the fast path's evaluation of many parameter
  sets on a long table against the block budget, where the unblocked arrays would be
  far larger.

Data: tables of an invented system simulated by the independent simulator of
validation/simulator.py (its own Kepler solver and rotation matrices), written by
benchmarks/bench_rows.py, which measures the same path at 1e3-1e5 rows.
"""

from __future__ import annotations

import math
import tracemalloc

import numpy as np
import pytest
from scipy import optimize

from benchmarks.bench_rows import SYSTEM, write_target  # tables simulated by validation/simulator.py
from orbitmass.inference.linear import BLOCK_ELEMENTS, LinearAstrometryPosterior, expand
from orbitmass.io.target import read_target
from orbitmass.model.parameters import ParameterSpace


def _sets(post: LinearAstrometryPosterior, n: int, seed: int = 3) -> np.ndarray:
    """``n`` parameter sets about the simulated orbit (periods 5-8 yr, e up to 0.6, any phase)."""
    rng = np.random.default_rng(seed)
    return post.to_theta(rng.uniform(5.0, 8.0, n), rng.uniform(0.0, 0.6, n), rng.uniform(0.0, 2 * math.pi, n))


@pytest.fixture(scope="module")
def small_space(tmp_path_factory) -> ParameterSpace:
    return ParameterSpace(read_target(write_target(tmp_path_factory.mktemp("rows"), 300)))


def _independent_beta(space: ParameterSpace, period_yr: float, ecc: float, m0: float) -> np.ndarray:
    """Weighted least-squares (A, B, F, G) from a design matrix: Kepler by scipy.optimize.newton, numpy.linalg."""
    astro = space.target.companions[0].astrometry
    t = np.asarray(astro.t_yr, float)
    mean = np.mod(m0 + 2 * math.pi * (t - space.t_ref) / period_yr, 2 * math.pi)
    big_e = optimize.newton(lambda x: x - ecc * np.sin(x) - mean, mean + ecc * np.sin(mean),
                            fprime=lambda x: 1 - ecc * np.cos(x), tol=1e-13, maxiter=100)
    x, y = np.cos(big_e) - ecc, math.sqrt(1 - ecc * ecc) * np.sin(big_e)
    zero = np.zeros_like(x)
    # rows: north_k = A X + F Y, east_k = B X + G Y (columns A, B, F, G)
    design = np.concatenate([np.stack([x, zero, y, zero], axis=1), np.stack([zero, x, zero, y], axis=1)])
    data = np.concatenate([np.asarray(astro.value2, float), np.asarray(astro.value1, float)])
    w = 1.0 / np.concatenate([np.asarray(astro.err2, float), np.asarray(astro.err1, float)]) ** 2
    return np.linalg.solve(design.T @ (w[:, None] * design), design.T @ (w * data))


@pytest.mark.parametrize("block", [7, 37, 900, 20_000])  # epoch blocks of one set; one set; 3 sets; 66 sets
def test_blocked_solve_equals_unblocked(small_space, block):
    whole = LinearAstrometryPosterior(small_space, rng=np.random.default_rng(5), block_elements=10**12)
    part = LinearAstrometryPosterior(small_space, rng=np.random.default_rng(5), block_elements=block)
    theta = _sets(whole, 200)
    a, b = whole.solve(theta), part.solve(theta)
    # rounding only: sums over epochs taken in another grouping (common practice, no source)
    np.testing.assert_allclose(b["beta_hat"], a["beta_hat"], rtol=1e-12, atol=1e-12 * np.abs(a["beta_hat"]).max())
    np.testing.assert_allclose(b["log_det"], a["log_det"], rtol=1e-12)
    # chi2_min = chi2(beta=0) - |z|^2: its rounding is that of chi2(beta=0)
    np.testing.assert_allclose(b["chi2_min"], a["chi2_min"], rtol=0, atol=1e-12 * whole.chi2_0)
    np.testing.assert_array_equal(b["ok"], a["ok"])
    lp_a, lp_b = whole(theta), part(theta)
    np.testing.assert_allclose(lp_b, lp_a, rtol=0, atol=1e-12 * whole.chi2_0)
    # against an independent least-squares solution (scipy Kepler solver, numpy normal equations)
    for k in (0, 77, 199):
        period, ecc, m0 = (float(v[k]) for v in part.physical(theta))
        ref = _independent_beta(small_space, period, ecc, m0)
        np.testing.assert_allclose(b["beta_hat"][k], ref, rtol=1e-9, atol=1e-9 * np.abs(ref).max())


def test_log_density_and_solution_matches_call_and_expand(small_space):
    post = LinearAstrometryPosterior(small_space, rng=np.random.default_rng(5), block_elements=500)
    theta = _sets(post, 150)
    theta[:5, 1] = 1.2  # e > 1: outside the prior, density -inf on both routes
    lp, sol = post.log_density_and_solution(theta)
    ref = post(theta)
    assert np.all(np.isneginf(lp[:5])) and np.all(np.isneginf(ref[:5]))
    np.testing.assert_allclose(lp[5:], ref[5:], rtol=0, atol=1e-12 * post.chi2_0)
    full_a, lw_a, _ = expand(post, theta, np.random.default_rng(11))
    full_b, lw_b, _ = expand(post, theta, np.random.default_rng(11), solution=sol)
    np.testing.assert_array_equal(full_a, full_b)
    np.testing.assert_array_equal(lw_a, lw_b)


def test_many_sets_on_a_long_table_stay_within_the_block_budget(tmp_path):
    n_rows, n_sets = 20_000, 500
    space = ParameterSpace(read_target(write_target(tmp_path, n_rows)))
    post = LinearAstrometryPosterior(space, rng=np.random.default_rng(5))
    theta = _sets(post, n_sets)
    orb = SYSTEM.orbits["m"]  # the simulated orbit as set 0; M0 at the reference epoch 2017
    theta[0] = post.to_theta(orb.period_yr, orb.ecc, 2 * math.pi * (2017.0 - orb.tp_jyear) / orb.period_yr)[0]
    unblocked_array_mb = n_sets * n_rows * 8 / 1e6  # one float64 (set x epoch) array: 80 MB
    budget_mb = 16 * BLOCK_ELEMENTS * 8 / 1e6  # sixteen block-sized arrays, about 8.4 MB
    tracemalloc.start()
    try:
        lp, _ = post.log_density_and_solution(theta)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    peak_mb = peak / 1e6
    assert unblocked_array_mb > 9 * budget_mb  # the check could fail: unblocked needs many times more
    assert peak_mb < budget_mb, f"peak {peak_mb:.1f} MB above the budget of {budget_mb:.1f} MB"
    # the values are still right: the simulated orbit (validation/simulator.py truth) beats every
    # other set, drawn at random about it
    assert int(np.argmax(lp)) == 0


def test_expanded_log_likelihood_is_exact_without_a_second_pass(small_space):
    """expand()'s closed-form log likelihood, const - (chi2_min + |zeta|^2)/2, against two direct evaluations."""
    from orbitmass.model.likelihood import LogPosterior

    post = LinearAstrometryPosterior(small_space, rng=np.random.default_rng(5))
    theta = _sets(post, 40)
    full, _, info = expand(post, theta, np.random.default_rng(2))
    ll = info["log_likelihood"]
    space = small_space.with_windows(small_space.windows_from(full))
    direct = LogPosterior(space).log_likelihood(space.wrap_angles(full))
    np.testing.assert_allclose(ll, direct, rtol=1e-10, atol=1e-8)
    # independent: design matrix with scipy's Newton Kepler solve, Gaussian density summed by numpy
    # (independent errors in this table; common practice, no source)
    astro = small_space.target.companions[0].astrometry
    t = np.asarray(astro.t_yr, float)
    data = np.concatenate([np.asarray(astro.value2, float), np.asarray(astro.value1, float)])
    sig = np.concatenate([np.asarray(astro.err2, float), np.asarray(astro.err1, float)])
    for k in (0, 13, 39):
        period, ecc, m0 = (float(v[k]) for v in post.physical(theta))
        mean = np.mod(m0 + 2 * math.pi * (t - small_space.t_ref) / period, 2 * math.pi)
        big_e = optimize.newton(lambda x: x - ecc * np.sin(x) - mean, mean + ecc * np.sin(mean),
                                fprime=lambda x: 1 - ecc * np.cos(x), tol=1e-13, maxiter=100)
        x, y = np.cos(big_e) - ecc, math.sqrt(1 - ecc * ecc) * np.sin(big_e)
        a_, b_, f_, g_ = info["beta"][k]
        model = np.concatenate([a_ * x + f_ * y, b_ * x + g_ * y])  # north, east
        ref = float(np.sum(-0.5 * ((data - model) / sig) ** 2 - np.log(sig) - 0.5 * math.log(2 * math.pi)))
        assert ll[k] == pytest.approx(ref, rel=1e-10, abs=1e-7)


@pytest.mark.parametrize("method", ["importance", "auto"])
def test_stop_request_during_importance_sampling_keeps_the_draws_solved(tmp_path, monkeypatch, method):
    """A stop request inside the importance draws ends them within one batch; the run says interrupted."""
    from orbitmass.inference import linear
    from orbitmass.inference.sampler import SamplerOptions

    space = ParameterSpace(read_target(write_target(tmp_path, 2000)))
    calls = {"n": 0, "armed": False}
    real = linear.LinearAstrometryPosterior.log_density_and_solution

    def counting(self, theta):
        calls["n"] += 1
        calls["armed"] = True  # the stop request arrives while the first batch is solved
        return real(self, theta)

    monkeypatch.setattr(linear.LinearAstrometryPosterior, "log_density_and_solution", counting)
    theta, lp, info = linear.fit_linear(space, np.random.default_rng(1),
                                        SamplerOptions(progress=False, max_retained=40_000),
                                        method=method, stop_flag=lambda: calls["armed"])
    per = max(64, linear.BLOCK_ELEMENTS * 4 // 2000)
    assert calls["n"] == 1  # one batch, not 40000 / per of them
    assert info["run"].interrupted and not info["run"].converged
    assert info["diagnostics"]["n_weighted"] == per < 40_000
    assert theta.shape[0] == per and np.all(np.isfinite(lp))
