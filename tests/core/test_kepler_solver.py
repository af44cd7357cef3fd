"""The Kepler solver of orbitmass.core.kepler against mpmath, on the hard corners.

Reference: mpmath (``findroot`` with the Anderson-Bjorck bracketing solver at 40
significant digits) as an independent solver of Kepler's equation M = E - e sin E, on a
bracket [M - e, M + e] (E - M = e sin E lies in [-e, e]); cos E and sin E of that root
evaluated in mpmath. The contract of the solver is 1e-12 rad (``TOL_RAD``) for
0 <= e <= 0.999 and any real M; the layout checks (row blocks against flat pairs, the odd
symmetry) follow from Kepler's equation itself (common practice, no source).
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest

from orbitmass.core.kepler import kepler_cos_sin, kepler_cos_sin_rows, rows_work, solve_kepler

TOL_RAD = 1e-12
EPS = np.finfo(float).eps


def mp_root(mean: float, ecc: float) -> mpmath.mpf:
    """Root of E - e sin E = M (mpmath, 40 digits), M and e taken as the exact floats given."""
    with mpmath.workdps(40):
        m, e = mpmath.mpf(mean), mpmath.mpf(ecc)
        if e == 0:
            return m

        def f(x):
            return x - e * mpmath.sin(x) - m

        lo, hi = m - e, m + e
        if f(lo) == 0:
            return lo
        if f(hi) == 0:
            return hi
        return mpmath.findroot(f, (lo, hi), solver="anderson")


def edge_cases() -> tuple[np.ndarray, np.ndarray]:
    """Mean anomalies and eccentricities of the corners: e = 0 and e -> 0.999, M near 0 and pi."""
    eccs = np.array([0.0, 1e-9, 1e-3, 0.5, 0.9, 0.99, 0.995, 0.998, 0.999])
    near_zero = np.concatenate([[0.0, 5e-324, 1e-300, 1e-200], np.logspace(-14, -1, 14)])
    near_pi = np.array([math.pi, math.pi - 1e-15, math.pi - 1e-12, math.pi - 1e-8, math.pi - 1e-4,
                        math.pi + 1e-12, math.pi + 1e-6])
    means = np.concatenate([near_zero, -near_zero, near_pi, -near_pi, np.linspace(-math.pi, math.pi, 25)])
    e_grid, m_grid = np.meshgrid(eccs, means, indexing="ij")
    return m_grid.ravel(), e_grid.ravel()


def random_cases(n: int = 600) -> tuple[np.ndarray, np.ndarray]:
    """Uniform e in [0, 0.999] and M in [-pi, pi], plus 1 - e log-uniform down to 1e-3 with tiny M."""
    rng = np.random.default_rng(20261202)
    e1, m1 = rng.uniform(0.0, 0.999, n), rng.uniform(-math.pi, math.pi, n)
    e2 = 1.0 - 10.0 ** rng.uniform(-3.0, math.log10(0.3), n)
    m2 = rng.choice([-1.0, 1.0], n) * 10.0 ** rng.uniform(-12.0, math.log10(math.pi), n)
    return np.concatenate([m1, m2]), np.concatenate([e1, e2])


@pytest.fixture(scope="module")
def cases():
    m_edge, e_edge = edge_cases()
    m_rand, e_rand = random_cases()
    means, eccs = np.concatenate([m_edge, m_rand]), np.concatenate([e_edge, e_rand])
    roots = [mp_root(float(m), float(e)) for m, e in zip(means, eccs, strict=True)]
    return means, eccs, roots


def test_against_mpmath_on_the_corners(cases):
    # Reference: mpmath findroot, 40 digits, and cos / sin of that root (module docstring).
    # The levels measured when the solver was written (orbitmass.core.kepler docstring:
    # 6.0e-15 rad for E, 3.3e-15 and 6.0e-15 for cos E and sin E at e <= 0.999) are kept
    # with margin, so that a regression of the correction step shows before the contract.
    means, eccs, roots = cases
    big_e = solve_kepler(means, eccs)
    cos_e, sin_e = kepler_cos_sin(means, eccs)
    with mpmath.workdps(40):
        ref = np.array([[float(r), float(mpmath.cos(r)), float(mpmath.sin(r))] for r in roots])
    for got, col in ((big_e, 0), (cos_e, 1), (sin_e, 2)):
        err = np.abs(got - ref[:, col])
        worst = int(np.argmax(err))
        assert err[worst] <= TOL_RAD, (col, means[worst], eccs[worst], err[worst])
        assert err[worst] <= 2e-14, (col, means[worst], eccs[worst], err[worst])


def test_kepler_residual_in_mpmath(cases):
    # Kepler's equation itself, evaluated in mpmath at the float E returned (no float
    # rounding in the check): |E - e sin E - M| <= 1e-12 rad.
    means, eccs, _ = cases
    big_e = solve_kepler(means, eccs)
    with mpmath.workdps(40):
        res = [abs(mpmath.mpf(float(x)) - mpmath.mpf(float(e)) * mpmath.sin(mpmath.mpf(float(x)))
                   - mpmath.mpf(float(m))) for x, e, m in zip(big_e, eccs, means, strict=True)]
    assert float(max(res)) <= TOL_RAD


@pytest.mark.parametrize("ecc", [0.0, 0.3, 0.9, 0.999])
def test_large_and_negative_mean_anomalies(ecc):
    # Reference: mpmath root for the exact float M. Reducing M to [-pi, pi] in float64
    # rounds by up to ~|M| eps, and E moves by dE/dM = 1 / (1 - e cos E) times that
    # (up to 1000 at e = 0.999 near periastron), which the tolerance adds to the contract.
    rng = np.random.default_rng(int(ecc * 1000) + 1)
    means = np.concatenate([rng.uniform(-1e4, 1e4, 40), -rng.uniform(0, 50, 20),
                            2 * math.pi * np.arange(-5, 6) + 1e-9, 2 * math.pi * np.arange(-5, 6) + math.pi])
    big_e = solve_kepler(means, ecc)
    ref = np.array([float(mp_root(float(m), ecc)) for m in means])
    tol = TOL_RAD + 8.0 * EPS * np.abs(means) / (1.0 - ecc * np.cos(ref))
    assert np.all(np.abs(big_e - ref) <= tol)
    cos_e, sin_e = kepler_cos_sin(means, ecc)
    assert np.all(np.abs(cos_e - np.cos(ref)) <= tol + 1e-15)
    assert np.all(np.abs(sin_e - np.sin(ref)) <= tol + 1e-15)


def test_zero_eccentricity_is_exact():
    # Kepler's equation with e = 0: E = M (definition), bit for bit for |M| <= pi.
    means = np.concatenate([np.linspace(-math.pi, math.pi, 1001), [0.0, -0.0, 1e-300, -1e-300]])
    np.testing.assert_array_equal(solve_kepler(means, 0.0), means)
    cos_e, sin_e = kepler_cos_sin(means, 0.0)
    np.testing.assert_allclose(cos_e, np.cos(means), rtol=0, atol=1e-15)
    np.testing.assert_allclose(sin_e, np.sin(means), rtol=0, atol=1e-15)


def test_odd_symmetry_bit_for_bit():
    # Kepler's equation is odd in (M, E): E(-M) = -E(M), so cos E is even and sin E odd.
    # The solver carries the sign through its arithmetic; the symmetry must be exact.
    rng = np.random.default_rng(5)
    means = rng.uniform(-math.pi, math.pi, 5000)
    eccs = rng.uniform(0.0, 0.999, 5000)
    np.testing.assert_array_equal(solve_kepler(-means, eccs), -solve_kepler(means, eccs))
    c_pos, s_pos = kepler_cos_sin(means, eccs)
    c_neg, s_neg = kepler_cos_sin(-means, eccs)
    np.testing.assert_array_equal(c_neg, c_pos)
    np.testing.assert_array_equal(s_neg, -s_pos)


def test_row_blocks_match_flat_pairs():
    # The layout must not change a bit: (n_sets, 1) eccentricities against (n_sets, n_epochs)
    # mean anomalies (solved in blocks of rows, the eccentricity factors once per row) give
    # exactly what the flat pairs give. Common practice, no source.
    rng = np.random.default_rng(11)
    for n_sets, n_epochs in ((3, 5), (37, 400), (300, 7)):
        eccs = rng.uniform(0.0, 0.999, (n_sets, 1))
        means = rng.uniform(-30.0, 30.0, (n_sets, n_epochs))
        flat_e = np.broadcast_to(eccs, means.shape).ravel()
        ref_e = solve_kepler(means.ravel(), flat_e).reshape(means.shape)
        ref_c, ref_s = (x.reshape(means.shape) for x in kepler_cos_sin(means.ravel(), flat_e))
        np.testing.assert_array_equal(solve_kepler(means, eccs), ref_e)
        c, s = kepler_cos_sin(means, eccs)
        np.testing.assert_array_equal(c, ref_c)
        np.testing.assert_array_equal(s, ref_s)
        oc, os_ = np.empty(means.shape), np.empty(means.shape)
        kepler_cos_sin_rows(means, eccs, oc, os_, rows_work(n_sets, n_epochs))
        np.testing.assert_array_equal(oc, ref_c)
        np.testing.assert_array_equal(os_, ref_s)
        # and the values themselves, for one element, against mpmath
        i, j = n_sets // 2, n_epochs // 2
        assert abs(ref_e[i, j] - float(mp_root(means[i, j], eccs[i, 0]))) <= TOL_RAD + 8 * EPS * 30
