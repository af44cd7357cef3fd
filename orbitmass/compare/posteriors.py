"""Mass posteriors of runs: samples, a kernel density estimate, and turning runs into them.

:class:`MassPosterior` holds the mass samples of one run (and the radii its
companions probe); :func:`as_posterior` makes one from a
:class:`~orbitmass.fit.Fit`, :class:`~orbitmass.results.Results` or a run folder.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import signal

from orbitmass.exceptions import InputError
from orbitmass.fit import Fit, load
from orbitmass.results import Results, quantile_block

__all__ = ["MassPosterior", "RunLike", "as_posterior", "as_posteriors", "check_labels", "unique_labels",
           "KDE_GRID_POINTS"]

#: points of the grid of the kernel density estimate
KDE_GRID_POINTS = 4096

@dataclass(frozen=True, eq=False)
class MassPosterior:
    """Mass samples of one run, and the radii each companion probes.

    Attributes
    ----------
    label : str
        Name in tables and figures.
    mass_msun : ndarray, shape (n,)
        Posterior samples of the total mass (Msun).
    n_eff : float
        Effective sample size of the mass (the fit's ESS when known).
    radii : dict
        Companion name -> {``"semimajor_axis_au"``, ``"periastron_au"``,
        ``"periastron_rs"``} -> samples, shape (n,).
    target : str
        Target name.
    source : str
        Run folder it was read from, or ``""``.
    converged : bool or None
        Convergence flag of the fit, when known.
    results : Results or None
        The full posterior, when available (needed for a joint refit).
    """

    label: str
    mass_msun: NDArray[np.float64]
    n_eff: float
    radii: dict[str, dict[str, NDArray[np.float64]]] = field(default_factory=dict)
    target: str = ""
    source: str = ""
    converged: bool | None = None
    results: Results | None = field(default=None, repr=False, compare=False)

    @classmethod
    def from_samples(
        cls,
        label: str,
        mass_msun: ArrayLike,
        *,
        n_eff: float | None = None,
        radii: Mapping[str, Mapping[str, ArrayLike]] | None = None,
        target: str = "",
    ) -> MassPosterior:
        """From plain mass samples (Msun); ``n_eff`` defaults to the number of samples.

        Raises
        ------
        InputError
            On fewer than two finite samples or a non-positive mass.
        """
        m = np.asarray(mass_msun, dtype=float).ravel()
        m = m[np.isfinite(m)]
        if m.size < 2:
            raise InputError(f"run {label!r}: fewer than two finite mass samples", key="mass_msun")
        if np.any(m <= 0):
            raise InputError(f"run {label!r}: mass samples must be positive (Msun)", key="mass_msun")
        rad = {c: {k: np.asarray(v, dtype=float) for k, v in d.items()} for c, d in (radii or {}).items()}
        n = float(m.size) if n_eff is None else float(min(n_eff, m.size))
        return cls(label=label, mass_msun=m, n_eff=n, radii=rad, target=target)

    @classmethod
    def from_results(cls, results: Results, label: str, *, source: str = "") -> MassPosterior:
        """From the posterior of a fit; ``n_eff`` = the fit's mass ESS (at most the sample size)."""
        s = results.samples
        mass = s["mass_msun"].to_numpy(dtype=float)
        diag = results.summary.get("diagnostics", {}) if isinstance(results.summary, dict) else {}
        ess = diag.get("ess_mass")
        n_eff = float(mass.size) if ess is None or not math.isfinite(float(ess)) else min(float(ess), mass.size)
        radii = {}
        for c in results.companion_names:
            cols = {k: f"{c}.{k}" for k in ("semimajor_axis_au", "periastron_au", "periastron_rs")}
            if all(col in s.columns for col in cols.values()):
                radii[c] = {k: s[col].to_numpy(dtype=float) for k, col in cols.items()}
        conv = diag.get("converged")
        return cls(
            label=label,
            mass_msun=mass,
            n_eff=max(n_eff, 1.0),
            radii=radii,
            target=results.target.name,
            source=source,
            converged=None if conv is None else bool(conv),
            results=results,
        )

    def quantiles(self) -> dict[str, float]:
        """Quantile block of the mass (Msun)."""
        return quantile_block(self.mass_msun)

    # the same small interface as Reference
    def mean(self) -> float:
        """Sample mean of the mass (Msun)."""
        return float(np.mean(self.mass_msun))

    def variance(self) -> float:
        """Sample variance of the mass (Msun^2, ``ddof=1``)."""
        return float(np.var(self.mass_msun, ddof=1))

    def cdf(self, mass_msun: ArrayLike) -> NDArray[np.float64]:
        """Empirical distribution function at ``mass_msun``, ties counted half."""
        srt = np.sort(self.mass_msun)
        x = np.asarray(mass_msun, dtype=float)
        left = np.searchsorted(srt, x, side="left")
        right = np.searchsorted(srt, x, side="right")
        return (left + right) / (2.0 * srt.size)

    def draw(self, rng: np.random.Generator, n: int) -> NDArray[np.float64]:
        """``n`` masses resampled with replacement."""
        return self.mass_msun[rng.integers(0, self.mass_msun.size, n)]

    @cached_property
    def _kde(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        x = self.mass_msun
        sd = float(np.std(x, ddof=1))
        if not sd > 0:
            return np.array([x[0]]), np.array([np.inf])
        bw = sd * x.size ** (-0.2)  # Scott's rule in one dimension, as scipy.stats.gaussian_kde
        lo, hi = float(x.min() - 5 * bw), float(x.max() + 5 * bw)
        grid = np.linspace(lo, hi, KDE_GRID_POINTS)
        step = grid[1] - grid[0]
        pos = (x - lo) / step
        i = np.clip(np.floor(pos).astype(np.int64), 0, grid.size - 2)
        w = pos - i
        counts = np.bincount(i, 1.0 - w, grid.size) + np.bincount(i + 1, w, grid.size)
        half = int(math.ceil(5 * bw / step))
        kernel = np.exp(-0.5 * (np.arange(-half, half + 1) * step / bw) ** 2)
        dens = signal.fftconvolve(counts, kernel, mode="same") / (x.size * bw * math.sqrt(2 * math.pi))
        return grid, np.clip(dens, 0.0, None)

    def pdf(self, mass_msun: ArrayLike) -> NDArray[np.float64]:
        """Kernel density estimate (per Msun) at ``mass_msun`` (Msun).

        A Gaussian kernel with Scott's bandwidth ``sd * n**-0.2`` (the default of
        :class:`scipy.stats.gaussian_kde`), evaluated by linear binning on a
        4096-point grid and FFT convolution; zero outside the samples' range
        widened by five bandwidths.
        """
        grid, dens = self._kde
        if grid.size == 1:
            raise InputError(
                f"run {self.label!r}: all mass samples are equal (fixed mass?); no density", key="mass_msun"
            )
        return np.interp(np.asarray(mass_msun, dtype=float), grid, dens, left=0.0, right=0.0)

    @property
    def has_density(self) -> bool:
        """False when every sample is equal (e.g. a fixed mass): no density estimate."""
        return self._kde[0].size > 1

    def span(self) -> tuple[float, float]:
        """Mass range (Msun) where :meth:`pdf` is non-zero."""
        grid, _ = self._kde
        return float(grid[0]), float(grid[-1])


RunLike = Any  # Fit | Results | MassPosterior | str | os.PathLike


def as_posterior(run: RunLike, label: str | None) -> MassPosterior:
    """A :class:`MassPosterior` from a Fit, Results, MassPosterior or run folder (renamed to ``label``)."""
    if isinstance(run, MassPosterior):
        return run if label is None else replace(run, label=label)
    if isinstance(run, (str, os.PathLike)):
        path = Path(run)
        fit = load(path)
        return MassPosterior.from_results(fit.results, label or path.resolve().name, source=str(path))
    if isinstance(run, Fit):
        run = run.results
    if isinstance(run, Results):
        return MassPosterior.from_results(run, label or run.target.name)
    raise InputError(
        f"cannot compare {type(run).__name__!r}: expected a Fit, Results, MassPosterior or run folder path",
        key="runs",
    )


def check_labels(runs: Sequence[RunLike], labels: Sequence[str] | None, key: str = "labels") -> list[str | None]:
    """One stripped, non-empty label per run (None each when ``labels`` is None)."""
    if labels is None:
        return [None] * len(runs)
    labels = list(labels)
    if len(labels) != len(runs):
        raise InputError(f"{len(labels)} labels for {len(runs)} runs; give one label per run", key=key)
    for lab in labels:
        if not isinstance(lab, str) or not lab.strip():
            raise InputError(f"labels must be non-empty text, got {lab!r}", key=key)
    return [lab.strip() for lab in labels]


def unique_labels(labels: list[str]) -> list[str]:
    """The labels, repeats made unique by appending `` (2)``, `` (3)``, ..."""
    out: list[str] = []
    for lab in labels:
        new, k = lab, 2
        while new in out:
            new, k = f"{lab} ({k})", k + 1
        out.append(new)
    return out


def as_posteriors(runs: Sequence[RunLike], labels: Sequence[str] | None) -> list[MassPosterior]:
    """Posteriors of several runs, with unique labels."""
    if isinstance(runs, (str, os.PathLike, MassPosterior, Results)) or not isinstance(runs, Sequence):
        runs = [runs]
    given = check_labels(runs, labels)
    posts = [as_posterior(r, lab) for r, lab in zip(runs, given, strict=True)]
    names = unique_labels([p.label for p in posts])
    return [p if p.label == n else replace(p, label=n) for p, n in zip(posts, names, strict=True)]
