"""The unit of work of a run: one chunk of patients, simulated by a pure function.

:func:`simulate_chunk` turns a :class:`ChunkJob` (model, seed, patient range, strategies) into the
chunk's event log and patient table. It has no other input (no shared state, no cancel flag, no
callback), so any :class:`sim.pipeline.executors.Executor` can run it, in this process or another,
and the joined tables are identical for every executor and chunking (the engine's draws are keyed on
seed, patient, stream and occurrence).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..engine import simulate_range
from ..model import Model
from ..problems import ValidationError

__all__ = ["ChunkJob", "ChunkTables", "chunk_jobs", "simulate_chunk"]


@dataclass(frozen=True)
class ChunkJob:
    """Patients ``start .. stop - 1`` of a run under ``strategies`` (picklable)."""

    model: Model
    seed: int
    start: int
    stop: int
    strategies: tuple[str, ...]
    max_transitions: int = 10_000


@dataclass(frozen=True)
class ChunkTables:
    """One chunk's results, as :func:`sim.engine.simulate_chunks` yields them.

    events : the chunk's transitions (by strategy, then patient, then time).
    patients : one row per patient per strategy (by strategy, then patient).
    """

    start: int
    stop: int
    events: pd.DataFrame
    patients: pd.DataFrame

    @property
    def n_patients(self) -> int:
        """Patients per strategy in the chunk."""
        return self.stop - self.start


def chunk_jobs(model: Model, n_patients: int, seed: int, chunk_size: int,
               strategies: tuple[str, ...] | None = None) -> list[ChunkJob]:
    """Split patients ``0 .. n_patients - 1`` into consecutive jobs of ``chunk_size`` (the last may
    be shorter)."""
    for key, value in (("patients", n_patients), ("chunk_size", chunk_size)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
            raise ValidationError((key,), "must be a positive integer", value)
    names = tuple(strategies) if strategies is not None else model.strategy_names
    n, size = int(n_patients), int(chunk_size)
    return [ChunkJob(model, int(seed), a, min(a + size, n), names) for a in range(0, n, size)]


def simulate_chunk(job: ChunkJob) -> ChunkTables:
    """Simulate one job (pure: the same job always gives the same tables)."""
    events, patients = simulate_range(job.model, job.seed, job.start, job.stop, strategies=job.strategies,
                                      max_transitions=job.max_transitions)
    return ChunkTables(job.start, job.stop, events, patients)
