"""orbitmass.forecast (predict, plan) and the predict/plan commands.

External yardsticks: the noise-free orbits of the independent simulator
:mod:`orbitmass.demo.simulate` (true anomaly and explicit rotations, not the
fit's Thiele-Innes/eccentric-anomaly model); refits of datasets augmented with
simulated measurements; astropy for dates; scipy for the circular mean and the
binomial tolerance.
"""

from __future__ import annotations

import json
import logging
import math
import shutil

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from orbitmass import Fit, load
from orbitmass.cli import main
from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv
from orbitmass.exceptions import InputError, RunFolderError
from orbitmass.forecast._common import circular_wrap_deg, parse_epoch, prepare_out_dir
from orbitmass.forecast.plan import parse_costs, plan, resolve_quantity
from orbitmass.forecast.predict import next_events, predict, prediction_columns

from tests.helpers.targets import make_target

log = logging.getLogger(__name__)
PARALLAX = 'parallax = { dist = "normal", mean = "40 mas", sd = "0.4 mas" }'
#: invented binary: 12 yr, e = 0.5, periastron 2001.0 (so also 2013.0, 2025.0, ...)
TRUTH = TrueOrbit(mass_msun=2.3, distance_pc=25.0, period_yr=12.0, eccentricity=0.5, inclination_deg=120.0,
                  arg_periastron_deg=250.0, ascending_node_deg=300.0, periastron_time=2001.0)

# the five columns per quantity, in this order: output contract, section "Predictions"
CONTRACT_BLOCK = ("median", "q16", "q84", "q2.5", "q97.5")


@pytest.fixture(scope="module")
def run_rv(tmp_path_factory):
    """A saved run with positions and velocities of TRUTH (short chain, seeded)."""
    rng = np.random.default_rng(20261202)
    base = tmp_path_factory.mktemp("forecast-run")
    t_pos = np.sort(rng.uniform(2000, 2012, 15))
    t_rv = np.sort(rng.uniform(2000, 2012, 10))
    path = make_target(base / "data", TRUTH, rng=rng, t_pos=t_pos, t_rv=t_rv, pos_err=1.0, rv_err=0.5,
                       distance_toml=PARALLAX)
    fit = Fit(seed=1, progress=False, max_steps=2000, min_steps=600).fit(path)
    return fit.save(base / "run")


# ------------------------------------------------------------------ small units
def test_parse_epoch_iso_against_astropy():
    from astropy.time import Time

    # astropy is the reference for UTC -> TDB Julian year
    assert parse_epoch("2021-07-02T06:00:00") == pytest.approx(Time("2021-07-02T06:00:00", scale="utc").tdb.jyear,
                                                              abs=1e-12)
    assert parse_epoch("2031.5") == 2031.5
    with pytest.raises(InputError, match="plausible Julian year"):
        parse_epoch("60000")  # an MJD
    with pytest.raises(InputError, match="cannot read"):
        parse_epoch("next tuesday")


def test_circular_wrap_matches_scipy_circmean():
    rng = np.random.default_rng(3)
    draws = (np.array([359.0, 1.0])[None, :] + rng.normal(0, 2.0, (4000, 2))) % 360.0
    wrapped = circular_wrap_deg(draws, axis=0)
    # scipy.stats.circmean is the reference circular mean
    centre = stats.circmean(draws, high=360.0, low=0.0, axis=0)
    assert np.all(np.abs(wrapped - centre[None, :] + 0.0) <= 180.0)
    med = np.median(wrapped, axis=0) % 360.0
    assert min(med[0], 360 - med[0]) < 2.0 and min(med[1], 360 - med[1]) < 2.0  # near the cut, not near 180
    assert np.all(np.ptp(wrapped, axis=0) < 40.0)  # no draw left on the far side of the cut


def test_parse_costs():
    assert parse_costs("positions=1,velocities=2") == {"positions": 1.0, "velocities": 2.0}
    with pytest.raises(InputError, match="unknown kind"):
        parse_costs("photons=2")
    with pytest.raises(InputError, match="positive"):
        parse_costs("velocities=-1")


