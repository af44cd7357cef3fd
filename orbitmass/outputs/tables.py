"""The results table of a fit, and its LaTeX, CSV, Markdown and ECSV files.

:func:`results_table` is the machine-readable table: one row per reported
quantity, values in the *stored* units named by the keys (as in
``summary.json``). :func:`display_rows` is the same content for a reader:
labels, symbols and values in display units chosen from each magnitude
(:func:`orbitmass.model.quantities.display_unit`), the periastron time also as
MJD and ISO date, instrument offsets stated relative to the reference
instrument. The LaTeX, Markdown and HTML renderings all read
:func:`display_rows`; CSV and ECSV write :func:`results_table`.

``table.tex`` is a ``table`` float with a ``tabular``, standard LaTeX only, so
it compiles under the AASTeX, MNRAS and A&A classes; its footnote lists every
prior in force. Each file is written atomically.
"""

from __future__ import annotations

import io
import math
import os
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from orbitmass.exceptions import InputError
from orbitmass.model.quantities import QUANTITIES, UNITS, Unit, base_of, display_unit
from orbitmass.outputs.formatting import (
    Measurement,
    display_measurement,
    format_number,
    latex_escape,
    markdown_escape,
    measurement,
)
from orbitmass.outputs.registry import register
from orbitmass.outputs.style import write_atomic
from orbitmass.results import QUANTILES, Results, quantile_block

__all__ = [
    "TABLE_COLUMNS",
    "DisplayRow",
    "results_table",
    "display_rows",
    "reference_instrument",
    "priors",
    "table_tex",
    "table_md",
    "table_csv",
    "table_ecsv",
    "write_tables",
    "md_table",
]

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
    "redshift_factor",
    "precession_factor",
    "extended_mass_fraction",
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
    "precession_arcmin_per_orbit",
    "redshift_periastron_kms",
    "roemer_delay_range_days",
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

#: Julian year -> MJD: JD = 2451545.0 + 365.25 (J - 2000) (IAU 1976, Lieske 1979), MJD = JD - 2400000.5
_MJD_J2000 = 51544.5


# ----------------------------------------------------------------------- machine table


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


def _is_constant(values: np.ndarray) -> bool:
    finite = values[np.isfinite(values)]
    return finite.size > 0 and float(np.ptp(finite)) == 0.0


def reference_instrument(results: Results) -> str | None:
    """The instrument whose velocity offset is held fixed (the zero point), if exactly one."""
    names = list(results.space.instrument_names)
    fixed = []
    for name in names:
        col = f"offset_kms.{name}"
        if col in results.samples.columns:
            if _is_constant(results.samples[col].to_numpy(dtype=float)):
                fixed.append(name)
        elif getattr(results.space, "offset_idx", {}).get(name, 0) is None:
            fixed.append(name)
    return fixed[0] if len(fixed) == 1 and len(names) > 1 else None


def _row(results: Results, column: str, base: str, group: str, label: str) -> dict[str, Any]:
    values = results.samples[column].to_numpy(dtype=float)
    fixed = _is_constant(values)
    if fixed:
        v = float(values[np.isfinite(values)][0])
        q = {k: v for k in QUANTILES}
    else:
        q = _summary_block(results, column) or quantile_block(values)
    qty = QUANTITIES[base]
    return {
        "parameter": column,
        "group": group,
        "label": label or qty.name,
        "symbol": qty.text,
        "unit": qty.unit,
        "median": q["median"],
        "minus": q["median"] - q["q16"],
        "plus": q["q84"] - q["median"],
        "q2.5": q["q2.5"],
        "q16": q["q16"],
        "q84": q["q84"],
        "q97.5": q["q97.5"],
        "fixed": fixed,
    }


