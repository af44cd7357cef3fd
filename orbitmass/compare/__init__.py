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
    extrapolation is used for the headline number. Beside it (in the
    statement, ``comparison.json``, ``comparison.md`` and the figure) stands
    the normal approximation ``sigma_normal_approx = |mean(a) - mean(b)| /
    sqrt(var(a) + var(b))`` (sample moments of runs, exact moments of the
    two-piece normal of a reference), labelled as such: exact for Gaussian
    posteriors, an estimate otherwise. A 1.5 +- 0.01 Msun reference against a
    1.0 +- 0.01 Msun posterior of 40000 independent samples reads "in
    tension at > 3.8 sigma from the samples (lower bound ...); normal
    approximation 35.3 sigma" (the exact Gaussian value is 35.36).
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
    central body and one distance. Each run keeps its instrument offset and
    jitter priors; a later run's velocity zero point gets a sampled offset
    relative to the first run's. See its docstring for the rules.

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
    ``tension_sigma_mc_error`` (``null`` for a bound), ``sigma_normal_approx`` (the
    normal approximation, see "Lower bounds"),
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

from orbitmass._compat import moved_name

from orbitmass.compare.comparison import Comparison, compare
from orbitmass.compare.folders import compare_folders
from orbitmass.compare.merge import combined_target
from orbitmass.compare.posteriors import MassPosterior
from orbitmass.compare.references import Reference, parse_reference
from orbitmass.compare.refit import combined_refit
from orbitmass.compare.tension import (
    DEFAULT_THRESHOLD_SIGMA,
    PairComparison,
    compare_samples,
    normal_approx_sigma,
    tension_sigma,
)

__all__ = [
    "Reference",
    "parse_reference",
    "MassPosterior",
    "PairComparison",
    "compare_samples",
    "tension_sigma",
    "normal_approx_sigma",
    "Comparison",
    "compare",
    "combined_target",
    "combined_refit",
    "compare_folders",
    "DEFAULT_THRESHOLD_SIGMA",
]


def __getattr__(name: str):
    """Names that moved out of this module (deprecated, see :mod:`orbitmass._compat`)."""
    return moved_name(__name__, name)
