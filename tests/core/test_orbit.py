"""core/orbit.py (THE orbit evaluator) against references written independently.

References
----------
* Kepler's equation solved by scipy.optimize.brentq, and sky positions and the line-of-sight
  coordinate z from the Campbell elements (Heintz 1978, Double Stars, ch. 4; Murray & Dermott
  1999, Solar System Dynamics, eq. 2.122; both from memory): the formulas are written out in
  tests/helpers/orbit_reference.py, shared with tests/model/test_likelihood.py.
* The velocity is checked against the numerical time derivative of that z
  (numpy central differences), converted from au/yr to km/s with astropy units.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from orbitmass.core.orbit import OrbitState, evaluate, kepler_basis, thiele_innes

from tests.helpers.orbit_reference import KMS, T_REF, ShiftTerm
from tests.helpers.orbit_reference import campbell as _campbell
from tests.helpers.orbit_reference import eccentric_anomaly as _eccentric_anomaly

ELEMENTS = [  # (P yr, e, M0 rad, a_mas, a_au, i, w, W)
    (12.0, 0.3, 0.7, 100.0, 5.0, 1.05, 0.7, 1.75),
    (3.5, 0.85, 4.0, 20.0, 2.2, 2.6, 5.1, 0.3),
    (40.0, 0.0, 2.0, 300.0, 15.0, 0.2, 0.0, 4.0),
]


def _state(P, e, m0, a_mas, a_au, i, w, W, period_rest=None):
    A, B, F, G, _, _ = thiele_innes(a_mas, math.cos(i), math.sin(i), math.cos(w), math.sin(w), math.cos(W),
                                    math.sin(W))
    _, _, _, _, C, H = thiele_innes(a_au, math.cos(i), math.sin(i), math.cos(w), math.sin(w), math.cos(W),
                                    math.sin(W))
    return OrbitState(period_rest_yr=P if period_rest is None else period_rest, period_obs_yr=P, ecc=e,
                      mean_anomaly_ref=m0, t_ref_yr=T_REF, ti_mas=(A, B, F, G), ch_au=(C, H))


@pytest.mark.parametrize("el", ELEMENTS)
def test_positions_match_campbell_formula(el):
    P, e, m0, a_mas, a_au, i, w, W = el
    t = np.linspace(T_REF - P, T_REF + 1.5 * P, 97)
    east, north, _ = _campbell(t, P, e, m0, a_mas, i, w, W)
    got = evaluate(_state(*el), t)
    # tolerance: brentq at xtol 1e-15 and float64 round-off on a ~100 mas orbit
    assert np.allclose(np.ravel(got["east_mas"]), east, atol=1e-9 * a_mas, rtol=0)
    assert np.allclose(np.ravel(got["north_mas"]), north, atol=1e-9 * a_mas, rtol=0)


@pytest.mark.parametrize("el", ELEMENTS)
def test_velocity_is_time_derivative_of_z(el):
    P, e, m0, a_mas, a_au, i, w, W = el
    t = np.linspace(T_REF - 0.3 * P, T_REF + 0.7 * P, 41)
    h = 1e-5 * P
    _, _, z_plus = _campbell(t + h, P, e, m0, a_au, i, w, W)
    _, _, z_minus = _campbell(t - h, P, e, m0, a_au, i, w, W)
    vz_ref = (z_plus - z_minus) / (2 * h) * KMS  # central difference, error ~ h^2 z''' / 6
    got = np.ravel(evaluate(_state(*el), t)["vz_kms"])
    scale = 2 * math.pi * a_au / P * KMS / math.sqrt(1 - e * e)
    assert np.max(np.abs(got - vz_ref)) < 1e-6 * scale * (1 + 10 * e)


def test_basis_is_the_normalised_orbit():
    # X = cos E - e, Y = sqrt(1 - e^2) sin E (core.orbit docstring) against the brentq anomaly
    t = np.linspace(2000.0, 2030.0, 50)
    E = _eccentric_anomaly(0.4 + 2 * math.pi / 7.0 * (t - T_REF), 0.6)
    b = kepler_basis(t, t_ref_yr=T_REF, period_obs_yr=7.0, ecc=0.6, mean_anomaly_ref=0.4)
    assert np.allclose(b.X, np.cos(E) - 0.6, atol=1e-12)
    assert np.allclose(b.Y, math.sqrt(1 - 0.36) * np.sin(E), atol=1e-12)
    # dX/dM = -sin E / (1 - e cos E): derivative of X by the mean anomaly (Kepler's equation dE/dM)
    assert np.allclose(b.dX, -np.sin(E) / (1 - 0.6 * np.cos(E)), atol=1e-12)


class _Rotation:
    name = "test-rotation"
    parameters = ()
    linear_safe = True

    def __init__(self, delta, rate_per_mean_anomaly=0.0, m0=0.0, period=1.0):
        self.delta, self.k, self.m0, self.period = delta, rate_per_mean_anomaly, m0, period

    def plane_rotation(self, state, basis, extra):
        if self.k == 0.0:
            return np.full(np.shape(basis.X), self.delta), np.zeros(np.shape(basis.X))
        # delta = k M, M the mean anomaly swept (recovered here from the basis: M = E - e sin E)
        E = np.arctan2(basis.sin_E, basis.cos_E)
        mean = E - state.ecc * basis.sin_E
        return self.k * mean, np.full(np.shape(mean), self.k)


@pytest.mark.parametrize("el", ELEMENTS[:2])
def test_constant_plane_rotation_equals_shift_of_omega(el):
    P, e, m0, a_mas, a_au, i, w, W = el
    t = np.linspace(T_REF, T_REF + P, 60)
    delta = 0.37
    rotated = evaluate(_state(*el), t, terms=[_Rotation(delta)])
    shifted = evaluate(_state(P, e, m0, a_mas, a_au, i, w + delta, W), t)
    for key in ("east_mas", "north_mas", "vz_kms"):
        assert np.allclose(rotated[key], shifted[key], rtol=1e-12, atol=1e-12)


def test_growing_rotation_velocity_is_derivative_of_rotated_z():
    # delta = k M: the companion's angle is nu + w + k M; v_z must be d z / dt of that orbit
    P, e, m0, a_mas, a_au, i, w, W = ELEMENTS[0]
    k = 0.05
    t = np.linspace(T_REF + 0.1, T_REF + 0.45 * P, 31)  # M within (0, pi): atan2 needs no unwrapping

    def z_of(tt):
        mean = m0 + 2 * math.pi / P * (tt - T_REF)
        E = _eccentric_anomaly(mean, e)
        nu = 2.0 * np.arctan2(math.sqrt(1 + e) * np.sin(E / 2), math.sqrt(1 - e) * np.cos(E / 2))
        r = a_au * (1 - e * e) / (1 + e * np.cos(nu))
        m_wrapped = np.mod(mean + math.pi, 2 * math.pi) - math.pi
        return r * np.sin(nu + w + k * m_wrapped) * math.sin(i)

    h = 1e-5 * P
    vz_ref = (z_of(t + h) - z_of(t - h)) / (2 * h) * KMS
    got = np.ravel(evaluate(_state(*ELEMENTS[0]), t, terms=[_Rotation(0.0, k)])["vz_kms"])
    assert np.max(np.abs(got - vz_ref)) < 1e-5 * np.max(np.abs(vz_ref))


class _Delay:
    name = "test-delay"
    parameters = ("delay_yr",)
    linear_safe = False

    def emission_times(self, t_obs_yr, state, extra, solve):
        return t_obs_yr - extra["delay_yr"]


def test_emission_time_and_velocity_shift_hooks():
    st = _state(*ELEMENTS[0])
    t = np.linspace(2005.0, 2015.0, 25)
    delayed = evaluate(st, t, terms=[_Delay()], extra={"delay_yr": 0.02})
    plain = evaluate(st, t - 0.02)
    assert np.allclose(delayed["east_mas"], plain["east_mas"], rtol=0, atol=1e-12)
    shifted = evaluate(st, t, terms=[ShiftTerm()], extra={"shift_kms": 3.5})
    assert np.allclose(shifted["vz_kms"] - evaluate(st, t)["vz_kms"], 3.5, rtol=0, atol=1e-12)
