"""Markdown, LaTeX, CSV and HTML reports of a fit: formats only, nothing new computed.

Everything here reads a :class:`~orbitmass.results.Results`: the quantiles of
``summary.json`` (falling back to :func:`~orbitmass.results.quantile_block` of
the samples when a block is missing), the diagnostics and provenance recorded
by the fit, and the data of the target.

Rounding
    :func:`format_value` keeps two significant digits on the smaller of the two
    errors and rounds the value and the other error to the same decimal place
    (half-up on the shortest decimal representation of each number). This is
    common practice, not a cited standard. Very large or very small numbers
    have a power of ten factored out (:func:`choose_exponent`).

Files
    :func:`write_tables` writes ``table.tex`` (a ``table`` float with a
    ``tabular``, standard LaTeX only, so it compiles under the AASTeX, MNRAS
    and A&A classes), ``table.csv`` and ``table.md``. :func:`write_report`
    writes ``report.md`` and ``report.html``, one self-contained page (CSS
    inline, figures embedded as base64 data, no external resource). Every
    file is written atomically into ``out_dir`` and nowhere else; user text
    (target, companion and instrument names) is escaped for each format.
"""

from __future__ import annotations

import base64
import decimal
import html
import logging
import math
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from orbitmass.outputs.style import write_atomic
from orbitmass.results import QUANTILES, Results, quantile_block

__all__ = [
    "format_value",
    "choose_exponent",
    "Measurement",
    "QUANTITIES",
    "QUANTITY_UNITS",
    "measurement",
    "results_table",
    "write_tables",
    "write_report",
    "latex_escape",
    "markdown_escape",
]

logger = logging.getLogger(__name__)

_Q_LOW, _Q_HIGH = QUANTILES["q16"], QUANTILES["q84"]

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


# ------------------------------------------------------------------------ quantity metadata

#: base column (no companion prefix or instrument suffix) -> (name, LaTeX math symbol,
#: plain-text symbol, HTML symbol); shared with :mod:`orbitmass.outputs.plots`
QUANTITIES: dict[str, tuple[str, str, str, str]] = {
    "mass_msun": ("Total mass", "M", "M", "<i>M</i>"),
    "distance_pc": ("Distance", "D", "D", "<i>D</i>"),
    "parallax_mas": ("Parallax", r"\varpi", "ϖ", "ϖ"),
    "schwarzschild_radius_au": (
        "Schwarzschild radius",
        r"R_\mathrm{S}",
        "R_S",
        "<i>R</i><sub>S</sub>",
    ),
    "systemic_kms": ("Systemic velocity", r"v_\mathrm{sys}", "v_sys", "<i>v</i><sub>sys</sub>"),
    "x0_mas": ("Barycentre east offset", "x_0", "x0", "<i>x</i><sub>0</sub>"),
    "y0_mas": ("Barycentre north offset", "y_0", "y0", "<i>y</i><sub>0</sub>"),
    "vx0_mas_per_yr": (
        "Barycentre east proper motion",
        r"\dot{x}_0",
        "vx0",
        "<i>ẋ</i><sub>0</sub>",
    ),
    "vy0_mas_per_yr": (
        "Barycentre north proper motion",
        r"\dot{y}_0",
        "vy0",
        "<i>ẏ</i><sub>0</sub>",
    ),
    "vz0_kms": ("Barycentre line-of-sight velocity", "v_{z,0}", "vz0", "<i>v</i><sub>z,0</sub>"),
    "offset_kms": ("Velocity offset", r"\Delta v", "Δv", "Δ<i>v</i>"),
    "jitter_kms": ("Velocity jitter", r"\sigma_\mathrm{jit}", "σ_jit", "<i>σ</i><sub>jit</sub>"),
    "period_yr": ("Period", "P", "P", "<i>P</i>"),
    "period_obs_yr": ("Period (observed)", r"P_\mathrm{obs}", "P_obs", "<i>P</i><sub>obs</sub>"),
    "eccentricity": ("Eccentricity", "e", "e", "<i>e</i>"),
    "inclination_deg": ("Inclination", "i", "i", "<i>i</i>"),
    "arg_periastron_deg": ("Argument of periastron", r"\omega", "ω", "<i>ω</i>"),
    "ascending_node_deg": ("Ascending node", r"\Omega", "Ω", "Ω"),
    "periastron_time_jyr": ("Time of periastron", r"T_\mathrm{p}", "T_p", "<i>T</i><sub>p</sub>"),
    "semimajor_axis_mas": ("Semimajor axis", "a", "a", "<i>a</i>"),
    "semimajor_axis_au": ("Semimajor axis", "a", "a", "<i>a</i>"),
    "periastron_au": ("Periastron distance", r"r_\mathrm{p}", "r_p", "<i>r</i><sub>p</sub>"),
    "periastron_rs": ("Periastron distance", r"r_\mathrm{p}", "r_p", "<i>r</i><sub>p</sub>"),
    "mass_ratio": ("Mass ratio", "q", "q", "<i>q</i>"),
    "central_mass_msun": ("Central body mass", r"M_\mathrm{c}", "M_c", "<i>M</i><sub>c</sub>"),
    "companion_mass_msun": ("Companion mass", "m", "m", "<i>m</i>"),
}

