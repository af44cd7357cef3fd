"""The comparison of two mass posteriors: difference, ratio, tension, overlap, verdict.

See :mod:`orbitmass.compare` for the method. :func:`compare_samples` compares two
independent posteriors (or a posterior and a :class:`~orbitmass.compare.references.Reference`)
and returns a :class:`PairComparison`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from orbitmass.compare.posteriors import KDE_GRID_POINTS, MassPosterior
from orbitmass.compare.references import Reference
from orbitmass.exceptions import InputError
from orbitmass.results import quantile_block

__all__ = ["PairComparison", "compare_samples", "tension_sigma", "normal_approx_sigma", "finite_or_none",
           "DEFAULT_THRESHOLD_SIGMA", "METHOD"]

#: tension threshold (sigma) of the verdict "tension" (common practice, no source)
DEFAULT_THRESHOLD_SIGMA = 3.0
#: one-sided 95 % Poisson upper limit on a count when none is observed: -ln(0.05)
_RULE_OF_THREE = -math.log(0.05)

#: the method, as written into comparison.json and comparison.md
METHOD = {
    "difference": "draws of a and b paired by resampling with replacement (seeded); "
    "reference values drawn from a Gaussian or, for asymmetric errors, a two-piece normal",
    "tension": "P = P(a > b) over all pairs; p = 2 min(P, 1 - P); sigma = norm.isf(p / 2); "
    "Monte Carlo error sqrt(P (1 - P) / n_eff) / phi(sigma), n_eff = smaller mass ESS of the two",
    "lower_bound": "when min(P, 1 - P) * n_eff < 1 the samples cannot resolve the tail: sigma "
    "is reported as a lower bound norm.isf(3 / n_eff) (95 % Poisson upper limit on the tail "
    "count); "
    "beside it sigma_normal_approx = |mean(a) - mean(b)| / sqrt(var(a) + var(b)), the normal "
    "approximation (sample moments of runs, exact moments of references): an estimate of the size the "
    "samples cannot show, exact only for Gaussian posteriors",
    "overlap": "Bhattacharyya coefficient int sqrt(p_a p_b) dM (Bhattacharyya 1943) and "
    "overlapping coefficient int min(p_a, p_b) dM; run densities by Gaussian KDE (Scott), "
    "references exact",
    "verdict": "tension if sigma (or its lower bound) >= threshold_sigma; consistent below; "
    "unresolved when only a lower bound below the threshold is available",
    "combined": "joint refit of the union of the runs' data (one central mass, one distance); "
    "the joint result is not compared with its own parts (they are not independent)",
}


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
        The normal approximation ``|mean(a) - mean(b)| / sqrt(var(a) + var(b))``
        (see :func:`normal_approx_sigma`): an estimate, not a measurement of the
        tail; beside a lower bound it gives the size the samples cannot show.
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
        return finite_or_none(d)


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


def normal_approx_sigma(a: _Dist, b: _Dist) -> float:
    """Tension in the normal approximation: ``|mean(a) - mean(b)| / sqrt(var(a) + var(b))``.

    Exact when both are Gaussian (the difference of independent normals is
    normal with the variances added); posteriors contribute their sample mean
    and variance, references the exact moments of their two-piece normal.
    Labelled as an approximation wherever it is shown: for skewed or
    heavy-tailed posteriors it can be far off in either direction.

    Examples
    --------
    >>> from orbitmass.compare.references import parse_reference
    >>> a, b = parse_reference("1.5 +- 0.03 solMass"), parse_reference("1.0 +- 0.04 solMass")
    >>> round(normal_approx_sigma(a, b), 6)
    10.0
    """
    var = a.variance() + b.variance()
    diff = abs(a.mean() - b.mean())
    if var > 0:
        return diff / math.sqrt(var)
    return 0.0 if diff == 0 else math.inf


def _overlap(a: _Dist, b: _Dist) -> tuple[float, float]:
    """Bhattacharyya and overlapping coefficients of two mass densities."""
    if any(isinstance(d, MassPosterior) and not d.has_density for d in (a, b)):
        return float("nan"), float("nan")
    grid = np.unique(np.concatenate([np.linspace(*d.span(), KDE_GRID_POINTS) for d in (a, b)]))
    pa, pb = a.pdf(grid), b.pdf(grid)
    bc = float(np.trapezoid(np.sqrt(pa * pb), grid))
    ovl = float(np.trapezoid(np.minimum(pa, pb), grid))
    return min(bc, 1.0), min(ovl, 1.0)


def _verdict(sigma: float, bound: bool, n_eff: float, threshold: float, approx: float) -> tuple[str, str]:
    normal = f"normal approximation {approx:.1f} sigma"
    if bound and sigma >= threshold:
        return "tension", (
            f"in tension at > {sigma:.1f} sigma from the samples (lower bound: fewer than one "
            f"effective sample lies beyond zero difference); {normal}"
        )
    if bound:
        return "unresolved", (
            f"differ by more than {sigma:.1f} sigma, the most {n_eff:.0f} effective samples "
            f"can show ({normal}); more samples are needed to test the {threshold:g} sigma threshold"
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
    approx = normal_approx_sigma(a, b)
    bc, ovl = _overlap(a, b)
    verdict, statement = _verdict(sigma, bound, n_eff, threshold_sigma, approx)
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


def finite_or_none(obj):
    """Plain JSON types; non-finite numbers become None (strict JSON)."""
    if isinstance(obj, dict):
        return {str(k): finite_or_none(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [finite_or_none(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (float, np.floating, int, np.integer)):
        v = float(obj) if isinstance(obj, (float, np.floating)) else int(obj)
        return v if not isinstance(v, float) or math.isfinite(v) else None
    return obj
