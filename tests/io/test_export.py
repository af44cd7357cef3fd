"""Exports: ArviZ InferenceData, NetCDF and CSV, read back with ArviZ and pandas.

The files are read with the reference readers (``arviz.from_netcdf``, ``pandas.read_csv``)
and compared exactly (bit for bit) with the run's retained samples and with its stored
chain: walker k of the chain is chain k of the InferenceData. Two tiny fits (about two
seconds each, invented simulated data): one sampled with the ensemble sampler (walkers
as chains), one through the astrometry-only fast path (one chain of resampled draws).
"""

from __future__ import annotations

import argparse
import math
import os
import sys

import arviz  # the 'test' extra installs it (an optional dependency of orbitmass itself)
import numpy as np
import pandas as pd
import pytest

from orbitmass import Fit, __version__
from orbitmass.cli import export as export_cmd
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.exceptions import InputError, OrbitmassError, RunFolderError
from orbitmass.io import export as export_mod
from orbitmass.io.export import export_run, format_from_path, to_inference_data
from orbitmass.io.rundir import load_run, save_run

from tests.helpers.targets import make_target

TRUTH = TrueOrbit(mass_msun=2.0, distance_pc=20.0, period_yr=10.0, eccentricity=0.4, inclination_deg=60.0,
                  arg_periastron_deg=100.0, ascending_node_deg=30.0, periastron_time=2005.0)
MASS = '[central]\nmass = { dist = "log-uniform", low = "0.3 solMass", high = "10 solMass" }\n'
DIST = 'prior = { dist = "normal", mean = "20 pc", sd = "1 pc" }'
PERIOD = 'period = { dist = "log-uniform", low = "5 yr", high = "20 yr" }'
OPTIONS = dict(seed=1, progress=False, max_steps=400, min_steps=200, n_walkers=32, max_periods=300)


@pytest.fixture(scope="module")
def sampled_run(tmp_path_factory):
    """A fit with positions and velocities (ensemble sampler), saved as a run folder."""
    folder = tmp_path_factory.mktemp("sampled")
    rng = np.random.default_rng(5)
    t = np.sort(rng.uniform(2000, 2022, 14))
    path = make_target(folder / "data", TRUTH, rng=rng, t_pos=t, t_rv=t[::2], pos_err=1.0, rv_err=1.0,
                       distance_toml=DIST, extra_toml=MASS, companion_toml=PERIOD)
    fit = Fit(**OPTIONS).fit(path)
    run_dir = save_run(fit.results, folder / "run", products=False)
    return fit, run_dir


@pytest.fixture(scope="module")
def fast_path_run(tmp_path_factory):
    """An astrometry-only fit (the fast path: importance-weighted, resampled draws)."""
    folder = tmp_path_factory.mktemp("fast")
    rng = np.random.default_rng(6)
    t = np.sort(rng.uniform(2000, 2022, 14))
    path = make_target(folder / "data", TRUTH, rng=rng, t_pos=t, pos_err=1.0, distance_toml=DIST,
                       extra_toml=MASS, companion_toml=PERIOD)
    fit = Fit(**OPTIONS).fit(path)
    assert fit.results.info.get("sampler") == "linear"  # the case this fixture is for
    run_dir = save_run(fit.results, folder / "run", products=False)
    return fit, run_dir


def read_csv(path) -> pd.DataFrame:
    """pandas' reader; before pandas 3 its default float parser may differ from round-trip in the last bit."""
    if int(pd.__version__.split(".")[0]) < 3:
        return pd.read_csv(path, float_precision="round_trip")
    return pd.read_csv(path)


def posterior_columns(samples: pd.DataFrame) -> list[str]:
    return [c for c in samples.columns if c != "log_posterior"]


def check_walkers_as_chains(idata, results):
    """Chain k, draw j is walker k at the j-th retained step, bit for bit."""
    kept = results.chain[results.burn::results.thin]
    n_steps, n_walkers, _ = kept.shape
    samples = results.samples
    assert set(idata.posterior.data_vars) == set(posterior_columns(samples))
    for col in posterior_columns(samples):
        values = idata.posterior[col].values
        assert idata.posterior[col].dims == ("chain", "draw")
        assert values.shape == (n_walkers, n_steps)
        np.testing.assert_array_equal(values.T.reshape(-1), samples[col].to_numpy())
    # against the stored chain itself: the total mass is exp of the sampled ln_mass
    idx = results.space.index["ln_mass"]
    np.testing.assert_array_equal(idata.posterior["mass_msun"].values, np.exp(kept[:, :, idx]).T)
    np.testing.assert_array_equal(idata.sample_stats["lp"].values, results.log_prob[results.burn::results.thin].T)


