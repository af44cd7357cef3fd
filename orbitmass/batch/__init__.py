"""Fit whole samples of targets on dask.distributed, one run folder per target.

:func:`fit_batch` expands target files and glob patterns, fits every target as
one dask task and collects a catalogue of the results. Each task does exactly
what ``orbitmass fit`` does: it reads the target, runs :class:`orbitmass.fit.Fit`
and writes the run folder ``OUT/runs/<name>`` (output contract). The driver
then writes ``OUT/catalogue.csv`` (and ``OUT/catalogue.parquet`` when pyarrow
is importable), one row per target.

dask is an optional dependency (``pip install "orbitmass[cluster]"``); it is
imported only inside the functions that need it, and no dask client is ever
made at import. Without a client or scheduler address, :func:`fit_batch`
starts a local cluster of worker processes (one thread each) for the duration
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
    stops the other targets.
Resume
    Rerunning the same batch skips every target whose run folder is complete
    (``summary.json`` and ``posterior.h5`` present, see
    :func:`orbitmass.io.rundir.is_complete_run`) and reads its row from its
    ``summary.json``; a complete run folder is never deleted or rewritten.
    Unfinished folders are redone: a folder without those files is replaced,
    and staging leftovers ``runs/.<name>.staging-*`` of an interrupted write
    are removed first (a run folder only counts once it is renamed into place).
    Options are not compared: a kept run keeps the seed and options it was
    made with (its seed is read back from its ``summary.json``).
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
"""

from __future__ import annotations

import argparse
import contextlib
import glob
import hashlib
import logging
import math
import os
import re
import shutil
import sys
import tomllib
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from orbitmass.exceptions import InputError, OrbitmassError

__all__ = [
    "BatchJob",
    "STATUS_CONVERGED",
    "STATUS_NOT_CONVERGED",
    "STATUS_FAILED",
    "ELEMENTS",
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
    "write_example_sample",
    "add_batch_parser",
    "cmd_batch",
]

log = logging.getLogger(__name__)

STATUS_CONVERGED = "converged"
STATUS_NOT_CONVERGED = "not converged"
STATUS_FAILED = "failed"

#: companion elements in the catalogue (summary.json keys of ``companions.<name>``)
ELEMENTS = ("period_yr", "eccentricity", "inclination_deg", "semimajor_axis_mas")
#: Fit options a batch may set (the seed is derived per target, progress bars are off on workers)
FIT_OPTIONS = ("n_walkers", "max_steps", "min_steps", "max_periods", "linear")
INSTALL_HINT = 'pip install "orbitmass[cluster]"'
_DIAGNOSTICS = ("ess_min", "ess_mass", "tau_max", "rhat_max", "n_steps", "wall_seconds")
_QUANTILES = ("median", "q16", "q84", "q2.5", "q97.5")


# ------------------------------------------------------------------ planning
@dataclass(frozen=True)
class BatchJob:
    """One target of a batch: everything a worker needs (plain, picklable values).

    Attributes
    ----------
    name : str
        Target name (``target.name`` of the target file, else the file stem);
        the seed derives from it.
    target_file : str
        Absolute path of the target file.
    run_dir : str
        Absolute path of the run folder to write.
    seed : int
        Seed of this target's fit.
    fit_options : dict
        Keyword arguments of :class:`orbitmass.fit.Fit` besides ``seed``.
    products : bool
        Write figures, tables and reports (False: summary, posterior and
        input copies only; ``orbitmass report RUN_DIR`` adds them later).
    """

    name: str
    target_file: str
    run_dir: str
    seed: int
    fit_options: dict = field(default_factory=dict)
    products: bool = True


