"""Shared fixtures: invented simulated targets written to temporary folders."""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pytest

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


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)
