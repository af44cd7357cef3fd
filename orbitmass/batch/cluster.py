"""The dask side of a batch: the client, a local cluster, submitting and collecting tasks.

This is the only module of orbitmass that imports dask. dask.distributed is an
optional dependency (``pip install "orbitmass[cluster]"``), so it is imported
inside the functions that need it, never at import of orbitmass or of
:mod:`orbitmass.batch`, and no client is made at import.
"""

from __future__ import annotations

import contextlib
import logging
import os
import signal
import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

from tqdm.auto import tqdm

from orbitmass.batch.catalogue import REASON_CANCELLED, REASON_CRASH, STATUS_FAILED, failed_row
from orbitmass.batch.plan import BatchJob
from orbitmass.batch.task import run_task
from orbitmass.exceptions import InputError, OrbitmassError

__all__ = ["INSTALL_HINT", "open_client", "collect", "quiet_shutdown", "silence_dask_logging"]

log = logging.getLogger(__name__)

INSTALL_HINT = 'pip install "orbitmass[cluster]"'


def _import_distributed():
    try:
        import distributed  # optional dependency: only a batch needs it
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
            # Ctrl-C in a terminal reaches every process of the group: the local workers ignore it, so
            # that only this process stops the batch and closes them (no half-dead cluster, no traceback)
            client.register_plugin(_ignore_sigint_plugin(distributed), name="orbitmass-ignore-sigint")
            yield client
        except KeyboardInterrupt:
            # the workers are about to be closed with tasks running: what they would log about it is noise
            with contextlib.suppress(Exception):
                client.run(silence_dask_logging)
            raise
        finally:
            with quiet_shutdown():
                client.close()
    finally:
        with quiet_shutdown():
            cluster.close()


def _ignore_sigint_plugin(distributed):
    """A worker plugin that makes a worker process ignore SIGINT (its setup runs in the main thread)."""

    class IgnoreSigint(distributed.WorkerPlugin):
        def setup(self, worker):
            signal.signal(signal.SIGINT, signal.SIG_IGN)

    return IgnoreSigint()


def silence_dask_logging() -> None:
    """Only errors from dask's loggers in this process (run on the workers of an interrupted batch)."""
    for name in ("distributed", "tornado", "asyncio"):
        logging.getLogger(name).setLevel(logging.ERROR)


@contextlib.contextmanager
def quiet_shutdown() -> Iterator[None]:
    """Closing a client or cluster: errors of connections already gone are logged at debug level only.

    After Ctrl-C (or a lost scheduler) closing may raise or log ``CommClosedError``
    tracebacks from dask; the batch has recorded its rows already, so they are noise.
    """
    loggers = [logging.getLogger(name) for name in ("distributed", "tornado", "asyncio")]
    levels = [lg.level for lg in loggers]
    for lg in loggers:
        lg.setLevel(logging.CRITICAL)
    try:
        yield
    except Exception as exc:  # closing failed: nothing is left to save
        log.debug("closing the dask client or cluster: %s: %s", type(exc).__name__, exc)
    finally:
        for lg, level in zip(loggers, levels, strict=True):
            lg.setLevel(level)


def _show_progress(progress: bool | None) -> bool:
    return sys.stderr.isatty() if progress is None else bool(progress)


def collect(
    client,
    jobs: list[tuple[int, BatchJob]],
    rows: dict[int, dict],
    *,
    fit_function: Callable,
    retries: int,
    progress: bool | None,
) -> None:
    """Submit ``jobs`` and fill ``rows`` (index in the batch -> row) as they finish."""
    distributed = _import_distributed()
    futures = {}
    for index, job in jobs:
        fut = client.submit(
            run_task,
            fit_function,
            job,
            retries=retries,
            pure=False,
            key=f"orbitmass-fit-{Path(job.run_dir).name}-{os.urandom(4).hex()}",
        )
        futures[fut] = (index, job)
    slots = max(1, sum(client.nthreads().values()))
    n_failed = 0
    interrupted = False
    bar = tqdm(total=len(futures), desc="targets", unit="fit", disable=not _show_progress(progress))
    try:
        for fut in distributed.as_completed(list(futures)):
            index, job = futures[fut]
            if fut.status == "finished":
                rows[index] = fut.result()
            elif fut.status == "cancelled":
                rows[index] = failed_row(job, "the dask task was cancelled (scheduler or client lost)",
                                         REASON_CANCELLED)
            else:
                exc = fut.exception()
                log.warning(
                    "%s failed: %s: %s",
                    job.name,
                    type(exc).__name__,
                    exc,
                    exc_info=(type(exc), exc, fut.traceback()),
                )
                rows[index] = failed_row(job, exc, REASON_CRASH)
            n_failed += rows[index]["status"] == STATUS_FAILED
            bar.update(1)
            left = len(futures) - bar.n
            bar.set_postfix(failed=n_failed, running=min(left, slots), waiting=max(left - slots, 0))
    except KeyboardInterrupt:
        # no cancelling then: closing the client releases the futures and closing a local cluster
        # stops its workers; cancelling running tasks first only makes the workers log about it
        interrupted = True
        raise
    finally:
        bar.close()
        if not interrupted:
            with contextlib.suppress(Exception):  # the scheduler may be gone already
                client.cancel([fut for fut in futures if not fut.done()])