def target_seed(batch_seed: int, name: str) -> int:
    """Seed of target ``name`` in a batch of seed ``batch_seed``.

    ``numpy.random.SeedSequence([batch_seed, w0, ..., w7])`` where ``w0..w7``
    are the SHA-256 digest of the UTF-8 name as big-endian 32-bit words; the
    first 32-bit word of its state, shifted right by one, is the seed
    (0 <= seed < 2**31).

    Parameters
    ----------
    batch_seed : int
        Seed of the batch (>= 0).
    name : str
        Target name.

    Returns
    -------
    int
        The target's seed, the same in every batch of that seed.

    Raises
    ------
    InputError
        ``batch_seed`` is negative or not a whole number.

    Examples
    --------
    >>> target_seed(0, "Tessaly 41 AB") == target_seed(0, "Tessaly 41 AB")
    True
    >>> target_seed(0, "Tessaly 41 AB") != target_seed(1, "Tessaly 41 AB")
    True
    """
    if isinstance(batch_seed, bool) or not isinstance(batch_seed, (int, np.integer)) or batch_seed < 0:
        raise InputError(f"the batch seed must be a whole number >= 0, got {batch_seed!r}", key="seed")
    digest = hashlib.sha256(name.encode("utf-8")).digest()
    words = [int.from_bytes(digest[k : k + 4], "big") for k in range(0, 32, 4)]
    state = np.random.SeedSequence([int(batch_seed), *words]).generate_state(1, dtype=np.uint32)
    return int(state[0]) >> 1


def expand_targets(patterns: Sequence[str | os.PathLike]) -> list[Path]:
    """Target files named by ``patterns`` (paths or glob patterns), in order, without repeats.

    A pattern with glob characters (``*``, ``?``, ``[``; ``**`` recurses) is
    expanded and sorted; a plain path is kept even if it does not exist (the
    fit then records it as failed).

    Raises
    ------
    InputError
        No patterns, or a glob pattern that matches no file.
    """
    if isinstance(patterns, (str, os.PathLike)):
        patterns = [patterns]
    if not patterns:
        raise InputError("no targets given; expected target files or glob patterns", key="targets")
    seen: set[Path] = set()
    out: list[Path] = []
    for pattern in patterns:
        text = os.fspath(pattern)
        if glob.has_magic(text):
            matches = sorted(Path(p) for p in glob.glob(text, recursive=True) if Path(p).is_file())
            if not matches:
                raise InputError(f"the pattern {text!r} matches no file", key="targets")
        else:
            matches = [Path(text)]
        for path in matches:
            resolved = path.resolve()
            if resolved not in seen:
                seen.add(resolved)
                out.append(resolved)
    return out


def _target_name(path: Path) -> str:
    """``target.name`` of a target file, or its stem when it has none or cannot be read."""
    try:
        with open(path, "rb") as fh:
            name = tomllib.load(fh).get("target", {}).get("name")
    except (OSError, tomllib.TOMLDecodeError, AttributeError):
        name = None
    return name.strip() if isinstance(name, str) and name.strip() else path.stem


def _folder_name(name: str) -> str:
    """A file-system-safe folder name for a target name (letters, digits, ``. _ -``)."""
    slug = re.sub(r"[^A-Za-z0-9._-]+", "-", name).strip("-.")
    return slug or "target"


def _check_fit_options(fit_options: Mapping[str, Any] | None) -> dict:
    options = dict(fit_options or {})
    for key in options:
        if key not in FIT_OPTIONS:
            raise InputError(
                f"unknown fit option {key!r}; a batch accepts {', '.join(FIT_OPTIONS)} "
                "(the seed is derived per target)",
                key=f"fit_options.{key}",
            )
    return options


def plan_batch(
    targets: Sequence[str | os.PathLike],
    out_dir: str | os.PathLike,
    *,
    seed: int = 0,
    fit_options: Mapping[str, Any] | None = None,
    products: bool = True,
) -> list[BatchJob]:
    """The jobs of a batch: one per target file, with its run folder and seed.

    Run folders are ``out_dir/runs/<name>`` with the target name made safe for
    file systems; when two targets give the same folder name, the later ones
    (in the order given) get ``-2``, ``-3``, ... appended.

    Parameters
    ----------
    targets : sequence of str or path
        Target files or glob patterns (see :func:`expand_targets`).
    out_dir : str or path
        Batch folder.
    seed : int
        Batch seed (see :func:`target_seed`).
    fit_options : mapping, optional
        Options of :class:`orbitmass.fit.Fit`: ``n_walkers``, ``max_steps``,
        ``min_steps``, ``max_periods``, ``linear``.
    products : bool
        Write figures, tables and reports into each run folder.

    Returns
    -------
    list of BatchJob

    Raises
    ------
    InputError
        No targets, a pattern matching nothing, a bad seed or an unknown fit option.
    """
    options = _check_fit_options(fit_options)
    runs = Path(out_dir).resolve() / "runs"
    jobs: list[BatchJob] = []
    used: set[str] = set()
    for path in expand_targets(targets):
        name = _target_name(path)
        folder = base = _folder_name(name)
        k = 2
        while folder.lower() in used:
            folder = f"{base}-{k}"
            k += 1
        if folder != base:
            log.warning("targets share the folder name %r; %s goes to runs/%s", base, path, folder)
        used.add(folder.lower())
        jobs.append(
            BatchJob(
                name=name,
                target_file=str(path),
                run_dir=str(runs / folder),
                seed=target_seed(seed, name),
                fit_options=options,
                products=products,
            )
        )
    return jobs


