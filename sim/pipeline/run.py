"""One run of a scenario from start to finish, shared by the command line and the desktop window:

simulate -> outcomes with MCSE -> increments -> exact solution (Markov models) -> survival and
occupancy estimates on a time grid -> the discretization-error study.

Long work reports progress as ``progress(stage, done, total)`` and honours a cancel request (an
object with ``is_set()`` or a callable) between simulation chunks, between stages and between the
error study's traces.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from ..engine.histories import SimulationCancelled, SimulationResult, cancel_requested, chunk_size_for, simulate
from ..analysis import kaplan_meier, state_occupancy
from ..analysis.outcomes import incremental, patient_outcomes, summarise
from ..reference.exact_outcomes import exact_outcomes_and_occupancy, with_exact
from ..io.scenario import Scenario
from ..reference.study import StudyResult, discretization_study

__all__ = ["RunResults", "run_scenario", "time_grid"]

Progress = Callable[[str, int, int], None]


@dataclass(frozen=True)
class RunResults:
    """Everything a finished run produced (pandas tables; see each field).

    outcomes : strategy, outcome, mean, mcse, n (simulated), plus ``exact`` where available.
    increments : strategy, comparator, quantity, value, mcse (paired), mcse_unpaired, exact.
    survival : strategy, time, survival, std_error (Kaplan-Meier of time to absorption).
    occupancy : strategy, time, state, probability, std_error (Aalen-Johansen on ``grid``).
    exact_occupancy : strategy, time, state, probability (Kolmogorov), or None.
    exact_note : why there is no exact solution, or "".
    study : the discretization-error study, or None if not asked for.
    """

    scenario: Scenario
    simulation: SimulationResult
    per_patient: pd.DataFrame
    outcomes: pd.DataFrame
    increments: pd.DataFrame
    survival: pd.DataFrame
    occupancy: pd.DataFrame
    grid: np.ndarray
    exact_occupancy: pd.DataFrame | None
    exact_note: str
    study: StudyResult | None
    settings: dict
    seconds: dict = field(default_factory=dict)


def time_grid(scenario: Scenario, points: int = 121) -> np.ndarray:
    """Times since entry for curves: 0 to the earliest horizon (all patients still followed), so that
    estimates and exact curves are comparable without horizon censoring."""
    model = scenario.model
    t_max = float(model.horizon.time_limit(np.array([model.population.entry_age.high]))[0])
    if t_max <= 0:
        t_max = float(model.horizon.time_limit(np.array([model.population.entry_age.mean]))[0])
    return np.linspace(0.0, t_max, points)


def run_scenario(scenario: Scenario, *, patients: int | None = None, seed: int | None = None,
                 workers: int | None = None, study: bool = True, progress: Progress | None = None,
                 cancel=None) -> RunResults:
    """Run a validated scenario; arguments override the scenario's run settings."""
    model, run = scenario.model, scenario.run
    settings = {"patients": int(patients or run.patients), "seed": int(run.seed if seed is None else seed),
                "workers": int(workers or run.workers), "chunk_size": int(run.chunk_size),
                "cycle_lengths": tuple(run.cycle_lengths), "tolerance": float(run.tolerance)}
    report = progress or (lambda stage, done, total: None)
    seconds: dict[str, float] = {}
    t0 = time.perf_counter()
    sim = simulate(model, settings["patients"], settings["seed"], chunk_size=chunk_size_for(
                   settings["patients"], settings["chunk_size"]), workers=settings["workers"],
                   progress=lambda d, n: report("simulating", d, n), cancel=cancel)
    seconds["simulation"] = time.perf_counter() - t0

    def stage(name: str) -> None:
        if cancel_requested(cancel):
            raise SimulationCancelled("run cancelled")
        report(name, 0, 1)

    stage("outcomes")
    per = patient_outcomes(sim)
    summary = summarise(per)
    comparator = model.strategy_names[0]
    wtp = model.valuation.willingness_to_pay
    inc = incremental(per, comparator, wtp) if len(model.strategies) > 1 else pd.DataFrame(
        columns=["strategy", "comparator", "quantity", "value", "mcse", "mcse_unpaired"])
    grid = time_grid(scenario)
    exact_occ = None
    note = ""
    stage("exact solution")
    t1 = time.perf_counter()
    exact_values = None
    if model.is_markov:  # one solve gives the exact outcomes and the occupancy curves
        exact_values, exact_occ = exact_outcomes_and_occupancy(model, grid)
    summary, inc, note = with_exact(model, summary, inc, comparator, wtp, exact=exact_values)
    seconds["exact"] = time.perf_counter() - t1
    stage("estimates")
    t2 = time.perf_counter()
    surv, occ = [], []
    for name in sim.metadata["strategies"]:
        ev, pt = sim.strategy(name)
        km = kaplan_meier(pt)
        surv.append(km.assign(strategy=name))
        occ.append(state_occupancy(ev, pt, model.state_names, grid).assign(strategy=name))
    seconds["estimates"] = time.perf_counter() - t2
    result_study = None
    if study:
        stage("error study")
        t3 = time.perf_counter()
        result_study = discretization_study(model, cycle_lengths=settings["cycle_lengths"],
                                            tolerance=settings["tolerance"], n_patients=settings["patients"],
                                            seed=settings["seed"], cancel=cancel,
                                            progress=lambda d, n: report("error study", d, n))
        seconds["study"] = time.perf_counter() - t3
    report("done", 1, 1)
    return RunResults(scenario=scenario, simulation=sim, per_patient=per, outcomes=summary, increments=inc,
                      survival=pd.concat(surv, ignore_index=True), occupancy=pd.concat(occ, ignore_index=True),
                      grid=grid, exact_occupancy=exact_occ, exact_note=note, study=result_study,
                      settings=settings, seconds=seconds)
