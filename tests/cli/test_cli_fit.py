"""``orbitmass fit`` and ``orbitmass report`` as a user runs them: bad output places, bad options,
the ``[fit]`` table, the console summary, and a bad fit that is never silent.

Data-loss probes check every file of the user by SHA-256 (hashlib, FIPS 180-4) before and
after: a refused command changes nothing. "Before sampling" is checked by replacing the Fit
class of the command with one that fails when it is made. The three broken inputs are those
of issue 11 (errors 1000x too small, an unmodelled 60 km/s velocity zero point with the
systemic velocity fixed, a missing second companion); their data come from the independent
simulator of orbitmass.demo.simulate through the builders of tests/helpers/targets.py.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
from pathlib import Path

import numpy as np
import pytest

from orbitmass.cli import build_parser, main
from orbitmass.demo.simulate import TrueOrbit
from orbitmass.io.rundir import prepare_run_folder
from orbitmass.outputs.formatting import summary_text

from tests.helpers.targets import FIXED_SYSTEMIC, make_target, write_target

TRUTH = TrueOrbit(mass_msun=1.9, distance_pc=20.0, period_yr=12.0, eccentricity=0.3, inclination_deg=60.0,
                  arg_periastron_deg=40.0, ascending_node_deg=100.0, periastron_time=2010.0)
PARALLAX = 'parallax = { dist = "normal", mean = "50 mas", sd = "1 mas" }'


def tree_digest(folder: Path) -> dict[str, str]:
    """SHA-256 of every file below ``folder`` (relative path -> hex digest)."""
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.fixture
def target(tmp_path, rng):
    t = np.sort(rng.uniform(2000, 2024, 16))
    return make_target(tmp_path / "data", TRUTH, rng=rng, t_pos=t, pos_err=3.0, distance_toml=PARALLAX)


@pytest.fixture
def no_sampling(monkeypatch):
    class NoFit:
        def __init__(self, *a, **k):
            raise AssertionError("the fit started before the output place was checked")

    monkeypatch.setattr("orbitmass.cli.fit.Fit", NoFit)


def one_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert err[0].startswith("orbitmass: error:") and "Traceback" not in err[0]
    return err[0]


def read_only(monkeypatch, folder: Path) -> None:
    """Make ``folder`` refuse new files as a read-only mount does (EROFS, POSIX open(2)), also for root."""
    real_open = os.open

    def fake_open(path, *args, **kwargs):
        if Path(path).parent == folder and ("write-probe" in str(path) or (args and args[0] & os.O_CREAT)):
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(path))
        return real_open(path, *args, **kwargs)

    monkeypatch.setattr("orbitmass._atomic.os.open", fake_open)


# ------------------------------------------------------------------ bad --out, before any sampling
def test_out_under_a_file(target, tmp_path, capsys, no_sampling):
    a_file = tmp_path / "notes.txt"
    a_file.write_text("my notes", encoding="utf-8")
    before = tree_digest(tmp_path)
    assert main(["fit", str(target), "--out", str(a_file / "run")]) == 2
    assert "is a file, not a folder" in one_line(capsys)
    assert main(["fit", str(target), "--out", str(a_file), "--overwrite"]) == 2
    assert "exists and is not a folder" in one_line(capsys)
    assert tree_digest(tmp_path) == before


def test_out_in_a_read_only_parent_and_a_read_only_folder(target, tmp_path, capsys, no_sampling, monkeypatch):
    parent = tmp_path / "ro"
    parent.mkdir()
    (parent / "kept.txt").write_text("mine", encoding="utf-8")
    before = tree_digest(tmp_path)
    read_only(monkeypatch, parent)
    assert main(["fit", str(target), "--out", str(parent / "run")]) == 2
    assert "read-only file system" in one_line(capsys)
    empty = tmp_path / "ro-empty"
    empty.mkdir()
    read_only(monkeypatch, empty)
    assert main(["fit", str(target), "--out", str(empty)]) == 2
    assert "read-only file system" in one_line(capsys)
    assert tree_digest(tmp_path) == before and not (parent / "run").exists()


def test_out_is_a_fifo(target, tmp_path, capsys, no_sampling):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    assert main(["fit", str(target), "--out", str(fifo)]) == 2  # never opened, so it cannot block
    assert "exists and is not a folder" in one_line(capsys)


@pytest.mark.parametrize("overwrite", [False, True])
def test_out_is_the_targets_folder(target, capsys, no_sampling, overwrite):
    before = tree_digest(target.parent)
    argv = ["fit", str(target), "--out", str(target.parent)] + (["--overwrite"] if overwrite else [])
    assert main(argv) == 2
    line = one_line(capsys)
    assert ("an input of this job" in line) or ("not empty" in line)
    assert tree_digest(target.parent) == before


def test_second_fit_into_the_same_out_is_refused(target, tmp_path, capsys, no_sampling):
    out = tmp_path / "run"
    with prepare_run_folder(out):  # a first fit holds the folder
        assert main(["fit", str(target), "--out", str(out)]) == 2
        assert "another orbitmass process" in one_line(capsys)
        assert main(["fit", str(target), "--out", str(out), "--overwrite"]) == 2
        assert "another orbitmass process" in one_line(capsys)


def test_a_finished_run_is_replaced_only_with_the_flag_named(target, tmp_path, capsys, no_sampling):
    out = tmp_path / "run"
    with prepare_run_folder(out):
        (out / "summary.json").write_text("{}", encoding="utf-8")
    before = tree_digest(out)
    assert main(["fit", str(target), "--out", str(out)]) == 2
    line = one_line(capsys)
    assert "pass --overwrite" in line and "(overwrite" not in line and "pass overwrite" not in line
    assert tree_digest(out) == before


# ------------------------------------------------------------------ bad options: one line, exit 2
@pytest.mark.parametrize("argv, words", [
    (["--max-steps", "1"], ["'--max-steps'", "from 10 to 100000000", "got 1"]),
    (["--walkers", "1000001"], ["'--walkers'", "from 2 to 100000"]),
    (["--walkers", "3"], ["'--walkers'", "3 walkers are too few", "use at least"]),
    (["--units", "distance_pc=parsec"], ["'--units'", "distance_pc cannot be shown in 'parsec'"]),
    (["--units", "speed"], ["'--units'", "QUANTITY=UNIT"]),
    (["--params", ","], ["'--params'", "separated by commas"]),
])
def test_bad_options_are_one_line(target, tmp_path, capsys, argv, words):
    out = tmp_path / "run"
    assert main(["fit", str(target), "--out", str(out), "--no-progress", *argv]) == 2
    line = one_line(capsys)
    for w in words:
        assert w in line
    assert not out.exists()  # nothing left behind


def test_garbled_checkpoint_on_resume_is_one_line(target, tmp_path, capsys):
    out = tmp_path / "run"
    with prepare_run_folder(out):
        (out / "checkpoint.h5").write_bytes(b"\x89HDF\r\n\x1a\n" + os.urandom(200))  # HDF5 signature, then junk
    before = tree_digest(out)
    assert main(["fit", str(target), "--out", str(out), "--resume", "--no-progress", "--no-fast-path"]) == 2
    line = one_line(capsys)
    assert str(out / "checkpoint.h5") in line and "not a readable orbitmass checkpoint" in line
    assert tree_digest(out) == before


def test_seed_help_says_what_happens_without_it(capsys):
    with pytest.raises(SystemExit):
        build_parser().parse_args(["fit", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "a random seed is drawn and recorded in summary.json under provenance.seed" in text
    assert "[fit] table" in text and "overrides the table" in text


# ------------------------------------------------------------------ the [fit] table and the flags
def _quick_save(monkeypatch):
    """Skip the figures of these runs (they are not what is tested; keeps each fit ~2 s)."""
    from orbitmass.io import rundir

    real = rundir.save_run
    monkeypatch.setattr("orbitmass.cli.fit.save_run", lambda *a, **k: real(*a, **{**k, "products": False}))


def _summary(out: Path) -> dict:
    return json.loads((out / "summary.json").read_text(encoding="utf-8"))


def test_fit_table_is_honoured_and_flags_override_it(target, tmp_path, capsys, monkeypatch):
    _quick_save(monkeypatch)
    target.write_text(target.read_text(encoding="utf-8") + "\n[fit]\nwalkers = 24\nseed = 7\nmax_steps = 60\n",
                      encoding="utf-8")
    a = tmp_path / "from-table"
    assert main(["fit", str(target), "--out", str(a), "--no-progress", "--no-fast-path"]) in (0, 1)
    s = _summary(a)
    assert s["provenance"]["seed"] == 7
    assert s["diagnostics"]["n_walkers"] == 24 and s["diagnostics"]["n_steps"] == 60
    b = tmp_path / "from-flags"
    assert main(["fit", str(target), "--out", str(b), "--no-progress", "--no-fast-path", "--seed", "8",
                 "--walkers", "32", "--max-steps", "80"]) in (0, 1)
    s = _summary(b)
    assert s["provenance"]["seed"] == 8
    assert s["diagnostics"]["n_walkers"] == 32 and s["diagnostics"]["n_steps"] == 80
    # one flag given: only that one overrides
    c = tmp_path / "one-flag"
    assert main(["fit", str(target), "--out", str(c), "--no-progress", "--no-fast-path", "--max-steps", "70"]) in (0, 1)
    s = _summary(c)
    assert s["provenance"]["seed"] == 7 and s["diagnostics"]["n_walkers"] == 24 and s["diagnostics"]["n_steps"] == 70
    capsys.readouterr()


def test_no_seed_anywhere_draws_one_and_records_it(target, tmp_path, capsys, monkeypatch):
    _quick_save(monkeypatch)
    target.write_text(target.read_text(encoding="utf-8") + "\n[fit]\nmax_steps = 40\nwalkers = 20\n",
                      encoding="utf-8")
    seeds = []
    for k in range(2):
        out = tmp_path / f"run{k}"
        assert main(["fit", str(target), "--out", str(out), "--no-progress", "--no-fast-path"]) in (0, 1)
        seeds.append(_summary(out)["provenance"]["seed"])
    assert all(isinstance(s, int) and s >= 0 for s in seeds)
    assert seeds[0] != seeds[1]  # drawn from the OS entropy: equal with probability 2**-31
    capsys.readouterr()


def test_a_walkers_count_from_the_table_that_is_too_small_names_the_key(target, tmp_path, capsys):
    target.write_text(target.read_text(encoding="utf-8") + "\n[fit]\nwalkers = 4\n", encoding="utf-8")
    assert main(["fit", str(target), "--out", str(tmp_path / "run"), "--no-fast-path"]) == 2
    line = one_line(capsys)
    assert str(target) in line and "'fit.walkers'" in line and "4 walkers are too few" in line


# ------------------------------------------------------------------ console summary, --params, --units
@pytest.mark.slow  # a fit and the figures of `report` (~18 s on a shared machine)
def test_console_summary_params_and_units(target, tmp_path, capsys, monkeypatch):
    _quick_save(monkeypatch)  # the figures are drawn below by `report`
    out = tmp_path / "run"
    code = main(["fit", str(target), "--out", str(out), "--no-progress", "--no-fast-path", "--seed", "3",
                 "--max-steps", "200", "--walkers", "24", "--units", "distance_pc=kpc"])
    assert code in (0, 1)
    std = capsys.readouterr()
    s = _summary(out)
    mass = summary_text("mass_msun", s["derived"]["mass_msun"], companions=["S1"])
    dist = summary_text("distance_pc", s["derived"]["distance_pc"], companions=["S1"], unit="kpc")
    assert f"total mass: {mass}" in std.out and f"distance:   {dist}" in std.out and dist.endswith(" kpc")
    assert "+0 " not in std.out and "-0 " not in std.out
    # goodness of fit: one line, on stdout when ok, the warning block on stderr when poor
    assert ("fit quality: ok" in std.out) != ("WARNING: poor fit" in std.err)
    # no Python warning machinery on the console: orbitmass's warnings once each, as plain lines
    assert "Warning:" not in std.err and "warnings.warn" not in std.err
    assert std.err.count("sampling not converged") <= 1
    # report with --params: the table lists only those quantities
    assert main(["report", str(out), "--params", "mass_msun,distance_pc", "--units", "distance_pc=pc"]) == 0
    assert (out / "residuals.png").is_file() and (out / "residuals.pdf").is_file()
    table = (out / "table.csv").read_text(encoding="utf-8")
    assert "mass_msun" in table and "distance_pc" in table and "S1.period_yr" not in table
    assert main(["report", str(out), "--params", "nonsense_col"]) == 2
    assert "nonsense_col" in one_line(capsys)


# ------------------------------------------------------------------ a bad fit is never silent (issue 11)
BROKEN = {
    "errors 1000x too small": (dict(err_scale=1e-3), ["B positions", "unit of the error column"]),
    "60 km/s zero point, systemic fixed": (dict(rv_shift=60.0, extra=FIXED_SYSTEMIC),
                                            ["B velocities", "systemic velocity is fixed"]),
    "missing second companion": (dict(n_pos=80, n_rv=0, pos_err=0.2, wobble_mas=3.0),
                                 ["B positions", "second companion"]),
}


@pytest.mark.parametrize("case", [pytest.param("errors 1000x too small"),
                                  pytest.param("60 km/s zero point, systemic fixed", marks=pytest.mark.slow),
                                  pytest.param("missing second companion", marks=pytest.mark.slow)])
def test_broken_inputs_warn_in_cli_report_and_summary(case, tmp_path, rng, capsys):
    kwargs, words = BROKEN[case]
    path, _ = write_target(tmp_path / "in", rng, **kwargs)
    out = tmp_path / "run"
    code = main(["fit", str(path), "--out", str(out), "--no-progress", "--seed", "1", "--max-steps", "300"])
    assert code in (0, 1)  # sampling convergence is a separate statement
    std = capsys.readouterr()
    err = std.err
    assert "WARNING: poor fit" in err and "fit quality: ok" not in std.out
    for w in words:
        assert w in err, (w, err)
    assert "likely cause:" in err
    assert "PoorFitWarning" not in err and "warnings.warn" not in err  # printed once, cleanly
    # summary.json: the status says so; diagnostics.converged stays about sampling
    s = _summary(out)
    assert s["fit_quality"]["status"] == "poor"
    assert isinstance(s["diagnostics"]["converged"], bool)
    # report.md and report.html: the warning comes first, before any number
    md = (out / "report.md").read_text(encoding="utf-8").splitlines()
    assert md[0].startswith("# orbitmass report")
    first = next(line for line in md[1:] if line.strip())
    assert first.startswith("> **WARNING:** POOR FIT")
    assert "## Goodness of fit" in md
    html = (out / "report.html").read_text(encoding="utf-8")
    assert html.index("POOR FIT") < html.index("Job: fit of the target file")
    assert (out / "residuals.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)


def test_figures_failing_after_the_run_is_saved_still_show_the_numbers(target, tmp_path, capsys, monkeypatch):
    def broken(*a, **k):
        raise ValueError("simulated plotting failure")

    monkeypatch.setattr("orbitmass.outputs.figures.corner.corner_figure", broken)
    out = tmp_path / "run"
    argv = ["fit", str(target), "--no-progress", "--no-fast-path", "--seed", "3", "--max-steps", "60",
            "--walkers", "24"]
    assert main([*argv, "--out", str(out)]) == 2
    std = capsys.readouterr()
    assert "total mass:" in std.out and "fit quality:" in std.out + std.err  # the numbers are not lost
    last = std.err.strip().splitlines()[-1]
    assert last.startswith("orbitmass: error:") and "the run is saved" in last and "simulated plotting" in last
    assert _summary(out)["provenance"]["seed"] == 3  # published
    # an unknown --params column: the same, named
    monkeypatch.undo()
    out2 = tmp_path / "run2"
    assert main([*argv, "--out", str(out2), "--params", "mass_msun,no_such_column"]) == 2
    last = capsys.readouterr().err.strip().splitlines()[-1]
    assert "no_such_column" in last and "the run is saved" in last and "orbitmass report" in last
    assert (out2 / "summary.json").is_file()
