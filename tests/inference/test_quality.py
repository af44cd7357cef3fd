"""Goodness of fit (orbitmass.inference.quality) on simulated data with known Gaussian noise.

Data come from orbitmass.demo.simulate (true anomaly and explicit rotations, a formulation
independent of the fitted Thiele-Innes model), so residuals at the true elements are the
noise that was drawn. References: the chi-square distribution of scipy.stats; a sum of n
squared standard normal deviates is chi2(n), and a Gaussian linear(ised) least-squares fit
of p parameters leaves chi2(n - p) (e.g. Press et al., Numerical Recipes, 3rd ed., Sect.
15.1 and 15.6; common practice). The three broken inputs are those of issue 11.
"""

from __future__ import annotations

import dataclasses
import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv
from orbitmass.exceptions import ConvergenceWarning, DegeneracyWarning, OrbitmassWarning, PoorFitWarning
from orbitmass.inference.quality import (
    assess_fit,
    issue_warnings,
    quality_console_lines,
    quality_markdown,
    residuals_table,
)
from orbitmass.io.target import read_target
from orbitmass.model.likelihood import LogPosterior
from orbitmass.model.parameters import ParameterSpace
from orbitmass.results import derive_samples, mass_function_msun, prior_dominated
from orbitmass.units import GM_SUN_AU3_PER_YR2

from tests.helpers.targets import FIXED_SYSTEMIC, quiet_fit, write_target
from tests.helpers.targets import QUALITY_DIST as DIST
from tests.helpers.targets import QUALITY_TRUTH as TRUTH

CONTRACT_KEYS = {"chi2", "dof", "reduced_chi2", "p_value", "status", "datasets"}


def truth_theta(space):
    """The sampled vector of TRUTH (mean anomaly at the reference epoch from the periastron time)."""
    m0 = 2 * math.pi * (space.t_ref - TRUTH.periastron_time) / TRUTH.period_yr
    values = {"mass_msun": TRUTH.mass_msun, "distance_pc": TRUTH.distance_pc, "B.period_yr": TRUTH.period_yr,
              "B.ecc": TRUTH.eccentricity, "B.omega": math.radians(TRUTH.arg_periastron_deg),
              "B.cos_i": math.cos(math.radians(TRUTH.inclination_deg)),
              "B.node": math.radians(TRUTH.ascending_node_deg), "B.m0": m0}
    if not space.windows_final:  # a fresh space: centre its angle windows on the truth
        space.set_centres(space.pack(values))
    return space.pack(values)  # a fitted space keeps its windows; pack wraps the angles into them


# ------------------------------------------------------------- correct model
def test_chi2_at_truth_is_the_drawn_noise_and_dof_counts_constrained_parameters(tmp_path, rng):
    path, noise = write_target(tmp_path, rng)
    space = ParameterSpace(read_target(path))
    theta = truth_theta(space)
    fq, table = assess_fit(space, theta, np.zeros(1), polish=False, rng=np.random.default_rng(1))
    # chi-square at the truth = sum of the squared noise we drew / sigma^2 (independent simulator);
    # tolerances: the tables are written with 6 decimals of a year (~1e-4 mas of orbital motion)
    # and 4 decimals of km/s
    expected_pos = float(np.sum((noise["east"] / 0.5) ** 2 + (noise["north"] / 0.5) ** 2))
    expected_rv = float(np.sum((noise["rv"] / 0.3) ** 2))
    assert fq["datasets"]["B.positions"]["chi2"] == pytest.approx(expected_pos, abs=0.05)
    assert fq["datasets"]["B.velocities.default"]["chi2"] == pytest.approx(expected_rv, abs=0.05)
    assert fq["chi2"] == pytest.approx(expected_pos + expected_rv, abs=0.1)
    # parameters the data constrain: P, e, omega, Omega, i, M0, mass and (with velocities) the
    # distance = 8 (orbital parallax; common practice, no source), and the systemic velocity
    # when it is sampled
    p = 8 + ("systemic" in space.index)
    assert fq["n_parameters"] == p
    assert fq["dof"] == 60 + 20 - p
    assert fq["dof"] == pytest.approx(sum(d["dof"] for d in fq["datasets"].values()), abs=1e-9)
    # p-value and reduced chi-square as scipy.stats defines them
    assert fq["p_value"] == pytest.approx(stats.chi2.sf(fq["chi2"], 80 - p), rel=1e-12)
    assert fq["reduced_chi2"] == pytest.approx(fq["chi2"] / (80 - p))
    for d in fq["datasets"].values():
        assert d["p_value"] == pytest.approx(stats.chi2.sf(d["chi2"], d["dof"]), rel=1e-12)
    assert CONTRACT_KEYS <= set(fq) and all(CONTRACT_KEYS - {"datasets"} <= set(d) for d in fq["datasets"].values())
    assert fq["status"] == "ok"
    # the residual table: one row per measured value, in the measured form
    assert list(table.columns[:8]) == ["companion", "kind", "epoch_jyear", "instrument", "observed", "model",
                                       "sigma", "normalised"]
    assert len(table) == 80
    east = table[table.kind == "east"].normalised.to_numpy()
    assert east == pytest.approx(noise["east"] / 0.5, abs=5e-4)


