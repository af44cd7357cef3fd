"""Hold mass posteriors against each other, against published values, and fit them jointly.

:func:`compare` takes fitted runs (:class:`~orbitmass.fit.Fit`,
:class:`~orbitmass.results.Results`, run folders or plain
:class:`MassPosterior` samples) and reference values, and returns a
:class:`Comparison`: for every pair of runs and for every run (and the joint
refit) against every reference, the posterior of the mass difference and
ratio, the tension as an equivalent Gaussian sigma, an overlap measure and a
one-line verdict. :func:`combined_refit` fits the union of the runs' data as
one target (one central body, one distance): a real joint posterior, not a
product of histograms. :func:`demo_comparison` runs the whole chain on two
invented datasets.

Method
------
Difference and ratio
    The two posteriors are independent, so their joint is the product: draws
    of ``a`` and ``b`` are paired by resampling each with replacement
    (``n_draws`` pairs, seeded :class:`numpy.random.Generator`), giving
    samples of ``a - b`` (Msun) and ``a / b``. A reference value is drawn
    from its Gaussian, or for asymmetric errors from the two-piece
    ("split") normal with the lower and upper widths on either side of the
    quoted value.
Tension
    ``P = P(a > b)`` is computed over all pairs at once (the mean over the
    samples of ``a`` of the empirical distribution function of ``b``, ties
    counted half; against a reference its cumulative distribution), which is
    the limit of infinitely many random pairings. The two-sided probability
    mass beyond zero difference is ``p = 2 min(P, 1 - P)`` and the tension is
    the Gaussian-equivalent ``sigma = Phi^-1(1 - p / 2) = norm.isf(p / 2)``;
    for two Gaussian posteriors it equals ``|m1 - m2| / sqrt(s1^2 + s2^2)``.
    Its Monte Carlo error uses the binomial error of the tail fraction with
    ``n_eff`` = the smaller effective sample size of the two runs (the mass
    ESS of each fit; a reference counts as infinite): ``d sigma =
    sqrt(P (1 - P) / n_eff) / phi(sigma)``.
Lower bounds
    When fewer than one effective draw lies beyond zero difference
    (``min(P, 1 - P) * n_eff < 1``), the samples cannot measure the tail. The
    result is then only a lower bound: the one-sided 95 % Poisson upper limit
    on the tail count (about 3 for zero observed, the "rule of three") gives
    ``sigma >= norm.isf(3.0 / n_eff)``. No kernel-density or normal-tail
    extrapolation is used for the headline number; ``sigma_normal_approx``
    (``|mean(a - b)| / sd(a - b)``, which assumes a Gaussian difference) is
    given beside it, labelled as such.
Verdict
    ``"tension"`` when sigma (or its lower bound) is at least
    ``threshold_sigma`` (default 3, common practice, no source),
    ``"consistent"`` below it, ``"unresolved"`` when only a lower bound below
    the threshold is available (more samples are needed).
Overlap
    The Bhattacharyya coefficient ``BC = int sqrt(p_a p_b) dM`` (Bhattacharyya
    1943, Bull. Calcutta Math. Soc. 35, 99) and the overlapping coefficient
    ``OVL = int min(p_a, p_b) dM``, both 1 for identical and 0 for disjoint
    densities. Densities of runs are Gaussian kernel density estimates in
    linear mass with Scott's bandwidth ``sd * n**-0.2`` (the default of
    :class:`scipy.stats.gaussian_kde`), computed on a grid by linear binning
    and FFT convolution; references use their exact density. The kernel
    widens each density by a factor ``sqrt(1 + h^2)`` (``h = n**-0.2``,
    about 1 % in width for 20000 samples), a small bias of the overlap.
Joint refit
    :func:`combined_target` builds one :class:`~orbitmass.model.data.Target` from
    the runs' targets: the union of their companions and instruments, one
    central body and one distance. See its docstring for the rules.

``comparison.json`` (written by :meth:`Comparison.write`)
-----------------------------------------------------------
Masses in Msun, radii in au (``_au``) or Schwarzschild radii (``_rs``);
every quantile block has the keys ``median``, ``q16``, ``q84``, ``q2.5``,
``q97.5`` of ``summary.json``; non-finite numbers are ``null``.

``orbitmass_version``, ``created_utc``
    Writer version and UTC time of writing.
``seed``, ``n_draws``, ``threshold_sigma``
    Seed of the resampling, pairs drawn per comparison, tension threshold.
``method``
    Text of the definitions above (``difference``, ``tension``,
    ``lower_bound``, ``overlap``, ``verdict``, ``combined``).
``runs``
    One object per run: ``label``, ``target`` (target name), ``source`` (run
    folder or ``""``), ``companions`` (names), ``n_samples``, ``n_eff``
    (effective sample size of the mass), ``converged`` (bool or ``null``),
    ``mass_msun`` (quantile block) and ``radii``: companion -> {
    ``semimajor_axis_au``, ``periastron_au``, ``periastron_rs`` } quantile
    blocks.
``references``
    ``label``, ``text`` (as given), ``mass_msun``, ``sd_minus_msun``,
    ``sd_plus_msun``.
``comparisons``
    One object per pair: ``a``, ``b`` (labels), ``kind`` (``"run-run"``,
    ``"run-reference"`` or ``"joint-reference"``), ``difference_msun``
    (quantile block of ``a - b``), ``ratio`` (of ``a / b``), ``p_a_greater``
    (``P(a > b)``), ``p_two_sided``, ``tension_sigma`` (the lower bound when
    ``tension_is_lower_bound``), ``tension_is_lower_bound``,
    ``tension_sigma_mc_error`` (``null`` for a bound), ``sigma_normal_approx``,
    ``n_eff``, ``bhattacharyya``, ``overlapping_coefficient``, ``verdict``,
    ``statement``.
``combined``
    ``null`` without a joint refit, else: ``label``, ``target``,
    ``companions``, ``parts`` (labels of the runs), ``mass_msun`` and
    ``distance_pc`` (quantile blocks), ``n_eff``, ``converged``,
    ``width68_msun`` (``q84 - q16`` of the mass), ``parts_width68_msun``
    (label -> width), ``narrower_than_every_part`` and ``run_folder``
    (``"combined"`` when the joint run folder was written, else ``null``).

Other files: ``comparison.md`` (the same in prose and tables),
``comparison.png``/``.pdf`` (mass posteriors with 68/95 % intervals and the
references), ``enclosed_mass.png``/``.pdf`` (mass against radius with the
joint fit as a band; only when some run carries companion radii, i.e. comes
from a fit) and, optionally, ``combined/`` (the joint run folder).
"""

from __future__ import annotations

import argparse
import hashlib
import json
import logging
import math
import os
import re
import shutil
import sys
import tempfile
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import signal, stats

from orbitmass.exceptions import InputError, RunFolderError
from orbitmass.model.data import Astrometry, Companion, Target, Velocities
from orbitmass.outputs.style import PALETTE, SINGLE_COLUMN_IN, save_figure, style_context, write_atomic
from orbitmass.results import Results, quantile_block
from orbitmass.units import RS_AU_PER_MSUN

__all__ = [
    "Reference",
    "parse_reference",
    "MassPosterior",
    "PairComparison",
    "compare_samples",
    "tension_sigma",
    "Comparison",
    "compare",
    "combined_target",
    "combined_refit",
    "demo_comparison",
    "add_compare_parser",
    "cmd_compare",
    "DEFAULT_THRESHOLD_SIGMA",
]

log = logging.getLogger(__name__)

#: tension threshold (sigma) of the verdict "tension" (common practice, no source)
DEFAULT_THRESHOLD_SIGMA = 3.0
#: one-sided 95 % Poisson upper limit on a count when none is observed: -ln(0.05)
_RULE_OF_THREE = -math.log(0.05)
_KDE_GRID_POINTS = 4096
#: colours of the runs (Okabe & Ito, via orbitmass.outputs.style); black is kept for the joint fit
_RUN_COLOURS = tuple(PALETTE[k] for k in ("blue", "vermillion", "bluish_green", "orange", "reddish_purple", "sky_blue"))

_METHOD = {
    "difference": "draws of a and b paired by resampling with replacement (seeded); "
    "reference values drawn from a Gaussian or, for asymmetric errors, a two-piece normal",
    "tension": "P = P(a > b) over all pairs; p = 2 min(P, 1 - P); sigma = norm.isf(p / 2); "
    "Monte Carlo error sqrt(P (1 - P) / n_eff) / phi(sigma), n_eff = smaller mass ESS of the two",
    "lower_bound": "when min(P, 1 - P) * n_eff < 1 the samples cannot resolve the tail: sigma "
    "is reported as a lower bound norm.isf(3 / n_eff) (95 % Poisson upper limit on the tail "
    "count); "
    "sigma_normal_approx = |mean| / sd of a - b assumes a Gaussian difference",
    "overlap": "Bhattacharyya coefficient int sqrt(p_a p_b) dM (Bhattacharyya 1943) and "
    "overlapping coefficient int min(p_a, p_b) dM; run densities by Gaussian KDE (Scott), "
    "references exact",
    "verdict": "tension if sigma (or its lower bound) >= threshold_sigma; consistent below; "
    "unresolved when only a lower bound below the threshold is available",
    "combined": "joint refit of the union of the runs' data (one central mass, one distance); "
    "the joint result is not compared with its own parts (they are not independent)",
}


