"""Tests of orbitmass.compare: tension arithmetic, overlap, references, joint refit, outputs.

External references used (named again beside each check):
- scipy.stats.norm (Phi, its inverse) and scipy.integrate.quad / scipy.optimize.brentq as
  reference numerics;
- the difference of two independent normals is normal with variances added (standard
  result, from memory), so two Gaussian posteriors N(m1, s1), N(m2, s2) are in tension at
  |m1 - m2| / sqrt(s1^2 + s2^2) sigma;
- the Bhattacharyya coefficient of two normals (Bhattacharyya 1943, Bull. Calcutta Math.
  Soc. 35, 99; formula from memory) BC = sqrt(2 s1 s2 / (s1^2 + s2^2))
  exp(-(m1 - m2)^2 / (4 (s1^2 + s2^2))), cross-checked by quadrature;
- the ratio X / Y of independent normals with Y > 0: P(X / Y < r) = Phi((r m2 - m1) /
  sqrt(s1^2 + r^2 s2^2)) (Geary 1930, Hinkley 1969; from memory, derived again in the
  test), so its median is exactly m1 / m2;
- the two-piece normal (John 1982, Commun. Stat. Theory Methods 11, 879; from memory):
  P(X < mode) = s_minus / (s_minus + s_plus);
- astropy.units for mass-unit conversions.

The joint-refit tests fit two invented stars around one invented dark mass (simulated
with orbitmass.demo.simulate, a different formulation from the fitted model); they are marked
slow.
"""

from __future__ import annotations

import argparse
import json
import math
from dataclasses import replace
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from scipy import integrate, optimize, stats

from orbitmass.cli.compare import add_parser as add_compare_parser
from orbitmass.cli.compare import run as cmd_compare
from orbitmass.compare import (
    DEFAULT_THRESHOLD_SIGMA,
    Comparison,
    MassPosterior,
    combined_refit,
    combined_target,
    compare,
    compare_samples,
    parse_reference,
    tension_sigma,
)
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.exceptions import InputError, RunFolderError
from orbitmass.io.target import read_target
from orbitmass.units import RS_AU_PER_MSUN

from tests.helpers.comparison import TRUTH_A, TRUTH_B, WIDE_DISTANCE, two_datasets
from tests.helpers.targets import make_target

N_SAMPLES = 40000


def gaussian(rng, mean, sd, n=N_SAMPLES):
    return rng.normal(mean, sd, n)


# ------------------------------------------------------------------------------ tension
@pytest.mark.parametrize(
    ("m1", "s1", "m2", "s2"),
    [
        (4.1e6, 0.1e6, 3.7e6, 0.12e6),  # 2.56 sigma
        (4.1e6, 0.1e6, 4.0e6, 0.3e6),  # 0.32 sigma, unequal widths
        (2.0, 0.05, 1.7, 0.08),  # 3.18 sigma, a stellar binary
    ],
)
def test_tension_of_gaussian_posteriors_matches_analytic(rng, m1, s1, m2, s2):
    a, b = gaussian(rng, m1, s1), gaussian(rng, m2, s2)
    res = compare_samples(a, b, rng=np.random.default_rng(5))
    # difference of independent normals: N(m1 - m2, s1^2 + s2^2) (standard result, from memory)
    expected = abs(m1 - m2) / math.hypot(s1, s2)
    assert not res.tension_is_lower_bound
    assert abs(res.tension_sigma - expected) < 4 * res.tension_sigma_mc_error
    # the stated Monte Carlo error is of the right size: binomial error of the tail with
    # 40000 draws, converted with scipy's normal density
    p_tail = stats.norm.sf(expected)
    assert res.tension_sigma_mc_error == pytest.approx(
        math.sqrt(p_tail * (1 - p_tail) / N_SAMPLES) / stats.norm.pdf(expected), rel=0.15
    )
    # two-sided p of scipy: 2 Phi(-|d|)
    assert res.p_two_sided == pytest.approx(2 * stats.norm.sf(expected), rel=0.1, abs=1e-4)
    # the verdict follows the documented 3 sigma threshold (common practice, no source)
    assert res.verdict == ("tension" if expected >= DEFAULT_THRESHOLD_SIGMA else "consistent")


def test_tension_against_a_reference_uses_its_exact_distribution(rng):
    a = gaussian(rng, 4.1e6, 0.1e6)
    ref = parse_reference("3.7e6 +- 0.12e6 solMass")
    res = compare_samples(a, ref, rng=np.random.default_rng(1), kind="run-reference")
    # same analytic value as two Gaussians (from memory, see module docstring)
    expected = 0.4e6 / math.hypot(0.1e6, 0.12e6)
    assert abs(res.tension_sigma - expected) < 4 * res.tension_sigma_mc_error
    assert res.tension_sigma == pytest.approx(expected, abs=0.05)
    assert res.kind == "run-reference"


