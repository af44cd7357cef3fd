"""The contract every prior family meets, run over EVERY family in the registry.

For each family in :data:`orbitmass.model.priors.FAMILIES` (a family added without
cases here fails ``test_every_family_has_contract_cases``):

- the density integrates to one over its support (``scipy.integrate.quad``);
- it equals the density of the same distribution in ``scipy.stats`` (the reference
  library) wherever scipy has it; the isotropic inclination prior through the change of
  variables cos i ~ U(-1, 1) (common practice, no source);
- ``sample()`` draws follow it: Kolmogorov-Smirnov test against the scipy CDF with a
  fixed seed (p > 0.01; with the seed fixed the outcome is deterministic);
- its support is right (finite density inside, -inf outside, draws inside);
- ``describe()`` is one readable line with the values in the unit asked for;
- ``make_prior`` validates keys and ranges, and builds the same object as the class.

The target-file tests read the new families (beta, log-normal) and fit with them.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from orbitmass.exceptions import InputError
from orbitmass.model.priors import (
    FAMILIES,
    Beta,
    Fixed,
    LogNormal,
    LogUniform,
    Normal,
    make_prior,
    optional_keys,
)

# family -> examples (internal units): typical, narrow/wide, boundary-singular shapes
EXAMPLES: dict[str, list[dict]] = {
    "normal": [{"mean": 0.0, "sd": 1.0}, {"mean": 8000.0, "sd": 300.0}],
    "truncnormal": [{"mean": 1.0, "sd": 1.0, "low": 0.5, "high": 2.0},
                    {"mean": 0.0, "sd": 0.1, "low": 0.3, "high": 1.0}],  # cut far in the tail
    "uniform": [{"low": -1000.0, "high": 1000.0}, {"low": 0.0, "high": 2 * math.pi}],
    "log-uniform": [{"low": 1e-3, "high": 1e11}, {"low": 0.5, "high": 2.0}],
    "fixed": [{"value": 0.0}, {"value": 2.5}],
    "isotropic": [{}],
    # eccentricity shapes: alpha = 0.867, beta = 3.03 (Kipping 2013, MNRAS 434, L51; from memory)
    "beta": [{"alpha": 0.867, "beta": 3.03}, {"alpha": 2.0, "beta": 5.0, "low": 1.0, "high": 3.0},
             {"alpha": 1.0, "beta": 1.0}],
    "log-normal": [{"median": 10.0, "sigma": 0.3}, {"median": 8000.0, "sigma": 2.0}],
}

# family -> (values, offending key) that construction must refuse
INVALID: dict[str, list[tuple[dict, str]]] = {
    "normal": [({"mean": 0.0, "sd": 0.0}, "sd"), ({"mean": 0.0, "sd": -1.0}, "sd")],
    "truncnormal": [({"mean": 0.0, "sd": -1.0, "low": 0.0, "high": 1.0}, "sd"),
                    ({"mean": 0.0, "sd": 1.0, "low": 1.0, "high": 1.0}, "low")],
    "uniform": [({"low": 2.0, "high": 1.0}, "low")],
    "log-uniform": [({"low": 0.0, "high": 1.0}, "low"), ({"low": 3.0, "high": 2.0}, "low")],
    "fixed": [({"value": math.inf}, "value")],
    "isotropic": [({"low": 0.0}, "low")],
    "beta": [({"alpha": 0.0, "beta": 1.0}, "alpha"), ({"alpha": 1.0, "beta": -2.0}, "beta"),
             ({"alpha": 1.0, "beta": 1.0, "low": 1.0, "high": 0.5}, "low"),
             ({"alpha": 1.0, "beta": 1.0, "low": 2.0}, "low")],  # default high = 1 is below low = 2
    "log-normal": [({"median": 0.0, "sigma": 1.0}, "median"), ({"median": -5.0, "sigma": 1.0}, "median"),
                   ({"median": 1.0, "sigma": 0.0}, "sigma")],
}


def scipy_reference(p):
    """The same distribution in scipy.stats, or None where scipy has none."""
    d = p.dist
    if d == "normal":
        return stats.norm(p.mean, p.sd)
    if d == "truncnormal":
        return stats.truncnorm((p.low - p.mean) / p.sd, (p.high - p.mean) / p.sd, loc=p.mean, scale=p.sd)
    if d == "uniform":
        return stats.uniform(p.low, p.high - p.low)
    if d == "log-uniform":
        return stats.loguniform(p.low, p.high)
    if d == "beta":
        return stats.beta(p.alpha, p.beta, loc=p.low, scale=p.high - p.low)
    if d == "log-normal":
        return stats.lognorm(p.sigma, scale=p.median)
    return None


CASES = [pytest.param(dist, values, id=f"{dist}-{k}") for dist, lst in EXAMPLES.items()
         for k, values in enumerate(lst)]


def build(dist, values):
    return make_prior(dist, values)


def test_every_family_has_contract_cases():
    assert set(EXAMPLES) == set(FAMILIES)
    assert set(INVALID) == set(FAMILIES)
    assert all(EXAMPLES[d] for d in FAMILIES) and all(INVALID[d] for d in FAMILIES)


@pytest.mark.parametrize(("dist", "values"), CASES)
def test_make_prior_builds_the_class(dist, values):
    cls, required = FAMILIES[dist]
    p = build(dist, values)
    assert type(p) is cls and p.dist == dist
    assert p == cls(**{**optional_keys(cls), **values})
    for k in required:
        assert getattr(p, k) == values[k]


@pytest.mark.parametrize(("dist", "values"), CASES)
def test_density_integrates_to_one(dist, values):
    p = build(dist, values)
    low, high = p.support
    if p.fixed:  # a point mass: log density 0 at the value, -inf elsewhere (no integral)
        assert p.log_pdf(p.value) == 0.0 and p.log_pdf(p.value + 1.0) == -np.inf
        return
    draws = p.sample(np.random.default_rng(1), 2001)
    centre = float(np.median(draws))  # split at the bulk, so quad cannot miss a narrow peak

    def f(x):
        return float(np.exp(p.log_pdf(x)))

    total = integrate.quad(f, low, centre, limit=200)[0] + integrate.quad(f, centre, high, limit=200)[0]
    assert total == pytest.approx(1.0, abs=1e-7)


@pytest.mark.parametrize(("dist", "values"), CASES)
def test_density_matches_scipy(dist, values):
    p = build(dist, values)
    ref = scipy_reference(p)
    low, high = p.support
    if dist == "isotropic":
        # cos i ~ U(-1, 1): p(i) = U(cos i) |d cos i / di| = sin(i) / 2
        i = np.linspace(0.01, math.pi - 0.01, 41)
        expected = stats.uniform(-1.0, 2.0).logpdf(np.cos(i)) + np.log(np.sin(i))
        np.testing.assert_allclose(p.log_pdf(i), expected, rtol=1e-12)
        assert np.all(p.log_pdf([-0.1, math.pi + 0.1]) == -np.inf)
        return
    if ref is None:
        assert p.fixed  # only the point mass has no scipy counterpart
        return
    x = ref.ppf([1e-4, 0.01, 0.1, 0.3, 0.5, 0.7, 0.9, 0.99, 1 - 1e-4])
    np.testing.assert_allclose(p.log_pdf(x), ref.logpdf(x), rtol=1e-10, atol=1e-12)
    outside = [v for v in (low - 1.0 - abs(low), high + 1.0 + abs(high)) if math.isfinite(v)]
    if outside:
        assert np.all(p.log_pdf(outside) == -np.inf)
        assert np.all(ref.logpdf(outside) == -np.inf)


@pytest.mark.parametrize(("dist", "values"), CASES)
def test_draws_follow_the_density(dist, values):
    p = build(dist, values)
    draws = p.sample(np.random.default_rng(20261202), 5000)
    assert draws.shape == (5000,)
    if p.fixed:
        assert np.all(draws == p.value)
        return
    if dist == "isotropic":
        result = stats.kstest(np.cos(draws), stats.uniform(-1.0, 2.0).cdf)
    else:
        result = stats.kstest(draws, scipy_reference(p).cdf)
    assert result.pvalue > 0.01, result


@pytest.mark.parametrize(("dist", "values"), CASES)
def test_support(dist, values):
    p = build(dist, values)
    low, high = p.support
    assert low <= high
    assert p.positive == (low >= 0.0)
    draws = p.sample(np.random.default_rng(7), 2000)
    assert np.all((draws >= low) & (draws <= high))
    if p.fixed:
        assert low == high == p.value
        return
    assert np.all(np.isfinite(p.log_pdf(draws[(draws > low) & (draws < high)])))
    for x in (low, high):
        if math.isfinite(x):
            span = high - low if math.isfinite(high - low) else 1.0
            step = 1e-9 * max(abs(x), span)
            assert p.log_pdf(x - step if x == low else x + step) == -np.inf


@pytest.mark.parametrize(("dist", "values"), CASES)
def test_describe_is_one_readable_line(dist, values):
    p = build(dist, values)
    scale = 1000.0
    text = p.describe("km", scale)
    assert isinstance(text, str) and text and "\n" not in text
    assert type(p).__name__ + "(" not in text and "np." not in text  # no Python reprs
    for key in FAMILIES[dist][1]:
        v = getattr(p, key)
        if key in type(p).shape_keys:
            assert f"{v:.6g}" in text  # shape parameters carry no unit
        else:
            assert f"{v * scale:.6g} km" in text
    assert p.describe() == p.describe("", 1.0)


@pytest.mark.parametrize("dist", list(FAMILIES))
def test_construction_validates_keys_and_ranges(dist):
    cls, required = FAMILIES[dist]
    good = EXAMPLES[dist][0]
    for key in required:
        with pytest.raises(InputError) as err:
            make_prior(dist, {k: v for k, v in good.items() if k != key})
        assert err.value.key == key and "missing" in str(err.value)
    with pytest.raises(InputError) as err:
        make_prior(dist, {**good, "spread": 1.0})
    assert err.value.key == "spread"
    for key in required:
        with pytest.raises(InputError) as err:
            make_prior(dist, {**good, key: math.nan})
        assert err.value.key == key
        with pytest.raises(InputError):
            make_prior(dist, {**good, key: "1 yr"})
    for values, key in INVALID[dist]:
        with pytest.raises(InputError) as err:
            make_prior(dist, values)
        assert err.value.key == key, (values, str(err.value))
        assert "\n" not in str(err.value)
    with pytest.raises(InputError):
        make_prior("gamma", {})


def test_new_families_validate_on_direct_construction():
    with pytest.raises(InputError):
        Beta(0.0, 1.0)
    with pytest.raises(InputError):
        LogNormal(-1.0, 1.0)


def test_moments_used_as_centre_and_spread():
    # mean and sd of scipy's distributions (the initialisation centres walkers on `mean`)
    b = Beta(2.0, 5.0, 1.0, 3.0)
    ref = stats.beta(2.0, 5.0, loc=1.0, scale=2.0)
    assert b.mean == pytest.approx(ref.mean(), rel=1e-14) and b.sd == pytest.approx(ref.std(), rel=1e-14)
    ln = LogNormal(10.0, 0.3)
    ref = stats.lognorm(0.3, scale=10.0)
    assert ln.mean == pytest.approx(ref.mean(), rel=1e-14) and ln.sd == pytest.approx(ref.std(), rel=1e-12)


# ------------------------------------------------------------------- target files
TARGET = """
[target]
name = "prior families"
reference_epoch = 2011.0