# ============================================================================ references
_NUM = r"(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_SYM = re.compile(rf"^(?P<v>[+]?{_NUM})\s*(?:\+-|\+/-|±)\s*(?P<e>{_NUM})\s*(?P<unit>.*)$")
_ASYM_PM = re.compile(rf"^(?P<v>[+]?{_NUM})\s*\+\s*(?P<ep>{_NUM})\s*-\s*(?P<em>{_NUM})\s*(?P<unit>.*)$")
_ASYM_MP = re.compile(rf"^(?P<v>[+]?{_NUM})\s*-\s*(?P<em>{_NUM})\s*\+\s*(?P<ep>{_NUM})\s*(?P<unit>.*)$")
_REFERENCE_FORMS = (
    "'4.1e6 +- 0.1e6 solMass', '4.1e6 ± 0.1e6 solMass' or '4.1e6 +0.2e6 -0.1e6 solMass', optionally preceded by 'NAME='"
)


@dataclass(frozen=True)
class Reference:
    """A published or external mass value with (possibly asymmetric) 1-sigma errors.

    The value is modelled as a two-piece normal: a Gaussian of width
    ``sd_minus_msun`` below ``mass_msun`` and ``sd_plus_msun`` above it
    (equal widths: an ordinary Gaussian).

    Attributes
    ----------
    label : str
        Name shown in tables and figures.
    mass_msun : float
        Quoted value (Msun).
    sd_minus_msun, sd_plus_msun : float
        Lower and upper 1-sigma errors (Msun), > 0.
    text : str
        The string it was parsed from.
    """

    label: str
    mass_msun: float
    sd_minus_msun: float
    sd_plus_msun: float
    text: str = ""

    @property
    def _p_below(self) -> float:
        return self.sd_minus_msun / (self.sd_minus_msun + self.sd_plus_msun)

    def cdf(self, mass_msun: ArrayLike) -> NDArray[np.float64]:
        """Cumulative distribution at ``mass_msun`` (Msun)."""
        x = np.asarray(mass_msun, dtype=float)
        w = self._p_below
        below = 2 * w * stats.norm.cdf((x - self.mass_msun) / self.sd_minus_msun)
        above = w + 2 * (1 - w) * (stats.norm.cdf((x - self.mass_msun) / self.sd_plus_msun) - 0.5)
        return np.where(x < self.mass_msun, below, above)

    def pdf(self, mass_msun: ArrayLike) -> NDArray[np.float64]:
        """Probability density (per Msun) at ``mass_msun`` (Msun)."""
        x = np.asarray(mass_msun, dtype=float)
        sd = np.where(x < self.mass_msun, self.sd_minus_msun, self.sd_plus_msun)
        norm = 2.0 / (math.sqrt(2 * math.pi) * (self.sd_minus_msun + self.sd_plus_msun))
        return norm * np.exp(-0.5 * ((x - self.mass_msun) / sd) ** 2)

    def draw(self, rng: np.random.Generator, n: int) -> NDArray[np.float64]:
        """``n`` random masses (Msun) from the two-piece normal."""
        z = np.abs(rng.standard_normal(n))
        below = rng.random(n) < self._p_below
        return np.where(below, self.mass_msun - z * self.sd_minus_msun, self.mass_msun + z * self.sd_plus_msun)

    def quantiles(self) -> dict[str, float]:
        """The quantile block (Msun) of the two-piece normal."""
        from orbitmass.results import QUANTILES

        out = {}
        w = self._p_below
        for key, q in QUANTILES.items():
            if q < w:
                out[key] = self.mass_msun + self.sd_minus_msun * float(stats.norm.ppf(q / (2 * w)))
            else:
                out[key] = self.mass_msun + self.sd_plus_msun * float(stats.norm.ppf(0.5 + (q - w) / (2 * (1 - w))))
        return out

    def span(self) -> tuple[float, float]:
        """Mass range (Msun) holding all but ~1e-15 of the probability."""
        return self.mass_msun - 8 * self.sd_minus_msun, self.mass_msun + 8 * self.sd_plus_msun


def parse_reference(text: str | Reference, *, label: str | None = None, key: str = "--reference") -> Reference:
    """Read a reference mass such as ``"4.1e6 +- 0.1e6 solMass"``.

    Parameters
    ----------
    text : str or Reference
        ``"VALUE +- ERR UNIT"``, ``"VALUE ± ERR UNIT"`` or ``"VALUE +UP -DOWN
        UNIT"`` (either order of the two errors), optionally preceded by
        ``"NAME="``. The unit is any astropy mass unit (``solMass``, ``kg``,
        ``Mjup``...); the errors are in the same unit. A :class:`Reference`
        passes through unchanged.
    label : str, optional
        Name; default the ``NAME=`` prefix, else the text itself.
    key : str
        Option or argument named in error messages.

    Returns
    -------
    Reference
        Value and errors in Msun.

    Raises
    ------
    InputError
        On any other form, a missing or non-mass unit, or a non-positive value or error.

    Examples
    --------
    >>> r = parse_reference("disc=4.1e6 +0.2e6 -0.1e6 solMass")
    >>> r.label, r.mass_msun, r.sd_minus_msun, r.sd_plus_msun
    ('disc', 4100000.0, 100000.0, 200000.0)
    """
    import astropy.units as u

    if isinstance(text, Reference):
        return text
    if not isinstance(text, str):
        raise InputError(f"expected a string like {_REFERENCE_FORMS}, got {text!r}", key=key)
    body = text.strip().replace("\u2212", "-")
    name = label
    head, sep, tail = body.partition("=")
    if sep:
        if not head.strip():
            raise InputError(f"{text!r}: empty name before '='; expected {_REFERENCE_FORMS}", key=key)
        name = name or head.strip()
        body = tail.strip()
    match = _SYM.match(body) or _ASYM_PM.match(body) or _ASYM_MP.match(body)
    if match is None:
        raise InputError(f"cannot read {text!r}; expected {_REFERENCE_FORMS}", key=key)
    groups = match.groupdict()
    unit_text = groups["unit"].strip()
    if not unit_text:
        raise InputError(
            f"{text!r} has no unit; expected a mass unit such as 'solMass' ({_REFERENCE_FORMS})",
            key=key,
        )
    try:
        scale = float((1.0 * u.Unit(unit_text)).to_value(u.solMass))
    except u.UnitConversionError:
        raise InputError(f"{text!r}: {unit_text!r} is not a mass unit (cannot convert to solMass)", key=key) from None
    except (ValueError, TypeError):
        raise InputError(
            f"{text!r}: {unit_text!r} is not a unit astropy knows; expected a mass unit such as 'solMass' or 'kg'",
            key=key,
        ) from None
    value = float(groups["v"]) * scale
    if "e" in groups:
        minus = plus = float(groups["e"]) * scale
    else:
        minus, plus = float(groups["em"]) * scale, float(groups["ep"]) * scale
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"{text!r}: the mass must be positive and finite", key=key)
    if not (math.isfinite(minus) and math.isfinite(plus) and minus > 0 and plus > 0):
        raise InputError(f"{text!r}: the errors must be positive and finite", key=key)
    return Reference(
        label=name or text.strip(),
        mass_msun=value,
        sd_minus_msun=minus,
        sd_plus_msun=plus,
        text=text.strip(),
    )


# ============================================================================ posteriors
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
        grid = np.linspace(lo, hi, _KDE_GRID_POINTS)
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

    def span(self) -> tuple[float, float]:
        """Mass range (Msun) where :meth:`pdf` is non-zero."""
        grid, _ = self._kde
        return float(grid[0]), float(grid[-1])


RunLike = Any  # Fit | Results | MassPosterior | str | os.PathLike


def _as_posterior(run: RunLike, label: str | None) -> MassPosterior:
    from orbitmass.fit import Fit, load

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


def _labels(runs: Sequence[RunLike], labels: Sequence[str] | None, key: str = "labels") -> list[str | None]:
    if labels is None:
        return [None] * len(runs)
    labels = list(labels)
    if len(labels) != len(runs):
        raise InputError(f"{len(labels)} labels for {len(runs)} runs; give one label per run", key=key)
    for lab in labels:
        if not isinstance(lab, str) or not lab.strip():
            raise InputError(f"labels must be non-empty text, got {lab!r}", key=key)
    return [lab.strip() for lab in labels]