def test_astrometry_only_dof_drops_the_mass_distance_degeneracy(tmp_path, rng):
    # positions alone fix a^3/P^2 in mas, i.e. M / D^3, not M and D apart (Kepler III; common
    # practice, no source): 7 constrained parameters of the 8 sampled
    path, _ = write_target(tmp_path, rng, n_rv=0)
    space = ParameterSpace(read_target(path))
    fq, _ = assess_fit(space, truth_theta(space), np.zeros(1), polish=False)
    assert space.ndim == 8
    assert fq["n_parameters"] == 7
    assert fq["dof"] == 60 - 7


def test_chi2_matches_the_likelihood_for_polar_correlated_rows(tmp_path, rng):
    # -2 ln L = chi2 + sum ln(2 pi |C|) for Gaussian rows with covariance C (common practice):
    # separation / position-angle rows with correlated errors, as the likelihood evaluates them
    t = np.sort(rng.uniform(2005, 2025, 12))
    sim = simulate(TRUTH, t)
    rho = np.hypot(sim["east_mas"], sim["north_mas"]) + rng.normal(0, 0.5, 12)
    pa = np.degrees(np.arctan2(sim["east_mas"], sim["north_mas"])) % 360 + rng.normal(0, 0.3, 12)
    with open(tmp_path / "pos.csv", "w") as fh:
        fh.write("jyear,rho_mas,theta_deg,rho_err_mas,theta_err_deg,corr\n")
        for k in range(12):
            fh.write(f"{t[k]:.5f},{rho[k]:.5f},{pa[k]:.5f},0.5,0.3,0.4\n")
    (tmp_path / "target.toml").write_text('[target]\nname = "polar"\n' + DIST +
                                          '[[companion]]\nname = "B"\nastrometry = "pos.csv"\n')
    space = ParameterSpace(read_target(tmp_path / "target.toml"))
    theta = truth_theta(space) + 1e-3  # away from the truth: the residuals are not only noise
    fq, table = assess_fit(space, theta, np.zeros(1), polish=False)
    ll = LogPosterior(space).log_likelihood(theta)[0]
    norm = 12 * (math.log(2 * math.pi) + math.log(0.5 * 0.3) + 0.5 * math.log(1 - 0.4**2))
    assert fq["chi2"] == pytest.approx(-2 * (ll + norm), rel=1e-9)
    assert set(table.kind) == {"separation", "position_angle"}


def test_reduced_chi2_near_one_over_noise_realisations(tmp_path, rng):
    # Polished maximum-posterior chi-squares of a correct model follow chi2(n - p): their mean
    # is n - p and their p-values are uniform (Kolmogorov-Smirnov test, scipy.stats.kstest).
    path, _ = write_target(tmp_path, rng, n_pos=15, n_rv=10)
    target = read_target(path)
    comp = target.companions[0]
    space0 = ParameterSpace(target)
    theta0 = truth_theta(space0)
    model = residuals_table(space0, theta0[0])["model"].to_numpy()  # model at the truth
    n_pos = 2 * len(comp.astrometry)
    chi2s, pvals = [], []
    for _ in range(100):
        noisy = model + rng.normal(0, 1, model.size) * np.r_[np.full(n_pos, 0.5), np.full(10, 0.3)]
        astro = dataclasses.replace(comp.astrometry, value1=noisy[0:n_pos:2].copy(), value2=noisy[1:n_pos:2].copy())
        vel = dataclasses.replace(comp.velocities, rv_kms=noisy[n_pos:].copy())
        tgt = dataclasses.replace(target, companions=(dataclasses.replace(comp, astrometry=astro, velocities=vel),))
        space = ParameterSpace(tgt)
        fq, _ = assess_fit(space, truth_theta(space), np.zeros(1), n_draws=1)
        assert fq["point"]["how"] == "polished"
        chi2s.append(fq["chi2"])
        pvals.append(fq["p_value"])
    dof = 40 - 8 - ("systemic" in space.index)
    assert fq["dof"] == dof
    # mean of 100 chi2(32) draws: sd sqrt(2 * 32 / 100) = 0.8; allow 3.5 sd
    assert np.mean(chi2s) == pytest.approx(dof, abs=3.5 * math.sqrt(2 * dof / 100))
    assert stats.kstest(pvals, "uniform").pvalue > 0.01


