"""The unit of work of a probabilistic analysis: a block of consecutive parameter draws, computed by a
pure function.

:func:`run_block` turns a :class:`PsaJob` (the point-value model, the block's parameter values, how
to apply them, patients per draw, seed, which methods) into the block's rows of the per-draw table.
It has no other input (no shared state, no cancel flag, no callback), so it runs the same inline, in
a worker process or on a remote Dask worker, and because each draw's rows depend only on the seed,
the patients per draw, its draw number and its parameter values, the joined table is bit-identical
for any split into blocks, any number of workers and any scheduler. :func:`run_inline` runs the
jobs in this thread with progress and cancel between blocks.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from ..engine import CancelToken, SimulationCancelled, cancel_requested
from ..problems import ValidationError
from ..reference import NoExactSolution
from .cohort_draws import CycleMethod, cycle_per_draw
from .draws_run import ApplyDraw, models_for_draws, simulated_per_draw, simulated_vectorised
from .exact_draws import exact_per_draw
from .patient_values import Workspace
from .tables import sort_draw_table

__all__ = ["PsaJob", "BlockResult", "PsaProgress", "psa_jobs", "run_block", "run_inline", "join_blocks",
           "block_draws_for", "without_source"]

PsaProgress = Callable[[int, int, "float | None"], None]
"""``progress(draws_done, draws_total, seconds_left)``; ``seconds_left`` is None until a block is done."""

TARGET_BLOCK_PATIENTS = 100_000
"""Simulated patients per block (per strategy): the engine's own chunk size, where one call runs at
full speed and a block's valuation costs little next to its simulation (benchmarks/RESULTS.md)."""


@dataclass(frozen=True)
class PsaJob:
    """Draws ``values.index`` (consecutive) of an analysis (picklable when ``apply`` is a
    module-level function).

    source : the model, or the scenario the parameter names refer to (given to ``apply``).
    values : one row per draw (index ``draw``), one column per uncertain parameter.
    apply : ``apply(model, {name: value}) -> Model``; None runs every draw at the point values.
    patients : simulated patients per draw and strategy (0: no simulation).
    exact : add the exact (Kolmogorov) rows for a Markov model.
    cycle_methods : cycle-based approximations to add per draw.
    vectorised : one engine call for the block (else one per draw; the same bits).
    """

    source: Any
    values: pd.DataFrame
    apply: ApplyDraw | None
    patients: int
    seed: int
    exact: bool = True
    cycle_methods: tuple[CycleMethod, ...] = ()
    tunnel_entry: str = "half-cycle"
    vectorised: bool = True

    @property
    def draws(self) -> np.ndarray:
        return self.values.index.to_numpy(dtype=np.int64)


@dataclass(frozen=True)
class BlockResult:
    """A block's rows of the per-draw table and what could not be computed (``notes``)."""

    draws: np.ndarray
    table: pd.DataFrame
    notes: tuple[str, ...] = field(default_factory=tuple)
    seconds: float = 0.0