def _unique(labels: list[str]) -> list[str]:
    out: list[str] = []
    for lab in labels:
        new, k = lab, 2
        while new in out:
            new, k = f"{lab} ({k})", k + 1
        out.append(new)
    return out


def _posteriors(runs: Sequence[RunLike], labels: Sequence[str] | None) -> list[MassPosterior]:
    if isinstance(runs, (str, os.PathLike, MassPosterior, Results)) or not isinstance(runs, Sequence):
        runs = [runs]
    given = _labels(runs, labels)
    posts = [_as_posterior(r, lab) for r, lab in zip(runs, given, strict=True)]
    names = _unique([p.label for p in posts])
    return [p if p.label == n else replace(p, label=n) for p, n in zip(posts, names, strict=True)]


# ============================================================================ one pair
@dataclass(frozen=True)
class PairComparison:
    """The comparison of two mass posteriors ``a`` and ``b`` (see the module docstring).

    Attributes
    ----------
    a, b : str
        Labels.
    kind : str
        ``"run-run"``, ``"run-reference"`` or ``"joint-reference"``.
    difference_msun, ratio : dict
        Quantile blocks of ``a - b`` (Msun) and ``a / b``.
    p_a_greater : float
        ``P(a > b)``.
    p_two_sided : float
        ``2 min(P, 1 - P)``.
    tension_sigma : float
        Gaussian-equivalent sigma, or its lower bound when ``tension_is_lower_bound``.
    tension_is_lower_bound : bool
        True when the samples cannot resolve the tail.
    tension_sigma_mc_error : float or None
        Monte Carlo error of ``tension_sigma`` (None for a bound).
    sigma_normal_approx : float
        ``|mean(a - b)| / sd(a - b)``: assumes a Gaussian difference.
    n_eff : float
        Effective sample size behind the tail probability.
    bhattacharyya, overlapping_coefficient : float
        Overlap of the two densities, 0 to 1.
    verdict : str
        ``"consistent"``, ``"tension"`` or ``"unresolved"``.
    statement : str
        One line for people.
    """

    a: str
    b: str
    kind: str
    difference_msun: dict[str, float]
    ratio: dict[str, float]
    p_a_greater: float
    p_two_sided: float
    tension_sigma: float
    tension_is_lower_bound: bool
    tension_sigma_mc_error: float | None
    sigma_normal_approx: float
    n_eff: float
    bhattacharyya: float
    overlapping_coefficient: float
    verdict: str
    statement: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (keys of ``comparison.json``)."""
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        d["p_b_greater"] = 1.0 - self.p_a_greater
        return _finite_or_none(d)


_Dist = Any  # MassPosterior | Reference


def _p_greater(a: _Dist, b: _Dist) -> float:
    """P(a > b) for independent a and b, over all pairs (see the module docstring)."""
    if isinstance(a, MassPosterior):
        return float(np.mean(b.cdf(a.mass_msun)))
    if isinstance(b, MassPosterior):
        return float(1.0 - np.mean(a.cdf(b.mass_msun)))
    raise InputError("two reference values cannot be compared with each other", key="references")


def tension_sigma(p_a_greater: float, n_eff: float) -> tuple[float, bool, float | None]:
    """Gaussian-equivalent tension from ``P(a > b)``.

    Parameters
    ----------
    p_a_greater : float
        Probability that ``a > b``.
    n_eff : float
        Effective number of independent samples behind it (``inf`` for exact).

    Returns
    -------
    (float, bool, float or None)
        ``sigma = norm.isf(min(P, 1 - P))`` (the same as ``norm.isf(p / 2)``
        with ``p = 2 min(P, 1 - P)``), whether it is only a lower bound, and
        its Monte Carlo error (None for a bound).

    Examples
    --------
    >>> s, bound, err = tension_sigma(0.02275013194817921, float("inf"))
    >>> round(s, 6), bound, err
    (2.0, False, 0.0)
    """
    p_min = min(p_a_greater, 1.0 - p_a_greater)
    if math.isfinite(n_eff) and p_min * n_eff < 1.0:
        return float(stats.norm.isf(min(_RULE_OF_THREE / n_eff, 0.5))), True, None
    sigma = float(stats.norm.isf(p_min))
    if not math.isfinite(n_eff):
        return sigma, False, 0.0
    err = math.sqrt(p_min * (1.0 - p_min) / n_eff) / float(stats.norm.pdf(sigma))
    return sigma, False, err


def _overlap(a: _Dist, b: _Dist) -> tuple[float, float]:
    """Bhattacharyya and overlapping coefficients of two mass densities."""
    if isinstance(a, MassPosterior) and a._kde[0].size == 1 or isinstance(b, MassPosterior) and b._kde[0].size == 1:
        return float("nan"), float("nan")
    grid = np.unique(np.concatenate([np.linspace(*d.span(), _KDE_GRID_POINTS) for d in (a, b)]))
    pa, pb = a.pdf(grid), b.pdf(grid)
    bc = float(np.trapezoid(np.sqrt(pa * pb), grid))
    ovl = float(np.trapezoid(np.minimum(pa, pb), grid))
    return min(bc, 1.0), min(ovl, 1.0)


def _verdict(sigma: float, bound: bool, n_eff: float, threshold: float) -> tuple[str, str]:
    if bound and sigma >= threshold:
        return "tension", (
            f"in tension at > {sigma:.1f} sigma (lower bound: fewer than one effective sample "
            "lies beyond zero difference)"
        )
    if bound:
        return "unresolved", (
            f"differ by more than {sigma:.1f} sigma, the most {n_eff:.0f} effective samples "
            f"can show; more samples are needed to test the {threshold:g} sigma threshold"
        )
    if sigma >= threshold:
        return "tension", f"in tension at {sigma:.1f} sigma"
    return "consistent", f"consistent ({sigma:.1f} sigma)"


def compare_samples(
    a: MassPosterior | Reference | ArrayLike,
    b: MassPosterior | Reference | ArrayLike,
    *,
    rng: np.random.Generator,
    n_draws: int = 100_000,
    threshold_sigma: float = DEFAULT_THRESHOLD_SIGMA,
    kind: str = "run-run",
) -> PairComparison:
    """Compare two independent mass posteriors (or a posterior and a reference).

    Parameters
    ----------
    a, b : MassPosterior, Reference or array_like
        Posteriors (plain arrays are mass samples in Msun with ``n_eff`` =
        their length) or reference values; at most one may be a reference.
    rng : numpy.random.Generator
        Source of the resampling and of the KDE subsampling.
    n_draws : int
        Number of random pairs for the difference and ratio posteriors.
    threshold_sigma : float
        Tension threshold of the verdict.
    kind : str
        Recorded as is.

    Returns
    -------
    PairComparison

    Raises
    ------
    InputError
        When both are references, or on invalid samples.
    """
    a = a if isinstance(a, (MassPosterior, Reference)) else MassPosterior.from_samples("a", a)
    b = b if isinstance(b, (MassPosterior, Reference)) else MassPosterior.from_samples("b", b)
    if n_draws < 100:
        raise InputError(f"n_draws must be at least 100, got {n_draws}", key="n_draws")
    p_gt = _p_greater(a, b)
    n_eff = min(getattr(a, "n_eff", math.inf), getattr(b, "n_eff", math.inf))
    sigma, bound, err = tension_sigma(p_gt, n_eff)
    da, db = a.draw(rng, n_draws), b.draw(rng, n_draws)
    diff = da - db
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = da / db
    sd = float(np.std(diff))
    approx = abs(float(np.mean(diff))) / sd if sd > 0 else float("inf")
    bc, ovl = _overlap(a, b)
    verdict, statement = _verdict(sigma, bound, n_eff, threshold_sigma)
    return PairComparison(
        a=a.label,
        b=b.label,
        kind=kind,
        difference_msun=quantile_block(diff),
        ratio=quantile_block(ratio[np.isfinite(ratio)]),
        p_a_greater=p_gt,
        p_two_sided=2 * min(p_gt, 1 - p_gt),
        tension_sigma=sigma,
        tension_is_lower_bound=bound,
        tension_sigma_mc_error=err,
        sigma_normal_approx=approx,
        n_eff=n_eff,
        bhattacharyya=bc,
        overlapping_coefficient=ovl,
        verdict=verdict,
        statement=statement,
    )


def _finite_or_none(obj):
    if isinstance(obj, dict):
        return {str(k): _finite_or_none(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite_or_none(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (float, np.floating, int, np.integer)):
        v = float(obj) if isinstance(obj, (float, np.floating)) else int(obj)
        return v if not isinstance(v, float) or math.isfinite(v) else None
    return obj


# ============================================================================ comparison
@dataclass
class Comparison:
    """Runs, references, their pairwise comparisons and an optional joint refit.

    Build it with :func:`compare`. Attributes mirror ``comparison.json``
    (see the module docstring).
    """

    runs: list[MassPosterior]
    references: list[Reference]
    pairs: list[PairComparison]
    combined: MassPosterior | None = None
    seed: int = 0
    n_draws: int = 100_000
    threshold_sigma: float = DEFAULT_THRESHOLD_SIGMA

    # ------------------------------------------------------------------ content
    def _joint(self) -> MassPosterior | None:
        """The joint fit of the enclosed-mass band: the refit, else one multi-companion run."""
        if self.combined is not None:
            return self.combined
        multi = [r for r in self.runs if len(r.radii) > 1]
        return multi[0] if len(multi) == 1 and len(self.runs) == 1 else None

    def _combined_dict(self, run_folder: str | None) -> dict[str, Any] | None:
        c = self.combined
        if c is None:
            return None
        q = c.quantiles()
        width = q["q84"] - q["q16"]
        parts = {}
        for r in self.runs:
            rq = r.quantiles()
            parts[r.label] = rq["q84"] - rq["q16"]
        dist = None
        if c.results is not None and "distance_pc" in c.results.samples:
            dist = quantile_block(c.results.samples["distance_pc"].to_numpy())
        return {
            "label": c.label,
            "target": c.target,
            "companions": list(c.radii),
            "parts": [r.label for r in self.runs],
            "mass_msun": q,
            "distance_pc": dist,
            "n_eff": c.n_eff,
            "converged": c.converged,
            "width68_msun": width,
            "parts_width68_msun": parts,
            "narrower_than_every_part": bool(all(width < w for w in parts.values())),
            "run_folder": run_folder,
        }

    def to_dict(self, *, run_folder: str | None = None) -> dict[str, Any]:
        """The content of ``comparison.json`` (see the module docstring for the keys)."""
        from orbitmass import __version__

        runs = []
        for r in self.runs:
            runs.append(
                {
                    "label": r.label,
                    "target": r.target,
                    "source": r.source,
                    "companions": list(r.radii),
                    "n_samples": int(r.mass_msun.size),
                    "n_eff": r.n_eff,
                    "converged": r.converged,
                    "mass_msun": r.quantiles(),
                    "radii": {c: {k: quantile_block(v) for k, v in d.items()} for c, d in r.radii.items()},
                }
            )
        refs = [
            {
                "label": f.label,
                "text": f.text,
                "mass_msun": f.mass_msun,
                "sd_minus_msun": f.sd_minus_msun,
                "sd_plus_msun": f.sd_plus_msun,
            }
            for f in self.references
        ]
        return _finite_or_none(
            {
                "orbitmass_version": __version__,
                "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
                "seed": self.seed,
                "n_draws": self.n_draws,
                "threshold_sigma": self.threshold_sigma,
                "method": dict(_METHOD),
                "runs": runs,
                "references": refs,
                "comparisons": [p.to_dict() for p in self.pairs],
                "combined": self._combined_dict(run_folder),
            }
        )

    def to_json(self, *, indent: int = 2) -> str:
        """``comparison.json`` as text (strict JSON: non-finite numbers are ``null``)."""
        return json.dumps(self.to_dict(), indent=indent, allow_nan=False)

    # ------------------------------------------------------------------ figures
    def _rows(self) -> list[tuple[str, Any, str]]:
        rows = [(r.label, r, _RUN_COLOURS[k % len(_RUN_COLOURS)]) for k, r in enumerate(self.runs)]
        if self.combined is not None:
            rows.append((self.combined.label, self.combined, PALETTE["black"]))
        rows += [(f.label, f, "#6E6E6E") for f in self.references]
        return rows

    def _scale(self) -> tuple[int, float]:
        from orbitmass.outputs.reports import choose_exponent

        meds = [np.median(r.mass_msun) for r in self.runs] + [f.mass_msun for f in self.references]
        k = choose_exponent(float(np.median(meds)))
        return k, 10.0**k

    def figure(self):
        """Mass posteriors: densities (top) and 68/95 % intervals (bottom), references included.

        Returns
        -------
        matplotlib.figure.Figure
            A single-column figure (not registered with pyplot).
        """
        from matplotlib.figure import Figure

        rows = self._rows()
        k, scale = self._scale()
        lo = min(d.quantiles()["q2.5"] for _, d, _ in rows)
        hi = max(d.quantiles()["q97.5"] for _, d, _ in rows)
        log_x = lo > 0 and hi / lo > 10  # masses spanning decades: log axis
        if log_x:
            k, scale = 0, 1.0
            grid = np.geomspace(lo / 1.5, hi * 1.5, 1200)
        else:
            grid = np.linspace(lo - 0.25 * (hi - lo), hi + 0.25 * (hi - lo), 600)
        n = len(rows)
        with style_context():
            fig = Figure(figsize=(SINGLE_COLUMN_IN, 1.7 + 0.22 * n))
            gs = fig.add_gridspec(2, 1, height_ratios=[1.5, 0.3 + 0.22 * n], hspace=0.06)
            ax_d = fig.add_subplot(gs[0])
            ax_i = fig.add_subplot(gs[1], sharex=ax_d)
            for j, (label, d, colour) in enumerate(rows):
                is_ref = isinstance(d, Reference)
                y = d.pdf(grid)
                y = y / y.max() if y.max() > 0 else y
                lw = 1.4 if d is self.combined else 1.0
                ax_d.plot(grid / scale, y, ls="--" if is_ref else "-", lw=lw, color=colour)
                if not is_ref:
                    ax_d.fill_between(grid / scale, 0, y, color=colour, alpha=0.12, lw=0)
                q = d.quantiles()
                yv = n - 1 - j
                marker = "D" if is_ref else ("s" if d is self.combined else "o")
                ax_i.plot([q["q2.5"] / scale, q["q97.5"] / scale], [yv, yv], color=colour, lw=0.9)
                ax_i.plot([q["q16"] / scale, q["q84"] / scale], [yv, yv], color=colour, lw=3.0,
                          solid_capstyle="butt")
                centre = d.mass_msun if is_ref else q["median"]  # a reference: its quoted value
                ax_i.plot([centre / scale], [yv], marker=marker, color=colour, mfc="white",
                          mew=1.0, ms=4.5)
            ax_d.set_ylim(0, 1.08)
            ax_d.set_ylabel("density (peak = 1)")
            ax_d.tick_params(labelbottom=False)
            note = "bars: median, 68 % (thick), 95 % (thin)"
            if self.references:
                note += "; dashed: reference values"
            ax_d.set_title(note, loc="right", fontsize=6.5, color="#444444")
            ax_i.set_yticks(range(n), [_plain(r[0]) for r in rows][::-1])
            ax_i.set_ylim(-0.6, n - 0.4)
            ax_i.set_xlabel(f"total mass $M$ [{_mass_unit(k)}]")
            ax_i.set_xlim(grid[0] / scale, grid[-1] / scale)
            if log_x:
                ax_i.set_xscale("log")
        return fig

    def enclosed_mass_figure(self):
        """Mass against radius: each companion at its semimajor axis and periastron.

        Filled markers sit at the semimajor axis, open ones at the periastron
        distance (medians, 68 % error bars in both directions); the band is
        the joint fit's mass (68 % dark, 95 % light), the expectation for a
        point mass. The top axis gives the radius in Schwarzschild radii of
        the joint (or median) mass.

        Returns
        -------
        matplotlib.figure.Figure
        """
        from matplotlib.figure import Figure
        from matplotlib.lines import Line2D

        from orbitmass.outputs.style import MARKERS

        joint = self._joint()
        k, scale = self._scale()
        grey = "#444444"
        masses = joint.mass_msun if joint is not None else np.concatenate([r.mass_msun for r in self.runs])
        ref_mass = float(np.median(masses))
        rs_au = RS_AU_PER_MSUN * ref_mass
        with style_context():
            fig = Figure(figsize=(SINGLE_COLUMN_IN, 0.9 * SINGLE_COLUMN_IN))
            ax = fig.add_subplot()
            ax.set_xscale("log")
            handles = []
            for j, run in enumerate(self.runs):
                colour = _RUN_COLOURS[j % len(_RUN_COLOURS)]
                mq = run.quantiles()
                y = mq["median"] / scale
                yerr = [[y - mq["q16"] / scale], [mq["q84"] / scale - y]]
                for kc, (comp, rad) in enumerate(run.radii.items()):
                    marker = MARKERS[kc % len(MARKERS)]
                    aq = quantile_block(rad["semimajor_axis_au"])
                    pq = quantile_block(rad["periastron_au"])
                    ax.plot([pq["median"], aq["median"]], [y, y], color=colour, lw=0.6, alpha=0.6)
                    for qq, face in ((aq, colour), (pq, "white")):
                        xerr = [[qq["median"] - qq["q16"]], [qq["q84"] - qq["median"]]]
                        ax.errorbar([qq["median"]], [y], yerr=yerr, xerr=xerr, fmt=marker, color=colour,
                                    mfc=face, mew=0.9, ms=4.5, elinewidth=0.8)
                    name = run.label if len(run.radii) == 1 and comp in run.label else f"{run.label}: {comp}"
                    handles.append(Line2D([], [], color=colour, marker=marker, lw=0, label=_plain(name)))
            if joint is not None:
                jq = joint.quantiles()
                black = PALETTE["black"]
                ax.axhspan(jq["q2.5"] / scale, jq["q97.5"] / scale, color=black, alpha=0.07, lw=0)
                ax.axhspan(jq["q16"] / scale, jq["q84"] / scale, color=black, alpha=0.15, lw=0)
                ax.axhline(jq["median"] / scale, color=black, lw=0.8)
                handles.append(Line2D([], [], color=black, lw=4, alpha=0.25,
                                      label=_plain(f"point mass from {joint.label} (68/95 %)")))
            handles.append(Line2D([], [], color=grey, marker="o", lw=0, label="at semimajor axis $a$"))
            handles.append(Line2D([], [], color=grey, marker="o", mfc="white", lw=0,
                                  label=r"at periastron $r_\mathrm{p}$"))
            if len(handles) == 2 + (joint is not None):
                ax.set_axis_off()
                ax.text(0.5, 0.5, "no companion radii in these runs", transform=ax.transAxes,
                        ha="center")
                return fig
            ax.margins(x=0.12)
            ax.set_xlabel("radius $r$ [au]")
            ax.set_ylabel(f"enclosed mass $M(<r)$ [{_mass_unit(k)}]")
            sec = ax.secondary_xaxis("top", functions=(lambda r: r / rs_au, lambda x: x * rs_au))
            mant = f"{ref_mass / scale:.3g}"
            of = rf"${mant}\times10^{{{k}}}\,M_\odot$" if k else rf"${mant}\,M_\odot$"
            sec.set_xlabel(rf"$r$ [$R_\mathrm{{S}}$ of {of}]")
            for axis in (ax.xaxis, sec.xaxis):
                _plain_log_ticks(axis)
            ncol = 2 if max(len(h.get_label()) for h in handles) <= 30 else 1
            ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.2), ncol=ncol,
                      fontsize=6.5, handlelength=1.6, handletextpad=0.5, columnspacing=1.0)
            ymin, ymax = ax.get_ylim()
            if ymin > 0 and ymax / ymin > 10:
                ax.set_yscale("log")
        return fig

    # ------------------------------------------------------------------ files
    def markdown(self, *, figures: Mapping[str, str] | None = None, run_folder: str | None = None) -> str:
        """``comparison.md``: runs, references, pairwise results, joint refit, method."""
        from orbitmass.outputs.reports import markdown_escape as esc
        from orbitmass.outputs.reports import measurement

        def meas(q: Mapping[str, float]) -> str:
            return measurement(q["median"], q["median"] - q["q16"], q["q84"] - q["median"]).text()

        lines = ["# Mass comparison", ""]
        lines += [
            "## Runs",
            "",
            "| run | target | companions | total mass [M_sun] (68 %) | n_eff | converged |",
            "|---|---|---|---|---|---|",
        ]
        for r in self.runs:
            conv = "?" if r.converged is None else ("yes" if r.converged else "NO")
            lines.append(
                f"| {esc(r.label)} | {esc(r.target)} | {esc(', '.join(r.radii))} | "
                f"{meas(r.quantiles())} "
                f"| {r.n_eff:.0f} | {conv} |"
            )
        if self.references:
            lines += [
                "",
                "## Reference values",
                "",
                "| reference | as given | total mass [M_sun] |",
                "|---|---|---|",
            ]
            for f in self.references:
                m = measurement(f.mass_msun, f.sd_minus_msun, f.sd_plus_msun).text()
                lines.append(f"| {esc(f.label)} | {esc(f.text)} | {m} |")
        lines += [
            "",
            "## Comparisons",
            "",
            f"Difference a − b and ratio a / b: median and 68 % interval. Tension threshold "
            f"{self.threshold_sigma:g} sigma.",
            "",
            "| a | b | a − b [M_sun] | a / b | P(a > b) | tension | overlap BC / OVL | verdict |",
            "|---|---|---|---|---|---|---|---|",
        ]
        for p in self.pairs:
            if p.tension_is_lower_bound:
                t = f"> {p.tension_sigma:.1f} σ (bound; Gaussian approx. {p.sigma_normal_approx:.1f} σ)"
            else:
                t = f"{p.tension_sigma:.2f} ± {p.tension_sigma_mc_error:.2f} σ"
            lines.append(
                f"| {esc(p.a)} | {esc(p.b)} | {meas(p.difference_msun)} | {meas(p.ratio)} | "
                f"{p.p_a_greater:.4g} | {t} | "
                f"{p.bhattacharyya:.3f} / {p.overlapping_coefficient:.3f} | "
                f"{esc(p.statement)} |"
            )
        c = self._combined_dict(run_folder)
        if c is not None:
            lines += [
                "",
                "## Joint refit",
                "",
                f"One fit of the union of the data of {esc(', '.join(c['parts']))}: one central "
                "mass and one distance, every companion with its own orbit (not a product of the "
                "separate posteriors).",
                "",
                "| | total mass [M_sun] (68 %) | 68 % width [M_sun] |",
                "|---|---|---|",
            ]
            for r in self.runs:
                w = c["parts_width68_msun"][r.label]
                lines.append(f"| {esc(r.label)} | {meas(r.quantiles())} | {_short(w)} |")
            lines.append(f"| **{esc(c['label'])}** | **{meas(c['mass_msun'])}** | **{_short(c['width68_msun'])}** |")
            if c["distance_pc"] is not None:
                lines += ["", f"Joint distance: {meas(c['distance_pc'])} pc."]
            if c["converged"] is False:
                lines += [
                    "",
                    "**Warning:** the joint refit did not converge; its numbers are provisional.",
                ]
            if run_folder:
                lines += ["", f"The joint run folder is [{run_folder}/]({run_folder}/report.md)."]
        radii_rows = [(r, comp, rad) for r in self.runs for comp, rad in r.radii.items()]
        if radii_rows:
            lines += [
                "",
                "## Radii probed",
                "",
                "| run | companion | a [au] | r_p [au] | r_p [R_S] | total mass [M_sun] |",
                "|---|---|---|---|---|---|",
            ]
            for r, comp, rad in radii_rows:
                cells = [meas(quantile_block(rad[k])) for k in ("semimajor_axis_au", "periastron_au", "periastron_rs")]
                lines.append(f"| {esc(r.label)} | {esc(comp)} | {' | '.join(cells)} | {meas(r.quantiles())} |")
        for name, path in (figures or {}).items():
            lines += ["", f"![{esc(name)}]({path})"]
        lines += ["", "## Method", ""] + [f"- **{k}**: {v}" for k, v in _METHOD.items()]
        return "\n".join(lines) + "\n"

    def write(
        self,
        out_dir: str | os.PathLike[str],
        *,
        overwrite: bool = False,
        save_combined: bool = True,
    ) -> Path:
        """Write comparison.json, comparison.md and the two figures (PNG + PDF) into ``out_dir``.

        The folder is assembled beside ``out_dir`` and renamed into place, so
        a crash leaves no half-written output.

        Parameters
        ----------
        out_dir : path
            Destination folder; must be new or empty unless ``overwrite``.
        overwrite : bool
            Replace an existing non-empty ``out_dir`` (moved aside, removed
            only after the new one is in place).
        save_combined : bool
            Also write the joint refit's full run folder as ``out_dir/combined``
            (needs its :class:`Results`; the figures take some seconds).

        Returns
        -------
        Path
            ``out_dir``.

        Raises
        ------
        RunFolderError
            ``out_dir`` is a file, or a non-empty folder without ``overwrite``.
        """
        out_dir = Path(out_dir)
        _check_out_dir(out_dir, overwrite)
        parent = out_dir.resolve().parent
        parent.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(dir=parent, prefix=f".{out_dir.name}.staging-"))
        try:
            run_folder = None
            if save_combined and self.combined is not None and self.combined.results is not None:
                from orbitmass.io.rundir import save_run

                save_run(self.combined.results, staging / "combined")
                run_folder = "combined"
            figures = {}
            makers = [("comparison", self.figure)]
            if any(r.radii for r in self.runs):
                makers.append(("enclosed_mass", self.enclosed_mass_figure))
            for name, make in makers:
                save_figure(make(), staging / name)
                figures[name] = f"{name}.png"
            write_atomic(
                staging / "comparison.json",
                json.dumps(self.to_dict(run_folder=run_folder), indent=2, allow_nan=False) + "\n",
            )
            write_atomic(staging / "comparison.md", self.markdown(figures=figures, run_folder=run_folder))
            _move_into_place(staging, out_dir)
        except BaseException:
            shutil.rmtree(staging, ignore_errors=True)
            raise
        log.info("comparison written to %s", out_dir)
        return out_dir


def _short(x: float) -> str:
    """Three significant digits, with "× 10^k" instead of "e+k"."""
    text = f"{x:.3g}"
    if "e" not in text:
        return text
    mant, exp = text.split("e")
    return f"{mant} × 10^{int(exp)}"


def _mass_unit(exponent: int) -> str:
    return rf"$10^{{{exponent}}}\,M_\odot$" if exponent else r"$M_\odot$"


def _plain_log_ticks(axis) -> None:
    """Log x-axis tick labels as plain numbers between 1e-3 and 1e5 (matplotlib picks which)."""
    import matplotlib
    from matplotlib.ticker import LogFormatterSciNotation

    class _Plain(LogFormatterSciNotation):
        def __call__(self, x, pos=None):
            text = super().__call__(x, pos)
            return f"{x:g}" if text and 1e-3 <= abs(x) < 1e5 else text

    axis.set_major_formatter(_Plain())
    axis.set_minor_formatter(_Plain(labelOnlyBase=False))
    # minor ticks are shorter: pad their labels so they line up with the major ones
    rc = matplotlib.rcParams
    axis.set_tick_params(which="minor", pad=rc["xtick.major.pad"] + rc["xtick.major.size"] - rc["xtick.minor.size"])


def _plain(text: str) -> str:
    return str(text).replace("$", r"\$")


def _check_out_dir(out_dir: Path, overwrite: bool) -> None:
    if out_dir.exists() and not out_dir.is_dir():
        raise RunFolderError(f"{out_dir}: exists and is not a folder; choose another --out")
    if out_dir.is_dir() and any(out_dir.iterdir()) and not overwrite:
        raise RunFolderError(
            f"{out_dir}: folder exists and is not empty; choose another --out or pass "
            "--overwrite (overwrite=True) to replace it"
        )


def _move_into_place(staging: Path, out_dir: Path) -> None:
    if not out_dir.exists():
        os.replace(staging, out_dir)
        return
    aside = Path(tempfile.mkdtemp(dir=staging.parent, prefix=f".{out_dir.name}.old-"))
    os.rmdir(aside)
    os.replace(out_dir, aside)
    os.replace(staging, out_dir)
    shutil.rmtree(aside, ignore_errors=True)


def compare(
    runs: Sequence[RunLike],
    *,
    references: Sequence[str | Reference] = (),
    labels: Sequence[str] | None = None,
    combined: RunLike | None = None,
    seed: int = 0,
    n_draws: int = 100_000,
    threshold_sigma: float = DEFAULT_THRESHOLD_SIGMA,
) -> Comparison:
    """Compare mass posteriors pairwise and against reference values.

    Parameters
    ----------
    runs : sequence of Fit, Results, MassPosterior or path
        The runs (run folders are loaded with :func:`orbitmass.load`).
    references : sequence of str or Reference
        Reference masses, e.g. ``"disc=4.1e6 +- 0.1e6 solMass"``
        (:func:`parse_reference`).
    labels : sequence of str, optional
        One name per run (default: the folder name, else the target name).
    combined : Fit, Results, MassPosterior or path, optional
        A joint refit (:func:`combined_refit`): shown beside the parts,
        compared with the references and used as the point-mass band of the
        enclosed-mass figure.
    seed : int
        Seed of the resampling.
    n_draws : int
        Random pairs per comparison for the difference and ratio posteriors.
    threshold_sigma : float
        Tension threshold of the verdicts (default 3).

    Returns
    -------
    Comparison

    Raises
    ------
    InputError
        On bad labels, references or runs; :class:`RunFolderError` on unreadable run folders.
    """
    posts = _posteriors(runs, labels)
    if not posts:
        raise InputError("no runs to compare", key="runs")
    refs = [parse_reference(r, key=f"references[{i}]") for i, r in enumerate(references)]
    if not posts[1:] and not refs:
        raise InputError(
            "one run and no reference value: nothing to compare; give a second run or a reference",
            key="references",
        )
    ref_names = _unique([r.label for r in refs])
    refs = [r if r.label == n else replace(r, label=n) for r, n in zip(refs, ref_names, strict=True)]
    joint = None
    if combined is not None:
        joint = _as_posterior(combined, "joint refit")
        if joint.label in {p.label for p in posts}:
            joint = replace(joint, label=f"{joint.label} (2)")
    rng = np.random.default_rng(seed)
    pairs = []
    for i, a in enumerate(posts):
        for b in posts[i + 1 :]:
            pairs.append(compare_samples(a, b, rng=rng, n_draws=n_draws, threshold_sigma=threshold_sigma))
    for a in posts + ([joint] if joint is not None else []):
        for f in refs:
            kind = "joint-reference" if a is joint else "run-reference"
            pairs.append(compare_samples(a, f, rng=rng, n_draws=n_draws, threshold_sigma=threshold_sigma, kind=kind))
    return Comparison(runs=posts, references=refs, pairs=pairs, combined=joint, seed=seed, n_draws=n_draws,
                      threshold_sigma=threshold_sigma)


# ============================================================================ joint refit
def _target_of(run: RunLike, label: str | None) -> tuple[Target, str]:
    """The fitted (or to-be-fitted) target of a run, and the run's label."""
    if isinstance(run, Target):
        return run, label or run.name
    if isinstance(run, (str, os.PathLike)) and Path(run).is_file():
        from orbitmass.io.target import read_target

        return read_target(run), label or Path(run).resolve().parent.name
    post = _as_posterior(run, label)
    if post.results is None:
        raise InputError(f"run {post.label!r} has no target (plain samples); a joint refit needs Fit, "
                         "Results, Target objects, run folders or target files", key="runs")
    return post.results.target, post.label


