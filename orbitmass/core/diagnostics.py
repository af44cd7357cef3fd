"""Convergence diagnostics of ensemble chains: autocorrelation time, ESS, split R-hat.

All functions take a chain of shape ``(n_steps, n_walkers, n_dim)`` (or
``(n_steps, n_walkers)`` for one parameter) and keep no sampler state.

Estimators
----------
* Integrated autocorrelation time ``tau``: the walkers' autocovariances
  averaged, normalised, and summed with Sokal's (1997) automatic window
  (``c = 5``). emcee's ``autocorr.integrated_time`` averages the walkers'
  normalised autocorrelation functions instead; the two are the same
  estimator when the walkers have equal sample variance and differ by the
  weighting otherwise.
* Bulk effective sample size and rank-normalised split R-hat: Vehtari,
  Gelman, Simpson, Carpenter & Buerkner (2021, Bayesian Analysis 16, 667).
  Every walker is treated as a chain and split in halves; draws are
  rank-normalised; ESS uses Geyer's initial monotone sequence on the
  multi-chain autocorrelation. R-hat is the larger of the bulk and the
  folded (tail) value.
* The ESS reported for a parameter is the smaller of the bulk ESS and
  ``n_steps * n_walkers / tau``: walkers of an ensemble sampler are not
  independent chains, so neither estimate alone is trusted.

Convergence criteria (output contract)
--------------------------------------
:data:`MIN_ESS` (400) effective draws of every sampled parameter, a retained
chain longer than :data:`MIN_TAU_MULTIPLE` (50) autocorrelation times, and a
rank-normalised split R-hat below :data:`MAX_RHAT` (1.01, the threshold Vehtari
et al. 2021 recommend). For a stationary chain of ``n`` steps per walker the
expected split R-hat is about ``1 + (tau - 1) / n`` (measured on AR(1) chains in
``tests/core/test_diagnostics_ar1.py``), so the R-hat criterion asks for a chain of about
100 autocorrelation times; the 50-tau criterion alone would allow R-hat near
1.02. :func:`convergence_failures` names every parameter that misses one.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray
from scipy import special, stats

__all__ = [
    "autocorr_function",
    "integrated_time",
    "bulk_ess",
    "split_rhat",
    "effective_sample_size",
    "walker_modes",
    "convergence_failures",
    "MIN_ESS",
    "MIN_TAU_MULTIPLE",
    "MAX_RHAT",
]

#: Least effective sample size of every sampled parameter (output contract).
MIN_ESS = 400.0
#: The retained chain must be longer than this many autocorrelation times (output contract).
MIN_TAU_MULTIPLE = 50.0
#: Every rank-normalised split R-hat must be below this (Vehtari et al. 2021; output contract).
MAX_RHAT = 1.01


def _as3d(chain: NDArray[np.float64]) -> NDArray[np.float64]:
    chain = np.asarray(chain, dtype=float)
    if chain.ndim == 2:
        chain = chain[:, :, None]
    if chain.ndim != 3:
        raise ValueError(f"chain must have shape (n_steps, n_walkers[, n_dim]), got {chain.shape}")
    return chain


def autocorr_function(x: NDArray[np.float64]) -> NDArray[np.float64]:
    """Normalised autocorrelation function along axis 0 (FFT), averaged over axis 1.

    Parameters
    ----------
    x : ndarray, shape (n_steps, n_chains)

    Returns
    -------
    ndarray, shape (n_steps,)
    """
    x = np.asarray(x, dtype=float)
    n = x.shape[0]
    nfft = 1 << int(np.ceil(np.log2(2 * n)))
    xc = x - x.mean(axis=0)
    f = np.fft.rfft(xc, n=nfft, axis=0)
    acf = np.fft.irfft(f * np.conjugate(f), n=nfft, axis=0)[:n]
    acf = acf.mean(axis=1)
    if acf[0] <= 0:
        return np.zeros(n)
    return acf / acf[0]


def integrated_time(chain: NDArray[np.float64], c: float = 5.0) -> NDArray[np.float64]:
    """Integrated autocorrelation time per parameter, Sokal's window.

    Parameters
    ----------
    chain : ndarray, shape (n_steps, n_walkers, n_dim)
    c : float
        Window constant: the smallest M with M >= c * tau(M) is used.

    Returns
    -------
    ndarray, shape (n_dim,)
        tau in steps (at least 1).
    """
    chain = _as3d(chain)
    n_dim = chain.shape[2]
    taus = np.empty(n_dim)
    for d in range(n_dim):
        rho = autocorr_function(chain[:, :, d])
        tau_m = 2.0 * np.cumsum(rho) - 1.0
        window = np.arange(tau_m.size) < c * tau_m
        m = int(np.argmin(window)) if not window.all() else tau_m.size - 1
        taus[d] = max(tau_m[m], 1.0)
    return taus


def _rank_normalise(x: NDArray[np.float64]) -> NDArray[np.float64]:
    s = x.size
    flat = x.reshape(-1)
    order = np.argsort(flat, kind="stable")
    ranks = np.empty(s)
    ranks[order] = np.arange(1, s + 1, dtype=float)
    if np.any(flat[order][1:] == flat[order][:-1]):  # ties (e.g. rejected proposals): average ranks
        ranks = stats.rankdata(flat, method="average")
    return special.ndtri((ranks.reshape(x.shape) - 0.375) / (s + 0.25))


def _split(x: NDArray[np.float64]) -> NDArray[np.float64]:
    n = x.shape[0] // 2
    return np.concatenate([x[:n], x[x.shape[0] - n:]], axis=1)


def _rhat_basic(x: NDArray[np.float64]) -> float:
    n = x.shape[0]
    means = x.mean(axis=0)
    w = x.var(axis=0, ddof=1).mean()
    b = n * means.var(ddof=1)
    if w <= 0:
        return float("nan") if b > 0 else 1.0
    var_plus = (n - 1) / n * w + b / n
    return float(np.sqrt(var_plus / w))


def split_rhat(chain: NDArray[np.float64]) -> NDArray[np.float64]:
    """Rank-normalised split R-hat per parameter (max of bulk and tail).

    Parameters
    ----------
    chain : ndarray, shape (n_steps, n_walkers[, n_dim])
        Every walker is one chain, split in halves.

    Returns
    -------
    ndarray, shape (n_dim,)
        R-hat (Vehtari et al. 2021): about 1 for mixed chains; ``nan`` or a huge
        value when walkers do not move but disagree.
    """
    chain = _as3d(chain)
    out = np.empty(chain.shape[2])
    for d in range(chain.shape[2]):
        x = _split(chain[:, :, d])
        bulk = _rhat_basic(_rank_normalise(x))
        folded = np.abs(x - np.median(x))
        tail = _rhat_basic(_rank_normalise(folded))
        out[d] = max(bulk, tail)
    return out


def _ess_geyer(x: NDArray[np.float64]) -> float:
    """ESS of multi-chain draws ``x`` (n, m) with Geyer's initial monotone sequence."""
    n, m = x.shape
    if n < 4:
        return float(n * m)
    chain_var = x.var(axis=0, ddof=1)
    w = chain_var.mean()
    if w <= 0:
        return float(n * m)
    means = x.mean(axis=0)
    b_over_n = means.var(ddof=1) if m > 1 else 0.0
    var_plus = (n - 1) / n * w + b_over_n
    xc = x - means
    nfft = 1 << int(np.ceil(np.log2(2 * n)))
    f = np.fft.rfft(xc, n=nfft, axis=0)
    acov = np.fft.irfft(f * np.conjugate(f), n=nfft, axis=0)[:n] / n
    acov_mean = acov.mean(axis=1)
    rho = 1.0 - (w - acov_mean) / var_plus
    rho[0] = 1.0
    # Geyer's initial positive sequence: pairs (rho_{2k}, rho_{2k+1}) until a pair sums to
    # a negative value, then made monotone (Vehtari et al. 2021, Appendix A, as Stan does,
    # including the last positive even lag: it lowers the variance for antithetic chains)
    kept = np.zeros(n)
    kept[0], kept[1] = 1.0, rho[1]
    even, odd = 1.0, rho[1]
    t = 1
    while t < n - 3 and even + odd > 0.0:
        even, odd = rho[t + 1], rho[t + 2]
        if even + odd >= 0.0:
            kept[t + 1], kept[t + 2] = even, odd
        t += 2
    max_t = t - 2
    if even > 0.0:
        kept[max_t + 1] = even
    t = 1
    while t <= max_t - 2:
        if kept[t + 1] + kept[t + 2] > kept[t - 1] + kept[t]:
            kept[t + 1] = kept[t + 2] = 0.5 * (kept[t - 1] + kept[t])
        t += 2
    tau = -1.0 + 2.0 * kept[: max_t + 1].sum() + kept[max_t + 1: max_t + 2].sum()
    tau = max(tau, 1.0 / np.log10(n * m))
    return float(n * m / tau)


