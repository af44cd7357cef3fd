"""Hard cases of the trade: does a default fit find the right orbit and converge?

Each case is an invented system simulated with :mod:`validation.simulator`
(independent of orbitmass) plus Gaussian noise of the stated errors, with a
fixed seed. Every case is fitted with the default settings of
:class:`orbitmass.Fit` (only the seed is given), and the script prints, per
case: initialisation time, total wall time, R-hat, the smallest ESS, whether
the run converged, the goodness-of-fit status, and the fitted total mass
against the truth (inside the central 95 % interval or not); for companions
sampled in their reference state (partial arcs), their names and the R-hat
of the sampled chain.

Run::

    python -m validation.hard_cases                      # every case
    python -m validation.hard_cases --cases ecc88 arc15  # some
    python -m validation.hard_cases --list

It writes ``hard_cases.json`` into ``--out`` (default ``validation/out``).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np

from validation.simulator import Orbit, System, observe, to_polar


@dataclass
class Case:
    name: str
    what: str
    build: Callable[[Path, np.random.Generator], float]  # writes target.toml, returns the true mass


def _write_positions(path: Path, t, east, north, err, rng, polar: bool = False):
    e_obs = east + rng.normal(0, err, len(t))
    n_obs = north + rng.normal(0, err, len(t))
    with open(path, "w", encoding="utf-8") as fh:
        if polar:
            rho, theta, rho_err, theta_err = to_polar(east, north, np.full(len(t), err), np.full(len(t), err))
            rho_obs = rho + rng.normal(0, rho_err)
            th_obs = theta + rng.normal(0, theta_err)
            fh.write("jyear,rho_mas,theta_deg,rho_err_mas,theta_err_deg\n")
            for row in zip(t, rho_obs, th_obs % 360.0, rho_err, theta_err):
                fh.write(",".join(f"{v:.8f}" for v in row) + "\n")
        else:
            fh.write("jyear,east_mas,north_mas,east_err_mas,north_err_mas\n")
            for row in zip(t, e_obs, n_obs):
                fh.write(f"{row[0]:.8f},{row[1]:.8f},{row[2]:.8f},{err},{err}\n")


def _write_velocities(path: Path, t, rv, err, rng, instrument=None, body=None):
    rv_obs = rv + rng.normal(0, err, len(t))
    with open(path, "w", encoding="utf-8") as fh:
        head = "jyear,rv_kms,rv_err_kms" + (",instrument" if instrument is not None else "") + (
            ",body" if body is not None else "")
        fh.write(head + "\n")
        for k in range(len(t)):
            row = f"{t[k]:.8f},{rv_obs[k]:.6f},{err}"
            if instrument is not None:
                row += f",{instrument[k]}"
            if body is not None:
                row += f",{body[k]}"
            fh.write(row + "\n")


def _dense_periastron_times(orb: Orbit, t0: float, t1: float, n: int, rng, frac_near: float = 0.5):
    """Epochs over [t0, t1], a fraction of them within +-0.05 P of each periastron passage."""
    n_near = int(n * frac_near)
    passages = [orb.tp_jyear + k * orb.period_yr for k in range(-20, 20)]
    passages = [p for p in passages if t0 <= p <= t1]
    near = np.concatenate([p + rng.uniform(-0.05, 0.05, n_near // max(len(passages), 1)) * orb.period_yr
                           for p in passages]) if passages else np.array([])
    rest = rng.uniform(t0, t1, n - len(near))
    return np.sort(np.clip(np.concatenate([near, rest]), t0, t1))


def _star_case(ecc: float, n_pos: int, n_rv: int, tag: str):
    def build(d: Path, rng) -> float:
        sysm = System(mass_msun=3.9e6, distance_pc=8100.0,
                      orbits={"HX-1": Orbit(16.0, ecc, 132.0, 68.0, 228.0, 2018.3)})
        orb = sysm.orbits["HX-1"]
        tp = _dense_periastron_times(orb, 1995.0, 2025.0, n_pos, rng)
        tv = _dense_periastron_times(orb, 2000.0, 2025.0, n_rv, rng)
        obs = observe(sysm, "HX-1", tp, tv)
        _write_positions(d / "pos.csv", tp, obs["east_mas"], obs["north_mas"], 0.4, rng)
        _write_velocities(d / "rv.csv", tv, obs["rv_companion_kms"] + 12.0, 10.0, rng)
        (d / "target.toml").write_text(f"""[target]