def _is_full_circle(prior) -> bool:
    from orbitmass.model.priors import Uniform

    return isinstance(prior, Uniform) and prior.high - prior.low >= 2 * math.pi - 1e-9


def _concat(parts: Sequence[Any], cls, names: Sequence[str]):
    """One Astrometry/Velocities table from several, sorted by epoch."""
    order = np.argsort(np.concatenate([p.t_yr for p in parts]), kind="stable")
    arrays = {n: np.concatenate([np.asarray(getattr(p, n)) for p in parts])[order] for n in names}
    source = "; ".join(dict.fromkeys(p.source for p in parts if p.source))
    return cls(**arrays, source=source)


_ASTRO_FIELDS = ("t_yr", "polar", "value1", "value2", "err1", "err2", "corr", "lines")
_VEL_FIELDS = ("t_yr", "rv_kms", "rv_err_kms", "instrument", "central", "lines")


def _merge_companions(name: str, comps: Sequence[Companion], labels: Sequence[str]) -> Companion:
    first = comps[0]
    for c, lab in zip(comps[1:], labels[1:], strict=True):
        if c.priors != first.priors or c.plane != first.plane:
            raise InputError(
                f"companion {name!r} has different priors or planes in runs {labels[0]!r} and "
                f"{lab!r}; merging one companion's data needs identical priors (or use "
                "same_companion='rename' / --same-companion rename)",
                key=f"companion {name}",
            )
    astro = [c.astrometry for c in comps if c.astrometry is not None]
    vel = [c.velocities for c in comps if c.velocities is not None]
    return replace(
        first,
        astrometry=_concat(astro, Astrometry, _ASTRO_FIELDS) if astro else None,
        velocities=_concat(vel, Velocities, _VEL_FIELDS) if vel else None,
    )


