"""Results.predict after the speed work: the same model as an independent scalar evaluation.

The vectorised path (row blocks, one Kepler solve shared by positions and velocities at the
same epochs, unpacking once) must give the numbers of a plain per-draw, per-epoch
evaluation to 1e-10 (relative to 1 + |value|) on the same posterior draws.

References:
- Kepler's equation solved per element with scipy.optimize.brentq on [M - e, M + e]
  (an independent root finder, xtol 1e-15);
- Kepler's third law a^3 = G M P^2 with G M_sun in au^3/yr^2 and au/yr in km/s from
  astropy.constants / astropy.units;
- the Thiele-Innes relations A = a(cos w cos W - sin w sin W cos i), B = a(cos w sin W +
  sin w cos W cos i), F = a(-sin w cos W - cos w sin W cos i), G = a(-sin w sin W +
  cos w cos W cos i), C = a sin w sin i, H = a cos w sin i with north = A X + F Y,
  east = B X + G Y (from memory; the conventions stated in orbitmass.core.orbit), and the
  line-of-sight velocity (2 pi / P)(C dX/dM + H dY/dM) with dX/dM = -sin E / (1 - e cos E),
  dY/dM = sqrt(1 - e^2) cos E / (1 - e cos E) (derivative of X = cos E - e,
  Y = sqrt(1 - e^2) sin E along Kepler's equation; common practice, no source);
- the frame of orbitmass's output contract: in the absolute frame the positions include
  the barycentre position and proper motion and every companion's reflex q / (1 + q) of
  its own relative orbit; the velocities include vz0 (absolute) or the systemic velocity
  (relative) and the reflex of companions with a mass ratio.
The draws are prior draws of the invented demo scenarios.
"""

from __future__ import annotations

import math

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from scipy.optimize import brentq

import orbitmass.results as results_module
from orbitmass.demo.run import write_scenarios
from orbitmass.io.target import read_target
from orbitmass.model.parameters import ParameterSpace
from orbitmass.results import Results, derive_samples

GM_SUN = float((const.GM_sun * u.yr**2 / u.au**3).decompose())
KMS_PER_AU_YR = float((u.au / u.yr).to(u.km / u.s))
TOL = 1e-10


def _results(path, n_draws=12, seed=3):
    space = ParameterSpace(read_target(path))
    theta = space.sample_prior(np.random.default_rng(seed), n_draws)
    return Results(target=space.target, space=space, samples=derive_samples(space, theta), theta=theta,
                   chain=theta[None], log_prob=np.zeros((1, n_draws)), burn=0, thin=1, summary={})


def _relative(p, name, t, t_ref):
    """Scalar relative orbit of companion ``name`` for one draw ``p``: east, north (mas), vz (km/s)."""
    period, period_obs, e = p[f"{name}.period_yr"], p[f"{name}.period_obs_yr"], p[f"{name}.ecc"]
    a_au = (GM_SUN * p["mass_msun"] * period**2 / (4.0 * math.pi**2)) ** (1.0 / 3.0)
    a_mas = a_au / p["distance_pc"] * 1000.0
    w, node, cos_i = p[f"{name}.omega"], p[f"{name}.node"], p[f"{name}.cos_i"]
    sin_i = p[f"{name}.sin_i"]
    cw, sw, cn, sn = math.cos(w), math.sin(w), math.cos(node), math.sin(node)
    A, B = cw * cn - sw * sn * cos_i, cw * sn + sw * cn * cos_i
    F, G = -sw * cn - cw * sn * cos_i, -sw * sn + cw * cn * cos_i
    C, H = sw * sin_i, cw * sin_i
    east, north, vz = [], [], []
    for tt in t:
        m = p[f"{name}.m0"] + 2.0 * math.pi / period_obs * (tt - t_ref)
        big_e = m if e == 0 else brentq(lambda x: x - e * math.sin(x) - m, m - e - 1e-9, m + e + 1e-9,
                                         xtol=1e-15, rtol=4 * np.finfo(float).eps, maxiter=500)
        x, y = math.cos(big_e) - e, math.sqrt(1 - e * e) * math.sin(big_e)
        den = 1.0 - e * math.cos(big_e)
        dx, dy = -math.sin(big_e) / den, math.sqrt(1 - e * e) * math.cos(big_e) / den
        east.append(a_mas * (B * x + G * y))
        north.append(a_mas * (A * x + F * y))
        vz.append(2.0 * math.pi / period * a_au * (C * dx + H * dy) * KMS_PER_AU_YR)
    return np.array(east), np.array(north), np.array(vz)


