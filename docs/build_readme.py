"""Regenerate README.md from docs/README.template.md and numbers measured with the current code.

Run from anywhere (paths are relative to the repository root)::

    python docs/build_readme.py              # run the demo fits, count nothing else, write README.md
    python docs/build_readme.py --tests      # also count the tests (pytest --collect-only -q)
    python docs/build_readme.py --quick      # demo fits capped at 3000 steps (to try the template;
                                             # the README then says so)
    python docs/build_readme.py --reuse DIR  # take the fits from an earlier demo folder DIR
    python docs/build_readme.py --check      # exit 1 if README.md differs from template + recorded numbers

What it does:

1. runs the invented demo through the public API (:func:`orbitmass.demo.run.run_demo`: the two
   single-target fits and the comparison demo with its joint refit) into a temporary folder, or
   reads an earlier demo folder with ``--reuse``;
2. reads every run's ``summary.json`` (mass and distance with 68 % intervals, ESS, wall time,
   ``fit_quality``) and the comparison's ``comparison.json``; a run with sampled relativity factors
   fills the Beyond-Kepler sentence;
3. optionally counts the tests; reads ``benchmarks/results.json`` if present (the benchmarks are
   not run: ``python -m benchmarks`` does that);
4. writes every number into ``docs/readme_numbers.json`` (with the commit, date and load average
   of the run) and fills the ``{{name}}`` placeholders of the template, plus ``{{file:PATH}}`` (a
   file verbatim) and ``{{head:PATH:N}}`` (its first N lines), into ``README.md``, atomically;
5. copies the demo figures into ``docs/img/``: ``quillon-orbit.png``, ``comparison.png``,
   ``enclosed-mass.png``, and, when the demo writes them, ``demo-forecast.png``,
   ``demo-plan.png`` and ``demo-relativity.png``.

Numbers are formatted with :mod:`orbitmass.outputs.formatting` (two significant digits on the
smaller error, display units chosen by magnitude, M☉). ``--check`` renders the template with the
numbers recorded in ``docs/readme_numbers.json`` (no fits) and compares with ``README.md``.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import os
import re
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TEMPLATE = ROOT / "docs" / "README.template.md"
README = ROOT / "README.md"
NUMBERS = ROOT / "docs" / "readme_numbers.json"
IMG = ROOT / "docs" / "img"
BENCH = ROOT / "benchmarks" / "results.json"

#: demo scenario -> short description of its data source, for the table
SCENARIO_TEXT = {
    "quillon": "QD-S4 around the Quillon black hole, distance left free (orbital parallax)",
    "tessaly": "Tessaly 41 AB, astrometry only, 1 % parallax",
}
#: sampled model-term parameters reported under ``derived`` (input format, "Beyond Kepler")
_BEYOND_KEPLER = ("redshift_factor", "precession_factor", "extended_mass_fraction")
_SUP = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


class BuildError(Exception):
    """Something the README needs is missing; the message says what."""


# ------------------------------------------------------------------------------ formatting
def _pretty(text: str) -> str:
    """Markdown touches on a formatted value: ``10^6`` -> ``10⁶``, ASCII minus of errors -> ``−``."""
    text = re.sub(r"10\^(-?\d+)", lambda m: "10" + m.group(1).translate(_SUP), text)
    return text.replace(" -", " −")


def _interval(column: str, block: dict, companions=()) -> str:
    from orbitmass.outputs.formatting import summary_text

    return _pretty(summary_text(column, block, companions=companions))


def _number(value: float, digits: int = 3, column: str | None = None) -> str:
    from orbitmass.outputs.formatting import format_number

    return _pretty(format_number(value, digits=digits, column=column))


def _seconds(value: float) -> str:
    return f"{value:.0f} s" if value >= 100 else f"{value:.1f} s"


# --------------------------------------------------------------------------------- the demo
def run_demo_into(folder: Path, *, quick: bool) -> dict:
    """Run the demo into ``folder``; returns wall and CPU seconds and the load average."""
    from orbitmass.demo.run import run_demo

    load_before = os.getloadavg()[0]
    t0 = time.perf_counter()
    cpu0 = resource.getrusage(resource.RUSAGE_SELF)
    run_demo(folder, seed=1, overwrite=True, progress=False, max_steps=3000 if quick else 20000)
    cpu1 = resource.getrusage(resource.RUSAGE_SELF)
    return {
        "wall_seconds": time.perf_counter() - t0,
        "cpu_seconds": (cpu1.ru_utime - cpu0.ru_utime) + (cpu1.ru_stime - cpu0.ru_stime),
        "loadavg_before": load_before,
        "loadavg_after": os.getloadavg()[0],
        "max_steps": 3000 if quick else 20000,
        "seed": 1,
        **{f"{k}_at_run": v for k, v in git_state().items()},
    }


def _read_json(path: Path) -> dict:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise BuildError(f"{path}: cannot read ({exc})") from None


def _run_numbers(name: str, summary: dict) -> dict:
    """What the README states about one demo run."""
    from orbitmass.demo.scenarios import SCENARIOS

    truth = SCENARIOS[name]
    d, diag, fq = summary["derived"], summary["diagnostics"], summary.get("fit_quality") or {}
    companions = list(summary["companions"])
    n_pos = sum(ds.get("n_rows", 0) for ds in fq.get("datasets", {}).values() if ds.get("kind") == "positions")
    vel = [ds for ds in fq.get("datasets", {}).values() if ds.get("kind") == "velocities"]
    n_vel = sum(ds.get("n_rows", 0) for ds in vel)
    instruments = sorted({ds.get("instrument") for ds in vel if ds.get("instrument")})
    out = {
        "target": summary["target"],
        "companions": companions,
        "n_positions": n_pos,
        "n_velocities": n_vel,
        "instruments": instruments,
        "truth_mass_msun": truth.mass_msun,
        "truth_distance_pc": truth.distance_pc,
        "mass": _interval("mass_msun", d["mass_msun"]),
        "distance": _interval("distance_pc", d["distance_pc"]),
        "mass_block": d["mass_msun"],
        "distance_block": d["distance_pc"],
        "converged": bool(diag["converged"]),
        "ess_mass": diag.get("ess_mass"),
        "ess_min": diag.get("ess_min"),
        "n_steps": diag.get("n_steps"),
        "wall_seconds": diag.get("wall_seconds"),
        "method": "fast path" if diag.get("linear_path") else "full sampling",
        "reduced_chi2": fq.get("reduced_chi2"),
        "dof": fq.get("dof"),
        "p_value": fq.get("p_value"),
        "status": fq.get("status"),
        "beyond_kepler": {k: d[k] for k in ("redshift_factor", "precession_factor", "extended_mass_fraction")
                          if k in d},
    }
    return out


def collect_demo(folder: Path) -> dict:
    """Numbers of every demo run and of the comparison in a demo folder."""
    runs = {}
    for name in SCENARIO_TEXT:
        path = folder / "runs" / name / "summary.json"
        if not path.is_file():
            raise BuildError(f"{path}: missing; the demo did not write the run '{name}'")
        runs[name] = _run_numbers(name, _read_json(path))
    # runs the template does not know yet (a relativity scenario, say): kept for the sentences
    extra = {}
    known = {(folder / "runs" / name / "summary.json").resolve() for name in runs}
    for path in sorted(folder.rglob("summary.json")):
        s = _read_json(path)
        factors = {k: _interval(k, s["derived"][k]) for k in _BEYOND_KEPLER if k in s.get("derived", {})}
        if path.resolve() in known and not factors:  # a known run is kept here only for its factors
            continue
        if not factors:
            continue  # a Keplerian run (a team's fit, the joint refit): described elsewhere
        names = list(s.get("companions", {}))
        per_companion = {}
        for c in names:
            block = s["companions"][c]
            per_companion[c] = {k: _interval(f"{c}.{k}", block[k], companions=names)
                                for k in ("precession_arcmin_per_orbit", "redshift_periastron_kms",
                                          "periastron_rs") if k in block}
        extra[str(path.parent.relative_to(folder))] = {
            "target": s["target"], "beyond_kepler": factors, "companions": per_companion,
            "converged": bool(s["diagnostics"]["converged"]), "status": (s.get("fit_quality") or {}).get("status")}
    cmp_path = folder / "comparison-demo" / "comparison" / "comparison.json"
    comparison = _comparison_numbers(_read_json(cmp_path)) if cmp_path.is_file() else None
    joint_summary = cmp_path.parent / "combined" / "summary.json"
    if comparison is not None and joint_summary.is_file():
        s = _read_json(joint_summary)
        fq, diag = s.get("fit_quality") or {}, s["diagnostics"]
        comparison["joint_run"] = {"reduced_chi2": fq.get("reduced_chi2"), "dof": fq.get("dof"),
                                   "status": fq.get("status"), "ess_mass": diag.get("ess_mass"),
                                   "wall_seconds": diag.get("wall_seconds"), "converged": bool(diag["converged"])}
    return {"runs": runs, "extra_runs": extra, "comparison": comparison}


def _comparison_numbers(cmp: dict) -> dict:
    runs = [{"label": r["label"], "mass": _interval("mass_msun", r["mass_msun"]),
             "converged": r["converged"], "source_recorded": bool(r.get("source"))} for r in cmp["runs"]]
    comb = cmp.get("combined") or {}
    joint = None
    if comb.get("mass_msun"):
        joint = _interval("mass_msun", comb["mass_msun"])
    widths = [r["mass_msun"]["q84"] - r["mass_msun"]["q16"] for r in cmp["runs"]]
    joint_width = (comb["mass_msun"]["q84"] - comb["mass_msun"]["q16"]) if comb.get("mass_msun") else None
    pairs = []
    for p in cmp["comparisons"]:
        sigma = p["tension_sigma"]
        pairs.append({"a": p["a"], "b": p["b"], "kind": p["kind"], "verdict": p["verdict"],
                      "sigma": None if sigma is None else f"{'> ' if p['tension_is_lower_bound'] else ''}{sigma:.1f}",
                      "sigma_normal": None if p["sigma_normal_approx"] is None else f"{p['sigma_normal_approx']:.1f}"})
    narrower = comb.get("narrower_than_every_part")
    if narrower is None:
        narrower = joint_width is not None and joint_width < min(widths)
    return {"runs": runs, "joint": joint, "joint_narrower": bool(narrower),
            "references": [r["text"] for r in cmp["references"]], "pairs": pairs}


# ---------------------------------------------------------------------------- other inputs
def count_tests() -> dict:
    """``pytest --collect-only -q`` in the repository: the number of tests collected."""
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "pytest", "--collect-only", "-q"], cwd=ROOT,
                          capture_output=True, text=True, check=False)
    m = re.search(r"(\d+) tests? collected", proc.stdout)
    if not m:
        tail = "\n".join(proc.stdout.splitlines()[-5:] + proc.stderr.splitlines()[-5:])
        raise BuildError(f"pytest --collect-only found no test count:\n{tail}")
    return {"n_tests": int(m.group(1)), "collect_seconds": time.perf_counter() - t0}


def benchmark_numbers() -> dict | None:
    """The figures the README quotes from ``benchmarks/results.json``, with where they come from."""
    if not BENCH.is_file():
        return None
    res = _read_json(BENCH)
    targets = {t["figure"]: t for t in res.get("targets", [])}

    def val(prefix: str):
        for name, t in targets.items():
            if name.startswith(prefix):
                return t
        return None

    machine = res.get("machine", {})
    return {
        "mode": "quick" if res.get("quick") else "full",
        "commit": machine.get("commit"),
        "loadavg_start": machine.get("loadavg_start"),
        "cpu_count": machine.get("cpu_count"),
        "kepler_speedup_1e4": (val("Kepler solves/s vs vectorised Newton, n=10000") or {}).get("value"),
        "kepler_error_rad": (val("Kepler max") or {}).get("value"),
        "likelihood_us": (val("model + log-likelihood, us per parameter set") or {}).get("value"),
        "likelihood_loop_ratio": (val("model + log-likelihood, loop") or {}).get("value"),
        "ess_ratio_covered": (val("ESS(mass)/s orbitmass / baseline, covered") or {}).get("value"),
        "ess_ratio_arc": (val("ESS(mass)/s orbitmass / baseline, partial_arc") or {}).get("value"),
        "total_seconds": res.get("total_seconds"),
    }


def error_example() -> str:
    """The message ``orbitmass fit`` prints for a distance prior given without a unit (read with the current reader).

    A copy of ``examples/quillon`` with ``mean = 8`` in place of a quantity string is read with
    :func:`orbitmass.read_target` in a temporary folder; the command line prints the error as
    ``orbitmass: error: <message>`` (:func:`orbitmass.cli.common.run_command`).
    """
    import orbitmass

    src = ROOT / "examples" / "quillon"
    text = (src / "target.toml").read_text(encoding="utf-8")
    bad = re.sub(r'^prior = .*$', 'prior = { dist = "normal", mean = 8, sd = "1 kpc" }', text, count=1,
                 flags=re.MULTILINE)
    if bad == text:
        raise BuildError(f"{src / 'target.toml'}: no 'prior = ...' line to spoil for the error example")
    with tempfile.TemporaryDirectory(prefix="orbitmass-readme-error-") as tmp:
        for table in src.glob("*.csv"):
            (Path(tmp) / table.name).write_bytes(table.read_bytes())
        (Path(tmp) / "target.toml").write_text(bad, encoding="utf-8")
        cwd = Path.cwd()
        os.chdir(tmp)
        try:
            orbitmass.read_target("target.toml")
        except orbitmass.OrbitmassError as exc:
            return f"orbitmass: error: {exc}"
        finally:
            os.chdir(cwd)
    raise BuildError("the reader accepted a distance prior without a unit; the README's error example needs another")


def git_state() -> dict:
    def git(*args):
        proc = subprocess.run(["git", *args], cwd=ROOT, capture_output=True, text=True, check=False)
        return proc.stdout.strip() if proc.returncode == 0 else None

    status = git("status", "--porcelain", "--untracked-files=no", "--", "orbitmass")
    return {"commit": git("rev-parse", "--short", "HEAD"), "package_modified": bool(status)}


# ------------------------------------------------------------------------------- sentences
def _count(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def _with_unit(text: str, unit: str) -> str:
    """``text`` with ``unit`` appended unless the formatter already wrote a unit after the number."""
    last = text.split()[-1]
    return text if not re.fullmatch(r"[−+\-]?[\d.]+\)?|\(fixed\)|10[⁰¹²³⁴⁵⁶⁷⁸⁹⁻]+", last) else f"{text} {unit}"


def _quality(r: dict) -> str:
    """``fit_quality`` in a table cell."""
    if r.get("reduced_chi2") is None:
        return "not computed"
    return f"χ²/dof = {r['reduced_chi2']:.2f} ({r['dof']:.0f} dof), {r['status']}"


def sentences(nums: dict) -> dict[str, str]:
    """The placeholder values of the template, from the recorded numbers."""
    from orbitmass.demo.scenarios import DEMO_MASS_MSUN

    demo, run = nums["demo"], nums["demo_run"]
    rows = []
    for name, text in SCENARIO_TEXT.items():
        r = demo["runs"][name]
        data = _count(r["n_positions"], "position")
        if r["n_velocities"]:
            data += f", {_count(r['n_velocities'], 'velocity').replace('velocitys', 'velocities')}"
            if len(r["instruments"]) > 1:
                data += f" from {len(r['instruments'])} spectrographs"
        truth = f"M = {_number(r['truth_mass_msun'], 3, 'mass_msun')}"
        post = f"M = {r['mass']}"
        if name == "quillon":  # the distance is fitted here
            truth += f", D = {_number(r['truth_distance_pc'], 3, 'distance_pc')}"
            post += f", D = {r['distance']}"
        quality = _quality(r)
        conv = "" if r["converged"] else " (**not converged**)"
        rows.append(f"| {text} | {data} | {truth} | {post}{conv} | {quality} | {r['ess_mass']:.0f} | "
                    f"{_seconds(r['wall_seconds'])} |")
    cmp = demo["comparison"]
    if cmp is not None and cmp["joint"]:
        parts = " and ".join(f"{r['label']}: {r['mass']}" for r in cmp["runs"])
        jr = cmp.get("joint_run")
        tail = (f"{_quality(jr)} | {jr['ess_mass']:.0f} | {_seconds(jr['wall_seconds'])} |" if jr else "| | |")
        conv = "" if not jr or jr["converged"] else " (**not converged**)"
        rows.append(f"| two teams' datasets of one black hole, compared and fitted jointly | QD-S4 (north team) "
                    f"and QD-S9 (south team) | M = {_number(DEMO_MASS_MSUN, 3, 'mass_msun')} | "
                    f"joint refit M = {cmp['joint']}{conv} | {tail}")
        narrower = ", narrower than either part" if cmp["joint_narrower"] else ""
        verdicts = "\n".join(
            f"- {p['a']} against {p['b']}: {p['verdict']}, {p['sigma']} σ from the samples"
            + (f" (normal approximation {p['sigma_normal']} σ)" if p["sigma_normal"] else "")
            for p in cmp["pairs"])
        comparison_sentence = (f"the teams' fits give {parts}; the joint refit of both datasets gives "
                               f"{cmp['joint']}{narrower}. The invented reference value is "
                               f"`{cmp['references'][0]}`. Tensions (Gaussian-equivalent):\n\n{verdicts}")
    else:
        comparison_sentence = "the comparison was not run in this build."
    quick = f"; a quick build, step cap {run['max_steps']}" if run["max_steps"] < 20000 else ""
    if "wall_seconds" in run:
        timing = (f" on a {run.get('cpu_count', '?')}-core machine shared with other jobs (load average "
                  f"{run['loadavg_before']:.1f} before, {run['loadavg_after']:.1f} after): the whole demo took "
                  f"{_seconds(run['wall_seconds'])} of wall time and {_seconds(run['cpu_seconds'])} of CPU time")
    else:
        timing = " from an earlier demo folder (the time of the whole demo was not recorded)"
    demo_run_sentence = (
        f"Numbers from one run of the demo (fit seed {run['seed']}{quick}) at commit "
        f"{run.get('commit_at_run', nums['git']['commit'])}, "
        f"read by `python docs/build_readme.py` on {nums['date']}{timing}. Wall times move with the load; the "
        "posteriors do not. \"Goodness of fit\" is `fit_quality` at the maximum-posterior point.")
    tests = nums.get("tests")
    tests_sentence = (f" ({tests['n_tests']} tests collected at commit {tests['commit']})" if tests else "")
    rel = [r for r in demo["extra_runs"].values() if r["beyond_kepler"]]
    if rel:
        r = rel[0]
        relativity_sentence = (f"The demo's relativistic fit ({r['target']}) measured "
                               + ", ".join(f"`{k}` = {v}" for k, v in r["beyond_kepler"].items())
                               + ("" if r["converged"] else " (**not converged**)") + ".")
        for c, q in r.get("companions", {}).items():
            parts = []
            if "periastron_rs" in q:
                rs = _with_unit(q["periastron_rs"], "R_S").replace(" R_S", " Schwarzschild radii")
                parts.append(f"periastron at {rs}")
            if "precession_arcmin_per_orbit" in q:
                parts.append(f"general relativity predicts {_with_unit(q['precession_arcmin_per_orbit'], 'arcmin')} "
                             "of precession per orbit")
            if "redshift_periastron_kms" in q:
                parts.append(f"a redshift of {_with_unit(q['redshift_periastron_kms'], 'km/s')} at periastron")
            if parts:
                relativity_sentence += f" For {c}: " + "; ".join(parts) + "."
    else:
        relativity_sentence = "The demo of this version includes no relativistic fit."
    bench = nums.get("benchmarks")
    if bench:
        perf = (f"`python -m benchmarks` measures each figure beside a baseline written as a careful user would "
                f"(emcee's default move, the elements sampled directly, a scalar numpy likelihood). Its "
                f"latest recorded {bench['mode']} run (`benchmarks/results.json`, commit {bench['commit']}, "
                f"load average {bench['loadavg_start']:.1f} on "
                f"{bench['cpu_count']} cores): Kepler's equation solved "
                f"{bench['kepler_speedup_1e4']:.1f}× faster than by a vectorised Newton iteration, with errors of "
                f"at most {_number(bench['kepler_error_rad'], 2)} rad; model + log posterior "
                f"{bench['likelihood_us']:.1f} µs per parameter set at 90 epochs "
                f"({bench['likelihood_loop_ratio']:.0f}× a per-set loop); "
                f"{bench['ess_ratio_covered']:.1f}× (covered orbit) and {bench['ess_ratio_arc']:.1f}× "
                f"(quarter-orbit arc) the baseline's effective samples of the mass per second. These figures "
                f"are from that run, not from this build.")
    else:
        perf = "No `benchmarks/results.json` was present at this build: run `python -m benchmarks`."
    cal = nums.get("calibration")
    if cal:
        calibration_sentence = (
            f"in the latest recorded {cal['n_fits']}-fit study (seed {cal['seed']}, `validation/out/sbc.json`, "
            f"not rerun by this build) the 68 % intervals of the total mass covered the truth in "
            f"{cal['coverage68']:.3f} ± {cal['coverage68_err']:.3f} of the fits and the 95 % intervals in "
            f"{cal['coverage95']:.3f} ± {cal['coverage95_err']:.3f}; rank uniformity p = {cal['p_uniform']:.2f}.")
    else:
        calibration_sentence = "no recorded study (`validation/out/sbc.json`) was present at this build."
    provenance = (f"generated by docs/build_readme.py at commit {nums['git']['commit']}"
                  f"{' (package modified)' if nums['git']['package_modified'] else ''} on {nums['date']}")
    return {
        "tests_sentence": tests_sentence,
        "demo_rows": "\n".join(rows),
        "demo_run_sentence": demo_run_sentence,
        "comparison_sentence": comparison_sentence,
        "relativity_sentence": relativity_sentence,
        "performance_sentence": perf,
        "calibration_sentence": calibration_sentence,
        "provenance": provenance,
        "error_example": nums.get("error_example", ""),
    }


def calibration_numbers() -> dict | None:
    """Coverage of the total mass in the recorded SBC study (``validation/out/sbc.json``), if present."""
    path = ROOT / "validation" / "out" / "sbc.json"
    if not path.is_file():
        return None
    sbc = _read_json(path)
    try:
        mass = sbc["results"]["mass_msun"]
        return {"n_fits": sbc["settings"]["n_fits"], "seed": sbc["settings"]["seed"],
                "n_converged": sbc.get("n_converged"),
                **{k: mass[k] for k in ("coverage68", "coverage68_err", "coverage95", "coverage95_err",
                                        "p_uniform")}}
    except (KeyError, TypeError) as exc:
        raise BuildError(f"{path}: unexpected layout (missing {exc})") from None


# -------------------------------------------------------------------------------- rendering
_PLACEHOLDER = re.compile(r"\{\{([^{}]+)\}\}")


def render(template: str, values: dict[str, str]) -> str:
    """Fill ``{{name}}``, ``{{file:PATH}}`` and ``{{head:PATH:N}}``; every placeholder must resolve."""
    missing = []

    def fill(m: re.Match) -> str:
        key = m.group(1).strip()
        if key.startswith("file:") or key.startswith("head:"):
            kind, _, rest = key.partition(":")
            path_text, n = (rest.rsplit(":", 1) if kind == "head" else (rest, None))
            path = ROOT / path_text
            try:
                text = path.read_text(encoding="utf-8")
            except OSError as exc:
                raise BuildError(f"{TEMPLATE}: {{{{{key}}}}}: cannot read {path} ({exc})") from None
            lines = text.rstrip("\n").splitlines()
            return "\n".join(lines[: int(n)] if n else lines)
        if key not in values:
            missing.append(key)
            return m.group(0)
        return values[key]

    out = _PLACEHOLDER.sub(fill, template)
    if missing:
        raise BuildError(f"{TEMPLATE}: no value for {', '.join(sorted(set(missing)))}")
    return out


def copy_figures(folder: Path) -> list[str]:
    """Copy the demo's figures into docs/img (atomically); returns the names written."""
    from orbitmass.outputs.style import write_atomic

    wanted = {
        "quillon-orbit.png": [folder / "runs" / "quillon" / "orbit.png"],
        "comparison.png": [folder / "comparison-demo" / "comparison" / "comparison.png"],
        "enclosed-mass.png": [folder / "comparison-demo" / "comparison" / "enclosed_mass.png"],
        "demo-forecast.png": sorted(folder.rglob("predictions.png")),
        "demo-plan.png": sorted(folder.rglob("plan.png")),
        "demo-relativity.png": sorted(p for p in folder.rglob("*.png") if "relativity" in p.name),
    }
    required = {"quillon-orbit.png", "comparison.png", "enclosed-mass.png"}
    written = []
    IMG.mkdir(parents=True, exist_ok=True)
    for dest, sources in wanted.items():
        src = next((p for p in sources if p.is_file()), None)
        if src is None:
            if dest in required:
                raise BuildError(f"the demo wrote no figure for docs/img/{dest} (looked for {sources[0]})")
            continue
        write_atomic(IMG / dest, src.read_bytes())
        written.append(dest)
    return written


