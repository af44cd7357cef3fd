"""benchmarks/bench_predict in its tiniest setting: both ways run and compute the same model.

No timing is asserted (common practice, no source: timings depend on the machine). The
reconstructed old way (the former per-draw LogPosterior.predict) and the new vectorised
Results.predict are two implementations of the same Thiele-Innes model; they must agree to
float64 round-off (the velocity expression is rounded differently: relative 1e-12 allowed).
"""

from __future__ import annotations

import math

from benchmarks import bench_predict


def test_bench_predict_tiny():
    res = bench_predict.run(quick=True, n_draws=12, epochs=(9,), repeats=1)
    cases = {k: v for k, v in res.items() if k not in ("settings", "targets")}
    assert len(cases) == 4  # two scenarios x (positions, positions and velocities)
    for name, r in cases.items():
        assert r["seconds_old"] > 0 and r["seconds_new"] > 0 and math.isfinite(r["ratio_old_over_new"]), name
        assert r["max_rel_diff"] < 1e-12, name
    assert res["targets"]["ratio"] == min(r["ratio_old_over_new"] for r in cases.values())
    assert "old" in bench_predict.table(res)
