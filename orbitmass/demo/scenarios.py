"""Every invented scenario of orbitmass in one place: truths, data and target files.

Everything here is invented: the "Quillon Dwarf" galaxy, its dormant black
hole, the stars QD-S4 and QD-S9 that orbit it, the spectrographs
"north-spec", "south-ifu" and "south-echelle", the (invented) north and south
teams, the visual binary "Tessaly 41 AB" and the sample of visual binaries
"Orrin 101 AB", "Orrin 102 AB", ... Data are drawn from
:mod:`orbitmass.demo.simulate` with fixed seeds, so the files are identical on
every machine.

- :func:`write_scenarios`: the demo's three targets (QD-S4 alone in the relative
  frame, its data simulated with general relativity to first post-Newtonian
  order by :mod:`orbitmass.demo.simulate_pn`, with a target file that models
  the relativistic terms and one that does not; Tessaly 41 AB from astrometry and a parallax, QD-S4 and QD-S9 jointly
  on a drifting external frame); the files in ``examples/`` are exactly these.
- :func:`write_comparison_datasets`: two teams' datasets of one black hole, for
  the comparison demo (:func:`orbitmass.demo.run.demo_comparison`).
- :func:`write_example_sample`: a small sample of visual binaries to try a
  batch on (:func:`orbitmass.batch.fit_batch`).
"""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import numpy as np

from orbitmass.batch.plan import folder_name
from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv
from orbitmass.demo.simulate_pn import simulate_pn
from orbitmass.exceptions import OrbitmassError
from orbitmass.outputs.style import write_atomic

__all__ = [
    "SCENARIOS",
    "QUILLON_FRAME",
    "QUILLON_RELATIVITY",
    "DATA_SEED",
    "write_scenarios",
    "DEMO_MASS_MSUN",
    "DEMO_DISTANCE_PC",
    "DEMO_REFERENCE",
    "COMPARISON_DATA_SEED",
    "write_comparison_datasets",
    "write_example_sample",
]

#: seed of the demo's data (write_scenarios)
DATA_SEED = 20261201
#: seed of QD-S4's periastron campaign (velocities through the 2018.35 periastron)
QUILLON_PERIASTRON_SEED = 20261202

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


#: the demo black-hole star's tables of the relativistic terms: the redshift sampled, the
#: Schwarzschild precession fixed at its general-relativity value, the Roemer delay on
QUILLON_RELATIVITY = """\
    [relativity]
    # first post-Newtonian terms (QD-S4 passes at ~3,600 Schwarzschild radii): the redshift is
    # measured, the precession (~5 arcmin per orbit, ~0.03 mas here) is that of
    # general relativity
    redshift_factor = { dist = "uniform", low = -1, high = 3 }
    precession_factor = { dist = "fixed", value = 1 }
    roemer_delay = true
    """


def _write_quillon(folder: Path, rng: np.random.Generator) -> Path:
    """QD-S4: data from the first post-Newtonian simulator; target.toml models it, target-kepler.toml not."""
    truth = SCENARIOS["quillon"]
    folder.mkdir(parents=True, exist_ok=True)
    t_pos = np.sort(rng.uniform(2008.0, 2026.5, 26))
    sim = simulate_pn(truth, t_pos)
    err = 0.08
    write_positions_csv(folder / "qd-s4_positions.csv", t_pos,
                        sim["east_mas"] + rng.normal(0, err, t_pos.size),
                        sim["north_mas"] + rng.normal(0, err, t_pos.size), err,
                        comment="QD-S4 relative to the dark mass of the Quillon Dwarf (invented data)")
    t_rv = np.sort(rng.uniform(2009.0, 2026.5, 20))
    inst = np.where(np.arange(t_rv.size) % 3 == 0, "south-ifu", "north-spec")
    offset = np.where(inst == "south-ifu", 18.0, 0.0)
    sim_v = simulate_pn(truth, t_rv)
    rv_err = np.where(inst == "south-ifu", 20.0, 12.0)
    rv = sim_v["rv_companion_kms"] + offset + rng.normal(0, rv_err)
    # a campaign through the periastron (2018.35), where the redshift peaks (~75 km/s): its own
    # generator, so the other scenarios' draws stay as they were
    extra = np.random.default_rng(QUILLON_PERIASTRON_SEED)
    t_pc = np.sort(extra.uniform(truth.periastron_time - 0.4, truth.periastron_time + 0.4, 10))
    rv_pc = simulate_pn(truth, t_pc)["rv_companion_kms"] + extra.normal(0, 12.0, t_pc.size)
    order = np.argsort(np.concatenate([t_rv, t_pc]), kind="stable")
    write_velocities_csv(folder / "qd-s4_velocities.csv", np.concatenate([t_rv, t_pc])[order],
                         np.concatenate([rv, rv_pc])[order], np.concatenate([rv_err, np.full(t_pc.size, 12.0)])[order],
                         instrument=np.concatenate([inst, np.full(t_pc.size, "north-spec")])[order],
                         comment="QD-S4 line-of-sight velocities, two spectrographs, with a periastron campaign "
                                 "(invented data)")
    target = folder / "target.toml"
    common = textwrap.dedent("""\
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
        """)
    head = ("# Invented demo: the star QD-S4 around the dormant black hole of the Quillon Dwarf. Its data\n"
            "# are simulated with general relativity to first post-Newtonian order.\n")
    target.write_text(head + common + "\n" + textwrap.dedent(QUILLON_RELATIVITY), encoding="utf-8")
    (folder / "target-kepler.toml").write_text(
        head + "# This file fits them with Keplerian orbits (no [relativity] table), for comparison.\n" + common,
        encoding="utf-8")
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