def test_tiny_fit_of_a_correct_model_is_ok(tmp_path, rng):
    path, _ = write_target(tmp_path, rng)
    fit, caught = quiet_fit(path)
    fq = fit.summary["fit_quality"]
    assert fq["status"] == "ok", fq["reasons"]
    assert not any(issubclass(w.category, PoorFitWarning) for w in caught)
    # 300 steps do not converge: Fit.fit says so, naming parameters, separately from the fit quality
    conv = [str(w.message) for w in caught if issubclass(w.category, ConvergenceWarning)]
    assert not fit.summary["diagnostics"]["converged"]
    assert len(conv) == 1 and "ln_mass" in conv[0] and "(needs" in conv[0]
    band = fq["datasets"]["B.positions"]["band_reduced_chi2"]
    assert band[0] < fq["datasets"]["B.positions"]["reduced_chi2"] < band[1]
    assert 0.5 < fq["reduced_chi2"] < 1.6
    assert fq["p_value"] > 1e-3
    assert 0.0 <= fq["posterior"]["ppc_p_value"] <= 1.0
    # the best point is no worse than the truth by more than the fitted parameters allow
    space = fit.results.space
    at_truth, _ = assess_fit(space, truth_theta(space), np.zeros(1), polish=False)
    assert at_truth["chi2"] - fq["chi2"] > -2.0
    assert "| B positions |" in quality_markdown(fq)
    assert quality_console_lines(fq)[0].startswith("fit quality: ok")


# ------------------------------------------------------------ broken inputs
def _first_cause(fq, key):
    return fq["datasets"][key]["likely_causes"][0]


def test_errors_1000_times_too_small_are_a_poor_fit_with_error_units(tmp_path, rng):
    path, _ = write_target(tmp_path, rng, err_scale=1e-3)
    fit, caught = quiet_fit(path)
    assert any(issubclass(w.category, PoorFitWarning) and "B positions" in str(w.message) for w in caught)
    fq = fit.summary["fit_quality"]
    assert fq["status"] == "poor"
    assert fq["reduced_chi2"] > 1e5  # ~1e6: errors 1000x too small
    assert fq["p_value"] < 1e-300
    assert _first_cause(fq, "B.positions") == "error_units"
    assert _first_cause(fq, "B.velocities.default") == "error_units"
    assert fq["likely_causes"][0]["code"] == "error_units"
    assert "about 1000" in fq["likely_causes"][0]["message"]
    md = quality_markdown(fq)
    assert md.startswith("> **Poor fit") and "B positions" in md
    lines = quality_console_lines(fq)
    assert lines[0].startswith("WARNING: poor fit") and any("likely cause" in s and "unit" in s for s in lines)


def test_unmodelled_zero_point_with_systemic_fixed_is_named(tmp_path, rng):
    path, _ = write_target(tmp_path, rng, rv_shift=60.0, extra=FIXED_SYSTEMIC)
    fit, caught = quiet_fit(path)
    assert any(issubclass(w.category, PoorFitWarning) and "zero point" in str(w.message) for w in caught)
    fq = fit.summary["fit_quality"]
    assert fq["status"] == "poor"
    rv = fq["datasets"]["B.velocities.default"]
    assert rv["status"] == "poor" and rv["p_value"] < 1e-3
    assert rv["likely_causes"][0] == "velocity_zero_point"
    assert fq["likely_causes"][0]["code"] == "velocity_zero_point"
    assert "systemic velocity is fixed" in fq["likely_causes"][0]["message"]
    # the constant is the zero point we put in (60 km/s), up to what the orbit absorbed
    assert "+5" in fq["likely_causes"][0]["message"] or "+6" in fq["likely_causes"][0]["message"]


