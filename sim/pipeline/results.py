"""What a finished run hands back: :class:`RunResults`, and the time grid its curves use."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..engine import SimulationResult
from ..io import Scenario
from ..reference import StudyResult

__all__ = ["RunResults", "time_grid", "horizon_range"]


@dataclass(frozen=True)
class RunResults:
    """Everything a finished run produced (pandas tables; see each field).

    simulation : the event log and patient table, or None when the run's sinks did not keep them
        (a run streamed to disk only).
    per_patient : each patient's outcomes per strategy, or None when the log was not kept.
    outcomes : strategy, outcome, mean, mcse, n (simulated), plus ``exact`` and ``z`` (NaN where
        there is no exact solution).
    increments : strategy, comparator, quantity, value, mcse (paired), mcse_unpaired, exact.
    survival : strategy, time, events, survival, std_error: the probability of not being absorbed
        by min(t, own horizon) (:func:`sim.analysis.survival_to_own_horizon`; Kaplan-Meier up to the
        earliest horizon), or None when the log was not kept (see ``skipped``).
    occupancy : strategy, time, state, probability, std_error: the share in each state at min(t, own
        horizon) on ``grid`` (:func:`sim.analysis.occupancy_to_own_horizon`; Aalen-Johansen up to
        the earliest horizon), or None when the log was not kept.
    grid : times since entry of the curves (:func:`time_grid`), to the last horizon.
    exact_occupancy : strategy, time, state, probability (Kolmogorov), or None.
    exact_note : why there is no exact solution, or "".
    study : the discretization-error study, or None if not asked for.
    settings : patients, seed, workers, chunk_size, cycle_lengths, tolerance.
    seconds : wall-clock seconds of each stage that ran (simulation, outcomes, exact, estimates,
        study); their sum is the run's time.
    n_events : transitions simulated over all strategies.
    skipped : stage name -> why it did not run.
    failed : stage name -> what went wrong, for a stage after the simulation that failed (exact,
        estimates, study); the simulation and what was computed before are kept. Empty when every
        stage that ran finished (:attr:`complete`).
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
    failed: dict = field(default_factory=dict)

    @property
    def complete(self) -> bool:
        """Every stage that ran finished (no entry in :attr:`failed`)."""
        return not self.failed

    def failure_lines(self) -> list[str]:
        """One line per failed stage: ``"<stage> failed: <what went wrong>"``."""
        return [f"{stage} failed: {why}" for stage, why in self.failed.items()]


def horizon_range(scenario: Scenario) -> tuple[float, float]:
    """Earliest and last horizon in time since entry (equal for a horizon in time since entry; for
    one in attained age, those of the oldest and the youngest entry age)."""
    model = scenario.model
    ages = model.population.entry_age
    first = float(model.horizon.time_limit(np.array([ages.high]))[0])
    if first <= 0:
        first = float(model.horizon.time_limit(np.array([ages.mean]))[0])
    last = max(first, float(model.horizon.time_limit(np.array([ages.low]))[0]))
    return first, last


def time_grid(scenario: Scenario, points: int = 121) -> np.ndarray:
    """Times since entry for curves: ``points`` even times from 0 to the earliest horizon (every
    patient still followed), then on at the same spacing to the last horizon, where the curves count
    each patient past their own horizon in the state they were in at it (docs/methods.md, 'Curves to
    the last horizon')."""
    first, last = horizon_range(scenario)
    grid = np.linspace(0.0, first, points)
    if last > first * (1.0 + 1e-12) and points > 1:
        steps = max(1, int(np.ceil((last - first) / (grid[1] - grid[0]) - 1e-9)))
        grid = np.concatenate((grid, np.linspace(first, last, steps + 1)[1:]))
    return grid
