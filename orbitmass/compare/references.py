"""Reference masses: published or external values with (possibly asymmetric) errors.

:func:`parse_reference` reads strings such as ``"disc=4.1e6 +0.2e6 -0.1e6 solMass"``;
:class:`Reference` models the value as a two-piece ("split") normal (John 1982,
Commun. Stat. Theory Methods 11, 879): a Gaussian of width ``sd_minus_msun`` below the
quoted value and ``sd_plus_msun`` above it.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import astropy.units as u
import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import stats

from orbitmass.exceptions import InputError
from orbitmass.results import QUANTILES

__all__ = ["Reference", "parse_reference"]

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

    def mean(self) -> float:
        """Mean (Msun) of the two-piece normal: ``m + sqrt(2 / pi) (s_plus - s_minus)``."""
        return self.mass_msun + math.sqrt(2.0 / math.pi) * (self.sd_plus_msun - self.sd_minus_msun)

    def variance(self) -> float:
        """Variance (Msun^2): ``(1 - 2 / pi) (s_plus - s_minus)^2 + s_plus s_minus``."""
        d = self.sd_plus_msun - self.sd_minus_msun
        return (1.0 - 2.0 / math.pi) * d * d + self.sd_plus_msun * self.sd_minus_msun


def parse_reference(text: str | Reference, *, label: str | None = None, key: str = "references") -> Reference:
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