#: unit text of COLUMN_DOC -> (LaTeX, plain, HTML)
_UNITS: dict[str, tuple[str, str, str]] = {
    "M_sun": (r"$M_\odot$", "M_sun", "<i>M</i><sub>☉</sub>"),
    "pc": ("pc", "pc", "pc"),
    "mas": ("mas", "mas", "mas"),
    "au": ("au", "au", "au"),
    "km/s": (r"km\,s$^{-1}$", "km/s", "km&thinsp;s<sup>−1</sup>"),
    "mas/yr": (r"mas\,yr$^{-1}$", "mas/yr", "mas&thinsp;yr<sup>−1</sup>"),
    "yr": ("yr", "yr", "yr"),
    "Julian yr": ("yr (Julian)", "Julian yr", "Julian yr"),
    "deg": ("deg", "deg", "deg"),
    "R_S": (r"$R_\mathrm{S}$", "R_S", "<i>R</i><sub>S</sub>"),
    "": ("", "", ""),
}

#: base column -> unit text of COLUMN_DOC (a key of the unit tables)
QUANTITY_UNITS: dict[str, str] = {
    "mass_msun": "M_sun",
    "distance_pc": "pc",
    "parallax_mas": "mas",
    "schwarzschild_radius_au": "au",
    "systemic_kms": "km/s",
    "x0_mas": "mas",
    "y0_mas": "mas",
    "vx0_mas_per_yr": "mas/yr",
    "vy0_mas_per_yr": "mas/yr",
    "vz0_kms": "km/s",
    "offset_kms": "km/s",
    "jitter_kms": "km/s",
    "period_yr": "yr",
    "period_obs_yr": "yr",
    "eccentricity": "",
    "inclination_deg": "deg",
    "arg_periastron_deg": "deg",
    "ascending_node_deg": "deg",
    "periastron_time_jyr": "Julian yr",
    "semimajor_axis_mas": "mas",
    "semimajor_axis_au": "au",
    "periastron_au": "au",
    "periastron_rs": "R_S",
    "mass_ratio": "",
    "central_mass_msun": "M_sun",
    "companion_mass_msun": "M_sun",
}

_GLOBAL_ORDER = (
    "mass_msun",
    "distance_pc",
    "parallax_mas",
    "schwarzschild_radius_au",
    "systemic_kms",
    "x0_mas",
    "y0_mas",
    "vx0_mas_per_yr",
    "vy0_mas_per_yr",
    "vz0_kms",
)
#: nuisance terms listed only when sampled (a fixed zero offset is a convention, not a result)
_NUISANCE = {
    "systemic_kms",
    "x0_mas",
    "y0_mas",
    "vx0_mas_per_yr",
    "vy0_mas_per_yr",
    "vz0_kms",
    "offset_kms",
    "jitter_kms",
}
_COMPANION_ORDER = (
    "period_yr",
    "period_obs_yr",
    "eccentricity",
    "inclination_deg",
    "arg_periastron_deg",
    "ascending_node_deg",
    "periastron_time_jyr",
    "semimajor_axis_mas",
    "semimajor_axis_au",
    "periastron_au",
    "periastron_rs",
    "mass_ratio",
    "central_mass_msun",
    "companion_mass_msun",
)