name = "Hard case {tag}"
reference_epoch = 2010.0
[central]
mass = {{ dist = "log-uniform", low = "1e4 solMass", high = "1e9 solMass" }}
[distance]
prior = {{ dist = "uniform", low = "2 kpc", high = "20 kpc" }}
[[companion]]
name = "HX-1"
astrometry = "pos.csv"
velocities = "rv.csv"
""", encoding="utf-8")
        return sysm.mass_msun
    return build


def _arc_case(frac: float, period: float, polar: bool, tag: str, mass: float = 2.2, n: int = 30):
    def build(d: Path, rng) -> float:
        sysm = System(mass_msun=mass, distance_pc=25.0, orbits={"B": Orbit(period, 0.45, 58.0, 110.0, 35.0, 1995.0)})
        t = np.sort(rng.uniform(2000.0, 2000.0 + frac * period, n))
        obs = observe(sysm, "B", t, t)
        _write_positions(d / "pos.csv", t, obs["east_mas"], obs["north_mas"], 1.0, rng, polar=polar)
        (d / "target.toml").write_text(f"""[target]
name = "Hard case {tag}"
reference_epoch = {2000.0 + 0.5 * frac * period:.3f}
[distance]
parallax = {{ dist = "normal", mean = "40 mas", sd = "0.4 mas" }}
[[companion]]
name = "B"
astrometry = "pos.csv"
period = {{ dist = "log-uniform", low = "1 yr", high = "5000 yr" }}
""", encoding="utf-8")
        return sysm.mass_msun
    return build


def _disk(d: Path, rng) -> float:
    names = ["K1", "K2", "K3", "K4"]
    periods = [1500.0, 1650.0, 1750.0, 1900.0]
    phases = [2000.0 - p * f for p, f in zip(periods, (0.1, 0.35, 0.6, 0.85))]
    sysm = System(mass_msun=2.5e7, distance_pc=7.2e6,
                  orbits={n: Orbit(p, 0.0, 88.0, 0.0, 140.0, tp) for n, p, tp in zip(names, periods, phases)})
    blocks = []
    for n in names:
        t = np.sort(rng.uniform(2010.0, 2022.0, 10))
        obs = observe(sysm, n, t, t)
        _write_positions(d / f"{n}_pos.csv", t, obs["east_mas"], obs["north_mas"], 0.003, rng)
        _write_velocities(d / f"{n}_rv.csv", t, obs["rv_companion_kms"] + 450.0, 2.0, rng)
        blocks.append(f"""[[companion]]
name = "{n}"
plane = "disk"
astrometry = "{n}_pos.csv"
velocities = "{n}_rv.csv"
eccentricity = {{ dist = "fixed", value = 0 }}
period = {{ dist = "log-uniform", low = "10 yr", high = "1e5 yr" }}
""")
    (d / "target.toml").write_text("""[target]