def test_tension_sigma_from_tail_probability_matches_scipy():
    # Phi^-1 of scipy: P = norm.sf(2) -> exactly 2 sigma, either side
    for p in (stats.norm.sf(2.0), stats.norm.cdf(2.0)):
        sigma, bound, err = tension_sigma(float(p), math.inf)
        assert sigma == pytest.approx(2.0, abs=1e-9)
        assert not bound and err == 0.0
    # p = 0.5: no tension at all
    assert tension_sigma(0.5, math.inf)[0] == pytest.approx(0.0, abs=1e-12)


def test_unresolvable_tail_gives_a_lower_bound_only(rng):
    a = MassPosterior.from_samples("a", gaussian(rng, 4.1e6, 0.05e6, 20000), n_eff=5000)
    b = MassPosterior.from_samples("b", gaussian(rng, 3.0e6, 0.05e6, 20000), n_eff=3000)
    res = compare_samples(a, b, rng=np.random.default_rng(2))
    # the analytic tension is 15.6 sigma; no draw crosses zero, so only a bound is honest:
    # 95 % Poisson upper limit -ln(0.05) / n_eff on the tail, n_eff = the smaller ESS
    assert res.tension_is_lower_bound
    assert res.tension_sigma_mc_error is None
    assert res.n_eff == 3000
    assert res.tension_sigma == pytest.approx(stats.norm.isf(-math.log(0.05) / 3000), rel=1e-12)
    assert res.tension_sigma < 1.1e6 / math.hypot(0.05e6, 0.05e6)  # a bound below the truth
    assert res.verdict == "tension" and "> 3." in res.statement
    assert res.sigma_normal_approx == pytest.approx(1.1e6 / math.hypot(0.05e6, 0.05e6), rel=0.02)
    # with few effective samples the bound cannot reach 3 sigma: undecided, not "tension"
    small = compare_samples(MassPosterior.from_samples("s", a.mass_msun, n_eff=200), b,
                            rng=np.random.default_rng(3))
    assert small.verdict == "unresolved"
    assert small.tension_sigma < DEFAULT_THRESHOLD_SIGMA


# ------------------------------------------------------------------------ difference, ratio
def test_difference_and_ratio_posteriors_of_gaussians(rng):
    m1, s1, m2, s2 = 4.1e6, 0.1e6, 3.7e6, 0.12e6
    res = compare_samples(gaussian(rng, m1, s1), gaussian(rng, m2, s2), rng=np.random.default_rng(7),
                          n_draws=200_000)
    s = math.hypot(s1, s2)
    d = res.difference_msun
    # quantiles of N(m1 - m2, s) from scipy
    for key, q in (("median", 0.5), ("q16", 0.15865525393145707), ("q84", 0.8413447460685429)):
        assert d[key] == pytest.approx(stats.norm.ppf(q, m1 - m2, s), abs=0.03 * s)

    # ratio of independent normals with Y > 0: P(X/Y < r) = Phi((r m2 - m1) / sqrt(s1^2 + r^2 s2^2))
    # (Geary 1930, Hinkley 1969; from memory: X - rY is normal), so the median is m1 / m2
    def ratio_quantile(q):
        return optimize.brentq(lambda r: stats.norm.cdf((r * m2 - m1) / math.hypot(s1, r * s2)) - q, 0.5, 2.0)

    assert res.ratio["median"] == pytest.approx(m1 / m2, abs=2e-3)
    assert res.ratio["q16"] == pytest.approx(ratio_quantile(0.15865525393145707), abs=3e-3)
    assert res.ratio["q84"] == pytest.approx(ratio_quantile(0.8413447460685429), abs=3e-3)


# ------------------------------------------------------------------------------- overlap
def _bc_normal(m1, s1, m2, s2):
    # Bhattacharyya (1943) for two normals (formula from memory)
    v = s1 * s1 + s2 * s2
    return math.sqrt(2 * s1 * s2 / v) * math.exp(-((m1 - m2) ** 2) / (4 * v))


@pytest.mark.parametrize(("m2", "s2"), [(3.7e6, 0.12e6), (4.0e6, 0.1e6), (4.1e6, 0.3e6)])
def test_bhattacharyya_coefficient_of_gaussians(rng, m2, s2):
    m1, s1 = 4.1e6, 0.1e6
    res = compare_samples(gaussian(rng, m1, s1), gaussian(rng, m2, s2), rng=np.random.default_rng(3))
    analytic = _bc_normal(m1, s1, m2, s2)
    # the formula itself against scipy quadrature of sqrt(p q)
    lo, hi = min(m1 - 10 * s1, m2 - 10 * s2), max(m1 + 10 * s1, m2 + 10 * s2)
    quad = integrate.quad(lambda x: math.sqrt(stats.norm.pdf(x, m1, s1) * stats.norm.pdf(x, m2, s2)), lo, hi,
                          points=[m1, m2], limit=200)[0]
    assert quad == pytest.approx(analytic, abs=1e-8)
    # the estimate: kernel smoothing widens each density by ~1 %, so allow 0.01
    assert res.bhattacharyya == pytest.approx(analytic, abs=0.01)