def block_draws_for(patients: int, n_draws: int, workers: int = 1) -> int:
    """Draws per block: blocks of at most about :data:`TARGET_BLOCK_PATIENTS` simulated patients
    (engine calls of that size run at full speed), at least four per worker when there are enough
    draws (progress), their number a multiple of the number of workers and their sizes equal where
    the draws allow, so that the workers finish together (e.g. 1,000 draws x 1,000 patients on 2
    workers: 10 blocks of 100 draws). Results do not depend on it."""
    n_draws, workers = max(int(n_draws), 1), max(int(workers), 1)
    blocks = max(-(-n_draws * max(int(patients), 0) // TARGET_BLOCK_PATIENTS), 4 * workers)
    blocks = -(-blocks // workers) * workers  # a multiple of the workers
    return max(1, -(-n_draws // blocks))


def psa_jobs(source: Any, values: pd.DataFrame, apply: ApplyDraw | None, patients: int, seed: int, *,
             block_draws: int, exact: bool = True, cycle_methods: Sequence[CycleMethod] = (),
             tunnel_entry: str = "half-cycle", vectorised: bool = True) -> list[PsaJob]:
    """Split the draws (rows of ``values``, index ``draw``) into consecutive blocks."""
    for key, value, low in (("patients", patients, 0), ("seed", seed, 0), ("block_draws", block_draws, 1)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
            raise ValidationError((key,), f"must be an integer >= {low}", value)
    if len(values) == 0:
        raise ValidationError(("draws",), "must be a positive integer", 0)
    return [PsaJob(source, values.iloc[a:a + block_draws], apply, int(patients), int(seed), bool(exact),
                   tuple(cycle_methods), tunnel_entry, vectorised)
            for a in range(0, len(values), int(block_draws))]


def without_source(job: PsaJob) -> PsaJob:
    """The job without its source (for :func:`run_block` with the source sent apart, e.g. once to
    each Dask worker instead of with every block)."""
    return replace(job, source=None)


def run_block(job: PsaJob, source: Any = None, workspace: Workspace | None = None) -> BlockResult:
    """Compute one block (pure: the same job always gives the same rows); ``source``, when given,
    stands for the job's (see :func:`without_source`); ``workspace``: scratch arrays to reuse
    between blocks (no effect on the rows)."""
    t0 = time.perf_counter()
    models = models_for_draws(job.source if source is None else source, job.values, job.apply)
    draws = job.draws
    parts, notes = [], []
    if job.patients > 0:
        run = simulated_vectorised if job.vectorised else simulated_per_draw
        parts.append(run(models, draws, job.patients, job.seed, workspace=workspace))
    if job.exact:
        try:
            parts.append(exact_per_draw(models, draws))
        except NoExactSolution as err:
            notes.append(f"no exact result: {err}")
    if job.cycle_methods:
        parts.append(cycle_per_draw(models, draws, job.cycle_methods, tunnel_entry=job.tunnel_entry))
    # the simulated rows alone are already in the table's order (draw, then strategy)
    table = parts[0] if len(parts) == 1 and job.patients > 0 else sort_draw_table(parts, models[0].strategy_names)
    return BlockResult(draws, table, tuple(notes), time.perf_counter() - t0)


def join_blocks(results: Sequence[BlockResult], strategies: tuple[str, ...]) -> tuple[pd.DataFrame, tuple[str, ...]]:
    """The per-draw table of every block (rows in draw order whatever the order the blocks finished
    in) and the distinct notes."""
    table = sort_draw_table([r.table for r in results], strategies)
    notes = tuple(dict.fromkeys(n for r in results for n in r.notes))
    return table, notes


class Eta:
    """Draws done and the estimated time left, from the blocks finished so far."""

    def __init__(self, total: int, progress: PsaProgress | None) -> None:
        self.total, self.progress, self.done = int(total), progress, 0
        self.start = time.perf_counter()
        if progress is not None:
            progress(0, self.total, None)

    def add(self, draws: int) -> None:
        self.done += int(draws)
        if self.progress is not None:
            elapsed = time.perf_counter() - self.start
            left = elapsed / self.done * (self.total - self.done) if self.done else None
            self.progress(self.done, self.total, left)


def run_inline(jobs: Sequence[PsaJob], progress: PsaProgress | None = None,
               cancel: CancelToken | Callable[[], bool] | None = None) -> list[BlockResult]:
    """Every job in this thread, in order, checking ``cancel`` between blocks (raises
    :class:`sim.engine.SimulationCancelled`)."""
    eta = Eta(sum(len(j.values) for j in jobs), progress)
    out = []
    ws = Workspace()  # the blocks' scratch arrays, allocated once
    for job in jobs:
        if cancel_requested(cancel):
            raise SimulationCancelled("probabilistic analysis cancelled")
        result = run_block(job, workspace=ws)
        out.append(result)
        eta.add(len(result.draws))
    return out