def _pick(values: Sequence[Any], labels: Sequence[str], what: str, key: str, priors_from: str | None) -> Any:
    if priors_from is not None:
        return values[labels.index(priors_from)]
    for v, lab in zip(values[1:], labels[1:], strict=True):
        if v != values[0]:
            raise InputError(
                f"runs {labels[0]!r} and {lab!r} have different {what} ({values[0]!r} vs {v!r}); a "
                "joint fit needs one: pass priors_from=LABEL (--priors-from LABEL) to take that "
                "run's",
                key=key,
            )
    return values[0]


def combined_target(
    runs: Sequence[RunLike],
    *,
    labels: Sequence[str] | None = None,
    same_companion: str = "rename",
    priors_from: str | None = None,
) -> Target:
    """One target holding the data of every run, for a joint fit of one central body.

    Parameters
    ----------
    runs : sequence of Fit, Results, Target or path
        At least two runs: fitted runs, run folders, or (not yet fitted)
        targets and target files; default labels are the folder or target names.
    labels : sequence of str, optional
        One name per run (default as in :func:`compare`); used in renamed names.
    same_companion : {"rename", "merge"}
    priors_from : str, optional
        Label of the run whose central priors and distance to use.

    Returns
    -------
    Target
        Named ``"joint: <label> + <label>..."``; its ``data_sha256`` is the
        SHA-256 of the parts' digests.

    Raises
    ------
    InputError
        On any conflict listed in the Notes, naming the runs and the key.

    Notes
    -----
    Rules of the union:

    - Companions: the union. A name used in more than one run is renamed
      ``"<label>:<name>"`` (``same_companion="rename"``, the default: different
      bodies), or its tables are concatenated into one companion
      (``"merge"``: the same body observed in several runs, e.g. split epoch
      ranges; its priors and plane must then be identical). Plane names used
      in more than one run are renamed the same way with ``"rename"``; with
      ``"merge"`` they are kept, so equal plane names become one plane.
    - Instruments: the union; the same name is the same instrument, and must
      have identical offset and jitter priors in every run.
    - Central body and distance: the frame, the central priors (total mass,
      frame terms) and the distance information (prior, parallax, redshift,
      cosmology) must be identical in every run, since a joint fit has one of
      each. When they differ the function raises, unless
      ``priors_from=LABEL`` names the run whose central priors, distance and
      reference epoch are taken (the others' are dropped, not multiplied:
      several distance priors usually restate one external measurement).
    - Reference epoch: the first run's (or ``priors_from``'s). When the runs'
      epochs differ, every mean-anomaly prior must be uniform over the full
      circle and the frame relative, because otherwise a prior tied to an
      epoch would change meaning.
    """
    if same_companion not in ("rename", "merge"):
        raise InputError(
            f"same_companion must be 'rename' or 'merge', got {same_companion!r}",
            key="same_companion",
        )
    if isinstance(runs, (str, os.PathLike)) or not isinstance(runs, Sequence) or len(runs) < 2:
        raise InputError("a joint refit needs at least two runs", key="runs")
    given = _labels(runs, labels)
    pairs = [_target_of(r, lab) for r, lab in zip(runs, given, strict=True)]
    names = _unique([lab for _, lab in pairs])
    targets = [t for t, _ in pairs]
    if priors_from is not None and priors_from not in names:
        raise InputError(f"priors_from={priors_from!r} is not one of the run labels {names}", key="priors_from")
    frame = _pick([t.frame for t in targets], names, "frames", "central.frame", None)
    central = _pick([t.central_priors for t in targets], names, "central-body priors", "central", priors_from)
    distance = _pick([t.distance for t in targets], names, "distance information", "distance", priors_from)
    base = targets[names.index(priors_from)] if priors_from is not None else targets[0]
    epochs = {float(t.reference_epoch) for t in targets}
    if len(epochs) > 1:
        tied = [
            f"{lab}:{c.name}"
            for t, lab in zip(targets, names, strict=True)
            for c in t.companions
            if "mean_anomaly" in c.priors and not _is_full_circle(c.priors["mean_anomaly"])
        ]
        if frame == "absolute" or tied:
            why = (
                "the absolute frame's position and motion"
                if frame == "absolute"
                else f"the mean-anomaly priors of {', '.join(tied)}"
            )
            raise InputError(
                "the runs have different reference epochs "
                f"({', '.join(f'{e:g}' for e in sorted(epochs))}) "
                f"and {why} refer to them; give the targets one reference_epoch",
                key="target.reference_epoch",
            )
    instruments: dict[str, Any] = {}
    owner: dict[str, str] = {}
    for t, lab in zip(targets, names, strict=True):
        for iname, inst in t.instruments.items():
            if iname in instruments and instruments[iname] != inst:
                raise InputError(
                    f"instrument {iname!r} has different priors in runs {owner[iname]!r} and "
                    f"{lab!r}; the same name means the same instrument: give it identical priors "
                    "or rename it",
                    key=f"instruments.{iname}",
                )
            instruments.setdefault(iname, inst)
            owner.setdefault(iname, lab)
    count: dict[str, int] = {}
    plane_count: dict[str, int] = {}
    for t in targets:
        for c in t.companions:
            count[c.name] = count.get(c.name, 0) + 1
        for p in {c.plane for c in t.companions if c.plane}:
            plane_count[p] = plane_count.get(p, 0) + 1
    companions: list[Companion] = []
    merged: dict[str, list[tuple[Companion, str]]] = {}
    for t, lab in zip(targets, names, strict=True):
        safe = lab.replace(".", "_")
        for c in t.companions:
            if count[c.name] > 1 and same_companion == "merge":
                merged.setdefault(c.name, []).append((c, lab))
                if len(merged[c.name]) == 1:
                    companions.append(c)  # placeholder, replaced below
                continue
            new = c
            if count[c.name] > 1:
                new = replace(new, name=f"{safe}:{c.name}")
            if c.plane and plane_count[c.plane] > 1 and same_companion == "rename":
                new = replace(new, plane=f"{safe}:{c.plane}")
            companions.append(new)
    for name, group in merged.items():
        idx = next(i for i, c in enumerate(companions) if c.name == name)
        companions[idx] = _merge_companions(name, [c for c, _ in group], [lab for _, lab in group])
    digest = hashlib.sha256("\n".join(t.data_sha256 for t in targets).encode("utf-8")).hexdigest()
    return Target(
        name="joint: " + " + ".join(names),
        reference_epoch=float(base.reference_epoch),
        frame=frame,
        central_priors=dict(central),
        distance=distance,
        instruments=instruments,
        companions=tuple(companions),
        source="",
        data_sha256=digest,
    )