[central]
mass = {{ dist = "log-uniform", low = "0.3 solMass", high = "10 solMass" }}

[distance]
prior = {{ dist = "normal", mean = "20 pc", sd = "1 pc" }}

[[companion]]
name = "B"
astrometry = "pos.csv"
{companion}
"""


def write_target(folder, companion: str):
    (folder / "pos.csv").write_text("jyear,east_mas,north_mas,east_err_mas,north_err_mas\n"
                                    "2010.0,10.0,20.0,1.0,1.0\n2012.0,12.0,18.0,1.0,1.0\n", encoding="utf-8")
    path = folder / "target.toml"
    path.write_text(TARGET.format(companion=companion), encoding="utf-8")
    return path


def test_target_reads_beta_and_log_normal(tmp_path):
    from orbitmass.io.target import read_target

    path = write_target(tmp_path, 'eccentricity = { dist = "beta", alpha = 0.867, beta = 3.03 }\n'
                                  'period = { dist = "log-normal", median = "3652.5 d", sigma = 0.3 }')
    pr = read_target(path).companions[0].priors
    assert pr["eccentricity"] == Beta(0.867, 3.03, 0.0, 1.0)
    assert isinstance(pr["period"], LogNormal)
    assert pr["period"].median == pytest.approx(10.0, rel=1e-14)  # 3652.5 d = 10 Julian years (IAU)
    assert pr["period"].sigma == 0.3


@pytest.mark.parametrize(("companion", "key", "words"), [
    ('eccentricity = { dist = "beta", alpha = 0.0, beta = 3.0 }', "companion[0].eccentricity.alpha", "positive"),
    ('eccentricity = { dist = "beta", alpha = 1.0, beta = 3.0, low = 0.5, high = 0.2 }',
     "companion[0].eccentricity.low", "below"),
    ('eccentricity = { dist = "beta", alpha = 1.0, beta = 3.0, width = 1 }',
     "companion[0].eccentricity.width", "unknown key"),
    ('eccentricity = { dist = "beta", alpha = "1 yr", beta = 3.0 }', "companion[0].eccentricity.alpha",
     "bare number"),
    ('period = { dist = "beta", alpha = 2.0, beta = 3.0 }', "companion[0].period", "needs alpha, beta, low, high"),
    ('period = { dist = "beta", alpha = "2 yr", beta = 3.0, low = "1 yr", high = "30 yr" }',
     "companion[0].period.alpha", "bare number"),
    ('period = { dist = "log-normal", median = 10.0, sigma = 0.3 }', "companion[0].period.median", ""),
    ('period = { dist = "log-normal", median = "10 yr", sigma = -0.3 }', "companion[0].period.sigma", "positive"),
    ('period = { dist = "log-normal", median = "10 yr", sigma = "0.3 yr" }', "companion[0].period.sigma",
     "bare number"),
    ('eccentricity = { dist = "log-normal", median = 0.3, sigma = 0.5 }', "companion[0].eccentricity",
     "not allowed"),
])
def test_target_errors_of_new_families(tmp_path, companion, key, words):
    from orbitmass.io.target import read_target

    path = write_target(tmp_path, companion)
    with pytest.raises(InputError) as err:
        read_target(path)
    text = str(err.value)
    assert err.value.key == key, text
    assert words in text and "\n" not in text and str(path) in text


def test_beta_on_period_with_units(tmp_path):
    from orbitmass.io.target import read_target

    path = write_target(tmp_path, 'period = { dist = "beta", alpha = 2.0, beta = 3.0, low = "1 yr", '
                                  'high = "365.25 d" }\n')
    with pytest.raises(InputError, match="below"):
        read_target(path)  # 365.25 d = 1 yr: low is not below high
    path = write_target(tmp_path, 'period = { dist = "beta", alpha = 2.0, beta = 3.0, low = "5 yr", '
                                  'high = "7305 d" }\n')
    assert read_target(path).companions[0].priors["period"] == Beta(2.0, 3.0, 5.0, 20.0)


def test_fit_with_beta_and_log_normal_priors(tmp_path, rng):
    """A tiny fit (seconds) with both new families; the run folder keeps them."""
    from orbitmass import Fit
    from orbitmass.demo.simulate import TrueOrbit
    from orbitmass.io.rundir import load_run, save_run

    from tests.helpers.targets import make_target

    truth = TrueOrbit(mass_msun=2.0, distance_pc=20.0, period_yr=10.0, eccentricity=0.3, inclination_deg=60.0,
                      arg_periastron_deg=100.0, ascending_node_deg=30.0, periastron_time=2005.0)
    t = np.sort(rng.uniform(2000, 2022, 16))
    path = make_target(tmp_path / "data", truth, rng=rng, t_pos=t, t_rv=t[::2], pos_err=1.0, rv_err=1.0,
                       distance_toml='prior = { dist = "normal", mean = "20 pc", sd = "1 pc" }',
                       extra_toml='[central]\nmass = { dist = "log-normal", median = "2 solMass", sigma = 1.0 }\n',
                       companion_toml='eccentricity = { dist = "beta", alpha = 0.867, beta = 3.03 }\n'
                                      'period = { dist = "log-normal", median = "8 yr", sigma = 0.5 }')
    fit = Fit(seed=2, progress=False, max_steps=600, min_steps=300, n_walkers=36, max_periods=300).fit(path)
    s = fit.results.samples
    ecc = s["S1.eccentricity"].to_numpy()
    assert np.all((ecc >= 0.0) & (ecc < 1.0))
    period = fit.summary["companions"]["S1"]["period_yr"]
    # 16 positions (1 mas) and 8 velocities (1 km/s) over two orbits pin the period (tolerance: our choice)
    assert period["q2.5"] < truth.period_yr < period["q97.5"]
    assert abs(period["median"] / truth.period_yr - 1.0) < 0.1
    assert fit.summary["priors"]  # the report's prior list describes both families
    texts = " ".join(str(v) for row in fit.summary["priors"] for v in row.values())
    assert "beta(alpha 0.867, beta 3.03)" in texts and "log-normal(median 8 yr" in texts
    save_run(fit.results, tmp_path / "run", products=False)
    back = load_run(tmp_path / "run")
    assert back.target.companions[0].priors == fit.results.target.companions[0].priors
    assert back.target.central_priors["mass"] == LogNormal(2.0, 1.0)


def test_old_families_unchanged():
    # the families the target files already used keep their fields and densities
    assert Normal(0.0, 1.0).log_pdf(0.0) == pytest.approx(-0.5 * math.log(2 * math.pi), rel=1e-15)
    assert LogUniform(1.0, math.e).log_pdf(2.0) == pytest.approx(-math.log(2.0), rel=1e-15)
    assert Fixed(1.0).sample(np.random.default_rng(0), 3).tolist() == [1.0, 1.0, 1.0]
