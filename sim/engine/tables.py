"""The run's result tables, filled in place by the chunks while they run (issue 16).

The chunks of a run write their patients' rows of the patient table directly into its final columns,
and place their events directly into the final event columns: a chunk takes its rows of every
strategy's block of the event log as soon as the chunks before it have taken theirs (a chunk learns
its event counts when its histories are done, so the rows are handed out in chunk order), then
scatters its events there in patient-then-time order. No per-chunk copy of the events outlives the
chunk and no join copies them at the end, so a run touches fresh memory only for the tables it
returns: on this project's VM a page of fresh memory costs up to ten times as much to touch as one
the process freed moments ago, which made 10^7 patients cost ~1.8x as much per patient as 10^6 when
the chunks' results were kept and joined (benchmarks/RESULTS.md, issue 16). The returned columns
themselves come from :mod:`sim.engine.buffers`, which reuses the memory of tables no longer held.

The event columns hold one region per strategy (the table is strategy-major). Their size is not
known until the last chunk is done, so the first chunk in order sizes them from its own counts
(n / m times its events, plus 2% and 1,024 rows; exact when one chunk covers the run); a chunk
that would overflow them waits for the chunks still writing, then moves the rows into larger
columns (rare: chunks of 100,000 patients estimate the total within ~0.5%). At the end the
regions of strategies 1, 2, ... are moved down behind strategy 0's in blocks (no second copy of
the table) and the columns are views of their first ``total`` rows.

Every value is computed exactly as before (the same operations on the same operands); only where
the rows are written changed, so the tables are bit-identical for any chunking and worker count.
"""

from __future__ import annotations

import math
import threading
from functools import lru_cache
from itertools import accumulate
from typing import Sequence

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from . import buffers, kernels

__all__ = ["code_dtype", "EventRecords", "OutputTables", "move_down", "placement_scratch"]

#: Rows of a strategy's region reserved beyond the estimate from the first chunk (share and count).
_MARGIN, _SLACK = 0.02, 1024
_BLOCK = 1 << 16  # rows per block when regions are moved down over themselves


def code_dtype(n_labels: int) -> np.dtype:
    """Smallest integer dtype pandas uses for the codes of a categorical with ``n_labels``
    categories (as ``pandas.core.dtypes.cast.coerce_indexer_dtype``), so that codes built in that
    dtype become a :class:`pandas.Categorical` without a conversion copy."""
    for dt in (np.int8, np.int16, np.int32):
        if n_labels < np.iinfo(dt).max:
            return np.dtype(dt)
    return np.dtype(np.int64)


class EventRecords:
    """One strategy's events of one chunk in the order they were made (round by round): chunk-local
    patient index, time, from and to state codes, exit code and round, in growable columns of which
    the first ``count`` rows are used. :meth:`OutputTables.place_events` puts them in
    patient-then-time order."""

    __slots__ = ("idx", "time", "from_", "to", "exit", "round", "count")

    def __init__(self, capacity: int, state_code: np.dtype, exit_code: np.dtype) -> None:
        capacity = max(int(capacity), 16)
        # 32-bit patient indexes (chunk-local) and rounds: 8 bytes less per record to write and read
        # back; a chunk holds fewer than 2^31 patients and makes fewer than 2^31 rounds
        self.idx = np.empty(capacity, dtype=np.int32 if capacity < 2**31 else np.int64)
        self.time = np.empty(capacity)
        self.from_ = np.empty(capacity, dtype=state_code)
        self.to = np.empty(capacity, dtype=state_code)
        self.exit = np.empty(capacity, dtype=exit_code)
        self.round = np.empty(capacity, dtype=np.int32)
        self.count = 0

    def reserve(self, more: int) -> None:
        """Make room for ``more`` records after the ``count`` already made (doubling the columns)."""
        need = self.count + int(more)
        if need <= self.idx.size:
            return
        size = max(need, 2 * self.idx.size)
        for name in ("idx", "time", "from_", "to", "exit", "round"):
            old = getattr(self, name)
            new = np.empty(size, dtype=old.dtype)
            new[:self.count] = old[:self.count]
            setattr(self, name, new)


