"""Results built without sampling, shared by the tests of orbitmass.outputs.

Invented data are simulated with orbitmass.demo.simulate (true anomaly and explicit
rotations), and ~500 samples are drawn as a small Gaussian cloud around the invented truth,
then derived with orbitmass.results.derive_samples. The posterior is not a fit.
"""

from __future__ import annotations

import math
import textwrap
from pathlib import Path

import numpy as np
import pandas as pd

from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv
from orbitmass.io.target import read_target
from orbitmass.model.parameters import ParameterSpace
from orbitmass.results import Results, derive_samples, quantile_block

#: invented system: a central mass with two tracked companions (numbers invented)
NUCLEUS = {
    "C1": TrueOrbit(
        mass_msun=2.3e6,
        distance_pc=6400.0,
        period_yr=11.2,
        eccentricity=0.62,
        inclination_deg=58.0,
        arg_periastron_deg=140.0,
        ascending_node_deg=75.0,
        periastron_time=2009.4,
        mass_ratio=0.05,
    ),
    "C2": TrueOrbit(
        mass_msun=2.3e6,
        distance_pc=6400.0,
        period_yr=27.5,
        eccentricity=0.3,
        inclination_deg=110.0,
        arg_periastron_deg=20.0,
        ascending_node_deg=200.0,
        periastron_time=2004.0,
    ),
}
#: invented wide pair (arcsecond orbit) plus a velocity-only companion
WIDE = {
    "B": TrueOrbit(
        mass_msun=2.0,
        distance_pc=1.2,
        period_yr=20.0,
        eccentricity=0.4,
        inclination_deg=35.0,
        arg_periastron_deg=300.0,
        ascending_node_deg=120.0,
        periastron_time=2008.0,
    ),
    "V": TrueOrbit(
        mass_msun=2.0,
        distance_pc=1.2,
        period_yr=3.0,
        eccentricity=0.2,
        inclination_deg=80.0,
        arg_periastron_deg=45.0,
        ascending_node_deg=10.0,
        periastron_time=2011.0,
    ),
}
#: invented companion tracked on an external (absolute) frame; barycentre terms invented
ABSOLUTE = {
    "A1": TrueOrbit(
        mass_msun=5.0e5,
        distance_pc=3000.0,
        period_yr=8.0,
        eccentricity=0.5,
        inclination_deg=40.0,
        arg_periastron_deg=250.0,
        ascending_node_deg=160.0,
        periastron_time=2012.5,
    ),
}
FRAME = {"x0": 3.0, "y0": -2.0, "vx0": 2.0, "vy0": -1.5, "vz0": 20.0}
OFFSET_B_KMS = 12.0
T_REF = 2010.0


