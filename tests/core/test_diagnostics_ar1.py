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


def _arviz():
    """arviz, imported with its import-time FutureWarning silenced (pytest turns warnings into errors)."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return pytest.importorskip("arviz")


def _reference_chains():
    rng = np.random.default_rng(21)
    stationary = ar1(rng, 0.5, 1000, 8)
    drifting = ar1(rng, 0.9, 501, 32) + np.linspace(0, 1, 501)[:, None]  # odd length: split drops a step
    tied = np.round(ar1(rng, 0.3, 400, 6), 1)  # many ties: average ranks
    skewed = np.exp(ar1(rng, 0.7, 300, 16))  # heavy right tail: the folded (tail) R-hat matters
    shifted = stationary.copy()
    shifted[:, :2] += 0.3  # two chains off by 0.3 sd
    return {"stationary": stationary, "drifting": drifting, "tied": tied, "skewed": skewed, "shifted": shifted}


@pytest.mark.parametrize("case", ["stationary", "drifting", "tied", "skewed", "shifted"])
def test_split_rhat_and_bulk_ess_match_arviz(case):
    # Reference: arviz.rhat(method="rank") and arviz.ess(method="bulk"), an independent
    # implementation of Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021, Bayesian
    # Analysis 16, 667): rank-normalised split R-hat = max(bulk, folded), bulk ESS with
    # Geyer's initial monotone sequence. arviz takes (chain, draw); we take (draw, chain).
    az = _arviz()
    x = _reference_chains()[case]
    assert diagnostics.split_rhat(x)[0] == pytest.approx(float(az.rhat(x.T, method="rank")), rel=1e-10)
    assert diagnostics.bulk_ess(x)[0] == pytest.approx(float(az.ess(x.T, method="bulk")), rel=1e-8)


def test_split_rhat_multivariate_matches_arviz_per_parameter():
    az = _arviz()  # same reference as above, three parameters at once
    chains = _reference_chains()
    x = np.stack([chains["stationary"][:300, :6], chains["tied"][:300], chains["skewed"][:300, :6]], axis=2)
    ours = diagnostics.split_rhat(x)
    ref = [float(az.rhat(x[:, :, d].T, method="rank")) for d in range(3)]
    assert ours == pytest.approx(ref, rel=1e-10)


def test_expected_split_rhat_of_a_stationary_chain_is_one_plus_tau_over_n():
    # For an AR(1) chain the split R-hat^2 ~ 1 + (tau - 1)/(n/2) ... i.e. R-hat ~ 1 + (tau - 1)/n for n
    # steps per chain (W ~ sigma^2, B/n ~ tau sigma^2 / (n/2) for the half-chains; Gelman et al.,
    # BDA3 ch. 11, with the AR(1) tau of the module docstring). This is why R-hat < 1.01
    # (Vehtari et al. 2021) asks for ~100 tau, twice what the 50-tau criterion of the contract does.
    rng = np.random.default_rng(22)
    phi = 0.9
    tau = (1 + phi) / (1 - phi)
    for n_tau, expected in ((50, 1.019), (100, 1.0095)):
        n = int(n_tau * tau)
        values = [diagnostics.split_rhat(ar1(rng, phi, n, 64))[0] for _ in range(6)]
        assert np.mean(values) == pytest.approx(1 + (tau - 1) / n, abs=0.0025)
        assert np.mean(values) == pytest.approx(expected, abs=0.0025)


def test_convergence_thresholds_are_the_contracts():
    # output contract (summary.json, "converged"): ESS >= 400, chain > 50 tau, R-hat < 1.01
    assert diagnostics.MIN_ESS == 400.0
    assert diagnostics.MIN_TAU_MULTIPLE == 50.0
    assert diagnostics.MAX_RHAT == 1.01


def test_convergence_failures_names_each_parameter_and_criterion():
    # common practice, no source: one phrase per missed criterion, nothing when all hold
    names = ["ln_mass", "C1.ln_period", "C1.cos_i"]
    failures = diagnostics.convergence_failures(names, tau=[10.0, 60.0, 12.0], ess=[5000.0, 300.0, 2000.0],
                                                rhat=[1.003, 1.012, 1.0099], n_kept=2000)
    assert failures == [
        "C1.ln_period: chain of 2000 steps is 33 autocorrelation times (tau 60.0; needs > 50)",
        "C1.ln_period: ESS 300 (needs >= 400)",
        "C1.ln_period: split R-hat 1.012 (needs < 1.01)",
    ]
    assert diagnostics.convergence_failures(names, [10.0] * 3, [900.0] * 3, [1.001] * 3, 2000) == []
    # NaN (not computed, e.g. after importance sampling) is not reported as a failure
    assert diagnostics.convergence_failures(["x"], [np.nan], [np.nan], [np.nan], 10) == []