def test_overlapping_coefficient_of_equal_width_gaussians(rng):
    m1, m2, s = 4.1e6, 3.9e6, 0.1e6
    res = compare_samples(gaussian(rng, m1, s), gaussian(rng, m2, s), rng=np.random.default_rng(4))
    # equal widths: OVL = 2 Phi(-|m1 - m2| / (2 s)) (Inman & Bradley 1989, from memory; scipy's Phi)
    assert res.overlapping_coefficient == pytest.approx(2 * stats.norm.cdf(-abs(m1 - m2) / (2 * s)), abs=0.01)
    same = compare_samples(gaussian(rng, m1, s), gaussian(rng, m1, s), rng=np.random.default_rng(4))
    assert same.bhattacharyya == pytest.approx(1.0, abs=0.005)
    assert same.overlapping_coefficient == pytest.approx(1.0, abs=0.03)


# ---------------------------------------------------------------------------- references
@pytest.mark.parametrize(
    ("text", "label", "value", "minus", "plus"),
    [
        ("4.1e6 +- 0.1e6 solMass", "4.1e6 +- 0.1e6 solMass", 4.1e6, 0.1e6, 0.1e6),
        ("4.1e6 ± 0.1e6 solMass", "4.1e6 ± 0.1e6 solMass", 4.1e6, 0.1e6, 0.1e6),
        ("4.1e6+/-0.1e6 solMass", "4.1e6+/-0.1e6 solMass", 4.1e6, 0.1e6, 0.1e6),
        ("disc=4.1e6 +0.2e6 -0.1e6 solMass", "disc", 4.1e6, 0.1e6, 0.2e6),
        ("stars = 4.1e6 \u22120.1e6 +0.3e6 solMass", "stars", 4.1e6, 0.1e6, 0.3e6),  # unicode minus
        ("1.7 +- 0.02 Msun", "1.7 +- 0.02 Msun", 1.7, 0.02, 0.02),
    ],
)
def test_parse_reference_forms(text, label, value, minus, plus):
    ref = parse_reference(text)
    assert (ref.label, ref.text) == (label, text.strip())
    assert ref.mass_msun == pytest.approx(value, rel=1e-12)
    assert (ref.sd_minus_msun, ref.sd_plus_msun) == pytest.approx((minus, plus), rel=1e-12)


def test_parse_reference_converts_units_with_astropy():
    ref = parse_reference("8.0e36 +- 2.0e35 kg")
    # astropy's IAU 2015 nominal solar mass
    assert ref.mass_msun == pytest.approx((8.0e36 * u.kg).to_value(u.solMass), rel=1e-12)
    assert ref.sd_plus_msun == pytest.approx((2.0e35 * u.kg).to_value(u.solMass), rel=1e-12)
    jup = parse_reference("1000 +- 10 Mjup")
    assert jup.mass_msun == pytest.approx((1000 * u.Mjup).to_value(u.solMass), rel=1e-12)


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("4.1e6 solMass", "cannot read"),
        ("4.1e6 +- 0.1e6", "no unit"),
        ("4.1e6 +- 0.1e6 km", "not a mass unit"),
        ("4.1e6 +- 0.1e6 bananas", "not a unit"),
        ("4.1e6 +- 0 solMass", "errors must be positive"),
        ("-4.1e6 +- 0.1e6 solMass", "cannot read"),
        ("=4.1e6 +- 0.1e6 solMass", "empty name"),
        ("about four million", "cannot read"),
    ],
)
def test_parse_reference_rejects_bad_strings_naming_the_option(text, fragment):
    with pytest.raises(InputError) as err:
        parse_reference(text, key="--reference")
    assert err.value.key == "--reference"
    assert fragment in str(err.value)
    assert repr(text) in str(err.value)


def test_two_piece_normal_reference_is_a_proper_distribution(rng):
    ref = parse_reference("4.1e6 +0.3e6 -0.1e6 solMass")
    # P(X < mode) = s_minus / (s_minus + s_plus) (John 1982, from memory)
    assert float(ref.cdf(4.1e6)) == pytest.approx(0.25, abs=1e-12)
    # the density integrates to its cdf (scipy quadrature)
    for x in (3.9e6, 4.1e6, 4.5e6):
        quad = integrate.quad(lambda m: float(ref.pdf(m)), 2.0e6, x, points=[4.1e6] if x > 4.1e6 else None)[0]
        assert quad == pytest.approx(float(ref.cdf(x)), abs=1e-9)
    q = ref.quantiles()
    for key, p in (("q16", 0.15865525393145707), ("median", 0.5), ("q97.5", 0.975)):
        assert float(ref.cdf(q[key])) == pytest.approx(p, abs=1e-12)
    draws = ref.draw(rng, 200_000)
    assert np.mean(draws < 4.1e6) == pytest.approx(0.25, abs=0.005)


# ------------------------------------------------------------------------------- outputs
def _posterior(rng, label, mass, sd, a_au, e, n=20000):
    """Invented Gaussian posterior of a mass and one companion's radii (not a fit)."""
    m = rng.normal(mass, sd, n)
    a = rng.normal(a_au, 0.01 * a_au, n)
    rs = RS_AU_PER_MSUN * m
    return MassPosterior.from_samples(label, m, n_eff=n / 4, radii={
        f"{label}-star": {"semimajor_axis_au": a, "periastron_au": a * (1 - e), "periastron_rs": a * (1 - e) / rs}})