def write_nucleus(folder: Path, name: str, rng: np.random.Generator, c2_extra: str = "") -> Path:
    c1, c2 = NUCLEUS["C1"], NUCLEUS["C2"]
    t_pos = np.linspace(2001.0, 2019.0, 14)
    sim = simulate(c1, t_pos)
    write_positions_csv(
        folder / "c1_pos.csv",
        t_pos,
        sim["east_mas"] + rng.normal(0, 0.5, 14),
        sim["north_mas"] + rng.normal(0, 0.5, 14),
        0.5,
    )
    t_a = np.linspace(2002.0, 2018.0, 8)
    t_b = np.linspace(2003.5, 2017.5, 6)
    t_c = np.linspace(2004.0, 2016.0, 5)
    t_rv = np.concatenate([t_a, t_b, t_c])
    order = np.argsort(t_rv)
    sa, sb, sc = simulate(c1, t_a), simulate(c1, t_b), simulate(c1, t_c)
    rv = np.concatenate(
        [sa["rv_companion_kms"], sb["rv_companion_kms"] + OFFSET_B_KMS, sc["rv_central_kms"]]
    ) + rng.normal(0, 5.0, t_rv.size)
    inst = np.array(["spec-a"] * 8 + ["spec-b"] * 6 + ["spec-a"] * 5)
    body = np.array(["companion"] * 14 + ["central"] * 5)
    write_velocities_csv(
        folder / "c1_rv.csv", t_rv[order], rv[order], 5.0, inst[order], body[order]
    )
    t2 = np.linspace(2000.0, 2020.0, 10)
    s2 = simulate(c2, t2)
    write_positions_csv(
        folder / "c2_pos.csv",
        t2,
        s2["east_mas"] + rng.normal(0, 0.5, 10),
        s2["north_mas"] + rng.normal(0, 0.5, 10),
        0.5,
    )
    toml_name = name.replace("\\", "\\\\").replace('"', '\\"')
    text = (
        f"""
    [target]
    name = "{toml_name}"
    reference_epoch = {T_REF}

    [central]
    mass = {{ dist = "log-uniform", low = "1e3 solMass", high = "1e9 solMass" }}

    [distance]
    prior = {{ dist = "normal", mean = "6.4 kpc", sd = "0.25 kpc" }}

    [instruments.spec-a]

    [instruments.spec-b]
    offset = {{ dist = "uniform", low = "-100 km / s", high = "100 km / s" }}
    jitter = {{ dist = "log-uniform", low = "0.01 km / s", high = "20 km / s" }}

    [[companion]]
    name = "C1"
    astrometry = "c1_pos.csv"
    velocities = "c1_rv.csv"
    period = {{ dist = "log-uniform", low = "1 yr", high = "100 yr" }}

    [[companion]]
    name = "C2"
    astrometry = "c2_pos.csv"
    """
        + c2_extra
        + "\n"
    )
    path = folder / "target.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def write_wide(folder: Path, name: str, rng: np.random.Generator, c2_extra: str = "") -> Path:
    b, v = WIDE["B"], WIDE["V"]
    t_pos = np.linspace(1995.0, 2020.0, 12)
    sim = simulate(b, t_pos)
    write_positions_csv(
        folder / "b_pos.csv",
        t_pos,
        sim["east_mas"] + rng.normal(0, 5.0, 12),
        sim["north_mas"] + rng.normal(0, 5.0, 12),
        5.0,
    )
    t_rv = np.linspace(2008.0, 2014.0, 15)
    sv = simulate(v, t_rv)
    write_velocities_csv(
        folder / "v_rv.csv", t_rv, sv["rv_companion_kms"] + rng.normal(0, 0.2, 15), 0.2
    )
    text = f"""
    [target]
    name = "{name}"
    reference_epoch = {T_REF}

    [distance]
    prior = {{ dist = "fixed", value = "1.2 pc" }}

    [[companion]]
    name = "B"
    astrometry = "b_pos.csv"

    [[companion]]
    name = "V"
    velocities = "v_rv.csv"
    """
    path = folder / "target.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def write_absolute(folder: Path, name: str, rng: np.random.Generator, c2_extra: str = "") -> Path:
    a1 = ABSOLUTE["A1"]
    t_pos = np.linspace(2002.0, 2018.0, 12)
    sim = simulate(a1, t_pos)
    dt = t_pos - T_REF
    east = FRAME["x0"] + FRAME["vx0"] * dt + sim["east_mas"] + rng.normal(0, 0.3, 12)
    north = FRAME["y0"] + FRAME["vy0"] * dt + sim["north_mas"] + rng.normal(0, 0.3, 12)
    write_positions_csv(folder / "a1_pos.csv", t_pos, east, north, 0.3)
    t_rv = np.linspace(2004.0, 2016.0, 9)
    rv = FRAME["vz0"] + simulate(a1, t_rv)["rv_companion_kms"] + rng.normal(0, 3.0, 9)
    write_velocities_csv(folder / "a1_rv.csv", t_rv, rv, 3.0)
    text = f"""
    [target]
    name = "{name}"
    reference_epoch = {T_REF}

    [central]
    frame = "absolute"
    x0 = {{ dist = "normal", mean = "0 mas", sd = "10 mas" }}
    y0 = {{ dist = "normal", mean = "0 mas", sd = "10 mas" }}
    vx0 = {{ dist = "normal", mean = "0 mas / yr", sd = "5 mas / yr" }}
    vy0 = {{ dist = "normal", mean = "0 mas / yr", sd = "5 mas / yr" }}
    vz0 = {{ dist = "normal", mean = "0 km / s", sd = "50 km / s" }}

    [distance]
    prior = {{ dist = "normal", mean = "3 kpc", sd = "0.2 kpc" }}

    [[companion]]
    name = "A1"
    astrometry = "a1_pos.csv"
    velocities = "a1_rv.csv"
    """
    path = folder / "target.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def truth_values(system: dict[str, TrueOrbit]) -> dict[str, float]:
    first = next(iter(system.values()))
    values = {
        "mass_msun": first.mass_msun,
        "distance_pc": first.distance_pc,
        "offset.spec-b": OFFSET_B_KMS,
        "jitter.spec-b": 1.0,
        **FRAME,
    }
    for name, orb in system.items():
        values[f"{name}.period_yr"] = orb.period_yr
        values[f"{name}.ecc"] = orb.eccentricity
        values[f"{name}.omega"] = math.radians(orb.arg_periastron_deg)
        values[f"{name}.node"] = math.radians(orb.ascending_node_deg)
        values[f"{name}.cos_i"] = math.cos(math.radians(orb.inclination_deg))
        values[f"{name}.m0"] = 2 * math.pi * (T_REF - orb.periastron_time) / orb.period_yr
        values[f"{name}.q"] = orb.mass_ratio
    return values