name = "Hard case disk"
reference_epoch = 2016.0
[central]
mass = { dist = "log-uniform", low = "1e5 solMass", high = "1e10 solMass" }
[distance]
prior = { dist = "normal", mean = "7.2 Mpc", sd = "0.5 Mpc" }
""" + "\n".join(blocks), encoding="utf-8")
    return sysm.mass_msun


def _nucleus(d: Path, rng) -> float:
    orbits = {"N1": Orbit(11.0, 0.55, 60.0, 30.0, 100.0, 2012.0), "N2": Orbit(19.0, 0.3, 110.0, 200.0, 40.0, 2005.0),
              "N3": Orbit(27.0, 0.7, 35.0, 300.0, 250.0, 2016.0), "N4": Orbit(45.0, 0.2, 140.0, 90.0, 310.0, 1990.0)}
    frame = {"x0": 0.3, "y0": -0.2, "vx0": 0.05, "vy0": -0.08, "vz0": 6.0}
    sysm = System(mass_msun=4.1e6, distance_pc=8200.0, orbits=orbits, frame=frame, t_ref=2015.0)
    blocks = []
    for n in orbits:
        tp = np.sort(rng.uniform(2000.0, 2026.0, 35))
        tv = np.sort(rng.uniform(2004.0, 2026.0, 15))
        obs = observe(sysm, n, tp, tv, absolute=True)
        _write_positions(d / f"{n}_pos.csv", tp, obs["east_mas"], obs["north_mas"], 0.5, rng)
        _write_velocities(d / f"{n}_rv.csv", tv, obs["rv_companion_kms"], 15.0, rng)
        blocks.append(f'[[companion]]\nname = "{n}"\nastrometry = "{n}_pos.csv"\nvelocities = "{n}_rv.csv"\n'
                      'period = { dist = "log-uniform", low = "1 yr", high = "500 yr" }\n')
    (d / "target.toml").write_text("""[target]
name = "Hard case nucleus"
reference_epoch = 2015.0
[central]
mass = { dist = "log-uniform", low = "1e4 solMass", high = "1e9 solMass" }
frame = "absolute"
x0 = { dist = "normal", mean = "0 mas", sd = "2 mas" }
y0 = { dist = "normal", mean = "0 mas", sd = "2 mas" }
vx0 = { dist = "normal", mean = "0 mas / yr", sd = "0.5 mas / yr" }
vy0 = { dist = "normal", mean = "0 mas / yr", sd = "0.5 mas / yr" }
vz0 = { dist = "normal", mean = "0 km / s", sd = "20 km / s" }
[distance]
prior = { dist = "uniform", low = "2 kpc", high = "20 kpc" }
""" + "\n".join(blocks), encoding="utf-8")
    return sysm.mass_msun


def _double_lined(d: Path, rng) -> float:
    sysm = System(mass_msun=1.65, distance_pc=42.0, orbits={"b": Orbit(3.7, 0.38, 71.0, 250.0, 120.0, 2011.2,
                                                                     mass_ratio=0.62)})
    tv = np.sort(rng.uniform(2008.0, 2022.0, 40))
    body = np.array(["central"] * 30 + ["companion"] * 10)
    rng.shuffle(body)
    obs = observe(sysm, "b", np.sort(rng.uniform(2012.0, 2020.0, 6)), tv)
    rv = np.where(body == "central", obs["rv_central_kms"], obs["rv_companion_kms"]) + 23.0
    tp = np.sort(rng.uniform(2012.0, 2020.0, 6))
    pos = observe(sysm, "b", tp, tp)
    _write_positions(d / "pos.csv", tp, pos["east_mas"], pos["north_mas"], 0.3, rng)
    _write_velocities(d / "rv.csv", tv, rv, 0.4, rng, body=body)
    (d / "target.toml").write_text("""[target]
name = "Hard case double-lined"
reference_epoch = 2015.0
[central]
mass = { dist = "log-uniform", low = "0.1 solMass", high = "20 solMass" }
[distance]
parallax = { dist = "normal", mean = "23.8 mas", sd = "0.5 mas" }
[[companion]]
name = "b"
astrometry = "pos.csv"
velocities = "rv.csv"
period = { dist = "log-uniform", low = "0.1 yr", high = "100 yr" }
""", encoding="utf-8")
    return sysm.mass_msun


def _sparse(d: Path, rng) -> float:
    sysm = System(mass_msun=1.4, distance_pc=30.0, orbits={"c": Orbit(9.0, 0.5, 40.0, 80.0, 200.0, 2013.0)})
    tp = np.sort(rng.uniform(2008.0, 2020.0, 12))
    tv = np.sort(rng.uniform(2008.0, 2020.0, 4))
    obs = observe(sysm, "c", tp, tv)
    _write_positions(d / "pos.csv", tp, obs["east_mas"], obs["north_mas"], 2.0, rng)
    _write_velocities(d / "rv.csv", tv, obs["rv_companion_kms"], 0.5, rng)
    (d / "target.toml").write_text("""[target]
