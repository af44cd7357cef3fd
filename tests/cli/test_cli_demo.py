"""The command line and the demo, used in-process as a new user would."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from orbitmass import Fit
from orbitmass.cli import build_parser, main
from orbitmass.demo.run import write_scenarios

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"


def test_examples_are_the_demo_data(tmp_path):
    # the committed example files are exactly what the demo writes (seeded), so they never drift
    written = write_scenarios(tmp_path)
    for name, target in written.items():
        for f in target.parent.iterdir():
            assert (EXAMPLES / name / f.name).read_bytes() == f.read_bytes(), f"{name}/{f.name}"


def test_help_lists_every_command(capsys):
    with pytest.raises(SystemExit) as exc:
        build_parser().parse_args(["--help"])
    assert exc.value.code == 0
    out = capsys.readouterr().out
    for cmd in ("fit", "demo", "report", "batch", "compare"):
        assert cmd in out


def test_fit_report_round_trip_cli(tmp_path, capsys):
    out = tmp_path / "run"
    code = main(["fit", str(EXAMPLES / "tessaly" / "target.toml"), "--out", str(out), "--seed", "2",
                 "--max-steps", "400", "--no-progress"])
    assert code in (0, 1)  # 1 = ran but not converged within 400 steps
    summary = json.loads((out / "summary.json").read_text())
    assert summary["target"] == "Tessaly 41 AB"
    assert summary["provenance"]["seed"] == 2
    assert set(summary["derived"]["mass_msun"]) == {"median", "q16", "q84", "q2.5", "q97.5"}
    (out / "corner.png").unlink()
    assert main(["report", str(out)]) == 0
    assert (out / "corner.png").is_file()
    # no overwrite without asking
    assert main(["fit", str(EXAMPLES / "tessaly" / "target.toml"), "--out", str(out)]) == 2
    assert "not empty" in capsys.readouterr().err


def test_same_seed_same_result():
    target = EXAMPLES / "tessaly" / "target.toml"
    a = Fit(seed=9, max_steps=300, min_steps=300, progress=False).fit(target)
    b = Fit(seed=9, max_steps=300, min_steps=300, progress=False).fit(target)
    assert np.array_equal(a.results.chain, b.results.chain)
    assert a.summary["derived"] == b.summary["derived"]


def test_bad_target_gives_one_line(tmp_path, capsys):
    bad = tmp_path / "t.toml"
    bad.write_text('[distance]\nprior = { dist = "normal", mean = 8, sd = "1 kpc" }\n')
    assert main(["fit", str(bad), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("orbitmass: error:") and "distance.prior.mean" in err[0]
    assert not (tmp_path / "o").exists()


def test_every_command_module_has_the_two_functions_and_python_m_works():
    import subprocess
    import sys

    from orbitmass.cli.main import COMMANDS

    # one module per command group, each with add_parser(subparsers) and run(args) -> int
    assert list(COMMANDS) == ["fit", "demo", "report", "compare", "batch", "predict", "plan", "export"]
    for name, module in COMMANDS.items():
        assert callable(module.add_parser) and callable(module.run), name
    # `python -m orbitmass` and `python -m orbitmass.cli` are the same command; usage errors exit 2
    for entry in ("orbitmass", "orbitmass.cli"):
        done = subprocess.run([sys.executable, "-m", entry, "--version"], capture_output=True, text=True, timeout=120)
        assert done.returncode == 0 and done.stdout.startswith("orbitmass ")
    bad = subprocess.run([sys.executable, "-m", "orbitmass", "batch", "x.toml", "--out", "o", "--target-timeout",
                          "-1"], capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and "--target-timeout" in bad.stderr and "Traceback" not in bad.stderr


def test_demo_folder_checks_come_from_the_shared_safe_writing(tmp_path, capsys):
    # orbitmass._atomic.check_output_folder: an earlier demo folder (data/, runs/) may be written
    # over with --overwrite, never one holding a file of the user; nothing is touched when refused
    from orbitmass.demo.run import run_demo
    from orbitmass.exceptions import RunFolderError

    out = tmp_path / "demo"
    (out / "data").mkdir(parents=True)
    (out / "runs").mkdir()
    (out / "thesis.tex").write_text("\\chapter{Orbits}", encoding="utf-8")
    with pytest.raises(RunFolderError, match="thesis.tex"):
        run_demo(out, overwrite=True)
    assert sorted(p.name for p in out.iterdir()) == ["data", "runs", "thesis.tex"]
    (out / "thesis.tex").unlink()
    assert main(["demo", "--out", str(out)]) == 2  # without the flag: the CLI names it
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "pass --overwrite" in err[0]