def make_results(
    folder: Path,
    *,
    kind: str = "nucleus",
    name: str = "Test nucleus",
    converged: bool = True,
    summary: str = "full",
    n_steps: int = 25,
    n_walkers: int = 20,
    seed: int = 11,
    c2_extra: str = "",
    scatter: float = 1.0,
) -> Results:
    """A Results built without sampling (see the module docstring)."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    writer = {"nucleus": write_nucleus, "wide": write_wide, "absolute": write_absolute}[kind]
    target = read_target(writer(folder, name, rng, c2_extra))
    space = ParameterSpace(target)
    system = {"nucleus": NUCLEUS, "wide": WIDE, "absolute": ABSOLUTE}[kind]
    theta0 = space.pack(truth_values(system))
    space.set_centres(theta0)
    sd = np.array([0.3 if n.startswith("offset.") else 0.002 * scatter for n in space.names])
    n = n_steps * n_walkers
    theta = space.wrap_angles(theta0 + rng.normal(size=(n, space.ndim)) * sd)
    log_prob = -0.5 * np.sum(((theta - theta0) / sd) ** 2, axis=1)
    samples = derive_samples(space, theta, log_prob)
    summ: dict = {}
    if summary == "full":
        from orbitmass.model.parameters import priors_used

        summ = {
            "orbitmass_version": "0.1.0",
            "target": target.name,
            "derived": {
                c: quantile_block(samples[c].to_numpy())
                for c in samples.columns
                if "." not in c and c != "log_posterior"
            },
            "companions": {
                comp.name: {
                    c.split(".", 1)[1]: quantile_block(samples[c].to_numpy())
                    for c in samples.columns
                    if c.startswith(comp.name + ".")
                }
                for comp in target.companions
            },
            "instruments": {
                i: {
                    "offset_kms": quantile_block(samples[f"offset_kms.{i}"].to_numpy()),
                    "jitter_kms": quantile_block(samples[f"jitter_kms.{i}"].to_numpy()),
                }
                for i in space.instrument_names
            },
            "diagnostics": {
                "converged": converged,
                "n_samples": n,
                "ess_min": 812.0,
                "ess_mass": 1530.0,
                "tau_max": 31.5,
                "rhat_max": 1.0042,
                "acceptance_fraction": 0.287,
                "wall_seconds": 12.3,
                "n_steps": n_steps,
                "n_walkers": n_walkers,
                "burn": 5,
                "thin": 1,
                "multimodal": not converged,
                "period_modes": {"C1": 1 if converged else 2, "C2": 1},
                "other_modes": [{"delta_log_posterior": 3.25, "period_yr": {"C1": 5.6, "C2": 27.4}}]
                if not converged
                else [],
                "per_parameter": {
                    v: {"tau": 20.0 + i, "ess": 900.0 - i, "rhat": 1.001}
                    for i, v in enumerate(space.names)
                },
            },
            "priors": priors_used(space),
            "provenance": {
                "seed": seed,
                "data_sha256": target.data_sha256,
                "versions": {"numpy": np.__version__, "pandas": pd.__version__},
                "target_file": str(target.source),
            },
        }
    return Results(
        target=target,
        space=space,
        samples=samples,
        theta=theta,
        chain=theta.reshape(n_steps, n_walkers, space.ndim),
        log_prob=log_prob.reshape(n_steps, n_walkers),
        burn=5,
        thin=1,
        summary=summ,
        info={},
    )