# ------------------------------------------------------------------ catalogue rows
def _block(summary_block: Mapping | None, prefix: str, keys: Sequence[str]) -> dict[str, float]:
    block = summary_block or {}
    return {f"{prefix}_{q}": _float(block.get(q)) for q in keys}


def _float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _base_row(job: BatchJob, status: str, error: str | None, seed: int | None, skipped: bool) -> dict:
    return {
        "name": job.name,
        "target_file": job.target_file,
        "run_dir": job.run_dir,
        "status": status,
        "error": error,
        "skipped": skipped,
        "seed": seed,
    }


def catalogue_row(job: BatchJob, summary: Mapping[str, Any], *, skipped: bool = False) -> dict[str, Any]:
    """One catalogue row from a run's ``summary.json`` content.

    Parameters
    ----------
    job : BatchJob
    summary : mapping
        The run's summary (output contract).
    skipped : bool
        True when the run folder was complete before this batch and was kept.

    Returns
    -------
    dict
        Plain values: identity, status, seed (as recorded in the run's
        provenance), mass (Msun) and distance (pc) quantiles, diagnostics, and
        per companion ``c<k>_name`` plus median/q16/q84 of :data:`ELEMENTS`.
    """
    diag = summary.get("diagnostics", {}) or {}
    converged = bool(diag.get("converged", False))
    seed = (summary.get("provenance", {}) or {}).get("seed", job.seed)
    row = _base_row(
        job,
        STATUS_CONVERGED if converged else STATUS_NOT_CONVERGED,
        None,
        int(seed) if seed is not None else None,
        skipped,
    )
    derived = summary.get("derived", {}) or {}
    row.update(_block(derived.get("mass_msun"), "mass_msun", _QUANTILES))
    row.update(_block(derived.get("distance_pc"), "distance_pc", _QUANTILES))
    row["converged"] = converged
    row.update({key: _float(diag.get(key)) for key in _DIAGNOSTICS})
    row["finished_utc"] = (summary.get("provenance", {}) or {}).get("created_utc")
    for k, (comp, elements) in enumerate((summary.get("companions", {}) or {}).items(), start=1):
        row[f"c{k}_name"] = comp
        for element in ELEMENTS:
            row.update(_block(elements.get(element), f"c{k}_{element}", _QUANTILES[:3]))
    return row


def failed_row(job: BatchJob, error: BaseException | str) -> dict[str, Any]:
    """The catalogue row of a target whose fit failed (message ``"<Type>: <text>"``)."""
    text = error if isinstance(error, str) else f"{type(error).__name__}: {error}"
    return _base_row(job, STATUS_FAILED, text, job.seed, False)


def _row_from_run(job: BatchJob, *, skipped: bool) -> dict[str, Any]:
    import json

    path = Path(job.run_dir) / "summary.json"
    try:
        summary = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        return failed_row(job, f"cannot read {path}: {exc}")
    return catalogue_row(job, summary, skipped=skipped)


# ------------------------------------------------------------------ the task
def fit_target(job: BatchJob) -> dict[str, Any]:
    """Fit one target and write its run folder; runs on a worker.

    Bad input (:class:`~orbitmass.exceptions.OrbitmassError`) gives a failed
    row; any other exception propagates so that dask retries the task. A run
    folder that is already complete is left alone and read back.

    Parameters
    ----------
    job : BatchJob

    Returns
    -------
    dict
        The target's catalogue row (see :func:`catalogue_row`).
    """
    from orbitmass.fit import Fit
    from orbitmass.io.rundir import is_complete_run, save_run

    run_dir = Path(job.run_dir)
    if is_complete_run(run_dir):
        return _row_from_run(job, skipped=True)
    try:
        fit = Fit(seed=job.seed, progress=False, **job.fit_options).fit(job.target_file)
        if is_complete_run(run_dir):  # finished meanwhile by a duplicate of this task: keep that one
            return _row_from_run(job, skipped=True)
        save_run(fit.results, run_dir, overwrite=True, products=job.products)
    except OrbitmassError as exc:
        log.warning("%s: %s", job.name, exc)
        return failed_row(job, exc)
    return catalogue_row(job, fit.summary)


