"""``Results.predict`` for posterior draws: the way of the orbit figure before and after the one-engine change.

Side by side in one run, on the invented demo scenario with astrometry and
velocities (``quillon``) and its joint two-companion scenario (absolute frame,
reflex motion):

* ``old``: what the code did at the branch point, reconstructed here
  faithfully (:class:`_OldModel` is a copy of the former
  ``LogPosterior`` construction and ``predict``: data blocks built on every
  call, per-companion orbit parts, its own Kepler anomaly, positions and
  velocity): one call per posterior draw, each building a new model, as the
  orbit figure called ``Results.predict`` once per draw.
* ``new``: one ``Results.predict`` call for all draws (one vectorised
  evaluation through :mod:`orbitmass.core.orbit`, no posterior object).

Both are timed on the same draws and epochs (a sky track of ``n_grid``
epochs, and velocities at the same number of epochs); the largest difference
of their outputs is reported as a check that they compute the same model.

With two checkouts (:func:`side_by_side`, or ``--old-root`` and
``--old-python`` on the command line, or ``python -m benchmarks.side_by_side
--predict ...``) the old side is the real code of the old checkout, run in
its own virtual environment: :mod:`benchmarks.predict_probe` runs in the old
and in the new checkout alternately (old, new, old, new, ...), the new side
on the draws the old side drew, and the table gives, per case, the old code
called once per draw (as its orbit figure did), the old code called once for
all draws, and the new code called once for all draws, in CPU seconds
(``time.process_time``, the steadier figure on a loaded machine) and wall
seconds, with the ratios and the largest relative difference of the two
checkouts' outputs. Usage::

    python -m benchmarks.bench_predict --old-root ../old --old-python ../venv-old/bin/python [--rounds 2]
"""

from __future__ import annotations

import argparse
import json
import math
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

__all__ = ["run", "table", "side_by_side", "side_by_side_table"]

PROBE = Path(__file__).resolve().parent / "predict_probe.py"

TWO_PI = 2.0 * math.pi
LOG_2PI = math.log(2.0 * math.pi)


class _OldAstroBlock:
    """Copy of the former ``likelihood._AstroBlock`` (built on every old call)."""

    def __init__(self, astro):
        self.t = np.asarray(astro.t_yr, dtype=float)
        self.polar = np.asarray(astro.polar, dtype=bool)
        self.any_polar = bool(self.polar.any())
        self.v1 = np.asarray(astro.value1, dtype=float)
        self.v2 = np.asarray(astro.value2, dtype=float)
        s1 = np.asarray(astro.err1, dtype=float)
        s2 = np.asarray(astro.err2, dtype=float)
        rho = np.asarray(astro.corr, dtype=float)
        one_m = 1.0 - rho * rho
        self.w11 = 1.0 / (s1 * s1 * one_m)
        self.w22 = 1.0 / (s2 * s2 * one_m)
        self.w12 = -2.0 * rho / (s1 * s2 * one_m)
        self.const = float(-np.sum(LOG_2PI + np.log(s1 * s2) + 0.5 * np.log(one_m)))


class _OldVelBlock:
    """Copy of the former ``likelihood._VelBlock``."""

    def __init__(self, vel, instrument_names):
        self.t = np.asarray(vel.t_yr, dtype=float)
        self.rv = np.asarray(vel.rv_kms, dtype=float)
        self.var = np.asarray(vel.rv_err_kms, dtype=float) ** 2
        self.central = np.asarray(vel.central, dtype=bool)
        self.companion_rows = ~self.central
        lookup = {n: i for i, n in enumerate(instrument_names)}
        self.inst = np.array([lookup[str(n)] for n in vel.instrument], dtype=int)
        self.used = sorted(set(self.inst.tolist()))


