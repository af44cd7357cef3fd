"""Number formatting for tables, reports and figures: rounding, asymmetric errors, display units.

Rounding
    :func:`format_value` keeps two significant digits on the smaller of the two
    errors and rounds the value and the other error to the same decimal place
    (half-up on the shortest decimal representation of each number). This is
    common practice, not a cited standard. Very large or very small numbers
    have a power of ten factored out (:func:`choose_exponent`).

Display units
    :func:`display_measurement` converts a quantity from its stored unit (the one
    in its key) to the display unit chosen by
    :func:`orbitmass.model.quantities.display_unit` before rounding, so a 46 kpc
    distance reads ``46.19 +0.19 -0.18 kpc``, not ``46190 +190 -180 pc``.
    :func:`format_number` writes one number (a prior bound, a fixed value) with
    a chosen number of significant digits, in a display unit too.

Escaping
    :func:`latex_escape` and :func:`markdown_escape` make user text (target,
    companion and instrument names) safe for each format.
"""

from __future__ import annotations

import decimal
import html
import math
from collections.abc import Sequence
from dataclasses import dataclass

from orbitmass.model.quantities import UNITS, Unit, display_unit

__all__ = [
    "format_value",
    "choose_exponent",
    "Measurement",
    "measurement",
    "display_measurement",
    "format_number",
    "summary_text",
    "latex_escape",
    "markdown_escape",
]

# ---------------------------------------------------------------------------------- numbers


def _decimal(x: float) -> decimal.Decimal:
    # the shortest repr is the decimal number a reader sees; rounding it avoids
    # binary artefacts such as 2.675 -> 2.67
    return decimal.Decimal(repr(float(x)))


def _round_str(x: float, places: int) -> str:
    """``x`` rounded half-up to ``places`` decimals (negative: tens, hundreds...)."""
    q = decimal.Decimal(1).scaleb(-places)
    d = _decimal(x).quantize(q, rounding=decimal.ROUND_HALF_UP)
    if places <= 0:
        d = d.quantize(decimal.Decimal(1))
    text = f"{d:f}"
    if text.startswith("-") and not any(ch in "123456789" for ch in text):
        text = text[1:]  # no "-0.00"
    return text


def _places_for(err: float) -> int:
    """Decimal places that leave two significant digits on ``err`` > 0."""
    mag = math.floor(math.log10(err))
    places = 1 - mag
    rounded = _decimal(err).quantize(
        decimal.Decimal(1).scaleb(-places), rounding=decimal.ROUND_HALF_UP
    )
    if rounded >= decimal.Decimal(10) ** (mag + 1):  # 0.0996 -> 0.10, not 0.100
        places -= 1
    return places


def choose_exponent(median: float, lower_err: float = 0.0, upper_err: float = 0.0) -> int:
    """Power of ten to factor out of a value before printing it.

    Parameters
    ----------
    median : float
        The value.
    lower_err, upper_err : float
        Its errors (used only when the value is zero).

    Returns
    -------
    int
        ``floor(log10(|median|))`` when ``|median| >= 1e5`` or ``|median| < 1e-3``,
        else 0 (numbers of ordinary size are printed as they are).

    Examples
    --------
    >>> choose_exponent(4.1e6), choose_exponent(8050.0), choose_exponent(2.5e-5)
    (6, 0, -5)
    """
    ref = abs(median) if math.isfinite(median) and median != 0 else 0.0
    if ref == 0.0:
        errs = [abs(e) for e in (lower_err, upper_err) if math.isfinite(e) and e != 0]
        ref = max(errs) if errs else 0.0
    if ref == 0.0:
        return 0
    k = math.floor(math.log10(ref))
    return k if (k >= 5 or k <= -4) else 0


