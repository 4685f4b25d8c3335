"""What a finished run hands back: :class:`RunResults`, and the time grid its curves use."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..engine import SimulationResult
from ..io import Scenario
from ..reference import StudyResult

__all__ = ["RunResults", "time_grid"]


@dataclass(frozen=True)
class RunResults:
    """Everything a finished run produced (pandas tables; see each field).

    simulation : the event log and patient table, or None when the run's sinks did not keep them
        (a run streamed to disk only).
    per_patient : each patient's outcomes per strategy, or None when the log was not kept.
    outcomes : strategy, outcome, mean, mcse, n (simulated), plus ``exact`` and ``z`` (NaN where
        there is no exact solution).
    increments : strategy, comparator, quantity, value, mcse (paired), mcse_unpaired, exact.
    survival : strategy, time, survival, std_error (Kaplan-Meier of time to absorption), or None
        when the log was not kept (see ``skipped``).
    occupancy : strategy, time, state, probability, std_error (Aalen-Johansen on ``grid``), or None
        when the log was not kept.
    grid : times since entry of the curves (:func:`time_grid`).
    exact_occupancy : strategy, time, state, probability (Kolmogorov), or None.
    exact_note : why there is no exact solution, or "".
    study : the discretization-error study, or None if not asked for.
    settings : patients, seed, workers, chunk_size, cycle_lengths, tolerance.
    seconds : wall-clock seconds of each stage that ran (simulation, outcomes, exact, estimates,
        study); their sum is the run's time.
    n_events : transitions simulated over all strategies.
    skipped : stage name -> why it did not run.
    """

    scenario: Scenario
    simulation: SimulationResult | None
    per_patient: pd.DataFrame | None
    outcomes: pd.DataFrame
    increments: pd.DataFrame
    survival: pd.DataFrame | None
    occupancy: pd.DataFrame | None
    grid: np.ndarray
    exact_occupancy: pd.DataFrame | None
    exact_note: str
    study: StudyResult | None
    settings: dict
    seconds: dict = field(default_factory=dict)
    n_events: int = 0
    skipped: dict = field(default_factory=dict)


def time_grid(scenario: Scenario, points: int = 121) -> np.ndarray:
    """Times since entry for curves: 0 to the earliest horizon (all patients still followed), so that
    estimates and exact curves are comparable without horizon censoring."""
    model = scenario.model
    t_max = float(model.horizon.time_limit(np.array([model.population.entry_age.high]))[0])
    if t_max <= 0:
        t_max = float(model.horizon.time_limit(np.array([model.population.entry_age.mean]))[0])
    return np.linspace(0.0, t_max, points)
