"""Convergence diagnostics against processes with known autocorrelation.

For an AR(1) process x_t = phi x_{t-1} + eps_t the autocorrelation is
rho_k = phi^k, so the integrated autocorrelation time is
tau = 1 + 2 sum_k phi^k = (1 + phi) / (1 - phi) (Sokal 1997, "Monte Carlo methods
in statistical mechanics", eq. 2.20 with rho_k = phi^k; a textbook identity).
"""

from __future__ import annotations

import numpy as np
import pytest

from orbitmass.core import diagnostics


def ar1(rng, phi, n_steps, n_chains, mean=0.0):
    x = np.empty((n_steps, n_chains))
    x[0] = rng.normal(0, 1 / np.sqrt(1 - phi**2), n_chains)
    eps = rng.normal(0, 1, (n_steps, n_chains))
    for t in range(1, n_steps):
        x[t] = phi * x[t - 1] + eps[t]
    return x + mean


@pytest.mark.parametrize("phi", [0.0, 0.5, 0.9])
def test_integrated_time_ar1(phi):
    rng = np.random.default_rng(11)
    x = ar1(rng, phi, 20000, 32)
    tau = diagnostics.integrated_time(x)[0]
    expected = (1 + phi) / (1 - phi)  # AR(1) identity, see module docstring
    assert tau == pytest.approx(expected, rel=0.08)


def test_bulk_ess_ar1():
    rng = np.random.default_rng(12)
    phi = 0.8
    n_steps, n_chains = 5000, 16
    x = ar1(rng, phi, n_steps, n_chains)
    expected = n_steps * n_chains * (1 - phi) / (1 + phi)  # N / tau, AR(1) identity
    ess = diagnostics.bulk_ess(x)[0]
    assert ess == pytest.approx(expected, rel=0.15)
    cons = diagnostics.effective_sample_size(x)[0]
    assert cons <= ess + 1e-9
    assert cons == pytest.approx(expected, rel=0.15)


def test_split_rhat_detects_unmixed_chains():
    # Vehtari et al. 2021 (Bayesian Analysis 16, 667): R-hat near 1 for chains
    # from one stationary distribution, clearly above 1.01 when chains disagree.
    rng = np.random.default_rng(13)
    good = ar1(rng, 0.5, 4000, 8)
    assert diagnostics.split_rhat(good)[0] < 1.01
    bad = good.copy()
    bad[:, :4] += 2.0  # two standard deviations apart
    assert diagnostics.split_rhat(bad)[0] > 1.1
    # a drifting chain (non-stationary) is caught by splitting halves
    drift = good + np.linspace(0, 3, good.shape[0])[:, None]
    assert diagnostics.split_rhat(drift)[0] > 1.1


def test_walker_modes_counts_separated_groups():
    # common practice, no source: walkers stuck in two period modes
    rng = np.random.default_rng(14)
    x = rng.normal(0, 0.01, (500, 40))
    assert diagnostics.walker_modes(x) == 1
    x[:, :15] += 1.0
    assert diagnostics.walker_modes(x) == 2


def test_autocorr_function_white_noise():
    rng = np.random.default_rng(15)
    rho = diagnostics.autocorr_function(rng.normal(size=(10000, 4)))
    assert rho[0] == pytest.approx(1.0)
    assert np.max(np.abs(rho[1:50])) < 0.05