def test_to_arviz_walkers_as_chains(sampled_run):
    fit, _ = sampled_run
    res = fit.results
    idata = fit.to_arviz()
    assert isinstance(idata, arviz.InferenceData)
    check_walkers_as_chains(idata, res)
    for attrs in (idata.attrs, idata.posterior.attrs, idata.sample_stats.attrs):
        assert attrs["orbitmass_version"] == __version__
        assert attrs["target"] == res.summary["target"] == "simulated S1"
        assert attrs["seed"] == 1
        assert attrs["layout"].startswith("walkers as chains")
        assert attrs["n_walkers"] == res.chain.shape[1] == 32
    # units of every quantity: in the name and in the attribute (mass_msun: solar masses)
    assert idata.posterior["mass_msun"].attrs["units"] == "M_sun"
    assert idata.posterior["S1.period_yr"].attrs["units"] == "yr"
    # ArviZ's own diagnostics run on it: rank-normalised split R-hat needs >= 2 chains
    rhat = arviz.rhat(idata, var_names=["mass_msun"])["mass_msun"].item()
    assert math.isfinite(rhat) and rhat > 0.9


def test_fast_path_is_one_chain_of_resampled_draws(fast_path_run):
    fit, _ = fast_path_run
    res = fit.results
    idata = to_inference_data(res)
    n = len(res.samples)
    for col in posterior_columns(res.samples):
        assert idata.posterior[col].shape == (1, n)
        np.testing.assert_array_equal(idata.posterior[col].values[0], res.samples[col].to_numpy())
    np.testing.assert_array_equal(idata.sample_stats["lp"].values[0], res.samples["log_posterior"].to_numpy())
    layout = idata.posterior.attrs["layout"]
    assert layout.startswith("one chain of resampled draws") and "not a Markov chain" in layout
    assert "fast path" in idata.attrs["method"]
    assert "n_walkers" not in idata.attrs  # no walkers behind these draws


def test_netcdf_round_trip(sampled_run, tmp_path):
    fit, run_dir = sampled_run
    out = export_run(run_dir, tmp_path / "post.nc", "netcdf")
    back = arviz.from_netcdf(out)
    check_walkers_as_chains(back, load_run(run_dir))
    check_walkers_as_chains(back, fit.results)
    assert back.posterior.attrs["seed"] == 1 and back.posterior.attrs["target"] == "simulated S1"
    assert back.posterior["mass_msun"].attrs["units"] == "M_sun"


def test_netcdf_of_fast_path_run(fast_path_run, tmp_path):
    fit, run_dir = fast_path_run
    back = arviz.from_netcdf(export_run(run_dir, tmp_path / "fast.nc"))
    assert back.posterior.sizes["chain"] == 1
    np.testing.assert_array_equal(back.posterior["S1.eccentricity"].values[0],
                                  fit.results.samples["S1.eccentricity"].to_numpy())


@pytest.mark.parametrize("fixture", ["sampled_run", "fast_path_run"])
def test_csv_round_trip_exact(fixture, request, tmp_path):
    fit, run_dir = request.getfixturevalue(fixture)
    out = export_run(run_dir, tmp_path / "post.csv", "csv")
    text = out.read_text(encoding="utf-8")
    assert text.splitlines()[0] == ",".join(fit.results.samples.columns)  # plain header row, units in names
    back = read_csv(out)
    assert list(back.columns) == list(fit.results.samples.columns)
    assert len(back) == len(fit.results.samples)
    for col in back.columns:
        np.testing.assert_array_equal(back[col].to_numpy(dtype=float), fit.results.samples[col].to_numpy())


def test_export_from_results_and_format_from_suffix(sampled_run, tmp_path):
    fit, _ = sampled_run
    assert format_from_path("a/b.NC") == "netcdf" and format_from_path("x.csv") == "csv"
    with pytest.raises(InputError, match="cannot tell the export format"):
        format_from_path("x.txt")
    with pytest.raises(InputError, match="unknown export format"):
        export_run(fit.results, tmp_path / "x.csv", "parquet")
    out = export_run(fit, tmp_path / "sub" / "dir" / "x.csv")  # a Fit, missing folders created
    assert len(read_csv(out)) == len(fit.results.samples)


def test_never_overwrites_without_permission(sampled_run, tmp_path):
    fit, run_dir = sampled_run
    dest = tmp_path / "mine.csv"
    dest.write_text("my own notes\n", encoding="utf-8")
    with pytest.raises(RunFolderError, match="exists"):
        export_run(run_dir, dest, "csv")
    assert dest.read_text(encoding="utf-8") == "my own notes\n"
    export_run(run_dir, dest, "csv", overwrite=True)
    assert len(read_csv(dest)) == len(fit.results.samples)
    # a file of a run folder is never replaced, even with overwrite
    before = (run_dir / "summary.json").read_bytes()
    for name in ("summary.json", "posterior.h5", ".orbitmass-run"):
        with pytest.raises(RunFolderError, match="run folder"):
            export_run(run_dir, run_dir / name, "csv", overwrite=True)
    assert (run_dir / "summary.json").read_bytes() == before
    load_run(run_dir)  # still loads: checksums intact
    with pytest.raises(RunFolderError, match="is a folder"):
        export_run(run_dir, tmp_path, "csv", overwrite=True)


