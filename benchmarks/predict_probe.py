"""Time ``Results.predict`` of whichever orbitmass this interpreter imports; print JSON.

Run by :mod:`benchmarks.bench_predict` with the Python of each checkout (old
and new), so that both sides are the real code of their checkout. Only
public names are used, with the module paths of either package layout (the
flat layout before the one-engine restructuring, the subpackages after it).

Usage (from any folder; the ``orbitmass`` imported is that of the interpreter)::

    python benchmarks/predict_probe.py --draws 500 --epochs 50 400 --repeats 3 [--dump DIR]

For every scenario (``quillon``: relative frame, one companion; ``quillon-joint``:
absolute frame, two companions with reflex motion), number of epochs and kind
(positions; positions and velocities) it times two ways of predicting the
same ``n_draws`` posterior draws:

``per_draw``
    one ``Results.predict`` call per draw (how the orbit figure called it
    before the restructuring);
``one_call``
    one call with all draws (``rows=`` every draw).

Each timing is the best of ``--repeats`` runs, as wall seconds
(``time.perf_counter``) and as CPU seconds of the process
(``time.process_time``; numpy's elementwise functions run in one thread, so
on a loaded machine the CPU time is the steadier figure). ``--dump DIR`` also saves the ``one_call`` outputs, the parameter vectors
and their physical values (``.npy``, ``.npz``, names as JSON);
``--theta-from DIR`` predicts for the draws dumped there by the other
checkout instead of its own prior draws (columns matched by name; a column
the other layout does not sample is set from its physical value, e.g. a
fixed systemic velocity), so that the two checkouts' outputs can be compared
on the same draws.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def _imports():
    """(write_scenarios, read_target, ParameterSpace, Results, derive_samples) of either layout."""
    try:  # subpackage layout
        from orbitmass.demo.run import write_scenarios
        from orbitmass.model.parameters import ParameterSpace
    except ImportError:  # flat layout (before the restructuring)
        from orbitmass.demo import write_scenarios
        from orbitmass.parameters import ParameterSpace
    from orbitmass.io.target import read_target
    from orbitmass.results import Results, derive_samples

    return write_scenarios, read_target, ParameterSpace, Results, derive_samples


def _mapped_theta(space, source: Path, scenario: str) -> np.ndarray:
    """The draws dumped by the other checkout in ``source``, in the columns of ``space``."""
    names = json.loads((source / f"{scenario}.names.json").read_text())
    theta = np.load(source / f"{scenario}.theta.npy")
    phys = np.load(source / f"{scenario}.phys.npz")
    cols = []
    for name in space.names:
        if name in names:
            cols.append(theta[:, names.index(name)])
        elif name in phys.files:
            cols.append(phys[name])
        else:
            raise KeyError(f"{scenario}: parameter {name!r} has no counterpart in {source}")
    return np.column_stack(cols)


def _results(path: Path, n_draws: int, seed: int, scenario: str = "", theta_from: Path | None = None):
    """A Results holding ``n_draws`` prior draws (no sampling needed for timing)."""
    _, read_target, ParameterSpace, Results, derive_samples = _imports()
    space = ParameterSpace(read_target(path))
    if theta_from is None:
        theta = space.sample_prior(np.random.default_rng(seed), n_draws)
    else:
        theta = _mapped_theta(space, theta_from, scenario)
    samples = derive_samples(space, theta)
    return Results(target=space.target, space=space, samples=samples, theta=theta, chain=theta[None],
                   log_prob=np.zeros((1, n_draws)), burn=0, thin=1, summary={})


def _best(fn, repeats: int) -> dict[str, float]:
    """Best wall time (``time.perf_counter``) and best CPU time (``time.process_time``) of ``repeats`` calls."""
    wall = cpu = math.inf
    for _ in range(repeats):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        c1, t1 = time.process_time(), time.perf_counter()
        wall, cpu = min(wall, t1 - t0), min(cpu, c1 - c0)
    return {"wall": wall, "cpu": cpu}


def run(n_draws: int, epochs: list[int], repeats: int, dump: Path | None, seed: int = 5,
        theta_from: Path | None = None) -> dict:
    write_scenarios = _imports()[0]
    out: dict = {}
    with tempfile.TemporaryDirectory(prefix="orbitmass-predict-probe-") as tmp:
        paths = write_scenarios(Path(tmp))
        for scenario in ("quillon", "quillon-joint"):
            res = _results(paths[scenario], n_draws, seed, scenario, theta_from)
            name = res.companion_names[0]
            rows = np.arange(len(res.theta))
            if dump is not None:
                np.save(dump / f"{scenario}.theta.npy", res.theta)
                (dump / f"{scenario}.names.json").write_text(json.dumps(list(res.space.names)))
                np.savez(dump / f"{scenario}.phys.npz", **{k: np.asarray(v) for k, v in
                                                           res.space.unpack(res.theta).items()
                                                           if np.ndim(v) == 1})
            for n_t in epochs:
                t = np.linspace(res.space.t_ref - 10.0, res.space.t_ref + 10.0, n_t)
                for kind, t_vel in (("positions", None), ("positions+velocities", t)):
                    def per_draw(t=t, t_vel=t_vel):
                        return [res.predict(name, t_astro=t, t_vel=t_vel, rows=np.array([r])) for r in rows]

                    def one_call(t=t, t_vel=t_vel):
                        return res.predict(name, t_astro=t, t_vel=t_vel, rows=rows)

                    key = f"{scenario}, {n_t} epochs, {kind}"
                    one_call()  # warm-up (imports, caches)
                    out[key] = {"per_draw": _best(per_draw, repeats), "one_call": _best(one_call, repeats)}
                    if dump is not None:
                        for q, v in one_call().items():
                            np.save(dump / f"{key}.{q}.npy", v)
    return out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--draws", type=int, default=500)
    ap.add_argument("--epochs", type=int, nargs="+", default=[50, 400])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--dump", type=Path, default=None)
    ap.add_argument("--theta-from", type=Path, default=None)
    args = ap.parse_args(argv)
    if args.dump is not None:
        args.dump.mkdir(parents=True, exist_ok=True)
    json.dump(run(args.draws, args.epochs, args.repeats, args.dump, theta_from=args.theta_from), sys.stdout)
    return 0


if __name__ == "__main__":
    sys.exit(main())
