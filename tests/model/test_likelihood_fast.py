"""The fused likelihood path and the grouped prior agree with the plain reference paths.

The plain paths (``LogPosterior.log_likelihood_reference``, every orbit through
``orbitmass.core.orbit.evaluate``; ``ParameterSpace.log_prior_reference``, one
variable at a time) are themselves checked against scipy.stats in
tests/model/test_likelihood.py. Here the fast paths must give the same numbers to
1e-12 relative on random parameter sets (common practice, no source: agreement to
round-off between two evaluations of one formula), for every kind of row and
frame: polar rows, correlated errors, sampled and fixed jitter, several
instruments with offsets, central-body rows with a mass ratio, the absolute
frame, several companions with shared and distinct epochs.
"""

from __future__ import annotations

import dataclasses
import pickle
import textwrap

import numpy as np
import pytest

from orbitmass.core.kepler import kepler_cos_sin, kepler_cos_sin_rows
from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv
from orbitmass.io.target import read_target
from orbitmass.model.data import Astrometry
from orbitmass.model.likelihood import LogPosterior
from orbitmass.model.parameters import ParameterSpace
from tests.helpers.fused_systems import truth_values, write_system

REL = 1e-12


def _near_truth(space: ParameterSpace, values: dict, rng, n: int, scale: float = 0.02) -> np.ndarray:
    """``n`` sampled vectors scattered about ``values`` (most inside the prior)."""
    theta0 = space.pack(values)[0]
    theta = theta0 + scale * rng.standard_normal((n, space.ndim)) * np.maximum(np.abs(theta0), 0.1)
    return space.wrap_angles(theta)


def _agree(post: LogPosterior, theta: np.ndarray) -> None:
    fast = post.log_likelihood(theta)
    ref = post.log_likelihood_reference(theta)
    assert np.all(np.isfinite(ref))
    np.testing.assert_allclose(fast, ref, rtol=REL, atol=0.0)
    # the whole posterior: the grouped prior against the per-variable one
    lp_fast = post.space.log_prior(theta)
    lp_ref = post.space.log_prior_reference(theta)
    np.testing.assert_array_equal(np.isfinite(lp_fast), np.isfinite(lp_ref))
    fin = np.isfinite(lp_ref)
    np.testing.assert_allclose(lp_fast[fin], lp_ref[fin], rtol=REL, atol=1e-12)


STARS = [
    ("S1", TrueOrbit(2.6, 30.0, 9.0, 0.45, 70.0, 200.0, 35.0, 2015.0, mass_ratio=0.6)),
    ("S2", TrueOrbit(2.6, 30.0, 14.0, 0.2, 40.0, 80.0, 300.0, 2011.0)),
    ("S3", TrueOrbit(2.6, 30.0, 5.5, 0.7, 120.0, 10.0, 150.0, 2019.0)),
]


@pytest.mark.parametrize("absolute", [False, True])
@pytest.mark.parametrize("n_stars", [1, 3])
def test_fused_path_agrees_with_reference(tmp_path, absolute, n_stars):
    rng = np.random.default_rng([7, n_stars, absolute])
    stars = STARS[:n_stars]
    space = ParameterSpace(read_target(write_system(tmp_path, stars, rng=rng, absolute=absolute, central_rows=True)))
    assert "S1.mass_ratio" in space.index  # the central-body rows bring the mass ratio (reflex motion)
    post = LogPosterior(space)
    assert post.fused
    theta = _near_truth(space, truth_values(space, stars), rng, 40)
    _agree(post, theta)
    # the cache of work arrays does not change results: calls of other block sizes in between, then
    # the first block again gives the same bits (between block sizes the matrix-vector sums may round
    # differently, at the last bit)
    first = post.log_likelihood(theta)
    for n in (1, 7, 3):
        np.testing.assert_allclose(post.log_likelihood(theta[:n]), first[:n], rtol=1e-14, atol=0)
    np.testing.assert_array_equal(post.log_likelihood(theta), first)


def test_shared_epochs_and_polar_correlated_rows(tmp_path):
    rng = np.random.default_rng(8)
    target = read_target(write_system(tmp_path, STARS[1:3], rng=rng, shared_epochs=True))
    # every third row of S2 as separation / position angle, correlated errors elsewhere
    comp = target.companions[0]
    a = comp.astrometry
    n = len(a)
    polar = np.arange(n) % 3 == 0
    east, north = a.east_north()
    astro = Astrometry(t_yr=a.t_yr, polar=polar, value1=np.where(polar, np.hypot(east, north), east),
                       value2=np.where(polar, np.degrees(np.arctan2(east, north)) % 360.0, north),
                       err1=np.where(polar, 0.5, 0.4), err2=np.where(polar, 0.8, 0.6),
                       corr=np.where(polar, 0.0, np.linspace(-0.5, 0.6, n)))
    target = dataclasses.replace(target, companions=(dataclasses.replace(comp, astrometry=astro),
                                                     *target.companions[1:]))
    space = ParameterSpace(target)
    post = LogPosterior(space)
    _agree(post, _near_truth(space, truth_values(space, STARS[1:3]), rng, 30))
    # correlated but no polar rows: the cross term of the fused sum of squares
    astro2 = dataclasses.replace(astro, polar=np.zeros(n, bool), value1=east, value2=north,
                                 corr=np.linspace(-0.7, 0.7, n))
    target2 = dataclasses.replace(target, companions=(dataclasses.replace(comp, astrometry=astro2),
                                                      *target.companions[1:]))
    space2 = ParameterSpace(target2)
    _agree(LogPosterior(space2), _near_truth(space2, truth_values(space2, STARS[1:3]), rng, 30))


