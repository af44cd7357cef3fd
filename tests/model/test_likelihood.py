"""model/likelihood.py, the angle windows of model/parameters.py and Results.predict.

The log-likelihood is checked against scipy.stats.multivariate_normal (2x2 position
covariance with correlation) and scipy.stats.norm (velocities, variance sigma^2 +
jitter^2) summed by hand, with the model positions from the Campbell-element formula
of tests/helpers/orbit_reference.py (Heintz 1978, Double Stars, ch. 4; from memory) and the
velocity curve v = K [cos(nu + w) + e cos w], K = 2 pi a sin i / (P sqrt(1 - e^2))
(the radial-velocity formula of spectroscopic binaries, e.g. Hilditch 2001, An
Introduction to Close Binary Stars, eq. 2.44; from memory).
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from scipy import stats

from orbitmass.core.physics import semimajor_axis_au
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.inference.linear import applies, ineligible_reasons
from orbitmass.io.target import read_target
from orbitmass.model import likelihood as lk
from orbitmass.model.data import Astrometry
from orbitmass.model.likelihood import LogPosterior
from orbitmass.model.parameters import AngleWindows, ParameterSpace
from orbitmass.model.priors import Uniform
from orbitmass.results import Results, derive_samples

from tests.helpers.orbit_reference import KMS, ShiftTerm
from tests.helpers.orbit_reference import campbell as _campbell
from tests.helpers.orbit_reference import eccentric_anomaly as _eccentric_anomaly
from tests.helpers.targets import make_target

TRUTH = TrueOrbit(mass_msun=2.0, distance_pc=25.0, period_yr=10.0, eccentricity=0.4, inclination_deg=50.0,
                  arg_periastron_deg=30.0, ascending_node_deg=120.0, periastron_time=2008.0)
VALUES = {"mass_msun": 2.1, "distance_pc": 24.0, "S1.period_yr": 10.3, "S1.ecc": 0.35, "S1.omega": 0.6,
          "S1.node": 2.0, "S1.cos_i": 0.6, "S1.m0": 1.1, "offset.default": 0.0, "jitter.default": 0.7,
          "systemic": 1.5}


@pytest.fixture
def space(tmp_path, rng):
    path = make_target(tmp_path / "t", TRUTH, rng=rng, t_pos=np.sort(rng.uniform(2000, 2020, 12)),
                       t_rv=np.sort(rng.uniform(2001, 2020, 9)), pos_err=2.0, rv_err=1.0,
                       distance_toml='prior = { dist = "uniform", low = "5 pc", high = "80 pc" }',
                       extra_toml='[central]\n'
                                  'mass = { dist = "log-uniform", low = "0.1 solMass", high = "10 solMass" }\n'
                                  'systemic = { dist = "uniform", low = "-20 km / s", high = "20 km / s" }\n'
                                  '[instruments.default]\n'
                                  'jitter = { dist = "uniform", low = "0 km / s", high = "5 km / s" }\n')
    target = read_target(path)
    comp = target.companions[0]
    a = comp.astrometry
    n = len(a)
    polar = np.arange(n) % 3 == 0  # every third row as separation / position angle
    east, north = a.east_north()
    rho = np.hypot(east, north)
    theta = np.degrees(np.arctan2(east, north)) % 360.0
    astro = Astrometry(t_yr=a.t_yr, polar=polar, value1=np.where(polar, rho, east),
                       value2=np.where(polar, theta, north), err1=np.where(polar, 2.5, 2.0),
                       err2=np.where(polar, 0.8, 3.0), corr=np.where(polar, 0.0, np.linspace(-0.5, 0.6, n)))
    target = dataclasses.replace(target, companions=(dataclasses.replace(comp, astrometry=astro),))
    return ParameterSpace(target)


def _model(space, values):
    """Independent model positions (mas) and velocities (km/s) at the data epochs."""
    comp = space.target.companions[0]
    P, e, w, W, m0 = (values[f"S1.{k}"] for k in ("period_yr", "ecc", "omega", "node", "m0"))
    inc = math.acos(values["S1.cos_i"])
    a_au = float(semimajor_axis_au(values["mass_msun"], P))
    a_mas = a_au / values["distance_pc"] * 1000.0
    east, north, _ = _campbell(comp.astrometry.t_yr - (space.t_ref - 2010.0), P, e, m0, a_mas, inc, w, W)
    tv = comp.velocities.t_yr - (space.t_ref - 2010.0)
    E = _eccentric_anomaly(m0 + 2 * math.pi / P * (tv - 2010.0), e)
    nu = 2.0 * np.arctan2(math.sqrt(1 + e) * np.sin(E / 2), math.sqrt(1 - e) * np.cos(E / 2))
    K = 2 * math.pi * a_au * math.sin(inc) / (P * math.sqrt(1 - e * e)) * KMS
    rv = K * (np.cos(nu + w) + e * math.cos(w)) + values["systemic"]
    return east, north, rv


def test_log_likelihood_against_scipy(space):
    comp = space.target.companions[0]
    a, v = comp.astrometry, comp.velocities
    theta = space.pack(VALUES)
    assert {"jitter.default", "systemic"} <= set(space.names)
    values = {k: float(x[0]) for k, x in space.unpack(theta).items()}
    east, north, rv = _model(space, values)
    ref = 0.0
    for k in range(len(a)):
        if a.polar[k]:
            rho_m = math.hypot(east[k], north[k])
            th_m = math.degrees(math.atan2(east[k], north[k]))
            dth = (a.value2[k] - th_m + 180.0) % 360.0 - 180.0  # residual wrapped to +-180 deg
            ref += stats.norm.logpdf(a.value1[k], rho_m, a.err1[k]) + stats.norm.logpdf(dth, 0.0, a.err2[k])
        else:
            c = a.corr[k] * a.err1[k] * a.err2[k]
            cov = [[a.err1[k] ** 2, c], [c, a.err2[k] ** 2]]
            ref += stats.multivariate_normal.logpdf([a.value1[k], a.value2[k]], [east[k], north[k]], cov)
    sd = np.sqrt(v.rv_err_kms**2 + values["jitter.default"] ** 2)
    ref += float(np.sum(stats.norm.logpdf(v.rv_kms, rv + values["offset.default"], sd)))
    got = LogPosterior(space).log_likelihood(theta)[0]
    assert got == pytest.approx(ref, rel=1e-10, abs=1e-8)


def test_predict_is_the_likelihood_model(space):
    rng = np.random.default_rng(4)
    theta = space.sample_prior(rng, 40)
    res = Results(target=space.target, space=space, samples=derive_samples(space, theta), theta=theta,
                  chain=theta[None], log_prob=np.zeros((1, 40)), burn=0, thin=1, summary={})
    post = LogPosterior(res.space)
    phys = res.space.unpack(theta)
    t = np.linspace(2000.0, 2030.0, 33)
    ref = post.predict(phys, "S1", t_astro=t, t_vel=t)
    got = res.predict("S1", t_astro=t, t_vel=t)
    for key in ("east_mas", "north_mas", "rv_kms"):
        assert np.array_equal(got[key], ref[key])
    # per-row epochs give the same as one row at a time
    t2 = np.stack([np.linspace(2000.0 + k, 2010.0 + k, 7) for k in range(5)])
    many = res.predict("S1", t_astro=t2, rows=np.arange(5))
    for k in range(5):
        one = res.predict("S1", t_astro=t2[k], rows=np.array([k]))
        assert np.allclose(many["east_mas"][k], one["east_mas"][0], rtol=1e-14, atol=1e-12)
    # at the data epochs, the model matches the independent formula
    comp = space.target.companions[0]
    one = res.predict("S1", t_astro=comp.astrometry.t_yr, t_vel=comp.velocities.t_yr,
                      rows=np.array([0]))
    values = {k: float(phys[k][0]) for k in VALUES if k in phys}
    east, north, rv = _model(space, values)
    assert np.allclose(one["east_mas"][0], east, atol=1e-8)
    assert np.allclose(one["rv_kms"][0], rv, atol=1e-8)


def test_predict_builds_no_posterior(space, monkeypatch):
    theta = space.sample_prior(np.random.default_rng(1), 10)
    res = Results(target=space.target, space=space, samples=derive_samples(space, theta), theta=theta,
                  chain=theta[None], log_prob=np.zeros((1, 10)), burn=0, thin=1, summary={})

    def boom(*args, **kwargs):
        raise AssertionError("Results.predict built a LogPosterior")

    monkeypatch.setattr(lk.LogPosterior, "__init__", boom)
    out = res.predict("S1", t_astro=np.linspace(2000, 2010, 5))
    assert out["east_mas"].shape == (10, 5)


def test_windows_are_immutable(space):
    theta = space.pack(VALUES)
    before = space.windows
    win = space.windows_from(theta + 3.0)
    new = space.with_windows(win)
    assert space.windows == before and new.windows == win and new is not space
    assert new.windows_final and not space.windows_final
    with pytest.raises(RuntimeError):
        new.set_centres(theta)
    with pytest.raises(dataclasses.FrozenInstanceError):
        new.variables[0].centre = 1.0
    # the mapping form (checkpoints, run folders) round-trips
    assert AngleWindows.from_mapping(win.as_dict()) == win
    # a Results holds a space with final windows
    res = Results(target=space.target, space=space, samples=derive_samples(space, theta), theta=theta,
                  chain=theta[None], log_prob=np.zeros((1, 1)), burn=0, thin=1, summary={})
    assert res.space.windows_final and res.space.windows == space.windows


def test_model_terms_reach_the_likelihood_and_decline_the_fast_path(space, tmp_path, rng):
    with_term = ParameterSpace(space.target, terms=(ShiftTerm(),),
                               term_priors={"shift_kms": Uniform(low=-10.0, high=10.0)})
    assert "shift_kms" in with_term.names
    values = {**VALUES, "shift_kms": 2.5}
    theta = with_term.pack(values)
    post = LogPosterior(with_term)
    phys = with_term.unpack(theta)
    t = np.linspace(2000, 2010, 6)
    shifted = post.predict(phys, "S1", t_vel=t)["rv_kms"]
    plain = LogPosterior(space).predict(space.unpack(space.pack(VALUES)), "S1", t_vel=t)["rv_kms"]
    assert np.allclose(shifted - plain, 2.5, atol=1e-12)
    # the fast path declines by itself with a term that is not linear-safe
    path = make_target(tmp_path / "astro", TRUTH, rng=rng, t_pos=np.sort(rng.uniform(2000, 2020, 12)),
                       distance_toml='parallax = { dist = "normal", mean = "40 mas", sd = "1 mas" }')
    plain_space = ParameterSpace(read_target(path))
    assert applies(plain_space)

    class _Bend:
        name = "bend"
        parameters = ()
        linear_safe = False

    termed = ParameterSpace(plain_space.target, terms=(_Bend(),))
    reasons = ineligible_reasons(termed)
    assert not applies(termed) and any("linear_safe" in r and "bend" in r for r in reasons)
