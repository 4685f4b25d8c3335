"""Executors: where the chunks of a run are computed.

An executor maps a pure function over a list of work items (here :class:`sim.pipeline.chunks.ChunkJob`)
and yields the results *in the order of the items*, whatever order they finish in. Because each chunk
is a pure function of (model, seed, patient range), the run's tables are bit-identical for every
executor, number of workers and chunking.

Today: :class:`SerialExecutor` (the calling thread) and :class:`ThreadExecutor` (a thread pool; the
engine's numpy kernels release the GIL). A process pool or a Dask cluster implements the same
:class:`Executor` protocol next: submit ``fn(item)`` (``fn`` is a module-level function and the items
are picklable), keep a bounded number in flight, yield in item order, and drop the work not yet
started when the consumer closes the iterator (a cancelled run, an error in a sink).
"""

from __future__ import annotations

from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Callable, Iterator, Protocol, Sequence, TypeVar

import numpy as np

from ..problems import ValidationError

__all__ = ["Executor", "SerialExecutor", "ThreadExecutor", "executor_for"]

Item = TypeVar("Item")
Result = TypeVar("Result")


class Executor(Protocol):
    """Runs ``fn`` over work items and yields the results in item order.

    Attributes
    ----------
    workers : how many items may be computed at the same time (recorded with the run).
    """

    workers: int

    def map(self, fn: Callable[[Item], Result], items: Sequence[Item]) -> Iterator[Result]:
        """``fn(item)`` for every item, yielded in the order of ``items``. Closing the returned
        iterator early abandons the items not yet started."""
        ...


def _positive_workers(workers: object) -> int:
    if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise ValidationError(("workers",), "must be a positive integer", workers)
    return int(workers)


class SerialExecutor:
    """Every item in the calling thread, one after the other."""

    workers = 1

    def map(self, fn: Callable[[Item], Result], items: Sequence[Item]) -> Iterator[Result]:
        for item in items:
            yield fn(item)


class ThreadExecutor:
    """A pool of ``workers`` threads with at most ``in_flight`` items submitted and not yet consumed
    (default ``2 * workers``), so that memory stays bounded when the consumer streams the results
    to disk. With one worker (or one item) it runs in the calling thread."""

    def __init__(self, workers: int, in_flight: int | None = None) -> None:
        self.workers = _positive_workers(workers)
        self.in_flight = 2 * self.workers if in_flight is None else int(in_flight)
        if self.in_flight < 1:
            raise ValidationError(("in_flight",), "must be a positive integer", in_flight)

    def map(self, fn: Callable[[Item], Result], items: Sequence[Item]) -> Iterator[Result]:
        items = list(items)
        if self.workers == 1 or len(items) <= 1:
            yield from SerialExecutor().map(fn, items)
            return
        with ThreadPoolExecutor(max_workers=self.workers, thread_name_prefix="hazardtrace-chunk") as pool:
            pending: deque[Future] = deque(pool.submit(fn, item) for item in items[:self.in_flight])
            submitted = len(pending)
            try:
                while pending:
                    result = pending.popleft().result()
                    if submitted < len(items):
                        pending.append(pool.submit(fn, items[submitted]))
                        submitted += 1
                    yield result
            finally:  # consumer gone (done, cancelled or failed): drop what has not started
                for future in pending:
                    future.cancel()


def executor_for(workers: int) -> Executor:
    """The default executor for ``workers``: serial for one, a thread pool for more."""
    n = _positive_workers(workers)
    return SerialExecutor() if n == 1 else ThreadExecutor(n)
