"""Two invented datasets of one black hole (two stars, same distance prior unless asked
otherwise), shared by the comparison tests in tests/compare and tests/outputs."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from orbitmass.demo.simulate import TrueOrbit
from tests.helpers.targets import make_target

__all__ = ["TRUTH_A", "TRUTH_B", "WIDE_DISTANCE", "two_datasets"]

TRUTH_A = TrueOrbit(mass_msun=2.0e6, distance_pc=9000.0, period_yr=12.0, eccentricity=0.5, inclination_deg=60.0,
                    arg_periastron_deg=100.0, ascending_node_deg=30.0, periastron_time=2012.0)
TRUTH_B = TrueOrbit(mass_msun=2.0e6, distance_pc=9000.0, period_yr=19.0, eccentricity=0.3, inclination_deg=130.0,
                    arg_periastron_deg=250.0, ascending_node_deg=200.0, periastron_time=2016.0)
WIDE_DISTANCE = 'prior = { dist = "uniform", low = "2 kpc", high = "30 kpc" }'


def two_datasets(folder: Path, rng, *, name_b="SB", distance_b=WIDE_DISTANCE, extra_b="", companion_b=""):
    pa = make_target(folder / "a", TRUTH_A, rng=rng, t_pos=np.sort(rng.uniform(2006, 2022, 16)),
                     t_rv=np.sort(rng.uniform(2008, 2022, 10)), pos_err=0.3, rv_err=15.0,
                     distance_toml=WIDE_DISTANCE, name="SA")
    pb = make_target(folder / "b", TRUTH_B, rng=rng, t_pos=np.sort(rng.uniform(2006, 2022, 16)),
                     t_rv=np.sort(rng.uniform(2008, 2022, 10)), pos_err=0.3, rv_err=15.0,
                     distance_toml=distance_b, name=name_b, extra_toml=extra_b, companion_toml=companion_b)
    return pa, pb