TABLE_COLUMNS = [
    "parameter",
    "group",
    "label",
    "symbol",
    "unit",
    "median",
    "minus",
    "plus",
    "q2.5",
    "q16",
    "q84",
    "q97.5",
    "fixed",
]


def _summary_block(results: Results, column: str) -> dict[str, float] | None:
    summ = results.summary or {}
    if "." not in column:
        block = summ.get("derived", {}).get(column)
    else:
        head, tail = column.split(".", 1)
        if head in results.companion_names:
            block = summ.get("companions", {}).get(head, {}).get(tail)
        else:  # offset_kms.<I>, jitter_kms.<I>
            block = summ.get("instruments", {}).get(tail, {}).get(head)
    if isinstance(block, Mapping) and all(k in block for k in QUANTILES):
        return {k: float(block[k]) for k in QUANTILES}
    return None


def _quantiles(results: Results, column: str) -> dict[str, float]:
    block = _summary_block(results, column)
    if block is None:
        block = quantile_block(results.samples[column].to_numpy())
    return block


def _is_constant(values: np.ndarray) -> bool:
    finite = values[np.isfinite(values)]
    return finite.size > 0 and float(np.ptp(finite)) == 0.0


def _row(results: Results, column: str, base: str, group: str, label: str) -> dict[str, Any]:
    values = results.samples[column].to_numpy(dtype=float)
    fixed = _is_constant(values)
    if fixed:
        v = float(values[np.isfinite(values)][0])
        q = {k: v for k in QUANTILES}
    else:
        q = _quantiles(results, column)
    name, _, plain, _ = QUANTITIES[base]
    return {
        "parameter": column,
        "group": group,
        "label": label or name,
        "symbol": plain,
        "unit": QUANTITY_UNITS[base],
        "median": q["median"],
        "minus": q["median"] - q["q16"],
        "plus": q["q84"] - q["median"],
        "q2.5": q["q2.5"],
        "q16": q["q16"],
        "q84": q["q84"],
        "q97.5": q["q97.5"],
        "fixed": fixed,
    }


def results_table(results: Results) -> pd.DataFrame:
    """The key results, one row per quantity, in report order.

    Parameters
    ----------
    results : Results
        A fitted or loaded posterior.

    Returns
    -------
    pandas.DataFrame
        Columns ``parameter`` (sample column name, e.g. ``C1.period_yr``),
        ``group`` (``"system"`` or the companion name), ``label``, ``symbol``,
        ``unit`` (as in :data:`~orbitmass.results.COLUMN_DOC`), ``median``,
        ``minus`` and ``plus`` (distances to the 15.9 % and 84.1 % quantiles),
        the quantiles ``q2.5``, ``q16``, ``q84``, ``q97.5`` and ``fixed`` (held
        fixed in the fit). Rows: total mass, distance, parallax, Schwarzschild
        radius, the sampled frame terms, instrument offsets and jitters, then
        per companion its elements and derived quantities.
    """
    cols = set(results.samples.columns)
    rows = []
    for base in _GLOBAL_ORDER:
        if base in cols:
            row = _row(results, base, base, "system", "")
            if not (row["fixed"] and base in _NUISANCE):
                rows.append(row)
    for base in ("offset_kms", "jitter_kms"):
        for inst in results.space.instrument_names:
            column = f"{base}.{inst}"
            if column in cols:
                row = _row(results, column, base, "system", f"{QUANTITIES[base][0]}, {inst}")
                if not row["fixed"]:
                    rows.append(row)
    for comp in results.companion_names:
        for base in _COMPANION_ORDER:
            column = f"{comp}.{base}"
            if column in cols:
                label = (
                    "Period (rest frame)"
                    if (base == "period_yr" and f"{comp}.period_obs_yr" in cols)
                    else ""
                )
                rows.append(_row(results, column, base, comp, label))
    return pd.DataFrame(rows, columns=TABLE_COLUMNS)