def _three_way(rng) -> Comparison:
    runs = [_posterior(rng, "north", 3.6e6, 0.08e6, 950.0, 0.7), _posterior(rng, "south", 3.5e6, 0.12e6, 610.0, 0.4)]
    joint = _posterior(rng, "joint", 3.57e6, 0.06e6, 950.0, 0.7)
    return compare(runs, references=["gas=3.1e6 +0.5e6 -0.4e6 solMass", "2.0e6 +- 0.1e6 solMass"],
                   combined=joint, seed=11)


def test_comparison_json_keys_and_reproducibility(rng):
    cmp = _three_way(rng)
    d = json.loads(cmp.to_json())  # strict JSON: the writer refuses NaN
    assert set(d) == {"orbitmass_version", "created_utc", "seed", "n_draws", "threshold_sigma", "method", "runs",
                      "references", "comparisons", "combined"}
    assert [r["label"] for r in d["runs"]] == ["north", "south"]
    assert set(d["runs"][0]) == {"label", "target", "source", "companions", "n_samples", "n_eff", "converged",
                                 "mass_msun", "radii"}
    assert set(d["runs"][0]["mass_msun"]) == {"median", "q16", "q84", "q2.5", "q97.5"}
    # 1 run pair, 2 runs x 2 references, joint x 2 references
    assert [c["kind"] for c in d["comparisons"]] == ["run-run"] + ["run-reference"] * 4 + ["joint-reference"] * 2
    assert set(d["comparisons"][0]) >= {"a", "b", "difference_msun", "ratio", "p_a_greater", "p_b_greater",
                                        "p_two_sided", "tension_sigma", "tension_is_lower_bound",
                                        "tension_sigma_mc_error", "sigma_normal_approx", "n_eff", "bhattacharyya",
                                        "overlapping_coefficient", "verdict", "statement"}
    far = [c for c in d["comparisons"] if c["b"] == "2.0e6 +- 0.1e6 solMass"]
    assert all(c["tension_is_lower_bound"] and c["verdict"] == "tension" for c in far)
    assert d["combined"]["narrower_than_every_part"] is True
    # same seed, same numbers
    again = json.loads(_three_way(np.random.default_rng(20261201)).to_json())
    first = json.loads(_three_way(np.random.default_rng(20261201)).to_json())
    again.pop("created_utc"), first.pop("created_utc")
    assert again == first


def test_write_produces_every_file_and_refuses_non_empty_folder(rng, tmp_path):
    cmp = _three_way(rng)
    out = cmp.write(tmp_path / "cmp")
    names = sorted(p.name for p in out.iterdir())
    # the marker of orbitmass._atomic says orbitmass wrote the folder (so --overwrite may replace it)
    assert names == [".orbitmass-run", "comparison.json", "comparison.md", "comparison.pdf", "comparison.png",
                     "enclosed_mass.pdf", "enclosed_mass.png"]
    assert (out / "comparison.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (out / "enclosed_mass.pdf").read_bytes()[:5] == b"%PDF-"
    md = (out / "comparison.md").read_text(encoding="utf-8")
    assert "σ (lower bound from the samples; normal approx." in md
    assert "## Joint refit" in md and "![comparison](comparison.png)" in md
    before = (out / "comparison.json").read_bytes()
    with pytest.raises(RunFolderError, match="not empty"):
        cmp.write(out)
    assert (out / "comparison.json").read_bytes() == before  # nothing of the user's touched
    cmp.write(out, overwrite=True)
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no staging left behind


def test_figures_have_units_and_log_radius_axis(rng):
    cmp = _three_way(rng)
    fig = cmp.figure()
    ax_d, ax_i = fig.axes[:2]
    assert r"10^{6}\,M_\odot" in ax_i.get_xlabel()
    assert [t.get_text() for t in ax_i.get_yticklabels()] == ["2.0e6 +- 0.1e6 solMass", "gas", "joint refit", "south",
                                                              "north"]
    fig2 = cmp.enclosed_mass_figure()
    ax = fig2.axes[0]
    assert ax.get_xscale() == "log" and "[au]" in ax.get_xlabel()
    assert r"M(<r)" in ax.get_ylabel() and r"M_\odot" in ax.get_ylabel()
    (top,) = ax.child_axes  # the secondary (top) axis
    assert r"R_\mathrm{S}" in top.get_xlabel()
    # secondary axis: au -> Schwarzschild radii 2GM/c^2 of the joint median mass (astropy constants)
    import astropy.constants as const
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig2).draw()
    rs_au = float((2 * const.G * np.median(cmp.combined.mass_msun) * u.solMass / const.c**2).to_value(u.au))
    assert top.get_xlim() == pytest.approx(tuple(x / rs_au for x in ax.get_xlim()), rel=1e-6)


