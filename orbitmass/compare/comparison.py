"""A comparison of several runs: the :class:`Comparison` container and :func:`compare`.

``comparison.json`` is :meth:`Comparison.to_dict` (keys in :mod:`orbitmass.compare`).
"""

from __future__ import annotations

import json
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib.figure import Figure

from orbitmass._version import __version__
from orbitmass.compare.figures import comparison_figure, enclosed_mass_figure
from orbitmass.compare.posteriors import MassPosterior, RunLike, as_posterior, as_posteriors, unique_labels
from orbitmass.compare.references import Reference, parse_reference
from orbitmass.compare.report import markdown, write_comparison
from orbitmass.compare.tension import (
    DEFAULT_THRESHOLD_SIGMA,
    METHOD,
    PairComparison,
    compare_samples,
    finite_or_none,
)
from orbitmass.exceptions import InputError
from orbitmass.results import quantile_block

__all__ = ["Comparison", "compare"]


@dataclass
class Comparison:
    """Runs, references, their pairwise comparisons and an optional joint refit.

    Build it with :func:`compare`. Attributes mirror ``comparison.json``
    (see the module docstring).
    """

    runs: list[MassPosterior]
    references: list[Reference]
    pairs: list[PairComparison]
    combined: MassPosterior | None = None
    seed: int = 0
    n_draws: int = 100_000
    threshold_sigma: float = DEFAULT_THRESHOLD_SIGMA

    # ------------------------------------------------------------------ content
    def joint(self) -> MassPosterior | None:
        """The joint fit of the enclosed-mass band: the refit, else one multi-companion run."""
        if self.combined is not None:
            return self.combined
        multi = [r for r in self.runs if len(r.radii) > 1]
        return multi[0] if len(multi) == 1 and len(self.runs) == 1 else None

    def combined_dict(self, run_folder: str | None) -> dict[str, Any] | None:
        c = self.combined
        if c is None:
            return None
        q = c.quantiles()
        width = q["q84"] - q["q16"]
        parts = {}
        for r in self.runs:
            rq = r.quantiles()
            parts[r.label] = rq["q84"] - rq["q16"]
        dist = None
        if c.results is not None and "distance_pc" in c.results.samples:
            dist = quantile_block(c.results.samples["distance_pc"].to_numpy())
        return {
            "label": c.label,
            "target": c.target,
            "companions": list(c.radii),
            "parts": [r.label for r in self.runs],
            "mass_msun": q,
            "distance_pc": dist,
            "n_eff": c.n_eff,
            "converged": c.converged,
            "width68_msun": width,
            "parts_width68_msun": parts,
            "narrower_than_every_part": bool(all(width < w for w in parts.values())),
            "run_folder": run_folder,
        }

    def to_dict(self, *, run_folder: str | None = None) -> dict[str, Any]:
        """The content of ``comparison.json`` (see the module docstring for the keys)."""
        runs = []
        for r in self.runs:
            runs.append(
                {
                    "label": r.label,
                    "target": r.target,
                    "source": r.source,
                    "companions": list(r.radii),
                    "n_samples": int(r.mass_msun.size),
                    "n_eff": r.n_eff,
                    "converged": r.converged,
                    "mass_msun": r.quantiles(),
                    "radii": {c: {k: quantile_block(v) for k, v in d.items()} for c, d in r.radii.items()},
                }
            )
        refs = [
            {
                "label": f.label,
                "text": f.text,
                "mass_msun": f.mass_msun,
                "sd_minus_msun": f.sd_minus_msun,
                "sd_plus_msun": f.sd_plus_msun,
            }
            for f in self.references
        ]
        return finite_or_none(
            {
                "orbitmass_version": __version__,
                "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
                "seed": self.seed,
                "n_draws": self.n_draws,
                "threshold_sigma": self.threshold_sigma,
                "method": dict(METHOD),
                "runs": runs,
                "references": refs,
                "comparisons": [p.to_dict() for p in self.pairs],
                "combined": self.combined_dict(run_folder),
            }
        )

    def to_json(self, *, indent: int = 2) -> str:
        """``comparison.json`` as text (strict JSON: non-finite numbers are ``null``)."""
        return json.dumps(self.to_dict(), indent=indent, allow_nan=False)

    # ------------------------------------------------------------------ figures and files
    def figure(self) -> Figure:
        """Mass posteriors, intervals and tensions (:func:`~orbitmass.compare.figures.comparison_figure`)."""
        return comparison_figure(self)

    def enclosed_mass_figure(self) -> Figure:
        """Mass against radius (:func:`~orbitmass.compare.figures.enclosed_mass_figure`)."""
        return enclosed_mass_figure(self)

    def markdown(self, *, figures: Mapping[str, str] | None = None, run_folder: str | None = None) -> str:
        """``comparison.md`` (:func:`~orbitmass.compare.report.markdown`)."""
        return markdown(self, figures=figures, run_folder=run_folder)

    def write(self, out_dir: str | os.PathLike[str], *, overwrite: bool = False, save_combined: bool = True) -> Path:
        """Write the comparison folder (:func:`~orbitmass.compare.report.write_comparison`); returns it."""
        return write_comparison(self, out_dir, overwrite=overwrite, save_combined=save_combined)


