"""Regenerate the two figures of docs/forecast.md from the current code.

The invented star KV-7 around an invented black hole: positions over 2013-2025
and velocities over 2016-2025, its periastron (2029.0) not yet seen. The data
are simulated with :func:`orbitmass.demo.simulate.simulate` plus Gaussian
noise (fixed seed), fitted with ``orbitmass fit``, then ``orbitmass predict``
and ``orbitmass plan`` run on the run folder, exactly as a user would::

    python docs/forecast_figures.py [--keep DIR]

It writes ``docs/img/forecast-predictions.png`` and ``docs/img/forecast-plan.png``.
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from orbitmass.cli.main import main as orbitmass_main  # noqa: E402
from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv, write_velocities_csv  # noqa: E402

#: KV-7 (invented): 3.2e6 Msun at 7.6 kpc, 24-yr orbit, e = 0.72, periastron at 2029.0.
KV7 = TrueOrbit(mass_msun=3.2e6, distance_pc=7600.0, period_yr=24.0, eccentricity=0.72, inclination_deg=118.0,
                arg_periastron_deg=64.0, ascending_node_deg=212.0, periastron_time=2029.0)

TARGET = """\
[target]
name = "KV-7 (invented)"
reference_epoch = 2020.0

[central]
mass = { dist = "log-uniform", low = "1e5 solMass", high = "1e8 solMass" }

[distance]
prior = { dist = "normal", mean = "7.6 kpc", sd = "0.4 kpc" }

[[companion]]
name = "KV-7"
astrometry = "kv7_positions.csv"
velocities = "kv7_velocities.csv"
period = { dist = "log-uniform", low = "5 yr", high = "200 yr" }
"""


def write_kv7(folder: Path, seed: int = 7) -> Path:
    """Write KV-7's target file and tables (0.5 mas and 15 km/s errors) into ``folder``."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    t_pos = np.sort(rng.uniform(2013.0, 2025.0, 24))
    t_rv = np.sort(rng.uniform(2016.0, 2025.0, 12))
    sky, vel = simulate(KV7, t_pos), simulate(KV7, t_rv)
    write_positions_csv(folder / "kv7_positions.csv", t_pos, sky["east_mas"] + rng.normal(0, 0.5, t_pos.size),
                        sky["north_mas"] + rng.normal(0, 0.5, t_pos.size), 0.5,
                        comment="invented star KV-7, simulated for the forecast documentation")
    write_velocities_csv(folder / "kv7_velocities.csv", t_rv,
                         vel["rv_companion_kms"] + rng.normal(0, 15.0, t_rv.size), 15.0,
                         comment="invented star KV-7, simulated for the forecast documentation")
    path = folder / "target.toml"
    path.write_text(TARGET, encoding="utf-8")
    return path


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--keep", default=None, help="keep the run, prediction and plan folders here (a new folder)")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="orbitmass-forecast-doc-") as tmp:
        work = Path(args.keep) if args.keep else Path(tmp)
        target = write_kv7(work / "data")
        steps = [
            ["fit", str(target), "--out", str(work / "run"), "--seed", "1", "--no-progress"],
            ["predict", str(work / "run"), "--from", "2025", "--to", "2040", "--step", "0.05",
             "--out", str(work / "predict"), "--seed", "1"],
            ["plan", str(work / "run"), "--window", "2026", "2034", "--cadence", "0.1",
             "--precision", "0.5 mas", "--velocity-precision", "15 km/s", "--max-epochs", "3",
             "--out", str(work / "plan"), "--seed", "1"],
        ]
        for cmd in steps:
            code = orbitmass_main(cmd)
            if code not in (0,):
                sys.stderr.write(f"orbitmass {cmd[0]} exited with {code}; figures not replaced\n")
                return 1
        img = ROOT / "docs" / "img"
        shutil.copyfile(work / "predict" / "predictions.png", img / "forecast-predictions.png")
        shutil.copyfile(work / "plan" / "plan.png", img / "forecast-plan.png")
    sys.stdout.write(f"written: {img / 'forecast-predictions.png'}, {img / 'forecast-plan.png'}\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
