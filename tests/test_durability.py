"""Checkpoints, resume, interruption and atomic output (common practice, no source).

The resume test demands bit-for-bit equality: an interrupted and resumed chain
is the same chain as an uninterrupted run of the same seed and length.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from orbitmass import Fit, RunFolderError, load
from orbitmass.cli import main
from orbitmass.io import rundir
from orbitmass.demo.simulate import TrueOrbit

from .conftest import make_target

# These tests exercise the Markov chain, its checkpoints and resuming, so the astrometry-only
# fast path (which needs neither) is switched off: linear=False, --no-fast-path.
TRUTH = TrueOrbit(mass_msun=1.9, distance_pc=20.0, period_yr=12.0, eccentricity=0.3, inclination_deg=60.0,
                  arg_periastron_deg=40.0, ascending_node_deg=100.0, periastron_time=2010.0)


@pytest.fixture
def small_target(tmp_path, rng):
    t = np.sort(rng.uniform(2000, 2024, 16))
    return make_target(tmp_path / "data", TRUTH, rng=rng, t_pos=t, pos_err=3.0,
                       distance_toml='parallax = { dist = "normal", mean = "50 mas", sd = "1 mas" }')


def stop_after(n):
    count = {"n": 0}

    def flag():
        # the initial search polls the flag too; only the sampler's polls (one after each
        # stored step) are counted, so this stops the chain after n steps
        if sys._getframe(1).f_code.co_name != "run_sampler":
            return False
        count["n"] += 1
        return count["n"] >= n

    return flag


def test_resume_equals_uninterrupted_run(small_target, tmp_path):
    n_steps = 300
    whole = Fit(seed=7, linear=False, max_steps=n_steps, min_steps=n_steps, progress=False).fit(small_target)
    ckpt = tmp_path / "checkpoint.h5"
    first = Fit(seed=7, linear=False, max_steps=n_steps, min_steps=n_steps, progress=False, checkpoint=ckpt)
    first.fit(small_target, stop_flag=stop_after(120))
    assert first.summary["diagnostics"]["interrupted"]
    assert not first.summary["diagnostics"]["converged"]
    assert first.results.chain.shape[0] == 120
    assert ckpt.is_file()
    second = Fit(seed=7, linear=False, max_steps=n_steps, min_steps=n_steps, progress=False, checkpoint=ckpt,
                 resume=True)
    second.fit(small_target)
    assert second.results.chain.shape == whole.results.chain.shape
    assert np.array_equal(second.results.chain, whole.results.chain)
    assert second.summary["derived"]["mass_msun"] == whole.summary["derived"]["mass_msun"]


def test_resume_refuses_other_data(small_target, tmp_path, rng):
    ckpt = tmp_path / "checkpoint.h5"
    Fit(seed=1, linear=False, max_steps=200, min_steps=200, progress=False, checkpoint=ckpt).fit(
        small_target, stop_flag=stop_after(50))
    other = make_target(tmp_path / "other", TRUTH, rng=rng, t_pos=np.linspace(2001, 2020, 12), pos_err=3.0,
                        distance_toml='parallax = { dist = "normal", mean = "50 mas", sd = "1 mas" }')
    with pytest.raises(Exception, match="checkpoint belongs to other data"):
        Fit(seed=1, linear=False, max_steps=200, checkpoint=ckpt, resume=True, progress=False).fit(other)


def test_save_refuses_non_empty_folder_and_keeps_it(small_target, tmp_path):
    fit = Fit(seed=2, linear=False, max_steps=200, min_steps=200, progress=False).fit(small_target)
    out = tmp_path / "run"
    out.mkdir()
    precious = out / "notes.txt"
    precious.write_text("mine")
    with pytest.raises(RunFolderError, match="not empty"):
        fit.save(out)
    assert precious.read_text() == "mine"
    assert sorted(p.name for p in out.iterdir()) == ["notes.txt"]


def test_failed_write_leaves_no_half_summary(tmp_path, monkeypatch):
    path = tmp_path / "summary.json"

    def broken_dump(obj, fh, **kw):
        fh.write('{"orbitmass_version": "0.1.0", "deri')
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(rundir.json, "dump", broken_dump)
    with pytest.raises(OSError, match="disk full"):
        rundir.write_json_atomic({"a": 1}, path)
    assert not path.exists()
    assert list(tmp_path.iterdir()) == []


def test_save_load_round_trip_exact(small_target, tmp_path):
    fit = Fit(seed=3, linear=False, max_steps=300, min_steps=300, progress=False).fit(small_target)
    out = fit.save(tmp_path / "run")
    for name in ("summary.json", "posterior.h5", "report.md", "corner.png", "orbit.png", "table.tex"):
        assert (out / name).is_file(), name
    back = load(out)
    assert back.results.samples.equals(fit.results.samples)
    assert np.array_equal(back.results.chain, fit.results.chain)
    assert back.summary == json.loads((out / "summary.json").read_text())
    # predictions from the loaded run equal those from the live one
    t = np.linspace(2000, 2010, 5)
    a = fit.results.predict("S1", t_astro=t, rows=np.arange(10))
    b = back.results.predict("S1", t_astro=t, rows=np.arange(10))
    assert np.allclose(a["east_mas"], b["east_mas"], rtol=0, atol=1e-12)


def test_cli_refuses_non_empty_out(small_target, tmp_path, capsys):
    out = tmp_path / "busy"
    out.mkdir()
    (out / "keep.txt").write_text("x")
    code = main(["fit", str(small_target), "--out", str(out)])
    assert code == 2
    err = capsys.readouterr().err
    assert "not empty" in err and "Traceback" not in err
    assert (out / "keep.txt").read_text() == "x"


@pytest.mark.slow
def test_cli_sigint_saves_and_resume_continues(small_target, tmp_path):
    out = tmp_path / "run"
    cmd = [sys.executable, "-m", "orbitmass.cli", "fit", str(small_target), "--out", str(out), "--seed", "5",
           "--max-steps", "200000", "--no-progress", "--no-fast-path"]
    env = dict(os.environ, MPLBACKEND="Agg")
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env, text=True)
    # wait until sampling has written its first checkpoint
    deadline = time.time() + 120
    while not (out / "checkpoint.h5").exists() and time.time() < deadline and proc.poll() is None:
        time.sleep(0.2)
    time.sleep(0.5)
    proc.send_signal(signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=180)
    assert proc.returncode == 130, stderr
    assert "Traceback" not in stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["diagnostics"]["interrupted"] is True
    assert summary["diagnostics"]["converged"] is False
    assert (out / "checkpoint.h5").is_file()
    steps_before = summary["diagnostics"]["n_steps"]
    proc = subprocess.run(cmd[:-4] + ["--max-steps", str(steps_before + 400), "--no-progress", "--resume",
                                      "--no-fast-path"],
                          capture_output=True, text=True, env=env, timeout=300)
    assert proc.returncode in (0, 1), proc.stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["diagnostics"]["n_steps"] > steps_before
    assert summary["diagnostics"]["interrupted"] is False