class _OldModel:
    """The former ``LogPosterior`` as far as ``Results.predict`` used it (construction and ``predict``)."""

    def __init__(self, space):
        self.space = space
        self.t_ref = space.t_ref
        self.absolute = space.target.frame == "absolute"
        self.astro, self.vel = {}, {}
        for comp in space.target.companions:
            if comp.astrometry is not None and len(comp.astrometry):
                self.astro[comp.name] = _OldAstroBlock(comp.astrometry)
            if comp.velocities is not None and len(comp.velocities):
                self.vel[comp.name] = _OldVelBlock(comp.velocities, space.instrument_names)
        self.reflex = [lay.name for lay in space.companions if lay.has_q]

    def _orbit_parts(self, phys, name):
        from orbitmass.core.orbit import thiele_innes
        from orbitmass.core.physics import semimajor_axis_au

        period = phys[f"{name}.period_yr"][:, None]
        ecc = phys[f"{name}.ecc"][:, None]
        a_au = semimajor_axis_au(phys["mass_msun"], phys[f"{name}.period_yr"])
        a_mas = a_au / phys["distance_pc"] * 1000.0
        omega, node = phys[f"{name}.omega"], phys[f"{name}.node"]
        A, B, F, G, C, H = thiele_innes(1.0, phys[f"{name}.cos_i"], phys[f"{name}.sin_i"], np.cos(omega),
                                        np.sin(omega), np.cos(node), np.sin(node))
        am, aa = a_mas[:, None], a_au[:, None]
        return {"period": period, "period_obs": phys[f"{name}.period_obs_yr"][:, None], "ecc": ecc,
                "root": np.sqrt(1.0 - ecc * ecc), "m0": phys[f"{name}.m0"][:, None],
                "ti": (am * A[:, None], am * B[:, None], am * F[:, None], am * G[:, None]),
                "ch": (aa * C[:, None], aa * H[:, None]), "t_ref": self.space.t_ref}

    @staticmethod
    def _anomaly(parts, t):
        from orbitmass.core.kepler import kepler_cos_sin

        mean_anom = parts["m0"] + (TWO_PI / parts["period_obs"]) * (t[None, :] - parts["t_ref"])
        return kepler_cos_sin(mean_anom, parts["ecc"])

    @staticmethod
    def _positions(parts, cos_E, sin_E):
        A, B, F, G = parts["ti"]
        X = cos_E - parts["ecc"]
        Y = parts["root"] * sin_E
        return B * X + G * Y, A * X + F * Y

    @staticmethod
    def _velocity(parts, cos_E, sin_E):
        from orbitmass.units import KMS_PER_AU_PER_YR

        C, H = parts["ch"]
        rate = (TWO_PI * KMS_PER_AU_PER_YR / parts["period"]) / (1.0 - parts["ecc"] * cos_E)
        return rate * (H * parts["root"] * cos_E - C * sin_E)

    def predict(self, phys, name, t_astro=None, t_vel=None, central_rows=None):
        all_parts = {c: self._orbit_parts(phys, c) for c in phys["_companions"]}
        parts = all_parts[name]
        out = {}
        n_a = 0 if t_astro is None else len(t_astro)
        n_v = 0 if t_vel is None else len(t_vel)
        if n_a and n_v:
            cE_all, sE_all = self._anomaly(parts, np.concatenate([t_astro, t_vel]))
        elif n_a or n_v:
            cE_all, sE_all = self._anomaly(parts, t_astro if n_a else t_vel)
        if n_a:
            cE, sE = cE_all[:, :n_a], sE_all[:, :n_a]
            east, north = self._positions(parts, cE, sE)
            if self.absolute:
                dt = (t_astro - self.t_ref)[None, :]
                east = east + phys["x0"][:, None] + phys["vx0"][:, None] * dt
                north = north + phys["y0"][:, None] + phys["vy0"][:, None] * dt
                for j in self.reflex:
                    f = (phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"]))[:, None]
                    cj, sj = self._anomaly(all_parts[j], t_astro)
                    ej, nj = self._positions(all_parts[j], cj, sj)
                    east, north = east - f * ej, north - f * nj
            out["east_mas"], out["north_mas"] = east, north
        if n_v:
            cE, sE = cE_all[:, n_a:], sE_all[:, n_a:]
            v_rel = self._velocity(parts, cE, sE)
            comp_mask = np.ones(len(t_vel), bool) if central_rows is None else ~np.asarray(central_rows)
            v = v_rel * comp_mask[None, :]
            for j in self.reflex:
                f = (phys[f"{j}.q"] / (1.0 + phys[f"{j}.q"]))[:, None]
                if j == name:
                    vj = v_rel
                else:
                    cj, sj = self._anomaly(all_parts[j], t_vel)
                    vj = self._velocity(all_parts[j], cj, sj)
                v = v - f * vj
            base = phys["vz0"] if self.absolute else phys["systemic"]
            out["rv_kms"] = v + base[:, None]
        return out


def _old_predict(results, companion, *, t_astro=None, t_vel=None, central=False, rows=None):
    """The former ``Results.predict``: a new model object on every call."""
    theta = results.theta if rows is None else results.theta[rows]
    post = _OldModel(results.space)
    phys = results.space.unpack(theta)
    phys["_companions"] = results.companion_names
    tv = None if t_vel is None else np.asarray(t_vel, float)
    central_rows = None if tv is None else np.full(tv.size, bool(central))
    return post.predict(phys, companion, t_astro=None if t_astro is None else np.asarray(t_astro, float),
                        t_vel=tv, central_rows=central_rows)


def _results(path: Path, n_draws: int, seed: int):
    """A Results holding ``n_draws`` parameter sets near a prior draw (no sampling needed for timing)."""
    from orbitmass.io.target import read_target
    from orbitmass.model.parameters import ParameterSpace
    from orbitmass.results import Results, derive_samples

    space = ParameterSpace(read_target(path))
    rng = np.random.default_rng(seed)
    theta = space.sample_prior(rng, n_draws)
    samples = derive_samples(space, theta)
    return Results(target=space.target, space=space, samples=samples, theta=theta, chain=theta[None],
                   log_prob=np.zeros((1, n_draws)), burn=0, thin=1, summary={})


def _time(fn, repeats: int) -> float:
    best = math.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def run(quick: bool = False, *, n_draws: int = 500, epochs: tuple[int, ...] = (50, 400),
        repeats: int | None = None) -> dict:
    """Time old and new prediction of ``n_draws`` draws on each number of ``epochs``; return the figures.

    50 epochs is the size of a data set (residuals at the data epochs); 400
    is the orbit figure's curve grid (``n_grid``).
    """
    from orbitmass.demo.run import write_scenarios

    repeats = repeats if repeats is not None else (1 if quick else 3)
    out: dict = {"settings": {"n_draws": n_draws, "epochs": list(epochs), "repeats": repeats,
                              "timing": "best of the repeats, wall seconds (time.perf_counter)"}}
    with tempfile.TemporaryDirectory(prefix="orbitmass-bench-predict-") as tmp:
        paths = write_scenarios(Path(tmp))
        for scenario in ("quillon", "quillon-joint"):
            res = _results(paths[scenario], n_draws, seed=5)
            name = res.companion_names[0]
            for n_t in epochs:
                t = np.linspace(res.space.t_ref - 10.0, res.space.t_ref + 10.0, n_t)
                # sky tracks (positions) and velocity curves (positions and velocities)
                for kind, t_vel in (("positions", None), ("positions+velocities", t)):
                    out[f"{scenario}, {n_t} epochs, {kind}"] = {
                        **_measure(res, name, t, t_vel, repeats), "n_epochs": n_t,
                        "n_companions": len(res.companion_names), "frame": res.target.frame}
    ratios = [r["ratio_old_over_new"] for k, r in out.items() if k != "settings"]
    out["targets"] = {"ratio": min(ratios), "ratio_met": bool(min(ratios) >= 10.0)}
    return out


def _measure(res, name, t_astro, t_vel, repeats) -> dict:
    rows = np.arange(len(res.samples))

    def old():
        return [_old_predict(res, name, t_astro=t_astro, t_vel=t_vel, rows=np.array([r])) for r in rows]

    def new():
        return res.predict(name, t_astro=t_astro, t_vel=t_vel, rows=rows)

    t_old, t_new = _time(old, repeats), _time(new, repeats)
    a, b = old(), new()
    diff = max(float(np.max(np.abs(np.concatenate([p[k] for p in a]) - b[k]) / (1.0 + np.abs(b[k]))))
               for k in b)
    return {"seconds_old": t_old, "seconds_new": t_new, "ratio_old_over_new": t_old / t_new, "max_rel_diff": diff}


def table(result: dict) -> str:
    """Printable table of :func:`run`'s figures."""
    st = result["settings"]
    lines = [f"Results.predict, {st['n_draws']} posterior draws, "
             "old (one call per draw, a new model each) vs new (one vectorised call)"]
    for key, r in result.items():
        if key in ("settings", "targets"):
            continue
        lines.append(f"  {key:<48} old {r['seconds_old'] * 1e3:9.1f} ms   new {r['seconds_new'] * 1e3:8.2f} ms   "
                     f"ratio {r['ratio_old_over_new']:7.1f}x   max rel diff {r['max_rel_diff']:.1e}")
    lines.append(f"  target ratio >= 10x in every case: {'met' if result['targets']['ratio_met'] else 'NOT met'} "
                 f"(smallest {result['targets']['ratio']:.1f}x)")
    return "\n".join(lines)


def _probe(python: str, root: Path, n_draws: int, epochs, repeats: int, dump: Path,
           theta_from: Path | None = None) -> dict:
    """Run :mod:`benchmarks.predict_probe` with ``python`` in checkout ``root``; its figures."""
    cmd = [python, str(PROBE), "--draws", str(n_draws), "--epochs", *map(str, epochs),
           "--repeats", str(repeats), "--dump", str(dump)]
    if theta_from is not None:
        cmd += ["--theta-from", str(theta_from)]
    done = subprocess.run(cmd, cwd=root, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"probe failed in {root} ({python}): {done.stderr.strip()[-2000:]}")
    return json.loads(done.stdout)


def _max_rel_diff(a: Path, b: Path) -> dict[str, float]:
    """Largest |new - old| / (1 + |old|) per case over the outputs dumped in ``a`` (new) and ``b`` (old)."""
    out: dict[str, float] = {}
    for f in sorted(a.glob("* epochs, *.npy")):
        case = f.name.rsplit(".", 2)[0]
        x, y = np.load(f), np.load(b / f.name)
        d = float(np.max(np.abs(x - y) / (1.0 + np.abs(y)))) if x.size else 0.0
        out[case] = max(out.get(case, 0.0), d)
    return out


def side_by_side(old_root, old_python: str, new_root=None, new_python: str | None = None, *,
                 n_draws: int = 500, epochs=(50, 400), repeats: int = 3, rounds: int = 2) -> dict:
    """Old and new checkout's ``Results.predict`` on the same draws, run alternately; the figures.

    Per case, medians over ``rounds`` of the best of ``repeats`` calls:
    ``old_per_draw`` (one call per draw), ``old_one_call`` and
    ``new_one_call`` (one call for all draws), as CPU and wall seconds;
    ``ratio_cpu`` / ``ratio_wall`` = old per draw / new one call (the
    figure's way before and after), ``ratio_same_call_cpu`` = old one call /
    new one call; ``max_rel_diff`` between the two checkouts' outputs.
    """
    new_root = Path(new_root or Path(__file__).resolve().parent.parent)
    new_python = new_python or sys.executable
    runs: dict[str, list[dict]] = {"old": [], "new": []}
    diffs: dict[str, float] = {}
    with tempfile.TemporaryDirectory(prefix="orbitmass-predict-sbs-") as tmp:
        for k in range(rounds):
            d_old, d_new = Path(tmp) / f"old{k}", Path(tmp) / f"new{k}"
            runs["old"].append(_probe(old_python, Path(old_root).resolve(), n_draws, epochs, repeats, d_old))
            runs["new"].append(_probe(new_python, new_root.resolve(), n_draws, epochs, repeats, d_new,
                                      theta_from=d_old))
            for case, d in _max_rel_diff(d_new, d_old).items():
                diffs[case] = max(diffs.get(case, 0.0), d)
    cases: dict[str, dict] = {}
    for case in runs["old"][0]:
        def med(side, way, clock, case=case):
            return statistics.median(r[case][way][clock] for r in runs[side])

        row = {f"{side}_{way}_{clock}": med(side, way, clock) for side in ("old", "new")
               for way in ("per_draw", "one_call") for clock in ("cpu", "wall")}
        row["ratio_cpu"] = row["old_per_draw_cpu"] / row["new_one_call_cpu"]
        row["ratio_wall"] = row["old_per_draw_wall"] / row["new_one_call_wall"]
        row["ratio_same_call_cpu"] = row["old_one_call_cpu"] / row["new_one_call_cpu"]
        row["max_rel_diff"] = diffs.get(case, float("nan"))
        cases[case] = row
    worst_cpu = min(r["ratio_cpu"] for r in cases.values())
    worst_wall = min(r["ratio_wall"] for r in cases.values())
    return {"settings": {"n_draws": n_draws, "epochs": list(epochs), "repeats": repeats, "rounds": rounds,
                         "old_root": str(old_root), "new_root": str(new_root)},
            "cases": cases,
            "targets": {"ratio_cpu": worst_cpu, "ratio_wall": worst_wall, "ratio_met": bool(worst_cpu >= 10.0),
                        "max_rel_diff": max(r["max_rel_diff"] for r in cases.values())}}


def side_by_side_table(result: dict) -> str:
    """Printable table of :func:`side_by_side`'s figures."""
    st = result["settings"]
    lines = [f"Results.predict, {st['n_draws']} draws, old checkout ({st['old_root']}) and new ({st['new_root']}) "
             f"run alternately, {st['rounds']} round(s), median of best-of-{st['repeats']}; ms of CPU (wall)",
             f"  {'case':<48} {'old per draw':>17} {'old one call':>15} {'new one call':>15} "
             f"{'old per draw/new':>17} {'old/new one call':>17} {'max rel diff':>12}"]
    for case, r in result["cases"].items():
        lines.append(f"  {case:<48} {r['old_per_draw_cpu'] * 1e3:7.1f} ({r['old_per_draw_wall'] * 1e3:7.1f}) "
                     f"{r['old_one_call_cpu'] * 1e3:6.2f} ({r['old_one_call_wall'] * 1e3:6.2f}) "
                     f"{r['new_one_call_cpu'] * 1e3:6.2f} ({r['new_one_call_wall'] * 1e3:6.2f}) "
                     f"{r['ratio_cpu']:7.1f}x ({r['ratio_wall']:5.1f}x) {r['ratio_same_call_cpu']:8.2f}x        "
                     f"{r['max_rel_diff']:.1e}")
    t = result["targets"]
    lines.append(f"  target old per draw / new >= 10x in every case (CPU): {'met' if t['ratio_met'] else 'NOT met'} "
                 f"(smallest {t['ratio_cpu']:.1f}x CPU, {t['ratio_wall']:.1f}x wall); outputs agree to "
                 f"{t['max_rel_diff']:.1e} (relative)")
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--old-root", type=Path, default=None, help="old checkout (side by side with --old-python)")
    ap.add_argument("--old-python", default=None, help="Python of the old checkout's virtual environment")
    ap.add_argument("--new-root", type=Path, default=None)
    ap.add_argument("--new-python", default=None)
    ap.add_argument("--draws", type=int, default=500)
    ap.add_argument("--epochs", type=int, nargs="+", default=[50, 400])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--rounds", type=int, default=2)
    ap.add_argument("--out", type=Path, default=None, help="write the figures as JSON here")
    args = ap.parse_args(argv)
    if args.old_root is None or args.old_python is None:
        result = run(n_draws=args.draws, epochs=tuple(args.epochs), repeats=args.repeats)
        text = table(result)
    else:
        result = side_by_side(args.old_root, args.old_python, args.new_root, args.new_python, n_draws=args.draws,
                              epochs=tuple(args.epochs), repeats=args.repeats, rounds=args.rounds)
        text = side_by_side_table(result)
    print(text)
    if args.out is not None:
        args.out.write_text(json.dumps(result, indent=1))
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
