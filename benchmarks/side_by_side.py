"""Run the benchmark suite of two checkouts side by side and print their figures together.

Used to show that a change (e.g. a restructuring) does not slow orbitmass
down: the old and the new checkout each have their own virtual environment;
their quick suites run alternately in one session (old, new, old, new, ...),
so machine load is shared, and every headline figure is printed for both with
the new/old ratio.

Usage::

    python -m benchmarks.side_by_side --old-root ../old --old-python ../old-venv/bin/python \
        [--new-root .] [--new-python python] [--rounds 1] [--only likelihood problems] [--out FILE]

With ``--predict`` it runs :func:`benchmarks.bench_predict.side_by_side`
instead (``Results.predict`` of 500 draws at 50 and 400 epochs in both
checkouts, on the same draws, with the agreement of their outputs)::

    python -m benchmarks.side_by_side --predict --old-root ../old --old-python ../old-venv/bin/python

Timing figures vary with load by 10-30 % on a shared 2-core machine; with
``--rounds 2`` or more the script also prints the spread between rounds,
which is the noise level to compare the old/new ratio against.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

if __package__ in (None, ""):  # run as a script: make the repository root importable
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from benchmarks import bench_predict  # noqa: E402


def _run(python: str, root: Path, out: Path, only: list[str]) -> dict:
    cmd = [python, "-m", "benchmarks", "--quick", "--out", str(out)]
    if only:
        cmd += ["--only", *only]
    subprocess.run(cmd, cwd=root, check=False, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return json.loads(out.read_text()) if out.exists() else {"targets": [], "errors": ["no output"]}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--old-root", required=True, type=Path)
    ap.add_argument("--old-python", required=True)
    ap.add_argument("--new-root", default=Path("."), type=Path)
    ap.add_argument("--new-python", default=sys.executable)
    ap.add_argument("--rounds", type=int, default=1)
    ap.add_argument("--only", nargs="*", default=[])
    ap.add_argument("--out", type=Path, default=None, help="write the combined figures as JSON here")
    ap.add_argument("--predict", action="store_true",
                    help="Results.predict of both checkouts on the same draws (benchmarks.bench_predict)")
    args = ap.parse_args(argv)
    if args.predict:
        result = bench_predict.side_by_side(args.old_root, args.old_python, args.new_root, args.new_python,
                                            rounds=max(args.rounds, 1))
        print(bench_predict.side_by_side_table(result))
        if args.out:
            args.out.write_text(json.dumps(result, indent=1))
        return 0
    figures: dict[str, dict[str, list[float]]] = {}
    with tempfile.TemporaryDirectory() as tmp:
        for k in range(args.rounds):
            for side, python, root in (("old", args.old_python, args.old_root), ("new", args.new_python,
                                                                                 args.new_root)):
                res = _run(python, root.resolve(), Path(tmp) / f"{side}{k}.json", args.only)
                for t in res.get("targets", []):
                    v = t.get("value")
                    if isinstance(v, (int, float)):
                        figures.setdefault(t["figure"], {"old": [], "new": []})[side].append(float(v))
                for err in res.get("errors", []):
                    print(f"{side} round {k}: error {str(err)[:200]}")
    print(f"{'figure':<70} {'old':>12} {'new':>12} {'new/old':>8} {'spread':>8}")
    rows = {}
    for name, vals in figures.items():
        if not vals["old"] or not vals["new"]:
            print(f"{name:<70} {'-' if not vals['old'] else statistics.median(vals['old']):>12} "
                  f"{'-' if not vals['new'] else statistics.median(vals['new']):>12}")
            continue
        o, n = statistics.median(vals["old"]), statistics.median(vals["new"])
        spread = (max(vals["old"]) / min(vals["old"]) - 1) if len(vals["old"]) > 1 and min(vals["old"]) > 0 else None
        ratio = n / o if o else float("nan")
        rows[name] = {"old": vals["old"], "new": vals["new"], "ratio": ratio, "old_spread": spread}
        print(f"{name:<70} {o:12.4g} {n:12.4g} {ratio:8.3f} "
              f"{'' if spread is None else f'{spread:8.1%}'}")
    if args.out:
        args.out.write_text(json.dumps(rows, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
