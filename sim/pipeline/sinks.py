"""Sinks: where a run's simulated chunks go.

The pipeline hands every chunk, in patient order, to each of the run's sinks:

- :class:`MemorySink` keeps the event log and the patient table (joined in the row order of
  :func:`sim.engine.simulate`); the later stages then have every history: exact per-patient
  outcomes, Kaplan-Meier and Aalen-Johansen curves. This is what the desktop window uses.
- :class:`StreamSink` writes each chunk to disk through a :class:`sim.io.export.RunWriter` and keeps
  only an :class:`sim.analysis.OutcomeAccumulator` (means, MCSE, paired increments), so memory is
  bounded by the chunks in flight whatever the number of patients. At the end it adds the result
  tables (summary, increments, the error study's tables) and commits the folder atomically; on a
  failure or cancel it leaves nothing behind. This is what ``hazardtrace run`` uses.

Give a run both (``sinks=(MemorySink(), StreamSink(writer))``) to stream to disk and keep the log
when it fits in memory; the results then come from the kept log, and the streamed folder also gets
the survival and occupancy curves.

What a streaming-only run skips: the survival and occupancy estimates (Kaplan-Meier needs every
patient's exit time ordered over the whole run and Aalen-Johansen every transition, which is the log
itself) and ``RunResults.simulation``/``per_patient``; the stages record this in
``RunResults.skipped``.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from ..analysis import OutcomeAccumulator, patient_outcomes
from ..engine import SimulationResult
from ..io.export import RunWriter
from .assembly import StrategyMajorJoin
from .chunks import ChunkTables
from .plan import RunPlan

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from .results import RunResults

__all__ = ["ChunkSink", "MemorySink", "StreamSink", "chunk_result", "result_tables"]

GENERATOR = "Philox4x64-10 counter-based"


def chunk_result(plan: RunPlan, chunk: ChunkTables) -> SimulationResult:
    """One chunk as a :class:`SimulationResult` (for per-patient outcomes of that chunk)."""
    return SimulationResult(plan.model, plan.seed, chunk.n_patients, chunk.events, chunk.patients, plan.chunk_size,
                            plan.workers, {"strategies": plan.strategies})


class ChunkSink:
    """Receives a run's chunks. Subclasses override what they need; the pipeline calls, in order,
    :meth:`open`, :meth:`add` for every chunk (patient order), then :meth:`close` with the results,
    or :meth:`abort` if anything fails or the run is cancelled (also during :meth:`close`)."""

    def open(self, plan: RunPlan) -> None:
        """The run is about to start."""

    def add(self, chunk: ChunkTables) -> None:
        """One more chunk, in patient order."""

    def simulation(self) -> SimulationResult | None:
        """The whole run's event log and patient table, if this sink kept them."""
        return None

    def accumulator(self) -> OutcomeAccumulator | None:
        """Accumulated outcome moments, if this sink kept them."""
        return None

    def close(self, results: "RunResults") -> None:
        """Every stage has finished."""

    def abort(self) -> None:
        """The run failed or was cancelled; drop anything partial. Safe to call twice."""


class MemorySink(ChunkSink):
    """Keeps the event log and patient table in memory (see the module docstring)."""

    def __init__(self) -> None:
        self._plan: RunPlan | None = None
        self._events = StrategyMajorJoin()
        self._patients = StrategyMajorJoin()
        self._result: SimulationResult | None = None

    def open(self, plan: RunPlan) -> None:
        self._plan, self._result = plan, None
        self._events, self._patients = StrategyMajorJoin(), StrategyMajorJoin()

    def add(self, chunk: ChunkTables) -> None:
        self._events.add(chunk.events)
        self._patients.add(chunk.patients)

    def simulation(self) -> SimulationResult | None:
        """The joined tables (built on the first call), identical to :func:`sim.engine.simulate`'s."""
        if self._result is None and self._plan is not None:
            p = self._plan
            self._result = SimulationResult(model=p.model, seed=p.seed, n_patients=p.patients,
                                            events=self._events.join(), patients=self._patients.join(),
                                            chunk_size=p.chunk_size, workers=p.workers,
                                            metadata={"strategies": p.strategies, "generator": GENERATOR})
        return self._result

    def abort(self) -> None:
        self._events, self._patients, self._result = StrategyMajorJoin(), StrategyMajorJoin(), None


class StreamSink(ChunkSink):
    """Streams the chunks into a :class:`RunWriter` (not yet opened) and accumulates the outcomes.

    Parameters
    ----------
    writer : the run's writer; the sink opens it, writes every chunk, adds the result tables and
        closes (commits) it, or aborts it.
    accumulate : keep an :class:`OutcomeAccumulator` (the run's outcomes when no sink keeps the
        log); switch off when a :class:`MemorySink` runs alongside.
    """

    def __init__(self, writer: RunWriter, *, accumulate: bool = True) -> None:
        self.writer = writer
        self.accumulate = bool(accumulate)
        self.paths: dict[str, Path] = {}
        self._plan: RunPlan | None = None
        self._acc: OutcomeAccumulator | None = None

    def open(self, plan: RunPlan) -> None:
        self._plan = plan
        model = plan.model
        self._acc = (OutcomeAccumulator(model.strategy_names[0], model.valuation.willingness_to_pay)
                     if self.accumulate else None)
        self.writer.open()

    def add(self, chunk: ChunkTables) -> None:
        self.writer.write_chunk(chunk.events, chunk.patients)
        if self._acc is not None:
            assert self._plan is not None
            self._acc.add(patient_outcomes(chunk_result(self._plan, chunk)))

    def accumulator(self) -> OutcomeAccumulator | None:
        return self._acc

    def close(self, results: "RunResults") -> None:
        for name, table in result_tables(results):
            self.writer.add_table(name, table)
        self.paths = self.writer.close()

    def abort(self) -> None:
        self.writer.abort()


def result_tables(results: "RunResults") -> list[tuple[str, pd.DataFrame]]:
    """The result tables a written run holds beside its streamed ones, as (file stem, table).

    Summary and increments; survival and occupancy when computed; the error study's tables when
    it ran (its decisions only when there are any).
    """
    tables = [("summary", results.outcomes), ("increments", results.increments)]
    if results.survival is not None and results.occupancy is not None:
        tables += [("survival", results.survival), ("occupancy", results.occupancy)]
    study = results.study
    if study is not None:
        tables += [("error_study", study.table), ("error_study_orders", study.orders),
                   ("error_study_largest_cycle", study.largest_cycle)]
        if len(study.decisions):
            tables.append(("error_study_decisions", study.decisions))
    return tables
