"""Markdown and HTML reports of a fit: one document built once, rendered twice.

The report reads a :class:`~orbitmass.results.Results` only: the quantiles of
``summary.json`` (via :mod:`orbitmass.outputs.tables`), the diagnostics and
provenance recorded by the fit, and the data of the target. It states the
method used (full ensemble sampling, or the astrometry-only fast path with
importance sampling or a 3-D chain, with its diagnostic), every prior in
force, the goodness of fit (``fit_quality``: a "Goodness of fit" section
always, and a warning at the very top when the fit is poor) and a caption
under each figure.

:func:`write_report` writes ``report.md`` and ``report.html``, one
self-contained page (CSS inline, figures embedded as base64 data, no external
resource). Every file is written atomically into ``out_dir`` and nowhere else;
user text (target, companion and instrument names) is escaped for each format.

The number formatting and the table functions once defined here live in
:mod:`orbitmass.outputs.formatting` and :mod:`orbitmass.outputs.tables`; they
stay importable from this module.

Longer than 600 lines because the report's block types, every section (goodness of fit,
diagnostics, method) and both renderers share one document model, which must stay in one
place so that report.md and report.html can never say different things.
"""

from __future__ import annotations

import base64
import html
import logging
import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from orbitmass.model.quantities import PHASE_NAME, Unit
from orbitmass.model.quantities import QUANTITIES as _QUANTITIES
from orbitmass.outputs.figures.captions import figure_caption
from orbitmass.outputs.figures.trace import sampled_text
from orbitmass.outputs.formatting import (
    Measurement,
    choose_exponent,
    format_value,
    latex_escape,
    markdown_escape,
    measurement,
)
from orbitmass.outputs.registry import register
from orbitmass.outputs.style import write_atomic
from orbitmass.outputs.tables import (
    DisplayRow,
    ambiguous_companions,
    display_rows,
    md_table,
    priors,
    results_table,
    write_tables,
)
from orbitmass.results import Results

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
    "method_text",
]

logger = logging.getLogger(__name__)

#: older view of :data:`orbitmass.model.quantities.QUANTITIES`: base column -> (name, LaTeX
#: symbol, plain symbol, HTML symbol); kept for callers of this module
QUANTITIES: dict[str, tuple[str, str, str, str]] = {
    k: (q.name, q.latex, q.text, q.html) for k, q in _QUANTITIES.items()
}
#: base column -> stored unit key (as in COLUMN_DOC)
QUANTITY_UNITS: dict[str, str] = {k: q.unit for k, q in _QUANTITIES.items()}


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
class _List:
    items: tuple[str, ...]


@dataclass(frozen=True)
class _Table:
    header: tuple[str, ...]
    rows: tuple[tuple[Any, ...], ...]  # str or Measurement cells


