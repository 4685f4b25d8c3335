"""Connecting to Dask: a ``LocalCluster`` on this machine's loopback interface, or an existing
scheduler at ``tcp://host:port``; and waiting on futures with progress and cancel.

``sim.distributed`` is the only sub-package of HazardTrace that imports Dask (import-linter contract
in pyproject.toml); Dask is imported inside the functions, so importing the package does not.
"""

from __future__ import annotations

import logging
import os
import time
from collections.abc import Callable, Iterator, Sequence
from typing import Any

from ..engine import CancelToken, SimulationCancelled, cancel_requested
from ..problems import ValidationError

__all__ = ["SchedulerError", "connect", "local_cluster", "completed", "cancel_futures", "POLL_SECONDS",
           "CONNECT_TIMEOUT", "WORKER_MALLOC_ENV"]

POLL_SECONDS = 0.02
CONNECT_TIMEOUT = "10s"

WORKER_MALLOC_ENV = {"MALLOC_MMAP_THRESHOLD_": str(32 * 2**20), "MALLOC_TRIM_THRESHOLD_": str(2**30)}
"""glibc allocator settings of local worker processes (set before they start, Dask's
``distributed.nanny.pre-spawn-environ``): arrays up to 32 MiB come from the heap, and freed heap
memory is kept for the next task up to 1 GiB. Dask's default for workers (``MALLOC_TRIM_THRESHOLD_``
65536, which also fixes the mmap threshold at 128 KiB) hands every freed multi-megabyte array back
to the system, so each block's fresh arrays are page-faulted in again: measured on the demo PSA, 80%
more CPU time per block, all of it in the kernel (benchmarks/RESULTS.md, issue 14). A worker keeps
its peak heap instead (a few hundred MB for a block of 100,000 patients)."""


class SchedulerError(ValidationError):
    """The Dask scheduler address cannot be used (unreachable, refused, not a scheduler)."""


def connect(scheduler: str | None, workers: int, processes: bool = True):
    """(client, cluster or None) for the scheduler address, or for a new loopback ``LocalCluster`` of
    ``workers`` single-threaded workers (processes, or threads of this process); the caller closes
    both.

    Raises
    ------
    SchedulerError : the address is not a ``tcp://...`` address or no scheduler answers there
        within :data:`CONNECT_TIMEOUT`.
    """
    from dask.distributed import Client

    if scheduler is None:
        cluster = local_cluster(workers, processes)
        try:
            return Client(cluster), cluster
        except BaseException:
            cluster.close()
            raise
    if not isinstance(scheduler, str) or "://" not in scheduler:
        raise SchedulerError(("scheduler",), "must be a Dask scheduler address such as tcp://host:8786", scheduler)
    try:
        return Client(scheduler, timeout=CONNECT_TIMEOUT), None
    except (OSError, TimeoutError, ValueError) as err:
        raise SchedulerError(("scheduler",), f"must be the address of a running Dask scheduler (cannot connect: "
                             f"{type(err).__name__}: {err})", scheduler) from None


def local_cluster(workers: int, processes: bool = True):
    """A ``LocalCluster`` of ``workers`` single-threaded workers: processes listening on the loopback
    interface only, started with :data:`WORKER_MALLOC_ENV`, or threads of this process (which talk
    in-process). The caller closes it."""
    import dask
    from dask.distributed import LocalCluster

    where = {"host": "127.0.0.1"} if processes else {}
    environ = {f"distributed.nanny.pre-spawn-environ.{k}": v for k, v in WORKER_MALLOC_ENV.items()}
    # Dask lets this process's environment override the configuration, and its nannies write their
    # settings into it when they spawn (so an earlier cluster's 65536 would win): set ours for the
    # start-up, then put back what was there
    before = {k: os.environ.get(k) for k in WORKER_MALLOC_ENV}
    try:
        os.environ.update(WORKER_MALLOC_ENV)
        with dask.config.set(environ):
            # no dashboard; the scheduler's small HTTP endpoint (health, metrics) on a free port rather
            # than 8787, which another cluster on this machine may hold (Dask then warns)
            return LocalCluster(n_workers=workers, threads_per_worker=1, processes=processes, dashboard_address=None,
                                worker_dashboard_address=None, silence_logs=logging.ERROR,
                                scheduler_kwargs={"dashboard_address": ":0"}, **where)
    finally:
        for k, v in before.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def completed(futures: Sequence[Any], cancel: CancelToken | Callable[[], bool] | None = None,
              what: str = "run") -> Iterator[tuple[int, Any]]:
    """``(index, result)`` of each future as it completes (any order), checking the cancel request
    every :data:`POLL_SECONDS`; a task's error is raised here, a cancel request raises
    :class:`sim.engine.SimulationCancelled`. The caller cancels the futures left (:func:`cancel_futures`).

    Uses ``distributed.as_completed`` polled without blocking (``distributed.wait`` with a timeout,
    called again and again, made the client log "deque mutated during iteration" in a 100-chunk run).
    """
    from dask.distributed import as_completed

    index = {f.key: i for i, f in enumerate(futures)}
    ready = as_completed(futures)
    try:
        while not ready.is_empty():
            if cancel_requested(cancel):
                raise SimulationCancelled(f"{what} cancelled")
            batch = ready.next_batch(block=False)
            if not batch:
                time.sleep(POLL_SECONDS)
                continue
            for f in batch:
                yield index[f.key], f.result()  # raises the task's error here
    finally:
        ready.clear()


def cancel_futures(client: Any, futures: Sequence[Any]) -> None:
    """Cancel the futures (those finished are unaffected); the client may already be gone."""
    if futures:
        try:
            client.cancel(list(futures))
        except Exception:  # noqa: BLE001 - the client may already be closed
            pass