def _reference(res, name, t, central=False):
    """Per draw, per epoch: east, north (mas) and rv (km/s) in the frame of the data."""
    space = res.space
    phys = space.unpack(res.theta)
    absolute = space.target.frame == "absolute"
    reflex = [lay.name for lay in space.companions if lay.has_q]
    out = {"east_mas": [], "north_mas": [], "rv_kms": []}
    for r in range(len(res.theta)):
        p = {k: float(v[r]) for k, v in phys.items() if np.ndim(v) == 1}
        east, north, vz = _relative(p, name, t, space.t_ref)
        v = np.zeros_like(vz) if central else vz.copy()
        if absolute:
            east = east + p["x0"] + p["vx0"] * (t - space.t_ref)
            north = north + p["y0"] + p["vy0"] * (t - space.t_ref)
        for j in reflex:
            f = p[f"{j}.q"] / (1.0 + p[f"{j}.q"])
            ej, nj, vj = _relative(p, j, t, space.t_ref)
            if absolute:
                east, north = east - f * ej, north - f * nj
            v = v - f * vj
        out["east_mas"].append(east)
        out["north_mas"].append(north)
        out["rv_kms"].append(v + (p["vz0"] if absolute else p["systemic"]))
    return {k: np.array(v) for k, v in out.items()}


@pytest.fixture(scope="module")
def scenarios(tmp_path_factory):
    paths = write_scenarios(tmp_path_factory.mktemp("demo"))
    return {name: _results(paths[name]) for name in ("quillon", "quillon-joint")}


def _rel(a, b):
    return float(np.max(np.abs(a - b) / (1.0 + np.abs(b))))


@pytest.mark.parametrize("scenario", ["quillon", "quillon-joint"])
def test_predict_matches_scalar_reference(scenarios, scenario):
    res = scenarios[scenario]
    name = res.companion_names[0]
    t = np.linspace(res.space.t_ref - 12.0, res.space.t_ref + 9.0, 17)
    ref = _reference(res, name, t)
    both = res.predict(name, t_astro=t, t_vel=t)  # the shared-solve path
    apart = {**res.predict(name, t_astro=t), **res.predict(name, t_vel=t)}  # separate solves
    shifted = res.predict(name, t_astro=t, t_vel=t + 0.25)  # different epochs: concatenated solve
    ref_shift = _reference(res, name, t + 0.25)
    for key in ("east_mas", "north_mas", "rv_kms"):
        assert _rel(both[key], ref[key]) <= TOL, key
        assert _rel(apart[key], ref[key]) <= TOL, key
    assert _rel(shifted["east_mas"], ref["east_mas"]) <= TOL
    assert _rel(shifted["rv_kms"], ref_shift["rv_kms"]) <= TOL
    central = res.predict(name, t_vel=t, central=True)["rv_kms"]
    assert _rel(central, _reference(res, name, t, central=True)["rv_kms"]) <= TOL


@pytest.mark.parametrize("scenario", ["quillon", "quillon-joint"])
def test_blocks_rows_and_per_draw_calls_agree(scenarios, scenario, monkeypatch):
    # The same model whatever the blocking: one call for all draws, calls per draw, tiny
    # blocks (several rows per block, the last one short), and a subset of rows in a given
    # order. Reference: the scalar evaluation above for the subset; each other for the rest
    # (layout must not change the arithmetic: common practice, no source).
    res = scenarios[scenario]
    name = res.companion_names[0]
    t = np.linspace(res.space.t_ref - 5.0, res.space.t_ref + 5.0, 11)
    whole = res.predict(name, t_astro=t, t_vel=t)
    per_draw = [res.predict(name, t_astro=t, t_vel=t, rows=np.array([r])) for r in range(len(res.theta))]
    monkeypatch.setattr(results_module, "PREDICT_BLOCK_ELEMENTS", 50)  # 2 rows of 22 epoch values
    blocked = res.predict(name, t_astro=t, t_vel=t)
    rows = np.array([7, 2, 2, 0])
    subset = res.predict(name, t_astro=t, t_vel=t, rows=rows)
    for key in whole:
        np.testing.assert_allclose(np.vstack([p[key] for p in per_draw]), whole[key], rtol=1e-13, atol=1e-13)
        np.testing.assert_array_equal(blocked[key], whole[key])
        np.testing.assert_array_equal(subset[key], whole[key][rows])
    # epochs of each draw's own (2-D) through the blocks
    t2 = t[None, :] + np.arange(len(res.theta))[:, None] * 0.1
    own = res.predict(name, t_astro=t2, t_vel=t2)
    ref_row = _reference(res, name, t2[3])
    for key in whole:
        assert _rel(own[key][3], ref_row[key][3]) <= TOL, key