def _measurement_of(row: Mapping[str, Any]) -> Measurement:
    return measurement(row["median"], row["minus"], row["plus"], fixed=bool(row["fixed"]))


def _base_of(parameter: str, groups: Sequence[str]) -> str:
    head, _, tail = parameter.partition(".")
    if tail and head in groups:
        return tail
    return head


# ------------------------------------------------------------------------------ the tables


def _ambiguous_companions(results: Results) -> list[str]:
    diag = (results.summary or {}).get("diagnostics", {})
    if isinstance(diag.get("omega_node_ambiguous"), list):
        return [str(c) for c in diag["omega_node_ambiguous"]]
    out = []
    for comp in results.target.companions:
        plane = comp.plane if comp.plane else comp.name
        info = results.space.planes.get(plane, {})
        if not info.get("los", comp.has_velocities):
            out.append(comp.name)
    return out


def _priors(results: Results) -> list[dict[str, str]]:
    pri = (results.summary or {}).get("priors")
    if not isinstance(pri, list):
        return []
    return [
        {"parameter": str(p.get("parameter", "")), "prior": str(p.get("prior", ""))}
        for p in pri
        if isinstance(p, Mapping)
    ]


def _table_tex(results: Results, table: pd.DataFrame) -> str:
    name = latex_escape(results.target.name)
    slug = re.sub(r"[^A-Za-z0-9]+", "-", results.target.name).strip("-").lower() or "target"
    groups = list(results.companion_names)
    lines = [
        "% Results table written by orbitmass; standard LaTeX only (no extra packages).",
        r"\begin{table}",
        r"\centering",
        (
            r"\caption{Orbit fit of "
            + name
            + ". Values are posterior medians; the errors reach the "
            r"15.9 and 84.1 per cent quantiles of the marginal posterior.}"
        ),
        r"\label{tab:orbitmass-" + slug + "}",
        r"\begin{tabular}{llll}",
        r"\hline\hline",
        r"Parameter & Symbol & Value & Unit \\",
        r"\hline",
    ]
    for group, block in table.groupby("group", sort=False):
        title = "System" if group == "system" else f"Companion {latex_escape(group)}"
        lines.append(r"\multicolumn{4}{l}{\textit{" + title + r"}} \\")
        for _, row in block.iterrows():
            base = _base_of(row["parameter"], groups)
            sym = "$" + QUANTITIES[base][1] + "$"
            unit = _UNITS[row["unit"]][0]
            lines.append(
                f"{latex_escape(row['label'])} & {sym} & {_measurement_of(row).latex()} & "
                f"{unit} \\\\"
            )
    lines += [r"\hline", r"\end{tabular}"]
    notes = []
    pri = {p["parameter"]: p["prior"] for p in _priors(results)}
    stated = [
        f"{k}: {latex_escape(v)}"
        for k, v in pri.items()
        if k in ("total mass", "distance", "parallax", "redshift")
    ]
    if stated:
        notes.append("Priors: " + "; ".join(stated) + ".")
    amb = _ambiguous_companions(results)
    if amb:
        notes.append(
            r"Without line-of-sight velocities, $(\omega, \Omega)$ and "
            r"$(\omega + 180^\circ, \Omega + 180^\circ)$ fit equally well for "
            + ", ".join(latex_escape(c) for c in amb)
            + r"; $\Omega$ is given modulo $180^\circ$."
        )
    if notes:
        lines.append(r"\par\smallskip")
        lines.append(r"{\footnotesize " + " ".join(notes) + "}")
    lines.append(r"\end{table}")
    return "\n".join(lines) + "\n"


def _md_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    out = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    out += ["| " + " | ".join(cells) + " |" for cells in rows]
    return "\n".join(out)


def _results_rows_md(table: pd.DataFrame, groups: Sequence[str]) -> list[list[str]]:
    rows = []
    for _, row in table.iterrows():
        group = "" if row["group"] == "system" else f"{row['group']}: "
        rows.append(
            [
                markdown_escape(group + row["label"]),
                markdown_escape(row["symbol"]),
                markdown_escape(_measurement_of(row).text()),
                markdown_escape(_UNITS[row["unit"]][1]),
            ]
        )
    return rows