def test_plain_samples_over_decades(rng, tmp_path):
    dwarf = MassPosterior.from_samples("dwarf", rng.lognormal(math.log(3e5), 0.1, 20000))
    giant = MassPosterior.from_samples("giant", rng.lognormal(math.log(4e8), 0.05, 20000))
    cmp = compare([dwarf, giant], seed=2)
    assert cmp.figure().axes[1].get_xscale() == "log"  # masses three decades apart
    out = cmp.write(tmp_path / "c")
    # no companion radii in plain samples: no enclosed-mass figure, and none linked
    assert sorted(p.name for p in out.iterdir()) == [".orbitmass-run", "comparison.json", "comparison.md",
                                                     "comparison.pdf", "comparison.png"]
    assert "enclosed_mass" not in (out / "comparison.md").read_text(encoding="utf-8")
    assert cmp.pairs[0].verdict == "tension" and cmp.pairs[0].tension_is_lower_bound


def test_compare_needs_something_to_compare(rng):
    one = MassPosterior.from_samples("only", gaussian(rng, 1.0, 0.1))
    with pytest.raises(InputError, match="nothing to compare"):
        compare([one])
    with pytest.raises(InputError, match="labels"):
        compare([one, one], labels=["x"])
    cmp = compare([one, one])  # duplicate labels are made unique
    assert [r.label for r in cmp.runs] == ["only", "only (2)"]


# ---------------------------------------------------------------------- combined target
def test_combined_target_is_the_union(tmp_path, rng):
    pa, pb = two_datasets(tmp_path, rng)
    ta, tb = read_target(pa), read_target(pb)
    joint = combined_target([ta, tb], labels=["A", "B"])
    assert [c.name for c in joint.companions] == ["SA", "SB"]
    assert joint.companions[0].astrometry is ta.companions[0].astrometry
    assert joint.distance == ta.distance and joint.central_priors == ta.central_priors
    assert list(joint.instruments) == ["default"]  # same name, same priors: one instrument
    assert joint.name == "joint: A + B" and len(joint.data_sha256) == 64


def test_combined_target_renames_or_merges_a_shared_companion_name(tmp_path, rng):
    pa, pb = two_datasets(tmp_path, rng, name_b="SA")
    ta, tb = read_target(pa), read_target(pb)
    renamed = combined_target([ta, tb], labels=["team.one", "two"])
    assert [c.name for c in renamed.companions] == ["team_one:SA", "two:SA"]
    merged = combined_target([ta, tb], labels=["one", "two"], same_companion="merge")
    (comp,) = merged.companions
    n_a, n_b = len(ta.companions[0].astrometry), len(tb.companions[0].astrometry)
    assert len(comp.astrometry) == n_a + n_b
    assert np.all(np.diff(comp.astrometry.t_yr) >= 0)
    assert sorted(comp.astrometry.value1) == sorted(np.concatenate([ta.companions[0].astrometry.value1,
                                                                    tb.companions[0].astrometry.value1]))
    assert len(comp.velocities) == len(ta.companions[0].velocities) + len(tb.companions[0].velocities)
    with pytest.raises(InputError, match="same_companion"):
        combined_target([ta, tb], same_companion="average")


def test_combined_target_refuses_conflicting_distance_unless_told(tmp_path, rng):
    pa, pb = two_datasets(tmp_path, rng, distance_b='prior = { dist = "normal", mean = "9 kpc", sd = "0.5 kpc" }')
    ta, tb = read_target(pa), read_target(pb)
    with pytest.raises(InputError) as err:
        combined_target([ta, tb], labels=["A", "B"])
    assert err.value.key == "distance" and "priors_from" in str(err.value)
    joint = combined_target([ta, tb], labels=["A", "B"], priors_from="B")
    assert joint.distance == tb.distance
    with pytest.raises(InputError, match="not one of the run labels"):
        combined_target([ta, tb], labels=["A", "B"], priors_from="C")


def test_combined_target_refuses_one_instrument_with_two_priors(tmp_path, rng):
    extra = '[instruments.default]\noffset = { dist = "normal", mean = "0 km / s", sd = "5 km / s" }\n'
    pa, pb = two_datasets(tmp_path, rng, extra_b=extra)
    with pytest.raises(InputError) as err:
        combined_target([pa, pb])  # target files are read on the way
    assert err.value.key == "instruments.default"


def test_combined_target_refuses_epoch_tied_priors_at_different_epochs(tmp_path, rng):
    tied = 'mean_anomaly = { dist = "normal", mean = "30 deg", sd = "5 deg" }'
    pa, pb = two_datasets(tmp_path, rng, companion_b=tied)
    ta, tb = read_target(pa), read_target(pb)
    assert ta.reference_epoch != tb.reference_epoch  # default: the mean epoch of each dataset
    with pytest.raises(InputError) as err:
        combined_target([ta, tb], labels=["A", "B"])
    assert err.value.key == "target.reference_epoch" and "B:SB" in str(err.value)