def bulk_ess(chain: NDArray[np.float64]) -> NDArray[np.float64]:
    """Rank-normalised bulk effective sample size per parameter (split chains).

    Parameters
    ----------
    chain : ndarray, shape (n_steps, n_walkers[, n_dim])

    Returns
    -------
    ndarray, shape (n_dim,)
        Bulk ESS (Vehtari et al. 2021), Geyer's initial monotone sequence.
    """
    chain = _as3d(chain)
    return np.array([_ess_geyer(_rank_normalise(_split(chain[:, :, d]))) for d in range(chain.shape[2])])


def effective_sample_size(chain: NDArray[np.float64], tau: NDArray[np.float64] | None = None) -> NDArray[np.float64]:
    """Conservative ESS per parameter: min(bulk ESS, n_steps * n_walkers / tau).

    Parameters
    ----------
    chain : ndarray, shape (n_steps, n_walkers[, n_dim])
    tau : ndarray, shape (n_dim,), optional
        Integrated autocorrelation times in steps; computed with
        :func:`integrated_time` when not given.

    Returns
    -------
    ndarray, shape (n_dim,)
    """
    chain = _as3d(chain)
    if tau is None:
        tau = integrated_time(chain)
    n_total = chain.shape[0] * chain.shape[1]
    return np.minimum(bulk_ess(chain), n_total / np.asarray(tau))


