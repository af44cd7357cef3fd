"""The reference-state parametrisation of partial arcs (model.parameters.ReferenceState).

Checked against things outside the map itself:

* the state it computes against the package's orbit evaluator (positions at the
  reference epoch, their time derivative by central differences, the
  line-of-sight velocity) on orbits simulated from prior draws;
* the round trip elements -> state -> elements;
* its analytic log-Jacobian against numpy's ``slogdet`` of a central-difference
  Jacobian of the inverse map;
* the posterior: sampled in the state variables with the Jacobian, a fit gives
  the same mass and period quantiles as the element parametrisation on data
  where both mix (within Monte Carlo error from the effective sample sizes).
"""

from __future__ import annotations

import numpy as np
import pytest

from orbitmass.core import diagnostics
from orbitmass.core.kepler import kepler_cos_sin
from orbitmass.core.orbit import evaluate, thiele_innes
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.inference.initialise import initialise_walkers, reference_state_companions
from orbitmass.inference.pipeline import build_space
from orbitmass.inference.sampler import SamplerOptions, run_sampler
from orbitmass.io.target import read_target
from orbitmass.model.likelihood import LogPosterior, orbit_states
from orbitmass.model.parameters import ReferenceState, StatePosterior
from orbitmass.units import GM_SUN_AU3_PER_YR2, KMS_PER_AU_PER_YR
from tests.helpers.targets import make_target

TRUTH = TrueOrbit(mass_msun=1.0e6, distance_pc=5000.0, period_yr=40.0, eccentricity=0.3, inclination_deg=70.0,
                  arg_periastron_deg=30.0, ascending_node_deg=200.0, periastron_time=2012.0)
DIST = 'prior = { dist = "normal", mean = "5 kpc", sd = "0.25 kpc" }'


def _space(tmp_path, rng, velocities: bool, t_pos=None, t_rv=None):
    t_pos = np.sort(rng.uniform(2010, 2020, 20)) if t_pos is None else t_pos
    t_rv = (np.sort(rng.uniform(2012, 2020, 10)) if t_rv is None else t_rv) if velocities else None
    path = make_target(tmp_path, TRUTH, rng=rng, t_pos=t_pos, t_rv=t_rv, pos_err=0.5, rv_err=10.0,
                       distance_toml=DIST)
    return build_space(read_target(path))


def _draws(tmp_path, rng, velocities: bool, n: int):
    """Space, map, prior draws of the elements and their states."""
    space = _space(tmp_path, rng, velocities)
    state = ReferenceState(space, ["S1"])
    theta = space.sample_prior(rng, n)
    return space, state, theta, state.to_state(theta)