name = "Hard case sparse"
reference_epoch = 2014.0
[central]
mass = { dist = "log-uniform", low = "0.1 solMass", high = "20 solMass" }
[distance]
parallax = { dist = "normal", mean = "33.3 mas", sd = "0.5 mas" }
[[companion]]
name = "c"
astrometry = "pos.csv"
velocities = "rv.csv"
period = { dist = "log-uniform", low = "1 yr", high = "100 yr" }
""", encoding="utf-8")
    return sysm.mass_msun


def _many_epochs(d: Path, rng) -> float:
    sysm = System(mass_msun=1.9, distance_pc=18.0, orbits={"m": Orbit(6.5, 0.3, 63.0, 20.0, 75.0, 2016.0)})
    t = np.sort(rng.uniform(2010.0, 2024.0, 1000))
    obs = observe(sysm, "m", t, t)
    _write_positions(d / "pos.csv", t, obs["east_mas"], obs["north_mas"], 1.5, rng)
    (d / "target.toml").write_text("""[target]
name = "Hard case 1000 epochs"
reference_epoch = 2017.0
[distance]
parallax = { dist = "normal", mean = "55.6 mas", sd = "0.3 mas" }
[[companion]]
name = "m"
astrometry = "pos.csv"
period = { dist = "log-uniform", low = "0.5 yr", high = "200 yr" }
""", encoding="utf-8")
    return sysm.mass_msun


def _velocity_dominated(d: Path, rng) -> float:
    sysm = System(mass_msun=2.8, distance_pc=60.0, orbits={"v": Orbit(2.3, 0.62, 78.0, 140.0, 300.0, 2015.4)})
    tv = np.sort(rng.uniform(2010.0, 2021.0, 80))
    tp = np.sort(rng.uniform(2016.0, 2020.0, 5))
    obs = observe(sysm, "v", tp, tv)
    _write_positions(d / "pos.csv", tp, obs["east_mas"], obs["north_mas"], 0.5, rng)
    _write_velocities(d / "rv.csv", tv, obs["rv_companion_kms"] - 31.0, 0.3, rng)
    (d / "target.toml").write_text("""[target]
name = "Hard case velocity-dominated"
reference_epoch = 2015.0
[central]
mass = { dist = "log-uniform", low = "0.1 solMass", high = "20 solMass" }
[distance]
parallax = { dist = "normal", mean = "16.7 mas", sd = "0.3 mas" }
[[companion]]
name = "v"
astrometry = "pos.csv"
velocities = "rv.csv"
period = { dist = "log-uniform", low = "0.1 yr", high = "100 yr" }
""", encoding="utf-8")
    return sysm.mass_msun


def _two_companions(d: Path, rng) -> float:
    orbits = {"p1": Orbit(7.0, 0.2, 50.0, 10.0, 120.0, 2012.0), "p2": Orbit(31.0, 0.5, 70.0, 250.0, 30.0, 2004.0)}
    sysm = System(mass_msun=3.1, distance_pc=35.0, orbits=orbits)
    blocks = []
    for n in orbits:
        t = np.sort(rng.uniform(2000.0, 2024.0, 30))
        obs = observe(sysm, n, t, t)
        _write_positions(d / f"{n}.csv", t, obs["east_mas"], obs["north_mas"], 1.0, rng)
        blocks.append(f'[[companion]]\nname = "{n}"\nastrometry = "{n}.csv"\n'
                      'period = { dist = "log-uniform", low = "1 yr", high = "300 yr" }\n')
    (d / "target.toml").write_text("""[target]
