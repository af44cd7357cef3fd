"""Run the orbitmass benchmark suite side by side, print a table, write ``results.json``.

Usage::

    python -m benchmarks [--quick] [--out PATH] [--only NAME ...] [--skip NAME ...]
    python benchmarks/run.py [same options]

Sections, run in this order in one process so that machine noise is shared
by each figure and its baseline: ``kepler`` (bench_kepler), ``likelihood``
(bench_likelihood), ``relativity`` (bench_relativity: all model terms against Keplerian),
``predict`` (bench_predict), ``problems`` (bench_problems), ``scaling``
(bench_scaling), ``profile`` (cProfile of one fit), ``demo`` (the demo's
single-companion fits against the 10 s target; full mode only),
``batch`` (bench_batch, when the module exists) and ``rows`` (bench_rows: a
whole astrometry-only fit of 1e3, 1e4 and 1e5 rows, time and memory per stage;
full mode only, as it takes many minutes).

The suite reports and never asserts on timing: it exits 0 whatever the
figures are, and 1 only when a section raised (the error is recorded in
``results.json`` and the other sections still run). The output file is
written atomically (a temporary file in the same folder, then renamed).
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import json
import math
import os
import platform
import subprocess
import sys
import tempfile
import time
import traceback
from pathlib import Path

if __package__ in (None, ""):  # run as a script: make the repository root importable
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

__all__ = ["SECTIONS", "run_suite", "targets", "write_json", "main"]

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE / "results.json"
SECTIONS = ("kepler", "likelihood", "relativity", "predict", "problems", "scaling", "profile", "demo", "batch",
            "rows")
#: Sections left out of ``--quick`` unless named with ``--only`` (each takes minutes).
FULL_ONLY = ("demo", "rows")
DEMO_TARGET_S = 10.0


def _module(name: str):
    """Import ``benchmarks.<name>``; None if the file does not exist."""
    if importlib.util.find_spec(f"benchmarks.{name}") is None:
        return None
    return importlib.import_module(f"benchmarks.{name}")


def _demo_fits(quick: bool) -> dict:
    """Fit the demo's scenarios (seed 1); single-companion fits are compared with the 10 s target."""
    from orbitmass.demo.run import write_scenarios
    from orbitmass.fit import Fit

    out = {}
    with tempfile.TemporaryDirectory(prefix="orbitmass-bench-demo-") as tmp:
        for name, path in write_scenarios(Path(tmp)).items():
            fit = Fit(seed=1, progress=False).fit(path)
            diag = fit.summary["diagnostics"]
            n_comp = len(fit.results.target.companions)
            out[name] = {"wall_seconds": float(diag["wall_seconds"]), "converged": bool(diag["converged"]),
                         "n_steps": int(diag["n_steps"]), "ess_mass": float(diag["ess_mass"]),
                         "n_companions": n_comp,
                         "under_target": bool(diag["converged"] and diag["wall_seconds"] < DEMO_TARGET_S)}
    return {"fits": out, "target_seconds": DEMO_TARGET_S, "quick": quick}


def _demo_table(result: dict) -> str:
    lines = [f"Demo fits (seed 1), target for single-companion fits: converged in under "
             f"{result['target_seconds']:.0f} s"]
    for name, r in result["fits"].items():
        verdict = ("met" if r["under_target"] else "NOT met") if r["n_companions"] == 1 else "no target"
        lines.append(f"  {name:<15} {r['n_companions']} companion(s) {r['wall_seconds']:6.1f} s, {r['n_steps']} "
                     f"steps, converged {'yes' if r['converged'] else 'no'}: {verdict}")
    return "\n".join(lines)


def _profile_table(result: dict) -> str:
    lines = [f"Profile of one orbitmass fit ({result['problem']}, {result['n_steps']} steps, "
             f"{result['total_seconds']:.1f} s under cProfile)",
             "where the time goes (cumulative, all callers; nested lines are parts of the line above):"]
    for label, row in result.get("breakdown", {}).items():
        lines.append(f"  {label:<36} {row['cumtime_s']:>7.2f} s {100 * row['fraction']:>5.1f} %")
    lines.append(f"{'tottime s':>10} {'cumtime s':>10} {'calls':>9}  function")
    for row in result["top"][:15]:
        lines.append(f"{row['tottime_s']:>10.2f} {row['cumtime_s']:>10.2f} {row['calls']:>9d}  {row['function']}")
    return "\n".join(lines)