# ------------------------------------------------------------------ dask
def _import_distributed():
    try:
        import distributed
    except ImportError:
        raise OrbitmassError(
            f"fitting a batch on dask needs dask.distributed, an optional dependency; install it with: {INSTALL_HINT}"
        ) from None
    return distributed


def _default_workers() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


@contextlib.contextmanager
def open_client(
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    dashboard_address: str = ":0",
) -> Iterator[Any]:
    """A dask client for a batch, closed (with its local cluster) on exit.

    Parameters
    ----------
    workers : int, optional
        Worker processes of a new local cluster (one thread each); default
        the number of usable CPU cores.
    scheduler : str, optional
        Address of a running scheduler (``tcp://host:8786``); nothing is
        started, the cluster stays up after the batch.
    dashboard_address : str
        Address of the dashboard (HTTP server) of a new local cluster;
        ``":0"``, the default, takes a free port (the usual ``":8787"``
        may be taken by another cluster). The link is
        ``client.dashboard_link``; the pages need bokeh.

    Yields
    ------
    distributed.Client

    Raises
    ------
    OrbitmassError
        dask.distributed is not installed, both or neither-valid options are
        given, or the scheduler cannot be reached.
    """
    distributed = _import_distributed()
    if workers is not None and scheduler is not None:
        raise InputError(
            "give either a number of workers (local cluster) or a scheduler address, not both",
            key="workers",
        )
    if scheduler is not None:
        try:
            client = distributed.Client(scheduler, timeout="20s")
        except (OSError, TimeoutError, ValueError) as exc:
            raise OrbitmassError(
                f"cannot reach the dask scheduler at {scheduler!r} ({exc}); start one "
                "with 'dask scheduler' and workers with 'dask worker ADDRESS'"
            ) from None
        try:
            yield client
        finally:
            client.close()
        return
    n = _default_workers() if workers is None else int(workers)
    if n < 1:
        raise InputError(f"workers must be at least 1, got {workers!r}", key="workers")
    cluster = distributed.LocalCluster(
        n_workers=n, threads_per_worker=1, processes=True, dashboard_address=dashboard_address
    )
    try:
        client = distributed.Client(cluster)
        try:
            yield client
        finally:
            client.close()
    finally:
        cluster.close()


def _remove_staging_leftovers(job: BatchJob) -> None:
    run_dir = Path(job.run_dir)
    if not run_dir.parent.is_dir():
        return
    for leftover in run_dir.parent.glob(f".{run_dir.name}.staging-*"):
        if leftover.is_dir():
            log.info("removing the staging leftover %s of an interrupted write", leftover)
            shutil.rmtree(leftover, ignore_errors=True)


def _show_progress(progress: bool | None) -> bool:
    return sys.stderr.isatty() if progress is None else bool(progress)


def _collect(
    client,
    jobs: list[tuple[int, BatchJob]],
    rows: dict[int, dict],
    *,
    fit_function: Callable,
    retries: int,
    progress: bool | None,
) -> None:
    """Submit ``jobs`` and fill ``rows`` (index in the batch -> row) as they finish."""
    from distributed import as_completed
    from tqdm.auto import tqdm

    futures = {}
    for index, job in jobs:
        fut = client.submit(
            fit_function,
            job,
            retries=retries,
            pure=False,
            key=f"orbitmass-fit-{Path(job.run_dir).name}-{os.urandom(4).hex()}",
        )
        futures[fut] = (index, job)
    slots = max(1, sum(client.nthreads().values()))
    n_failed = 0
    bar = tqdm(total=len(futures), desc="targets", unit="fit", disable=not _show_progress(progress))
    try:
        for fut in as_completed(list(futures)):
            index, job = futures[fut]
            if fut.status == "finished":
                rows[index] = fut.result()
            elif fut.status == "cancelled":
                rows[index] = failed_row(job, "the dask task was cancelled (scheduler or client lost)")
            else:
                exc = fut.exception()
                log.warning(
                    "%s failed: %s: %s",
                    job.name,
                    type(exc).__name__,
                    exc,
                    exc_info=(type(exc), exc, fut.traceback()),
                )
                rows[index] = failed_row(job, exc)
            n_failed += rows[index]["status"] == STATUS_FAILED
            bar.update(1)
            left = len(futures) - bar.n
            bar.set_postfix(failed=n_failed, running=min(left, slots), waiting=max(left - slots, 0))
    finally:
        bar.close()
        for fut in futures:
            if not fut.done():
                fut.cancel()