# ------------------------------------------------------------------ (c) contract
def test_prediction_columns_exactly_match_contract(run_rv):
    fit = load(run_rv)
    res = fit.results
    table = predict(res, [2013.0, 2014.5, 2020.0], n_draws=500)
    pd.testing.assert_frame_equal(fit.predict([2013.0, 2014.5, 2020.0], n_draws=500), table)  # Fit.predict delegates
    expected = ["companion", "epoch_jyear"]
    for q in ("east_mas", "north_mas", "rho_mas", "theta_deg", "rv_kms"):
        expected += [f"{q}_{k}" for k in CONTRACT_BLOCK]
    assert list(table.columns) == expected
    assert list(table.columns) == prediction_columns(True)
    assert len(table) == 3 and set(table["companion"]) == {"S1"}
    for q in ("east_mas", "north_mas", "rho_mas", "theta_deg", "rv_kms"):
        v = table[[f"{q}_{k}" for k in ("q2.5", "q16", "median", "q84", "q97.5")]].to_numpy()
        assert np.all(np.diff(v, axis=1) >= 0), q  # quantiles ordered, also for the position angle
    assert np.all((table["theta_deg_median"] >= 0) & (table["theta_deg_median"] < 360))
    # separation and angle agree with the east/north medians (narrow posterior: median of a function ~ function)
    rho = np.hypot(table["east_mas_median"], table["north_mas_median"])
    assert np.allclose(rho, table["rho_mas_median"], rtol=0.02)
    # the predicted orbit is the simulator's within the 95 % band at the next periastron (1 yr past the data)
    sim = simulate(TRUTH, np.array([2013.0]))
    row = table.iloc[0]
    assert row["east_mas_q2.5"] <= sim["east_mas"][0] <= row["east_mas_q97.5"]
    assert row["rv_kms_q2.5"] <= sim["rv_companion_kms"][0] <= row["rv_kms_q97.5"]


def test_no_velocity_columns_without_velocities(tmp_path):
    rng = np.random.default_rng(5)
    path = make_target(tmp_path, TRUTH, rng=rng, t_pos=np.sort(rng.uniform(2000, 2012, 12)), pos_err=1.0,
                       distance_toml=PARALLAX)
    res = Fit(seed=2, progress=False).fit(path).results  # astrometry-only fast path: seconds
    table = predict(res, [2015.0], n_draws=300)
    assert list(table.columns) == prediction_columns(False)
    assert not any(c.startswith("rv_kms") for c in table.columns)


# ------------------------------------------------------------------ (e) next periastron
def test_next_periastron_matches_simulated_orbit(run_rv):
    res = load(run_rv).results
    ev = next_events(res, 2012.5, n_draws=400)["S1"]
    block = ev["periastron"]["epoch_jyear"]
    true_next = TRUTH.periastron_time + TRUTH.period_yr  # 2013.0: first passage after 2012.5
    assert block["q2.5"] <= true_next <= block["q97.5"]
    assert block["q97.5"] - block["q2.5"] < 0.5  # a real constraint, not the whole period
    # the velocity extrema: the simulator's curve on a fine grid over the next period is the reference
    grid = np.linspace(2012.5, 2012.5 + TRUTH.period_yr, 200001)
    v = simulate(TRUTH, grid)["rv_companion_kms"]
    for kind, idx in (("velocity_max", np.argmax(v)), ("velocity_min", np.argmin(v))):
        e = ev[kind]
        assert e["epoch_jyear"]["q2.5"] - 0.01 <= grid[idx] <= e["epoch_jyear"]["q97.5"] + 0.01, kind
        assert e["rv_kms"]["q2.5"] - 0.2 <= v[idx] <= e["rv_kms"]["q97.5"] + 0.2, kind


# ------------------------------------------------------------------ (d) CLI
def test_cli_predict_and_plan_write_their_folders(run_rv, tmp_path, capsys):
    out = tmp_path / "pred"
    assert main(["predict", str(run_rv), "--from", "2013", "--to", "2016", "--step", "0.25", "--draws", "500",
                 "--out", str(out)]) == 0
    table = pd.read_csv(out / "predictions.csv")
    assert list(table.columns) == prediction_columns(True)
    assert np.allclose(table["epoch_jyear"], 2013 + 0.25 * np.arange(13))
    for name in ("predictions.png", "predictions.pdf", "next_events.json", "next_events.md"):
        assert (out / name).is_file(), name
    events = json.loads((out / "next_events.json").read_text())
    assert events["companions"]["S1"]["periastron"]["epoch_jyear"]["median"] == pytest.approx(2013.0, abs=0.1)
    # an existing folder of ours: refused without --overwrite, replaced with it
    assert main(["predict", str(run_rv), "--at", "2030.0", "--out", str(out)]) == 2
    assert main(["predict", str(run_rv), "--at", "2030-01-01", "2031.5", "--draws", "300", "--out", str(out),
                 "--overwrite"]) == 0
    assert len(pd.read_csv(out / "predictions.csv")) == 2
    # plan
    pout = tmp_path / "plan"
    assert main(["plan", str(run_rv), "--window", "2013", "2019", "--cadence", "0.1", "--max-epochs", "2",
                 "--cost", "positions=1,velocities=2", "--draws", "50", "--out", str(pout)]) == 0
    ranked = pd.read_csv(pout / "plan.csv")
    assert ranked["rank"].tolist() == list(range(1, len(ranked) + 1))
    assert {"positions_reduction_pct", "velocities_reduction_pct", "best_kind"} <= set(ranked.columns)
    for name in ("plan_sets.csv", "plan.md", "plan.png", "plan.pdf", "plan.json"):
        assert (pout / name).is_file(), name
    capsys.readouterr()