def results_table(results: Results, *, params: Sequence[str] | None = None) -> pd.DataFrame:
    """The key results, one row per quantity, in report order, in stored units.

    Parameters
    ----------
    results : Results
        A fitted or loaded posterior.
    params : sequence of str, optional
        Only these sample columns (e.g. ``["mass_msun", "C1.period_yr"]``), in
        report order; default: every key quantity.

    Returns
    -------
    pandas.DataFrame
        Columns ``parameter`` (sample column name, e.g. ``C1.period_yr``),
        ``group`` (``"system"`` or the companion name), ``label``, ``symbol``,
        ``unit`` (the stored unit key, as in :data:`~orbitmass.results.COLUMN_DOC`),
        ``median``, ``minus`` and ``plus`` (distances to the 15.9 % and 84.1 %
        quantiles), the quantiles ``q2.5``, ``q16``, ``q84``, ``q97.5`` and
        ``fixed`` (held fixed in the fit). Rows: total mass, distance, parallax,
        Schwarzschild radius, the sampled frame terms, instrument offsets
        (relative to the reference instrument) and jitters, then per companion
        its elements and derived quantities.

    Raises
    ------
    InputError
        If a name in ``params`` is not a sample column.
    """
    cols = set(results.samples.columns)
    if params is not None:
        unknown = [p for p in params if p not in cols]
        if unknown:
            raise InputError(f"unknown parameter(s) {', '.join(map(repr, unknown))}; expected sample "
                             f"columns such as {', '.join(list(results.samples.columns)[:6])}",
                             key="params")
    ref = reference_instrument(results)
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
                label = f"{QUANTITIES[base].name}, {inst}"
                if base == "offset_kms" and ref is not None:
                    label += f" (relative to {ref})"
                row = _row(results, column, base, "system", label)
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
    if params is not None:
        wanted = set(params)
        rows = [r for r in rows if r["parameter"] in wanted]
        listed = {r["parameter"] for r in rows}
        for p in params:  # asked for, but not a key quantity (e.g. a Thiele-Innes constant)
            b = base_of(p, results.companion_names)
            if p not in listed and b in QUANTITIES:
                group = p.split(".", 1)[0] if "." in p and p.split(".")[0] in results.companion_names \
                    else "system"
                rows.append(_row(results, p, b, group, ""))
    return pd.DataFrame(rows, columns=TABLE_COLUMNS)


# ---------------------------------------------------------------------- display table


@dataclass(frozen=True)
class DisplayRow:
    """One row of a table for readers: label, symbol, value and unit in display form."""

    parameter: str
    group: str
    label: str
    base: str  # key in QUANTITIES ("" for an extra row such as the ISO date)
    value: Measurement | str
    unit: Unit
    symbol_latex: str = ""
    symbol_text: str = ""
    symbol_html: str = ""


def _mjd(jyr: float) -> float:
    return _MJD_J2000 + 365.25 * (float(jyr) - 2000.0)


def iso_date(jyr: float) -> str:
    """ISO 8601 date and time (to the minute) of a Julian-year epoch, via astropy.time."""
    from astropy.time import Time  # start-up time: loaded only when needed

    if not math.isfinite(float(jyr)):
        return "n/a"
    return Time(float(jyr), format="jyear").isot[:16]


def display_rows(results: Results, table: pd.DataFrame | None = None, *,
                 units: Mapping[str, str] | None = None) -> list[DisplayRow]:
    """Rows of :func:`results_table` for readers, in display units.

    Parameters
    ----------
    results : Results
    table : DataFrame, optional
        A :func:`results_table` (default: the full one).
    units : dict, optional
        Base key or column -> display unit key, overriding the choice by magnitude
        (e.g. ``{"distance_pc": "pc"}``).

    Returns
    -------
    list of DisplayRow
        The periastron time is followed by the same epoch as MJD and by the ISO
        date of its median.
    """
    table = results_table(results) if table is None else table
    groups = list(results.companion_names)
    units = dict(units or {})
    out: list[DisplayRow] = []
    for _, r in table.iterrows():
        base = base_of(r["parameter"], groups)
        q = QUANTITIES[base]
        override = units.get(r["parameter"], units.get(base))
        m, u = display_measurement(base, r["median"], r["minus"], r["plus"], fixed=bool(r["fixed"]),
                                   unit=override)
        out.append(DisplayRow(r["parameter"], r["group"], r["label"], base, m, u,
                              q.latex, q.text, q.html))
        if base == "periastron_time_jyr":
            mjd = measurement(_mjd(r["median"]), 365.25 * r["minus"], 365.25 * r["plus"],
                              fixed=bool(r["fixed"]))
            # MJD values are never scaled by a power of ten (a reader copies them)
            if mjd.exponent:
                mjd = Measurement(*(f"{float(x) * 10.0**mjd.exponent:.6g}" for x in
                                    (mjd.median, mjd.minus, mjd.plus)), 0, mjd.fixed)
            out.append(DisplayRow(r["parameter"] + ":mjd", r["group"], q.name + " (MJD)", "", mjd,
                                  UNITS["d"], q.latex, q.text, q.html))
            out.append(DisplayRow(r["parameter"] + ":iso", r["group"], q.name + " (date of the median)",
                                  "", iso_date(r["median"]), UNITS[""], q.latex, q.text, q.html))
    return out


