"""Joint fits: several companions, absolute frame, both bodies' velocities, redshift.

Data come from :mod:`orbitmass.demo.simulate` (true anomaly and explicit rotations),
with the absolute-frame drift and instrument offsets added here by hand: an
independent formulation of what the fitted model computes. Pass criterion:
the invented truth inside the 95% interval (common practice, no source).
"""

from __future__ import annotations

import math
import textwrap

import astropy.units as u
import numpy as np
import pytest
from astropy.cosmology import FlatLambdaCDM, Planck18
from scipy import integrate

from orbitmass import Fit, read_target
from orbitmass.core.cosmology import redshift_distance_pc
from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv


def inside95(block, value):
    return block["q2.5"] <= value <= block["q97.5"]


# ------------------------------------------------------------------ distances
# Hogg 1999 (astro-ph/9905116) formulas; values from shared references.md:
# flat LCDM, H0 = 70 km/s/Mpc, Om = 0.3, no radiation: D_A(z) in Mpc.
HOGG_DA_MPC = {0.5: 1259.083597, 1.0: 1651.914403, 2.0: 1726.620691, 3.0: 1588.921359}


@pytest.mark.parametrize("z", sorted(HOGG_DA_MPC))
def test_angular_diameter_distance_table(z):
    spec = "flat-lcdm:H0=70.0,Om0=0.3,Tcmb0=0.0"
    d_mpc = redshift_distance_pc(z, spec) / 1e6
    assert d_mpc == pytest.approx(HOGG_DA_MPC[z], abs=1e-3)
    # independent numerical integral: D_C = (c/H0) int_0^z dz' / sqrt(Om (1+z')^3 + 1 - Om), D_A = D_C/(1+z)
    c_kms = 299792.458
    dc, _ = integrate.quad(lambda x: 1.0 / math.sqrt(0.3 * (1 + x) ** 3 + 0.7), 0.0, z, epsabs=1e-13)
    assert d_mpc == pytest.approx(c_kms / 70.0 * dc / (1 + z), rel=1e-9)


def test_cosmology_inline_table_and_realisation(tmp_path):
    (tmp_path / "v.csv").write_text("jyear,rv_kms,rv_err_kms\n2020.0,100,5\n2021.0,120,5\n")
    text = textwrap.dedent("""\
        [distance]
        redshift = 0.5
        cosmology = { H0 = "70 km / (s Mpc)", Om0 = 0.3 }
        [[companion]]
        name = "c"
        velocities = "v.csv"
        """)
    (tmp_path / "t.toml").write_text(text)
    t = read_target(tmp_path / "t.toml")
    assert redshift_distance_pc(0.5, t.distance.cosmology) / 1e6 == pytest.approx(HOGG_DA_MPC[0.5], abs=1e-3)
    # a named realisation is astropy's own (the reference library)
    expected = Planck18.angular_diameter_distance(0.03).to_value(u.pc)
    assert redshift_distance_pc(0.03, "Planck18") == pytest.approx(expected, rel=1e-12)
    assert FlatLambdaCDM(H0=70, Om0=0.3, Tcmb0=0).angular_diameter_distance(1.0).to_value(u.Mpc) == \
        pytest.approx(HOGG_DA_MPC[1.0], abs=1e-3)