def test_cli_bad_input_one_line_exit_2(run_rv, tmp_path, capsys):
    user = tmp_path / "mine"
    user.mkdir()
    (user / "notes.txt").write_text("my notes")
    cases = [
        ["predict", str(run_rv), "--at", "2030-13-45", "--out", str(tmp_path / "a")],
        ["predict", str(run_rv), "--from", "2030", "--to", "2020", "--step", "1", "--out", str(tmp_path / "a")],
        ["predict", str(run_rv), "--from", "2030", "--to", "2040", "--out", str(tmp_path / "a")],
        ["predict", str(tmp_path / "nothere"), "--at", "2030", "--out", str(tmp_path / "a")],
        ["predict", str(run_rv), "--at", "2030", "--out", str(user), "--overwrite"],
        ["predict", str(run_rv), "--at", "2030", "--out", str(run_rv), "--overwrite"],
        ["plan", str(run_rv), "--window", "2030", "2031", "--cadence", "0.1", "--precision", "3",
         "--out", str(tmp_path / "b")],
        ["plan", str(run_rv), "--window", "2030", "2031", "--cadence", "0.1", "--for", "banana",
         "--out", str(tmp_path / "b")],
    ]
    for argv in cases:
        capsys.readouterr()
        assert main(argv) == 2, argv
        err = capsys.readouterr().err.strip()
        assert err.startswith("orbitmass: error:") and "\n" not in err, (argv, err)
    assert (user / "notes.txt").read_text() == "my notes"  # the user's file is untouched
    assert sorted(p.name for p in user.iterdir()) == ["notes.txt"]
    assert not (tmp_path / "a").exists() and not (tmp_path / "b").exists()


def test_overwrite_refuses_folder_with_foreign_files(run_rv, tmp_path):
    out = tmp_path / "p"
    assert main(["predict", str(run_rv), "--at", "2030", "--draws", "300", "--out", str(out)]) == 0
    (out / "my_table.csv").write_text("keep me")
    with pytest.raises(RunFolderError, match="did not write"):
        prepare_out_dir(out, kind="predictions", overwrite=True)
    assert (out / "my_table.csv").read_text() == "keep me" and (out / "predictions.csv").is_file()
    with pytest.raises(RunFolderError, match="orbitmass predict"):
        prepare_out_dir(out, kind="plan", overwrite=True)


def test_plan_quantity_names(run_rv):
    res = load(run_rv).results
    assert resolve_quantity(res, "mass") == "mass_msun"
    assert resolve_quantity(res, "distance") == "distance_pc"
    assert resolve_quantity(res, "S1.period") == "S1.period_yr"
    assert resolve_quantity(res, "period") == "S1.period_yr"
    with pytest.raises(InputError, match="no quantity"):
        resolve_quantity(res, "banana")


def test_plan_linearisation_reproduces_current_spread(run_rv):
    """With no new information the planner's linearised variance equals the sample variance of ln M."""
    res = load(run_rv).results
    p = plan(res, np.arange(2013.0, 2016.0, 0.5), n_draws=50, max_epochs=1)
    lnm = np.log(res.samples["mass_msun"].to_numpy())
    assert p.options["sd_linearised"] == pytest.approx(np.std(lnm), rel=1e-6)  # ln M is a sampled variable
    assert np.all(p.table["positions_sd_after"] <= p.sd_now + 1e-15)
    assert np.all(p.table["velocities_sd_after"] <= p.sd_now + 1e-15)
    # greedy sets: cumulative reduction never decreases
    for _, s in p.sets.groupby("set"):
        assert np.all(np.diff(s["reduction_pct"].to_numpy()) >= -1e-9)


# ------------------------------------------------------------------ (a) coverage
@pytest.mark.slow
def test_predictions_cover_true_orbit_at_95_percent(tmp_path, record_property):
    """Held-back epochs: the simulator's true position lies inside the 95 % band at the expected rate.

    Each of N independent noisy datasets (the same invented orbit, new noise)
    is fitted (astrometry-only fast path), and one held-back epoch per dataset,
    drawn uniformly in the two years after the data, is predicted; one
    coordinate per dataset counts (east and north alternately), so the N
    trials are independent. Tolerance: the count inside must not fall below
    the 0.1 % quantile of Binomial(N, 0.95) (19 of 24); a band as narrow as a
    68 % interval would pass only with probability 0.17 (scipy.stats.binom).
    """
    n = 24
    rng = np.random.default_rng(424242)
    inside = 0
    for k in range(n):
        t_pos = np.sort(rng.uniform(2000, 2012, 12))
        path = make_target(tmp_path / f"d{k}", TRUTH, rng=rng, t_pos=t_pos, pos_err=1.0, distance_toml=PARALLAX)
        res = Fit(seed=100 + k, progress=False, max_periods=300).fit(path).results
        t_h = float(rng.uniform(2012.0, 2014.0))
        row = predict(res, [t_h], n_draws=2000, seed=k).iloc[0]
        q = "east_mas" if k % 2 == 0 else "north_mas"
        true = simulate(TRUTH, np.array([t_h]))[q][0]
        inside += int(row[f"{q}_q2.5"] <= true <= row[f"{q}_q97.5"])
    lower = stats.binom.ppf(0.001, n, 0.95)
    record_property("coverage_95", f"{inside}/{n}")
    log.info("coverage of the 95 %% band: %d/%d = %.3f (must be >= %.0f)", inside, n, inside / n, lower)
    assert inside >= lower


