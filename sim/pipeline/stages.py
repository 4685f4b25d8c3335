"""The stages of a run, in order: simulate -> outcomes -> exact -> estimates -> study.

Each :class:`Stage` has a name (its key in ``RunResults.seconds`` and ``RunResults.skipped``), the
label it reports progress under (``progress(label, done, total)``; the desktop window shows a text
for each label), a function that reads and fills the run's :class:`RunState`, and a rule that says
when it does not apply. :func:`run_stages` times each stage and honours a cancel request before each
one; the simulate stage also checks between chunks and the study between its cohort traces.

- ``simulation``: the chunks through the executor into the sinks.
- ``outcomes``: means with Monte Carlo standard errors and paired increments, from the kept log
  (exact per-patient table) or else from a streaming sink's accumulator.
- ``exact``: for Markov models one solve of the Kolmogorov forward equations gives the exact outcomes
  and occupancy curves; otherwise the reason there is none.
- ``estimates``: survival and state occupancy on the time grid to the last horizon, each patient
  counted at min(t, own horizon) (equal to Kaplan-Meier and Aalen-Johansen up to the earliest
  horizon; needs the log).
- ``study``: the discretization-error study; for a semi-Markov model the run's own simulation is its
  reference (no second simulation of the same histories).
"""

from __future__ import annotations

import time
from contextlib import closing
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from ..analysis import (OutcomeAccumulator, incremental, occupancy_to_own_horizon, patient_outcomes, summarise,
                        survival_to_own_horizon)
from ..engine import CancelToken, SimulationCancelled, SimulationError, SimulationResult, cancel_requested
from ..io import Scenario
from ..problems import ValidationError
from ..reference import (NoExactSolution, StudyResult, discretization_study, exact_outcomes_and_occupancy,
                         with_exact)
from .chunks import chunk_jobs, simulate_chunk
from .executors import Executor
from .plan import RunPlan
from .results import time_grid
from .sinks import ChunkSink

__all__ = ["Progress", "RunState", "Stage", "STAGES", "StageFailure", "run_stages", "failure_text"]

Progress = Callable[[str, int, int], None]
INCREMENT_COLUMNS = ["strategy", "comparator", "quantity", "value", "mcse", "mcse_unpaired"]


@dataclass
class RunState:
    """What the stages share: the inputs of a run and everything computed so far."""

    scenario: Scenario
    plan: RunPlan
    sinks: tuple[ChunkSink, ...]
    executor: Executor
    want_study: bool = True
    report: Progress = lambda stage, done, total: None
    cancel: CancelToken | Callable[[], bool] | None = None
    # filled in by the stages
    simulation: SimulationResult | None = None
    accumulator: OutcomeAccumulator | None = None
    n_events: int = 0
    per_patient: pd.DataFrame | None = None
    outcomes: pd.DataFrame | None = None
    increments: pd.DataFrame | None = None
    grid: np.ndarray | None = None
    exact_occupancy: pd.DataFrame | None = None
    exact_note: str = ""
    survival: pd.DataFrame | None = None
    occupancy: pd.DataFrame | None = None
    study: StudyResult | None = None
    seconds: dict[str, float] = field(default_factory=dict)
    skipped: dict[str, str] = field(default_factory=dict)
    failed: dict[str, str] = field(default_factory=dict)  # stage name -> what went wrong (see run_stages)

    def check_cancel(self, what: str = "run") -> None:
        if cancel_requested(self.cancel):
            raise SimulationCancelled(f"{what} cancelled")


@dataclass(frozen=True)
class Stage:
    """One named step of a run (see the module docstring)."""

    name: str
    label: str
    run: Callable[[RunState], None]
    skip: Callable[[RunState], str] = lambda state: ""
    total: Callable[[RunState], int] = lambda state: 1
    # a stage after the simulation whose failure is recorded and the run goes on (with this clean-up)
    on_failure: Callable[[RunState, str], None] | None = None


def _simulate(state: RunState) -> None:
    plan = state.plan
    done = 0
    jobs = chunk_jobs(plan.model, plan.patients, plan.seed, plan.chunk_size, plan.strategies)
    with closing(state.executor.map(simulate_chunk, jobs)) as chunks:
        for chunk in chunks:
            for sink in state.sinks:
                sink.add(chunk)
            state.n_events += len(chunk.events)
            done += chunk.n_patients
            state.report("simulating", done, plan.patients)
            state.check_cancel("simulation")  # before the next chunk is waited for
    state.simulation = next((s for s in (k.simulation() for k in state.sinks) if s is not None), None)
    state.accumulator = next((a for a in (k.accumulator() for k in state.sinks) if a is not None), None)


def _outcomes(state: RunState) -> None:
    model = state.plan.model
    comparator, wtp = model.strategy_names[0], model.valuation.willingness_to_pay
    if state.simulation is not None:
        per = patient_outcomes(state.simulation)
        state.per_patient = per
        state.outcomes = summarise(per)
        state.increments = (incremental(per, comparator, wtp) if len(model.strategies) > 1
                            else pd.DataFrame(columns=INCREMENT_COLUMNS))
    elif state.accumulator is not None:
        state.outcomes = state.accumulator.summary()
        state.increments = state.accumulator.increments()
    else:
        raise ValueError("no sink kept the log or accumulated the outcomes; give a MemorySink or a StreamSink")