def _run_section(name: str, quick: bool):
    """(result, table text) of one section; (None, None) when its module is absent."""
    if name == "demo":
        res = _demo_fits(quick)
        return res, _demo_table(res)
    if name == "profile":
        from benchmarks.bench_problems import profile_fit

        res = profile_fit(quick)
        return res, _profile_table(res)
    mod = _module(f"bench_{name}")
    if mod is None:
        return None, None
    res = mod.run(quick)
    table = getattr(mod, "table", None) or getattr(mod, "_table", None)
    return res, (table(res) if table is not None else json.dumps(res, indent=1, default=str)[:4000])


def _git_commit() -> str | None:
    try:
        out = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=HERE, capture_output=True,
                             text=True, timeout=10, check=False)
    except (OSError, subprocess.SubprocessError):
        return None
    return out.stdout.strip() or None


def _loadavg() -> float | None:
    return os.getloadavg()[0] if hasattr(os, "getloadavg") else None


def targets(sections: dict) -> list[dict]:
    """The issue's targets that the sections measured: figure, target, met (bool)."""
    out: list[dict] = []
    kep = sections.get("kepler")
    if isinstance(kep, dict) and "throughput" in kep:
        for row in kep["throughput"]:
            out.append({"figure": f"Kepler solves/s vs vectorised Newton, n={row['n']}",
                        "value": row["speedup_vs_newton"], "target": ">= 5x",
                        "met": bool(row["speedup_vs_newton"] >= 5.0)})
        err = kep["max_error_rad"]["solve_kepler"]
        out.append({"figure": "Kepler max |E - E_mpmath| (rad), e <= 0.99", "value": err, "target": "<= 1e-12",
                    "met": bool(err <= 1e-12)})
    lik = sections.get("likelihood")
    if isinstance(lik, dict) and "targets" in lik:
        t = lik["targets"]
        out.append({"figure": f"model + log-likelihood, us per parameter set ({t['n_epochs']} epochs)",
                    "value": t["us_per_set"], "target": "<= 10", "met": t["us_per_set_met"]})
        out.append({"figure": f"model + log-likelihood, loop / vectorised ({t['n_epochs']} epochs)",
                    "value": t["ratio_loop"], "target": ">= 10x", "met": t["ratio_loop_met"]})
    rel = sections.get("relativity")
    if isinstance(rel, dict) and "ratio" in rel:
        out.append({"figure": f"likelihood, all relativistic terms / Keplerian ({rel['n_epochs']} epochs)",
                    "value": rel["ratio"], "target": "<= 2x", "met": bool(rel["ratio"] <= 2.0)})
    pred = sections.get("predict")
    if isinstance(pred, dict) and "targets" in pred:
        out.append({"figure": "Results.predict, 500 draws, old / new (smallest case)",
                    "value": pred["targets"]["ratio"], "target": ">= 10x", "met": pred["targets"]["ratio_met"]})
    prob = sections.get("problems")
    if isinstance(prob, dict):
        for name, res in prob.items():
            if name == "settings":
                continue
            need = 25.0 if name == "astrometry" else 10.0
            out.append({"figure": f"ESS(mass)/s orbitmass / baseline, {name}", "value": res["ratio_ess_per_s"],
                        "target": f">= {need:.0f}x", "met": bool(res["ratio_ess_per_s"] >= need)})
    sca = sections.get("scaling")
    if isinstance(sca, dict) and (sca.get("exponents") or {}).get("wall_seconds") is not None:
        b = sca["exponents"]["wall_seconds"]
        counts = ", ".join(str(r["n_companions"]) for r in sca["companions"])
        out.append({"figure": f"joint fit wall time ~ companions^b, b over {counts}", "value": b,
                    "target": "<= 1", "met": bool(b <= 1.0)})
    demo = sections.get("demo")
    if isinstance(demo, dict) and "fits" in demo:
        for name, r in demo["fits"].items():
            if r.get("n_companions", 1) != 1:
                continue
            out.append({"figure": f"demo fit {name}, wall seconds to convergence", "value": r["wall_seconds"],
                        "target": f"< {demo['target_seconds']:.0f} s", "met": r["under_target"]})
    return out


