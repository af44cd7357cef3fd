"""Checkpoints, resume, interruption, atomic output and safe run folders (common practice, no source).

The resume test demands bit-for-bit equality: an interrupted and resumed chain
is the same chain as an uninterrupted run of the same seed and length.

The run-folder probes (issue "hard edges": data loss first) check users' files
by SHA-256 before and after (hashlib, FIPS 180-4): a refused write changes nothing.
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

from orbitmass import Fit, InputError, RunFolderError, load, read_target
from orbitmass.cli import main
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.io import rundir
from orbitmass.io.checkpoint import load_checkpoint
from orbitmass.io.rundir import check_run_folder_writable, load_run, prepare_run_folder, save_run

from tests.helpers.targets import make_target

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


# ------------------------------------------------------------------ run-folder safety probes
def tree_digest(folder: Path) -> dict[str, str]:
    """SHA-256 of every file below ``folder`` (relative path -> hex digest)."""
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """One tiny chain-sampled fit shared by the probes (300 steps, ~1 s)."""
    folder = tmp_path_factory.mktemp("fitted")
    rng = np.random.default_rng(20261201)
    t = np.sort(rng.uniform(2000, 2024, 16))
    target = make_target(folder / "data", TRUTH, rng=rng, t_pos=t, pos_err=3.0,
                         distance_toml='parallax = { dist = "normal", mean = "50 mas", sd = "1 mas" }')
    fit = Fit(seed=4, linear=False, max_steps=300, min_steps=300, progress=False).fit(target)
    return fit


def user_folder(base: Path) -> Path:
    folder = base / "thesis"
    (folder / "raw").mkdir(parents=True)
    (folder / "thesis.tex").write_text("\\chapter{Orbits}", encoding="utf-8")
    (folder / "raw" / "night1.fits").write_bytes(os.urandom(256))
    return folder


def test_overwrite_refuses_folder_with_unrelated_files(fitted, tmp_path):
    folder = user_folder(tmp_path)
    before = tree_digest(folder)
    with pytest.raises(RunFolderError, match=r"not a folder orbitmass wrote.*raw/.*thesis\.tex"):
        fitted.save(folder, overwrite=True)
    with pytest.raises(RunFolderError):
        prepare_run_folder(folder, overwrite=True)
    assert tree_digest(folder) == before
    assert sorted(p.name for p in folder.iterdir()) == ["raw", "thesis.tex"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["thesis"]  # no staging left


def test_overwrite_refuses_run_folder_with_a_user_file_added(fitted, tmp_path):
    out = save_run(fitted.results, tmp_path / "run", products=False)
    (out / "my-notes.txt").write_text("do not lose", encoding="utf-8")
    before = tree_digest(out)
    with pytest.raises(RunFolderError, match=r"did not write \(my-notes\.txt\)"):
        save_run(fitted.results, out, overwrite=True, products=False)
    assert tree_digest(out) == before
    (out / "my-notes.txt").unlink()
    # a run folder holding only what orbitmass wrote is replaced with overwrite, and stays loadable
    save_run(fitted.results, out, overwrite=True, products=False)
    assert load_run(out).samples.equals(fitted.results.samples)
    marker = json.loads((out / ".orbitmass-run").read_text())
    assert marker["kind"] == "run" and "posterior.h5" in marker["files"] and marker["created_utc"]
    assert not (out / ".orbitmass-lock").exists()


def test_out_equal_to_input_folder_is_refused(fitted, tmp_path):
    data = Path(fitted.results.target.source).parent
    before = tree_digest(data)
    for place in (data, data.parent):  # the input folder, and a folder containing it
        with pytest.raises(RunFolderError, match="an input of this job"):
            fitted.save(place, overwrite=True)
    with pytest.raises(RunFolderError, match="an input of this job"):
        prepare_run_folder(tmp_path / "x", protected=[tmp_path / "x" / "target.toml"])
    assert tree_digest(data) == before


def test_out_is_cwd_parent_or_home_is_refused(fitted, tmp_path, monkeypatch):
    work = tmp_path / "project" / "work"
    work.mkdir(parents=True)
    (work / "draft.txt").write_text("mine", encoding="utf-8")
    before = tree_digest(tmp_path / "project")
    monkeypatch.chdir(work)
    for place, why in ((".", "working directory"), (str(work), "working directory"),
                       ("..", "contains the working directory"), ("/", "root of the file system")):
        with pytest.raises(RunFolderError, match=why):
            fitted.save(place, overwrite=True)
    home = tmp_path / "home"
    home.mkdir()
    (home / ".profile").write_text("# mine", encoding="utf-8")
    monkeypatch.setenv("HOME", str(home))  # Path.home() reads HOME (Python docs, os.path.expanduser)
    with pytest.raises(RunFolderError, match="it is the home folder"):
        save_run(fitted.results, home, overwrite=True, products=False)
    assert tree_digest(tmp_path / "project") == before
    assert (home / ".profile").read_text(encoding="utf-8") == "# mine"


def test_two_writers_second_gets_lock_error_first_finishes(fitted, tmp_path):
    out = tmp_path / "run"
    first = prepare_run_folder(out)  # the first fit took the folder before sampling
    assert (out / ".orbitmass-lock").is_file()
    for attempt in (lambda: prepare_run_folder(out), lambda: prepare_run_folder(out, overwrite=True),
                    lambda: save_run(fitted.results, out, overwrite=True, products=False)):
        with pytest.raises(RunFolderError, match="another orbitmass process"):
            attempt()
    save_run(fitted.results, out, products=False, lock=first)  # the first publishes normally
    first.release()
    assert not (out / ".orbitmass-lock").exists()
    back = load_run(out)
    assert back.samples.equals(fitted.results.samples)
    assert back.summary == json.loads((out / "summary.json").read_text())


def test_second_writer_in_another_process(fitted, tmp_path):
    out = tmp_path / "run"
    code = ("import sys, time; from orbitmass.io.rundir import prepare_run_folder; "
            f"lock = prepare_run_folder({str(out)!r}); print('locked', flush=True); sys.stdin.read()")
    proc = subprocess.Popen([sys.executable, "-c", code], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "locked"
        with pytest.raises(RunFolderError, match=rf"another orbitmass process \(pid {proc.pid}"):
            fitted.save(out, overwrite=True)
    finally:
        proc.communicate("")
    assert sorted(p.name for p in out.iterdir()) == [".orbitmass-lock", ".orbitmass-run"]


def test_stale_lock_reported_with_how_to_remove(fitted, tmp_path):
    out = tmp_path / "run"
    code = f"from orbitmass.io.rundir import prepare_run_folder; prepare_run_folder({str(out)!r})"
    subprocess.run([sys.executable, "-c", code], check=True)  # exits without releasing: a crashed fit
    with pytest.raises(RunFolderError, match="stale lock") as err:
        fitted.save(out, overwrite=True)
    assert "remove that file" in str(err.value) and "--" not in str(err.value)
    assert (out / ".orbitmass-lock").is_file()  # not silently stolen


def test_hand_edited_samples_are_refused(fitted, tmp_path):
    out = save_run(fitted.results, tmp_path / "run", products=False)
    with h5py.File(out / "posterior.h5", "r+") as f:
        samples = f["samples"]
        samples[0, 0] = samples[0, 0] * 2.0
    with pytest.raises(RunFolderError, match="dataset /samples does not match"):
        load(out)


def test_runs_saved_without_checksums_still_load(fitted, tmp_path):
    out = save_run(fitted.results, tmp_path / "run", products=False)
    with h5py.File(out / "posterior.h5", "r+") as f:  # what earlier versions wrote
        del f.attrs["summary_sha256"]
        f.visititems(lambda name, obj: obj.attrs.__delitem__("sha256") if "sha256" in obj.attrs else None)
    assert load_run(out).samples.equals(fitted.results.samples)


def test_edited_summary_numbers_are_refused(fitted, tmp_path):
    out = save_run(fitted.results, tmp_path / "run", products=False)
    summary = json.loads((out / "summary.json").read_text())
    summary["derived"]["mass_msun"]["median"] *= 1.5
    (out / "summary.json").write_text(json.dumps(summary))
    with pytest.raises(RunFolderError, match="do not match posterior.h5"):
        load_run(out)


@pytest.mark.parametrize("content, why", [("[1, 2, 3]", "holds a JSON list, expected a JSON object"),
                                          ("\x00\xff garbage", "cannot read summary.json")])
def test_summary_not_an_object_or_unreadable(fitted, tmp_path, content, why):
    out = save_run(fitted.results, tmp_path / "run", products=False)
    (out / "summary.json").write_bytes(content.encode("latin-1"))
    with pytest.raises(RunFolderError, match=why):
        load(out)


def test_report_on_missing_folder_says_it_does_not_exist(tmp_path, capsys):
    with pytest.raises(RunFolderError, match="no such folder"):
        load(tmp_path / "gone")
    code = main(["report", str(tmp_path / "gone")])
    err = capsys.readouterr().err
    assert code == 2 and "no such folder" in err and "Traceback" not in err


def test_report_fails_before_any_work_when_folder_unwritable(fitted, tmp_path, monkeypatch):
    def no_drawing(*a, **k):
        raise AssertionError("a figure was drawn before the writability check")

    monkeypatch.setattr("orbitmass.outputs.figures.corner.corner_figure", no_drawing)
    a_file = tmp_path / "a-file"
    a_file.write_text("x")
    with pytest.raises(RunFolderError, match="is a file"):
        fitted.report(a_file / "report")
    with pytest.raises(RunFolderError, match="not a folder"):
        check_run_folder_writable(a_file)
    # a folder of the user holding a file the report would replace
    mine = tmp_path / "paper"
    mine.mkdir()
    (mine / "table.tex").write_text("my own table")
    with pytest.raises(RunFolderError, match="table.tex"):
        fitted.report(mine)
    assert (mine / "table.tex").read_text() == "my own table"


def skip_unless_write_protected(folder: Path) -> None:
    """Skip when chmod 0555 does not stop writes (root, CAP_DAC_OVERRIDE): detected by trying."""
    try:
        (folder / "probe").write_text("x")
    except PermissionError:
        return
    (folder / "probe").unlink()
    pytest.skip("running as root: chmod 0555 does not stop writes (the path-under-a-file probes cover it)")


def test_report_on_read_only_run_folder(fitted, tmp_path):
    out = save_run(fitted.results, tmp_path / "run", products=False)
    out.chmod(0o555)
    try:
        skip_unless_write_protected(out)
        with pytest.raises(RunFolderError, match="read-only"):
            check_run_folder_writable(out)
    finally:
        out.chmod(0o755)


def test_garbled_checkpoint_gives_input_error(small_target, tmp_path):
    ckpt = tmp_path / "checkpoint.h5"
    ckpt.write_bytes(b"\x89HDF\r\n\x1a\n" + os.urandom(200))  # HDF5 signature, then garbage
    with pytest.raises(InputError, match="not a readable orbitmass checkpoint") as err:
        Fit(seed=1, linear=False, max_steps=50, checkpoint=ckpt, resume=True, progress=False).fit(small_target)
    assert err.value.file == str(ckpt)
    # a real checkpoint whose chain was edited, and one whose random state was garbled
    Fit(seed=1, linear=False, max_steps=200, min_steps=200, progress=False, checkpoint=ckpt).fit(
        small_target, stop_flag=stop_after(30))
    load_checkpoint(ckpt)  # intact
    with h5py.File(ckpt, "r+") as f:
        f["chain"][0, 0, 0] += 1.0
    with pytest.raises(InputError, match="/chain does not match its recorded checksum"):
        load_checkpoint(ckpt)
    Fit(seed=1, linear=False, max_steps=200, min_steps=200, progress=False, checkpoint=ckpt).fit(
        small_target, stop_flag=stop_after(30))
    with h5py.File(ckpt, "r+") as f:
        f.attrs["random_state"] = '["MT19937", [1, 2], 0'
    with pytest.raises(InputError, match=str(ckpt)):
        Fit(seed=1, linear=False, max_steps=50, checkpoint=ckpt, resume=True, progress=False).fit(small_target)


def test_read_only_parent_refused_before_sampling(tmp_path):
    parent = tmp_path / "ro"
    parent.mkdir()
    parent.chmod(0o555)
    try:
        skip_unless_write_protected(parent)
        with pytest.raises(RunFolderError, match="read-only"):
            prepare_run_folder(parent / "run")
    finally:
        parent.chmod(0o755)


def test_path_under_a_file_refused_before_sampling(fitted, tmp_path):
    a_file = tmp_path / "results.txt"
    a_file.write_text("mine", encoding="utf-8")
    before = tree_digest(tmp_path)
    for out in (a_file / "run", a_file / "deeper" / "run"):
        with pytest.raises(RunFolderError, match="is a file, not a folder"):
            prepare_run_folder(out)
        with pytest.raises(RunFolderError, match="is a file, not a folder"):
            fitted.save(out)
    with pytest.raises(RunFolderError, match="exists and is not a folder"):
        fitted.save(a_file, overwrite=True)
    assert tree_digest(tmp_path) == before


def test_prepared_folder_holds_checkpoint_and_publish_keeps_it(small_target, tmp_path):
    out = tmp_path / "run"
    with prepare_run_folder(out) as lock:
        ckpt = out / "checkpoint.h5"
        fit = Fit(seed=2, linear=False, max_steps=200, min_steps=200, progress=False, checkpoint=ckpt)
        fit.fit(small_target, stop_flag=stop_after(40))
        save_run(fit.results, out, keep=("checkpoint.h5",), products=False, lock=lock)
    assert sorted(p.name for p in out.iterdir()) == [".orbitmass-run", "checkpoint.h5", "input", "posterior.h5",
                                                     "residuals.csv", "summary.json"]
    # resume into the same folder: allowed without overwrite, the checkpoint continues
    with prepare_run_folder(out, resume=True) as lock:
        again = Fit(seed=2, linear=False, max_steps=200, min_steps=200, progress=False,
                    checkpoint=out / "checkpoint.h5", resume=True).fit(small_target)
        save_run(again.results, out, products=False, lock=lock)
    assert load_run(out).chain.shape[0] == 200
    # a failed fit leaves no empty folder behind
    lock = prepare_run_folder(tmp_path / "never")
    lock.release()
    assert not (tmp_path / "never").exists()


def test_cli_report_on_read_only_run_folder_one_line_before_drawing(fitted, tmp_path, monkeypatch, capsys):
    import errno


    out = save_run(fitted.results, tmp_path / "run", products=False)
    before = tree_digest(out)
    real_open = os.open

    def read_only_open(path, *args, **kwargs):  # a read-only mount refuses new files with EROFS (POSIX open(2))
        if "write-probe" in str(path):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(path))
        return real_open(path, *args, **kwargs)

    def no_drawing(*a, **k):
        raise AssertionError("a figure was drawn before the writability check")

    monkeypatch.setattr("orbitmass._atomic.os.open", read_only_open)
    monkeypatch.setattr("orbitmass.outputs.figures.corner.corner_figure", no_drawing)
    code = main(["report", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and "read-only file system" in err and len(err.strip().splitlines()) == 1
    assert tree_digest(out) == before


def test_failing_figure_still_saves_the_run(fitted, tmp_path, monkeypatch):

    def broken(*a, **k):
        raise ValueError("simulated plotting failure")

    monkeypatch.setattr("orbitmass.outputs.figures.orbit.orbit_figure", broken)
    with pytest.raises(RunFolderError, match=r"the run is saved .*simulated plotting failure"):
        fitted.save(tmp_path / "run")
    back = load(tmp_path / "run")  # samples and summary were published
    assert back.results.samples.equals(fitted.results.samples)


def test_beyond_kepler_tables_and_fit_options_survive_save_and_load(small_target, tmp_path):
    # the [relativity], [extended_mass] and [fit] tables of the input contract
    # (shared/spec/input-format.md, "Beyond Kepler") must come back from a run folder unchanged
    text = small_target.read_text(encoding="utf-8")
    text += ('\n[relativity]\nredshift_factor = { dist = "uniform", low = -1, high = 3 }\nroemer_delay = true\n'
             '[extended_mass]\nfraction = { dist = "uniform", low = 0, high = 0.05 }\nscale_radius = "10 mas"\n'
             '[fit]\nwalkers = 32\n')
    small_target.write_text(text, encoding="utf-8")
    target = read_target(small_target)
    fit = Fit(seed=3, linear=False, max_steps=120, min_steps=120, progress=False).fit(target)
    back = load(fit.save(tmp_path / "run"))
    assert back.results.target.relativity == target.relativity
    assert back.results.target.relativity.roemer_delay is True
    assert back.results.target.extended_mass == target.extended_mass
    assert back.results.target.extended_mass.scale_radius_mas == 10.0
    assert back.results.target.fit_options == target.fit_options
