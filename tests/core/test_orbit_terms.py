"""The model-term plug-in contract of orbitmass.core.orbit, run over every implementation.

Every term must declare name / parameters / linear_safe, pickle (it travels to batch workers),
be immutable, broadcast over parameter sets and epochs exactly as a loop over the sets would,
reduce to the Keplerian orbit when its factor is 0, and (for in-plane rotations) give
velocities that are the time derivative of the positions it moves.
"""

from __future__ import annotations

import dataclasses
import math
import pickle

import numpy as np
import pytest

from orbitmass.core.kepler import mean_to_true
from orbitmass.core.orbit import ModelTerm, OrbitState, evaluate, kepler_basis, thiele_innes
from orbitmass.core.relativity import (
    ExtendedMassTerm,
    PrecessionTerm,
    RedshiftTerm,
    RoemerTerm,
    unwrapped_true_anomaly,
)
from orbitmass.units import GM_SUN_AU3_PER_YR2, KMS_PER_AU_PER_YR

TERMS = [RedshiftTerm(), RoemerTerm(), PrecessionTerm(), ExtendedMassTerm(scale_radius_mas=20.0),
         ExtendedMassTerm(scale_radius_au=300.0)]
HOOKS = ("emission_times", "plane_rotation", "velocity_shift")
# values that switch each term on strongly (factors exaggerated so differences are large)
ON = {"redshift_factor": 1.0, "precession_factor": 50.0, "extended_mass_fraction": 0.05}
OFF = {"redshift_factor": 0.0, "precession_factor": 0.0, "extended_mass_fraction": 0.0}


def _states(n_sets=3, distance_pc=8000.0):
    """Three invented parameter sets (an S-star-like orbit and two variations), shape (3, 1)."""
    mass = np.array([4.0e6, 3.5e6, 4.5e6])[:n_sets, None]
    period = np.array([16.0, 12.0, 30.0])[:n_sets, None]
    ecc = np.array([0.88, 0.6, 0.95])[:n_sets, None]
    inc, w, node = (np.radians(np.array(x)[:n_sets, None]) for x in ([130.0, 40.0, 95.0], [70.0, 200.0, 10.0],
                                                                     [225.0, 30.0, 300.0]))
    a_au = np.cbrt(GM_SUN_AU3_PER_YR2 * mass * period**2 / (4 * math.pi**2))
    A, B, F, G, C, H = thiele_innes(a_au, np.cos(inc), np.sin(inc), np.cos(w), np.sin(w), np.cos(node),
                                    np.sin(node))
    mas = 1000.0 / distance_pc
    return OrbitState(period_rest_yr=period, period_obs_yr=period, ecc=ecc,
                      mean_anomaly_ref=np.array([0.4, 2.0, -1.0])[:n_sets, None], t_ref_yr=2010.0,
                      ti_mas=(A * mas, B * mas, F * mas, G * mas), ch_au=(C, H), mass_msun=mass, a_au=a_au,
                      distance_pc=distance_pc)


def _row(state: OrbitState, k: int) -> OrbitState:
    def pick(x):
        return None if x is None else (tuple(v[k:k + 1] for v in x) if isinstance(x, tuple) else
                                       (x[k:k + 1] if np.ndim(x) else x))
    return dataclasses.replace(state, **{f.name: pick(getattr(state, f.name)) for f in dataclasses.fields(state)
                                         if f.name != "t_ref_yr"})


EPOCHS = np.linspace(1995.0, 2045.0, 157)


@pytest.mark.parametrize("term", TERMS, ids=lambda t: f"{t.name}")
def test_declares_the_contract(term):
    # the Protocol of core/orbit (common practice: a runtime-checkable protocol)
    assert isinstance(term, ModelTerm)
    assert isinstance(term.name, str) and term.name
    assert isinstance(term.parameters, tuple) and all(isinstance(p, str) for p in term.parameters)
    assert term.linear_safe is False          # all of these make the model non-linear in the constants
    assert any(callable(getattr(term, h, None)) for h in HOOKS)
    assert set(term.parameters) <= set(ON)
    # immutable and picklable (batch workers)
    with pytest.raises(dataclasses.FrozenInstanceError):
        term.name = "x"
    assert pickle.loads(pickle.dumps(term)) == term


@pytest.mark.parametrize("term", TERMS, ids=lambda t: f"{t.name}")
def test_vectorised_equals_loop(term):
    state = _states()
    # factors differ between the parameter sets, shape (n_sets, 1) as the parameter space passes them
    per_set = {key: value * np.array([[1.0], [0.5], [2.0]]) for key, value in ON.items()}
    joint = evaluate(state, EPOCHS, terms=(term,), extra=per_set)
    for k in range(3):
        single = evaluate(_row(state, k), EPOCHS, terms=(term,), extra={key: v[k:k + 1] for key, v in per_set.items()})
        for key in ("north_mas", "east_mas", "vz_kms"):
            assert joint[key].shape == (3, EPOCHS.size)
            # the Roemer solve decides jointly whether to iterate: equal to its 10 ms tolerance,
            # i.e. to 1e-7 mas and 1e-5 km/s for these orbits (v < 10,000 km/s, a < 1e5 km/s/yr)
            np.testing.assert_allclose(joint[key][k], single[key][0], rtol=1e-12,
                                       atol=1e-5 if term.name == "roemer" else 1e-9)


