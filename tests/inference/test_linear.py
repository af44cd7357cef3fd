"""The astrometry-only fast path (orbitmass.inference.linear) against independent computations.

* the flat-prior marginal likelihood against scipy's multivariate normal (the
  exact Gaussian integral as the limit of a wide Gaussian prior) and numpy's
  least squares;
* the importance weight against the stated priors divided by a finite-difference
  Jacobian of ``campbell_to_thiele_innes``, and against the priors themselves
  (weighted draws of the constants follow the stated priors);
* the key test (slow): on a simulated partial orbit the fast path and the plain
  sampler of every element give the same posterior within Monte Carlo error,
  while the same draws without the prior correction do not.
"""

from __future__ import annotations

import math
import pickle
import textwrap
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize, stats

from orbitmass.core.elements import campbell_to_thiele_innes, thiele_innes_jacobian_log, thiele_innes_to_campbell
from orbitmass.io.target import read_target
from orbitmass.inference.linear import (
    SIN2_FLOOR,
    LinearAstrometryPosterior,
    LinearPathError,
    applies,
    expand,
    fit_linear,
    ineligible_reasons,
    kish_ess,
    pareto_khat,
    systematic_resample,
)
from orbitmass.model.parameters import ParameterSpace
from orbitmass.core.physics import mass_msun
from orbitmass.demo.simulate import TrueOrbit

from tests.helpers.targets import make_target

PARALLAX = 'parallax = { dist = "normal", mean = "40 mas", sd = "0.4 mas" }'


