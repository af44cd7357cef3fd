"""Fit whole samples of targets on dask.distributed, one run folder per target.

:func:`fit_batch` expands target files and glob patterns, fits every target as
one dask task and collects a catalogue of the results. Each task does exactly
what ``orbitmass fit`` does: it reads the target, runs :class:`orbitmass.fit.Fit`
and writes the run folder ``OUT/runs/<name>`` (output contract). The driver
then writes ``OUT/catalogue.csv`` (and ``OUT/catalogue.parquet`` when pyarrow
is importable), one row per target.

dask is an optional dependency (``pip install "orbitmass[cluster]"``); it is
imported only inside the functions of :mod:`orbitmass.batch.cluster` that need
it, and no dask client is ever made at import. Without a client or
scheduler address, :func:`fit_batch` starts a local cluster of worker processes (one thread each) for the duration
of the batch.

Behaviour
---------
Seeds
    Target ``name`` of batch seed ``S`` is fitted with
    :func:`target_seed` ``(S, name)``, a 31-bit integer drawn from
    ``numpy.random.SeedSequence([S, *sha256(name) as 32-bit words])``. The
    catalogue records it in the ``seed`` column: ``orbitmass fit TARGET
    --seed SEED`` (same ``--max-steps`` and ``--walkers``) gives the same
    result alone.
Failures
    A target whose input is bad (any :class:`~orbitmass.exceptions.OrbitmassError`)
    is recorded as ``failed`` with the error message and is not retried. Any
    other exception escaping a fit is retried ``retries`` times, then recorded
    as ``failed``. A worker process that dies is replaced by its nanny and
    its task is rescheduled by dask (up to the scheduler's
    ``distributed.scheduler.allowed-failures``, 3 by default); after that the
    target is recorded as ``failed`` (``KilledWorker``). One failure never
    stops the other targets. A run that was saved but whose figures or
    reports failed counts as done: its row has the results and a ``note``
    saying what failed (``orbitmass report RUN_DIR`` draws them later).
Options
    Each target file's ``[fit]`` table (walkers, seed, max_steps) applies
    where ``fit_options`` (the command's flags) do not set the option; the
    batch seed, when given, overrides a ``[fit] seed``.
Goodness of fit
    The catalogue's ``fit_status`` column is the run's
    ``fit_quality.status`` (ok / poor), and ``status`` then reads e.g.
    ``"converged, poor fit"``: sampling convergence and goodness of fit are
    separate statements.
Time limit
    With ``timeout`` (``--target-timeout``) each fit runs in a child process
    of its worker and is killed when the limit passes: the target is recorded
    as ``failed`` with the reason ``timeout`` and the worker takes the next
    target.
Resume
    Rerunning the same batch skips every target whose run folder holds a
    complete run of that very target: ``summary.json`` readable and
    ``posterior.h5`` present, and its ``provenance`` naming the same resolved
    target file with the same SHA-256 of the target file and its tables
    (see :mod:`orbitmass.batch.plan`); its row is read from its
    ``summary.json``. A target whose file or tables changed is fitted again
    into its folder; a run of another target is never credited to this one
    nor overwritten (targets in another order, or a target added, keep their
    own folders). Unfinished folders are redone: a folder without those files
    or with an unreadable ``summary.json`` is replaced, and staging leftovers
    ``runs/.<name>.staging-*`` of an interrupted write are removed first (a
    run folder only counts once it is renamed into place). Options are not
    compared: a kept run keeps the seed and options it was made with (its
    seed is read back from its ``summary.json``).
Interruption
    Ctrl-C writes the catalogue (unfinished targets failed with the reason
    ``interrupted``) and raises :class:`KeyboardInterrupt`; the workers of a
    local cluster ignore it and are closed by the driver.
Paths
    Workers read the target files and write the run folders themselves, so on
    a multi-machine cluster the targets and ``OUT`` must sit on a file system
    every worker sees under the same path, and every worker needs orbitmass
    installed.

Examples
--------
>>> from orbitmass.batch import fit_batch                        # doctest: +SKIP
>>> cat = fit_batch(["survey/*/target.toml"], "survey-runs", workers=2, seed=7)  # doctest: +SKIP
>>> cat[["name", "status", "mass_msun_median"]]                  # doctest: +SKIP

Modules (imports run down this list): ``plan`` (jobs, seeds, run folders and
their identity), ``catalogue`` (rows and the table), ``task`` (the worker
task, time limits), ``cluster`` (everything dask), ``driver``
(:func:`fit_batch`). The invented example sample is
:func:`orbitmass.demo.scenarios.write_example_sample`.
"""
from __future__ import annotations

from orbitmass._compat import moved_name

from orbitmass.batch.catalogue import (
    ELEMENTS,
    STATUS_CONVERGED,
    STATUS_FAILED,
    STATUS_NOT_CONVERGED,
    catalogue_frame,
    catalogue_row,
    failed_row,
    write_catalogue,
)
from orbitmass.batch.cluster import INSTALL_HINT, open_client
from orbitmass.batch.driver import fit_batch
from orbitmass.batch.plan import BatchJob, expand_targets, plan_batch, target_seed
from orbitmass.batch.task import fit_target

__all__ = [
    "BatchJob",
    "STATUS_CONVERGED",
    "STATUS_NOT_CONVERGED",
    "STATUS_FAILED",
    "ELEMENTS",
    "INSTALL_HINT",
    "target_seed",
    "expand_targets",
    "plan_batch",
    "fit_target",
    "fit_batch",
    "open_client",
    "catalogue_row",
    "failed_row",
    "catalogue_frame",
    "write_catalogue",
]


def __getattr__(name: str):
    """Names that moved out of this module (deprecated, see :mod:`orbitmass._compat`)."""
    return moved_name(__name__, name)
