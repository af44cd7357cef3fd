"""orbitmass benchmark suite: ``python -m benchmarks [--quick] [--out PATH]``.

Modules
-------
bench_kepler
    Kepler solver throughput and accuracy against Newton baselines.
bench_likelihood
    Model + log-likelihood for many parameter sets at once against a per-set loop.
bench_problems
    Three reference fits against a plain emcee baseline; a profile of one fit.
bench_scaling
    Cost against the number of epochs and of companions.
bench_batch
    Many targets on dask (when present).
run
    Runs them side by side, prints a table, writes ``results.json``.
"""
