"""The fused likelihood path with the Beyond-Kepler model terms agrees with the plain reference path.

The reference (``LogPosterior.log_likelihood_reference``: every orbit through
``orbitmass.core.orbit.evaluate`` and the terms' hooks) is checked against an
independent first post-Newtonian integration with scipy in
tests/test_relativity.py. Here the fused path (``FusedOrbit``: the terms'
fused forms, evaluated in place) must give the same log-likelihood to 1e-10
relative (common practice, no source: agreement to round-off between two
evaluations of one model) for every combination of terms, factors fixed and
sampled, one and several companions, velocities of the companion and of the
central body (reflex, with a sampled mass ratio), several instruments with an
offset and a sampled jitter, the relative and the absolute frame; on
parameter sets drawn from the priors and scattered about the truth.

The data are invented stars around an invented 4e6 solar-mass central body at
8 kpc, where the terms matter (the likelihood with terms differs from the
Keplerian one by far more than the tolerance: checked below).
"""

from __future__ import annotations

import pickle

import numpy as np
import pytest

from orbitmass.core.orbit import FusedOrbit, evaluate
from orbitmass.core.relativity import ExtendedMassTerm, PrecessionTerm, RedshiftTerm, RoemerTerm
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.inference.pipeline import build_space
from orbitmass.io.target import read_target
from orbitmass.model.likelihood import LogPosterior, orbit_states
from tests.helpers.fused_systems import truth_values, write_system

REL = 1e-10

STARS = [
    ("S1", TrueOrbit(4.1e6, 8200.0, 16.0, 0.88, 134.0, 66.0, 228.0, 2018.4, mass_ratio=0.05)),
    ("S2", TrueOrbit(4.1e6, 8200.0, 11.0, 0.6, 60.0, 200.0, 100.0, 2011.0)),
    ("S3", TrueOrbit(4.1e6, 8200.0, 25.0, 0.4, 100.0, 10.0, 300.0, 2009.0)),
]

SAMPLED = {
    "redshift_factor": 'redshift_factor = { dist = "uniform", low = -1, high = 3 }',
    "precession_factor": 'precession_factor = { dist = "uniform", low = -1, high = 3 }',
    "fraction": 'fraction = { dist = "uniform", low = 0, high = 0.05 }',
}
FIXED = {
    "redshift_factor": 'redshift_factor = { dist = "fixed", value = 1 }',
    "precession_factor": 'precession_factor = { dist = "fixed", value = 0.7 }',
    "fraction": 'fraction = { dist = "fixed", value = 0.02 }',
}

#: name -> (terms on, fixed factors, scale radius)
CONFIGS = {
    "redshift": ({"redshift_factor"}, False, None),
    "redshift fixed": ({"redshift_factor"}, True, None),
    "roemer": ({"roemer"}, False, None),
    "precession": ({"precession_factor"}, False, None),
    "precession fixed": ({"precession_factor"}, True, None),
    "extended mass (angle)": ({"fraction"}, False, '"20 mas"'),
    "extended mass (length), fixed": ({"fraction"}, True, '"500 au"'),
    "roemer + redshift": ({"roemer", "redshift_factor"}, False, None),
    "roemer + precession": ({"roemer", "precession_factor"}, False, None),
    "precession + extended mass": ({"precession_factor", "fraction"}, False, '"20 mas"'),
    "all": ({"roemer", "redshift_factor", "precession_factor", "fraction"}, False, '"20 mas"'),
    "all fixed": ({"roemer", "redshift_factor", "precession_factor", "fraction"}, True, '"500 au"'),
}


def _tables(on: set, fixed: bool, radius) -> str:
    pick = FIXED if fixed else SAMPLED
    rel = [pick[k] for k in ("redshift_factor", "precession_factor") if k in on]
    if "roemer" in on:
        rel.append("roemer_delay = true")
    text = ("[relativity]\n" + "\n".join(rel) + "\n") if rel else ""
    if "fraction" in on:
        text += f"[extended_mass]\n{pick['fraction']}\nscale_radius = {radius}\n"
    return text


def _write(folder, stars, *, absolute: bool, tables: str, seed: int) -> object:
    """Target with ``stars`` (positions, two-instrument velocities, central-body rows of the first star) and ``tables``.

    The writer of tests/helpers/fused_systems.py (wide priors: 0.5-1e8 solar
    masses, 5-20000 pc, periods 1-100 yr) with the model-term tables added.
    """
    return read_target(write_system(folder, stars, rng=np.random.default_rng(seed), absolute=absolute,
                               central_rows=True, extra=tables))