def test_prior_draws_and_walls(tmp_path):
    """Prior draws (far from the data) and points outside the support: same values, same -inf."""
    rng = np.random.default_rng(9)
    extra = ""
    path = write_system(tmp_path, STARS[:2], rng=rng, absolute=True, extra=extra)
    space = ParameterSpace(read_target(path))
    post = LogPosterior(space)
    theta = space.sample_prior(rng, 200)
    lp_ref = space.log_prior_reference(theta)
    ok = np.isfinite(lp_ref)
    assert ok.sum() > 100
    np.testing.assert_allclose(post.log_likelihood(theta[ok]), post.log_likelihood_reference(theta[ok]),
                               rtol=REL, atol=0.0)
    # walls: eccentricity vector outside the disc, cos i beyond 1, a mass beyond its bounds, an angle
    # outside its window, a negative jitter
    bad = np.repeat(theta[ok][:1], 5, axis=0)
    bad[0, space.index["S1.sqrte_cosw"]] = 1.5
    bad[1, space.index["S2.cos_i"]] = 1.2
    bad[2, space.index["ln_mass"]] = np.log(2e8)
    bad[3, space.index["S1.node"]] += 7.0
    bad[4, space.index["jitter.spec-a"]] = -1.0
    assert np.all(np.isneginf(space.log_prior_reference(bad)))
    assert np.all(np.isneginf(space.log_prior(bad)))
    assert np.all(np.isneginf(post(bad)))


def test_prior_of_other_families_and_windows(tmp_path):
    """Truncated-normal, log-normal and beta priors go through the general branch; new windows rebuild."""
    rng = np.random.default_rng(10)
    extra = ""
    path = write_system(tmp_path, STARS[1:2], rng=rng, extra=extra)
    text = path.read_text()
    text = text.replace('period = { dist = "log-uniform", low = "1 yr", high = "100 yr" }',
                        'period = { dist = "log-normal", median = "14 yr", sigma = 0.3 }\n'
                        'eccentricity = { dist = "beta", alpha = 0.867, beta = 3.03 }\n'
                        'inclination = { dist = "uniform", low = "0 deg", high = "90 deg" }')
    text = text.replace('prior = { dist = "uniform", low = "5 pc", high = "20000 pc" }',
                        'prior = { dist = "truncnormal", mean = "30 pc", sd = "3 pc", low = "20 pc", high = "40 pc" }')
    path.write_text(text)
    space = ParameterSpace(read_target(path))
    theta = np.vstack([space.sample_prior(rng, 100), _near_truth(space, truth_values(space, STARS[1:2]), rng, 50, 0.3)])
    for sp in (space, space.with_windows(space.windows_from(theta[:1] + 1.0))):
        a, b = sp.log_prior(theta), sp.log_prior_reference(theta)
        np.testing.assert_array_equal(np.isfinite(a), np.isfinite(b))
        assert np.isfinite(b).sum() > 20 and (~np.isfinite(b)).sum() > 0
        np.testing.assert_allclose(a[np.isfinite(b)], b[np.isfinite(b)], rtol=REL, atol=1e-12)


def test_pickle_drops_work_arrays_and_keeps_results(tmp_path):
    rng = np.random.default_rng(11)
    space = ParameterSpace(read_target(write_system(tmp_path, STARS[:2], rng=rng, central_rows=True)))
    post = LogPosterior(space)
    theta = _near_truth(space, truth_values(space, STARS[:2]), rng, 16)
    before = post(theta)
    assert post._plan._work  # work arrays were kept
    clone = pickle.loads(pickle.dumps(post))
    assert clone._plan._work == {}
    np.testing.assert_array_equal(clone(theta), before)
    assert post._plan._work  # pickling did not empty the original's cache


def test_model_terms_take_the_reference_path(tmp_path):
    rng = np.random.default_rng(12)
    target = read_target(write_system(tmp_path, STARS[1:2], rng=rng))

    class Shift:  # a model term with a velocity hook (the contract of orbitmass.core.orbit)
        name = "shift"
        parameters = ("shift_kms",)
        linear_safe = True

        def velocity_shift(self, state, basis, vz, extra):
            return extra["shift_kms"] + 0.0 * vz

    from orbitmass.model.priors import Uniform

    space = ParameterSpace(target, terms=(Shift(),), term_priors={"shift_kms": Uniform(-5.0, 5.0)})
    post = LogPosterior(space)
    assert not post.fused
    theta = _near_truth(space, {**truth_values(space, STARS[1:2]), "shift_kms": 1.0}, rng, 8)
    np.testing.assert_array_equal(post.log_likelihood(theta), post.log_likelihood_reference(theta))


def test_kepler_rows_identical_to_kepler_cos_sin():
    """The row-block solver does the same arithmetic as kepler_cos_sin: bit for bit."""
    rng = np.random.default_rng(13)
    mean = rng.uniform(-40.0, 40.0, (70, 130))
    ecc = np.concatenate([rng.uniform(0, 0.99, 60), 1 - 10 ** rng.uniform(-3, -1, 10)])[:, None]
    c_ref, s_ref = kepler_cos_sin(mean, ecc)
    c, s = np.empty_like(mean), np.empty_like(mean)
    kepler_cos_sin_rows(mean, ecc, c, s)
    np.testing.assert_array_equal(c, c_ref)
    np.testing.assert_array_equal(s, s_ref)