def fit_batch(
    targets: Sequence[str | os.PathLike],
    out_dir: str | os.PathLike,
    *,
    client: Any = None,
    workers: int | None = None,
    scheduler: str | None = None,
    seed: int = 0,
    fit_options: Mapping[str, Any] | None = None,
    products: bool = True,
    retries: int = 1,
    progress: bool | None = None,
    on_client: Callable[[Any], None] | None = None,
    fit_function: Callable[[BatchJob], dict] = fit_target,
) -> pd.DataFrame:
    """Fit every target on dask and write the run folders and the catalogue.

    Parameters
    ----------
    targets : sequence of str or path
        Target files or glob patterns (``"survey/*/target.toml"``).
    out_dir : str or path
        Batch folder: run folders go to ``out_dir/runs/<name>``, the catalogue
        to ``out_dir/catalogue.csv`` (+ ``.parquet`` with pyarrow).
    client : distributed.Client, optional
        Use this client (it is not closed). Otherwise one is opened from
        ``workers`` / ``scheduler`` (see :func:`open_client`) only if some
        target needs fitting, and closed at the end.
    workers : int, optional
        Worker processes of a local cluster (default: usable CPU cores).
    scheduler : str, optional
        Address of a running dask scheduler, e.g. ``"tcp://10.0.0.5:8786"``.
    seed : int
        Batch seed; target seeds derive from it (:func:`target_seed`).
    fit_options : mapping, optional
        ``n_walkers``, ``max_steps``, ``min_steps``, ``max_periods``, ``linear`` of
        :class:`orbitmass.fit.Fit`.
    products : bool
        Write figures, tables and reports into each run folder.
    retries : int
        Extra attempts for a task that raised an unexpected exception.
    progress : bool or None
        tqdm bar of finished targets (postfix: failed, running, waiting);
        ``None`` shows it only on a terminal.
    on_client : callable, optional
        Called with the client once it is connected (e.g. to show
        ``client.dashboard_link``).
    fit_function : callable
        Runs one :class:`BatchJob` on a worker and returns its row; default
        :func:`fit_target`. Must be picklable and importable on the workers.

    Returns
    -------
    pandas.DataFrame
        The catalogue, one row per target in input order (see
        :func:`catalogue_frame`).

    Raises
    ------
    OrbitmassError
        Bad options, no targets, or dask.distributed missing (then the
        message says ``pip install "orbitmass[cluster]"``). Failures of
        single targets are recorded in the catalogue, never raised.
    KeyboardInterrupt
        After writing a catalogue in which unfinished targets are failed with
        the note to rerun the command.
    """
    if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
        raise InputError(f"retries must be a whole number >= 0, got {retries!r}", key="retries")
    jobs = plan_batch(targets, out_dir, seed=seed, fit_options=fit_options, products=products)
    out = Path(out_dir)
    (out / "runs").mkdir(parents=True, exist_ok=True)
    from orbitmass.io.rundir import is_complete_run

    rows: dict[int, dict] = {}
    todo: list[tuple[int, BatchJob]] = []
    for index, job in enumerate(jobs):
        if is_complete_run(Path(job.run_dir)):
            rows[index] = _row_from_run(job, skipped=True)
            if rows[index]["seed"] != job.seed and rows[index]["status"] != STATUS_FAILED:
                log.warning(
                    "%s: keeping the complete run %s made with seed %s (this batch would use %s); remove it to refit",
                    job.name,
                    job.run_dir,
                    rows[index]["seed"],
                    job.seed,
                )
        else:
            _remove_staging_leftovers(job)
            todo.append((index, job))
    log.info("%d targets: %d complete runs kept, %d to fit", len(jobs), len(jobs) - len(todo), len(todo))
    try:
        if todo:
            with contextlib.ExitStack() as stack:
                if client is None:
                    client = stack.enter_context(open_client(workers=workers, scheduler=scheduler))
                log.info("dask dashboard: %s", getattr(client, "dashboard_link", None))
                if on_client is not None:
                    on_client(client)
                _collect(
                    client,
                    todo,
                    rows,
                    fit_function=fit_function,
                    retries=retries,
                    progress=progress,
                )
    except KeyboardInterrupt:
        for index, job in todo:
            rows.setdefault(
                index,
                failed_row(job, "interrupted before this target finished; rerun the same command to resume"),
            )
        write_catalogue(catalogue_frame([rows[i] for i in range(len(jobs))]), out)
        raise
    catalogue = catalogue_frame([rows[i] for i in range(len(jobs))])
    write_catalogue(catalogue, out)
    return catalogue


