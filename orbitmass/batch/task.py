"""The worker task of a batch: fit one target and write its run folder.

:func:`fit_target` does what ``orbitmass fit`` does for one :class:`BatchJob`.
:func:`run_task` is what a worker runs: the fit function itself, or, when the
job has a time limit, the fit function in a child process that is killed at
the limit (a thread cannot be stopped, and neither the initialisation nor the
fast path can be interrupted from inside), so the worker is free again and the
target is recorded as failed with the reason ``"timeout"``.
"""

from __future__ import annotations

import logging
import os
import pickle
import shutil
import subprocess
import sys
import tempfile
import threading
import time
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any

from orbitmass.batch.catalogue import (
    REASON_FOLDER,
    REASON_INPUT,
    REASON_TIMEOUT,
    catalogue_row,
    failed_row,
)
from orbitmass.batch.plan import RUN_MATCHES, RUN_OTHER_TARGET, BatchJob, read_summary, run_state
from orbitmass.exceptions import OrbitmassError, OrbitmassWarning, RunFolderError
from orbitmass.fit import Fit
from orbitmass.io.rundir import save_run
from orbitmass.io.target import read_target

__all__ = ["fit_target", "job_fit_options", "run_task", "remove_staging_leftovers", "kept_row"]

log = logging.getLogger(__name__)

#: how the child process of a timed fit is started (``-c``, not ``-m``: the module is imported already)
_CHILD = "from orbitmass.batch.task import child_main; child_main()"


def kept_row(job: BatchJob) -> dict[str, Any] | None:
    """The row of a complete run of this very target (path and contents), or None when there is none."""
    summary = read_summary(job.run_dir)
    if summary is None or run_state(job, summary) != RUN_MATCHES:
        return None
    return catalogue_row(job, summary, skipped=True)


def fit_target(job: BatchJob) -> dict[str, Any]:
    """Fit one target and write its run folder; runs on a worker.

    Bad input (:class:`~orbitmass.exceptions.OrbitmassError`) gives a failed
    row; any other exception propagates so that dask retries the task. A
    complete run of this target (same file, same contents) is left alone and
    read back; a run of another target in the folder is never overwritten.

    Parameters
    ----------
    job : BatchJob

    Returns
    -------
    dict
        The target's catalogue row (see :func:`~orbitmass.batch.catalogue.catalogue_row`).
    """
    kept = kept_row(job)
    if kept is not None:
        return kept
    if run_state(job) == RUN_OTHER_TARGET:
        return failed_row(job, f"{job.run_dir} holds the run of another target file; it is not overwritten",
                          REASON_FOLDER)
    note = None
    try:
        target = read_target(job.target_file)
        with warnings.catch_warnings(record=True) as caught:  # the catalogue and the run folder say it all
            warnings.simplefilter("always", OrbitmassWarning)
            fit = Fit(progress=False, **job_fit_options(job, target.fit_options.as_fit_kwargs())).fit(target)
        for w in caught:
            if issubclass(w.category, OrbitmassWarning):
                log.info("%s: %s", job.name, w.message)
            else:
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno, source=w.source)
        kept = kept_row(job)
        if kept is not None:  # finished meanwhile by a duplicate of this task: keep that one
            return kept
        try:
            save_run(fit.results, Path(job.run_dir), overwrite=True, products=job.products)
        except RunFolderError as exc:
            if kept_row(job) is None:  # not published: a real failure
                raise
            # the run is saved; only its figures or reports failed: done, with a note
            log.warning("%s: %s", job.name, exc)
            note = f"figures and reports not written: {exc}"
    except OrbitmassError as exc:
        log.warning("%s: %s", job.name, exc)
        return failed_row(job, exc, REASON_INPUT)
    row = catalogue_row(job, fit.summary)
    row["note"] = note
    return row


def job_fit_options(job: BatchJob, file_options: dict[str, Any]) -> dict[str, Any]:
    """Keyword arguments of :class:`orbitmass.fit.Fit` for ``job``: the target's ``[fit]`` table
    (``file_options``, from ``FitOptions.as_fit_kwargs()``), overridden by the batch's options;
    the seed is the job's, unless the batch seed was not given and the table names one."""
    options = dict(file_options)
    if job.seed_given or "seed" not in options:
        options["seed"] = job.seed
    options.update(job.fit_options)
    return options


def remove_staging_leftovers(job: BatchJob) -> None:
    """Remove ``runs/.<name>.staging-*`` folders left by an interrupted write of this job's run."""
    run_dir = Path(job.run_dir)
    if not run_dir.parent.is_dir():
        return
    for leftover in run_dir.parent.glob(f".{run_dir.name}.staging-*"):
        if leftover.is_dir():
            log.info("removing the staging leftover %s of an interrupted write", leftover)
            shutil.rmtree(leftover, ignore_errors=True)


def _dumps(obj: Any) -> bytes:
    try:
        import cloudpickle  # optional dependency (comes with dask): functions shipped by value
    except ImportError:
        return pickle.dumps(obj)
    return cloudpickle.dumps(obj)


def run_task(fit_function: Callable[[BatchJob], dict], job: BatchJob) -> dict[str, Any]:
    """Run ``fit_function(job)``, within ``job.timeout`` seconds when it is set.

    With a time limit the function runs in a child process (same Python), which
    is killed when the limit passes; the target is then recorded as failed with
    the reason ``"timeout"`` and any half-written run folder is removed.
    Exceptions of the function are raised again here (so that dask retries
    them); a child that dies raises :class:`RuntimeError`.
    """
    if job.timeout is None:
        return fit_function(job)
    fd, result_path = tempfile.mkstemp(prefix="orbitmass-task-", suffix=".pickle")
    os.close(fd)
    start = time.monotonic()
    proc = subprocess.Popen([sys.executable, "-c", _CHILD, result_path], stdin=subprocess.PIPE)
    try:
        try:
            proc.communicate(_dumps((fit_function, job)), timeout=job.timeout)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
            remove_staging_leftovers(job)
            log.warning("%s: no result within %g s; the fit was stopped", job.name, job.timeout)
            return failed_row(job, f"timeout: the fit took longer than the limit of {job.timeout:g} s "
                                   f"(stopped after {time.monotonic() - start:.0f} s)", REASON_TIMEOUT)
        with open(result_path, "rb") as fh:
            data = fh.read()
        if proc.returncode != 0 or not data:
            raise RuntimeError(f"the fit process of {job.name!r} ended with exit code {proc.returncode} "
                               "and no result")
        kind, value = pickle.loads(data)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        os.unlink(result_path)
    if kind == "error":
        raise value
    return value


def _exit_with_parent(parent: int) -> None:
    while True:
        if os.getppid() != parent:  # the worker is gone: stop this fit too
            os._exit(1)
        time.sleep(0.5)


def child_main() -> None:
    """Body of the child process of :func:`run_task` (reads its task from stdin)."""
    threading.Thread(target=_exit_with_parent, args=(os.getppid(),), daemon=True).start()
    result_path = sys.argv[1]
    fit_function, job = pickle.loads(sys.stdin.buffer.read())
    try:
        out = ("ok", fit_function(job))
    except Exception as exc:  # handed back to the worker, which raises it again
        out = ("error", exc)
    try:
        data = _dumps(out)
    except Exception as exc:  # an exception that cannot be pickled: its text survives
        data = pickle.dumps(("error", RuntimeError(f"{type(exc).__name__}: {out[1]}")))
    with open(result_path, "wb") as fh:
        fh.write(data)