def _tiny_target(folder: Path, *, companion_toml: str = "", polar: bool = False) -> Path:
    """Five invented east/north rows with unequal, correlated errors (and optionally one polar row)."""
    folder.mkdir(parents=True, exist_ok=True)
    rows = [
        "jyear,east_mas,north_mas,east_err_mas,north_err_mas,corr",
        "2001.3,12.1,-30.4,0.8,1.1,0.3",
        "2003.9,25.7,-11.2,0.5,0.9,-0.45",
        "2006.2,18.3,14.9,1.2,0.7,0.1",
        "2008.8,-4.6,22.5,0.6,0.6,0.6",
        "2011.5,-19.9,3.3,0.9,1.4,-0.2",
    ]
    if polar:
        rows[0] = rows[0].replace("corr", "corr,rho_mas,theta_deg,rho_err_mas,theta_err_deg")
        rows[1:] = [r + ",,,," for r in rows[1:]]
        rows.append("2013.0,,,,,,21.0,250.0,1.0,2.0")
    (folder / "pos.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    text = f"""
    [target]
    name = "tiny invented binary"
    reference_epoch = 2006.0

    [distance]
    {PARALLAX}

    [[companion]]
    name = "K1"
    astrometry = "pos.csv"
    {companion_toml}
    """
    path = folder / "target.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


@pytest.fixture
def tiny(tmp_path):
    space = ParameterSpace(read_target(_tiny_target(tmp_path / "tiny")))
    return space, LinearAstrometryPosterior(space, rng=np.random.default_rng(5))


def _kepler_reference(mean: float, ecc: float) -> float:
    """E from M by bracketed root finding (scipy brentq), independent of orbitmass.core.kepler."""
    m = math.remainder(mean, 2 * math.pi)
    return optimize.brentq(lambda x: x - ecc * math.sin(x) - m, -math.pi - 1, math.pi + 1, xtol=1e-15)


def _design(space, period_yr, ecc, m0):
    """Stacked data y, covariance S and design D (rows east_k, north_k; columns A, B, F, G)."""
    astro = space.target.companions[0].astrometry
    rows_d, y, blocks = [], [], []
    for k in range(len(astro)):
        big_e = _kepler_reference(m0 + 2 * math.pi * (astro.t_yr[k] - space.t_ref) / period_yr, ecc)
        x, yy = math.cos(big_e) - ecc, math.sqrt(1 - ecc**2) * math.sin(big_e)
        rows_d += [[0.0, x, 0.0, yy], [x, 0.0, yy, 0.0]]  # east = B X + G Y, north = A X + F Y
        y += [astro.value1[k], astro.value2[k]]
        s1, s2, r = astro.err1[k], astro.err2[k], astro.corr[k]
        blocks.append(np.array([[s1 * s1, r * s1 * s2], [r * s1 * s2, s2 * s2]]))
    cov = np.zeros((2 * len(blocks), 2 * len(blocks)))
    for k, b in enumerate(blocks):
        cov[2 * k: 2 * k + 2, 2 * k: 2 * k + 2] = b
    return np.array(y), cov, np.array(rows_d)


# ------------------------------------------------------------ marginal likelihood
def test_flat_marginal_likelihood_is_the_gaussian_integral(tiny):
    space, post = tiny
    period, ecc, m0 = 9.3, 0.41, 1.1
    theta = post.to_theta(period, ecc, m0)
    got = float(post.log_marginal_flat(theta)[0])
    y, cov, design = _design(space, period, ecc, m0)
    # With a prior beta ~ N(beta0, s^2 I) the evidence is N(y; D beta0, S + s^2 D D^T) (Gaussian
    # marginalisation, e.g. Bishop 2006, Pattern Recognition and Machine Learning, eq. 2.115);
    # times (2 pi s^2)^2, the height of that prior, it tends to the flat-prior integral as
    # s -> infinity, with a relative error of order (|beta_hat - beta0|^2 + tr N^-1) / s^2.
    # beta0 is numpy's least-squares solution, so s = 1e3 already leaves only about 1e-6
    # (measured 1.2e-6 at s = 1e3 and 1.0e-6 at 2e3 with numpy 2.4 / scipy 1.17; at 3e3 the
    # reference itself already loses digits to the condition number of S + s^2 D D^T: 2.5e-5).
    white = np.linalg.cholesky(np.linalg.inv(cov)).T
    beta0, *_ = np.linalg.lstsq(white @ design, white @ y, rcond=None)
    refs = []
    for s in (1e3, 2e3):
        ref = stats.multivariate_normal(mean=design @ beta0, cov=cov + s * s * design @ design.T).logpdf(y)
        refs.append(ref + 2.0 * math.log(2 * math.pi * s * s))
    assert abs(refs[0] - refs[1]) < 2e-5  # the limit has been reached (rounding grows with s)
    assert got == pytest.approx(refs[0], abs=2e-5)


def test_least_squares_solution_and_covariance_match_numpy(tiny):
    space, post = tiny
    period, ecc, m0 = 9.3, 0.41, 1.1
    sol = post.solve(post.to_theta(period, ecc, m0))
    y, cov, design = _design(space, period, ecc, m0)
    # generalised least squares by whitening with the Cholesky factor of S (numpy.linalg)
    white = np.linalg.cholesky(np.linalg.inv(cov)).T
    beta_ref, *_ = np.linalg.lstsq(white @ design, white @ y, rcond=None)
    normal_ref = design.T @ np.linalg.solve(cov, design)
    resid = y - design @ beta_ref
    chi2_ref = float(resid @ np.linalg.solve(cov, resid))
    assert np.allclose(sol["beta_hat"][0], beta_ref, rtol=1e-9, atol=1e-9)
    assert float(sol["chi2_min"][0]) == pytest.approx(chi2_ref, rel=1e-8)
    assert float(sol["log_det"][0]) == pytest.approx(np.linalg.slogdet(normal_ref)[1], rel=1e-10)


# ------------------------------------------------------------ weights
def _fd_jacobian_log(a, inc, w, node, h=1e-6):
    """ln |det d(A,B,F,G)/d(a,i,w,W)| by central differences of campbell_to_thiele_innes."""
    x0 = np.array([a, inc, w, node])
    jac = np.zeros((4, 4))
    for j in range(4):
        step = h * max(1.0, abs(x0[j]))
        xp, xm = x0.copy(), x0.copy()
        xp[j] += step
        xm[j] -= step
        plus, minus = campbell_to_thiele_innes(*xp)[:4], campbell_to_thiele_innes(*xm)[:4]
        jac[:, j] = (np.array(plus) - np.array(minus)) / (2 * step)
    return math.log(abs(np.linalg.det(jac)))


def test_importance_weight_is_prior_over_jacobian(tiny):
    space, post = tiny
    rng = np.random.default_rng(11)
    mass_prior = space.target.central_priors["mass"]
    for _ in range(8):
        a = rng.uniform(2.0, 200.0)
        inc = rng.uniform(0.15, math.pi - 0.15)
        w, node = rng.uniform(0, 2 * math.pi), rng.uniform(0, math.pi)
        dist, period = rng.uniform(10.0, 40.0), rng.uniform(1.0, 60.0)
        mass = float(mass_msun(a * dist / 1000.0, period))
        h = 1e-6 * a
        dm_da = (mass_msun((a + h) * dist / 1000.0, period) - mass_msun((a - h) * dist / 1000.0, period)) / (2 * h)
        log_j = _fd_jacobian_log(a, inc, w, node)
        assert log_j == pytest.approx(float(thiele_innes_jacobian_log(a, inc)), abs=1e-6)
        # stated priors: p_M(M) |dM/da|, isotropic sin(i)/2, uniform omega and Omega (1/(2 pi) each),
        # two (omega, Omega) solutions per set of constants
        expected = (float(mass_prior.log_pdf(mass)) + math.log(dm_da) + math.log(math.sin(inc) / 2)
                    + math.log(2.0 / (2 * math.pi) ** 2) - log_j)
        got_elements = float(post.log_weight(np.array([mass]), np.array([a]), np.array([inc]),
                                             np.array([w]), np.array([node]))[0])
        beta = np.array(campbell_to_thiele_innes(a, inc, w, node)[:4])
        got_constants = float(post.log_g(beta, dist, period))
        assert got_elements == pytest.approx(expected, abs=1e-6)
        assert got_constants == pytest.approx(expected, abs=1e-6)


def _weighted_ks(x, log_w, cdf):
    """KS distance between the weighted empirical distribution of x and a model cdf."""
    order = np.argsort(x)
    w = np.exp(log_w[order] - np.max(log_w))
    w /= w.sum()
    upper = np.cumsum(w)
    model = cdf(x[order])
    return float(max(np.max(upper - model), np.max(model - (upper - w))))


def test_weights_turn_draws_of_the_constants_into_the_stated_priors(tiny):
    """Without data: draws of (A, B, F, G) of known density q, weighted by g / q, follow the stated priors."""
    space, post = tiny
    rng = np.random.default_rng(21)
    n, r1, r2 = 400_000, 5.0, 100.0
    # isotropic directions in 4-D, |beta| log-uniform on [r1, r2]: q(beta) ~ |beta|^-4
    direction = rng.standard_normal((n, 4))
    radius = np.exp(rng.uniform(math.log(r1), math.log(r2), n))
    beta = radius[:, None] * direction / np.linalg.norm(direction, axis=1)[:, None]
    dist = post.draw_distance(rng, n)
    period = 0.5  # masses 8e-3 to 22 Msun over the kept range, inside the default mass prior
    a, inc, w, node = thiele_innes_to_campbell(*beta.T)
    # |beta|^2 = a^2 (1 + cos^2 i): every orientation of a in [r1, r2 / sqrt(2)] lies in the shell
    a1, a2 = r1, r2 / math.sqrt(2.0)
    keep = (a >= a1) & (a <= a2)
    log_w = post.log_g(beta[keep], dist[keep], period) + 4.0 * np.log(radius[keep])
    a, inc, w, node = a[keep], inc[keep], w[keep], node[keep]
    n_eff = kish_ess(log_w)
    assert n_eff > 5000
    # KS critical value at alpha = 1e-3 for the effective size (Smirnov limit distribution,
    # scipy.stats.kstwobign); using Kish's n for weighted samples is common practice, no source
    crit = stats.kstwobign.isf(1e-3) / math.sqrt(n_eff)
    checks = {
        "cos i ~ U(-1, 1) (isotropic)": (np.cos(inc), stats.uniform(-1, 2).cdf),
        "omega ~ U(0, 2 pi)": (w, stats.uniform(0, 2 * math.pi).cdf),
        "Omega ~ U(0, pi) (half-turn window)": (node, stats.uniform(0, math.pi).cdf),
        # log-uniform mass prior and M ~ a^3 at fixed P, d: ln a uniform on the kept range
        "ln a ~ U(ln a1, ln a2)": (np.log(a), stats.uniform(math.log(a1), math.log(a2 / a1)).cdf),
    }
    for label, (x, cdf) in checks.items():
        assert _weighted_ks(x, log_w, cdf) < crit, label
    # the unweighted draws are far from isotropic: the check has power
    assert _weighted_ks(np.cos(inc), np.zeros(inc.size), stats.uniform(-1, 2).cdf) > 10 * crit


def test_shape_factor_is_the_mean_weight_over_the_common_draws(tiny):
    space, post = tiny
    theta = post.to_theta(np.array([9.3, 14.0]), np.array([0.41, 0.1]), np.array([1.1, -2.0]))
    sol = post.solve(theta)
    got = post.log_shape(sol)
    for row in range(2):
        period, ecc, m0 = (float(v[row]) for v in post.physical(theta))
        y, cov, design = _design(space, period, ecc, m0)
        normal = design.T @ np.linalg.solve(cov, design)
        chol = np.linalg.cholesky(normal)
        draws = sol["beta_hat"][row][None, :] + np.linalg.solve(chol.T, post.zeta).T  # N^-1 = L^-T L^-1
        a, inc, w, node = thiele_innes_to_campbell(*draws.T)
        mass = mass_msun(a * post.d_draws / 1000.0, period)
        log_g = post.log_weight(mass, a, inc, w, node)  # inside the wide mass prior: no clipping
        # the surrogate replaces sin^2 i by sin^2 i + SIN2_FLOOR (orbitmass.inference.linear, choice 2)
        log_g += np.log(np.sin(inc) ** 2 / (np.sin(inc) ** 2 + SIN2_FLOOR))
        ref = float(np.log(np.mean(np.exp(log_g))))
        assert float(got[row]) == pytest.approx(ref, abs=1e-8)


def test_fast_target_is_the_full_posterior_in_other_variables(tiny):
    """The fast path's joint target equals orbitmass.model.likelihood.LogPosterior up to the Jacobian.

    In the variables (ln P, sqrt(e) cos M0, sqrt(e) sin M0, A, B, F, G, d) the fast path
    targets prior3 x L(beta) x p(d) x g. Mapped back to the sampled variables of the
    normal path with a finite-difference Jacobian (change of variables), it must differ
    from the normal path's log posterior by one constant at every point.
    """
    from orbitmass.model.likelihood import LogPosterior
    from orbitmass.core.orbit import thiele_innes

    space, post = tiny
    full = LogPosterior(space)
    rng = np.random.default_rng(8)
    theta3 = post.to_theta(rng.uniform(8.0, 11.0, 12), rng.uniform(0.2, 0.6, 12), rng.uniform(0.5, 1.7, 12))
    theta_full, _, _ = expand(post, theta3, rng)
    space.set_centres(theta_full)
    theta_full = space.wrap_angles(theta_full)
    parallax = space.target.distance.parallax

    def to_fast(t):
        phys = space.unpack(t[None, :])
        _, a_mas = space.semimajor_axes(phys, "K1")
        w, node = phys["K1.omega"], phys["K1.node"]
        consts = thiele_innes(a_mas, phys["K1.cos_i"], phys["K1.sin_i"], np.cos(w), np.sin(w), np.cos(node),
                              np.sin(node))[:4]
        x3 = post.to_theta(phys["K1.period_yr"], phys["K1.ecc"], phys["K1.m0"])[0]
        return np.concatenate([x3, np.ravel(consts), phys["distance_pc"]])

    diffs = []
    for t in theta_full:
        y = to_fast(t)
        jac = np.zeros((8, 8))
        for j in range(8):
            step = 1e-6 * max(1.0, abs(t[j]))
            tp, tm = t.copy(), t.copy()
            tp[j] += step
            tm[j] -= step
            jac[:, j] = (to_fast(tp) - to_fast(tm)) / (2 * step)
        d = y[7]
        log_pd = float(parallax.log_pdf(1000.0 / d)) + math.log(1000.0 / d**2)  # prior density of d
        fast = (float(post.log_prior(y[None, :3])[0]) + float(full.log_likelihood(t[None, :])[0]) + log_pd
                + float(post.log_g(y[3:7], d, math.exp(y[0]))))
        diffs.append(float(full(t[None, :])[0]) - fast - np.linalg.slogdet(jac)[1])
    assert np.ptp(diffs) < 1e-6


# ------------------------------------------------------------ plumbing
def test_posterior_pickles_and_counts_evaluations(tiny):
    space, post = tiny
    theta = post.to_theta(np.array([9.3, 14.0, 30.0]), np.array([0.41, 0.1, 0.7]), np.array([1.1, -2.0, 0.3]))
    before = post(theta)
    clone = pickle.loads(pickle.dumps(post))
    assert np.array_equal(clone(theta), before)
    assert post.n_sets == 3 and clone.n_sets == 6  # the clone carries the count it had, then adds
    # outside the priors: e >= 1 and a period above the default 1e4 yr bound
    bad = post(np.array([[math.log(9.3), 1.2, 0.0], [math.log(2e4), 0.1, 0.1]]))
    assert np.all(bad == -np.inf)


def test_systematic_resampling_counts_and_kish():
    rng = np.random.default_rng(3)
    w = rng.uniform(0.0, 1.0, 50) ** 3
    n = 1000
    idx = systematic_resample(np.log(w), rng, n)
    counts = np.bincount(idx, minlength=w.size)
    expected = n * w / w.sum()
    # systematic resampling gives each draw floor or ceil of n w_i copies
    # (Douc, Cappe & Moulines 2005, ISPA, "Comparison of resampling schemes for particle filtering")
    assert np.all(counts >= np.floor(expected)) and np.all(counts <= np.ceil(expected))
    # Kish (1965): equal weights give n; a single non-zero weight gives 1
    assert kish_ess(np.zeros(40)) == pytest.approx(40.0)
    assert kish_ess(np.r_[0.0, np.full(9, -np.inf)]) == pytest.approx(1.0)
    with pytest.raises(LinearPathError):
        systematic_resample(np.full(4, -np.inf), rng)


@pytest.mark.parametrize("companion_toml, polar, reason", [
    ("", False, None),
    ('periastron_time = { dist = "uniform", low = 2000.0, high = 2020.0 }', False, None),
    ("", True, "position-angle"),
    ('eccentricity = { dist = "fixed", value = 0.3 }', False, "eccentricity is fixed"),
    ('inclination = { dist = "uniform", low = "0 deg", high = "180 deg" }', False, "isotropic"),
    ('ascending_node = { dist = "uniform", low = "0 deg", high = "90 deg" }', False, "ascending_node"),
])
def test_which_targets_take_the_fast_path(tmp_path, companion_toml, polar, reason):
    space = ParameterSpace(read_target(_tiny_target(tmp_path / "t", companion_toml=companion_toml, polar=polar)))
    reasons = ineligible_reasons(space)
    assert applies(space) is (reason is None)
    if reason is not None:
        assert any(reason in r for r in reasons), reasons


def test_velocities_take_the_normal_path(tmp_path, rng):
    truth = TrueOrbit(mass_msun=2.3, distance_pc=25.0, period_yr=30.0, eccentricity=0.35, inclination_deg=120.0,
                      arg_periastron_deg=250.0, ascending_node_deg=300.0, periastron_time=2001.0)
    path = make_target(tmp_path, truth, rng=rng, t_pos=np.linspace(1990, 2020, 10), t_rv=np.linspace(1995, 2020, 5),
                       pos_err=2.0, rv_err=1.0, distance_toml=PARALLAX)
    space = ParameterSpace(read_target(path))
    assert not applies(space)
    assert any("velocity" in r for r in ineligible_reasons(space))
    with pytest.raises(ValueError, match="does not apply"):
        LinearAstrometryPosterior(space)


def test_expand_packs_the_full_layout(tiny):
    space, post = tiny
    theta = post.to_theta(np.full(200, 9.3), np.full(200, 0.41), np.full(200, 1.1))
    full, log_w, info = expand(post, theta, np.random.default_rng(4))
    phys = space.unpack(full)
    assert full.shape == (200, space.ndim)
    assert np.allclose(phys["K1.period_yr"], 9.3) and np.allclose(phys["K1.ecc"], 0.41)
    assert np.allclose(np.mod(phys["K1.m0"] - 1.1 + math.pi, 2 * math.pi) - math.pi, 0.0, atol=1e-12)
    assert np.allclose(phys["mass_msun"], info["mass_msun"])
    # the packed elements give back the drawn constants (model.thiele_innes via elements)
    A, B, F, G, _, _ = campbell_to_thiele_innes(info["a_mas"], np.arccos(phys["K1.cos_i"]), phys["K1.omega"],
                                                phys["K1.node"])
    assert np.allclose(np.stack([A, B, F, G], axis=1), info["beta"], rtol=1e-9, atol=1e-9)
    assert np.all(np.isfinite(log_w))


def test_pareto_shape_of_known_tails():
    rng = np.random.default_rng(17)
    # weights drawn from a generalized Pareto distribution of shape 0.6 (scipy.stats.genpareto)
    heavy = stats.genpareto(c=0.6).rvs(size=20_000, random_state=rng)
    assert pareto_khat(np.log(heavy)) == pytest.approx(0.6, abs=0.15)
    # bounded weights have a negative shape
    assert pareto_khat(np.log(rng.uniform(0.5, 1.0, 20_000))) < 0.0
    assert pareto_khat(np.full(3, 0.0)) == math.inf


def test_fit_linear_on_a_well_covered_orbit(tmp_path, rng):
    """End to end on a full orbit: the importance-sampling branch, the run layout, the truth recovered."""
    from orbitmass.inference.sampler import SamplerOptions

    truth = TrueOrbit(mass_msun=2.3, distance_pc=25.0, period_yr=30.0, eccentricity=0.35, inclination_deg=120.0,
                      arg_periastron_deg=250.0, ascending_node_deg=300.0, periastron_time=2001.0)
    path = make_target(tmp_path, truth, rng=rng, t_pos=np.sort(rng.uniform(1990, 2025, 25)), pos_err=2.0,
                       distance_toml=PARALLAX)
    space = ParameterSpace(read_target(path))
    theta, lp, info = fit_linear(space, np.random.default_rng(1), SamplerOptions(progress=False, max_retained=20_000))
    diag = info["diagnostics"]
    assert diag["sampler_3d"].startswith("importance") and diag["khat_3d"] < 0.5
    assert theta.shape == (20_000, space.ndim) and np.all(np.isfinite(lp))
    assert info["run"].converged and info["run"].chain.shape[1:] == (64, space.ndim)
    assert diag["ess_mass"] == pytest.approx(diag["kish_ess"]) and not diag["fallback_recommended"]
    phys = space.unpack(theta)
    # the invented truth inside the central 95 % (common practice, no source)
    for key, value in (("mass_msun", truth.mass_msun), ("S1.period_yr", truth.period_yr),
                       ("S1.ecc", truth.eccentricity), ("S1.cos_i", math.cos(math.radians(truth.inclination_deg)))):
        lo, hi = np.quantile(phys[key], [0.025, 0.975])
        assert lo <= value <= hi, key


# ------------------------------------------------------------ the key test
def _partial_orbit(folder: Path) -> Path:
    """An invented binary seen over 2/3 of its 30 yr orbit, 20 mas errors on a 0.5 arcsec orbit.

    Weak enough data that the prior matters (the flat-constants posterior is visibly
    different), without the long-period funnel of shorter arcs (see the module report).
    """
    rng = np.random.default_rng(7)
    truth = TrueOrbit(mass_msun=2.3, distance_pc=25.0, period_yr=30.0, eccentricity=0.35, inclination_deg=120.0,
                      arg_periastron_deg=250.0, ascending_node_deg=300.0, periastron_time=2001.0)
    t_pos = np.sort(rng.uniform(2000, 2022, 20))
    return make_target(folder, truth, rng=rng, t_pos=t_pos, pos_err=20.0, distance_toml=PARALLAX)


def _ess(run, space, name):
    idx = {"mass_msun": ["ln_mass"], "S1.period_yr": ["S1.ln_period"],
           "S1.eccentricity": ["S1.sqrte_cosw", "S1.sqrte_sinw"], "S1.inclination_deg": ["S1.cos_i"]}[name]
    return float(min(run.ess[space.index[v]] for v in idx))


@pytest.mark.slow
def test_fast_path_matches_direct_sampling(tmp_path):
    """Fast path and plain sampler of all elements agree; without the prior correction they do not.

    Needs an unbiased ensemble move mix in orbitmass.inference.sampler.default_moves: emcee 3.1.6's
    DESnookerMove applies half the Hastings factor (ter Braak & Vrugt 2008, Stat. Comput.
    18, 435, give (|x* - z| / |x - z|)^(d - 1); emcee uses the square root of it); alone
    on an 8-D Gaussian it returns standard deviations 0.81 of the true ones (measured), and
    at 20 % of the mix both paths come out narrow, the 8-D one more, by about 3 standard
    errors in the mass quantiles here. With DEMove alone this test passes.
    """
    from orbitmass.inference.initialise import initialise_walkers
    from orbitmass.model.likelihood import LogPosterior
    from orbitmass.results import derive_samples
    from orbitmass.inference.sampler import SamplerOptions, run_sampler

    path = _partial_orbit(tmp_path / "arc")
    options = SamplerOptions(progress=False)
    # the normal path: every element sampled (what Fit.fit runs)
    space_n = ParameterSpace(read_target(path))
    post_n = LogPosterior(space_n)
    rng_n = np.random.default_rng(2)
    init = initialise_walkers(post_n, 64, rng_n)
    run_n = run_sampler(post_n, init.walkers, seed=int(rng_n.integers(2**31 - 1)), options=options)
    theta_n, lp_n = run_n.retained()
    normal = derive_samples(space_n, theta_n, lp_n)
    # the fast path
    space_f = ParameterSpace(read_target(path))
    assert applies(space_f)
    theta_f, lp_f, info = fit_linear(space_f, np.random.default_rng(1), options)
    fast = derive_samples(space_f, theta_f, lp_f)
    assert run_n.converged and info["run"].converged
    assert info["diagnostics"]["kish_fraction"] > 0.5 and not info["diagnostics"]["fallback_recommended"]
    # the same draws without the prior correction (flat prior on A, B, F, G): must differ
    # (the fast samples' (P, e, M0), reweighted by 1 / h ~ 1 / E[g], follow the flat-constants marginal)
    post3 = info["posterior"]
    phys = space_f.unpack(theta_f)
    th3 = post3.to_theta(phys["S1.period_yr"], phys["S1.ecc"], phys["S1.m0"])
    flat_idx = systematic_resample(-post3.log_shape(post3.solve(th3)), np.random.default_rng(3))
    theta_u, _, _ = expand(LinearAstrometryPosterior(space_f, n_draws=0), th3[flat_idx], np.random.default_rng(4))
    flat = derive_samples(space_f, space_f.wrap_angles(theta_u))

    # Monte Carlo standard errors of sample quantiles: sqrt(p (1 - p) / n) / f(x_p) (asymptotic
    # variance of a sample quantile, e.g. Serfling 1980, Approximation Theorems of Mathematical
    # Statistics, sec. 2.3), with f estimated by a Gaussian kernel density (scipy.stats.gaussian_kde)
    # and n the effective sample size; two independent runs add in quadrature.
    # KS: Smirnov's two-sample limit at alpha = 1e-3 (scipy.stats.kstwobign) with the ESS as n.
    c_ks = stats.kstwobign.isf(1e-3)
    flat_differs = []
    for name in ("mass_msun", "S1.period_yr", "S1.eccentricity", "S1.inclination_deg"):
        x_f, x_n = fast[name].to_numpy(), normal[name].to_numpy()
        n_f, n_n = _ess(info["run"], space_f, name), _ess(run_n, space_n, name)
        for p in (0.16, 0.5, 0.84):
            q_f, q_n = np.quantile(x_f, p), np.quantile(x_n, p)
            se_f = math.sqrt(p * (1 - p) / n_f) / float(stats.gaussian_kde(x_f)(q_f)[0])
            se_n = math.sqrt(p * (1 - p) / n_n) / float(stats.gaussian_kde(x_n)(q_n)[0])
            assert abs(q_f - q_n) < 3.0 * math.hypot(se_f, se_n), (name, p, q_f, q_n, se_f, se_n)
        ks_crit = c_ks * math.sqrt((n_f + n_n) / (n_f * n_n))
        assert stats.ks_2samp(x_f, x_n).statistic < ks_crit, name
        flat_differs.append(stats.ks_2samp(flat[name].to_numpy(), x_n).statistic > ks_crit)
    assert sum(flat_differs) >= 2  # the comparison can tell a wrong prior apart


def _quadrature_quantiles(post_shape, post_flat, lnp, probs):
    """Quantiles of P and e of the 3-D marginal by quadrature (no sampling).

    For every ln P of the grid the density is integrated over the (sqrt(e) cos M0,
    sqrt(e) sin M0) disc by the midpoint rule on a 121 x 121 grid, zoomed (with the cheap
    flat-constants density) onto the region that holds the mass until no cell carries more
    than 0.1 % of it; the last level uses ``post_shape``, whose many common draws make h
    the conditional mean of g, i.e. the marginal of the stated posterior.
    """
    slices, e_vals, e_wts = [], [], []
    for lv in lnp:
        lo, hi = np.array([-1.0, -1.0]), np.array([1.0, 1.0])
        for _ in range(8):
            xs, ys = np.linspace(lo[0], hi[0], 121), np.linspace(lo[1], hi[1], 121)
            gx, gy = np.meshgrid(xs, ys, indexing="ij")
            pts = np.column_stack([np.full(gx.size, lv), gx.ravel(), gy.ravel()])
            w = post_flat(pts)
            w = np.exp(w - np.max(w))
            big = np.nonzero(w.reshape(121, 121) > 1e-12)
            if w.max() / w.sum() < 1e-3 and min(np.ptp(big[0]), np.ptp(big[1])) > 40:
                break
            i0, i1 = max(big[0].min() - 2, 0), min(big[0].max() + 2, 120)
            j0, j1 = max(big[1].min() - 2, 0), min(big[1].max() + 2, 120)
            lo, hi = np.array([xs[i0], ys[j0]]), np.array([xs[i1], ys[j1]])
        keep = w > 1e-12
        dens = np.full(w.size, -np.inf)
        dens[keep] = post_shape(pts[keep])
        top = np.max(dens)
        cell = (xs[1] - xs[0]) * (ys[1] - ys[0])
        slices.append(top + math.log(np.sum(np.exp(dens - top)) * cell))
        e_vals.append(gx.ravel()[keep] ** 2 + gy.ravel()[keep] ** 2)
        e_wts.append((dens[keep], top))
    slices = np.array(slices)
    mass = np.exp(slices - slices.max())
    mass /= mass.sum()
    edges = np.concatenate([[lnp[0] - 0.5 * (lnp[1] - lnp[0])], 0.5 * (lnp[1:] + lnp[:-1]),
                            [lnp[-1] + 0.5 * (lnp[1] - lnp[0])]])
    cdf = np.concatenate([[0.0], np.cumsum(mass)])
    q_period = np.exp(np.interp(probs, cdf, edges))
    e_all = np.concatenate(e_vals)
    w_all = np.concatenate([mass[k] * np.exp(d - t) / np.sum(np.exp(d - t)) for k, (d, t) in enumerate(e_wts)])
    order = np.argsort(e_all)
    ce = np.cumsum(w_all[order])
    q_ecc = np.interp(probs, ce / ce[-1], e_all[order])
    return q_period, q_ecc, float(mass[:2].sum() + mass[-2:].sum())


@pytest.mark.slow
def test_fast_path_matches_quadrature(tmp_path):
    """Period and eccentricity of the fast path against numerical integration of the same posterior."""
    from orbitmass.results import derive_samples
    from orbitmass.inference.sampler import SamplerOptions

    path = _partial_orbit(tmp_path / "arc")
    space = ParameterSpace(read_target(path))
    theta, lp, info = fit_linear(space, np.random.default_rng(1), SamplerOptions(progress=False))
    fast = derive_samples(space, theta, lp)
    post_shape = LinearAstrometryPosterior(space, n_draws=128, rng=np.random.default_rng(9))
    post_flat = LinearAstrometryPosterior(space, n_draws=0)
    ln_p = np.log(fast["S1.period_yr"].to_numpy())
    lnp = np.linspace(ln_p.mean() - 7 * ln_p.std(), ln_p.mean() + 7 * ln_p.std(), 90)
    probs = np.array([0.16, 0.5, 0.84])
    q_period, q_ecc, edge_mass = _quadrature_quantiles(post_shape, post_flat, lnp, probs)
    assert edge_mass < 1e-3  # the grid spans the posterior
    for name, q_ref, col in (("S1.period_yr", q_period, "S1.ln_period"), ("S1.eccentricity", q_ecc, "S1.sqrte_cosw")):
        x = fast[name].to_numpy()
        n_eff = float(info["run"].ess[space.index[col]])
        for p, ref in zip(probs, q_ref):
            q = np.quantile(x, p)
            # standard error of a sample quantile (Serfling 1980, sec. 2.3), density by scipy's KDE
            se = math.sqrt(p * (1 - p) / n_eff) / float(stats.gaussian_kde(x)(q)[0])
            assert abs(q - ref) < 3.0 * se, (name, p, q, ref, se)
