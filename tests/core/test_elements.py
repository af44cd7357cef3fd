"""Tests of orbitmass.core.elements: Campbell <-> Thiele-Innes and the orientation conventions.

External references used:
- the orbit orientation as the rotation Rz(Omega) Rx(i) Rz(omega) of the orbital-plane
  position (a (cos E - e), a sqrt(1 - e^2) sin E, 0), written out in the test and checked
  against scipy.spatial.transform.Rotation (intrinsic "ZXZ" Euler angles);
- the project's conventions (shared/spec/input-format.md, "Conventions"): position angle
  from north through east, z away from the observer, Omega = position angle of the
  receding node, i < 90 deg means the position angle increases with time;
- scipy.optimize.brentq to locate the node crossing, numpy.linalg.det on a
  finite-difference Jacobian for the Jacobian determinant.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq
from scipy.spatial.transform import Rotation

from orbitmass.core.elements import (
    campbell_to_thiele_innes,
    thiele_innes_jacobian_log,
    thiele_innes_to_campbell,
)

EPS = np.finfo(np.float64).eps


def circ_diff(x, y):
    """Difference of two angles on the circle, in [-pi, pi]."""
    return np.angle(np.exp(1j * (np.asarray(x) - np.asarray(y))))


def rz(theta: float) -> np.ndarray:
    c, s = math.cos(theta), math.sin(theta)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def rx(theta: float) -> np.ndarray:
    c, s = math.cos(theta), math.sin(theta)
    return np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])


def rotation_positions(a, inc, omega, node, ecc, big_e) -> np.ndarray:
    """(north, east, z) by explicit rotation of the orbital-plane vector, shape (3, n)."""
    plane = np.stack(
        [a * (np.cos(big_e) - ecc), a * math.sqrt(1 - ecc**2) * np.sin(big_e), 0 * big_e]
    )
    return rz(node) @ rx(inc) @ rz(omega) @ plane


def ti_positions(consts, ecc, big_e) -> np.ndarray:
    """(north, east, z) from the Thiele-Innes constants (module docstring formulas)."""
    A, B, F, G, C, H = (float(c) for c in consts)
    X = np.cos(big_e) - ecc
    Y = math.sqrt(1 - ecc**2) * np.sin(big_e)
    return np.stack([A * X + F * Y, B * X + G * Y, C * X + H * Y])


def random_elements(rng: np.random.Generator, n: int):
    a = rng.uniform(0.1, 100.0, n)
    inc = np.arccos(rng.uniform(-1.0, 1.0, n))
    omega = rng.uniform(0.0, 2 * np.pi, n)
    node = rng.uniform(0.0, 2 * np.pi, n)
    return a, inc, omega, node


def test_rotation_matrices_match_scipy():
    # Reference: scipy Rotation, intrinsic Z-X-Z Euler angles = Rz(a) Rx(b) Rz(c).
    rng = np.random.default_rng(11)
    for node, inc, omega in rng.uniform(0, 2 * np.pi, (5, 3)):
        ref = Rotation.from_euler("ZXZ", [node, inc, omega]).as_matrix()
        np.testing.assert_allclose(rz(node) @ rx(inc) @ rz(omega), ref, atol=1e-15)


@pytest.mark.parametrize("inc_deg", [0.0, 1e-4, 37.0, 90.0, 123.0, 180.0 - 1e-4, 180.0])
def test_positions_match_rotation_matrices(inc_deg):
    # Reference: explicit rotation Rz(Omega) Rx(i) Rz(omega), axes (north, east, away).
    rng = np.random.default_rng(int(inc_deg * 1000))
    big_e = np.linspace(-np.pi, np.pi, 73)
    for _ in range(20):
        a, omega, node = rng.uniform(0.5, 5.0), *rng.uniform(0, 2 * np.pi, 2)
        ecc = rng.uniform(0.0, 0.95)
        inc = math.radians(inc_deg)
        consts = campbell_to_thiele_innes(a, inc, omega, node)
        np.testing.assert_allclose(
            ti_positions(consts, ecc, big_e),
            rotation_positions(a, inc, omega, node, ecc, big_e),
            rtol=0,
            atol=1e-14 * a,
        )


@pytest.mark.parametrize("inc_deg", [0.0, 30.0, 89.0])
def test_position_angle_increases_for_prograde(inc_deg):
    # Convention (input-format.md): i < 90 deg -> position angle increases with time.
    # E increases monotonically with time, so step through one period in E.
    rng = np.random.default_rng(5)
    big_e = np.linspace(0.0, 2 * np.pi, 2001)
    for _ in range(10):
        omega, node = rng.uniform(0, 2 * np.pi, 2)
        consts = campbell_to_thiele_innes(1.0, math.radians(inc_deg), omega, node)
        north, east, _ = ti_positions(consts, 0.3, big_e)
        pa = np.unwrap(np.arctan2(east, north))
        assert np.all(np.diff(pa) > 0)
        assert abs(pa[-1] - pa[0] - 2 * np.pi) < 1e-9  # one full turn on the sky
        # and the mirror orbit (i -> 180 - i) runs the other way
        mirror = campbell_to_thiele_innes(1.0, math.radians(180.0 - inc_deg), omega, node)
        north, east, _ = ti_positions(mirror, 0.3, big_e)
        assert np.all(np.diff(np.unwrap(np.arctan2(east, north))) < 0)


@pytest.mark.parametrize("inc_deg", [10.0, 60.0, 90.0, 150.0])
def test_ascending_node_is_receding_node_at_position_angle_omega(inc_deg):
    # Convention (input-format.md): Omega is the position angle of the node where the
    # companion recedes, i.e. where z (positive away) increases through 0.
    rng = np.random.default_rng(9)
    for _ in range(10):
        omega, node = rng.uniform(0, 2 * np.pi, 2)
        ecc = rng.uniform(0.0, 0.8)
        consts = campbell_to_thiele_innes(2.0, math.radians(inc_deg), omega, node)

        def z_of(big_e: float, consts=consts, ecc=ecc) -> float:
            return float(ti_positions(consts, ecc, np.array([big_e]))[2, 0])

        grid = np.linspace(0.0, 2 * np.pi, 721)
        z = np.array([z_of(x) for x in grid])
        ups = np.nonzero((z[:-1] < 0) & (z[1:] >= 0))[0]
        assert ups.size == 1  # one ascending crossing per orbit
        k = ups[0]
        e_node = brentq(z_of, grid[k], grid[k + 1], xtol=1e-15)
        north, east, _ = ti_positions(consts, ecc, np.array([e_node]))[:, 0]
        assert abs(circ_diff(math.atan2(east, north), node)) < 1e-9


def test_round_trip_random_elements_with_line_of_sight():
    # Reference: the forward map (checked above against rotation matrices); the inverse
    # must return the same elements. Well-conditioned part: 1e-12 contract.
    rng = np.random.default_rng(20240602)
    a, inc, omega, node = random_elements(rng, 20000)
    a2, inc2, omega2, node2 = thiele_innes_to_campbell(
        *campbell_to_thiele_innes(a, inc, omega, node)
    )
    np.testing.assert_allclose(a2, a, rtol=1e-14)
    good = np.sin(inc) > 0.05  # error ~ eps / sin^2(i/2) stays below 1e-12
    assert np.max(np.abs(inc2 - inc)[good]) < 1e-12
    assert np.max(np.abs(circ_diff(omega2, omega))[good]) < 1e-12
    assert np.max(np.abs(circ_diff(node2, node))[good]) < 1e-12
    assert np.all((omega2 >= 0) & (omega2 < 2 * np.pi) & (node2 >= 0) & (node2 < 2 * np.pi))


@pytest.mark.parametrize(
    "inc", [1e-7, 1e-6, 1e-3, 0.5, np.pi / 2 - 1e-9, np.pi / 2, np.pi - 1e-3, np.pi - 1e-6]
)
def test_round_trip_near_special_inclinations(inc):
    # Conditioning near face-on orbits (module docstring): i from Q = a sin^2(i/2) is good
    # to ~4 eps / sin i; omega - Omega (i -> 0) or omega + Omega (i -> pi) to
    # ~eps / sin^2(i/2) or eps / cos^2(i/2). The well-defined combination stays exact.
    rng = np.random.default_rng(31)
    a, _, omega, node = random_elements(rng, 5000)
    consts = campbell_to_thiele_innes(a, inc, omega, node)
    a2, inc2, omega2, node2 = thiele_innes_to_campbell(*consts)
    np.testing.assert_allclose(a2, a, rtol=1e-14)
    assert np.max(np.abs(inc2 - inc)) <= 1e-15 + 8 * EPS / math.sin(inc)
    tol_plus = 1e-14 + 8 * EPS / math.cos(inc / 2) ** 2
    tol_minus = 1e-14 + 8 * EPS / math.sin(inc / 2) ** 2
    assert np.max(np.abs(circ_diff(omega2 + node2, omega + node))) <= tol_plus
    assert np.max(np.abs(circ_diff(omega2 - node2, omega - node))) <= tol_minus
    # constants -> elements -> constants is exact everywhere (for A, B, F, G; C and H
    # are linear in sin i and inherit the error of i)
    back = campbell_to_thiele_innes(a2, inc2, omega2, node2)
    for c2, c in zip(back[:4], consts[:4], strict=True):
        np.testing.assert_allclose(c2, c, rtol=0, atol=4e-15 * np.max(a))


@pytest.mark.parametrize(("inc", "combination"), [(0.0, +1), (np.pi, -1)])
def test_face_on_orbits(inc, combination):
    # Degeneracy (module docstring): at i = 0 only omega + Omega, at i = 180 deg only
    # omega - Omega is defined; the inverse sets Omega = 0.
    rng = np.random.default_rng(4)
    a, _, omega, node = random_elements(rng, 1000)
    a2, inc2, omega2, node2 = thiele_innes_to_campbell(
        *campbell_to_thiele_innes(a, inc, omega, node)
    )
    np.testing.assert_array_equal(inc2, inc)
    np.testing.assert_array_equal(node2, 0.0)
    np.testing.assert_allclose(a2, a, rtol=1e-14)
    expected = omega + combination * node
    assert np.max(np.abs(circ_diff(omega2, expected))) < 1e-14


def test_node_ambiguity_without_line_of_sight():
    # Classical inversion from A, B, F, G alone: (omega, Omega) and (omega + pi, Omega + pi)
    # give the same sky positions; the function returns Omega in [0, pi).
    rng = np.random.default_rng(8)
    a, inc, omega, node = random_elements(rng, 20000)
    A, B, F, G, _, _ = campbell_to_thiele_innes(a, inc, omega, node)
    a2, inc2, omega2, node2 = thiele_innes_to_campbell(A, B, F, G)
    assert np.all((node2 >= 0) & (node2 < np.pi))
    assert np.all((omega2 >= 0) & (omega2 < 2 * np.pi))
    good = np.sin(inc) > 0.05  # error ~ eps / sin^2(i/2) stays below 1e-12
    flipped = np.abs(circ_diff(node2, node)) > 1.0
    np.testing.assert_allclose(
        circ_diff(omega2, omega + np.where(flipped, np.pi, 0.0))[good], 0.0, atol=1e-12
    )
    np.testing.assert_allclose(
        circ_diff(node2, node + np.where(flipped, np.pi, 0.0))[good], 0.0, atol=1e-12
    )
    assert 0.4 < flipped.mean() < 0.6  # nodes uniform on the circle: about half flip
    # the flipped solution reproduces A, B, F, G but reverses C and H
    back = campbell_to_thiele_innes(a2, inc2, omega2, node2)
    for c2, c in zip(back[:4], (A, B, F, G), strict=True):
        np.testing.assert_allclose(c2, c, rtol=0, atol=1e-13)


def test_broadcasting_shapes():
    # Reference: element-by-element evaluation of the same functions.
    rng = np.random.default_rng(2)
    a = rng.uniform(1, 2, (6, 1))
    inc = rng.uniform(0.1, 3.0, (1, 4))
    consts = campbell_to_thiele_innes(a, inc, 0.3, 1.1)
    assert all(c.shape == (6, 4) for c in consts)
    single = campbell_to_thiele_innes(a[2, 0], inc[0, 3], 0.3, 1.1)
    for c, s in zip(consts, single, strict=True):
        assert c[2, 3] == s
    back = thiele_innes_to_campbell(*consts)
    assert all(x.shape == (6, 4) for x in back)
    np.testing.assert_allclose(back[1], np.broadcast_to(inc, (6, 4)), atol=1e-13)


def test_only_one_line_of_sight_constant_is_an_error():
    with pytest.raises(ValueError, match="C and H"):
        thiele_innes_to_campbell(1.0, 0.0, 0.0, 1.0, C=0.5)


def finite_difference_log_jacobian(a, inc, omega, node, rel_step=1e-6) -> float:
    """log |det d(A, B, F, G)/d(a, i, omega, Omega)| by central differences."""
    x0 = np.array([a, inc, omega, node])
    jac = np.empty((4, 4))
    for k in range(4):
        h = rel_step * (a if k == 0 else 1.0)
        xp, xm = x0.copy(), x0.copy()
        xp[k] += h
        xm[k] -= h
        fp = np.array(campbell_to_thiele_innes(*xp)[:4], dtype=float)
        fm = np.array(campbell_to_thiele_innes(*xm)[:4], dtype=float)
        jac[:, k] = (fp - fm) / (2 * h)
    return math.log(abs(np.linalg.det(jac)))


def test_jacobian_against_finite_differences():
    # Reference: numpy.linalg.det of a central-difference Jacobian of the forward map.
    rng = np.random.default_rng(12)
    for _ in range(40):
        a = rng.uniform(0.1, 50.0)
        inc = rng.uniform(0.05, np.pi - 0.05)
        omega, node = rng.uniform(0, 2 * np.pi, 2)
        expected = finite_difference_log_jacobian(a, inc, omega, node)
        assert abs(float(thiele_innes_jacobian_log(a, inc)) - expected) < 1e-6
    assert thiele_innes_jacobian_log(1.0, 0.0) == -np.inf
    assert thiele_innes_jacobian_log(np.ones((3, 1)), np.full((1, 2), 1.0)).shape == (3, 2)


angles = st.floats(0.0, 2 * np.pi, allow_nan=False, exclude_max=True)


@settings(max_examples=200, deadline=None)
@given(
    consts=st.tuples(*[st.floats(-100.0, 100.0, allow_nan=False) for _ in range(4)]),
)
def test_property_constants_round_trip(consts):
    # Every real (A, B, F, G) is an orbit orientation; elements -> constants must give
    # them back to rounding (forward map checked against rotation matrices above).
    elements = thiele_innes_to_campbell(*consts)
    back = campbell_to_thiele_innes(*elements)[:4]
    scale = max(1.0, max(abs(c) for c in consts))
    for c2, c in zip(back, consts, strict=True):
        assert abs(float(c2) - c) <= 1e-14 * scale


@settings(max_examples=200, deadline=None)
@given(
    a=st.floats(1e-3, 1e3),
    inc=st.floats(0.05, np.pi - 0.05),
    omega=angles,
    node=angles,
)
def test_property_elements_round_trip(a, inc, omega, node):
    # With C and H the inversion is unique; 0.05 <= i <= pi - 0.05 keeps the error of
    # omega and Omega (~ eps / sin^2(i/2), eps / cos^2(i/2)) below 1e-12.
    a2, inc2, omega2, node2 = thiele_innes_to_campbell(
        *campbell_to_thiele_innes(a, inc, omega, node)
    )
    assert abs(float(a2) / a - 1.0) <= 1e-14
    assert abs(float(inc2) - inc) <= 1e-12
    assert abs(float(circ_diff(omega2, omega))) <= 1e-12
    assert abs(float(circ_diff(node2, node))) <= 1e-12