# --------------------------------------------------------------------------------------- main
def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--quick", action="store_true", help="demo fits capped at 3000 steps")
    parser.add_argument("--tests", action="store_true", help="count the tests with pytest --collect-only -q")
    parser.add_argument("--reuse", metavar="DIR", help="read the fits of an earlier demo folder instead of fitting")
    parser.add_argument("--keep", metavar="DIR", help="run the demo into DIR and keep it (default: a temporary folder)")
    parser.add_argument("--check", action="store_true",
                        help="exit 1 if README.md differs from the template filled with docs/readme_numbers.json")
    args = parser.parse_args(argv)
    template = TEMPLATE.read_text(encoding="utf-8")
    try:
        if args.check:
            nums = _read_json(NUMBERS)
            expected = render(template, sentences(nums))
            same = README.is_file() and README.read_text(encoding="utf-8") == expected
            print("README.md is up to date" if same else  # noqa: T201 (a script's report)
                  "README.md differs from docs/README.template.md + docs/readme_numbers.json: run docs/build_readme.py")
            return 0 if same else 1
        old = _read_json(NUMBERS) if NUMBERS.is_file() else {}
        nums = {"date": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"), "git": git_state()}
        tmp = None
        if args.reuse:
            folder = Path(args.reuse)
            nums["demo_run"] = {"seed": 1, "max_steps": 3000 if args.quick else 20000, "reused": str(folder),
                                **(old.get("demo_run", {}) if old.get("demo_run", {}).get("reused") == str(folder)
                                   else {})}
        else:
            if args.keep:
                folder = Path(args.keep)
            else:
                tmp = tempfile.TemporaryDirectory(prefix="orbitmass-readme-")
                folder = Path(tmp.name) / "demo"
            nums["demo_run"] = run_demo_into(folder, quick=args.quick)
            if args.keep:
                nums["demo_run"]["reused"] = str(folder)
        nums["demo_run"]["cpu_count"] = os.cpu_count()
        nums["demo"] = collect_demo(folder)
        if args.tests:
            nums["tests"] = {**count_tests(), "commit": nums["git"]["commit"]}
        elif old.get("tests"):
            nums["tests"] = old["tests"]  # the last count, with the commit it was made at
        nums["benchmarks"] = benchmark_numbers()
        nums["calibration"] = calibration_numbers()
        nums["error_example"] = error_example()
        text = render(template, sentences(nums))
        figures = copy_figures(folder)
        from orbitmass.outputs.style import write_atomic

        write_atomic(NUMBERS, json.dumps(nums, indent=2, ensure_ascii=False) + "\n")
        write_atomic(README, text)
        if tmp is not None:
            tmp.cleanup()
    except BuildError as exc:
        print(f"build_readme: error: {exc}", file=sys.stderr)  # noqa: T201
        return 2
    print(f"README.md written ({len(text.splitlines())} lines); docs/img: {', '.join(figures)}")  # noqa: T201
    return 0


if __name__ == "__main__":
    sys.exit(main())
