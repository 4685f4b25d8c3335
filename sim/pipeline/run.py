"""One run of a scenario from start to finish, shared by the command line, the desktop window and
(next) the uncertainty analysis:

simulate -> outcomes with MCSE -> increments -> exact solution (Markov models) -> survival and
occupancy estimates on a time grid -> the discretization-error study (:mod:`sim.pipeline.stages`).

Where the chunks are computed is the executor's business (:mod:`sim.pipeline.executors`), where they
go the sinks' (:mod:`sim.pipeline.sinks`): the window keeps the log in memory, ``hazardtrace run``
streams it to disk. Long work reports progress as ``progress(stage, done, total)`` and honours a
cancel request (an object with ``is_set()`` or a callable) between simulation chunks, between stages
and between the error study's traces, raising :class:`sim.engine.SimulationCancelled`; every sink is
then aborted (a streamed folder is left as it was).
"""

from __future__ import annotations

from typing import Callable, Sequence

from ..engine import CancelToken
from ..io import Scenario
from .executors import Executor, executor_for
from .plan import RunPlan
from .results import RunResults, time_grid
from .sinks import ChunkSink, MemorySink
from .stages import STAGES, Progress, RunState, run_stages

__all__ = ["RunResults", "run_scenario", "run_plan", "time_grid"]


def run_plan(scenario: Scenario, plan: RunPlan, *, sinks: Sequence[ChunkSink] | None = None,
             executor: Executor | None = None, study: bool = True, progress: Progress | None = None,
             cancel: CancelToken | Callable[[], bool] | None = None) -> RunResults:
    """Run ``plan`` (resolved settings of ``scenario``) through every stage.

    Parameters
    ----------
    sinks : where the chunks go (default: one :class:`MemorySink`).
    executor : where the chunks are computed (default: :func:`executor_for` the plan's workers).
    study : run the discretization-error study.
    progress : ``progress(stage, done, total)``; stages ``simulating`` (patients), ``outcomes``,
        ``exact solution``, ``estimates``, ``error study`` (cohort traces) and finally ``done``.
    cancel : an object with ``is_set()`` or a callable.
    """
    sinks = tuple(sinks) if sinks is not None else (MemorySink(),)
    if not sinks:
        raise ValueError("a run needs at least one sink")
    state = RunState(scenario=scenario, plan=plan, sinks=sinks, executor=executor or executor_for(plan.workers),
                     want_study=bool(study), cancel=cancel)
    if progress is not None:
        state.report = progress
    opened: list[ChunkSink] = []
    try:
        for sink in sinks:
            sink.open(plan)
            opened.append(sink)
        run_stages(state, STAGES)
        results = _results(state)
        for sink in sinks:
            sink.close(results)
    except BaseException:
        for sink in opened:
            sink.abort()
        raise
    state.report("done", 1, 1)
    return results


def run_scenario(scenario: Scenario, *, patients: int | None = None, seed: int | None = None,
                 workers: int | None = None, study: bool = True, progress: Progress | None = None,
                 cancel: CancelToken | Callable[[], bool] | None = None, sinks: Sequence[ChunkSink] | None = None,
                 executor: Executor | None = None) -> RunResults:
    """Run a validated scenario; ``patients``, ``seed`` and ``workers`` override its run settings
    (see :meth:`RunPlan.from_scenario`), the rest as :func:`run_plan`."""
    plan = RunPlan.from_scenario(scenario, patients=patients, seed=seed, workers=workers)
    return run_plan(scenario, plan, sinks=sinks, executor=executor, study=study, progress=progress, cancel=cancel)


def _results(state: RunState) -> RunResults:
    assert state.outcomes is not None and state.increments is not None and state.grid is not None
    return RunResults(scenario=state.scenario, simulation=state.simulation, per_patient=state.per_patient,
                      outcomes=state.outcomes, increments=state.increments, survival=state.survival,
                      occupancy=state.occupancy, grid=state.grid, exact_occupancy=state.exact_occupancy,
                      exact_note=state.exact_note, study=state.study, settings=state.plan.settings(),
                      seconds=dict(state.seconds), n_events=state.n_events, skipped=dict(state.skipped),
                      failed=dict(state.failed))