def test_missing_second_companion_is_named(tmp_path, rng):
    path, _ = write_target(tmp_path, rng, n_pos=80, n_rv=0, pos_err=0.2, wobble_mas=3.0)
    fit, caught = quiet_fit(path)
    assert any(issubclass(w.category, PoorFitWarning) and "second companion" in str(w.message) for w in caught)
    fq = fit.summary["fit_quality"]
    assert fq["status"] == "poor"
    assert _first_cause(fq, "B.positions") == "missing_companion"
    assert fq["datasets"]["B.positions"]["n_rows_beyond_5_sigma"] > 0


def test_summary_json_and_residuals_csv(tmp_path, rng):
    from orbitmass.io.rundir import save_run

    path, _ = write_target(tmp_path / "in", rng, err_scale=1e-3)
    fit, caught = quiet_fit(path)
    assert any(issubclass(w.category, PoorFitWarning) for w in caught)
    out = save_run(fit.results, tmp_path / "run", products=False)
    summary = json.loads((out / "summary.json").read_text())
    fq = summary["fit_quality"]
    assert CONTRACT_KEYS <= set(fq) and fq["status"] == "poor"
    assert summary["diagnostics"]["converged"] in (True, False)  # sampling stays a separate statement
    res = pd.read_csv(out / "residuals.csv")
    assert list(res.columns[:8]) == ["companion", "kind", "epoch_jyear", "instrument", "observed", "model", "sigma",
                                     "normalised"]
    assert len(res) == 80
    assert np.allclose(res.normalised, (res.observed - res.model) / res.sigma)  # no angle rows here
    # a loaded run keeps them (posterior.h5), so saving it again writes the same residuals.csv
    from orbitmass import load

    again = save_run(load(out).results, tmp_path / "again", products=False)
    assert pd.read_csv(again / "residuals.csv").equals(res)


# ------------------------------------------------------------ velocity only
def test_sun_reflex_from_jupiter_and_mass_function(tmp_path):
    # references.md: Sun reflex from Jupiter, M/m = 1047.348644 (IAU 2009), P = 4332.589 d,
    # sin i = 1, e = 0: K = 12.4617 m/s (computed). Mass function by its standard definition
    # f = P K^3 (1 - e^2)^(3/2) / (2 pi G) evaluated with astropy constants, and the identity
    # f = m^3 sin^3 i / (M + m)^2 (Kepler III).
    import astropy.constants as const
    import astropy.units as u

    t = np.linspace(2000, 2012, 12)
    write_velocities_csv(tmp_path / "rv.csv", t, np.zeros(12), 0.001, body=["central"] * 12)
    (tmp_path / "target.toml").write_text('[target]\nname = "invented star"\n' + DIST +
                                          '[[companion]]\nname = "b"\nvelocities = "rv.csv"\n')
    space = ParameterSpace(read_target(tmp_path / "target.toml"))
    q = 1 / 1047.348644
    p_yr = 4332.589 / 365.25
    theta = space.pack({"mass_msun": 1 + q, "distance_pc": 20.0, "b.period_yr": p_yr, "b.ecc": 0.0,
                        "b.omega": 0.0, "b.cos_i": 0.0, "b.node": 1.0, "b.m0": 0.3, "b.q": q})
    cols = derive_samples(space, theta)
    k_sun = float(cols["b.semi_amplitude_central_kms"].iloc[0])
    assert k_sun * 1000 == pytest.approx(12.4617, abs=5e-4)
    f_ref = (4332.589 * u.day * (12.4617 * u.m / u.s) ** 3 / (2 * math.pi * const.G)).to(u.M_sun).value
    # const.G M_sun vs the IAU nominal GM_sun used inside: agree to 1e-4 (references.md constants)
    assert float(mass_function_msun(p_yr, k_sun, 0.0)) == pytest.approx(f_ref, rel=2e-4)
    assert float(mass_function_msun(p_yr, k_sun, 0.0)) == pytest.approx(q**3 / (1 + q) ** 2, rel=1e-4)
    # eccentric: the (1 - e^2)^(3/2) factor of the definition
    assert float(mass_function_msun(p_yr, 1.0, 0.6) / mass_function_msun(p_yr, 1.0, 0.0)) == pytest.approx(0.8**3)
    # the velocity-only columns; the companion's own K gives f = M_c^3 sin^3 i / M^2
    assert float(cols["b.m_sin3i_msun"].iloc[0]) == pytest.approx(1 + q)
    assert float(cols["b.a_sin_i_au"].iloc[0]) == pytest.approx((GM_SUN_AU3_PER_YR2 / (4 * math.pi**2) * (1 + q)
                                                                 * p_yr**2) ** (1 / 3), rel=1e-12)
    assert float(cols["b.mass_function_msun"].iloc[0]) == pytest.approx(1 / (1 + q) ** 2, rel=1e-9)
    flags = prior_dominated(space)["b"]
    assert flags["prior_dominated"][:3] == ["mass_msun", "inclination_deg", "ascending_node_deg"]
    assert "M sin^3 i" in flags["prior_dominated_note"]


