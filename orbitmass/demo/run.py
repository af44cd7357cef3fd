"""The invented demo run: write the scenarios' data, fit them, report, compare.

The scenarios (invented truths, data and target files) are in
:mod:`orbitmass.demo.scenarios`; this module runs the fits. The data are drawn
with a fixed seed, so the files are identical on every machine; the fits then
take the seed given to :func:`run_demo`.
"""

from __future__ import annotations

import logging
import os
import time
from dataclasses import dataclass
from pathlib import Path

from orbitmass._atomic import check_output_folder
from orbitmass.compare import MassPosterior, combined_refit, compare
from orbitmass.demo.beyond_kepler import relativity_comparison, residual_figure
from orbitmass.demo.scenarios import DEMO_REFERENCE, SCENARIOS, write_comparison_datasets, write_scenarios
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.fit import Fit

__all__ = ["SCENARIOS", "write_scenarios", "run_demo", "DemoResult", "demo_comparison", "record_truth"]

log = logging.getLogger(__name__)

#: folders of a demo folder (and of its comparison demo): recognised as the demo's own on --overwrite
DEMO_DIRS = ("data", "runs", "comparison-demo", "comparison")


@dataclass
class DemoResult:
    """What the demo produced for one scenario.

    For the black-hole star (``quillon``) also ``relativity``: the Keplerian
    fit of the same data (run folder ``runs/quillon-kepler``) against the
    relativistic one (:func:`orbitmass.demo.beyond_kepler.relativity_comparison`,
    with ``figure``: the residual figure's files).
    """

    name: str
    run_dir: Path
    truth: TrueOrbit
    summary: dict
    relativity: dict | None = None


def run_demo(out_dir: Path, *, seed: int = 1, overwrite: bool = False, progress: bool | None = None,
             max_steps: int = 20000, compare: bool = True) -> list[DemoResult]:
    """Write the invented data into ``out_dir/data``, fit each scenario, save runs into ``out_dir/runs``.

    The black-hole star QD-S4 (relativistic data) is fitted with its ``[relativity]``
    table (``runs/quillon``) and with Keplerian orbits (``runs/quillon-kepler``); the
    velocity residuals of both around periastron are drawn in
    ``out_dir/quillon-relativity.png`` (and ``.pdf``).

    With ``compare``, also the comparison demo of :func:`demo_comparison`
    (two teams' datasets of the Quillon black hole, compared and fitted jointly) into
    ``out_dir/comparison-demo``.
    """
    out_dir = Path(out_dir)
    check_output_folder(out_dir, overwrite=overwrite, kind="demo", known_dirs=DEMO_DIRS, core_names=DEMO_DIRS)
    targets = write_scenarios(out_dir / "data")
    results = []
    for name, path in targets.items():
        if name == "quillon-joint":
            continue  # an example file for the README; the demo's joint fit is the comparison's refit
        fit = Fit(seed=seed, progress=progress, max_steps=max_steps).fit(path)
        truth = SCENARIOS["quillon" if name == "quillon-joint" else name]
        record_truth(fit, truth)
        run_dir = fit.save(out_dir / "runs" / name, overwrite=True)
        relativity = _keplerian_counterpart(fit, path, out_dir, seed, progress, max_steps) \
            if name == "quillon" else None
        results.append(DemoResult(name=name, run_dir=run_dir, truth=truth, summary=fit.summary,
                                  relativity=relativity))
    if compare:
        demo_comparison(out_dir / "comparison-demo", seed=seed, overwrite=True, progress=progress,
                        max_steps=max_steps)
    return results


