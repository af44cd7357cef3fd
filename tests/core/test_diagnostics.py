"""Unit tests of orbitmass.core.diagnostics that tests/core/test_diagnostics_ar1.py does not have.

tests/core/test_diagnostics_ar1.py checks the estimators against AR(1) identities; this file checks
them against the reference implementations directly:
- emcee ``autocorr.function_1d`` and ``autocorr.integrated_time`` (Foreman-Mackey et al. 2013,
  PASP 125, 306; Sokal 1997 window, c = 5);
- ArviZ ``ess(method="bulk")`` and ``rhat(method="rank")`` (Vehtari, Gelman, Simpson,
  Carpenter & Buerkner 2021, Bayesian Analysis 16, 667), when ArviZ is installed;
plus the shape contract and the degenerate (constant) chains.
"""

from __future__ import annotations

import emcee
import numpy as np
import pytest

from orbitmass.core import diagnostics


def _ar1(rng, phi, n_steps, n_chains):
    # x_t = phi x_{t-1} + eps_t, started in its stationary distribution N(0, 1 / (1 - phi^2))
    x = np.empty((n_steps, n_chains))
    x[0] = rng.normal(0, 1 / np.sqrt(1 - phi**2), n_chains)
    eps = rng.normal(0, 1, (n_steps, n_chains))
    for t in range(1, n_steps):
        x[t] = phi * x[t - 1] + eps[t]
    return x


def test_autocorr_function_matches_emcee_for_one_walker():
    # emcee.autocorr.function_1d: FFT estimate of the normalised autocorrelation
    rng = np.random.default_rng(101)
    x = _ar1(rng, 0.8, 3000, 1)
    ours = diagnostics.autocorr_function(x)
    np.testing.assert_allclose(ours, emcee.autocorr.function_1d(x[:, 0]), rtol=0, atol=1e-13)


def _standardised(x):
    # each walker scaled to zero mean and unit variance: the normalised autocorrelation of a
    # walker does not change, and walkers then weigh equally in both averaging conventions
    return (x - x.mean(axis=0)) / x.std(axis=0)


@pytest.mark.parametrize("phi", [0.3, 0.6, 0.9, 0.95])
@pytest.mark.parametrize("c", [3.0, 5.0, 10.0])
def test_integrated_time_matches_emcee(phi, c):
    # emcee.autocorr.integrated_time, same window constant c. emcee averages the walkers'
    # normalised autocorrelation functions, we normalise the averaged autocovariance; on
    # walkers of equal sample variance the two are the same estimator (measured: 9e-16
    # relative over 60 AR(1) ensembles). On raw walkers they differ by the variance
    # weighting (measured up to 23% for short phi = 0.95 chains), so compare standardised ones.
    rng = np.random.default_rng(102)
    x = _standardised(_ar1(rng, phi, 3000, 16))
    ref = emcee.autocorr.integrated_time(x[:, :, None], c=c, tol=0, quiet=True)
    np.testing.assert_allclose(diagnostics.integrated_time(x, c=c), ref, rtol=1e-12)


def test_integrated_time_is_at_least_one():
    # documented floor: white noise can give emcee's estimate slightly below 1 step
    rng = np.random.default_rng(103)
    x = _standardised(rng.normal(size=(4000, 16)))
    ref = emcee.autocorr.integrated_time(x[:, :, None], c=5, tol=0, quiet=True)[0]
    assert diagnostics.integrated_time(x)[0] == pytest.approx(max(ref, 1.0), rel=1e-12)


CASES = [
    # phi, n_steps, n_walkers, shift of half the walkers (in units of the AR(1) innovation sd)
    (0.0, 1000, 8, 0.0),
    (0.5, 2001, 12, 0.0),  # odd length: the middle draw is dropped when splitting
    (0.9, 3000, 32, 0.0),
    (0.95, 500, 20, 0.0),
]