def compare(
    runs: Sequence[RunLike],
    *,
    references: Sequence[str | Reference] = (),
    labels: Sequence[str] | None = None,
    combined: RunLike | None = None,
    seed: int = 0,
    n_draws: int = 100_000,
    threshold_sigma: float = DEFAULT_THRESHOLD_SIGMA,
) -> Comparison:
    """Compare mass posteriors pairwise and against reference values.

    Parameters
    ----------
    runs : sequence of Fit, Results, MassPosterior or path
        The runs (run folders are loaded with :func:`orbitmass.load`).
    references : sequence of str or Reference
        Reference masses, e.g. ``"disc=4.1e6 +- 0.1e6 solMass"``
        (:func:`parse_reference`).
    labels : sequence of str, optional
        One name per run (default: the folder name, else the target name).
    combined : Fit, Results, MassPosterior or path, optional
        A joint refit (:func:`combined_refit`): shown beside the parts,
        compared with the references and used as the point-mass band of the
        enclosed-mass figure.
    seed : int
        Seed of the resampling.
    n_draws : int
        Random pairs per comparison for the difference and ratio posteriors.
    threshold_sigma : float
        Tension threshold of the verdicts (default 3).

    Returns
    -------
    Comparison

    Raises
    ------
    InputError
        On bad labels, references or runs; :class:`RunFolderError` on unreadable run folders.
    """
    posts = as_posteriors(runs, labels)
    if not posts:
        raise InputError("no runs to compare", key="runs")
    refs = [parse_reference(r, key=f"references[{i}]") for i, r in enumerate(references)]
    if not posts[1:] and not refs:
        raise InputError(
            "one run and no reference value: nothing to compare; give a second run or a reference",
            key="references",
        )
    ref_names = unique_labels([r.label for r in refs])
    refs = [r if r.label == n else replace(r, label=n) for r, n in zip(refs, ref_names, strict=True)]
    joint = None
    if combined is not None:
        joint = as_posterior(combined, "joint refit")
        if joint.label in {p.label for p in posts}:
            joint = replace(joint, label=f"{joint.label} (2)")
    rng = np.random.default_rng(seed)
    pairs = []
    for i, a in enumerate(posts):
        for b in posts[i + 1 :]:
            pairs.append(compare_samples(a, b, rng=rng, n_draws=n_draws, threshold_sigma=threshold_sigma))
    for a in posts + ([joint] if joint is not None else []):
        for f in refs:
            kind = "joint-reference" if a is joint else "run-reference"
            pairs.append(compare_samples(a, f, rng=rng, n_draws=n_draws, threshold_sigma=threshold_sigma, kind=kind))
    return Comparison(runs=posts, references=refs, pairs=pairs, combined=joint, seed=seed, n_draws=n_draws,
                      threshold_sigma=threshold_sigma)
