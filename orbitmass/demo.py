"""The invented demo scenario: simulate, write input files, fit, report.

Everything here is invented: the "Quillon Dwarf" galaxy, its dormant black
hole, the star QD-S4 that orbits it, the spectrographs "north-spec" and
"south-ifu", and the visual binary "Tessaly 41 AB". The data are drawn from
:mod:`orbitmass.simulate` with a fixed seed, so the files are identical on
every machine; the fits then take the seed given to :func:`run_demo`.
"""

from __future__ import annotations

import logging
import textwrap
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from orbitmass.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv

__all__ = ["SCENARIOS", "write_scenarios", "run_demo", "DemoResult"]

log = logging.getLogger(__name__)
DATA_SEED = 20261201

#: the invented truths, for comparison with the fits
SCENARIOS: dict[str, TrueOrbit] = {
    "quillon": TrueOrbit(mass_msun=3.6e6, distance_pc=46000.0, period_yr=14.2, eccentricity=0.71,
                         inclination_deg=118.0, arg_periastron_deg=64.0, ascending_node_deg=227.0,
                         periastron_time=2018.35),
    "tessaly": TrueOrbit(mass_msun=1.74, distance_pc=1000.0 / 48.0, period_yr=27.3, eccentricity=0.41,
                         inclination_deg=63.0, arg_periastron_deg=212.0, ascending_node_deg=131.0,
                         periastron_time=2009.8),
}


def _write_quillon(folder: Path, rng: np.random.Generator) -> Path:
    truth = SCENARIOS["quillon"]
    folder.mkdir(parents=True, exist_ok=True)
    t_pos = np.sort(rng.uniform(2008.0, 2026.5, 26))
    sim = simulate(truth, t_pos)
    err = 0.08
    write_positions_csv(folder / "qd-s4_positions.csv", t_pos,
                        sim["east_mas"] + rng.normal(0, err, t_pos.size),
                        sim["north_mas"] + rng.normal(0, err, t_pos.size), err,
                        comment="QD-S4 relative to the dark mass of the Quillon Dwarf (invented data)")
    t_rv = np.sort(rng.uniform(2009.0, 2026.5, 20))
    inst = np.where(np.arange(t_rv.size) % 3 == 0, "south-ifu", "north-spec")
    offset = np.where(inst == "south-ifu", 18.0, 0.0)
    sim_v = simulate(truth, t_rv)
    rv_err = np.where(inst == "south-ifu", 20.0, 12.0)
    rv = sim_v["rv_companion_kms"] + offset + rng.normal(0, rv_err)
    write_velocities_csv(folder / "qd-s4_velocities.csv", t_rv, rv, rv_err, instrument=inst,
                         comment="QD-S4 line-of-sight velocities, two spectrographs (invented data)")
    target = folder / "target.toml"
    target.write_text(textwrap.dedent("""\
        # Invented demo: the star QD-S4 around the dormant black hole of the Quillon Dwarf.
        [target]
        name = "Quillon Dwarf nucleus"
        reference_epoch = 2018.0

        [central]
        mass = { dist = "log-uniform", low = "1e4 solMass", high = "1e9 solMass" }

        [distance]
        # wide: astrometry plus velocities fix the distance (orbital parallax)
        prior = { dist = "uniform", low = "10 kpc", high = "200 kpc" }

        [instruments.north-spec]
        [instruments.south-ifu]
        offset = { dist = "normal", mean = "0 km / s", sd = "50 km / s" }

        [[companion]]
        name = "QD-S4"
        astrometry = "qd-s4_positions.csv"
        velocities = "qd-s4_velocities.csv"
        period = { dist = "log-uniform", low = "1 yr", high = "200 yr" }
        """), encoding="utf-8")
    return target


def _write_tessaly(folder: Path, rng: np.random.Generator) -> Path:
    truth = SCENARIOS["tessaly"]
    folder.mkdir(parents=True, exist_ok=True)
    t = np.sort(rng.uniform(1994.0, 2026.5, 30))
    sim = simulate(truth, t)
    rho = np.hypot(sim["east_mas"], sim["north_mas"])
    theta = np.degrees(np.arctan2(sim["east_mas"], sim["north_mas"])) % 360.0
    rho_err, theta_err = 4.0, 0.4
    lines = ["# Tessaly 41 AB: relative positions (invented data); older epochs as separation and",
             "# position angle, newer ones as east/north offsets",
             "jyear,rho_mas,theta_deg,rho_err_mas,theta_err_deg,east_mas,north_mas,east_err_mas,north_err_mas"]
    for k in range(t.size):
        if t[k] < 2012.0:
            r = rho[k] + rng.normal(0, rho_err)
            th = (theta[k] + rng.normal(0, theta_err)) % 360.0
            lines.append(f"{t[k]:.5f},{r:.3f},{th:.3f},{rho_err},{theta_err},,,,")
        else:
            e_ = sim["east_mas"][k] + rng.normal(0, 2.0)
            n_ = sim["north_mas"][k] + rng.normal(0, 2.0)
            lines.append(f"{t[k]:.5f},,,,,{e_:.3f},{n_:.3f},2.0,2.0")
    (folder / "tessaly41_positions.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    target = folder / "target.toml"
    target.write_text(textwrap.dedent("""\
        # Invented demo: the visual binary Tessaly 41 AB, astrometry only, with a parallax.
        [target]
        name = "Tessaly 41 AB"

        [central]
        mass = { dist = "log-uniform", low = "0.05 solMass", high = "50 solMass" }

        [distance]
        parallax = { dist = "normal", mean = "48.0 mas", sd = "0.48 mas" }

        [[companion]]
        name = "B"
        astrometry = "tessaly41_positions.csv"
        period = { dist = "log-uniform", low = "2 yr", high = "500 yr" }
        """), encoding="utf-8")
    return target


def write_scenarios(data_dir: Path) -> dict[str, Path]:
    """Write the demo input files under ``data_dir``; returns scenario -> target file."""
    rng = np.random.default_rng(DATA_SEED)
    data_dir = Path(data_dir)
    return {"quillon": _write_quillon(data_dir / "quillon", rng),
            "tessaly": _write_tessaly(data_dir / "tessaly", rng)}


@dataclass
class DemoResult:
    """What the demo produced for one scenario."""

    name: str
    run_dir: Path
    truth: TrueOrbit
    summary: dict


def run_demo(out_dir: Path, *, seed: int = 1, overwrite: bool = False, progress: bool | None = None,
             max_steps: int = 20000) -> list[DemoResult]:
    """Write the invented data into ``out_dir/data``, fit each scenario, save runs into ``out_dir/runs``."""
    from orbitmass.exceptions import RunFolderError
    from orbitmass.fit import Fit

    out_dir = Path(out_dir)
    if out_dir.exists() and any(out_dir.iterdir()) and not overwrite:
        raise RunFolderError(f"{out_dir}: folder exists and is not empty; choose another --out or pass --overwrite")
    targets = write_scenarios(out_dir / "data")
    results = []
    for name, path in targets.items():
        fit = Fit(seed=seed, progress=progress, max_steps=max_steps).fit(path)
        run_dir = fit.save(out_dir / "runs" / name, overwrite=True)
        results.append(DemoResult(name=name, run_dir=run_dir, truth=SCENARIOS[name], summary=fit.summary))
    return results
