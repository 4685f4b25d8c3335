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

    @property
    def failed_by_input(self) -> bool:
        """Some stage failed and every failure was caused by the user's input (each entry of
        :attr:`failed` a ``StageFailure`` with ``by_input``), not a bug: the command line exits 2."""
        return bool(self.failed) and all(getattr(why, "by_input", False) for why in self.failed.values())

    def failure_lines(self) -> list[str]:
        """One line per failed stage: ``"<stage> failed: <what went wrong>"``."""
        return [f"{stage} failed: {why}" for stage, why in self.failed.items()]

    def _repr_html_(self) -> str:
        """A compact HTML summary for notebooks: the model, the run's size and seed, and per strategy
        life years, discounted QALYs and discounted costs as mean (MCSE) with the exact value where
        there is one, each to the precision of its MCSE (:mod:`sim.analysis.display`); then the
        increments' net monetary benefit and any failed stage. The full report:
        :func:`sim.report.report_html`."""
        from html import escape

        from ..analysis import decimals_from_mcse, format_fixed

        model = self.scenario.model
        v = model.valuation
        keys = {"life_years": "life years", "qalys_discounted": "QALYs (disc.)",
                "costs_discounted": f"costs (disc., {v.currency})"}
        rows = self.outcomes[self.outcomes["outcome"].isin(keys)]
        head = "".join(f"<th>{escape(h)}</th>" for h in keys.values())
        body = []
        for strategy in model.strategy_names:
            cells = []
            for key in keys:
                r = rows[(rows["strategy"] == strategy) & (rows["outcome"] == key)]
                if not len(r):
                    cells.append("<td></td>")
                    continue
                mean, mcse = float(r["mean"].iloc[0]), float(r["mcse"].iloc[0])
                d = int(decimals_from_mcse([mcse])[0])
                d = d if d >= 0 else 2
                text = f"{format_fixed(mean, d)} ({format_fixed(mcse, d)})"
                exact = float(r["exact"].iloc[0]) if "exact" in r else float("nan")
                if exact == exact:
                    text += f"; exact {format_fixed(exact, d)}"
                cells.append(f'<td style="text-align:right">{escape(text)}</td>')
            body.append(f"<tr><th>{escape(strategy)}</th>{''.join(cells)}</tr>")
        s = self.settings
        lines = [f"<b>{escape(model.name)}</b>: {int(s.get('patients', 0)):,} patients per strategy, seed "
                 f"{escape(str(s.get('seed')))}, {self.n_events:,} events, {sum(self.seconds.values()):.1f} s; "
                 f"discounting {100 * v.discount_costs:g}% costs, {100 * v.discount_effects:g}% effects"]
        nmb = self.increments[self.increments["quantity"] == "nmb"] if "quantity" in self.increments else []
        for _, r in (nmb.iterrows() if len(nmb) else ()):
            d = int(decimals_from_mcse([float(r["mcse"])])[0])
            d = d if d >= 0 else 0
            lines.append(f"Net monetary benefit of {escape(str(r['strategy']))} vs {escape(str(r['comparator']))} at "
                         f"{v.willingness_to_pay:,.0f} {escape(v.currency)}/QALY: {format_fixed(float(r['value']), d)} "
                         f"(MCSE {format_fixed(float(r['mcse']), d)})")
        lines += [f"<span style='color:#b03a2e'>{escape(line)}</span>" for line in self.failure_lines()]
        table = (f"<table><thead><tr><th>mean (MCSE)</th>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>")
        return "<div>" + "<br/>".join(lines) + table + "</div>"


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