def write_tables(results: Results, out_dir: str | os.PathLike[str]) -> dict[str, Path]:
    """Write ``table.tex``, ``table.csv`` and ``table.md`` into ``out_dir``.

    Parameters
    ----------
    results : Results
        The posterior.
    out_dir : str or path-like
        Destination folder (created if missing). Only the three files are written.

    Returns
    -------
    dict
        ``{"tex": path, "csv": path, "md": path}``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    table = results_table(results)
    groups = list(results.companion_names)
    paths = {"tex": out / "table.tex", "csv": out / "table.csv", "md": out / "table.md"}
    write_atomic(paths["tex"], _table_tex(results, table))
    write_atomic(paths["csv"], table.to_csv(index=False, float_format="%.10g"))
    md = [
        f"Results for {markdown_escape(results.target.name)} (posterior medians, 15.9-84.1 % "
        "quantile errors)",
        "",
        _md_table(["Parameter", "Symbol", "Value", "Unit"], _results_rows_md(table, groups)),
        "",
    ]
    write_atomic(paths["md"], "\n".join(md))
    return paths


# --------------------------------------------------------------------- the report document
# The report is built once as a list of blocks and rendered twice (Markdown, HTML),
# so both files always carry the same content.


@dataclass(frozen=True)
class _Heading:
    level: int
    text: str


@dataclass(frozen=True)
class _Para:
    text: str


@dataclass(frozen=True)
class _Warning:
    text: str


@dataclass(frozen=True)
class _Table:
    header: tuple[str, ...]
    rows: tuple[tuple[Any, ...], ...]  # str or Measurement cells


@dataclass(frozen=True)
class _Figure:
    name: str
    path: Path  # absolute
    link: str  # relative to out_dir, forward slashes


def _fmt_num(x: Any, spec: str) -> str:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return "n/a"
    return format(v, spec) if math.isfinite(v) else "n/a"


def _span(t: np.ndarray) -> str:
    if t.size == 0:
        return ""
    return f"{t.min():.3f} – {t.max():.3f} ({t.max() - t.min():.2f} yr)"


def _data_rows(results: Results) -> list[tuple[str, ...]]:
    rows = []
    for comp in results.target.companions:
        ast, vel = comp.astrometry, comp.velocities
        n_pos = 0 if ast is None else len(ast)
        n_vel = 0 if vel is None else len(vel)
        pos = f"{n_pos}" + (
            f" ({int(np.sum(ast.polar))} as ρ, θ)" if n_pos and np.any(ast.polar) else ""
        )
        insts = ""
        if n_vel:
            names, counts = np.unique(np.asarray(vel.instrument, dtype=str), return_counts=True)
            insts = ", ".join(f"{n} ({c})" for n, c in zip(names, counts, strict=True))
            n_central = int(np.sum(vel.central))
            if n_central:
                insts += f"; central body: {n_central} rows"
        rows.append(
            (
                comp.name,
                pos,
                _span(ast.t_yr) if n_pos else "–",
                str(n_vel),
                _span(vel.t_yr) if n_vel else "–",
                insts or "–",
            )
        )
    return rows


_MODE_KEYS = {"delta_log_posterior": "Δ ln p below the best", "period_yr": "period [yr]"}


def _mode_text(mode: Any) -> str:
    """Readable text of a recorded mode (numbers, lists and nested mappings)."""
    if isinstance(mode, Mapping):
        parts = []
        for k, v in mode.items():
            key = _MODE_KEYS.get(str(k), str(k))
            parts.append(
                f"{key}: {_mode_text(v)}" if isinstance(v, Mapping) else f"{key} = {_mode_text(v)}"
            )
        return ", ".join(parts)
    if isinstance(mode, (list, tuple)):
        return ", ".join(_mode_text(m) for m in mode)
    return _fmt_num(mode, ".6g") if isinstance(mode, (int, float)) else str(mode)


def _diagnostic_blocks(results: Results) -> list[Any]:
    diag = (results.summary or {}).get("diagnostics") or {}
    blocks: list[Any] = [_Heading(2, "Diagnostics")]
    converged = diag.get("converged")
    if converged is False:
        blocks.append(
            _Warning(
                "NOT CONVERGED: some sampled parameter has fewer than 400 effective "
                "samples or the chain is shorter than 50 autocorrelation times. "
                "Treat every number in this report as preliminary."
            )
        )
    elif converged is None:
        blocks.append(_Warning("Convergence was not recorded for this run."))
    if diag.get("interrupted"):
        blocks.append(_Warning("The sampler was interrupted before its convergence test."))
    n_steps = diag.get("n_steps", results.chain.shape[0] if results.chain.ndim == 3 else None)
    n_walkers = diag.get("n_walkers", results.chain.shape[1] if results.chain.ndim == 3 else None)
    tau_max = diag.get("tau_max")
    ratio = "n/a"
    try:
        ratio = _fmt_num(float(n_steps) / float(tau_max), ".0f")
    except (TypeError, ValueError, ZeroDivisionError):
        pass
    rows = [
        ("converged", "yes" if converged else ("NO" if converged is False else "n/a")),
        ("retained samples", str(diag.get("n_samples", len(results.samples)))),
        ("steps × walkers", f"{n_steps} × {n_walkers}"),
        (
            "burn-in, thinning",
            f"{diag.get('burn', results.burn)}, {diag.get('thin', results.thin)}",
        ),
        ("smallest effective sample size", _fmt_num(diag.get("ess_min"), ".0f")),
        ("effective sample size of the mass", _fmt_num(diag.get("ess_mass"), ".0f")),
        ("longest autocorrelation time [steps]", _fmt_num(tau_max, ".1f")),
        ("chain length / longest autocorrelation time", ratio),
        ("largest split R-hat", _fmt_num(diag.get("rhat_max"), ".4f")),
        ("mean acceptance fraction", _fmt_num(diag.get("acceptance_fraction"), ".3f")),
        ("wall time [s]", _fmt_num(diag.get("wall_seconds"), ".1f")),
    ]
    blocks.append(_Table(("Diagnostic", "Value"), tuple(rows)))
    if diag.get("multimodal") or diag.get("other_modes"):
        modes = diag.get("period_modes") or {}
        text = "The posterior may be MULTIMODAL"
        if modes:
            text += " (separate walker groups in period: " + _mode_text(modes) + ")"
        other = diag.get("other_modes") or []
        if other:
            text += ". Other modes found during initialisation: " + "; ".join(
                _mode_text(m) for m in other
            )
        blocks.append(_Warning(text + ". Check the corner and trace plots before quoting errors."))
    per = diag.get("per_parameter")
    if isinstance(per, Mapping) and per:
        blocks.append(_Para("Per sampled variable (τ in steps):"))
        blocks.append(
            _Table(
                ("Variable", "τ", "ESS", "R-hat"),
                tuple(
                    (
                        str(name),
                        _fmt_num(d.get("tau"), ".1f"),
                        _fmt_num(d.get("ess"), ".0f"),
                        _fmt_num(d.get("rhat"), ".4f"),
                    )
                    for name, d in per.items()
                    if isinstance(d, Mapping)
                ),
            )
        )
    return blocks


def _report_blocks(results: Results, out_dir: Path, figures: Mapping[str, str]) -> list[Any]:
    summ = results.summary or {}
    prov = summ.get("provenance") or {}
    name = results.target.name
    blocks: list[Any] = [_Heading(1, f"orbitmass report: {name}")]
    job = f"Job: fit of the target file {prov.get('target_file') or results.target.source or 'n/a'}"
    job += f" with seed {prov.get('seed', 'n/a')}"
    job += f", orbitmass {summ.get('orbitmass_version', 'n/a')}"
    if prov.get("created_utc"):
        job += f", written {prov['created_utc']}"
    job += (
        f"; frame: {results.target.frame}; reference epoch {results.target.reference_epoch:.3f} "
        "(Julian year)."
    )
    blocks.append(_Para(job))
    if summ.get("diagnostics", {}).get("converged") is False:
        blocks.append(_Warning("This fit has NOT converged (see Diagnostics)."))

    blocks.append(_Heading(2, "Data"))
    blocks.append(
        _Table(
            (
                "Companion",
                "Positions",
                "Position epochs [Julian yr]",
                "Velocities",
                "Velocity epochs [Julian yr]",
                "Instruments (rows)",
            ),
            tuple(_data_rows(results)),
        )
    )

    blocks.append(_Heading(2, "Priors"))
    pri = _priors(results)
    if pri:
        blocks.append(
            _Table(("Parameter", "Prior"), tuple((p["parameter"], p["prior"]) for p in pri))
        )
    else:
        blocks.append(_Para("The priors were not recorded in this run's summary."))

    blocks.append(_Heading(2, "Results"))
    blocks.append(_Para("Posterior medians; the errors reach the 15.9 % and 84.1 % quantiles."))
    table = results_table(results)
    for group, block in table.groupby("group", sort=False):
        blocks.append(_Heading(3, "System" if group == "system" else f"Companion {group}"))
        blocks.append(
            _Table(
                ("Parameter", "Symbol", "Value", "Unit"),
                tuple(
                    (
                        row["label"],
                        ("sym", row["parameter"]),
                        _measurement_of(row),
                        ("unit", row["unit"]),
                    )
                    for _, row in block.iterrows()
                ),
            )
        )
    for comp in _ambiguous_companions(results):
        blocks.append(
            _Para(
                f"Note ({comp}): without line-of-sight velocities the solutions "
                "(ω, Ω) and (ω + 180°, Ω + 180°) predict the same positions; Ω is "
                "reported modulo 180° and ω accordingly."
            )
        )

    blocks += _diagnostic_blocks(results)

    blocks.append(_Heading(2, "Figures"))
    figs = []
    for fig_name, fig_path in figures.items():
        p = Path(fig_path)
        if not p.is_absolute():
            p = out_dir / p
        link = os.path.relpath(p, out_dir).replace(os.sep, "/")
        figs.append(_Figure(str(fig_name), p, link))
    blocks += figs if figs else [_Para("No figures were made.")]

    blocks.append(_Heading(2, "Provenance"))
    rows = [
        ("seed", str(prov.get("seed", "n/a"))),
        ("data SHA-256", str(prov.get("data_sha256") or results.target.data_sha256 or "n/a")),
    ]
    versions = prov.get("versions") or {}
    rows += [(f"{k} version", str(v)) for k, v in versions.items()]
    blocks.append(_Table(("Item", "Value"), tuple(rows)))
    return blocks


def _cell(value: Any, fmt: str, groups: Sequence[str]) -> str:
    if isinstance(value, Measurement):
        return {"md": markdown_escape(value.text()), "html": value.html()}[fmt]
    if isinstance(value, tuple) and value[0] == "sym":
        _, _, plain, html_sym = QUANTITIES[_base_of(value[1], groups)]
        return markdown_escape(plain) if fmt == "md" else html_sym
    if isinstance(value, tuple) and value[0] == "unit":
        _, plain, html_unit = _UNITS[value[1]]
        return markdown_escape(plain) if fmt == "md" else html_unit
    return markdown_escape(str(value)) if fmt == "md" else html.escape(str(value))


def _render_markdown(blocks: Sequence[Any], groups: Sequence[str]) -> str:
    out: list[str] = []
    for b in blocks:
        if isinstance(b, _Heading):
            out.append("#" * b.level + " " + markdown_escape(b.text))
        elif isinstance(b, _Para):
            out.append(markdown_escape(b.text))
        elif isinstance(b, _Warning):
            out.append("> **WARNING:** " + markdown_escape(b.text))
        elif isinstance(b, _Table):
            out.append(
                _md_table(
                    [markdown_escape(h) for h in b.header],
                    [[_cell(c, "md", groups) for c in row] for row in b.rows],
                )
            )
        elif isinstance(b, _Figure):
            text = f"![{markdown_escape(b.name)}](<{b.link}>)"
            pdf = b.path.with_suffix(".pdf")
            if b.path.suffix.lower() != ".pdf" and pdf.exists():
                pdf_link = Path(b.link).with_suffix(".pdf").as_posix()
                text += f"  \n[{markdown_escape(b.name)} (PDF)](<{pdf_link}>)"
            if not b.path.exists():
                text += "  \n(file missing)"
            out.append(text)
        out.append("")
    return "\n".join(out)


_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Helvetica,Arial,sans-serif;max-width:60rem;
margin:2rem auto;padding:0 1rem;color:#1a1a1a;line-height:1.45}
h1{font-size:1.6rem}h2{font-size:1.25rem;border-bottom:1px solid #ccc;padding-bottom:.2rem;
margin-top:2rem}h3{font-size:1.05rem}
table{border-collapse:collapse;margin:.5rem 0 1rem}th,td{padding:.2rem .7rem;text-align:left;
border-bottom:1px solid #e2e2e2;vertical-align:middle}th{border-bottom:2px solid #888}
.warn{background:#fff1e0;border-left:5px solid #D55E00;padding:.5rem .8rem;margin:.8rem 0;
font-weight:600}
.err{display:inline-flex;flex-direction:column;vertical-align:middle;font-size:.75em;
line-height:1.1;margin-left:.15em}.err sup,.err sub{vertical-align:baseline}
figure{margin:1rem 0}figure img{max-width:100%;height:auto;border:1px solid #eee}
figcaption{font-size:.9rem;color:#444}
"""


