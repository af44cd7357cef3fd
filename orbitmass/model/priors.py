"""Prior families: one small class each, on plain floats in internal units.

Each prior knows its log density (``log_pdf``, normalised, ``-inf`` outside the
support), how to draw from itself (``sample``), its support and a one-line
description for reports. Values are in the internal unit of the quantity the
prior is on (see :mod:`orbitmass.units`); angles are in radians.

To add a family: subclass :class:`Prior`, implement the four members
(``support``, ``log_pdf``, ``sample``, ``describe``) and add it to
:data:`FAMILIES` under the ``dist`` name used in target files. The classes do
not validate their parameters (``sd > 0``, ``low < high``): the target reader
does before it builds them.

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
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special

__all__ = [
    "Prior",
    "Normal",
    "TruncNormal",
    "Uniform",
    "LogUniform",
    "Fixed",
    "Isotropic",
    "FAMILIES",
]

_LOG_SQRT_2PI = 0.5 * math.log(2.0 * math.pi)


class Prior:
    """Base class: a normalised one-dimensional prior."""

    dist: str = ""

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
        from scipy.stats import truncnorm

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


#: ``dist`` name in target files -> (class, required keys)
FAMILIES: dict[str, tuple[type[Prior], tuple[str, ...]]] = {
    "normal": (Normal, ("mean", "sd")),
    "truncnormal": (TruncNormal, ("mean", "sd", "low", "high")),
    "uniform": (Uniform, ("low", "high")),
    "log-uniform": (LogUniform, ("low", "high")),
    "fixed": (Fixed, ("value",)),
    "isotropic": (Isotropic, ()),
}
