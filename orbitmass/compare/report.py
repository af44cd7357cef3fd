"""Files of a comparison: ``comparison.md`` and the folder holding everything.

:func:`write_comparison` assembles ``comparison.json``, ``comparison.md``, the
figures and optionally the joint run folder in a staging folder beside the
destination and swaps the whole folder into place; the folder checks, the
staging and the marker are those of :mod:`orbitmass._atomic`, like a run folder's.
"""

from __future__ import annotations

import json
import logging
import os
from collections.abc import Mapping
from pathlib import Path

from orbitmass._atomic import check_output_folder, folder_entries, staged_folder, write_atomic, write_marker
from orbitmass.compare.figures import comparison_figure, enclosed_mass_figure
from orbitmass.compare.tension import METHOD
from orbitmass.io.rundir import save_run
from orbitmass.outputs.formatting import summary_text
from orbitmass.outputs.reports import markdown_escape as esc
from orbitmass.outputs.reports import measurement
from orbitmass.outputs.style import save_figure
from orbitmass.results import quantile_block

__all__ = ["markdown", "write_comparison", "check_out_dir", "COMPARISON_KIND", "COMPARISON_FILES"]

log = logging.getLogger(__name__)

#: marker kind of a comparison folder
COMPARISON_KIND = "comparison"
#: top-level files a comparison folder may hold (its joint run folder is ``combined/``)
COMPARISON_FILES = ("comparison.json", "comparison.md", *(f"{n}.{e}" for n in ("comparison", "enclosed_mass")
                                                             for e in ("png", "pdf")))