def format_value(
    median: float, lower_err: float, upper_err: float, *, exponent: int = 0
) -> tuple[str, str, str]:
    """Round a value and its asymmetric errors for print.

    Two significant digits are kept on the smaller error; the value and the
    larger error are rounded to the same decimal place (common practice, no
    source).

    Parameters
    ----------
    median : float
        Central value.
    lower_err, upper_err : float
        Distances to the lower and upper bounds (positive numbers).
    exponent : int
        Power of ten divided out first (see :func:`choose_exponent`); the
        strings are then the mantissas.

    Returns
    -------
    (str, str, str)
        Value, minus error and plus error, without signs on the errors. With
        no positive finite error (a fixed quantity) the value keeps six
        significant digits and both errors are ``"0"``.

    Examples
    --------
    >>> format_value(16.0432, 0.0987, 0.1234)
    ('16.043', '0.099', '0.123')
    >>> format_value(4.1234e6, 4.0e4, 5.2e4, exponent=6)
    ('4.123', '0.040', '0.052')
    """
    scale = 10.0**exponent
    m = float(median) / scale
    lo = float(lower_err) / scale
    hi = float(upper_err) / scale
    if not math.isfinite(m):
        return (str(m), "nan", "nan")
    errs = [e for e in (lo, hi) if math.isfinite(e) and e > 0]
    if not errs:
        return (f"{m:.6g}", "0", "0")
    places = _places_for(min(errs))

    def fmt(x: float) -> str:
        return _round_str(x, places) if math.isfinite(x) else "nan"

    return (
        fmt(m),
        fmt(max(lo, 0.0) if math.isfinite(lo) else lo),
        fmt(max(hi, 0.0) if math.isfinite(hi) else hi),
    )


@dataclass(frozen=True)
class Measurement:
    """A rounded value with asymmetric errors, ready for Markdown, LaTeX or HTML.

    Attributes
    ----------
    median, minus, plus : str
        Mantissas from :func:`format_value`.
    exponent : int
        Power of ten factored out (0: none).
    fixed : bool
        True for a quantity held fixed in the fit (no errors shown).
    """

    median: str
    minus: str
    plus: str
    exponent: int = 0
    fixed: bool = False

    def _render(self, esc, pm: str, asym: str, times: str, math: str = "") -> str:
        if self.fixed:
            core = esc(self.median)
        elif self.minus == self.plus:
            core = pm.format(m=esc(self.median), p=esc(self.plus))
        else:
            core = asym.format(m=esc(self.median), p=esc(self.plus), n=esc(self.minus))
        out = core if self.exponent == 0 else f"({core}){times.format(k=self.exponent)}"
        out = f"{math}{out}{math}"
        return f"{out} (fixed)" if self.fixed else out

    def text(self) -> str:
        """Plain text: ``16.043 +0.123 -0.099``, ``(4.120 +0.050 -0.040) × 10^6``."""
        return self._render(str, "{m} ± {p}", "{m} +{p} -{n}", " × 10^{k}")

    def latex(self) -> str:
        """Math-mode LaTeX: ``$16.043^{+0.123}_{-0.099}$``."""
        return self._render(str, r"{m} \pm {p}", "{m}^{{+{p}}}_{{-{n}}}", r"\times10^{{{k}}}", "$")

    def html(self) -> str:
        """HTML with the errors stacked as superscript and subscript."""
        return self._render(
            html.escape,
            "{m}&thinsp;±&thinsp;{p}",
            '{m}<span class="err"><sup>+{p}</sup><sub>&minus;{n}</sub></span>',
            "&thinsp;×&thinsp;10<sup>{k}</sup>",
        )


def measurement(median: float, minus: float, plus: float, *, fixed: bool = False) -> Measurement:
    """:class:`Measurement` of a value with errors, power of ten chosen automatically."""
    k = choose_exponent(median, minus, plus)
    if fixed:
        m = float(median) / 10.0**k
        return Measurement(f"{m:.6g}", "0", "0", k, True)
    return Measurement(*format_value(median, minus, plus, exponent=k), exponent=k)


# ------------------------------------------------------------------------------- escaping

_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}",
    "{": r"\{",
    "}": r"\}",
    "$": r"\$",
    "&": r"\&",
    "#": r"\#",
    "^": r"\^{}",
    "_": r"\_",
    "%": r"\%",
    "~": r"\~{}",
    "<": r"\textless{}",
    ">": r"\textgreater{}",
}
_MD_SPECIAL = set("\\`*_[]<>#|&~!")


def latex_escape(text: str) -> str:
    """Escape user text for LaTeX text mode (standard LaTeX commands only)."""
    return "".join(_LATEX_SPECIAL.get(ch, ch) for ch in str(text))


