"""The batch driver: :func:`fit_batch` plans the jobs, keeps finished runs, fits the rest on dask.

See :mod:`orbitmass.batch` for the behaviour (seeds, failures, time limits,
resume, interruption).
"""

from __future__ import annotations

import contextlib
import logging
import os
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from orbitmass.batch.catalogue import (
    REASON_INTERRUPTED,
    catalogue_frame,
    failed_row,
    write_catalogue,
)
from orbitmass.batch.cluster import collect, open_client
from orbitmass.batch.plan import RUN_STALE, BatchJob, plan_batch, run_state
from orbitmass.batch.task import fit_target, kept_row, remove_staging_leftovers
from orbitmass.exceptions import InputError, RunFolderError

__all__ = ["fit_batch"]

log = logging.getLogger(__name__)


def fit_batch(
    targets: Sequence[str | os.PathLike],
    out_dir: str | os.PathLike,
    *,
    client: Any = None,
    workers: int | None = None,
    scheduler: str | None = None,
    seed: int | None = 0,
    fit_options: Mapping[str, Any] | None = None,
    products: bool = True,
    retries: int = 1,
    progress: bool | None = None,
    on_client: Callable[[Any], None] | None = None,
    fit_function: Callable[[BatchJob], dict] = fit_target,
    timeout: float | None = None,
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
    seed : int or None
        Batch seed; target seeds derive from it (:func:`target_seed`). None:
        not given, so each target's ``[fit] seed`` is used where it has one
        (else the seed derived from 0).
    fit_options : mapping, optional
        ``n_walkers``, ``max_steps``, ``min_steps``, ``max_periods``, ``linear`` of
        :class:`orbitmass.fit.Fit`; they override each target's ``[fit]`` table.
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
    timeout : float, optional
        Wall-clock limit of each target's fit in seconds; a fit still running
        then is stopped (its worker is freed) and the target is recorded as
        failed with the reason ``"timeout"``. Default: no limit.

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
    RunFolderError
        ``out_dir`` is a file or cannot be written; raised before any fit.
    KeyboardInterrupt
        After writing a catalogue in which unfinished targets are failed with
        the note to rerun the command.
    """
    if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
        raise InputError(f"retries must be a whole number >= 0, got {retries!r}", key="retries")
    out = Path(out_dir)
    _check_batch_folder(out)
    jobs = plan_batch(targets, out, seed=seed, fit_options=fit_options, products=products, timeout=timeout)
    rows: dict[int, dict] = {}
    todo: list[tuple[int, BatchJob]] = []
    for index, job in enumerate(jobs):
        kept = kept_row(job)
        if kept is not None:
            rows[index] = kept
            if kept["seed"] != job.seed:
                log.warning(
                    "%s: keeping the complete run %s made with seed %s (this batch would use %s); remove it to refit",
                    job.name,
                    job.run_dir,
                    kept["seed"],
                    job.seed,
                )
            continue
        if run_state(job) == RUN_STALE:
            log.warning("%s: the target file or its tables changed since the run in %s (or cannot be read); "
                        "fitting it again", job.name, job.run_dir)
        remove_staging_leftovers(job)
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
                collect(
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
                failed_row(job, "interrupted before this target finished; rerun the same command to resume",
                           REASON_INTERRUPTED),
            )
        write_catalogue(catalogue_frame([rows[i] for i in range(len(jobs))]), out)
        raise
    catalogue = catalogue_frame([rows[i] for i in range(len(jobs))])
    write_catalogue(catalogue, out)
    return catalogue


def _check_batch_folder(out: Path) -> None:
    """Make ``out/runs``, or say in one line why the batch folder cannot be used."""
    if out.exists() and not out.is_dir():
        raise RunFolderError(f"{out}: exists and is not a folder; the batch folder must be a folder (new or "
                             "from an earlier batch)")
    runs = out / "runs"
    if runs.exists() and not runs.is_dir():
        raise RunFolderError(f"{runs}: exists and is not a folder; a batch folder keeps its run folders there")
    try:
        runs.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise RunFolderError(f"{out}: cannot create the batch folder ({exc.strerror or exc})") from None
    if not os.access(runs, os.W_OK | os.X_OK) or not os.access(out, os.W_OK | os.X_OK):
        raise RunFolderError(f"{out}: the batch folder is not writable")