def test_velocity_only_fit_flags_prior_dominated_quantities(tmp_path, rng):
    t = np.sort(rng.uniform(2005, 2025, 25))
    write_velocities_csv(tmp_path / "rv.csv", t, simulate(TRUTH, t)["rv_companion_kms"] + rng.normal(0, 0.3, 25),
                         0.3)
    (tmp_path / "target.toml").write_text('[target]\nname = "invented star"\n' + DIST +
                                          '[[companion]]\nname = "B"\nvelocities = "rv.csv"\n')
    fit, caught = quiet_fit(tmp_path / "target.toml")
    comp = fit.summary["companions"]["B"]
    assert comp["prior_dominated"][:3] == ["mass_msun", "inclination_deg", "ascending_node_deg"]
    assert any(issubclass(w.category, DegeneracyWarning) and "mass_msun" in str(w.message) for w in caught)
    m_sin3i = TRUTH.mass_msun * math.sin(math.radians(TRUTH.inclination_deg)) ** 3
    assert comp["m_sin3i_msun"]["q2.5"] < m_sin3i < comp["m_sin3i_msun"]["q97.5"]
    assert comp["mass_function_msun"]["median"] == pytest.approx(comp["m_sin3i_msun"]["median"], rel=1e-9)
    fq = fit.summary["fit_quality"]
    assert fq["status"] == "ok"
    # velocities fix P, e, omega, M0, K (and nothing of the node or the distance): 5 parameters,
    # and the systemic velocity when it is sampled
    assert fq["n_parameters"] == 5 + ("systemic" in fit.results.space.index)


# ------------------------------------------------------------------ warnings
def test_issue_warnings_names_parameters_and_datasets():
    # common practice, no source: each warning class is raised with the name of what failed
    summary = {
        "diagnostics": {"converged": False, "n_steps": 1000, "burn": 200, "interrupted": False,
                        "per_parameter": {"ln_mass": {"tau": 10.0, "ess": 800.0, "rhat": 1.004},
                                          "C1.ln_period": {"tau": 40.0, "ess": 150.0, "rhat": 1.05}},
                        "period_modes": {"C1": 2}, "omega_node_ambiguous": []},
        "companions": {"C1": {}},
        "fit_quality": {"chi2": 1e6, "dof": 10.0, "p_value": 0.0, "status": "poor",
                        "datasets": {"C1.positions": {"label": "C1 positions", "status": "poor"}},
                        "likely_causes": [{"code": "error_units", "dataset": "C1.positions",
                                           "message": "C1 positions: errors too small"}]},
    }
    with pytest.warns(OrbitmassWarning) as record:
        issue_warnings(summary)
    by_class = {type(w.message): str(w.message) for w in record}
    assert "C1.ln_period: split R-hat 1.050 (needs < 1.01)" in by_class[ConvergenceWarning]
    assert "C1.ln_period: ESS 150" in by_class[ConvergenceWarning]
    assert "ln_mass" not in by_class[ConvergenceWarning]
    assert "C1.period" in by_class[DegeneracyWarning]
    assert "C1 positions" in by_class[PoorFitWarning] and "errors too small" in by_class[PoorFitWarning]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        summary["diagnostics"].update(converged=True, period_modes={})
        summary["fit_quality"]["status"] = "ok"
        issue_warnings(summary)  # nothing to say: no warning (would raise here)


