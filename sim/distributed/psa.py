"""Running a probabilistic analysis on Dask (:mod:`sim.distributed.cluster` connects and waits).

:func:`run_psa` splits the draws into blocks (:func:`sim.psa.psa_jobs`) and runs the pure
block function :func:`sim.psa.run_block` on them:

- ``scheduler=None`` and one worker: inline, in this thread (no cluster to start);
- ``scheduler=None`` and several workers: a Dask ``LocalCluster`` on the loopback interface, started
  for the run and closed after it (worker processes by default: the engine's pandas and Python parts
  hold the GIL, so threads scale worse; measured in benchmarks/RESULTS.md);
- ``scheduler="tcp://host:port"``: an existing Dask cluster (its workers need HazardTrace installed).

The table is joined in draw order, so it is bit-identical for every mode, number of workers and
block size. Progress comes from the futures as they complete (draws done, draws in all, an
estimate of the seconds left from the blocks done so far); a cancel request (an object with
``is_set()`` or a callable, checked a few times a second) or Ctrl-C cancels the futures not yet
finished and raises, leaving nothing behind (the caller writes output only from a finished result).
"""

from __future__ import annotations

import time
import uuid
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import pandas as pd

from ..engine import CancelToken
from ..io import Scenario
from ..problems import ValidationError
from ..psa import (BlockResult, CycleMethod, PsaJob, block_draws_for, join_blocks, model_for_draw, psa_jobs,
                   run_block, run_inline, uncertain_parameters)
from ..psa.blocks import Eta, PsaProgress, without_source
from ..psa.draws_run import ApplyDraw
from ..uncertainty import draw_table
from .cluster import cancel_futures, completed, connect

__all__ = ["PsaResult", "run_psa", "run_jobs"]

@dataclass(frozen=True)
class PsaResult:
    """A finished probabilistic analysis.

    table : the per-draw table (:mod:`sim.psa.tables`).
    values : the parameter values of every draw (index ``draw``, one column per parameter).
    notes : what could not be computed (e.g. no exact result for a semi-Markov model).
    settings : draws, patients, seed, workers, scheduler, block size, methods.
    seconds : wall-clock time of the runs.
    """

    table: pd.DataFrame
    values: pd.DataFrame
    notes: tuple[str, ...] = ()
    settings: dict = field(default_factory=dict)
    seconds: float = 0.0