def walker_modes(x: NDArray[np.float64], min_walkers: int = 2, separation: float = 6.0) -> int:
    """Count separated modes among walkers for one parameter (e.g. ln period).

    Walkers are ordered by their mean over the chain; a gap between
    consecutive walker means larger than ``separation`` times the median
    within-walker standard deviation (and larger than 0.05 in the variable)
    separates modes, counted only when each side holds ``min_walkers`` walkers.

    Parameters
    ----------
    x : ndarray, shape (n_steps, n_walkers)
    min_walkers : int
        Walkers needed on each side of a gap for it to count.
    separation : float
        Gap, in median within-walker standard deviations, that separates modes.

    Returns
    -------
    int
        Number of modes (1 when the walkers form one group).
    """
    x = np.asarray(x, dtype=float)
    means = np.sort(x.mean(axis=0))
    scale = max(float(np.median(x.std(axis=0))), 1e-12)
    gaps = np.diff(means)
    cuts = np.nonzero((gaps > separation * scale) & (gaps > 0.05))[0]
    modes, last = 1, -1
    for c in cuts:
        left = c - last
        right = means.size - 1 - c
        if left >= min_walkers and right >= min_walkers:
            modes += 1
            last = c
    return modes


def convergence_failures(names, tau, ess, rhat, n_kept: int, *, min_ess: float = MIN_ESS,
                         min_tau_multiple: float = MIN_TAU_MULTIPLE, max_rhat: float = MAX_RHAT) -> list[str]:
    """Every convergence criterion a chain misses, one phrase per parameter and criterion.

    Parameters
    ----------
    names : sequence of str
        Sampled parameter names, shape (n_dim,).
    tau, ess, rhat : array_like, shape (n_dim,)
        Autocorrelation time (steps), effective sample size and split R-hat
        of each parameter; NaN where not computed (then that criterion is
        reported as not assessed).
    n_kept : int
        Retained steps per walker (after burn-in).
    min_ess, min_tau_multiple, max_rhat : float
        Thresholds (default: the output contract's).

    Returns
    -------
    list of str
        Empty when every criterion holds, e.g.
        ``["C1.ln_period: split R-hat 1.034 (needs < 1.01)"]``.

    Examples
    --------
    >>> convergence_failures(["a", "b"], [10.0, 30.0], [900.0, 350.0], [1.002, 1.02], 2000)
    ['b: ESS 350 (needs >= 400)', 'b: split R-hat 1.020 (needs < 1.01)']
    """
    out: list[str] = []
    tau = np.asarray(tau, dtype=float)
    ess = np.asarray(ess, dtype=float)
    rhat = np.asarray(rhat, dtype=float)
    for k, name in enumerate(names):
        if not np.isfinite(tau[k]):
            pass
        elif n_kept <= min_tau_multiple * tau[k]:
            out.append(f"{name}: chain of {int(n_kept)} steps is {n_kept / tau[k]:.0f} autocorrelation times "
                       f"(tau {tau[k]:.1f}; needs > {min_tau_multiple:g})")
        if np.isfinite(ess[k]) and ess[k] < min_ess:
            out.append(f"{name}: ESS {ess[k]:.0f} (needs >= {min_ess:g})")
        if np.isfinite(rhat[k]) and not rhat[k] < max_rhat:
            out.append(f"{name}: split R-hat {rhat[k]:.3f} (needs < {max_rhat:g})")
    return out