def _figure_html(fig: _Figure) -> str:
    name = html.escape(fig.name)
    mime = {
        ".png": "image/png",
        ".svg": "image/svg+xml",
        ".jpg": "image/jpeg",
        ".jpeg": "image/jpeg",
    }.get(fig.path.suffix.lower())
    if mime is None or not fig.path.is_file():
        why = "file missing" if not fig.path.exists() else "not an embeddable image"
        return f"<figure><figcaption>{name}: {html.escape(fig.link)} ({why})</figcaption></figure>"
    data = base64.b64encode(fig.path.read_bytes()).decode("ascii")
    return (
        f'<figure><img alt="{name}" src="data:{mime};base64,{data}">'
        f"<figcaption>{name} ({html.escape(fig.link)})</figcaption></figure>"
    )


def _render_html(blocks: Sequence[Any], groups: Sequence[str], title: str) -> str:
    body: list[str] = []
    for b in blocks:
        if isinstance(b, _Heading):
            body.append(f"<h{b.level}>{html.escape(b.text)}</h{b.level}>")
        elif isinstance(b, _Para):
            body.append(f"<p>{html.escape(b.text)}</p>")
        elif isinstance(b, _Warning):
            body.append(f'<div class="warn" role="alert">WARNING: {html.escape(b.text)}</div>')
        elif isinstance(b, _Table):
            head = "".join(f"<th>{html.escape(h)}</th>" for h in b.header)
            rows = "".join(
                "<tr>" + "".join(f"<td>{_cell(c, 'html', groups)}</td>" for c in row) + "</tr>"
                for row in b.rows
            )
            body.append(f"<table><thead><tr>{head}</tr></thead><tbody>{rows}</tbody></table>")
        elif isinstance(b, _Figure):
            body.append(_figure_html(b))
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
        f"<title>{html.escape(title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
        + "\n".join(body)
        + "\n</body>\n</html>\n"
    )


def write_report(
    results: Results, out_dir: str | os.PathLike[str], figures: Mapping[str, str] | None = None
) -> dict[str, Path]:
    """Write ``report.md`` and the self-contained ``report.html`` into ``out_dir``.

    Parameters
    ----------
    results : Results
        The posterior.
    out_dir : str or path-like
        Destination folder (created if missing). Only the two files are written.
    figures : dict of str to str, optional
        Figure name -> image path (relative to ``out_dir`` or absolute), e.g.
        ``{"corner": "corner.png"}``. Markdown links them by relative path;
        HTML embeds PNG/SVG/JPEG files as base64 data.

    Returns
    -------
    dict
        ``{"md": path, "html": path}``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    groups = list(results.companion_names)
    blocks = _report_blocks(results, out, figures or {})
    paths = {"md": out / "report.md", "html": out / "report.html"}
    write_atomic(paths["md"], _render_markdown(blocks, groups))
    write_atomic(
        paths["html"], _render_html(blocks, groups, f"orbitmass report: {results.target.name}")
    )
    return paths