def run_jobs(jobs: Sequence[PsaJob], *, workers: int = 1, scheduler: str | None = None, processes: bool = True,
             progress: PsaProgress | None = None,
             cancel: CancelToken | Callable[[], bool] | None = None) -> list[BlockResult]:
    """Run the jobs inline (one worker, no scheduler) or on Dask; the results in job order.

    On Dask, each distinct source (the scenario or model) is sent once to every worker
    (``Client.scatter(..., broadcast=True)``) and the tasks carry only their block's parameter
    values; a task returns its block's rows of the per-draw table (a few kB per draw), never the
    patients' histories.
    """
    if scheduler is None and workers == 1:
        return run_inline(jobs, progress, cancel)
    client, cluster = connect(scheduler, workers, processes)
    futures = []
    try:
        eta = Eta(sum(len(j.values) for j in jobs), progress)
        token = uuid.uuid4().hex[:12]
        sources: dict[int, object] = {}  # id(source) -> its future on the workers
        for job in jobs:
            if id(job.source) not in sources:
                sources[id(job.source)] = client.scatter([job.source], broadcast=True, hash=False)[0]
        futures = [client.submit(run_block, without_source(job), sources[id(job.source)],
                                 key=f"hazardtrace-psa-{token}-{i}", pure=False)
                   for i, job in enumerate(jobs)]
        results: list[BlockResult | None] = [None] * len(jobs)
        for i, result in completed(futures, cancel, "probabilistic analysis"):
            results[i] = result
            eta.add(len(result.draws))
        return [r for r in results if r is not None]
    except BaseException:
        cancel_futures(client, futures)
        raise
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def run_psa(scenario: Scenario, draws: int, patients: int, workers: int | None = None, scheduler: str | None = None,
            progress: PsaProgress | None = None, cancel: CancelToken | Callable[[], bool] | None = None, *,
            values: pd.DataFrame | None = None, apply: ApplyDraw | None = None, exact: bool = True,
            cycle_methods: Sequence[CycleMethod] = (), block_draws: int | None = None, processes: bool = True,
            vectorised: bool = True, seed: int | None = None) -> PsaResult:
    """Run the probabilistic analysis of ``scenario``.

    Parameters
    ----------
    draws : number of parameter draws (draws 0 .. draws - 1).
    patients : simulated patients per draw and strategy (0: exact and cycle-based rows only).
    workers : Dask workers (default: the scenario's ``run.workers``); one worker without a
        scheduler runs inline.
    scheduler : ``tcp://host:port`` of an existing Dask scheduler, or None for this machine.
    progress : ``progress(draws_done, draws_total, seconds_left)``.
    cancel : an object with ``is_set()`` or a callable; raises :class:`sim.engine.SimulationCancelled`.
    values : the parameter values per draw (index ``draw`` 0 .. draws - 1); default: the
        scenario's ``[[uncertainty]]`` inputs drawn by :func:`sim.uncertainty.draw_table` with the
        seed (none: every draw at the point values), applied by :func:`sim.psa.model_for_draw`.
    apply : with ``values``: ``apply(scenario, {name: value}) -> Model`` (a module-level function, so
        that worker processes can import it); None runs every draw at the point values.
    exact : add the exact rows (Markov models).
    cycle_methods : cycle-based approximations to add per draw.
    block_draws : draws per task (default :func:`sim.psa.blocks.block_draws_for`; no effect on results).
    processes : worker processes (True) or threads of this process (False) for a local cluster.
    seed : the inner loop's seed (default: the scenario's ``run.seed``).

    Raises
    ------
    sim.distributed.SchedulerError : the scheduler address cannot be used.
    sim.problems.ValidationError : a bad number of draws, patients or workers.
    """
    for key, value, low in (("draws", draws, 1), ("patients", patients, 0)):
        if isinstance(value, bool) or not isinstance(value, int) or value < low:
            raise ValidationError((key,), f"must be an integer >= {low}", value)
    n_workers = int(workers or scenario.run.workers)
    if n_workers < 1:
        raise ValidationError(("workers",), "must be a positive integer", workers)
    seed = int(scenario.run.seed if seed is None else seed)
    source: object = scenario
    if values is None:  # the scenario's [[uncertainty]] inputs, drawn reproducibly from the seed
        values = draw_table(uncertain_parameters(scenario), draws, seed)
        apply = model_for_draw if values.shape[1] else None
    elif len(values) != draws:
        raise ValidationError(("values",), f"must have one row per draw ({draws})", len(values))
    size = int(block_draws or block_draws_for(patients, draws, n_workers))
    jobs = psa_jobs(source, values, apply, patients, seed, block_draws=size, exact=exact,
                    cycle_methods=cycle_methods, tunnel_entry=scenario.run.tunnel_entry, vectorised=vectorised)
    t0 = time.perf_counter()
    results = run_jobs(jobs, workers=n_workers, scheduler=scheduler, processes=processes, progress=progress,
                       cancel=cancel)
    table, notes = join_blocks(results, scenario.model.strategy_names)
    settings = {"draws": draws, "patients": patients, "seed": seed, "workers": n_workers, "scheduler": scheduler,
                "block_draws": size, "exact": bool(exact), "cycle_methods": [m.label for m in cycle_methods],
                "parameters": [str(c) for c in values.columns]}
    return PsaResult(table, values, notes, settings, time.perf_counter() - t0)