@pytest.mark.parametrize(("phi", "n_steps", "n_walkers", "shift"), CASES)
def test_bulk_ess_and_rhat_match_arviz(phi, n_steps, n_walkers, shift):
    # ArviZ ess(method="bulk") and rhat(method="rank") (Vehtari et al. 2021), chains = walkers.
    # Measured over 20 seeds of these cases and of the two below: R-hat equal to 4e-16; bulk
    # ESS within 7.5e-3 relative (an implementation difference, probably where Geyer's sum of
    # autocorrelation pairs is cut; not investigated further), 1.5e-2 allowed.
    az = pytest.importorskip("arviz")
    rng = np.random.default_rng(104)
    x = _ar1(rng, phi, n_steps, n_walkers)
    x[:, : n_walkers // 2] += shift
    assert diagnostics.bulk_ess(x)[0] == pytest.approx(float(az.ess(x.T, method="bulk")), rel=1.5e-2)
    assert diagnostics.split_rhat(x)[0] == pytest.approx(float(az.rhat(x.T, method="rank")), rel=1e-12)


@pytest.mark.parametrize("shift", [0.5, 2.0])
def test_unmixed_chains_match_arviz(shift):
    # ArviZ again, on walkers that disagree (tolerances as above)
    az = pytest.importorskip("arviz")
    rng = np.random.default_rng(105)
    x = _ar1(rng, 0.5, 2000, 8)
    x[:, :4] += shift
    assert diagnostics.split_rhat(x)[0] == pytest.approx(float(az.rhat(x.T, method="rank")), rel=1e-12)
    assert diagnostics.bulk_ess(x)[0] == pytest.approx(float(az.ess(x.T, method="bulk")), rel=1.5e-2)
    assert diagnostics.split_rhat(x)[0] > 1.01  # and both call them unconverged


def test_several_parameters_are_independent():
    # each parameter column gives what it gives alone
    rng = np.random.default_rng(106)
    chain = np.stack([_ar1(rng, phi, 2000, 10) for phi in (0.1, 0.5, 0.9)], axis=2)
    for fn in (diagnostics.integrated_time, diagnostics.bulk_ess, diagnostics.split_rhat,
               diagnostics.effective_sample_size):
        together = fn(chain)
        assert together.shape == (3,)
        for d in range(3):
            assert together[d] == pytest.approx(fn(chain[:, :, d])[0], rel=1e-14)


def test_effective_sample_size_is_the_smaller_estimate():
    # module docstring: min(bulk ESS, n_steps * n_walkers / tau)
    rng = np.random.default_rng(107)
    x = _ar1(rng, 0.7, 3000, 12)
    n_total = x.size
    tau = diagnostics.integrated_time(x)
    bulk = diagnostics.bulk_ess(x)
    assert diagnostics.effective_sample_size(x)[0] == pytest.approx(min(bulk[0], n_total / tau[0]), rel=1e-14)
    # an externally given tau is used as is
    assert diagnostics.effective_sample_size(x, tau=np.array([1e6]))[0] == pytest.approx(n_total / 1e6)
    assert diagnostics.effective_sample_size(x, tau=np.array([1.0]))[0] == pytest.approx(bulk[0], rel=1e-14)


@pytest.mark.parametrize("shape", [(10,), (4, 3, 2, 1)])
def test_chain_shape_is_checked(shape):
    for fn in (diagnostics.integrated_time, diagnostics.bulk_ess, diagnostics.split_rhat,
               diagnostics.effective_sample_size):
        with pytest.raises(ValueError, match=r"chain must have shape \(n_steps, n_walkers\[, n_dim\]\)"):
            fn(np.zeros(shape))


def test_constant_chain():
    # a parameter that never moves: no autocorrelation to estimate, R-hat 1 (no disagreement)
    x = np.full((200, 8), 3.5)
    assert np.all(diagnostics.autocorr_function(x) == 0.0)
    assert diagnostics.integrated_time(x)[0] == 1.0
    assert diagnostics.split_rhat(x)[0] == 1.0
    assert np.isfinite(diagnostics.bulk_ess(x)[0])


def test_walkers_stuck_at_different_constants_are_not_converged():
    # no within-walker spread but different walker values: R-hat must not pass the 1.01
    # criterion of the output contract (nan or a huge value both fail "< 1.01")
    x = np.repeat(np.arange(8.0)[None, :], 200, axis=0)
    assert not diagnostics.split_rhat(x)[0] < 1.01


def test_walker_modes_ignores_single_strays():
    # a group needs min_walkers walkers on each side of the gap to count as a mode
    rng = np.random.default_rng(108)
    x = rng.normal(0, 0.01, (400, 30))
    x[:, 0] += 1.0  # one stray walker
    assert diagnostics.walker_modes(x) == 1
    assert diagnostics.walker_modes(x, min_walkers=1) == 2
    x[:, 1] += 1.0
    assert diagnostics.walker_modes(x) == 2
    # three separated groups
    x[:, 10:20] += 3.0
    assert diagnostics.walker_modes(x) == 3


def test_walker_modes_gap_must_exceed_absolute_floor():
    # gaps below 0.05 in the variable never separate modes, however small the walker spread
    x = np.zeros((100, 20))
    x[:, :10] += 0.04
    assert diagnostics.walker_modes(x) == 1
    x[:, :10] += 0.02
    assert diagnostics.walker_modes(x) == 2