def _exact(state: RunState) -> None:
    model = state.plan.model
    assert state.outcomes is not None and state.increments is not None
    state.grid = time_grid(state.scenario)
    exact_values = None
    if model.is_markov:  # one solve gives the exact outcomes and the occupancy curves
        try:
            exact_values, state.exact_occupancy = exact_outcomes_and_occupancy(model, state.grid, cancel=state.cancel)
        except NoExactSolution as err:  # beyond the solver's bounded work: the simulation's results stand
            exact_values = err
    state.outcomes, state.increments, state.exact_note = with_exact(
        model, state.outcomes, state.increments, model.strategy_names[0], model.valuation.willingness_to_pay,
        exact=exact_values)


def _estimates(state: RunState) -> None:
    sim, model = state.simulation, state.plan.model
    assert sim is not None and state.grid is not None
    surv, occ = [], []
    for name in sim.metadata["strategies"]:
        ev, pt = sim.strategy(name)
        surv.append(survival_to_own_horizon(pt).assign(strategy=name))
        occ.append(occupancy_to_own_horizon(ev, pt, model.state_names, state.grid).assign(strategy=name))
    state.survival = pd.concat(surv, ignore_index=True)
    state.occupancy = pd.concat(occ, ignore_index=True)


def _study(state: RunState) -> None:
    plan = state.plan
    # semi-Markov: the run's simulation is the reference (all its patients); Markov: the exact solution
    reference = None if plan.model.is_markov else state.outcomes
    state.study = discretization_study(plan.model, cycle_lengths=plan.cycle_lengths, tolerance=plan.tolerance,
                                       n_patients=plan.patients, seed=plan.seed, cancel=state.cancel,
                                       simulated_reference=reference, tunnel_entry=plan.tunnel_entry,
                                       progress=lambda d, n: state.report("error study", d, n))


def _no_log(state: RunState) -> str:
    return ("" if state.simulation is not None else
            "the event log was streamed to disk and not kept; Kaplan-Meier and Aalen-Johansen estimates need "
            "every history (run with a MemorySink as well to get them)")


def _without_exact(state: RunState, why: str) -> None:
    """After a failed exact stage: the simulated outcomes with empty exact columns, and the reason."""
    assert state.outcomes is not None and state.increments is not None
    if state.grid is None:
        state.grid = time_grid(state.scenario)
    if "exact" not in state.outcomes:
        state.outcomes = state.outcomes.assign(exact=np.nan, z=np.nan)
    if "exact" not in state.increments:
        state.increments = state.increments.assign(exact=np.nan)
    state.exact_occupancy = None
    state.exact_note = f"no exact solution: the exact stage failed ({why})"


STAGES: tuple[Stage, ...] = (
    Stage("simulation", "simulating", _simulate, total=lambda state: state.plan.patients),
    Stage("outcomes", "outcomes", _outcomes),
    Stage("exact", "exact solution", _exact, on_failure=_without_exact),
    Stage("estimates", "estimates", _estimates, skip=_no_log, on_failure=lambda state, why: None),
    Stage("study", "error study", _study, skip=lambda state: "" if state.want_study else "not asked for",
          on_failure=lambda state, why: None),
)


def run_stages(state: RunState, stages: tuple[Stage, ...] = STAGES) -> RunState:
    """Run ``stages`` in order on ``state``: check for a cancel request, skip a stage that does not
    apply (recording why in ``state.skipped``), report ``(label, 0, total)``, run it and record its
    seconds in ``state.seconds``.

    A finished simulation is never lost: when a stage with an ``on_failure`` clean-up (exact solution,
    estimates, error study) raises anything but a cancel request, :func:`failure_text` of the error
    goes to ``state.failed`` (a :class:`StageFailure` saying whether the input caused it) and the run
    goes on with what it has."""
    for stage in stages:
        state.check_cancel()
        reason = stage.skip(state)
        if reason:
            state.skipped[stage.name] = reason
            continue
        state.report(stage.label, 0, stage.total(state))
        t0 = time.perf_counter()
        try:
            stage.run(state)
        except SimulationCancelled:
            raise
        except Exception as err:  # noqa: BLE001 - recorded, reported with the results (CLI: exit 2 or 1)
            if stage.on_failure is None:
                raise
            state.failed[stage.name] = StageFailure(failure_text(err), by_input=input_caused(err))
            stage.on_failure(state, state.failed[stage.name])
        state.seconds[stage.name] = time.perf_counter() - t0
    return state


class StageFailure(str):
    """The one-line account of a failed stage (a ``str``, as in ``RunResults.failed``) with
    :attr:`by_input`: True when the user's input caused it (see :func:`input_caused`; the command
    line exits 2), False for a bug (exit 1)."""

    by_input: bool

    def __new__(cls, text: str, by_input: bool = False) -> StageFailure:
        obj = super().__new__(cls, text)
        obj.by_input = by_input
        return obj

    def __reduce__(self):  # picklable with its cause (process and Dask executors)
        return (StageFailure, (str(self), self.by_input))


def input_caused(err: BaseException) -> bool:
    """Whether a stage failed because of the user's input: a :class:`sim.problems.ValidationError`
    (a scenario, hazard or export problem naming its key), the engine's stop for a runaway chain of
    moves (:class:`sim.engine.SimulationError`, as for the simulation itself) or a model the exact
    solver cannot cope with (:class:`sim.reference.NoExactSolution`). Anything else is a bug."""
    return isinstance(err, (ValidationError, SimulationError, NoExactSolution))


def failure_text(err: BaseException) -> str:
    """A one-line account of a failed stage: the message of an input problem
    (:class:`sim.problems.ValidationError`), else the error's type and message (a bug to report)."""
    if isinstance(err, ValidationError):
        return str(err)
    text = str(err).strip().splitlines()[0] if str(err).strip() else ""
    return f"{type(err).__name__}: {text}" if text else type(err).__name__

