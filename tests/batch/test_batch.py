"""Batch fits on dask.distributed: catalogue, failure isolation, retries, resume, seeds.

The dask tests share one local cluster of 2 worker processes (one thread
each) and fit a small invented sample with a short step cap (the fits do not
converge; a not-converged fit still writes its whole run folder, which is all
a batch needs). Outside references: target seeds are recomputed here with
numpy's SeedSequence and hashlib's SHA-256 (FIPS 180-4); "a target gives the
same result alone" is checked against a plain in-process Fit; catalogue values
against the run folders' summary.json read with the json module; Parquet
against pandas/pyarrow reading it back.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from orbitmass.batch import (
    STATUS_FAILED,
    STATUS_NOT_CONVERGED,
    expand_targets,
    fit_batch,
    fit_target,
    open_client,
    plan_batch,
    target_seed,
)
from orbitmass.cli.batch import add_parser as add_batch_parser
from orbitmass.cli.batch import run as cmd_batch
from orbitmass.demo.scenarios import write_example_sample
from orbitmass.exceptions import InputError, OrbitmassError
from orbitmass.io.rundir import is_complete_run

MAX_STEPS = 300  # short chains: a few seconds per fit
# every element sampled (not the astrometry-only fast path, which converges at once), so that
# these short fits end "not converged" and the status column is exercised
FIT = {"max_steps": MAX_STEPS, "linear": False}
BAD_TARGET = """\
[target]
name = "Vell 9 AB"
[central]
mass = { dist = "log-uniform", low = 0.05, high = "50 solMass" }
[distance]
parallax = { dist = "normal", mean = "30 mas", sd = "0.3 mas" }
[[companion]]
name = "B"
astrometry = "positions.csv"
"""


@pytest.fixture(scope="module")
def sample(tmp_path_factory) -> dict:
    """Three invented good targets and one with a bare number where a mass is required."""
    data = tmp_path_factory.mktemp("sample")
    good = write_example_sample(data / "good", 3, seed=11)
    bad_dir = data / "bad" / "vell9"
    bad_dir.mkdir(parents=True)
    (bad_dir / "target.toml").write_text(BAD_TARGET, encoding="utf-8")
    (bad_dir / "positions.csv").write_text(
        (good[0].parent / "positions.csv").read_text(encoding="utf-8"), encoding="utf-8"
    )
    return {
        "good": good,
        "bad": bad_dir / "target.toml",
        "glob": str(data / "good" / "*" / "target.toml"),
    }


@pytest.fixture(scope="module")
def client():
    """A local dask cluster of 2 worker processes, closed after the module."""
    pytest.importorskip("distributed")
    with open_client(workers=2) as c:
        yield c


# ------------------------------------------------------------------ no dask needed
def test_target_seed_is_seedsequence_of_batch_seed_and_sha256_words():
    name = "Orrin 101 AB"
    # reference: hashlib SHA-256 (FIPS 180-4) and numpy.random.SeedSequence, computed independently
    digest = hashlib.sha256(name.encode("utf-8")).digest()
    words = list(np.frombuffer(digest, dtype=">u4").astype(int))
    expected = int(np.random.SeedSequence([7, *words]).generate_state(1, dtype=np.uint32)[0]) >> 1
    assert target_seed(7, name) == expected
    assert 0 <= target_seed(7, name) < 2**31
    assert target_seed(7, name) != target_seed(8, name)
    assert target_seed(7, name) != target_seed(7, "Orrin 102 AB")
    with pytest.raises(InputError) as err:
        target_seed(-1, name)
    assert err.value.key == "seed"


def test_expand_targets_orders_globs_and_drops_repeats(tmp_path):
    for sub in ("b", "a", "c"):
        (tmp_path / sub).mkdir()
        (tmp_path / sub / "target.toml").write_text("", encoding="utf-8")
    pattern = str(tmp_path / "*" / "target.toml")
    got = expand_targets([str(tmp_path / "c" / "target.toml"), pattern])
    assert [p.parent.name for p in got] == ["c", "a", "b"]
    with pytest.raises(InputError, match="matches no file") as err:
        expand_targets([str(tmp_path / "*.nothing")])
    assert err.value.key == "targets"


def test_plan_batch_names_folders_and_rejects_unknown_options(tmp_path):
    for sub in ("one", "two"):
        (tmp_path / sub).mkdir()
        (tmp_path / sub / "target.toml").write_text('[target]\nname = "Kesh 4/5 AB"\n', encoding="utf-8")
    jobs = plan_batch([str(tmp_path / "*" / "target.toml")], tmp_path / "out", seed=3)
    assert [Path(j.run_dir).name for j in jobs] == ["Kesh-4-5-AB", "Kesh-4-5-AB-2"]
    assert all(Path(j.run_dir).parent == (tmp_path / "out" / "runs").resolve() for j in jobs)
    assert jobs[0].seed == jobs[1].seed == target_seed(3, "Kesh 4/5 AB")
    with pytest.raises(InputError) as err:
        plan_batch([str(tmp_path / "one" / "target.toml")], tmp_path / "out", fit_options={"sed": 1})
    assert err.value.key == "fit_options.sed"


def test_missing_dask_names_the_extra(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # makes "import distributed" fail
    with pytest.raises(OrbitmassError, match=r'pip install "orbitmass\[cluster\]"'):
        with open_client(workers=1):
            pass


# ------------------------------------------------------------------ on the cluster
def _summary(run_dir: str) -> dict:
    return json.loads((Path(run_dir) / "summary.json").read_text(encoding="utf-8"))


@pytest.mark.slow
def test_batch_catalogue_failure_interruption_and_resume(sample, client, tmp_path, capsys):
    out = tmp_path / "batch"
    planned = plan_batch([sample["glob"]], out)
    names = [job.name for job in planned]
    # an interrupted earlier batch: a half-written run folder and a staging leftover
    broken = Path(planned[1].run_dir)
    broken.mkdir(parents=True)
    (broken / "posterior.h5").write_bytes(b"half")
    staging = broken.parent / f".{Path(planned[2].run_dir).name}.staging-x1y2z3"
    staging.mkdir()
    (staging / "posterior.h5").write_bytes(b"half")

    cat = fit_batch(
        [sample["glob"], str(sample["bad"])],
        out,
        client=client,
        seed=5,
        fit_options=FIT,
        products=False,
        progress=False,
    )

    assert list(cat["name"]) == [*names, "Vell 9 AB"]
    good, bad = cat.iloc[:3], cat.iloc[3]
    # failure record: the bad target failed with its InputError naming file and key; others ran
    assert bad["status"] == STATUS_FAILED
    assert bad["error"].startswith("InputError:")
    assert "central.mass.low" in bad["error"] and str(sample["bad"]) in bad["error"]
    assert np.isnan(bad["mass_msun_median"])
    assert (good["status"] == STATUS_NOT_CONVERGED).all()  # 300 steps < 50 tau: not converged
    assert not good["skipped"].any()
    # interrupted run redone, staging leftover gone
    assert is_complete_run(broken) and not staging.exists()
    for row in good.itertuples():
        assert is_complete_run(Path(row.run_dir))
        s = _summary(row.run_dir)
        assert row.mass_msun_median == s["derived"]["mass_msun"]["median"]
        assert row.mass_msun_q16 == s["derived"]["mass_msun"]["q16"]
        assert row.distance_pc_q84 == s["derived"]["distance_pc"]["q84"]
        assert row.c1_name == "B"
        assert row.c1_period_yr_median == s["companions"]["B"]["period_yr"]["median"]
        assert row.c1_semimajor_axis_mas_q84 == s["companions"]["B"]["semimajor_axis_mas"]["q84"]
        assert row.ess_min == s["diagnostics"]["ess_min"]
        assert row.seed == s["provenance"]["seed"] == target_seed(5, row.name)
    # the files on disk hold the same table
    tables = [pd.read_csv(out / "catalogue.csv")]
    try:
        import pyarrow  # noqa: F401

        tables.append(pd.read_parquet(out / "catalogue.parquet"))
    except ImportError:  # Parquet is written only when pyarrow is installed
        assert not (out / "catalogue.parquet").exists()
    for table in tables:
        assert list(table["status"]) == list(cat["status"])
        np.testing.assert_array_equal(
            table["mass_msun_median"].to_numpy(float), cat["mass_msun_median"].to_numpy(float)
        )
        assert list(table["seed"]) == list(cat["seed"])

    # a target alone, with the seed from the catalogue, gives the same posterior as in the batch
    from orbitmass.fit import Fit

    first = good.iloc[0]
    alone = Fit(seed=int(first["seed"]), max_steps=MAX_STEPS, progress=False, linear=False).fit(
        first["target_file"])
    assert alone.summary["derived"]["mass_msun"]["median"] == pytest.approx(first["mass_msun_median"], rel=1e-12)

    # resume through the command line: finished runs are skipped, untouched; the bad one fails again
    mtimes = {
        row.run_dir: {f: (Path(row.run_dir) / f).stat().st_mtime_ns for f in ("summary.json", "posterior.h5")}
        for row in good.itertuples()
    }
    parser = argparse.ArgumentParser(prog="orbitmass")
    add_batch_parser(parser.add_subparsers(dest="command"))
    args = parser.parse_args(
        [
            "batch",
            sample["glob"],
            str(sample["bad"]),
            "--out",
            str(out),
            "--scheduler",
            client.scheduler.address,
            "--seed",
            "5",
            "--max-steps",
            str(MAX_STEPS),
            "--no-figures",
            "--no-progress",
            "--no-fast-path",
        ]
    )
    capsys.readouterr()
    assert cmd_batch(args) == 1  # not all converged
    printed = capsys.readouterr()
    assert "dask dashboard: http" in printed.err  # a client was opened for the bad target
    assert "4 targets: 0 converged, 3 not converged, 1 failed (3 complete runs kept" in printed.out
    assert "failed: Vell 9 AB: InputError:" in printed.err
    again = pd.read_csv(out / "catalogue.csv")
    assert list(again["skipped"]) == [True, True, True, False]
    assert list(again["status"]) == list(cat["status"])
    np.testing.assert_array_equal(again["mass_msun_median"].to_numpy(float), cat["mass_msun_median"].to_numpy(float))
    for run_dir, stamps in mtimes.items():
        for f, ns in stamps.items():
            assert (Path(run_dir) / f).stat().st_mtime_ns == ns


# Task wrappers that misbehave once; they run on the workers, so this module is
# shipped by value (the workers cannot import the tests folder).
def _dies_once(job):
    marker = Path(job.run_dir).parent.parent / f"died-{Path(job.run_dir).name}"
    if job.name == "Orrin 101 AB" and not marker.exists():
        marker.write_text("the worker process exits here once", encoding="utf-8")
        os._exit(3)
    if job.name == "Orrin 102 AB":
        marker = Path(job.run_dir).parent.parent / "raised-once"
        if not marker.exists():
            marker.write_text("raised", encoding="utf-8")
            raise RuntimeError("a crash the retry should get past")
    if job.name == "Orrin 103 AB":
        raise RuntimeError("this fit crashes every time")
    return fit_target(job)


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore::ResourceWarning")  # sockets of the killed worker
def test_dead_worker_and_crashes_are_retried_then_recorded(sample, client, tmp_path):
    import cloudpickle

    cloudpickle.register_pickle_by_value(sys.modules[__name__])
    try:
        cat = fit_batch(
            [sample["glob"]],
            tmp_path,
            client=client,
            seed=1,
            retries=1,
            fit_options=FIT,
            products=False,
            progress=False,
            fit_function=_dies_once,
        )
    finally:
        cloudpickle.unregister_pickle_by_value(sys.modules[__name__])
    rows = cat.set_index("name")
    # the worker died on the first attempt (marker written), dask ran the task again elsewhere
    assert (tmp_path / "died-Orrin-101-AB").exists()
    assert rows.loc["Orrin 101 AB", "status"] == STATUS_NOT_CONVERGED
    # an exception on the first attempt is retried (retries=1)
    assert (tmp_path / "raised-once").exists()
    assert rows.loc["Orrin 102 AB", "status"] == STATUS_NOT_CONVERGED
    # a fit that always crashes is recorded as failed, with its message, and stops nothing
    assert rows.loc["Orrin 103 AB", "status"] == STATUS_FAILED
    assert rows.loc["Orrin 103 AB", "error"] == "RuntimeError: this fit crashes every time"
    assert not is_complete_run(Path(rows.loc["Orrin 103 AB", "run_dir"]))
    client.wait_for_workers(2, timeout=60)  # the nanny replaced the dead worker


@pytest.mark.slow
def test_interrupted_batch_writes_catalogue_then_reraises(sample, client, tmp_path):
    def interrupt(_client):
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        fit_batch([sample["glob"]], tmp_path, client=client, on_client=interrupt, progress=False)
    cat = pd.read_csv(tmp_path / "catalogue.csv")
    assert (cat["status"] == STATUS_FAILED).all()
    assert cat["error"].str.contains("rerun the same command to resume").all()


# ------------------------------------------------------------------ identity, limits, interruption
def _checksums(folder: Path) -> dict[str, str]:
    """SHA-256 (hashlib, FIPS 180-4) of every file under ``folder``, by relative path."""
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _same_name_targets(folder: Path, n: int) -> list[Path]:
    """``n`` invented targets that all carry the name "Orrin 1xx AB" (so their folder names collide)."""
    paths = write_example_sample(folder, n, seed=21)
    for p in paths:
        text = p.read_text(encoding="utf-8")
        name = text.split('\nname = "', 1)[1].split('"', 1)[0]
        p.write_text(text.replace(f'name = "{name}"', 'name = "Orrin 1xx AB"'), encoding="utf-8")
    return paths


def _fake_run(run_dir: Path, target: Path, digest: str) -> None:
    """A complete-looking run folder recording ``target`` and ``digest`` in its provenance."""
    run_dir.mkdir(parents=True)
    (run_dir / "posterior.h5").write_bytes(b"not read by the planner")
    (run_dir / "summary.json").write_text(json.dumps(
        {"provenance": {"target_file": str(target), "data_sha256": digest, "seed": 1}}), encoding="utf-8")


def test_plan_keeps_each_targets_own_folder_whatever_the_order(tmp_path):
    from orbitmass.batch.plan import RUN_MATCHES, RUN_OTHER_TARGET, RUN_STALE, RUN_UNFINISHED, run_state
    from orbitmass.io.target import read_target

    a, b, c = _same_name_targets(tmp_path / "data", 3)
    out = tmp_path / "out"
    first = plan_batch([a, b], out)
    assert [Path(j.run_dir).name for j in first] == ["Orrin-1xx-AB", "Orrin-1xx-AB-2"]
    # the checksum of the job is the reader's data_sha256 (target file and tables)
    assert first[0].data_sha256 == read_target(a).data_sha256
    for job in first:
        _fake_run(Path(job.run_dir), Path(job.target_file), job.data_sha256)
    # another order, and a new target put first: everyone keeps their own folder, the new one a free one
    again = {Path(j.target_file): j for j in plan_batch([c, b, a], out)}
    assert Path(again[a.resolve()].run_dir).name == "Orrin-1xx-AB"
    assert Path(again[b.resolve()].run_dir).name == "Orrin-1xx-AB-2"
    assert Path(again[c.resolve()].run_dir).name == "Orrin-1xx-AB-3"
    assert run_state(again[a.resolve()]) == run_state(again[b.resolve()]) == RUN_MATCHES
    assert run_state(again[c.resolve()]) == RUN_UNFINISHED
    # the same folder seen by another target's job: never its run
    assert run_state(replace(again[c.resolve()], run_dir=again[a.resolve()].run_dir)) == RUN_OTHER_TARGET
    # the target's table changed: same file, other contents -> stale (refit)
    table = a.parent / "positions.csv"
    table.write_text(table.read_text(encoding="utf-8") + "\n", encoding="utf-8")
    assert run_state(plan_batch([a], out)[0]) == RUN_STALE
    # an unreadable summary.json (or a JSON list) counts as unfinished: it is fitted again
    (Path(first[1].run_dir) / "summary.json").write_text("[1, 2]", encoding="utf-8")
    assert run_state(plan_batch([b], out)[0]) == RUN_UNFINISHED


def test_batch_out_is_a_file_gives_one_line_and_exit_code_2(sample, tmp_path, capsys):
    from orbitmass.cli import main

    out = tmp_path / "not-a-folder"
    out.write_text("the user's notes", encoding="utf-8")
    before = hashlib.sha256(out.read_bytes()).hexdigest()
    capsys.readouterr()
    assert main(["batch", str(sample["good"][0]), "--out", str(out), "--workers", "1"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("orbitmass: error:") and "not a folder" in err[0]
    assert hashlib.sha256(out.read_bytes()).hexdigest() == before  # untouched


@pytest.mark.slow
def test_rerun_in_another_order_or_with_a_target_added_never_mixes_runs(client, tmp_path):
    a, b, c = _same_name_targets(tmp_path / "data", 3)
    out = tmp_path / "out"
    kw = {"client": client, "seed": 2, "fit_options": FIT, "products": False, "progress": False}
    first = fit_batch([a, b], out, **kw).set_index("target_file")
    assert not first["skipped"].any()
    runs = _checksums(out / "runs")
    # another order and one more target (same name): the new one is fitted into a new folder, the
    # others are kept untouched and each row is its own target's run
    second = fit_batch([c, b, a], out, **kw).set_index("target_file")
    for path in (a, b):
        row = second.loc[str(path.resolve())]
        assert row["skipped"] and row["run_dir"] == first.loc[str(path.resolve())]["run_dir"]
        assert _summary(row["run_dir"])["provenance"]["target_file"] == str(path.resolve())
        assert row["mass_msun_median"] == first.loc[str(path.resolve())]["mass_msun_median"]
    new = second.loc[str(c.resolve())]
    assert not new["skipped"] and new["status"] == STATUS_NOT_CONVERGED
    assert _summary(new["run_dir"])["provenance"]["target_file"] == str(c.resolve())
    after = _checksums(out / "runs")
    assert {k: v for k, v in after.items() if k in runs} == runs  # nothing of the first runs rewritten
    # a run whose summary.json is unreadable is fitted again (and only that one)
    broken = Path(first.loc[str(a.resolve())]["run_dir"])
    (broken / "summary.json").write_text("{half a file", encoding="utf-8")
    untouched = {k: v for k, v in after.items() if not k.startswith(broken.name + "/")}
    third = fit_batch([a, b, c], out, **kw).set_index("target_file")
    assert not third.loc[str(a.resolve())]["skipped"] and third.loc[str(a.resolve())]["status"] != STATUS_FAILED
    assert _summary(str(broken))["provenance"]["target_file"] == str(a.resolve())
    assert third.loc[str(b.resolve())]["skipped"] and third.loc[str(c.resolve())]["skipped"]
    now = _checksums(out / "runs")
    assert {k: v for k, v in now.items() if k in untouched} == untouched


@pytest.mark.slow
def test_target_timeout_records_failure_and_frees_the_worker(sample, client, tmp_path):
    import time

    endless = {"max_steps": 10**6, "min_steps": 10**6, "linear": False}  # would run for many minutes
    t0 = time.monotonic()
    cat = fit_batch(sample["good"], tmp_path / "slow", client=client, fit_options=endless, products=False,
                    progress=False, timeout=6.0)
    elapsed = time.monotonic() - t0
    # 3 targets on 2 workers, each stopped at 6 s: two rounds, not minutes
    assert elapsed < 60
    assert (cat["status"] == STATUS_FAILED).all() and (cat["reason"] == "timeout").all()
    assert cat["error"].str.startswith("timeout:").all()
    runs = tmp_path / "slow" / "runs"
    assert not any(is_complete_run(Path(d)) for d in cat["run_dir"])
    assert not [p for p in runs.iterdir() if ".staging-" in p.name]  # no half-written folder left
    # the workers are free: a normal batch on the same client runs at once
    quick = fit_batch(sample["good"][:2], tmp_path / "quick", client=client, fit_options=FIT, products=False,
                      progress=False, timeout=120.0)
    assert (quick["status"] == STATUS_NOT_CONVERGED).all()
    assert quick["reason"].isna().all()
    with pytest.raises(InputError) as err:
        plan_batch(sample["good"], tmp_path / "x", timeout=0)
    assert err.value.key == "timeout"


@pytest.mark.slow
def test_ctrl_c_on_a_batch_exits_130_with_one_line(sample, tmp_path):
    import signal
    import subprocess
    import threading
    import time

    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "orbitmass", "batch", sample["glob"], "--out", str(out), "--workers", "1",
           "--max-steps", "1000000", "--no-fast-path", "--no-figures", "--no-progress"]
    # a terminal's Ctrl-C reaches the whole process group: the command, its scheduler and its workers
    with subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                          start_new_session=True) as proc:
        lines: list[str] = []
        reader = threading.Thread(target=lambda: lines.extend(proc.stderr), daemon=True)
        reader.start()
        t0 = time.monotonic()
        while not any("dask dashboard" in line for line in lines) and time.monotonic() - t0 < 120:
            time.sleep(0.2)
        time.sleep(3.0)  # the first fit is running
        os.killpg(proc.pid, signal.SIGINT)
        assert proc.wait(timeout=120) == 130
        reader.join(10)
    err = "".join(lines)
    assert "Traceback" not in err and "CommClosedError" not in err, err
    ours = [line for line in lines if line.startswith("orbitmass:")]
    assert len(ours) == 1 and "interrupted" in ours[0]
    assert [line for line in lines if "dask dashboard" not in line] == ours  # nothing else on stderr
    cat = pd.read_csv(out / "catalogue.csv")
    assert (cat["reason"] == "interrupted").any()


# ------------------------------------------------------------------ [fit] table, goodness of fit, notes (no dask)
def _with_fit_table(path: Path, table: str) -> Path:
    path.write_text(path.read_text(encoding="utf-8") + "\n[fit]\n" + table, encoding="utf-8")
    return path


def test_fit_table_applies_where_the_batch_gives_nothing(tmp_path):
    from orbitmass.io.target import read_target

    (target,) = write_example_sample(tmp_path / "data", 1, seed=5)
    _with_fit_table(target, "walkers = 24\nseed = 7\nmax_steps = 60\n")
    name = read_target(target).name
    # batch seed and step cap not given: the target's [fit] table decides
    (job,) = plan_batch([target], tmp_path / "a", seed=None, fit_options={"linear": False}, products=False)
    row = fit_target(job)
    s = _summary(job.run_dir)
    assert row["seed"] == 7 == s["provenance"]["seed"]
    assert s["diagnostics"]["n_walkers"] == 24 and s["diagnostics"]["n_steps"] == 60
    # given, the batch options override it (the seed derived from the batch seed and the name)
    (job,) = plan_batch([target], tmp_path / "b", seed=3, fit_options={"linear": False, "max_steps": 50},
                        products=False)
    row = fit_target(job)
    s = _summary(job.run_dir)
    assert row["seed"] == target_seed(3, name) == s["provenance"]["seed"]
    assert s["diagnostics"]["n_steps"] == 50 and s["diagnostics"]["n_walkers"] == 24


def test_cli_batch_defaults_are_none_so_the_table_can_apply():
    parser = argparse.ArgumentParser()
    add_batch_parser(parser.add_subparsers())
    args = parser.parse_args(["batch", "t.toml", "--out", "o"])
    assert args.seed is None and args.walkers is None and args.max_steps is None


def test_catalogue_has_fit_status_beside_convergence():
    from orbitmass.batch import catalogue_frame, catalogue_row
    from orbitmass.batch.plan import BatchJob

    job = BatchJob(name="Vell 9 AB", target_file="/x/t.toml", run_dir="/x/runs/v", seed=1)
    summ = {"diagnostics": {"converged": True}, "fit_quality": {"status": "poor"}, "provenance": {"seed": 1}}
    poor = catalogue_row(job, summ)
    ok = catalogue_row(job, {**summ, "fit_quality": {"status": "ok"}, "diagnostics": {"converged": False}})
    assert poor["status"] == "converged, poor fit" and poor["fit_status"] == "poor"
    assert ok["status"] == STATUS_NOT_CONVERGED and ok["fit_status"] == "ok"
    frame = catalogue_frame([poor, ok])
    cols = list(frame.columns)
    assert cols.index("fit_status") == cols.index("converged") + 1
    assert list(frame["fit_status"]) == ["poor", "ok"]


def test_a_poor_fit_is_marked_in_the_catalogue(tmp_path, rng):
    from tests.helpers.targets import write_target

    path, _ = write_target(tmp_path / "in", rng, err_scale=1e-3)  # errors 1000x too small (issue 11)
    (job,) = plan_batch([path], tmp_path / "out", seed=1, fit_options={"max_steps": 200}, products=False)
    row = fit_target(job)
    assert row["fit_status"] == "poor" and row["status"].endswith(", poor fit")
    assert _summary(job.run_dir)["fit_quality"]["status"] == "poor"


def test_run_saved_but_figures_failed_is_done_with_a_note(tmp_path, monkeypatch):
    (target,) = write_example_sample(tmp_path / "data", 1, seed=5)

    def broken(*a, **k):
        raise ValueError("simulated plotting failure")

    monkeypatch.setattr("orbitmass.outputs.figures.corner.corner_figure", broken)
    (job,) = plan_batch([target], tmp_path / "out", seed=1, fit_options={"max_steps": 60, "linear": False})
    row = fit_target(job)
    assert row["status"] != STATUS_FAILED and row["error"] is None
    assert "figures and reports not written" in row["note"] and "simulated plotting failure" in row["note"]
    assert is_complete_run(Path(job.run_dir))


def test_target_name_ignores_a_byte_order_mark(tmp_path):
    from orbitmass.batch.plan import target_name

    plain, bom = tmp_path / "a.toml", tmp_path / "b.toml"
    plain.write_text('[target]\nname = "Kesh 4 AB"\n', encoding="utf-8")
    bom.write_bytes(b"\xef\xbb\xbf" + plain.read_bytes())  # UTF-8 BOM (Unicode 15, Sect. 23.8)
    assert target_name(plain) == target_name(bom) == "Kesh 4 AB"
    assert target_seed(0, target_name(plain)) == target_seed(0, target_name(bom))


@pytest.mark.parametrize("flag, value", [("--walkers", "1000001"), ("--max-steps", "1")])
def test_batch_option_ranges_are_one_line_before_any_work(tmp_path, capsys, flag, value):
    from orbitmass.cli import main

    assert main(["batch", str(tmp_path / "t.toml"), "--out", str(tmp_path / "o"), flag, value]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("orbitmass: error:") and f"'{flag}'" in err[0]
    assert not (tmp_path / "o").exists()