def test_failed_write_leaves_nothing(sampled_run, tmp_path, monkeypatch):
    fit, _ = sampled_run

    def broken(results, tmp):
        tmp.write_text("mass_msun\n1.0\n", encoding="utf-8")  # a partial file, then the failure
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(export_mod, "_write_csv", broken)
    with pytest.raises(RunFolderError, match="No space left on device"):
        export_run(fit.results, tmp_path / "x.csv", "csv")
    assert os.listdir(tmp_path) == []  # no partial file, no temporary file


def test_file_appearing_during_the_export_is_kept(sampled_run, tmp_path, monkeypatch):
    fit, _ = sampled_run
    dest = tmp_path / "x.csv"
    real = export_mod._write_csv

    def racing(results, tmp):
        real(results, tmp)
        dest.write_text("another program's file\n", encoding="utf-8")  # appears while the export is written

    monkeypatch.setattr(export_mod, "_write_csv", racing)
    with pytest.raises(RunFolderError, match="exists"):
        export_run(fit.results, dest, "csv")
    assert dest.read_text(encoding="utf-8") == "another program's file\n"
    assert os.listdir(tmp_path) == ["x.csv"]  # no hidden or temporary file left


def test_missing_arviz_gives_install_hint(sampled_run, tmp_path, monkeypatch):
    fit, _ = sampled_run
    monkeypatch.setitem(sys.modules, "arviz", None)  # import arviz now raises ImportError
    with pytest.raises(OrbitmassError, match=r'pip install "orbitmass\[export\]"'):
        fit.to_arviz()
    with pytest.raises(OrbitmassError, match="arviz"):
        export_run(fit.results, tmp_path / "x.nc", "netcdf")
    assert not (tmp_path / "x.nc").exists()
    export_run(fit.results, tmp_path / "x.csv", "csv")  # CSV needs no ArviZ
    assert (tmp_path / "x.csv").is_file()


# ------------------------------------------------------------------- command line
def cli(argv: list[str]) -> int:
    """``orbitmass export ...``: through orbitmass.cli.main once the command is registered there."""
    from orbitmass import cli as cli_pkg

    if "export" in getattr(cli_pkg, "COMMANDS", {}):
        return cli_pkg.main(argv)
    # not registered yet: the same mapping as orbitmass.cli.main (OrbitmassError -> one line, exit 2)
    parser = argparse.ArgumentParser(prog="orbitmass")
    export_cmd.add_parser(parser.add_subparsers(dest="command"))
    args = parser.parse_args(argv)
    try:
        return args.func(args)
    except OrbitmassError as exc:
        sys.stderr.write(f"orbitmass: error: {exc}\n")
        return 2


def one_line_error(capsys) -> str:
    err = capsys.readouterr().err.strip()
    assert err.startswith("orbitmass: error: ") and "\n" not in err and "Traceback" not in err
    return err


def test_cli_export_netcdf_and_csv(sampled_run, tmp_path, capsys):
    fit, run_dir = sampled_run
    assert cli(["export", str(run_dir), "--format", "netcdf", "--out", str(tmp_path / "a.nc")]) == 0
    check_walkers_as_chains(arviz.from_netcdf(tmp_path / "a.nc"), fit.results)
    assert cli(["export", str(run_dir), "--out", str(tmp_path / "a.csv")]) == 0  # format from the suffix
    back = read_csv(tmp_path / "a.csv")
    np.testing.assert_array_equal(back.to_numpy(dtype=float), fit.results.samples.to_numpy(dtype=float))
    assert "a.csv" in capsys.readouterr().out


def test_cli_errors_are_one_line_exit_2(sampled_run, tmp_path, capsys):
    _, run_dir = sampled_run
    dest = tmp_path / "a.csv"
    dest.write_text("keep me\n", encoding="utf-8")
    assert cli(["export", str(run_dir), "--format", "csv", "--out", str(dest)]) == 2
    assert "--overwrite" in one_line_error(capsys)
    assert dest.read_text(encoding="utf-8") == "keep me\n"
    assert cli(["export", str(run_dir), "--format", "csv", "--out", str(dest), "--overwrite"]) == 0
    capsys.readouterr()
    assert cli(["export", str(tmp_path / "nowhere"), "--format", "csv", "--out", str(tmp_path / "b.csv")]) == 2
    assert "not a run folder" in one_line_error(capsys)
    assert cli(["export", str(run_dir), "--format", "csv", "--out", str(dest / "under" / "b.csv")]) == 2
    assert "is a file, not a folder" in one_line_error(capsys)
    assert cli(["export", str(run_dir), "--out", str(tmp_path / "b.txt")]) == 2
    assert "format" in one_line_error(capsys)
    assert not (tmp_path / "b.csv").exists() and not (tmp_path / "b.txt").exists()