# ------------------------------------------------------------------ the table
def catalogue_frame(rows: Sequence[Mapping[str, Any]]) -> pd.DataFrame:
    """The catalogue table from rows, with a fixed column order and types.

    Columns: ``name``, ``target_file``, ``run_dir``, ``status`` (converged /
    not converged / failed), ``error``, ``skipped`` (complete run kept from an
    earlier batch), ``seed``; ``mass_msun_*`` and ``distance_pc_*``
    (``median``, ``q16``, ``q84``, ``q2.5``, ``q97.5``; Msun and pc);
    ``converged``, ``ess_min``, ``ess_mass``, ``tau_max``, ``rhat_max``,
    ``n_steps``, ``wall_seconds``, ``finished_utc`` (UTC, ISO 8601); then per
    companion k (at least one set) ``c<k>_name`` and ``c<k>_<element>_median``
    / ``_q16`` / ``_q84`` for ``period_yr`` (rest frame), ``eccentricity``,
    ``inclination_deg`` and ``semimajor_axis_mas``. Failed targets have empty
    result columns.
    """
    n_comp = 1
    for row in rows:
        while f"c{n_comp + 1}_name" in row:
            n_comp += 1
    columns = ["name", "target_file", "run_dir", "status", "error", "skipped", "seed"]
    columns += [f"{q}_{s}" for q in ("mass_msun", "distance_pc") for s in _QUANTILES]
    columns += ["converged", *_DIAGNOSTICS, "finished_utc"]
    for k in range(1, n_comp + 1):
        columns.append(f"c{k}_name")
        columns += [f"c{k}_{e}_{s}" for e in ELEMENTS for s in _QUANTILES[:3]]
    frame = pd.DataFrame([dict(row) for row in rows], columns=columns)
    text = {"name", "target_file", "run_dir", "status", "error", "finished_utc"} | {
        f"c{k}_name" for k in range(1, n_comp + 1)
    }
    for col in columns:
        if col in text:
            frame[col] = frame[col].astype("string")
        elif col == "seed":
            frame[col] = frame[col].astype("Int64")
        elif col == "converged":
            frame[col] = frame[col].astype("boolean")
        elif col == "skipped":
            frame[col] = frame[col].fillna(False).astype(bool)
        else:
            frame[col] = frame[col].astype(float)
    return frame


def _replace_atomic(write: Callable[[str], None], path: Path) -> None:
    # a fresh name beside the target (not mkstemp, which would make the file private)
    tmp = str(path.with_name(f".{path.name}.{os.getpid()}-{os.urandom(4).hex()}.tmp"))
    try:
        write(tmp)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