# --------------------------------------------------------------- joint cases
def _write_system(folder, stars, *, rng, frame_terms=None, t_ref=2014.0, n_pos=20, n_rv=16, pos_err=0.4,
                  rv_err=15.0, offset_b=22.0):
    folder.mkdir(parents=True, exist_ok=True)
    x0, y0, vx0, vy0, vz0 = frame_terms or (0, 0, 0, 0, 0)
    blocks = []
    for name, orbit in stars:
        t = np.sort(rng.uniform(2002, 2026, n_pos))
        s = simulate(orbit, t)
        dt = t - t_ref
        write_positions_csv(folder / f"{name}_pos.csv", t,
                            s["east_mas"] + x0 + vx0 * dt + rng.normal(0, pos_err, t.size),
                            s["north_mas"] + y0 + vy0 * dt + rng.normal(0, pos_err, t.size), pos_err)
        tv = np.sort(rng.uniform(2004, 2026, n_rv))
        sv = simulate(orbit, tv)
        inst = np.where(np.arange(tv.size) % 2 == 0, "spec-a", "spec-b")
        rv = sv["rv_companion_kms"] + vz0 + np.where(inst == "spec-b", offset_b, 0.0) + rng.normal(0, rv_err, tv.size)
        write_velocities_csv(folder / f"{name}_rv.csv", tv, rv, rv_err, instrument=inst)
        blocks.append(f'[[companion]]\nname = "{name}"\nastrometry = "{name}_pos.csv"\n'
                      f'velocities = "{name}_rv.csv"\n'
                      'period = { dist = "log-uniform", low = "1 yr", high = "100 yr" }\n')
    return blocks


@pytest.mark.slow
def test_four_companions_absolute_frame_two_instruments(tmp_path):
    rng = np.random.default_rng(44)
    M, D = 4.2e6, 8100.0
    frame = (1.3, -0.8, 0.12, -0.07, 8.0)
    elements = [("S1", 16.0, 0.85, 134, 66, 228, 2018.4), ("S2", 11.5, 0.4, 60, 310, 100, 2012.0),
                ("S3", 25.0, 0.55, 150, 20, 40, 2008.0), ("S4", 8.0, 0.2, 95, 180, 260, 2015.3)]
    stars = [(n, TrueOrbit(M, D, P, e, i, w, W, tp)) for n, P, e, i, w, W, tp in elements]
    blocks = _write_system(tmp_path, stars, rng=rng, frame_terms=frame)
    head = textwrap.dedent("""\
        [target]
        name = "invented four-star nucleus"
        reference_epoch = 2014.0
        [central]
        frame = "absolute"
        x0 = { dist = "normal", mean = "0 mas", sd = "5 mas" }
        y0 = { dist = "normal", mean = "0 mas", sd = "5 mas" }
        vx0 = { dist = "normal", mean = "0 mas / yr", sd = "1 mas / yr" }
        vy0 = { dist = "normal", mean = "0 mas / yr", sd = "1 mas / yr" }
        vz0 = { dist = "normal", mean = "0 km / s", sd = "50 km / s" }
        [distance]
        prior = { dist = "uniform", low = "4 kpc", high = "12 kpc" }
        [instruments.spec-a]
        [instruments.spec-b]
        offset = { dist = "normal", mean = "0 km / s", sd = "30 km / s" }
        """)
    (tmp_path / "target.toml").write_text(head + "\n".join(blocks))
    # capped so the suite stays quick: the recovery is checked, not the convergence (an
    # uncapped run of this problem converged in 150 s on 2 cores; see the README)
    fit = Fit(seed=11, progress=False, max_steps=3000).fit(tmp_path / "target.toml")
    s = fit.summary
    assert inside95(s["derived"]["mass_msun"], M)
    assert inside95(s["derived"]["distance_pc"], D)
    for key, value in zip(("x0_mas", "y0_mas", "vx0_mas_per_yr", "vy0_mas_per_yr", "vz0_kms"), frame):
        assert inside95(s["derived"][key], value), key
    assert inside95(s["instruments"]["spec-b"]["offset_kms"], 22.0)
    for name, orbit in stars:
        c = s["companions"][name]
        assert inside95(c["period_yr"], orbit.period_yr), name
        assert inside95(c["eccentricity"], orbit.eccentricity), name
    assert set(s["companions"]) == {"S1", "S2", "S3", "S4"}
    assert s["diagnostics"]["n_steps"] <= 3000