def markdown(cmp, *, figures: Mapping[str, str] | None = None, run_folder: str | None = None) -> str:
    """``comparison.md``: runs, references, pairwise results, joint refit, method."""
    def meas(q: Mapping[str, float]) -> str:
        return measurement(q["median"], q["median"] - q["q16"], q["q84"] - q["median"]).text()

    lines = ["# Mass comparison", ""]
    lines += [
        "## Runs",
        "",
        "| run | target | companions | total mass [M☉] (68 %) | n_eff | converged |",
        "|---|---|---|---|---|---|",
    ]
    for r in cmp.runs:
        conv = "?" if r.converged is None else ("yes" if r.converged else "NO")
        lines.append(
            f"| {esc(r.label)} | {esc(r.target)} | {esc(', '.join(r.radii))} | "
            f"{meas(r.quantiles())} "
            f"| {r.n_eff:.0f} | {conv} |"
        )
    if cmp.references:
        lines += [
            "",
            "## Reference values",
            "",
            "| reference | as given | total mass [M☉] |",
            "|---|---|---|",
        ]
        for f in cmp.references:
            m = measurement(f.mass_msun, f.sd_minus_msun, f.sd_plus_msun).text()
            lines.append(f"| {esc(f.label)} | {esc(f.text)} | {m} |")
    lines += [
        "",
        "## Comparisons",
        "",
        f"Difference a − b and ratio a / b: median and 68 % interval. Tension threshold "
        f"{cmp.threshold_sigma:g} sigma.",
        "",
        "| a | b | a − b [M☉] | a / b | P(a > b) | tension | overlap BC / OVL | verdict |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for p in cmp.pairs:
        if p.tension_is_lower_bound:
            t = (f"> {p.tension_sigma:.1f} σ (lower bound from the samples; "
                 f"normal approx. {p.sigma_normal_approx:.1f} σ)")
        else:
            t = f"{p.tension_sigma:.2f} ± {p.tension_sigma_mc_error:.2f} σ"
        lines.append(
            f"| {esc(p.a)} | {esc(p.b)} | {meas(p.difference_msun)} | {meas(p.ratio)} | "
            f"{p.p_a_greater:.4g} | {t} | "
            f"{p.bhattacharyya:.3f} / {p.overlapping_coefficient:.3f} | "
            f"{esc(p.statement)} |"
        )
    c = cmp.combined_dict(run_folder)
    if c is not None:
        lines += [
            "",
            "## Joint refit",
            "",
            f"One fit of the union of the data of {esc(', '.join(c['parts']))}: one central "
            "mass and one distance, every companion with its own orbit (not a product of the "
            "separate posteriors).",
            "",
            "| | total mass [M☉] (68 %) | 68 % width [M☉] |",
            "|---|---|---|",
        ]
        for r in cmp.runs:
            w = c["parts_width68_msun"][r.label]
            lines.append(f"| {esc(r.label)} | {meas(r.quantiles())} | {_short(w)} |")
        lines.append(f"| **{esc(c['label'])}** | **{meas(c['mass_msun'])}** | **{_short(c['width68_msun'])}** |")
        if c["distance_pc"] is not None:
            lines += ["", f"Joint distance: {summary_text('distance_pc', c['distance_pc'])}."]
        if c["converged"] is False:
            lines += [
                "",
                "**Warning:** the joint refit did not converge; its numbers are provisional.",
            ]
        if run_folder:
            lines += ["", f"The joint run folder is [{run_folder}/]({run_folder}/report.md)."]
    radii_rows = [(r, comp, rad) for r in cmp.runs for comp, rad in r.radii.items()]
    if radii_rows:
        lines += [
            "",
            "## Radii probed",
            "",
            "| run | companion | a [au] | r_p [au] | r_p [R_S] | total mass [M☉] |",
            "|---|---|---|---|---|---|",
        ]
        for r, comp, rad in radii_rows:
            cells = [meas(quantile_block(rad[k])) for k in ("semimajor_axis_au", "periastron_au", "periastron_rs")]
            lines.append(f"| {esc(r.label)} | {esc(comp)} | {' | '.join(cells)} | {meas(r.quantiles())} |")
    for name, path in (figures or {}).items():
        lines += ["", f"![{esc(name)}]({path})"]
    lines += ["", "## Method", ""] + [f"- **{k}**: {v}" for k, v in METHOD.items()]
    return "\n".join(lines) + "\n"


def write_comparison(
    cmp,
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
    check_out_dir(out_dir, overwrite)
    out_dir.absolute().parent.mkdir(parents=True, exist_ok=True)
    with staged_folder(out_dir) as staging:
        run_folder = None
        if save_combined and cmp.combined is not None and cmp.combined.results is not None:
            save_run(cmp.combined.results, staging / "combined")
            run_folder = "combined"
        figures = {}
        makers = [("comparison", comparison_figure)]
        if any(r.radii for r in cmp.runs):
            makers.append(("enclosed_mass", enclosed_mass_figure))
        for name, make in makers:
            save_figure(make(cmp), staging / name)
            figures[name] = f"{name}.png"
        write_atomic(
            staging / "comparison.json",
            json.dumps(cmp.to_dict(run_folder=run_folder), indent=2, allow_nan=False) + "\n",
        )
        write_atomic(staging / "comparison.md", markdown(cmp, figures=figures, run_folder=run_folder))
        write_marker(staging, COMPARISON_KIND, files=[e for e in folder_entries(staging) if not e.endswith("/")])
    log.info("comparison written to %s", out_dir)
    return out_dir


def _short(x: float) -> str:
    """Three significant digits, with "× 10^k" instead of "e+k"."""
    text = f"{x:.3g}"
    if "e" not in text:
        return text
    mant, exp = text.split("e")
    return f"{mant} × 10^{int(exp)}"



def check_out_dir(out_dir: Path, overwrite: bool) -> Path:
    """Check the comparison folder before any work (:func:`orbitmass._atomic.check_output_folder`).

    Refused: a file or a path under one, an unwritable place, the working or
    home folder; a non-empty folder without ``overwrite`` (the error's
    ``remedy`` is ``"overwrite"`` when passing it would help), and with it any
    folder holding files orbitmass did not write. Nothing is touched.
    """
    return check_output_folder(out_dir, overwrite=overwrite, kind=COMPARISON_KIND, known_names=COMPARISON_FILES,
                               known_dirs=("combined",), core_names=("comparison.json",))