def write_catalogue(catalogue: pd.DataFrame, out_dir: str | os.PathLike) -> list[Path]:
    """Write ``catalogue.csv`` (and ``catalogue.parquet`` if pyarrow imports) atomically.

    Each file is written to a temporary file beside it and renamed into
    place, so a reader never sees half a table.

    Returns
    -------
    list of Path
        The files written.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    written = [out / "catalogue.csv"]
    _replace_atomic(lambda tmp: catalogue.to_csv(tmp, index=False), written[0])
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        if (out / "catalogue.parquet").exists():
            log.warning(
                "pyarrow is not installed: %s is from an earlier batch and out of date",
                out / "catalogue.parquet",
            )
        return written
    written.append(out / "catalogue.parquet")
    _replace_atomic(lambda tmp: catalogue.to_parquet(tmp, index=False, engine="pyarrow"), written[1])
    return written


# ------------------------------------------------------------------ example sample
def write_example_sample(
    data_dir: str | os.PathLike, n_targets: int = 8, *, seed: int = 0, n_epochs: int = 16
) -> list[Path]:
    """Write a small invented sample of visual binaries to try a batch on.

    Each target ``data_dir/<name>/target.toml`` is an invented binary
    ("Orrin 101 AB", "Orrin 102 AB", ...; names and numbers made up) with
    ``n_epochs`` east/north offsets (2 mas errors) over about 1.3 orbits, a
    parallax prior (1 % error) and no velocities, so each fits in seconds.

    Parameters
    ----------
    data_dir : str or path
        Folder to write into (created if needed; existing targets of the same
        names are not overwritten).
    n_targets : int
        Number of targets.
    seed : int
        Seed of the invented truths and noise.
    n_epochs : int
        Epochs per target.

    Returns
    -------
    list of Path
        The target files, in name order.

    Raises
    ------
    OrbitmassError
        A target file to write exists already.
    """
    from orbitmass.demo.simulate import TrueOrbit, simulate, write_positions_csv

    rng = np.random.default_rng(seed)
    data_dir = Path(data_dir)
    paths = []
    for k in range(n_targets):
        name = f"Orrin {101 + k} AB"
        period_yr = float(rng.uniform(6.0, 25.0))
        parallax_mas = float(rng.uniform(25.0, 60.0))
        truth = TrueOrbit(
            mass_msun=float(rng.uniform(0.9, 3.0)),
            distance_pc=1000.0 / parallax_mas,
            period_yr=period_yr,
            eccentricity=float(rng.uniform(0.1, 0.6)),
            inclination_deg=float(np.degrees(np.arccos(rng.uniform(-0.9, 0.9)))),
            arg_periastron_deg=float(rng.uniform(0.0, 360.0)),
            ascending_node_deg=float(rng.uniform(0.0, 360.0)),
            periastron_time=2010.0 + float(rng.uniform(0.0, period_yr)),
        )
        t = np.sort(2026.0 - rng.uniform(0.0, 1.3 * period_yr, n_epochs))
        sim = simulate(truth, t)
        folder = data_dir / _folder_name(name)
        target = folder / "target.toml"
        if target.exists():
            raise OrbitmassError(f"{target}: exists; choose an empty folder for the example sample")
        folder.mkdir(parents=True, exist_ok=True)
        write_positions_csv(
            folder / "positions.csv",
            t,
            sim["east_mas"] + rng.normal(0.0, 2.0, t.size),
            sim["north_mas"] + rng.normal(0.0, 2.0, t.size),
            2.0,
            comment=f"{name}: relative positions (invented data)",
        )
        target.write_text(
            f"# {name}: an invented visual binary, astrometry only, with a parallax.\n"
            f'[target]\nname = "{name}"\nreference_epoch = 2020.0\n\n'
            '[central]\nmass = { dist = "log-uniform", low = "0.05 solMass", '
            'high = "50 solMass" }\n\n'
            f'[distance]\nparallax = {{ dist = "normal", mean = "{parallax_mas:.3f} mas", '
            f'sd = "{0.01 * parallax_mas:.3f} mas" }}\n\n'
            '[[companion]]\nname = "B"\nastrometry = "positions.csv"\n'
            'period = { dist = "log-uniform", low = "1 yr", high = "200 yr" }\n',
            encoding="utf-8",
        )
        paths.append(target)
    return paths


# ------------------------------------------------------------------ command line
def add_batch_parser(subparsers) -> argparse.ArgumentParser:
    """Add the ``batch`` subcommand to the ``orbitmass`` argument parser.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``parser.add_subparsers()``.

    Returns
    -------
    argparse.ArgumentParser
        The subcommand's parser (its handler is :func:`cmd_batch`).
    """
    from orbitmass.cli import _positive_int, _seed

    def _retries(text: str) -> int:
        return 0 if text.strip() == "0" else _positive_int(text)

    p = subparsers.add_parser(
        "batch",
        help="fit many targets on a dask cluster and write a catalogue",
        description="Fit every target file (or glob pattern, quoted) on dask.distributed: a local "
        "cluster of N worker processes, or a running cluster at --scheduler. Each target gets "
        "the run folder DIR/runs/<name>, as 'orbitmass fit' writes it; DIR/catalogue.csv (and "
        ".parquet with pyarrow) lists every target's mass, distance, elements, diagnostics "
        "and status. Rerunning the same command skips finished targets. Needs "
        f"{INSTALL_HINT}.",
    )
    p.add_argument("targets", nargs="+", metavar="TARGET_OR_GLOB", help="target files or glob patterns")
    p.add_argument("--out", required=True, metavar="DIR", help="batch folder (runs/ and catalogue)")
    where = p.add_mutually_exclusive_group()
    where.add_argument(
        "--workers",
        type=_positive_int,
        default=None,
        metavar="N",
        help="worker processes of a local cluster (default: CPU cores)",
    )
    where.add_argument(
        "--scheduler",
        default=None,
        metavar="ADDRESS",
        help="address of a running dask scheduler, e.g. tcp://host:8786",
    )
    p.add_argument(
        "--seed",
        type=_seed,
        default=0,
        metavar="N",
        help="batch seed; each target's seed derives from it and the target name (default 0)",
    )
    p.add_argument(
        "--walkers",
        type=_positive_int,
        default=None,
        metavar="N",
        help="ensemble size (default max(64, 4 x parameters))",
    )
    p.add_argument(
        "--max-steps",
        type=_positive_int,
        default=20000,
        metavar="N",
        help="step cap of each fit (default 20000)",
    )
    p.add_argument(
        "--retries",
        type=_retries,
        default=1,
        metavar="N",
        help="extra attempts for a fit that crashes unexpectedly (default 1)",
    )
    p.add_argument(
        "--no-figures",
        action="store_true",
        help="write only summary.json, posterior.h5 and the inputs per run (faster); "
        "'orbitmass report RUN_DIR' adds figures and reports later",
    )
    p.add_argument("--no-progress", action="store_true", help="no progress bar")
    p.add_argument("--no-fast-path", action="store_true",
                   help="sample every element even where the astrometry-only fast path applies")
    return p


def cmd_batch(args: argparse.Namespace) -> int:
    """Run the ``batch`` subcommand; returns the exit code.

    0 every target converged; 1 some did not converge or failed (see the
    catalogue); errors of the whole batch raise
    :class:`~orbitmass.exceptions.OrbitmassError` (exit code 2 in the CLI).
    """
    # Command-line output: these two functions are the CLI's, kept here beside the batch code.
    options: dict[str, Any] = {"max_steps": args.max_steps}
    if args.no_fast_path:
        options["linear"] = False
    if args.walkers is not None:
        options["n_walkers"] = args.walkers

    def show_dashboard(client) -> None:
        link = getattr(client, "dashboard_link", None)
        if link:
            try:
                import bokeh  # noqa: F401

                note = ""
            except ImportError:
                note = " (pip install bokeh to see it)"
            print(f"dask dashboard: {link}{note}", file=sys.stderr)  # noqa: T201

    catalogue = fit_batch(
        args.targets,
        args.out,
        workers=args.workers,
        scheduler=args.scheduler,
        seed=args.seed,
        fit_options=options,
        products=not args.no_figures,
        retries=args.retries,
        progress=False if args.no_progress else None,
        on_client=show_dashboard,
    )
    counts = catalogue["status"].value_counts()
    n_conv = int(counts.get(STATUS_CONVERGED, 0))
    n_not = int(counts.get(STATUS_NOT_CONVERGED, 0))
    n_fail = int(counts.get(STATUS_FAILED, 0))
    n_kept = int(catalogue["skipped"].sum())
    summary = (
        f"{len(catalogue)} targets: {n_conv} converged, {n_not} not converged, {n_fail} failed "
        f"({n_kept} complete runs kept from before)"
    )
    print(summary)  # noqa: T201
    for row in catalogue[catalogue["status"] == STATUS_FAILED].itertuples():
        print(f"failed: {row.name}: {row.error}", file=sys.stderr)  # noqa: T201
    print(f"catalogue: {Path(args.out) / 'catalogue.csv'}")  # noqa: T201
    return 0 if n_conv == len(catalogue) else 1