name = "Hard case two companions"
reference_epoch = 2012.0
[distance]
parallax = { dist = "normal", mean = "28.6 mas", sd = "0.3 mas" }
""" + "\n".join(blocks), encoding="utf-8")
    return sysm.mass_msun


CASES = [
    Case("ecc88", "e = 0.88, P = 16 yr, 130 positions + 120 velocities dense at periastron, wide distance",
         _star_case(0.88, 130, 120, "ecc88")),
    Case("ecc97", "e = 0.97, P = 16 yr, 150 positions + 100 velocities dense at periastron, wide distance",
         _star_case(0.97, 150, 100, "ecc97")),
    Case("arc15", "visual binary, 15 % of a 180-yr orbit, east/north rows", _arc_case(0.15, 180.0, False, "arc15")),
    Case("arc5polar", "5 % of a 300-yr orbit in separation/position-angle rows",
         _arc_case(0.05, 300.0, True, "arc5polar")),
    Case("disk", "four clumps on circular orbits in one edge-on disk, 12 yr of ~1,700-yr orbits", _disk),
    Case("nucleus", "four stars around one black hole on a drifting frame (absolute frame)", _nucleus),
    Case("double", "40 velocities (30 of the central body) and 6 positions of a binary", _double_lined),
    Case("sparse", "12 positions and 4 velocities over 12 yr", _sparse),
    Case("epochs1000", "1,000 astrometric epochs, astrometry only", _many_epochs),
    Case("rvdominated", "80 velocities and 5 positions, e = 0.62", _velocity_dominated),
    Case("twoperiods", "two companions of one central mass, 7 and 31 yr", _two_companions),
    Case("twoorbits", "an orbit seen for two periods, astrometry only", _arc_case(2.0, 12.0, False, "twoorbits",
                                                                              mass=1.3, n=40)),
]


def run_case(case: Case, seed: int, work: Path) -> dict:
    from orbitmass import Fit

    d = work / case.name
    d.mkdir(parents=True, exist_ok=True)
    truth = case.build(d, np.random.default_rng(seed))
    t0 = time.perf_counter()
    fit = Fit(seed=seed).fit(d / "target.toml")
    wall = time.perf_counter() - t0
    s = fit.summary
    diag = s["diagnostics"]
    m = s["derived"]["mass_msun"]
    quality = s.get("fit_quality", {})
    return {
        "case": case.name, "what": case.what, "truth_mass_msun": truth,
        "init_seconds": float(diag.get("wall_seconds", wall) - diag.get("sampling_seconds", 0.0)),
        "wall_seconds": wall, "rhat_max": diag.get("rhat_max"), "ess_min": diag.get("ess_min"),
        "converged": diag.get("converged"), "mass": m,
        "truth_in_95": bool(m["q2.5"] <= truth <= m["q97.5"]),
        "fit_status": quality.get("status", "n/a"), "reduced_chi2": quality.get("reduced_chi2"),
        # companions sampled in their reference state, with R-hat and ESS of that (sampled) chain
        "reference_state": diag.get("reference_state"),
    }


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cases", nargs="*", help="case names (default: all)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--out", default="validation/out")
    ap.add_argument("--list", action="store_true")
    args = ap.parse_args(argv)
    if args.list:
        for c in CASES:
            print(f"{c.name:12s} {c.what}")
        return 0
    chosen = [c for c in CASES if not args.cases or c.name in args.cases]
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for case in chosen:
            row = run_case(case, args.seed, Path(tmp))
            rows.append(row)
            m = row["mass"]
            print(f"{row['case']:12s} init {row['init_seconds']:6.1f} s  wall {row['wall_seconds']:6.1f} s  "
                  f"R-hat {row['rhat_max']:.3f}  ESS {row['ess_min']:7.0f}  converged {row['converged']!s:5s}  "
                  f"fit {row['fit_status']:4s}  M {m['median']:.4g} (+{m['q84'] - m['median']:.2g} "
                  f"-{m['median'] - m['q16']:.2g}) truth {row['truth_mass_msun']:.4g} "
                  f"{'in' if row['truth_in_95'] else 'OUT of'} 95 %"
                  + (f"  [state: {', '.join(row['reference_state']['companions'])}, R-hat "
                     f"{row['reference_state']['rhat_max']:.3f}]" if row["reference_state"] else ""), flush=True)
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    (out / "hard_cases.json").write_text(json.dumps({"seed": args.seed, "cases": rows}, indent=1,
                                                    default=lambda x: None if isinstance(x, float) and
                                                    not math.isfinite(x) else x))
    ok = all(r["converged"] and r["truth_in_95"] for r in rows)
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