# ----------------------------------------------------------------- comparison demo
#: invented truth of the comparison demo: the dark mass of the (invented) Quillon Dwarf
DEMO_MASS_MSUN = 3.6e6
DEMO_DISTANCE_PC = 46000.0
#: seed of the comparison demo's data
COMPARISON_DATA_SEED = 20261207
#: an invented "published" value for the demo (e.g. from gas kinematics)
DEMO_REFERENCE = "gas-disc estimate=3.1e6 +0.5e6 -0.4e6 solMass"

#: (folder, star, team, spectrograph, invented orbital elements, sampling and errors)
_DEMO_DATASETS = (
    ("north-team", "QD-S4", "north team", "north-spec",
     {"period_yr": 14.2, "eccentricity": 0.71, "inclination_deg": 118.0, "arg_periastron_deg": 64.0,
      "ascending_node_deg": 227.0, "periastron_time": 2018.35},
     {"t_range": (2009.0, 2026.5), "n_pos": 18, "n_rv": 12, "pos_err_mas": 0.12, "rv_err_kms": 15.0}),
    ("south-team", "QD-S9", "south team", "south-echelle",
     {"period_yr": 9.3, "eccentricity": 0.38, "inclination_deg": 41.0, "arg_periastron_deg": 302.0,
      "ascending_node_deg": 95.0, "periastron_time": 2015.6},
     {"t_range": (2012.0, 2026.5), "n_pos": 16, "n_rv": 10, "pos_err_mas": 0.15, "rv_err_kms": 20.0}),
)

_DEMO_TARGET = """\
# Invented demo: the star {star} around the dormant black hole of the Quillon Dwarf,
# observed by the (invented) {team}.
[target]
name = "Quillon Dwarf nucleus ({team})"
reference_epoch = 2018.0

[central]
mass = {{ dist = "log-uniform", low = "1e4 solMass", high = "1e9 solMass" }}

[distance]
prior = {{ dist = "uniform", low = "10 kpc", high = "200 kpc" }}

[instruments.{spec}]

[[companion]]
name = "{star}"
astrometry = "{slug}_positions.csv"
velocities = "{slug}_velocities.csv"
period = {{ dist = "log-uniform", low = "1 yr", high = "200 yr" }}
"""


def _write_demo_dataset(
    folder: Path,
    rng: np.random.Generator,
    *,
    star: str,
    team: str,
    spec: str,
    orbit,
    t_range: tuple[float, float],
    n_pos: int,
    n_rv: int,
    pos_err_mas: float,
    rv_err_kms: float,
) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    slug = star.lower().replace(" ", "-")
    t_pos = np.sort(rng.uniform(*t_range, n_pos))
    sim = simulate(orbit, t_pos)
    write_positions_csv(
        folder / f"{slug}_positions.csv",
        t_pos,
        sim["east_mas"] + rng.normal(0, pos_err_mas, n_pos),
        sim["north_mas"] + rng.normal(0, pos_err_mas, n_pos),
        pos_err_mas,
        comment=f"{star} relative to the dark mass of the Quillon Dwarf, {team} (invented data)",
    )
    t_rv = np.sort(rng.uniform(t_range[0] + 1.0, t_range[1], n_rv))
    sim_v = simulate(orbit, t_rv)
    write_velocities_csv(
        folder / f"{slug}_velocities.csv",
        t_rv,
        sim_v["rv_companion_kms"] + rng.normal(0, rv_err_kms, n_rv),
        rv_err_kms,
        instrument=np.full(n_rv, spec),
        comment=f"{star} line-of-sight velocities, {team} (invented data)",
    )
    path = folder / "target.toml"
    write_atomic(path, _DEMO_TARGET.format(star=star, team=team, spec=spec, slug=slug))
    return path