@pytest.mark.parametrize("term", TERMS, ids=lambda t: f"{t.name}")
def test_switched_on_changes_and_off_is_keplerian(term):
    state = _states()
    kepler = evaluate(state, EPOCHS)
    on = evaluate(state, EPOCHS, terms=(term,), extra=ON)
    assert max(np.abs(on[k] - kepler[k]).max() for k in kepler) > 1e-3
    if term.parameters:
        off = evaluate(state, EPOCHS, terms=(term,), extra=OFF)
        for key in kepler:
            np.testing.assert_allclose(off[key], kepler[key], rtol=0, atol=1e-12 * np.abs(kepler[key]).max())
    else:     # the Roemer delay vanishes for an orbit in the sky plane (C = H = 0)
        flat = dataclasses.replace(state, ch_au=(0.0 * state.ch_au[0], 0.0 * state.ch_au[1]))
        np.testing.assert_array_equal(evaluate(flat, EPOCHS, velocities=False, terms=(term,))["north_mas"],
                                      evaluate(flat, EPOCHS, velocities=False)["north_mas"])


@pytest.mark.parametrize("term", [t for t in TERMS if hasattr(t, "plane_rotation")], ids=lambda t: t.name)
def test_rotation_rate_is_the_time_derivative(term):
    # The velocity of a rotated orbit must be d z / dt of its position (finite differences, central,
    # step 1e-5 yr; common practice, no source): put (C, H) in the north slot to read z in au
    state = _states()
    z_state = dataclasses.replace(state, ti_mas=(state.ch_au[0], state.ti_mas[1], state.ch_au[1], state.ti_mas[3]))
    h = 1e-5
    z_plus = evaluate(z_state, EPOCHS + h, velocities=False, terms=(term,), extra=ON)["north_mas"]
    z_minus = evaluate(z_state, EPOCHS - h, velocities=False, terms=(term,), extra=ON)["north_mas"]
    dz_dt_kms = (z_plus - z_minus) / (2 * h) * KMS_PER_AU_PER_YR
    vz = evaluate(state, EPOCHS, positions=False, terms=(term,), extra=ON)["vz_kms"]
    np.testing.assert_allclose(vz, dz_dt_kms, rtol=0, atol=1e-5 * np.abs(vz).max())


def test_unwrapped_true_anomaly_counts_orbits():
    # Continuous, 2 pi per orbit, and equal modulo 2 pi to the package's Kepler solver
    # (orbitmass.core.kepler.mean_to_true, itself tested against scipy in test_kepler)
    t = np.linspace(1990.0, 2060.0, 20001)
    ecc = 0.9
    basis = kepler_basis(t, t_ref_yr=2010.0, period_obs_yr=16.0, ecc=ecc, mean_anomaly_ref=0.4)
    nu = unwrapped_true_anomaly(basis, ecc)
    assert np.all(np.diff(nu) > 0)
    mean = 0.4 + 2 * math.pi * (t - 2010.0) / 16.0
    wrapped = np.angle(np.exp(1j * (nu - mean_to_true(mean, ecc))))
    assert np.abs(wrapped).max() < 1e-9
    later = kepler_basis(t + 16.0, t_ref_yr=2010.0, period_obs_yr=16.0, ecc=ecc, mean_anomaly_ref=0.4)
    np.testing.assert_allclose(unwrapped_true_anomaly(later, ecc) - nu, 2 * math.pi, atol=1e-9)


def test_missing_state_fields_are_named():
    state = dataclasses.replace(_states(), ch_au=None)
    with pytest.raises(ValueError, match="ch_au"):
        evaluate(state, EPOCHS, velocities=False, terms=(RoemerTerm(),))
    no_distance = dataclasses.replace(_states(), distance_pc=None)
    with pytest.raises(ValueError, match="distance_pc"):
        evaluate(no_distance, EPOCHS, terms=(ExtendedMassTerm(scale_radius_mas=20.0),), extra=ON)
    with pytest.raises(ValueError, match="positive"):
        ExtendedMassTerm(scale_radius_au=-1.0)


def test_semimajor_axis_from_keplers_law_when_absent():
    # Without a_au the terms use Kepler's third law (a^3 = G M P^2 / (4 pi^2), common practice) with
    # the rest-frame period: identical results to passing the same a_au explicitly
    state = _states()
    bare = dataclasses.replace(state, a_au=None)
    terms = (RedshiftTerm(), PrecessionTerm(), ExtendedMassTerm(scale_radius_au=300.0))
    with_a = evaluate(state, EPOCHS, terms=terms, extra=ON)
    without = evaluate(bare, EPOCHS, terms=terms, extra=ON)
    for key in with_a:
        np.testing.assert_allclose(without[key], with_a[key], rtol=1e-12, atol=1e-9)
