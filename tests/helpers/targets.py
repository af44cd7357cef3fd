"""Invented simulated targets written to temporary folders, and tiny fits of them.

Shared by test modules in several folders of the test tree. The data are drawn with
orbitmass.demo.simulate (true anomaly and explicit rotations, independent of the fitted
Thiele-Innes model); every number here is invented.
"""

from __future__ import annotations

import math
import textwrap
import warnings
from pathlib import Path

import numpy as np

from orbitmass import Fit
from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv


def make_target(folder: Path, truth: TrueOrbit, *, rng: np.random.Generator, t_pos=None, t_rv=None,
                pos_err=0.1, rv_err=10.0, distance_toml: str, extra_toml: str = "",
                companion_toml: str = "", name: str = "S1") -> Path:
    """Write a one-companion target with simulated noisy data; returns the target path."""
    folder.mkdir(parents=True, exist_ok=True)
    lines = ["[target]", f'name = "simulated {name}"', ""]
    comp = ["[[companion]]", f'name = "{name}"']
    if t_pos is not None:
        sim = simulate(truth, t_pos)
        write_positions_csv(folder / "pos.csv", t_pos, sim["east_mas"] + rng.normal(0, pos_err, len(t_pos)),
                            sim["north_mas"] + rng.normal(0, pos_err, len(t_pos)), pos_err)
        comp.append('astrometry = "pos.csv"')
    if t_rv is not None:
        sim = simulate(truth, t_rv)
        write_velocities_csv(folder / "rv.csv", t_rv, sim["rv_companion_kms"] + rng.normal(0, rv_err, len(t_rv)),
                             rv_err)
        comp.append('velocities = "rv.csv"')
    text = "\n".join(lines) + "\n[distance]\n" + distance_toml + "\n" + extra_toml + "\n" + "\n".join(comp) \
        + "\n" + companion_toml + "\n"
    path = folder / "target.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


# invented binary of the goodness-of-fit tests (tests/inference/test_quality.py)
QUALITY_TRUTH = TrueOrbit(mass_msun=2.0, distance_pc=20.0, period_yr=12.0, eccentricity=0.4,
                          inclination_deg=60.0, arg_periastron_deg=80.0, ascending_node_deg=130.0,
                          periastron_time=2015.0)
QUALITY_DIST = '[distance]\nprior = { dist = "uniform", low = "5 pc", high = "60 pc" }\n'
FIXED_SYSTEMIC = '[central]\nsystemic = { dist = "fixed", value = "0 km / s" }\n'


def write_target(folder, rng, *, n_pos=30, n_rv=20, pos_err=0.5, rv_err=0.3, err_scale=1.0, rv_shift=0.0,
                 wobble_mas=0.0, extra="", span=(2005.0, 2025.0)):
    """A one-companion target (east/north positions, velocities) with known Gaussian noise.

    ``err_scale`` scales the error columns written (not the noise drawn); ``rv_shift`` adds a
    velocity zero point; ``wobble_mas`` adds the reflex of the central body due to an unseen
    inner companion (circular, P = 3 yr, face-on), so two companions are fitted with one.
    Returns the path and the noise drawn.
    """
    folder.mkdir(parents=True, exist_ok=True)
    t_pos = np.sort(rng.uniform(*span, n_pos))
    sim = simulate(QUALITY_TRUTH, t_pos)
    ne, nn = rng.normal(0, pos_err, n_pos), rng.normal(0, pos_err, n_pos)
    phase = 2 * math.pi * t_pos / 3.0
    write_positions_csv(folder / "pos.csv", t_pos, sim["east_mas"] + wobble_mas * np.cos(phase) + ne,
                        sim["north_mas"] + wobble_mas * np.sin(phase) + nn, pos_err * err_scale)
    lines = ["[[companion]]", 'name = "B"', 'astrometry = "pos.csv"']
    noise = {"east": ne, "north": nn}
    if n_rv:
        t_rv = np.sort(rng.uniform(span[0] + 3, span[1], n_rv))
        nv = rng.normal(0, rv_err, n_rv)
        rv = simulate(QUALITY_TRUTH, t_rv)["rv_companion_kms"] + rv_shift + nv
        write_velocities_csv(folder / "rv.csv", t_rv, rv, rv_err * err_scale)
        lines.append('velocities = "rv.csv"')
        noise["rv"] = nv
    text = '[target]\nname = "invented binary"\n' + extra + QUALITY_DIST + "\n".join(lines) + "\n"
    (folder / "target.toml").write_text(text, encoding="utf-8")
    return folder / "target.toml", noise


def quiet_fit(path, **kw):
    """A tiny fit (unconverged on purpose: goodness of fit at the best point needs no convergence)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        fit = Fit(seed=kw.pop("seed", 1), max_steps=kw.pop("steps", 300), min_steps=kw.pop("steps2", 300),
                  progress=False, max_periods=800, **kw).fit(path)
    return fit, caught