def move_down(a: NDArray, src: int, dst: int, n: int) -> None:
    """``a[dst:dst + n] = a[src:src + n]`` for ``dst <= src`` without a temporary copy of the rows
    (numpy copies overlapping operands whole): blocks in increasing order, each read before any
    later block is written."""
    shift = src - dst
    if shift == 0 or n == 0:
        return
    if shift >= n:
        a[dst:dst + n] = a[src:src + n]
        return
    if shift >= _BLOCK:  # blocks of ``shift`` rows never overlap their destinations
        for i in range(0, n, shift):
            b = min(shift, n - i)
            a[dst + i:dst + i + b] = a[src + i:src + i + b]
        return
    tmp = np.empty(_BLOCK, dtype=a.dtype)
    for i in range(0, n, _BLOCK):
        b = min(_BLOCK, n - i)
        tmp[:b] = a[src + i:src + i + b]
        a[dst + i:dst + i + b] = tmp[:b]


def placement_scratch(n_patients: int, records: Sequence[EventRecords]) -> int:
    """Integers of working space :meth:`OutputTables.place_events` needs for a chunk of
    ``n_patients`` patients with these records."""
    return n_patients + 1 + max((r.count for r in records), default=0)


class _Aborted(RuntimeError):
    """The run stopped (an error or a cancel in another chunk) while this chunk waited for its rows."""


class _EventColumns:
    """The event columns of patients ``first .. first + n - 1`` under ``n_st`` strategies, one region
    per strategy, handed out to chunks in patient order (thread-safe)."""

    def __init__(self, first: int, n: int, n_st: int, dtypes: dict[str, np.dtype]) -> None:
        self.first, self.n, self.n_st, self.dtypes = first, n, n_st, dtypes
        self.cond = threading.Condition()
        self.next_start = first  # the chunk whose turn it is to take rows
        self.filled = [0] * n_st
        self.cap: list[int] = []
        self.base: list[int] = []
        self.bufs: dict[str, NDArray] = {}
        self.placing = 0  # chunks writing into the columns now
        self.aborted = False

    def _allocate(self, cap: list[int]) -> dict[str, NDArray]:
        self.cap = cap
        self.base = list(accumulate(cap[:-1], initial=0))
        return {f: buffers.empty(sum(cap), dt) for f, dt in self.dtypes.items()}

    def reserve(self, start: int, stop: int, counts: Sequence[int]) -> tuple[dict[str, NDArray], list[int]]:
        """Wait for the turn of the chunk ``start .. stop - 1`` (the chunks before it have taken their
        rows), take ``counts[k]`` rows of every strategy ``k`` and return the columns with the first
        row of each. Call :meth:`done` when the rows are written."""
        with self.cond:
            while self.next_start != start:
                if self.aborted:
                    raise _Aborted("the run stopped before this chunk's events were placed")
                self.cond.wait()
            need = [f + c for f, c in zip(self.filled, counts)]
            done = stop - self.first
            if not self.bufs:
                exact = done == self.n
                self.bufs = self._allocate([c if exact else max(c, math.ceil(c * self.n / done * (1 + _MARGIN))
                                                                + _SLACK) for c in counts])
            elif any(x > c for x, c in zip(need, self.cap)):
                while self.placing:  # earlier chunks still writing into the current columns
                    self.cond.wait()
                old, old_base = self.bufs, self.base
                bufs = self._allocate([max(x, c, math.ceil(x * self.n / done * (1 + 2 * _MARGIN)) + _SLACK)
                                       for x, c in zip(need, self.cap)])
                for f, buf in bufs.items():
                    for k, rows in enumerate(self.filled):
                        buf[self.base[k]:self.base[k] + rows] = old[f][old_base[k]:old_base[k] + rows]
                self.bufs = bufs
                del old
            offsets = [b + f for b, f in zip(self.base, self.filled)]
            self.filled = need
            self.next_start = stop
            self.placing += 1
            self.cond.notify_all()
            return self.bufs, offsets

    def done(self) -> None:
        with self.cond:
            self.placing -= 1
            self.cond.notify_all()

    def abort(self) -> None:
        """Wake every chunk waiting for its turn (they raise): the run stopped."""
        with self.cond:
            self.aborted = True
            self.cond.notify_all()

    def finish(self) -> dict[str, NDArray]:
        """The columns (strategy-major, no gaps) once every chunk has placed its events."""
        if not self.bufs:  # no chunk ran: empty columns
            return {f: np.empty(0, dtype=dt) for f, dt in self.dtypes.items()}
        pos = self.filled[0]
        for k in range(1, self.n_st):
            for buf in self.bufs.values():
                move_down(buf, self.base[k], pos, self.filled[k])
            pos += self.filled[k]
        self.base = list(accumulate(self.filled[:-1], initial=0))
        self.cap = list(self.filled)
        return {f: buf[:pos] for f, buf in self.bufs.items()}