def combined_refit(
    runs: Sequence[RunLike],
    *,
    seed: int | None,
    labels: Sequence[str] | None = None,
    same_companion: str = "rename",
    priors_from: str | None = None,
    **fit_options: Any,
):
    """Fit the union of the runs' data jointly (one central mass, one distance).

    Parameters
    ----------
    runs : sequence of Fit, Results, Target or path
        The runs to combine (see :func:`combined_target` for the rules).
    seed : int or None
        Seed of the joint fit.
    labels, same_companion, priors_from
        As in :func:`combined_target`.
    **fit_options
        Passed to :class:`~orbitmass.fit.Fit` (``max_steps``, ``progress``, ``n_walkers``...).

    Returns
    -------
    Fit
        The fitted joint run.
    """
    from orbitmass.fit import Fit

    target = combined_target(runs, labels=labels, same_companion=same_companion, priors_from=priors_from)
    log.info("joint refit of %s: %d companions", target.name, len(target.companions))
    fit_options.setdefault("progress", False)
    return Fit(seed=seed, **fit_options).fit(target)


# ============================================================================ demo
#: invented truth of the comparison demo: the dark mass of the (invented) Quillon Dwarf
DEMO_MASS_MSUN = 3.6e6
DEMO_DISTANCE_PC = 46000.0
_DEMO_DATA_SEED = 20261207
#: an invented "published" value for the demo (e.g. from gas kinematics)
DEMO_REFERENCE = "gas-disc estimate=3.1e6 +0.5e6 -0.4e6 solMass"