def _truth(space, stars) -> dict:
    """The values of tests/helpers/fused_systems.py for ``stars``, with this module's central body and terms."""
    v = truth_values(space, stars)
    v.update({"mass_msun": 4.1e6, "distance_pc": 8200.0, "redshift_factor": 1.0, "precession_factor": 1.0,
              "extended_mass_fraction": 0.01})
    v.update({f"{name}.q": 0.05 for name, _ in stars})
    return v


def _parameter_sets(space, stars, rng) -> np.ndarray:
    """Prior draws (inside the support, and foldable when the Roemer delay is on) and sets near the truth."""
    draws = space.sample_prior(rng, 120)
    draws = draws[np.isfinite(space.log_prior(draws))]
    if any(t.name == "roemer" for t in space.terms):  # rows where the fused Roemer form applies
        roemer = RoemerTerm()
        keep = []
        for row in draws:
            states = orbit_states(space, space.unpack(row[None, :]))
            keep.append(all(roemer.emission_fold(st, {}) is not None for st in states.values()))
        draws = draws[np.array(keep, bool)]
    theta0 = space.pack(_truth(space, stars))[0]
    near = theta0 + 1e-3 * rng.standard_normal((40, space.ndim)) * np.maximum(np.abs(theta0), 0.05)
    near = space.wrap_angles(near)
    near = near[np.isfinite(space.log_prior(near))]
    assert len(draws) >= 60 and len(near) >= 30
    return draws, near


def _agree(post: LogPosterior, theta: np.ndarray) -> np.ndarray:
    """Fused against reference; the fused path must really run (not decline to the reference)."""
    phys = post.space.unpack(theta)
    fused = post._plan.evaluate(phys, post.space.term_values(phys))
    assert fused is not None
    ref = post.log_likelihood_reference(theta)
    assert np.all(np.isfinite(ref))
    np.testing.assert_allclose(fused, ref, rtol=REL, atol=0.0)
    np.testing.assert_allclose(post.log_likelihood(theta), ref, rtol=REL, atol=0.0)
    return ref


CASES = [(name, absolute, n) for name in CONFIGS for absolute, n in ((False, 1), (True, 3))]
CASES += [("all", False, 3), ("all", True, 1)]


@pytest.mark.parametrize("config, absolute, n_stars", CASES)
def test_fused_terms_agree_with_reference(tmp_path, config, absolute, n_stars):
    on, fixed, radius = CONFIGS[config]
    stars = STARS[:n_stars]
    seed = [list(CONFIGS).index(config), n_stars, absolute]
    space = build_space(_write(tmp_path, stars, absolute=absolute, tables=_tables(on, fixed, radius), seed=13))
    assert space.terms and "S1.mass_ratio" in space.index  # terms on; central-body rows bring the reflex
    sampled = {"redshift_factor", "precession_factor", "extended_mass_fraction"} & set(space.index)
    assert bool(sampled) == (not fixed and on != {"roemer"})
    post = LogPosterior(space)
    assert post.fused
    rng = np.random.default_rng(seed)
    draws, near = _parameter_sets(space, stars, rng)
    theta = np.vstack([draws, near])
    ref = _agree(post, theta)
    # the terms matter near the truth: the Keplerian likelihood of the same sets differs by far more than
    # the tolerance
    kepler = LogPosterior(build_space(space.target, terms=()))
    names = [n for n in space.names if n in kepler.space.index]
    theta_k = theta[:, [space.index[n] for n in names]]
    assert [kepler.space.names[i] for i in range(kepler.space.ndim)] == names
    diff = np.abs(kepler.log_likelihood(theta_k) - ref) / np.abs(ref)
    assert np.median(diff[len(draws):]) > 1e3 * REL


@pytest.mark.parametrize("config", ["redshift", "roemer", "precession", "all", "all fixed"])
def test_fused_orbit_matches_evaluate(tmp_path, config):
    """Positions and velocities of FusedOrbit against evaluate(), epoch by epoch, near the truth and at prior draws."""
    on, fixed, radius = CONFIGS[config]
    space = build_space(_write(tmp_path, STARS[:1], absolute=False, tables=_tables(on, fixed, radius), seed=3))
    rng = np.random.default_rng(4)
    theta = np.vstack(_parameter_sets(space, STARS[:1], rng))
    phys = space.unpack(theta)
    extra = space.term_values(phys)
    state = orbit_states(space, phys)["S1"]
    t = np.linspace(2000.0, 2032.0, 97)  # several periastra of the 16-yr orbit, and epochs before t_ref
    kernel = FusedOrbit(t - space.t_ref, space.terms)
    x, y, vz = kernel(state, extra, kernel.work(theta.shape[0]))
    A, B, F, G = state.ti_mas
    ref = evaluate(state, t, terms=space.terms, extra=extra)
    for got, want in ((A * x + F * y, ref["north_mas"]), (B * x + G * y, ref["east_mas"]), (vz, ref["vz_kms"])):
        scale = np.max(np.abs(want), axis=1, keepdims=True)
        assert np.max(np.abs(got - want) / scale) < 1e-11
    # positions only: the same numbers
    kernel_p = FusedOrbit(t - space.t_ref, space.terms, velocities=False)
    xp, yp, none = kernel_p(state, extra, kernel_p.work(theta.shape[0]))
    assert none is None
    np.testing.assert_array_equal(xp, x)
    np.testing.assert_array_equal(yp, y)