class OutputTables:
    """The result columns of patients ``first .. first + n - 1`` under ``n_st`` strategies
    (strategy-major, as in the returned tables), written in place by the chunks; with several
    workers they fill in parallel.

    Patient columns have ``n * n_st`` rows; a chunk writes its patients' rows of every strategy
    (:meth:`rows`). Event columns are handed out by :meth:`place_events`.
    """

    def __init__(self, first: int, n: int, n_st: int, state_code: np.dtype) -> None:
        self.first, self.n, self.n_st = first, n, n_st
        self.strategy_code = code_dtype(n_st)
        self.state_code = np.dtype(state_code)
        rows = n * n_st
        self.strategy = buffers.empty(rows, self.strategy_code)
        self.patient = buffers.empty(rows, np.int64)
        self.entry_age = buffers.empty(rows)
        self.sex = buffers.empty(rows, np.int8)
        self.initial = buffers.empty(rows, state_code)  # initial state, common to every strategy
        self.exit_time = buffers.empty(rows)
        self.exit_age = buffers.empty(rows)
        self.final_state = buffers.empty(rows, state_code)
        self.exit_reason = buffers.empty(rows, np.int8)  # codes of ("absorbed", "censored")
        self._events: _EventColumns | None = None
        self._aborted = False
        self._lock = threading.Lock()

    def rows(self, k: int, start: int, stop: int) -> slice:
        """Rows of patients ``start .. stop - 1`` under strategy ``k``."""
        a = k * self.n + start - self.first
        return slice(a, a + stop - start)

    def finish_patients(self, start: int, stop: int) -> None:
        """Fill the rows of patients ``start .. stop - 1`` that follow from the others: strategy
        codes, patient ids, attributes of strategies 1, 2, ... (those of strategy 0) and exit ages."""
        r0 = self.rows(0, start, stop)
        for k in range(self.n_st):
            r = self.rows(k, start, stop)
            self.strategy[r] = k
            if k == 0:
                self.patient[r] = np.arange(start, stop, dtype=np.int64)
            else:
                for col in (self.patient, self.entry_age, self.sex, self.initial):
                    col[r] = col[r0]
            np.add(self.entry_age[r], self.exit_time[r], out=self.exit_age[r])

    def _event_columns(self, exit_code: np.dtype) -> _EventColumns:
        with self._lock:
            if self._events is None:
                dtypes = {"strategy": self.strategy_code, "patient": np.dtype(np.int64), "time": np.dtype(np.float64),
                          "age": np.dtype(np.float64), "from_state": self.state_code, "to_state": self.state_code,
                          "transition": np.dtype(exit_code)}
                self._events = _EventColumns(self.first, self.n, self.n_st, dtypes)
                self._events.aborted = self._aborted
            return self._events

    def place_events(self, start: int, stop: int, records: Sequence[EventRecords],
                     entry_age: NDArray[np.float64], exit_code: np.dtype, scratch: NDArray[np.int64] | None = None) -> None:
        """Write the events of patients ``start .. stop - 1`` (``records[k]`` for strategy ``k``; patient
        indexes local to the chunk, ``entry_age`` the chunk's entry ages) into the event columns, after
        the chunks before it (waits for its turn). ``scratch``: at least :func:`placement_scratch`
        integers to use as working space (allocated if None)."""
        need = placement_scratch(stop - start, records)
        if scratch is None or scratch.size < need:
            scratch = np.empty(need, dtype=np.int64)
        first, perm = scratch[:stop - start + 1], scratch[stop - start + 1:]
        cols = self._event_columns(exit_code)
        bufs, offsets = cols.reserve(start, stop, [r.count for r in records])
        try:
            for k, (rec, off) in enumerate(zip(records, offsets)):
                rows = slice(off, off + rec.count)
                kernels.place_events(rec.idx, rec.time, rec.from_, rec.to, rec.exit, rec.round, rec.count,
                                     entry_age, start, k, first, perm,
                                     *(bufs[f][rows] for f in ("patient", "time", "age", "from_state", "to_state",
                                                               "transition", "strategy")))
        finally:
            cols.done()

    def abort(self) -> None:
        """Release chunks waiting for their turn to place events (the run stopped)."""
        with self._lock:  # a chunk that creates the event columns later sees the flag
            self._aborted = True
            events = self._events
        if events is not None:
            events.abort()

    def frames(self, state_labels: tuple[str, ...], exit_labels: tuple[str, ...], sexes: tuple[str, ...],
               strategies: tuple[str, ...]) -> tuple[pd.DataFrame, pd.DataFrame]:
        """The event log and the patient table over the finished columns (no copies)."""
        with self._lock:
            if self._events is None:
                self._events = _EventColumns(self.first, self.n, self.n_st, {
                    "strategy": self.strategy_code, "patient": np.dtype(np.int64), "time": np.dtype(np.float64),
                    "age": np.dtype(np.float64), "from_state": self.state_code, "to_state": self.state_code,
                    "transition": code_dtype(len(exit_labels))})
        ev = self._events.finish()
        states, labels = tuple(state_labels), tuple(strategies)
        events = pd.DataFrame({
            "strategy": _cat(ev["strategy"], labels),
            "patient": ev["patient"],
            "time": ev["time"],
            "age": ev["age"],
            "from_state": _cat(ev["from_state"], states),
            "to_state": _cat(ev["to_state"], states),
            "transition": _cat(ev["transition"], tuple(exit_labels)),
        }, copy=False)
        patients = pd.DataFrame({
            "strategy": _cat(self.strategy, labels),
            "patient": self.patient,
            "entry_age": self.entry_age,
            "sex": _cat(self.sex, tuple(sexes)),
            "initial_state": _cat(self.initial, states),
            "exit_time": self.exit_time,
            "exit_age": self.exit_age,
            "final_state": _cat(self.final_state, states),
            "exit_reason": _cat(self.exit_reason, ("absorbed", "censored")),
        }, copy=False)
        return events, patients


@lru_cache(maxsize=256)
def _categories(labels: tuple[str, ...]) -> pd.CategoricalDtype:
    """The (immutable) categorical dtype of a tuple of labels, built once: building one costs about
    50 microseconds, which shows in runs of a few thousand patients."""
    return pd.CategoricalDtype(list(labels), ordered=False)


def _cat(codes: NDArray, labels: tuple[str, ...]) -> pd.Categorical:
    # codes come from the model's own indices, so pandas' range check is skipped
    return pd.Categorical.from_codes(codes, dtype=_categories(tuple(labels)), validate=False)