@pytest.mark.slow
def test_binary_with_both_velocities_gives_mass_ratio(tmp_path):
    rng = np.random.default_rng(45)
    truth = TrueOrbit(mass_msun=2.6, distance_pc=30.0, period_yr=9.0, eccentricity=0.45, inclination_deg=70.0,
                      arg_periastron_deg=200.0, ascending_node_deg=35.0, periastron_time=2015.0, mass_ratio=0.6)
    t = np.sort(rng.uniform(2008, 2026, 18))
    s = simulate(truth, t)
    write_positions_csv(tmp_path / "pos.csv", t, s["east_mas"] + rng.normal(0, 1.0, t.size),
                        s["north_mas"] + rng.normal(0, 1.0, t.size), 1.0)
    tv = np.sort(rng.uniform(2010, 2026, 30))
    sv = simulate(truth, tv)
    body = np.where(np.arange(tv.size) % 2 == 0, "companion", "central")
    rv = np.where(body == "central", sv["rv_central_kms"], sv["rv_companion_kms"]) + 12.0 + rng.normal(0, 0.3, tv.size)
    write_velocities_csv(tmp_path / "rv.csv", tv, rv, 0.3, body=body)
    (tmp_path / "target.toml").write_text(textwrap.dedent("""\
        [target]
        name = "invented double-lined binary"
        [central]
        systemic = { dist = "uniform", low = "-100 km / s", high = "100 km / s" }
        [distance]
        prior = { dist = "uniform", low = "5 pc", high = "100 pc" }
        [[companion]]
        name = "B"
        astrometry = "pos.csv"
        velocities = "rv.csv"
        """))
    fit = Fit(seed=12, progress=False).fit(tmp_path / "target.toml")
    out = fit.summary
    c = out["companions"]["B"]
    assert inside95(out["derived"]["mass_msun"], truth.mass_msun)
    assert inside95(c["mass_ratio"], truth.mass_ratio)
    assert inside95(c["central_mass_msun"], truth.mass_msun / 1.6)
    assert inside95(c["companion_mass_msun"], truth.mass_msun * 0.6 / 1.6)
    assert inside95(out["derived"]["systemic_kms"], 12.0)
    assert inside95(out["derived"]["distance_pc"], truth.distance_pc)


@pytest.mark.slow
def test_gas_clump_at_redshift(tmp_path):
    rng = np.random.default_rng(46)
    z = 0.03
    d_a = Planck18.angular_diameter_distance(z).to_value(u.pc)
    truth = TrueOrbit(mass_msun=8.0e8, distance_pc=d_a, period_yr=22.0, eccentricity=0.0, inclination_deg=35.0,
                      arg_periastron_deg=0.0, ascending_node_deg=150.0, periastron_time=2012.0, redshift=z)
    t = np.sort(rng.uniform(2005, 2026, 24))  # observed timeline: the orbit takes (1+z) P there
    s = simulate(truth, t)
    err = 0.002  # mas
    write_positions_csv(tmp_path / "pos.csv", t, s["east_mas"] + rng.normal(0, err, t.size),
                        s["north_mas"] + rng.normal(0, err, t.size), err)
    tv = np.sort(rng.uniform(2006, 2026, 15))
    rv = simulate(truth, tv)["rv_companion_kms"] + rng.normal(0, 20.0, tv.size)
    write_velocities_csv(tmp_path / "rv.csv", tv, rv, 20.0)
    (tmp_path / "target.toml").write_text(textwrap.dedent(f"""\
        [target]
        name = "invented gas clump"
        [distance]
        redshift = {z}
        [[companion]]
        name = "clump"
        astrometry = "pos.csv"
        velocities = "rv.csv"
        eccentricity = {{ dist = "fixed", value = 0 }}
        period = {{ dist = "log-uniform", low = "1 yr", high = "300 yr" }}
        """))
    fit = Fit(seed=13, progress=False).fit(tmp_path / "target.toml")
    out = fit.summary
    assert out["derived"]["distance_pc"]["median"] == pytest.approx(d_a, rel=1e-12)
    assert inside95(out["derived"]["mass_msun"], truth.mass_msun)
    c = out["companions"]["clump"]
    assert inside95(c["period_yr"], truth.period_yr)  # rest frame
    assert inside95(c["period_obs_yr"], truth.period_yr * (1 + z))
    assert c["arg_periastron_deg"]["median"] == 0.0