def markdown_escape(text: str) -> str:
    """Backslash-escape Markdown and HTML punctuation in user text (CommonMark)."""
    return "".join("\\" + ch if ch in _MD_SPECIAL else ch for ch in str(text)).replace("\n", " ")



# -------------------------------------------------------------------------- display units


def display_measurement(
    column: str,
    median: float,
    minus: float,
    plus: float,
    *,
    fixed: bool = False,
    companions: Sequence[str] = (),
    unit: str | None = None,
) -> tuple[Measurement, Unit]:
    """:class:`Measurement` of a quantity in its display unit, and that unit.

    Parameters
    ----------
    column : str
        Sample column or base key (e.g. ``"distance_pc"``, ``"C1.semimajor_axis_mas"``).
    median, minus, plus : float
        Value and errors in the stored unit.
    fixed : bool
        A quantity held fixed (no errors shown).
    companions : sequence of str
        Companion names (to recognise the prefix of ``column``).
    unit : str, optional
        Key of a display unit to use instead of the one chosen by magnitude.

    Returns
    -------
    (Measurement, Unit)

    Examples
    --------
    >>> m, u = display_measurement("distance_pc", 46190.0, 180.0, 190.0)
    >>> m.text(), u.text
    ('46.19 +0.19 -0.18', 'kpc')
    """
    u, f = display_unit(column, median, companions, override=unit)
    return measurement(median * f, minus * f, plus * f, fixed=fixed), u


def format_number(value: float, *, digits: int = 4, column: str | None = None,
                  companions: Sequence[str] = (), unit: str | None = None) -> str:
    """One number with ``digits`` significant digits, with its display unit when ``column`` is given.

    Trailing zeros are dropped and very large or small numbers get a power of
    ten (``1.2e+08`` style is never shown: ``1.2 × 10^8``).

    Examples
    --------
    >>> format_number(0.0027378507871321013, column="period_yr")
    '1 d'
    >>> format_number(46190.0, column="distance_pc"), format_number(3.0e6, digits=3)
    ('46.19 kpc', '3 × 10^6')
    """
    v = float(value)
    text_unit = ""
    if column is not None:
        u, f = display_unit(column, v, companions, override=unit)
        v, text_unit = v * f, u.text
    if not math.isfinite(v):
        out = str(v)
    else:
        k = choose_exponent(v)
        m = v / 10.0**k
        out = f"{m:.{digits}g}"
        if "e" in out:  # %g switched to exponent form for a large rounded number
            out = f"{float(out):f}".rstrip("0").rstrip(".")
        if k:
            out = f"{out} × 10^{k}"
    return f"{out} {text_unit}".strip()


def summary_text(column: str, block, *, companions: Sequence[str] = (), unit: str | None = None) -> str:
    """A ``summary.json`` quantile block as one line for a console: value, errors, display unit.

    Two significant digits on the smaller error (:func:`format_value`); a block
    whose quantiles coincide (a fixed quantity) prints its value and ``(fixed)``,
    never ``+0 / -0``.

    Parameters
    ----------
    column : str
        Sample column or base key, e.g. ``"mass_msun"``.
    block : mapping
        With keys ``median``, ``q16``, ``q84`` (stored unit).

    Examples
    --------
    >>> summary_text("distance_pc", {"median": 46190.0, "q16": 46010.0, "q84": 46380.0})
    '46.19 +0.19 -0.18 kpc'
    >>> summary_text("C1.eccentricity", {"median": 0.0, "q16": 0.0, "q84": 0.0}, companions=["C1"])
    '0 (fixed)'
    """
    med, lo, hi = float(block["median"]), float(block["q16"]), float(block["q84"])
    fixed = lo == med == hi
    m, u = display_measurement(column, med, med - lo, hi - med, fixed=fixed, companions=companions,
                               unit=unit)
    text = m.text()
    if u.text:
        text = text.replace(" (fixed)", f" {u.text} (fixed)") if fixed else f"{text} {u.text}"
    return text


def unit_of(key: str) -> Unit:
    """:class:`~orbitmass.model.quantities.Unit` of a unit key (``""`` for none)."""
    return UNITS.get(key, Unit(key, key, key, key, html.escape(key)))
