"""Planning velocities for a run without velocities: the zero point of a first velocity is unknown.

A single line-of-sight velocity v = v_sys + (orbital term) with an unknown
systemic velocity v_sys is one equation in two unknowns: it fixes v_sys and
says nothing about the orbit's scale; two or more at different phases fix the
scale through their differences (common practice, no source). Data from
:mod:`validation.simulator` (independent of the fitted model), astrometry-only
fit (the fast path: seconds).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from orbitmass import Fit
from orbitmass.forecast.plan import plan
from validation.simulator import Orbit, System, observe

#: invented binary: 8 yr, e = 0.75, periastron 2016.0 (seen) and 2024.0 (in the window)
TRUTH = System(mass_msun=1.5, distance_pc=25.0, orbits={"B": Orbit(8.0, 0.75, 50.0, 70.0, 130.0, 2024.0)})


def test_one_velocity_alone_does_not_fix_the_scale(tmp_path):
    rng = np.random.default_rng(5)
    t = np.sort(rng.uniform(2010.0, 2022.0, 14))
    obs = observe(TRUTH, "B", t, t)
    pd.DataFrame({"jyear": t, "east_mas": obs["east_mas"] + rng.normal(0, 1.0, t.size),
                  "north_mas": obs["north_mas"] + rng.normal(0, 1.0, t.size), "east_err_mas": 1.0,
                  "north_err_mas": 1.0}).to_csv(tmp_path / "pos.csv", index=False)
    # no parallax: the distance is left to the data, which (positions only) cannot fix it
    (tmp_path / "target.toml").write_text('[target]\nname = "invented binary VR-3"\n[distance]\n'
                                          'prior = { dist = "uniform", low = "5 pc", high = "100 pc" }\n'
                                          '[[companion]]\nname = "B"\nastrometry = "pos.csv"\n', encoding="utf-8")
    res = Fit(seed=1, progress=False).fit(tmp_path / "target.toml").results
    p = plan(res, np.arange(2022.0, 2027.0001, 0.05), quantity="distance", max_epochs=3, seed=0)
    assert p.options["velocity_zero_point_sd_kms"] > 100
    # one velocity: at most a few per cent (it fixes the zero point, not the scale)
    assert p.table["velocities_reduction_pct"].max() < 5.0
    # three velocities at chosen phases: the scale (semi-amplitude, hence the distance) follows
    s = p.sets
    assert s.loc[s["set"] == "velocities", "reduction_pct"].iloc[-1] > 50.0
    # positions cannot fix the distance of an astrometric orbit at all
    assert p.table["positions_reduction_pct"].max() < 5.0
    assert "zero point of new velocities" in p.markdown()