@dataclass(frozen=True)
class _Figure:
    name: str
    path: Path  # absolute
    link: str  # relative to out_dir, forward slashes
    caption: str = ""


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
        note = ""
        if any(str(n).endswith("mean_longitude") for n in per):  # the key of λ: say what it is
            note = f"; mean_longitude is the key of λ, the {PHASE_NAME}"
        blocks.append(_Para(f"Per sampled variable (τ in steps{note}):"))
        blocks.append(
            _Table(
                ("Variable", "Symbol", "τ", "ESS", "R-hat"),
                tuple(
                    (
                        str(name),
                        sampled_text(str(name)),
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


def _fmt_p(p: Any) -> str:
    if p is None:
        return "n/a"
    try:
        v = float(p)
    except (TypeError, ValueError):
        return "n/a"
    return "< 1e-300" if v == 0 else _fmt_num(v, ".2g")


def _quality_head(fq: Mapping[str, Any]) -> str:
    return (f"chi-square {_fmt_num(fq.get('chi2'), '.4g')} for {_fmt_num(fq.get('dof'), '.0f')} degrees of "
            f"freedom, reduced {_fmt_num(fq.get('reduced_chi2'), '.3g')}, p = {_fmt_p(fq.get('p_value'))}")


def _quality_alert(results: Results) -> list[Any]:
    """The goodness-of-fit warning for the top of the report (empty unless the fit is poor)."""
    fq = (results.summary or {}).get("fit_quality")
    if not isinstance(fq, Mapping) or fq.get("status") != "poor":
        return []
    if fq.get("chi2") is None:
        text = "GOODNESS OF FIT UNKNOWN: it could not be computed; treat this fit as unchecked."
    else:
        text = (f"POOR FIT: the model is implausible for these data ({_quality_head(fq)}). The numbers below are "
                "not trustworthy until this is resolved; see Goodness of fit and the residuals figure.")
    blocks: list[Any] = [_Warning(text)]
    reasons = [str(r) for r in fq.get("reasons") or []]
    if reasons:
        blocks.append(_List(tuple(reasons)))
    causes = [str(c.get("message", c)) if isinstance(c, Mapping) else str(c) for c in fq.get("likely_causes") or []]
    if causes:
        blocks.append(_Para("Likely causes:"))
        blocks.append(_List(tuple(causes)))
    return blocks


def _quality_blocks(results: Results) -> list[Any]:
    """The "Goodness of fit" section: per-dataset chi-square table and the posterior check."""
    blocks: list[Any] = [_Heading(2, "Goodness of fit")]
    fq = (results.summary or {}).get("fit_quality")
    if not isinstance(fq, Mapping):
        return blocks + [_Para("This run recorded no goodness of fit (written by an earlier version).")]
    status = str(fq.get("status", "n/a"))
    blocks.append(_Para(f"Status: {status} ({_quality_head(fq)}). A fit is poor when the overall p-value is "
                        "below 1e-3, a dataset's reduced chi-square lies outside its band, or a row lies "
                        "beyond 5 sigma; this is separate from sampling convergence (Diagnostics)."))
    rows = []
    for d in (fq.get("datasets") or {}).values():
        if not isinstance(d, Mapping):
            continue
        rows.append((str(d.get("label", "")), str(d.get("n_values", "n/a")), _fmt_num(d.get("dof"), ".1f"),
                     _fmt_num(d.get("chi2"), ".4g"), _fmt_num(d.get("reduced_chi2"), ".3g"),
                     _fmt_p(d.get("p_value")), _fmt_num(d.get("max_abs_normalised"), ".2f"),
                     str(d.get("status", "n/a"))))
    rows.append(("all", str(fq.get("n_values", "n/a")), _fmt_num(fq.get("dof"), ".0f"), _fmt_num(fq.get("chi2"), ".4g"),
                 _fmt_num(fq.get("reduced_chi2"), ".3g"), _fmt_p(fq.get("p_value")), "", status))
    blocks.append(_Table(("Dataset", "values", "dof", "chi-square", "reduced chi-square", "p-value",
                          "max |O−C|/σ", "status"), tuple(rows)))
    post = fq.get("posterior") or {}
    if isinstance(post, Mapping) and post.get("ppc_p_value") is not None:
        how = (fq.get("point") or {}).get("how", "")
        blocks.append(_Para(
            f"The table is at the maximum-posterior point{f' ({how})' if how else ''}. Over "
            f"{post.get('n_draws', 'n/a')} posterior draws the chi-square is "
            f"{_fmt_num(post.get('chi2_median'), '.4g')} "
            f"(16–84 %: {_fmt_num(post.get('chi2_q16'), '.4g')}–{_fmt_num(post.get('chi2_q84'), '.4g')}); "
            f"posterior predictive p-value {_fmt_num(post.get('ppc_p_value'), '.2f')}."))
    return blocks


def method_text(results: Results) -> str:
    """One paragraph stating how this posterior was sampled, with its diagnostic.

    Reads ``summary["diagnostics"]``: a ``linear_path`` block means the
    astrometry-only fast path (A, B, F, G marginalised analytically), followed
    either by importance sampling of the three remaining variables (Kish
    effective sample size, Pareto shape k) or by an ensemble chain on them;
    otherwise the full ensemble sampling of every variable.
    """
    diag = (results.summary or {}).get("diagnostics") or {}
    lin = diag.get("linear_path")
    n_walkers = diag.get("n_walkers", results.chain.shape[1] if results.chain.ndim == 3 else None)
    if isinstance(lin, Mapping):
        text = ("Astrometry-only fast path: the Thiele–Innes constants A, B, F, G were "
                "marginalised analytically and the three remaining variables (period, "
                "eccentricity, phase) sampled; every draw is then completed and weighted to the "
                "stated priors.")
        sampler = str(lin.get("sampler_3d", ""))
        if sampler.startswith("importance") or "kish_ess" in lin and "n_steps_3d" not in lin:
            text += (f" The three variables were drawn by importance sampling ({sampler or 'n/a'}): "
                     f"Kish effective sample size {_fmt_num(lin.get('kish_ess'), '.0f')} of "
                     f"{_fmt_num(lin.get('n_weighted', lin.get('n_proposal_3d')), '.0f')} weighted draws, "
                     f"Pareto shape k = {_fmt_num(lin.get('khat_3d'), '.2f')} (reliable below 0.7).")
        else:
            text += (f" The three variables were sampled by an ensemble chain of "
                     f"{_fmt_num(lin.get('n_steps_3d'), '.0f')} steps; its convergence is in the "
                     "Diagnostics below.")
        return text
    return (f"Full sampling: every variable sampled together by the affine-invariant ensemble "
            f"sampler emcee ({n_walkers} walkers); convergence statistics in the Diagnostics below.")


def _report_blocks(results: Results, out_dir: Path, figures: Mapping[str, str], *,
                   params: Sequence[str] | None = None,
                   units: Mapping[str, str] | None = None) -> list[Any]:
    summ = results.summary or {}
    prov = summ.get("provenance") or {}
    name = results.target.name
    blocks: list[Any] = [_Heading(1, f"orbitmass report: {name}")]
    blocks += _quality_alert(results)  # a poor fit is said first, before any number
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
    pri = priors(results)
    if pri:
        blocks.append(
            _Table(("Parameter", "Prior"), tuple((p["parameter"], p["prior"]) for p in pri))
        )
    else:
        blocks.append(_Para("The priors were not recorded in this run's summary."))
    if any("mean_longitude" in n for n in results.space.names):
        blocks.append(_Para(f"The orbital phase is sampled as λ, the {PHASE_NAME} (the node is "
                            "not included, so λ is not the classical mean longitude)."))

    blocks.append(_Heading(2, "Method"))
    blocks.append(_Para(method_text(results)))

    blocks.append(_Heading(2, "Results"))
    blocks.append(_Para("Posterior medians; the errors reach the 15.9 % and 84.1 % quantiles. "
                        "Units are chosen per quantity for reading; summary.json and table.csv "
                        "keep the units named in their keys."))
    rows = display_rows(results, results_table(results, params=params), units=units)
    for group in dict.fromkeys(r.group for r in rows):
        blocks.append(_Heading(3, "System" if group == "system" else f"Companion {group}"))
        blocks.append(
            _Table(
                ("Parameter", "Symbol", "Value", "Unit"),
                tuple((r.label, r, r.value, r.unit) for r in rows if r.group == group),
            )
        )
    for comp in ambiguous_companions(results):
        blocks.append(
            _Para(
                f"Note ({comp}): without line-of-sight velocities the solutions "
                "(ω, Ω) and (ω + 180°, Ω + 180°) predict the same positions; Ω is "
                "reported modulo 180° and ω accordingly."
            )
        )

    blocks += _quality_blocks(results)
    blocks += _diagnostic_blocks(results)

    blocks.append(_Heading(2, "Figures"))
    figs = []
    for fig_name, fig_path in figures.items():
        p = Path(fig_path)
        if not p.is_absolute():
            p = out_dir / p
        link = os.path.relpath(p, out_dir).replace(os.sep, "/")
        figs.append(_Figure(str(fig_name), p, link, figure_caption(str(fig_name), results)))
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
    if isinstance(value, DisplayRow):  # its symbol
        return markdown_escape(value.symbol_text) if fmt == "md" else value.symbol_html
    if isinstance(value, Unit):
        return markdown_escape(value.text) if fmt == "md" else value.html
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
        elif isinstance(b, _List):
            out.append("\n".join(f"- {markdown_escape(item)}" for item in b.items))
        elif isinstance(b, _Table):
            out.append(
                md_table(
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
            if b.caption:
                text += f"  \n*{markdown_escape(b.caption)}*"
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
        f"<figcaption><b>{name}</b> ({html.escape(fig.link)}). {html.escape(fig.caption)}"
        "</figcaption></figure>"
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
        elif isinstance(b, _List):
            body.append("<ul>" + "".join(f"<li>{html.escape(item)}</li>" for item in b.items) + "</ul>")
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
    results: Results,
    out_dir: str | os.PathLike[str],
    figures: Mapping[str, str] | None = None,
    *,
    params: Sequence[str] | None = None,
    units: Mapping[str, str] | None = None,
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
        HTML embeds PNG/SVG/JPEG files as base64 data. Each gets its caption
        (:func:`orbitmass.outputs.figures.captions.figure_caption`).
    params : sequence of str, optional
        Sample columns of the results table (default: every key quantity).
    units : dict, optional
        Display-unit overrides, base key or column -> unit key (e.g. ``{"distance_pc": "pc"}``).

    Returns
    -------
    dict
        ``{"md": path, "html": path}``.
    """
    return _write(results, out_dir, figures, ("md", "html"), params=params, units=units)


def _write(results: Results, out_dir: str | os.PathLike[str], figures: Mapping[str, str] | None,
           formats: Sequence[str], *, params: Sequence[str] | None = None,
           units: Mapping[str, str] | None = None, **_ignored: Any) -> dict[str, Path]:
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    groups = list(results.companion_names)
    blocks = _report_blocks(results, out, figures or {}, params=params, units=units)
    paths = {}
    if "md" in formats:
        paths["md"] = write_atomic(out / "report.md", _render_markdown(blocks, groups))
    if "html" in formats:
        paths["html"] = write_atomic(
            out / "report.html",
            _render_html(blocks, groups, f"orbitmass report: {results.target.name}"),
        )
    return paths


def _report_md(results: Results, out_dir: Path, *, figures=None, **options: Any) -> list[Path]:
    return list(_write(results, out_dir, figures, ("md",), **options).values())


def _report_html(results: Results, out_dir: Path, *, figures=None, **options: Any) -> list[Path]:
    return list(_write(results, out_dir, figures, ("html",), **options).values())


register("report.md", _report_md, kind="report", files=("report.md",),
         description="Markdown report: job, data, priors, method, results, diagnostics, figures")
register("report.html", _report_html, kind="report", files=("report.html",),
         description="the same report as one self-contained HTML page")