_PRIOR_NUMBER = re.compile(r"(?<![\w.])(-?\d+(?:\.\d+)?(?:e[+-]?\d+)?) (yr|Msun|M_sun)\b")


def _tidy_prior(text: str) -> str:
    """Prior text for readers: M☉ spelt out, sub-year bounds in days, powers of ten written out."""

    def sub(m: re.Match) -> str:
        value, unit = float(m.group(1)), m.group(2)
        if unit == "yr":
            return format_number(value, digits=6, column="period_yr") if value < 1.0 else m.group(0)
        return format_number(value, digits=6) + " M☉"

    return _PRIOR_NUMBER.sub(sub, text)


_LATEX_TEXT = {"M☉": r"$M_\odot$", "±": r"$\pm$", "≤": r"$\leq$", "≥": r"$\geq$", "−": "-",
               "ϖ": r"$\varpi$", "µ": r"$\mu$", "σ": r"$\sigma$", "λ": r"$\lambda$",
               "ω": r"$\omega$", "Ω": r"$\Omega$"}


def _prior_latex(text: str) -> str:
    """Prior text for the LaTeX footnote: escaped, symbols and powers of ten in math mode."""
    out = latex_escape(text)
    out = re.sub(r" × 10\\\^\{\}(-?\d+)", r"$\\times10^{\1}$", out)
    for k, v in _LATEX_TEXT.items():
        out = out.replace(k, v)
    return out


#: prior rows whose bounds are shown in the display unit of the posterior: parameter -> (column, stored unit)
_PRIOR_DISPLAY = {"distance": ("distance_pc", "pc"), "parallax": ("parallax_mas", "mas")}


def _prior_in_display_unit(text: str, parameter: str, summary: Mapping) -> str:
    """Distance and parallax bounds in the unit the results table uses (kpc, µas, ...)."""
    if parameter not in _PRIOR_DISPLAY:
        return text
    column, stored = _PRIOR_DISPLAY[parameter]
    block = (summary.get("derived") or {}).get(column)
    if not isinstance(block, Mapping) or "median" not in block:
        return text
    unit = display_unit(column, float(block["median"]))[0].key
    pattern = re.compile(rf"(?<![\w.])(-?\d+(?:\.\d+)?(?:e[+-]?\d+)?) {stored}\b")
    return pattern.sub(lambda m: format_number(float(m.group(1)), digits=6, column=column, unit=unit), text)


def priors(results: Results) -> list[dict[str, str]]:
    """Every prior in force as recorded in ``summary.json`` (parameter, prior text for readers).

    Distance and parallax bounds are given in the display unit of the results
    (e.g. kpc for a 46 kpc posterior); ``summary.json`` keeps the stored units.
    """
    summary = results.summary or {}
    pri = summary.get("priors")
    if not isinstance(pri, list):
        return []
    out = []
    for p in pri:
        if not isinstance(p, Mapping):
            continue
        parameter = str(p.get("parameter", ""))
        text = _prior_in_display_unit(str(p.get("prior", "")), parameter, summary)
        out.append({"parameter": parameter, "prior": _tidy_prior(text)})
    return out


def ambiguous_companions(results: Results) -> list[str]:
    """Companions whose (ω, Ω) are known only modulo 180° (no line-of-sight velocities)."""
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


# --------------------------------------------------------------------------- renderings


def _latex_value(v: Measurement | str) -> str:
    return v.latex() if isinstance(v, Measurement) else latex_escape(v)


def _text_value(v: Measurement | str) -> str:
    return v.text() if isinstance(v, Measurement) else str(v)


def table_tex(results: Results, table: pd.DataFrame | None = None, **kw: Any) -> str:
    """The LaTeX ``table`` float (standard LaTeX only)."""
    name = latex_escape(results.target.name)
    slug = re.sub(r"[^A-Za-z0-9]+", "-", results.target.name).strip("-").lower() or "target"
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
    last = None
    for row in display_rows(results, table, **kw):
        if row.group != last:
            title = "System" if row.group == "system" else f"Companion {latex_escape(row.group)}"
            lines.append(r"\multicolumn{4}{l}{\textit{" + title + r"}} \\")
            last = row.group
        sym = "$" + row.symbol_latex + "$" if row.symbol_latex else ""
        lines.append(f"{latex_escape(row.label)} & {sym} & {_latex_value(row.value)} & "
                     f"{row.unit.latex} \\\\")
    lines += [r"\hline", r"\end{tabular}"]
    notes = []
    pri = priors(results)
    if pri:
        notes.append("Priors: " + "; ".join(
            f"{latex_escape(p['parameter'])}: {_prior_latex(p['prior'])}" for p in pri) + ".")
    amb = ambiguous_companions(results)
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