# ------------------------------------------------------------------------------ CLI
def _cli(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(prog="orbitmass")
    add_compare_parser(parser.add_subparsers(dest="command"))
    return cmd_compare(parser.parse_args(["compare", *argv]))


def test_cli_rejects_bad_options_before_any_work(tmp_path):
    with pytest.raises(InputError) as err:
        _cli(["r1", "r2", "--reference", "4e6 solMass", "--out", str(tmp_path / "o")])
    assert err.value.key == "--reference"
    with pytest.raises(InputError) as err:
        _cli(["r1", "r2", "--label", "only-one", "--out", str(tmp_path / "o")])
    assert err.value.key == "--label"
    (tmp_path / "full").mkdir()
    (tmp_path / "full" / "keep.txt").write_text("user file", encoding="utf-8")
    with pytest.raises(RunFolderError, match="not empty"):
        _cli(["r1", "r2", "--out", str(tmp_path / "full")])
    assert (tmp_path / "full" / "keep.txt").read_text(encoding="utf-8") == "user file"
    with pytest.raises(RunFolderError, match="summary.json is missing"):
        _cli([str(tmp_path / "nothing-here"), str(tmp_path / "x"), "--out", str(tmp_path / "o")])


# ------------------------------------------------------------------ joint refit (slow)
@pytest.fixture(scope="module")
def fitted_parts(tmp_path_factory):
    """Two invented stars around one invented 2.0e6 Msun mass at 9 kpc, each fitted alone."""
    from orbitmass import Fit
    from orbitmass.io.rundir import save_run

    folder = tmp_path_factory.mktemp("parts")
    pa, pb = two_datasets(folder, np.random.default_rng(20261201))
    fits = [Fit(seed=2, progress=False).fit(p) for p in (pa, pb)]
    dirs = [save_run(f.results, folder / f"run-{k}", products=False) for k, f in zip("ab", fits, strict=True)]
    return fits, dirs


@pytest.mark.slow
def test_combined_refit_recovers_truth_with_narrower_interval(fitted_parts, tmp_path):
    fits, _ = fitted_parts
    joint = combined_refit(fits, seed=3, labels=["A", "B"])
    s = joint.summary
    m = s["derived"]["mass_msun"]
    assert s["diagnostics"]["converged"]
    # pass criterion as tests/inference/test_fit_recovery.py: the truth inside the 95 % interval
    # (common practice, no source)
    assert m["q2.5"] <= TRUTH_A.mass_msun <= m["q97.5"]
    d = s["derived"]["distance_pc"]
    assert d["q2.5"] <= TRUTH_A.distance_pc <= d["q97.5"]
    width = m["q84"] - m["q16"]
    for part in fits:
        pm = part.summary["derived"]["mass_msun"]
        assert pm["q2.5"] <= TRUTH_A.mass_msun <= pm["q97.5"]
        assert width < pm["q84"] - pm["q16"]
    assert [c.name for c in joint.results.target.companions] == ["SA", "SB"]
    cmp = compare(fits, labels=["A", "B"], combined=joint, seed=1)
    out = json.loads(cmp.write(tmp_path / "cmp", save_combined=False).joinpath("comparison.json").read_text())
    assert out["combined"]["narrower_than_every_part"] is True
    assert out["combined"]["width68_msun"] == pytest.approx(width)
    # both parts measure the same invented mass: no tension expected at 3 sigma
    assert out["comparisons"][0]["verdict"] == "consistent"


@pytest.mark.slow
def test_cli_compare_run_folders_with_references(fitted_parts, tmp_path, capsys):
    _, dirs = fitted_parts
    out = tmp_path / "cmp"
    rc = _cli([str(dirs[0]), str(dirs[1]), "--label", "A", "--label", "B", "--reference",
               "far=1.0e6 +- 0.05e6 solMass", "--reference", "2.0e6 +0.2e6 -0.1e6 solMass", "--out", str(out),
               "--seed", "4"])
    assert rc == 0
    d = json.loads((out / "comparison.json").read_text(encoding="utf-8"))
    assert [r["source"] for r in d["runs"]] == [str(dirs[0]), str(dirs[1])]
    far = [c for c in d["comparisons"] if c["b"] == "far"]
    assert len(far) == 2 and all(c["tension_is_lower_bound"] and c["verdict"] == "tension" for c in far)
    near = [c for c in d["comparisons"] if c["b"] == "2.0e6 +0.2e6 -0.1e6 solMass"]
    assert all(c["verdict"] == "consistent" for c in near)
    text = capsys.readouterr().out
    assert "A vs far: in tension at > " in text and "comparison.md" in text


@pytest.mark.slow
def test_cli_refit_writes_the_joint_run(fitted_parts, tmp_path):
    _, dirs = fitted_parts
    out = tmp_path / "cmp"
    # a deliberately short joint run: the plumbing, not the statistics (tested above)
    rc = _cli([str(dirs[0]), str(dirs[1]), "--refit", "--max-steps", "150", "--seed", "2", "--no-progress",
               "--out", str(out)])
    d = json.loads((out / "comparison.json").read_text(encoding="utf-8"))
    assert rc == (0 if d["combined"]["converged"] else 1)
    assert d["combined"]["run_folder"] == "combined"
    assert (out / "combined" / "summary.json").is_file() and (out / "combined" / "posterior.h5").is_file()
    assert d["combined"]["companions"] == ["SA", "SB"]


# ------------------------------------------------ far references: the normal approximation
def test_far_reference_gives_sample_bound_and_normal_approximation(rng, tmp_path):
    # a 1.5 Msun reference (+- 0.01) against a 1.0 +- 0.01 Msun posterior
    post = MassPosterior.from_samples("binary", gaussian(rng, 1.0, 0.01))
    ref = parse_reference("far=1.5 +- 0.01 solMass")
    res = compare_samples(post, ref, rng=np.random.default_rng(8), kind="run-reference")
    # analytic Gaussian value with scipy.stats.norm: P(a > b) for a - b ~ N(-0.5, hypot(0.01, 0.01))
    # (difference of independent normals, from memory), turned into sigma by the inverse survival function
    p_a_greater = stats.norm.sf(0.0, loc=1.0 - 1.5, scale=math.hypot(0.01, 0.01))
    analytic = float(stats.norm.isf(p_a_greater))
    assert analytic == pytest.approx(0.5 / math.hypot(0.01, 0.01), rel=1e-9)  # 35.36 sigma
    # the samples alone: only the documented lower bound norm.isf(-ln(0.05) / n_eff)
    assert res.tension_is_lower_bound
    assert res.tension_sigma == pytest.approx(stats.norm.isf(-math.log(0.05) / N_SAMPLES), rel=1e-12)
    assert res.tension_sigma < 4.5 < analytic
    # the normal approximation from the moments: the sample sd of 40000 draws is good to ~0.4 %
    assert res.sigma_normal_approx == pytest.approx(analytic, rel=0.02)
    assert res.verdict == "tension"
    # the statement says both, each labelled
    assert f"> {res.tension_sigma:.1f} sigma from the samples (lower bound" in res.statement
    assert f"normal approximation {res.sigma_normal_approx:.1f} sigma" in res.statement
    # ... and so do comparison.json, comparison.md and the figure
    cmp = compare([post], references=[ref], seed=3)
    out = cmp.write(tmp_path / "far")
    d = json.loads((out / "comparison.json").read_text(encoding="utf-8"))
    (pair,) = d["comparisons"]
    assert pair["tension_is_lower_bound"] is True
    assert pair["sigma_normal_approx"] == pytest.approx(analytic, rel=0.02)
    assert "normal approximation" in d["method"]["lower_bound"]
    md = (out / "comparison.md").read_text(encoding="utf-8")
    assert f"normal approx. {pair['sigma_normal_approx']:.1f} σ" in md
    fig = cmp.figure()
    texts = [" ".join(t.get_text().split()) for ax in fig.axes for t in ax.texts]  # lines are wrapped
    assert any("from the samples (lower bound)" in t and f"normal approx. {pair['sigma_normal_approx']:.1f} σ" in t
               for t in texts)


def test_normal_approximation_of_a_two_piece_reference_uses_its_exact_moments(rng):
    ref = parse_reference("4.1e6 +0.3e6 -0.1e6 solMass")
    # moments against scipy quadrature of the density (two-piece normal, John 1982)
    mean = integrate.quad(lambda m: m * float(ref.pdf(m)), 3.0e6, 6.5e6, points=[4.1e6], limit=200)[0]
    var = integrate.quad(lambda m: (m - mean) ** 2 * float(ref.pdf(m)), 3.0e6, 6.5e6, points=[4.1e6],
                         limit=200)[0]
    assert ref.mean() == pytest.approx(mean, rel=1e-9)
    assert ref.variance() == pytest.approx(var, rel=1e-7)
    post = MassPosterior.from_samples("run", gaussian(rng, 3.0e6, 0.05e6))
    res = compare_samples(post, ref, rng=np.random.default_rng(2))
    expected = abs(3.0e6 - mean) / math.sqrt(0.05e6**2 + var)
    assert res.sigma_normal_approx == pytest.approx(expected, rel=0.01)


# ------------------------------------------------ joint refit: instrument offsets and jitters
def _team_target(folder: Path, rng, truth: TrueOrbit, *, spec: str, name: str, offset_kms: float = 0.0,
                 extra_instruments: str = "") -> Path:
    """One team's invented dataset: positions and velocities from its own spectrograph ``spec``."""
    from orbitmass.demo.simulate import simulate, write_positions_csv, write_velocities_csv

    folder.mkdir(parents=True, exist_ok=True)
    t = np.sort(rng.uniform(2006, 2022, 16))
    sim = simulate(truth, t)
    write_positions_csv(folder / "pos.csv", t, sim["east_mas"] + rng.normal(0, 0.3, t.size),
                        sim["north_mas"] + rng.normal(0, 0.3, t.size), 0.3)
    tv = np.sort(rng.uniform(2008, 2022, 10))
    rv = simulate(truth, tv)["rv_companion_kms"] + offset_kms + rng.normal(0, 15.0, tv.size)
    write_velocities_csv(folder / "rv.csv", tv, rv, 15.0, instrument=np.full(tv.size, spec))
    (folder / "target.toml").write_text(
        f'[target]\nname = "{name}"\nreference_epoch = 2014.0\n[distance]\n{WIDE_DISTANCE}\n'
        f'[instruments.{spec}]\njitter = {{ dist = "uniform", low = "0 km / s", high = "20 km / s" }}\n'
        f'{extra_instruments}'
        f'[[companion]]\nname = "{name}"\nastrometry = "pos.csv"\nvelocities = "rv.csv"\n', encoding="utf-8")
    return folder / "target.toml"


def test_joint_target_keeps_each_runs_offset_and_jitter_priors(tmp_path, rng):
    from orbitmass.io.target import DEFAULT_PRIORS
    from orbitmass.model.parameters import ParameterSpace

    ta = read_target(_team_target(tmp_path / "a", rng, TRUTH_A, spec="north-spec", name="SA"))
    tb = read_target(_team_target(tmp_path / "b", rng, TRUTH_B, spec="south-echelle", name="SB"))
    # alone, each team's spectrograph is its zero point (offset fixed at 0)
    assert ta.instruments["north-spec"].offset.fixed and tb.instruments["south-echelle"].offset.fixed
    joint = combined_target([ta, tb], labels=["north", "south"])
    north, south = joint.instruments["north-spec"], joint.instruments["south-echelle"]
    assert north == ta.instruments["north-spec"]  # the first run's zero point stays the zero point
    # the second team's zero point relative to the first is unknown: sampled with the reader's default prior
    assert not south.offset.fixed and south.offset == DEFAULT_PRIORS["offset"]
    assert south.jitter == tb.instruments["south-echelle"].jitter  # jitter prior kept
    assert north.jitter == ta.instruments["north-spec"].jitter
    names = ParameterSpace(joint).names
    assert "offset.south-echelle" in names and "offset.north-spec" not in names
    # one spectrograph shared by both runs: one instrument, one zero point, nothing freed
    tc = read_target(_team_target(tmp_path / "c", rng, TRUTH_B, spec="north-spec", name="SC"))
    shared = combined_target([ta, tc], labels=["north", "again"])
    assert list(shared.instruments) == ["north-spec"] and shared.instruments["north-spec"].offset.fixed
    # a later run fixing two offsets and sharing none: one unknown shift cannot serve both
    two = 'offset = { dist = "fixed", value = "5 km / s" }\n'
    td = read_target(_team_target(tmp_path / "d", rng, TRUTH_B, spec="d-spec", name="SD",
                                  extra_instruments=f"[instruments.d-other]\n{two}"))
    td = replace(td, companions=(replace(td.companions[0], velocities=replace(
        td.companions[0].velocities, instrument=np.array(["d-spec", "d-other"] * 5))),))
    with pytest.raises(InputError) as err:
        combined_target([ta, td], labels=["north", "d"])
    assert err.value.key == "instruments.d-other" and "several instruments" in str(err.value)


@pytest.mark.slow
def test_joint_refit_measures_the_second_teams_offset(tmp_path):
    # invented: team B's spectrograph reads 30 km/s high; the joint fit must find that, not force 0
    rng = np.random.default_rng(20261202)
    pa = _team_target(tmp_path / "a", rng, TRUTH_A, spec="north-spec", name="SA")
    pb = _team_target(tmp_path / "b", rng, TRUTH_B, spec="south-echelle", name="SB", offset_kms=30.0)
    joint = combined_refit([pa, pb], seed=4, labels=["north", "south"])
    off = joint.summary["instruments"]["south-echelle"]["offset_kms"]
    # pass criterion as tests/inference/test_fit_recovery.py: the truth inside the 95 % interval (common practice)
    assert off["q2.5"] <= 30.0 <= off["q97.5"]
    m = joint.summary["derived"]["mass_msun"]
    assert m["q2.5"] <= TRUTH_A.mass_msun <= m["q97.5"]


def test_overwrite_replaces_only_a_comparison_folder_orbitmass_wrote(rng, tmp_path, capsys):
    # the safe-writing rules of orbitmass._atomic (issue "hard edges"): files checked by SHA-256
    # (hashlib, FIPS 180-4) before and after a refused write
    import hashlib

    from orbitmass.compare.report import check_out_dir

    def digest(folder):
        return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir()) if p.is_file()}

    cmp = _three_way(rng)
    out = cmp.write(tmp_path / "cmp")
    (out / "my-notes.txt").write_text("the user's notes", encoding="utf-8")
    before = digest(out)
    with pytest.raises(RunFolderError, match="my-notes.txt"):
        cmp.write(out, overwrite=True)
    assert digest(out) == before
    # a plain folder of the user is never replaced, not even with overwrite
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "paper.tex").write_text("x", encoding="utf-8")
    with pytest.raises(RunFolderError, match="paper.tex"):
        check_out_dir(mine, True)
    # without overwrite the library says so neutrally, and the command line names its flag
    (out / "my-notes.txt").unlink()
    with pytest.raises(RunFolderError) as err:
        check_out_dir(out, False)
    assert err.value.remedy == "overwrite" and "--overwrite" not in str(err.value)
    from orbitmass.cli.common import option_hint

    assert "pass --overwrite" in str(option_hint(err.value))