def test_roemer_fold_declined_takes_the_reference(tmp_path):
    """An eccentricity within ~v/c of 1 leaves the folded Kepler equation: the whole block goes to the reference."""
    on, fixed, radius = CONFIGS["all"]
    space = build_space(_write(tmp_path, STARS[:1], absolute=False, tables=_tables(on, fixed, radius), seed=5))
    post = LogPosterior(space)
    values = _truth(space, STARS[:1])
    theta = np.repeat(space.pack(values), 4, axis=0)
    theta[1] = space.pack({**values, "S1.ecc": 1.0 - 1e-6})[0]
    phys = space.unpack(theta)
    states = orbit_states(space, phys)
    assert RoemerTerm().emission_fold(states["S1"], {}) is None  # e* >= 1 for the second set
    before = post.n_sets
    ll = post.log_likelihood(theta)
    assert post.n_sets == before + 4  # counted once
    np.testing.assert_array_equal(ll, post.log_likelihood_reference(theta))
    # without that set the fused path runs and agrees
    _agree(post, theta[[0, 2, 3]])


def test_pickled_posterior_with_terms(tmp_path):
    on, fixed, radius = CONFIGS["all"]
    space = build_space(_write(tmp_path, STARS[:2], absolute=True, tables=_tables(on, fixed, radius), seed=6))
    post = LogPosterior(space)
    theta = np.vstack(_parameter_sets(space, STARS[:2], np.random.default_rng(7)))
    before = post(theta)
    clone = pickle.loads(pickle.dumps(post))
    assert clone._plan._work == {}
    np.testing.assert_array_equal(clone(theta), before)
    # block sizes change between calls: the work arrays of each size are kept apart
    for n in (1, 5, len(theta)):
        np.testing.assert_allclose(post(theta[:n]), before[:n], rtol=1e-14, atol=0)


def test_separate_precession_terms_and_unsupported_terms(tmp_path):
    """Two precession terms given apart (not combined) rotate like one; a term without fused forms is refused."""
    on, fixed, radius = CONFIGS["all"]
    space = build_space(_write(tmp_path, STARS[:1], absolute=False, tables=_tables(on, fixed, radius), seed=8))
    theta = np.vstack(_parameter_sets(space, STARS[:1], np.random.default_rng(9)))
    phys = space.unpack(theta)
    extra = space.term_values(phys)
    state = orbit_states(space, phys)["S1"]
    terms = (RoemerTerm(), PrecessionTerm(), ExtendedMassTerm(scale_radius_mas=20.0), RedshiftTerm())
    t = np.linspace(2001.0, 2027.0, 61)
    kernel = FusedOrbit(t - space.t_ref, terms)
    x, y, vz = kernel(state, extra, kernel.work(theta.shape[0]))
    ref = evaluate(state, t, terms=terms, extra=extra)  # the reference rotates twice, in turn
    A, B, F, G = state.ti_mas
    for got, want in ((A * x + F * y, ref["north_mas"]), (B * x + G * y, ref["east_mas"]), (vz, ref["vz_kms"])):
        assert np.max(np.abs(got - want) / np.max(np.abs(want), axis=1, keepdims=True)) < 1e-11

    class Drift:  # a velocity hook without its fused form (the contract of orbitmass.core.orbit)
        name = "drift"
        parameters = ()
        linear_safe = False

        def velocity_shift(self, state, basis, vz, extra):
            return 0.0 * vz + 1.0

    assert FusedOrbit.supports(terms) and not FusedOrbit.supports(terms + (Drift(),))
    assert not FusedOrbit.supports((RoemerTerm(), RoemerTerm()))  # one emission-time term at most
    with pytest.raises(ValueError, match="fused form"):
        FusedOrbit(t, (Drift(),))