def test_one_row_beyond_5_sigma_is_poor_and_named(tmp_path, rng):
    # issue 11 item 4: a row beyond 5 sigma makes the fit "poor"; 5 sigma = two-sided Gaussian
    # tail 5.7e-7 (scipy.stats.norm); here one east offset is moved by 8 sigma
    path, _ = write_target(tmp_path, rng)
    target = read_target(path)
    comp = target.companions[0]
    east = comp.astrometry.value1.copy()
    east[7] += 8 * 0.5
    tgt = dataclasses.replace(target, companions=(dataclasses.replace(
        comp, astrometry=dataclasses.replace(comp.astrometry, value1=east)),))
    space = ParameterSpace(tgt)
    fq, table = assess_fit(space, truth_theta(space), np.zeros(1), polish=False)
    d = fq["datasets"]["B.positions"]
    assert d["n_rows_beyond_5_sigma"] == 1
    assert d["status"] == "poor" and fq["status"] == "poor"
    assert d["likely_causes"] == ["outlier"]
    assert any("beyond 5 sigma" in r for r in fq["reasons"])
    assert table.normalised.abs().max() > 7.0


def test_unmodelled_relativistic_redshift_is_named(tmp_path):
    # A star on an e = 0.88, 16-yr orbit about 4e6 M_sun (invented), velocities carrying the
    # first-order gravitational redshift and transverse Doppler shift (GM/r + v^2/2)/c (common
    # practice, no source; ~190 km/s at periastron here) that the Keplerian model lacks.
    from orbitmass.core.kepler import mean_to_true
    from orbitmass.units import C_KMS, KMS_PER_AU_PER_YR

    star = TrueOrbit(mass_msun=4e6, distance_pc=8000.0, period_yr=16.0, eccentricity=0.88, inclination_deg=134.0,
                     arg_periastron_deg=66.0, ascending_node_deg=228.0, periastron_time=2018.4)
    rng = np.random.default_rng(4)
    tp = np.sort(np.r_[rng.uniform(2003, 2022, 40), rng.uniform(2017.9, 2018.9, 20)])
    s = simulate(star, tp)
    write_positions_csv(tmp_path / "pos.csv", tp, s["east_mas"] + rng.normal(0, 0.5, tp.size),
                        s["north_mas"] + rng.normal(0, 0.5, tp.size), 0.5)
    tv = np.sort(np.r_[rng.uniform(2003, 2022, 25), rng.uniform(2017.9, 2018.9, 25)])
    nu = mean_to_true(2 * math.pi * (tv - star.periastron_time) / star.period_yr, star.eccentricity)
    a, e = star.semimajor_axis_au, star.eccentricity
    r = a * (1 - e * e) / (1 + e * np.cos(nu))
    gm = GM_SUN_AU3_PER_YR2 * star.mass_msun * KMS_PER_AU_PER_YR**2  # au (km/s)^2
    shift = (gm / r + 0.5 * gm * (2 / r - 1 / a)) / C_KMS
    assert 150 < shift.max() < 250
    write_velocities_csv(tmp_path / "rv.csv", tv, simulate(star, tv)["rv_companion_kms"] + shift
                         + rng.normal(0, 10, tv.size), 10.0)
    (tmp_path / "target.toml").write_text(
        '[target]\nname = "invented nucleus"\n[central]\nmass = { dist = "log-uniform", low = "1e5 solMass", '
        'high = "1e8 solMass" }\nsystemic = { dist = "fixed", value = "0 km / s" }\n'
        '[distance]\nprior = { dist = "uniform", low = "4 kpc", high = "12 kpc" }\n'
        '[[companion]]\nname = "S"\nastrometry = "pos.csv"\nvelocities = "rv.csv"\n')
    # the systemic velocity is fixed (the velocities are relative to the system): a free one
    # absorbs much of the redshift's mean, and the misfit then shows in the elements, not in chi^2
    space = ParameterSpace(read_target(tmp_path / "target.toml"))
    values = {"mass_msun": star.mass_msun, "distance_pc": star.distance_pc, "S.period_yr": star.period_yr,
              "S.ecc": e, "S.omega": math.radians(star.arg_periastron_deg),
              "S.cos_i": math.cos(math.radians(star.inclination_deg)), "S.node": math.radians(star.ascending_node_deg),
              "S.m0": 2 * math.pi * (space.t_ref - star.periastron_time) / star.period_yr}
    space.set_centres(space.pack(values))
    fq, _ = assess_fit(space, space.pack(values), np.zeros(1))  # polished from the truth: the best Keplerian
    assert fq["point"]["how"] == "polished"
    rv = fq["datasets"]["S.velocities.default"]
    assert rv["status"] == "poor"
    assert rv["likely_causes"][0] == "relativistic"