#: (folder, star, team, spectrograph, invented orbital elements, sampling and errors)
_DEMO_DATASETS = (
    ("north-team", "QD-S4", "north team", "north-spec",
     {"period_yr": 14.2, "eccentricity": 0.71, "inclination_deg": 118.0, "arg_periastron_deg": 64.0,
      "ascending_node_deg": 227.0, "periastron_time": 2018.35},
     {"t_range": (2009.0, 2026.5), "n_pos": 18, "n_rv": 12, "pos_err_mas": 0.12, "rv_err_kms": 15.0}),
    ("south-team", "QD-S9", "south team", "south-echelle",
     {"period_yr": 9.3, "eccentricity": 0.38, "inclination_deg": 41.0, "arg_periastron_deg": 302.0,
      "ascending_node_deg": 95.0, "periastron_time": 2015.6},
     {"t_range": (2012.0, 2026.5), "n_pos": 16, "n_rv": 10, "pos_err_mas": 0.15, "rv_err_kms": 20.0}),
)

_DEMO_TARGET = """\
# Invented demo: the star {star} around the dormant black hole of the Quillon Dwarf,
# observed by the (invented) {team}.
[target]
name = "Quillon Dwarf nucleus ({team})"
reference_epoch = 2018.0

[central]
mass = {{ dist = "log-uniform", low = "1e4 solMass", high = "1e9 solMass" }}

[distance]
prior = {{ dist = "uniform", low = "10 kpc", high = "200 kpc" }}

[instruments.{spec}]

[[companion]]
name = "{star}"
astrometry = "{slug}_positions.csv"
velocities = "{slug}_velocities.csv"
period = {{ dist = "log-uniform", low = "1 yr", high = "200 yr" }}
"""