def md_table(header: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    """A GitHub-flavoured Markdown table of already escaped cells."""
    out = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    out += ["| " + " | ".join(cells) + " |" for cells in rows]
    return "\n".join(out)


def table_md(results: Results, table: pd.DataFrame | None = None, **kw: Any) -> str:
    """The Markdown table of the display rows, with a title line."""
    rows = []
    for r in display_rows(results, table, **kw):
        group = "" if r.group == "system" else f"{r.group}: "
        rows.append([markdown_escape(group + r.label), markdown_escape(r.symbol_text),
                     markdown_escape(_text_value(r.value)), markdown_escape(r.unit.text)])
    return "\n".join([
        f"Results for {markdown_escape(results.target.name)} (posterior medians, 15.9-84.1 % "
        "quantile errors)",
        "",
        md_table(["Parameter", "Symbol", "Value", "Unit"], rows),
        "",
    ])


def table_csv(results: Results, table: pd.DataFrame | None = None, **_ignored: Any) -> str:
    """CSV of :func:`results_table` (stored units, full precision)."""
    table = results_table(results) if table is None else table
    return table.to_csv(index=False, float_format="%.10g")


def _astropy_unit(key: str):
    import astropy.units as u  # start-up time: loaded only when needed

    return {"M_sun": u.M_sun, "pc": u.pc, "mas": u.mas, "au": u.au, "km/s": u.km / u.s,
            "mas/yr": u.mas / u.yr, "yr": u.yr, "Julian yr": u.yr, "deg": u.deg}.get(key)


def table_ecsv(results: Results, table: pd.DataFrame | None = None, **_ignored: Any) -> str:
    """ECSV (astropy's Enhanced CSV) of :func:`results_table`, one row per quantity.

    Values are in each row's stored unit (column ``unit``), so the numeric
    columns carry no single unit; the ``unit`` column holds the astropy unit
    string (``solMass``, ``pc``, ``km / s``...; empty for dimensionless or R_S).
    """
    from astropy.table import Table  # start-up time: loaded only when needed

    table = results_table(results) if table is None else table
    t = Table.from_pandas(table.astype({"fixed": bool}))
    t["unit"] = [("" if _astropy_unit(k) is None else _astropy_unit(k).to_string()) for k in table["unit"]]
    t.meta["target"] = results.target.name
    t.meta["comments"] = ["orbitmass results table: posterior medians and quantiles, each row in its unit"]
    buf = io.StringIO()
    t.write(buf, format="ascii.ecsv")
    return buf.getvalue()


def write_tables(results: Results, out_dir: str | os.PathLike[str], *,
                 params: Sequence[str] | None = None,
                 units: Mapping[str, str] | None = None) -> dict[str, Path]:
    """Write ``table.tex``, ``table.csv``, ``table.md`` and ``table.ecsv`` into ``out_dir``.

    Parameters
    ----------
    results : Results
        The posterior.
    out_dir : str or path-like
        Destination folder (created if missing). Only these files are written.
    params : sequence of str, optional
        Sample columns to list (default: every key quantity).
    units : dict, optional
        Display-unit overrides (see :func:`display_rows`).

    Returns
    -------
    dict
        ``{"tex": path, "csv": path, "md": path, "ecsv": path}``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    table = results_table(results, params=params)
    return {key: write_atomic(out / f"table.{key}", func(results, table, units=units))
            for key, func in _FORMATS.items()}


_FORMATS = {"tex": table_tex, "csv": table_csv, "md": table_md, "ecsv": table_ecsv}


def _renderer(key: str):
    func = _FORMATS[key]

    def render(results: Results, out_dir: Path, *, params: Sequence[str] | None = None,
               units: Mapping[str, str] | None = None, **_ignored: Any) -> list[Path]:
        table = results_table(results, params=params)
        return [write_atomic(Path(out_dir) / f"table.{key}", func(results, table, units=units))]

    render.__doc__ = f"Write table.{key} (see :func:`{func.__name__}`)."
    return render


for _key, _what in (("tex", "LaTeX table float for a journal (footnote: every prior in force)"),
                    ("csv", "results table in stored units, full precision"),
                    ("md", "Markdown results table in display units"),
                    ("ecsv", "results table as astropy ECSV with the unit of each row")):
    register(f"table.{_key}", _renderer(_key), kind="table", files=(f"table.{_key}",),
             description=_what)