@pytest.mark.parametrize("velocities", [True, False])
def test_state_matches_the_orbit_evaluator(tmp_path, rng, velocities):
    # source: orbitmass.core.orbit.evaluate (the model the likelihood uses), differentiated numerically
    space, state, theta, u = _draws(tmp_path, rng, velocities, 50)
    cols = state.cols["S1"]
    st = orbit_states(space, space.unpack(theta))["S1"]
    phys = space.unpack(theta)
    # step: a thousandth of the periastron passage time, so the truncation of the stencil is ~1e-10
    pass_time = phys["S1.period_yr"] * (1.0 - phys["S1.ecc"]) ** 1.5
    dt = (1e-3 * pass_time)[:, None]
    t = space.t_ref + dt * np.array([-2.0, -1.0, 0.0, 1.0, 2.0])
    out = evaluate(st, t, velocities=velocities)
    r = np.sqrt(np.sum(u[:, cols[:3]] ** 2, axis=1))  # 3-D distance (mas): the scale of every coordinate
    n_pass = 2 * np.pi / pass_time
    np.testing.assert_allclose(u[:, cols[0]], out["north_mas"][:, 2], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(u[:, cols[1]], out["east_mas"][:, 2], rtol=1e-10, atol=1e-12)
    # five-point central difference (Abramowitz & Stegun 25.3.6): truncation ~ dt^4 n^5 r / 30
    stencil = np.array([1.0, -8.0, 0.0, 8.0, -1.0]) / 12.0
    vn = (out["north_mas"] @ stencil) / dt[:, 0]
    ve = (out["east_mas"] @ stencil) / dt[:, 0]
    # epochs near 2015 are rounded to 2.3e-13 yr (the float64 spacing): a relative error of ~2e-13 / dt,
    # plus the stencil's truncation, ~ (n_pass dt)^4 ~ 4e-11
    tol = r * n_pass * (1e-9 + 2e-12 / dt[:, 0])
    assert np.all(np.abs(u[:, cols[3]] - vn) < tol)
    assert np.all(np.abs(u[:, cols[4]] - ve) < tol)
    # depth and line-of-sight velocity through their transforms: z = rho sinh(zeta), vz = vz_max tanh(eta)
    rho = np.hypot(u[:, cols[0]], u[:, cols[1]])
    z_mas = rho * np.sinh(u[:, cols[2]])
    mu = GM_SUN_AU3_PER_YR2 * phys["mass_msun"]
    s = phys["distance_pc"] / 1000.0
    v_max = np.sqrt(2 * mu / (rho * np.cosh(u[:, cols[2]]) * s) - (u[:, cols[3]] ** 2 + u[:, cols[4]] ** 2) * s * s)
    if velocities:  # sampled as measured (km/s)
        np.testing.assert_allclose(u[:, cols[5]], out["vz_kms"][:, 2], rtol=1e-10, atol=1e-9)
    else:  # vz = vz_max tanh(eta): every eta is a bound orbit
        vz = v_max * np.tanh(u[:, cols[5]])
        assert np.all(np.isfinite(vz)) and np.all(np.abs(vz) < v_max)
    # the depth against z = C X + H Y of orbitmass.core.orbit (its module docstring), C, H in mas here
    a_mas = np.cbrt(mu * phys["S1.period_yr"] ** 2 / (4 * np.pi ** 2)) / s
    _, _, _, _, C, H = thiele_innes(a_mas, phys["S1.cos_i"], phys["S1.sin_i"], np.cos(phys["S1.omega"]),
                                    np.sin(phys["S1.omega"]), np.cos(phys["S1.node"]), np.sin(phys["S1.node"]))
    e = phys["S1.ecc"]
    cE, sE = kepler_cos_sin(phys["S1.m0"], e)
    z_model = C * (cE - e) + H * np.sqrt(1 - e * e) * sE
    np.testing.assert_allclose(z_mas, z_model, rtol=1e-9, atol=1e-9 * a_mas.max())


@pytest.mark.parametrize("velocities", [True, False])
def test_round_trip(tmp_path, rng, velocities):
    # round trip elements -> state -> elements (common practice, no source): 1e-10 on every column
    space = _space(tmp_path, rng, velocities)
    theta = space.sample_prior(rng, 400)
    e = theta[:, space.index["S1.sqrte_cosw"]] ** 2 + theta[:, space.index["S1.sqrte_sinw"]] ** 2
    theta = theta[e > 1e-4]  # omega is undefined at e = 0 (lambda still is)
    state = ReferenceState(space, ["S1"])
    back, log_jac = state.to_elements(state.to_state(theta))
    assert np.all(np.isfinite(log_jac))
    assert np.max(np.abs(back - theta)) < 1e-10


@pytest.mark.parametrize("velocities", [True, False])
def test_log_jacobian_against_finite_differences(tmp_path, rng, velocities):
    # source: numpy.linalg.slogdet of a central-difference Jacobian d theta / d u of the inverse map
    space, state, theta, u = _draws(tmp_path, rng, velocities, 8)
    for u0 in u:
        d = u0.size
        jac = np.zeros((d, d))
        for j in range(d):
            h = 1e-6 * max(1.0, abs(u0[j]))
            up, um = u0.copy(), u0.copy()
            up[j] += h
            um[j] -= h
            jac[:, j] = (state.to_elements(up[None])[0][0] - state.to_elements(um[None])[0][0]) / (2 * h)
        sign, logdet = np.linalg.slogdet(jac)
        assert sign != 0
        analytic = state.to_elements(u0[None])[1][0]
        assert abs(logdet - analytic) < 1e-5, (logdet, analytic)


def test_unbound_states_have_no_density(tmp_path, rng):
    # an escape speed state, v^2 > 2 GM / r, is not an ellipse (common practice, no source)
    space, state, theta, u = _draws(tmp_path, rng, True, 3)
    u[:, state.cols["S1"][3:5]] *= 100.0  # sky speed above the escape speed: no vz makes it bound
    _, log_jac = state.to_elements(u)
    assert np.all(log_jac == -np.inf)
    post = StatePosterior(LogPosterior(space), state)
    assert np.all(post(u) == -np.inf)


def test_rule_picks_short_arcs_only(tmp_path, rng):
    # the rule of inference.initialise: data span below ARC_FRACTION of the period at the mode
    space = _space(tmp_path, rng, True)
    best = space.pack({"mass_msun": 1e6, "distance_pc": 5000.0, "S1.period_yr": 40.0, "S1.ecc": 0.3,
                       "S1.omega": 0.5, "S1.cos_i": 0.3, "S1.node": 3.5, "S1.m0": 0.1, "systemic": 0.0})[0]
    assert reference_state_companions(space, best) == ["S1"]  # 10 yr of 40
    short = space.pack({"mass_msun": 1e6, "distance_pc": 5000.0, "S1.period_yr": 12.0, "S1.ecc": 0.3,
                        "S1.omega": 0.5, "S1.cos_i": 0.3, "S1.node": 3.5, "S1.m0": 0.1, "systemic": 0.0})[0]
    assert reference_state_companions(space, short) == []  # 10 yr of 12


def _quantiles(chain, burn, col):
    kept = chain[burn:, :, col]
    q = np.quantile(kept.ravel(), [0.16, 0.5, 0.84])
    ess = float(diagnostics.bulk_ess(kept[:, :, None])[0])
    return q, float(np.std(kept)), ess


@pytest.mark.slow
def test_same_posterior_as_the_elements(tmp_path, rng):
    # Monte Carlo comparison (common practice, no source): both parametrisations sample one posterior, so
    # the 16/50/84 % points of ln M and ln P agree within 4 combined standard errors of a quantile,
    # se ~ sd * sqrt(q (1 - q) / ESS) / phi(z_q) for a near-Gaussian marginal.
    t_pos = np.sort(rng.uniform(2000, 2026, 30))  # 65 % of the 40-yr orbit: the elements mix too
    t_rv = np.sort(rng.uniform(2004, 2026, 15))
    space = _space(tmp_path, rng, True, t_pos=t_pos, t_rv=t_rv)
    post = LogPosterior(space)
    init = initialise_walkers(post, 48, rng)
    space = space.with_windows(init.windows)
    post = post.with_space(space)
    opts = SamplerOptions(max_steps=3000, min_steps=3000, progress=False)
    run_el = run_sampler(post, init.walkers, seed=1, options=opts)
    state = ReferenceState(space, ["S1"])
    p0 = state.to_state(init.walkers)
    run_u = run_sampler(StatePosterior(post, state), p0, seed=2, options=opts)
    chain_u, _ = state.to_elements(run_u.chain.reshape(-1, space.ndim))
    chain_u = chain_u.reshape(run_u.chain.shape)
    burn = 1000
    for name in ("ln_mass", "S1.ln_period"):
        col = space.index[name]
        qa, sda, essa = _quantiles(run_el.chain, burn, col)
        qb, sdb, essb = _quantiles(chain_u, burn, col)
        assert min(essa, essb) > 100, (name, essa, essb)
        se = np.array([np.sqrt(q * (1 - q)) / phi for q, phi in ((0.16, 0.242), (0.5, 0.399), (0.84, 0.242))])
        tol = 4.0 * se * np.hypot(sda / np.sqrt(essa), sdb / np.sqrt(essb))
        assert np.all(np.abs(qa - qb) < tol), (name, qa, qb, tol)
