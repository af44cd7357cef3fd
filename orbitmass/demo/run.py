"""The invented demo scenario: simulate, write input files, fit, report.

Everything here is invented: the "Quillon Dwarf" galaxy, its dormant black
hole, the stars QD-S4 and QD-S9 that orbit it, the spectrographs "north-spec"
and "south-ifu", and the visual binary "Tessaly 41 AB". Three scenarios: QD-S4
alone in the relative frame (distance from the orbit itself), Tessaly 41 AB
from astrometry and a parallax, and both stars jointly on a drifting
external frame. The data are drawn from
:mod:`orbitmass.demo.simulate` with a fixed seed, so the files are identical on
every machine; the fits then take the seed given to :func:`run_demo`.
"""

from __future__ import annotations

import logging
import textwrap
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv

__all__ = ["SCENARIOS", "write_scenarios", "run_demo", "DemoResult"]

log = logging.getLogger(__name__)
DATA_SEED = 20261201

#: the invented truths, for comparison with the fits
SCENARIOS: dict[str, TrueOrbit] = {
    "quillon": TrueOrbit(mass_msun=3.6e6, distance_pc=46000.0, period_yr=14.2, eccentricity=0.71,
                         inclination_deg=118.0, arg_periastron_deg=64.0, ascending_node_deg=227.0,
                         periastron_time=2018.35),
    "quillon-s9": TrueOrbit(mass_msun=3.6e6, distance_pc=46000.0, period_yr=9.3, eccentricity=0.38,
                            inclination_deg=57.0, arg_periastron_deg=301.0, ascending_node_deg=75.0,
                            periastron_time=2014.9),
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


#: barycentre of the Quillon nucleus on the external frame of the joint scenario (mas, mas/yr, km/s)
QUILLON_FRAME = {"x0": 0.35, "y0": -0.22, "vx0": 0.012, "vy0": -0.008, "vz0": 41.0}


def _write_quillon_joint(folder: Path, rng: np.random.Generator) -> Path:
    """QD-S4 and QD-S9 on an external reference frame that drifts: a joint fit of one mass."""
    folder.mkdir(parents=True, exist_ok=True)
    fr = QUILLON_FRAME
    t_ref = 2018.0
    blocks = []
    for name, key, n_pos, n_rv in (("QD-S4", "quillon", 22, 16), ("QD-S9", "quillon-s9", 18, 12)):
        truth = SCENARIOS[key]
        t = np.sort(rng.uniform(2010.0, 2026.5, n_pos))
        sim = simulate(truth, t)
        err = 0.1
        write_positions_csv(folder / f"{name.lower()}_abs_positions.csv", t,
                            sim["east_mas"] + fr["x0"] + fr["vx0"] * (t - t_ref) + rng.normal(0, err, t.size),
                            sim["north_mas"] + fr["y0"] + fr["vy0"] * (t - t_ref) + rng.normal(0, err, t.size),
                            err, comment=f"{name} on the external frame (invented data)")
        tv = np.sort(rng.uniform(2011.0, 2026.5, n_rv))
        inst = np.where(np.arange(tv.size) % 2 == 0, "north-spec", "south-ifu")
        rv = simulate(truth, tv)["rv_companion_kms"] + fr["vz0"] + np.where(inst == "south-ifu", 18.0, 0.0)
        rv_err = np.where(inst == "south-ifu", 20.0, 12.0)
        write_velocities_csv(folder / f"{name.lower()}_abs_velocities.csv", tv, rv + rng.normal(0, rv_err),
                             rv_err, instrument=inst, comment=f"{name} velocities (invented data)")
        blocks.append(textwrap.dedent(f"""            [[companion]]
            name = "{name}"
            astrometry = "{name.lower()}_abs_positions.csv"
            velocities = "{name.lower()}_abs_velocities.csv"
            period = {{ dist = "log-uniform", low = "1 yr", high = "200 yr" }}
            """))
    target = folder / "target.toml"
    target.write_text(textwrap.dedent("""\
        # Invented demo: two stars share the dark mass of the Quillon Dwarf (a joint fit). Positions
        # are on an external reference frame, so the barycentre's position, proper motion and
        # line-of-sight velocity are fitted too.
        [target]
        name = "Quillon Dwarf nucleus, two stars"
        reference_epoch = 2018.0

        [central]
        mass = { dist = "log-uniform", low = "1e4 solMass", high = "1e9 solMass" }
        frame = "absolute"
        x0 = { dist = "normal", mean = "0 mas", sd = "2 mas" }
        y0 = { dist = "normal", mean = "0 mas", sd = "2 mas" }
        vx0 = { dist = "normal", mean = "0 mas / yr", sd = "0.1 mas / yr" }
        vy0 = { dist = "normal", mean = "0 mas / yr", sd = "0.1 mas / yr" }
        vz0 = { dist = "normal", mean = "0 km / s", sd = "100 km / s" }

        [distance]
        prior = { dist = "uniform", low = "10 kpc", high = "200 kpc" }

        [instruments.north-spec]
        [instruments.south-ifu]
        offset = { dist = "normal", mean = "0 km / s", sd = "50 km / s" }

        """) + "\n".join(blocks), encoding="utf-8")
    return target


def write_scenarios(data_dir: Path) -> dict[str, Path]:
    """Write the demo input files under ``data_dir``; returns scenario -> target file."""
    rng = np.random.default_rng(DATA_SEED)
    data_dir = Path(data_dir)
    return {"quillon": _write_quillon(data_dir / "quillon", rng),
            "tessaly": _write_tessaly(data_dir / "tessaly", rng),
            "quillon-joint": _write_quillon_joint(data_dir / "quillon-joint", rng)}


@dataclass
class DemoResult:
    """What the demo produced for one scenario."""

    name: str
    run_dir: Path
    truth: TrueOrbit
    summary: dict


def run_demo(out_dir: Path, *, seed: int = 1, overwrite: bool = False, progress: bool | None = None,
             max_steps: int = 20000, compare: bool = True) -> list[DemoResult]:
    """Write the invented data into ``out_dir/data``, fit each scenario, save runs into ``out_dir/runs``.

    With ``compare``, also the comparison demo of :func:`orbitmass.compare.demo_comparison`
    (two teams' datasets of the Quillon black hole, compared and fitted jointly) into
    ``out_dir/comparison-demo``.
    """
    from orbitmass.exceptions import RunFolderError
    from orbitmass.fit import Fit

    out_dir = Path(out_dir)
    if out_dir.exists() and any(out_dir.iterdir()) and not overwrite:
        raise RunFolderError(f"{out_dir}: folder exists and is not empty; choose another --out or pass --overwrite")
    targets = write_scenarios(out_dir / "data")
    results = []
    for name, path in targets.items():
        if name == "quillon-joint":
            continue  # an example file for the README; the demo's joint fit is the comparison's refit
        fit = Fit(seed=seed, progress=progress, max_steps=max_steps).fit(path)
        run_dir = fit.save(out_dir / "runs" / name, overwrite=True)
        truth = SCENARIOS["quillon" if name == "quillon-joint" else name]
        results.append(DemoResult(name=name, run_dir=run_dir, truth=truth, summary=fit.summary))
    if compare:
        from orbitmass.compare import demo_comparison

        demo_comparison(out_dir / "comparison-demo", seed=seed, overwrite=True, progress=progress,
                        max_steps=max_steps)
    return results