def write_comparison_datasets(data_dir: Path) -> dict[str, Path]:
    """Write the two teams' datasets under ``data_dir/<team>/``; returns label -> target file.

    The labels are ``"<star> (<team>)"``, e.g. ``"QD-S4 (north team)"``.
    """
    rng = np.random.default_rng(COMPARISON_DATA_SEED)
    out = {}
    for folder, star, team, spec, elements, data in _DEMO_DATASETS:
        orbit = TrueOrbit(mass_msun=DEMO_MASS_MSUN, distance_pc=DEMO_DISTANCE_PC, **elements)
        out[f"{star} ({team})"] = _write_demo_dataset(Path(data_dir) / folder, rng, star=star, team=team, spec=spec,
                                                      orbit=orbit, **data)
    return out


# ----------------------------------------------------------------- batch example sample
def write_example_sample(
    data_dir: str | os.PathLike, n_targets: int = 8, *, seed: int = 0, n_epochs: int = 16
) -> list[Path]:
    """Write a small invented sample of visual binaries to try a batch on.

    Each target ``data_dir/<name>/target.toml`` is an invented binary
    ("Orrin 101 AB", "Orrin 102 AB", ...; names and numbers made up) with
    ``n_epochs`` east/north offsets (2 mas errors) over about 1.3 orbits, a
    parallax prior (1 % error) and no velocities, so each fits in seconds.

    Parameters
    ----------
    data_dir : str or path
        Folder to write into (created if needed; existing targets of the same
        names are not overwritten).
    n_targets : int
        Number of targets.
    seed : int
        Seed of the invented truths and noise.
    n_epochs : int
        Epochs per target.

    Returns
    -------
    list of Path
        The target files, in name order.

    Raises
    ------
    OrbitmassError
        A target file to write exists already.
    """
    rng = np.random.default_rng(seed)
    data_dir = Path(data_dir)
    paths = []
    for k in range(n_targets):
        name = f"Orrin {101 + k} AB"
        period_yr = float(rng.uniform(6.0, 25.0))
        parallax_mas = float(rng.uniform(25.0, 60.0))
        truth = TrueOrbit(
            mass_msun=float(rng.uniform(0.9, 3.0)),
            distance_pc=1000.0 / parallax_mas,
            period_yr=period_yr,
            eccentricity=float(rng.uniform(0.1, 0.6)),
            inclination_deg=float(np.degrees(np.arccos(rng.uniform(-0.9, 0.9)))),
            arg_periastron_deg=float(rng.uniform(0.0, 360.0)),
            ascending_node_deg=float(rng.uniform(0.0, 360.0)),
            periastron_time=2010.0 + float(rng.uniform(0.0, period_yr)),
        )
        t = np.sort(2026.0 - rng.uniform(0.0, 1.3 * period_yr, n_epochs))
        sim = simulate(truth, t)
        folder = data_dir / folder_name(name)
        target = folder / "target.toml"
        if target.exists():
            raise OrbitmassError(f"{target}: exists; choose an empty folder for the example sample")
        folder.mkdir(parents=True, exist_ok=True)
        write_positions_csv(
            folder / "positions.csv",
            t,
            sim["east_mas"] + rng.normal(0.0, 2.0, t.size),
            sim["north_mas"] + rng.normal(0.0, 2.0, t.size),
            2.0,
            comment=f"{name}: relative positions (invented data)",
        )
        target.write_text(
            f"# {name}: an invented visual binary, astrometry only, with a parallax.\n"
            f'[target]\nname = "{name}"\nreference_epoch = 2020.0\n\n'
            '[central]\nmass = { dist = "log-uniform", low = "0.05 solMass", '
            'high = "50 solMass" }\n\n'
            f'[distance]\nparallax = {{ dist = "normal", mean = "{parallax_mas:.3f} mas", '
            f'sd = "{0.01 * parallax_mas:.3f} mas" }}\n\n'
            '[[companion]]\nname = "B"\nastrometry = "positions.csv"\n'
            'period = { dist = "log-uniform", low = "1 yr", high = "200 yr" }\n',
            encoding="utf-8",
        )
        paths.append(target)
    return paths

