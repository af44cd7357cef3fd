"""Prior families: one small class each, on plain floats in internal units.

Each prior knows its log density (``log_pdf``, normalised, ``-inf`` outside the
support), how to draw from itself (``sample``), its support and a one-line
description for reports. Values are in the internal unit of the quantity the
prior is on (see :mod:`orbitmass.units`); angles are in radians.

To add a family: subclass :class:`Prior` as a frozen dataclass whose fields are
the keys of the target file (fields with a default are optional keys),
implement the four members, list the dimensionless keys in ``shape_keys``
(bare numbers whatever the unit of the quantity), check the ranges of the
values in ``validate``, and add it to :data:`FAMILIES` under the ``dist`` name
used in target files. :func:`make_prior` builds any family from its keys and
validates them; ``tests/model/test_priors.py`` holds the contract every family must
meet (normalised density, agreement with scipy.stats, draws that follow the
density, support, description, validation).

Examples
--------
The standard normal density at 0 is 1 / sqrt(2 pi) (``scipy.stats.norm.logpdf(0)``):

>>> print(f"{float(Normal(0.0, 1.0).log_pdf(0.0)):.12f}")
-0.918938533205
>>> Uniform(0.0, 2.0).log_pdf([1.0, 3.0]).tolist()
[-0.6931471805599453, -inf]
>>> LogUniform(1.0, 100.0).describe("pc")
'log-uniform on [1 pc, 100 pc]'
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import MISSING, dataclass, fields
from typing import ClassVar

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special

from orbitmass.exceptions import InputError

__all__ = [
    "Prior",
    "Normal",
    "TruncNormal",
    "Uniform",
    "LogUniform",
    "Fixed",
    "Isotropic",
    "Beta",
    "LogNormal",
    "FAMILIES",
    "make_prior",
    "optional_keys",
]

_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)


class Prior:
    """Base class: a normalised one-dimensional prior."""

    dist: str = ""
    #: keys whose values are bare numbers whatever the unit of the quantity (shape parameters)
    shape_keys: ClassVar[tuple[str, ...]] = ()

    @classmethod
    def validate(cls, values: Mapping[str, float]) -> None:
        """Raise :class:`InputError` (``key`` = the offending key) when ``values`` are out of range.

        ``values`` hold every key of the family (optional ones filled in), as finite floats.
        """

    @property
    def fixed(self) -> bool:
        """True when the quantity is held fixed (not sampled)."""
        return False

    @property
    def positive(self) -> bool:
        """True when the support lies in (0, inf), so log sampling is possible."""
        low, _ = self.support
        return low >= 0.0

    @property
    def support(self) -> tuple[float, float]:
        """(low, high) bounds of the support."""
        raise NotImplementedError

    def log_pdf(self, x: ArrayLike) -> NDArray[np.float64]:
        """Log density at ``x`` (any shape); ``-inf`` outside the support."""
        raise NotImplementedError

    def sample(self, rng: np.random.Generator, size: int | tuple[int, ...]) -> NDArray[np.float64]:
        """Draw ``size`` values with generator ``rng``."""
        raise NotImplementedError

    def describe(self, unit: str = "", scale: float = 1.0) -> str:
        """One line for reports, values multiplied by ``scale`` and given in ``unit``."""
        raise NotImplementedError


def _require(values: Mapping[str, float], key: str, ok: bool, expected: str) -> None:
    if not ok:
        raise InputError(f"{key} {expected}, got {values[key]:g}", key=key)


def _fmt(value: float, unit: str, scale: float) -> str:
    v = value * scale
    text = f"{v:.6g}"
    return f"{text} {unit}".strip()


@dataclass(frozen=True)
class Normal(Prior):
    """Gaussian with mean ``mean`` and standard deviation ``sd`` > 0."""

    mean: float
    sd: float
    dist = "normal"

    @classmethod
    def validate(cls, values):
        _require(values, "sd", values["sd"] > 0.0, "must be positive")

    @property
    def support(self) -> tuple[float, float]:
        return (-math.inf, math.inf)

    @property
    def positive(self) -> bool:
        return False

    def log_pdf(self, x: ArrayLike) -> NDArray[np.float64]:
        z = (np.asarray(x, dtype=float) - self.mean) / self.sd
        return -0.5 * z * z - _LOG_SQRT_2PI - math.log(self.sd)

    def sample(self, rng, size):
        return rng.normal(self.mean, self.sd, size)

    def describe(self, unit="", scale=1.0):
        return f"normal(mean {_fmt(self.mean, unit, scale)}, sd {_fmt(self.sd, unit, scale)})"


@dataclass(frozen=True)
class TruncNormal(Prior):
    """Gaussian ``mean``, ``sd`` cut to [``low``, ``high``] and renormalised."""

    mean: float
    sd: float
    low: float
    high: float
    dist = "truncnormal"

    @classmethod
    def validate(cls, values):
        _require(values, "sd", values["sd"] > 0.0, "must be positive")
        _require(values, "low", values["low"] < values["high"], f"must be below high ({values['high']:g})")

    @property
    def support(self) -> tuple[float, float]:
        return (self.low, self.high)

    def _log_norm(self) -> float:
        a = (self.low - self.mean) / self.sd
        b = (self.high - self.mean) / self.sd
        # log(Phi(b) - Phi(a)) computed stably on the side with the smaller tail
        if a > 0:
            return float(special.log_ndtr(-a) + np.log1p(-np.exp(special.log_ndtr(-b) - special.log_ndtr(-a))))
        return float(special.log_ndtr(b) + np.log1p(-np.exp(special.log_ndtr(a) - special.log_ndtr(b))))

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        z = (x - self.mean) / self.sd
        out = -0.5 * z * z - _LOG_SQRT_2PI - math.log(self.sd) - self._log_norm()
        return np.where((x >= self.low) & (x <= self.high), out, -np.inf)

    def sample(self, rng, size):
        from scipy.stats import truncnorm  # start-up time: loaded only when needed

        a = (self.low - self.mean) / self.sd
        b = (self.high - self.mean) / self.sd
        return truncnorm.rvs(a, b, loc=self.mean, scale=self.sd, size=size, random_state=rng)

    def describe(self, unit="", scale=1.0):
        return (
            f"truncated normal(mean {_fmt(self.mean, unit, scale)}, sd {_fmt(self.sd, unit, scale)},"
            f" on [{_fmt(self.low, unit, scale)}, {_fmt(self.high, unit, scale)}])"
        )


@dataclass(frozen=True)
class Uniform(Prior):
    """Flat on [``low``, ``high``]."""

    low: float
    high: float
    dist = "uniform"

    @classmethod
    def validate(cls, values):
        _require(values, "low", values["low"] < values["high"], f"must be below high ({values['high']:g})")

    @property
    def support(self) -> tuple[float, float]:
        return (self.low, self.high)

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        inside = (x >= self.low) & (x <= self.high)
        return np.where(inside, -math.log(self.high - self.low), -np.inf)

    def sample(self, rng, size):
        return rng.uniform(self.low, self.high, size)

    def describe(self, unit="", scale=1.0):
        return f"uniform on [{_fmt(self.low, unit, scale)}, {_fmt(self.high, unit, scale)}]"


@dataclass(frozen=True)
class LogUniform(Prior):
    """Flat in log on [``low``, ``high``], 0 < low < high."""

    low: float
    high: float
    dist = "log-uniform"

    @classmethod
    def validate(cls, values):
        _require(values, "low", values["low"] > 0.0, "must be positive (the log of it is taken)")
        _require(values, "low", values["low"] < values["high"], f"must be below high ({values['high']:g})")

    @property
    def support(self) -> tuple[float, float]:
        return (self.low, self.high)

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        inside = (x >= self.low) & (x <= self.high)
        with np.errstate(divide="ignore", invalid="ignore"):
            out = -np.log(np.where(inside, x, 1.0)) - math.log(math.log(self.high / self.low))
        return np.where(inside, out, -np.inf)

    def sample(self, rng, size):
        return np.exp(rng.uniform(math.log(self.low), math.log(self.high), size))

    def describe(self, unit="", scale=1.0):
        return f"log-uniform on [{_fmt(self.low, unit, scale)}, {_fmt(self.high, unit, scale)}]"


@dataclass(frozen=True)
class Fixed(Prior):
    """Held at ``value``: not sampled."""

    value: float
    dist = "fixed"

    @property
    def fixed(self) -> bool:
        return True

    @property
    def support(self) -> tuple[float, float]:
        return (self.value, self.value)

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        return np.where(x == self.value, 0.0, -np.inf)

    def sample(self, rng, size):
        return np.full(size, self.value, dtype=float)

    def describe(self, unit="", scale=1.0):
        return f"fixed at {_fmt(self.value, unit, scale)}"


@dataclass(frozen=True)
class Isotropic(Prior):
    """Inclination of an isotropically oriented orbit: p(i) = sin(i) / 2 on [0, pi] (radians)."""

    dist = "isotropic"

    @property
    def support(self) -> tuple[float, float]:
        return (0.0, math.pi)

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        inside = (x >= 0.0) & (x <= math.pi)
        with np.errstate(divide="ignore"):
            out = np.log(np.abs(np.sin(np.where(inside, x, 1.0)))) - math.log(2.0)
        return np.where(inside, out, -np.inf)

    def sample(self, rng, size):
        return np.arccos(rng.uniform(-1.0, 1.0, size))

    def describe(self, unit="", scale=1.0):
        return "isotropic: p(i) = sin(i)/2 on [0, 180] deg"


@dataclass(frozen=True)
class Beta(Prior):
    """Beta distribution with shapes ``alpha``, ``beta`` > 0, scaled to [``low``, ``high``] (default [0, 1]).

    p(x) = z**(alpha - 1) (1 - z)**(beta - 1) / (B(alpha, beta) (high - low)),
    z = (x - low) / (high - low); the density of ``scipy.stats.beta(alpha,
    beta, loc=low, scale=high - low)``. For eccentricities, e.g. alpha =
    0.867, beta = 3.03 (Kipping 2013, MNRAS 434, L51; values from memory).
    """

    alpha: float
    beta: float
    low: float = 0.0
    high: float = 1.0
    dist = "beta"
    shape_keys = ("alpha", "beta")

    @classmethod
    def validate(cls, values):
        _require(values, "alpha", values["alpha"] > 0.0, "must be positive")
        _require(values, "beta", values["beta"] > 0.0, "must be positive")
        _require(values, "low", values["low"] < values["high"], f"must be below high ({values['high']:g})")

    def __post_init__(self):
        self.validate({f.name: getattr(self, f.name) for f in fields(self)})

    @property
    def support(self) -> tuple[float, float]:
        return (self.low, self.high)

    @property
    def mean(self) -> float:
        """Mean of the distribution."""
        return self.low + (self.high - self.low) * self.alpha / (self.alpha + self.beta)

    @property
    def sd(self) -> float:
        """Standard deviation of the distribution."""
        a, b = self.alpha, self.beta
        return (self.high - self.low) * math.sqrt(a * b / ((a + b) ** 2 * (a + b + 1.0)))

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        width = self.high - self.low
        inside = (x >= self.low) & (x <= self.high)
        z = np.where(inside, (x - self.low) / width, 0.5)
        out = (special.xlogy(self.alpha - 1.0, z) + special.xlog1py(self.beta - 1.0, -z)
               - special.betaln(self.alpha, self.beta) - math.log(width))
        return np.where(inside, out, -np.inf)

    def sample(self, rng, size):
        return self.low + (self.high - self.low) * rng.beta(self.alpha, self.beta, size)

    def describe(self, unit="", scale=1.0):
        text = f"beta(alpha {self.alpha:.6g}, beta {self.beta:.6g}"
        if (self.low, self.high) != (0.0, 1.0):
            text += f", on [{_fmt(self.low, unit, scale)}, {_fmt(self.high, unit, scale)}]"
        return text + ")"


@dataclass(frozen=True)
class LogNormal(Prior):
    """Log-normal: ln x is normal with mean ln(``median``) and standard deviation ``sigma``.

    p(x) = exp(-(ln x - ln median)**2 / (2 sigma**2)) / (x sigma sqrt(2 pi)) for
    x > 0; the density of ``scipy.stats.lognorm(sigma, scale=median)``. The
    median carries the unit of the quantity; ``sigma`` is a bare number (a
    factor exp(sigma) either side of the median holds 68 %).
    """

    median: float
    sigma: float
    dist = "log-normal"
    shape_keys = ("sigma",)

    @classmethod
    def validate(cls, values):
        _require(values, "median", values["median"] > 0.0, "must be positive")
        _require(values, "sigma", values["sigma"] > 0.0, "must be positive")

    def __post_init__(self):
        self.validate({f.name: getattr(self, f.name) for f in fields(self)})

    @property
    def support(self) -> tuple[float, float]:
        return (0.0, math.inf)

    @property
    def mean(self) -> float:
        """Mean of the distribution, median * exp(sigma**2 / 2)."""
        return self.median * math.exp(0.5 * self.sigma**2)

    @property
    def sd(self) -> float:
        """Standard deviation of the distribution."""
        return self.mean * math.sqrt(math.expm1(self.sigma**2))

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        inside = x > 0.0
        lx = np.log(np.where(inside, x, 1.0))
        z = (lx - math.log(self.median)) / self.sigma
        out = -0.5 * z * z - lx - math.log(self.sigma) - _LOG_SQRT_2PI
        return np.where(inside, out, -np.inf)

    def sample(self, rng, size):
        return rng.lognormal(math.log(self.median), self.sigma, size)

    def describe(self, unit="", scale=1.0):
        return f"log-normal(median {_fmt(self.median, unit, scale)}, sigma of ln x {self.sigma:.6g})"


#: ``dist`` name in target files -> (class, required keys)
FAMILIES: dict[str, tuple[type[Prior], tuple[str, ...]]] = {
    "normal": (Normal, ("mean", "sd")),
    "truncnormal": (TruncNormal, ("mean", "sd", "low", "high")),
    "uniform": (Uniform, ("low", "high")),
    "log-uniform": (LogUniform, ("low", "high")),
    "fixed": (Fixed, ("value",)),
    "isotropic": (Isotropic, ()),
    "beta": (Beta, ("alpha", "beta")),
    "log-normal": (LogNormal, ("median", "sigma")),
}


def optional_keys(cls: type[Prior]) -> dict[str, float]:
    """Optional keys of a family and their defaults (its dataclass fields with a default)."""
    return {f.name: f.default for f in fields(cls) if f.default is not MISSING}


def make_prior(dist: str, values: Mapping[str, float]) -> Prior:
    """Build a prior of family ``dist`` from its keys, checking keys and ranges.

    Parameters
    ----------
    dist : str
        A key of :data:`FAMILIES`.
    values : mapping of str to float
        The family's keys in internal units (optional keys may be left out).

    Returns
    -------
    Prior

    Raises
    ------
    InputError
        Unknown ``dist``, a missing or unknown key, a value that is not a
        finite number, or one out of range; ``key`` names the offending key.

    Examples
    --------
    >>> make_prior("beta", {"alpha": 0.867, "beta": 3.03})
    Beta(alpha=0.867, beta=3.03, low=0.0, high=1.0)
    """
    if dist not in FAMILIES:
        raise InputError(f"unknown prior dist {dist!r}; expected one of {', '.join(FAMILIES)}", key="dist")
    cls, required = FAMILIES[dist]
    optional = optional_keys(cls)
    for k in values:
        if k not in required and k not in optional:
            raise InputError(f"unknown key {k!r} for a {dist} prior; allowed: "
                             f"{', '.join((*required, *optional)) or 'none'}", key=str(k))
    for k in required:
        if k not in values:
            raise InputError(f"missing {k!r}: a {dist} prior needs {', '.join(required)}", key=k)
    full: dict[str, float] = {**optional}
    for k, v in values.items():
        if isinstance(v, bool) or not isinstance(v, int | float | np.floating | np.integer) or not math.isfinite(v):
            raise InputError(f"{k} must be a finite number, got {v!r}", key=k)
        full[k] = float(v)
    cls.validate(full)
    return cls(**full)