def record_truth(fit: Fit, truth: TrueOrbit) -> dict[str, float]:
    """Put the invented true values into ``fit.results.info["truth"]`` (sample columns, stored units).

    The figures draw them (truth lines of the corner figure) and the run folder keeps them
    (``posterior.h5``). The elements are those of the scenario's first companion.
    """
    name = fit.results.target.companions[0].name
    known = {"mass_msun": truth.mass_msun, "distance_pc": truth.distance_pc,
             "parallax_mas": 1000.0 / truth.distance_pc,
             f"{name}.period_yr": truth.period_yr, f"{name}.eccentricity": truth.eccentricity,
             f"{name}.inclination_deg": truth.inclination_deg,
             f"{name}.arg_periastron_deg": truth.arg_periastron_deg,
             f"{name}.ascending_node_deg": truth.ascending_node_deg,
             f"{name}.periastron_time_jyr": truth.periastron_time,
             f"{name}.semimajor_axis_mas": truth.semimajor_axis_mas,
             f"{name}.semimajor_axis_au": truth.semimajor_axis_au}
    columns = set(fit.results.samples.columns)
    fit.results.info["truth"] = {k: float(v) for k, v in known.items() if k in columns}
    return fit.results.info["truth"]


def _keplerian_counterpart(fit: Fit, path: Path, out_dir: Path, seed: int, progress, max_steps: int) -> dict:
    """Fit the black-hole star's data with Keplerian orbits too; compare, and draw the residual figure."""
    kepler = Fit(seed=seed, progress=progress, max_steps=max_steps).fit(path.parent / "target-kepler.toml")
    record_truth(kepler, SCENARIOS["quillon"])
    kepler.save(out_dir / "runs" / "quillon-kepler", overwrite=True)
    info = relativity_comparison(fit.summary, kepler.summary)
    info["figure"] = [str(p) for p in residual_figure(
        fit.results, kepler.results, "QD-S4", out_dir / "quillon-relativity",
        periastron_jyr=SCENARIOS["quillon"].periastron_time)]
    return info


def demo_comparison(
    out_dir: str | os.PathLike[str],
    seed: int = 1,
    *,
    overwrite: bool = False,
    progress: bool | None = False,
    max_steps: int = 20000,
) -> Path:
    """Invented demo: two datasets of one black hole, fitted apart, compared and fitted jointly.

    Two invented teams track two invented stars around the invented dark mass
    of the Quillon Dwarf (3.6e6 Msun at 46 kpc): the "north team" follows
    QD-S4 with the spectrograph "north-spec", the "south team" follows QD-S9
    with "south-echelle". Data are simulated with a fixed seed
    (:func:`orbitmass.demo.scenarios.write_comparison_datasets`); the fits use ``seed``. Written:
    ``out_dir/data/<team>/`` (target files and tables), ``out_dir/runs/<team>/``
    (each team's run folder, recorded as the ``source`` of its run in
    ``comparison.json``) and ``out_dir/comparison/`` (see
    :meth:`orbitmass.compare.Comparison.write`, with the joint run folder
    ``combined/``).

    Parameters
    ----------
    out_dir : path
        Folder to write; must be new or empty unless ``overwrite``.
    seed : int
        Seed of the fits and of the comparison.
    overwrite : bool
        Replace the demo's files in a non-empty ``out_dir``.
    progress : bool or None
        Progress bars of the fits.
    max_steps : int
        Step cap of each fit.

    Returns
    -------
    Path
        The comparison folder ``out_dir/comparison``.
    """
    out_dir = Path(out_dir)
    check_output_folder(out_dir, overwrite=overwrite, kind="demo", known_dirs=DEMO_DIRS, core_names=DEMO_DIRS)
    t0 = time.perf_counter()
    datasets = write_comparison_datasets(out_dir / "data")
    labels, paths = list(datasets), list(datasets.values())
    fits = [Fit(seed=seed, progress=progress, max_steps=max_steps).fit(p) for p in paths]
    run_dirs = [fit.save(out_dir / "runs" / Path(p).parent.name, overwrite=True) for fit, p in zip(fits, paths,
                                                                                                    strict=True)]
    joint = combined_refit(fits, seed=seed, labels=labels, progress=progress, max_steps=max_steps)
    posts = [MassPosterior.from_results(fit.results, label, source=str(run_dir))
             for fit, label, run_dir in zip(fits, labels, run_dirs, strict=True)]
    cmp = compare(posts, references=[DEMO_REFERENCE], combined=joint, seed=seed)
    dest = cmp.write(out_dir / "comparison", overwrite=True, save_combined=True)
    log.info("comparison demo written to %s in %.1f s", dest, time.perf_counter() - t0)
    return dest