def _write_demo_dataset(
    folder: Path,
    rng: np.random.Generator,
    *,
    star: str,
    team: str,
    spec: str,
    orbit,
    t_range: tuple[float, float],
    n_pos: int,
    n_rv: int,
    pos_err_mas: float,
    rv_err_kms: float,
) -> Path:
    from orbitmass.demo.simulate import simulate, write_positions_csv, write_velocities_csv

    folder.mkdir(parents=True, exist_ok=True)
    slug = star.lower().replace(" ", "-")
    t_pos = np.sort(rng.uniform(*t_range, n_pos))
    sim = simulate(orbit, t_pos)
    write_positions_csv(
        folder / f"{slug}_positions.csv",
        t_pos,
        sim["east_mas"] + rng.normal(0, pos_err_mas, n_pos),
        sim["north_mas"] + rng.normal(0, pos_err_mas, n_pos),
        pos_err_mas,
        comment=f"{star} relative to the dark mass of the Quillon Dwarf, {team} (invented data)",
    )
    t_rv = np.sort(rng.uniform(t_range[0] + 1.0, t_range[1], n_rv))
    sim_v = simulate(orbit, t_rv)
    write_velocities_csv(
        folder / f"{slug}_velocities.csv",
        t_rv,
        sim_v["rv_companion_kms"] + rng.normal(0, rv_err_kms, n_rv),
        rv_err_kms,
        instrument=np.full(n_rv, spec),
        comment=f"{star} line-of-sight velocities, {team} (invented data)",
    )
    path = folder / "target.toml"
    write_atomic(path, _DEMO_TARGET.format(star=star, team=team, spec=spec, slug=slug))
    return path


def demo_comparison(
    out_dir: str | os.PathLike[str],
    seed: int = 1,
    *,
    overwrite: bool = False,
    progress: bool | None = False,
    max_steps: int = 20000,
) -> Path:
    """Invented demo: two datasets of one black hole, fitted apart, compared and fitted jointly.

    Two invented teams track two invented stars around the invented dark mass
    of the Quillon Dwarf (3.6e6 Msun at 46 kpc): the "north team" follows
    QD-S4 with the spectrograph "north-spec", the "south team" follows QD-S9
    with "south-echelle". Data are simulated with a fixed seed
    (:mod:`orbitmass.demo.simulate`); the fits use ``seed``. Written:
    ``out_dir/data/<team>/`` (target files and tables) and
    ``out_dir/comparison/`` (see :meth:`Comparison.write`; the joint run
    folder is not saved, to keep the demo short).

    Parameters
    ----------
    out_dir : path
        Folder to write; must be new or empty unless ``overwrite``.
    seed : int
        Seed of the fits and of the comparison.
    overwrite : bool
        Replace the demo's files in a non-empty ``out_dir``.
    progress : bool or None
        Progress bars of the fits.
    max_steps : int
        Step cap of each fit.

    Returns
    -------
    Path
        The comparison folder ``out_dir/comparison``.
    """
    from orbitmass.demo.simulate import TrueOrbit
    from orbitmass.fit import Fit

    out_dir = Path(out_dir)
    _check_out_dir(out_dir, overwrite)
    t0 = time.perf_counter()
    rng = np.random.default_rng(_DEMO_DATA_SEED)
    paths, labels = [], []
    for folder, star, team, spec, elements, data in _DEMO_DATASETS:
        orbit = TrueOrbit(mass_msun=DEMO_MASS_MSUN, distance_pc=DEMO_DISTANCE_PC, **elements)
        paths.append(_write_demo_dataset(out_dir / "data" / folder, rng, star=star, team=team, spec=spec,
                                         orbit=orbit, **data))
        labels.append(f"{star} ({team})")
    fits = [Fit(seed=seed, progress=progress, max_steps=max_steps).fit(p) for p in paths]
    joint = combined_refit(fits, seed=seed, labels=labels, progress=progress, max_steps=max_steps)
    cmp = compare(fits, references=[DEMO_REFERENCE], labels=labels, combined=joint, seed=seed)
    dest = cmp.write(out_dir / "comparison", overwrite=True, save_combined=False)
    log.info("comparison demo written to %s in %.1f s", dest, time.perf_counter() - t0)
    return dest


# ============================================================================ command line
def add_compare_parser(subparsers) -> argparse.ArgumentParser:
    """Add the ``compare`` command to the ``orbitmass`` sub-parsers; returns its parser."""
    p = subparsers.add_parser(
        "compare",
        help="compare the mass posteriors of saved runs, and fit their data jointly",
        description="Compare the mass posteriors of the run folders RUN_DIR... pairwise and "
        "against "
        "reference values (difference, ratio, tension in sigma, overlap), optionally refit "
        "the union of their data as one central body, and write comparison.json, "
        "comparison.md and figures into DIR.",
    )
    p.add_argument("run_dirs", nargs="+", metavar="RUN_DIR", help="run folders written by 'orbitmass fit'")
    p.add_argument(
        "--reference",
        action="append",
        default=[],
        metavar="'[NAME=]M +- ERR UNIT'",
        help="a reference mass, e.g. 'gas disc=4.1e6 +- 0.1e6 solMass' or '4.1e6 +0.2e6 -0.1e6 solMass' (repeatable)",
    )
    p.add_argument(
        "--label",
        action="append",
        default=None,
        metavar="NAME",
        help="name of each run, in RUN_DIR order (repeat once per run; default: folder names)",
    )
    p.add_argument("--out", required=True, metavar="DIR", help="folder to write (must be new or empty)")
    p.add_argument(
        "--refit",
        action="store_true",
        help="also fit the union of the runs' data as one central body (written to DIR/combined)",
    )
    p.add_argument(
        "--same-companion",
        choices=("rename", "merge"),
        default="rename",
        help="with --refit, a companion name found in several runs: 'rename' (different bodies, "
        "default) or 'merge' (one body: concatenate its data)",
    )
    p.add_argument(
        "--priors-from",
        default=None,
        metavar="LABEL",
        help="with --refit, take central priors and distance from this run when they differ",
    )
    p.add_argument(
        "--seed",
        type=int,
        default=1,
        metavar="N",
        help="seed of the resampling and of the refit (default 1)",
    )
    p.add_argument(
        "--max-steps",
        type=int,
        default=20000,
        metavar="N",
        help="step cap of the refit (default 20000)",
    )
    p.add_argument("--overwrite", action="store_true", help="replace DIR if it exists and is not empty")
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    return p


def cmd_compare(args: argparse.Namespace) -> int:
    """Run ``orbitmass compare``; exit code 0, or 1 when the joint refit did not converge.

    Errors are raised as :class:`~orbitmass.exceptions.OrbitmassError` for the caller to report.
    """
    from orbitmass.fit import load

    labels = _labels(args.run_dirs, args.label, key="--label")
    refs = [parse_reference(text, key="--reference") for text in args.reference]
    out = Path(args.out)
    _check_out_dir(out, args.overwrite)
    if args.max_steps < 1:
        raise InputError(f"--max-steps must be at least 1, got {args.max_steps}", key="--max-steps")
    if args.seed < 0:
        raise InputError(f"--seed must be a whole number >= 0, got {args.seed}", key="--seed")
    if len(args.run_dirs) < 2 and not refs:
        raise InputError("one run and no --reference: nothing to compare", key="RUN_DIR")
    if args.priors_from is not None and not args.refit:
        raise InputError("--priors-from only applies with --refit", key="--priors-from")
    fits = [load(d) for d in args.run_dirs]
    names = _unique(_labels_or_dirs(args.run_dirs, labels))
    joint = None
    if args.refit:
        joint = combined_refit(fits, seed=args.seed, labels=names, same_companion=args.same_companion,
                               priors_from=args.priors_from, max_steps=args.max_steps,
                               progress=False if args.no_progress else None)
    posts = [MassPosterior.from_results(f.results, n, source=str(d))
             for f, n, d in zip(fits, names, args.run_dirs, strict=True)]
    cmp = compare(posts, references=refs, combined=joint, seed=args.seed)
    cmp.write(out, overwrite=args.overwrite)
    w = sys.stdout.write
    for p in cmp.pairs:
        w(f"{p.a} vs {p.b}: {p.statement}\n")
    code = 0
    if cmp.combined is not None:
        c = cmp.combined.quantiles()
        w(
            f"joint refit: total mass {c['median']:.4g} (+{c['q84'] - c['median']:.2g} / "
            f"-{c['median'] - c['q16']:.2g}) Msun\n"
        )
        if cmp.combined.converged is False:
            sys.stderr.write("warning: the joint refit did not converge; results are provisional\n")
            code = 1
    w(f"comparison: {out / 'comparison.md'}\n")
    return code


def _labels_or_dirs(run_dirs: Sequence[str], labels: Sequence[str | None]) -> list[str]:
    pairs = zip(run_dirs, labels, strict=True)
    return [lab if lab is not None else Path(d).resolve().name for d, lab in pairs]
