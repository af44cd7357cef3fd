"""The fastest half of the hard cases (validation/hard_cases.py) as tests of a default fit.

Each case is an invented system simulated by validation/simulator.py (it shares
no code with orbitmass: Kepler's equation by scipy.optimize.newton, explicit 3-D
rotations), with a fixed seed. A default fit (only the seed given) must converge
(split R-hat < 1.01 and the ESS floor of orbitmass.core.diagnostics), fit the data
(fit_quality status "ok"), and hold the simulated mass inside its central 95 %
interval. The slower half runs only in ``python -m validation.hard_cases``.

Which half is fastest was measured with ``python -m validation.hard_cases`` on the
2-core machine (wall seconds at load about 8): twoorbits 1.5, rvdominated 5.3,
sparse 8.4, twoperiods 15.0, epochs1000 15.4, double 54.0; the other six took
64-300 s.
"""

from __future__ import annotations

import pytest

from validation.hard_cases import CASES, run_case

FASTEST_HALF = ("twoorbits", "rvdominated", "sparse", "twoperiods", "epochs1000", "double")


def test_the_fastest_half_is_half_of_the_suite():
    names = [c.name for c in CASES]
    assert set(FASTEST_HALF) <= set(names) and 2 * len(FASTEST_HALF) >= len(names) >= 12


@pytest.mark.slow
@pytest.mark.parametrize("name", FASTEST_HALF)
def test_default_fit_of_a_hard_case_converges_on_the_truth(name, tmp_path):
    case = next(c for c in CASES if c.name == name)
    row = run_case(case, 1, tmp_path)  # seed 1, as the validation script's default
    mass = row["mass"]
    assert row["converged"], row
    assert row["fit_status"] == "ok", row
    assert mass["q2.5"] <= row["truth_mass_msun"] <= mass["q97.5"], row