def _targets_table(rows: list[dict]) -> str:
    lines = ["Targets of the issue (ratios orbitmass / baseline)"]
    for r in rows:
        lines.append(f"  {r['figure']:<62} {r['value']:>10.3g}  {r['target']:<9} "
                     f"{'met' if r['met'] else 'NOT met'}")
    return "\n".join(lines)


def _clean(obj):
    """JSON-safe copy: numpy scalars to Python, non-finite floats to None, tuples to lists."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    if hasattr(obj, "tolist") and not isinstance(obj, str):
        return _clean(obj.tolist())
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, bool | int | str) or obj is None:
        return obj
    return str(obj)


def write_json(data: dict, out: Path) -> Path:
    """Write ``data`` to ``out`` atomically (temporary file in the same folder, then rename)."""
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=".tmp", dir=out.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            json.dump(_clean(data), fh, indent=1, allow_nan=False)
            fh.write("\n")
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, out)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return out


def run_suite(quick: bool, only: list[str] | None = None, skip: list[str] | None = None,
              echo=None) -> dict:
    """Run the chosen sections one after the other.

    Parameters
    ----------
    quick : bool
        Quick modes of every section (the whole suite in under three minutes on
        an idle 2-core machine); the ``demo`` and ``rows`` sections run in full
        mode only (or when named in ``only``).
    only, skip : list of str, optional
        Section names to run, or to leave out.
    echo : callable, optional
        Receives each section's table text as it finishes (e.g. ``print``).

    Returns
    -------
    dict
        ``"sections"`` (each section's result, or ``{"error": traceback}``),
        ``"seconds"`` per section, ``"targets"``, ``"errors"`` (names),
        ``"tables"`` (the printed text), ``"machine"``, ``"quick"``,
        ``"total_seconds"``.
    """
    chosen = [s for s in SECTIONS if (not only or s in only) and s not in (skip or [])]
    if quick and not only:
        chosen = [s for s in chosen if s not in FULL_ONLY]
    import numpy as np

    data: dict = {
        "quick": quick,
        "machine": {"python": platform.python_version(), "platform": platform.platform(),
                    "cpu_count": os.cpu_count(), "numpy": np.__version__, "loadavg_start": _loadavg(),
                    "commit": _git_commit()},
        "sections": {}, "seconds": {}, "tables": {}, "errors": [],
    }
    t_start = time.perf_counter()
    for name in chosen:
        t0 = time.perf_counter()
        try:
            res, text = _run_section(name, quick)
        except Exception:  # noqa: BLE001 - a failing section is recorded, the others still run
            res, text = {"error": traceback.format_exc()}, f"{name}: FAILED\n{traceback.format_exc()}"
            data["errors"].append(name)
        if res is None:
            continue
        data["sections"][name] = res
        data["seconds"][name] = time.perf_counter() - t0
        data["tables"][name] = text
        if echo is not None:
            echo(f"{text}\n[{name}: {data['seconds'][name]:.1f} s]\n")
    data["total_seconds"] = time.perf_counter() - t_start
    data["machine"]["loadavg_end"] = _loadavg()
    data["targets"] = targets(data["sections"])
    data["tables"]["targets"] = _targets_table(data["targets"])
    return data


def main(argv: list[str] | None = None) -> int:
    """Command-line entry; returns the exit status (0, or 1 when a section raised)."""
    parser = argparse.ArgumentParser(prog="python -m benchmarks",
                                     description="orbitmass benchmark suite (reports, never asserts timing)")
    parser.add_argument("--quick", action="store_true", help="quick modes: the whole suite in about 3 minutes")
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT, help=f"results file (default {DEFAULT_OUT})")
    parser.add_argument("--only", nargs="+", choices=SECTIONS, metavar="NAME",
                        help=f"run only these sections ({', '.join(SECTIONS)})")
    parser.add_argument("--skip", nargs="+", choices=SECTIONS, metavar="NAME", help="leave these sections out")
    args = parser.parse_args(argv)

    def echo(text: str) -> None:
        print(text, flush=True)  # noqa: T201 (benchmark script output)

    data = run_suite(args.quick, only=args.only, skip=args.skip, echo=echo)
    path = write_json(data, args.out)
    echo(data["tables"]["targets"])
    echo(f"total {data['total_seconds']:.0f} s ({'quick' if args.quick else 'full'} mode); "
         f"results written to {path}")
    if data["errors"]:
        echo(f"sections that raised: {', '.join(data['errors'])}")
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