# ------------------------------------------------------------------ (b) plan beats even spacing
@pytest.mark.slow
def test_plan_beats_evenly_spaced_epochs(tmp_path, record_property):
    """An invented eccentric binary seen away from periastron: K = 3 planned positions vs 3 evenly spaced.

    Data 2000-2013.5 of a 20 yr, e = 0.8 orbit with periastron at 2017.5;
    candidates 2013.5-2019.5 every 0.05 yr. Both augmented datasets get their
    new positions from the simulator with the same noise seed and are refitted
    with the same seed. Tolerance: the planned set's 68 % mass interval must
    be at most 0.85 of the evenly spaced set's (measured with noise seeds 11
    and 12: 0.83 and 0.82, and 0.71 with data seed 8; 0.68 and 0.67 before
    the planner averaged posterior variances over draws instead of information).
    """
    truth = TrueOrbit(mass_msun=1.8, distance_pc=20.0, period_yr=20.0, eccentricity=0.8, inclination_deg=60.0,
                      arg_periastron_deg=40.0, ascending_node_deg=110.0, periastron_time=2017.5)
    rng = np.random.default_rng(7)
    err = 1.0
    t_pos = np.sort(rng.uniform(2000, 2013.5, 16))
    plx = 'parallax = { dist = "normal", mean = "50 mas", sd = "0.05 mas" }'
    base = make_target(tmp_path / "base", truth, rng=rng, t_pos=t_pos, pos_err=err, distance_toml=plx)
    res = Fit(seed=1, progress=False).fit(base).results
    cand = np.arange(2013.5, 2019.5001, 0.05)
    k = 3
    p = plan(res, cand, max_epochs=k, seed=0)
    planned = p.sets.loc[p.sets["set"] == "positions", "epoch_jyear"].to_numpy()
    even = np.linspace(cand[0], cand[-1], k)
    old = pd.read_csv(tmp_path / "base" / "pos.csv")

    def refit(name: str, t_new: np.ndarray) -> float:
        noise = np.random.default_rng(11)
        sim = simulate(truth, t_new)
        folder = tmp_path / name
        folder.mkdir()
        write_positions_csv(folder / "pos.csv", np.concatenate([old["jyear"], t_new]),
                            np.concatenate([old["east_mas"], sim["east_mas"] + noise.normal(0, err, k)]),
                            np.concatenate([old["north_mas"], sim["north_mas"] + noise.normal(0, err, k)]), err)
        shutil.copy(tmp_path / "base" / "target.toml", folder / "target.toml")
        fit = Fit(seed=2, progress=False).fit(folder / "target.toml")
        m = fit.summary["derived"]["mass_msun"]
        assert m["q2.5"] <= truth.mass_msun <= m["q97.5"]
        sd_ln_m[name] = float(np.std(np.log(fit.results.samples["mass_msun"])))
        return (m["q84"] - m["q16"]) / m["median"]

    sd_ln_m: dict[str, float] = {}
    w_plan, w_even = refit("planned", planned), refit("even", even)
    record_property("width_ratio", w_plan / w_even)
    log.info("68 %% relative mass width: planned %.4f, even %.4f, ratio %.2f", w_plan, w_even, w_plan / w_even)
    assert w_plan <= 0.85 * w_even
    # and the plan itself says it beats even spacing
    s = p.sets
    red = {name: s.loc[s["set"] == name, "reduction_pct"].iloc[-1] for name in ("positions", "even-positions")}
    assert red["positions"] > red["even-positions"]
    # the plan's expected sd of ln M after the three planned epochs is the refit's within a factor 2
    # (linearised expectation on a skewed posterior; measured: 0.0090 expected vs 0.0066 refit)
    expected = s.loc[s["set"] == "positions", "sd_after"].iloc[-1]
    log.info("sd of ln M after the planned epochs: expected %.4f, refit %.4f", expected, sd_ln_m["planned"])
    assert 0.5 <= sd_ln_m["planned"] / expected <= 2.0
    assert math.isfinite(p.sd_now)
