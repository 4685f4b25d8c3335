"""Health-economic outcomes with one set of definitions for simulated, exact and cohort results.

Outcomes per strategy (all to the horizon; docs/methods.md, 'Outcomes and increments'):

- ``life_years``: time alive (in non-absorbing states); ``life_years_discounted`` at the effects rate;
- ``qalys`` and ``qalys_discounted``: sum over states of utility x (discounted) time in the state;
- ``costs`` and ``costs_discounted``: per-year state costs x (discounted) time in the state, plus
  one-off transition costs, discounted at the moment of the move;
- ``years in <state>``: undiscounted time in each living state.

Discounting is continuous at delta = ln(1 + d): a sojourn t0..t1 accrues
(exp(-delta t0) - exp(-delta t1)) / delta and a one-off cost at t is multiplied by exp(-delta t).

Between strategies (against a comparator): incremental costs and QALYs (discounted), the ICER
dC / dE and the net monetary benefit NMB = lambda dE - dC at willingness to pay lambda. From a
simulation each comes with a Monte Carlo standard error computed on paired per-patient differences
(common random numbers: the same patient ids in every strategy), which is smaller than the unpaired
one when outcomes are positively correlated (Stout & Goldie 2008, Health Care Manag Sci
11(4):399-406). The ICER's MCSE is by the delta method: Var(dC/dE) ~ (Var dC - 2 R Cov + R^2 Var dE)
/ (n dE^2) with R the ICER (from memory; standard first-order Taylor expansion of a ratio).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..engine.histories import SimulationResult
from ._event_log import _prepare_log
from .outcome_sums import INCREMENTAL_COLUMNS, OutcomeAccumulator
from .time_in_state import _per_patient
from ..model.multistate import Model

__all__ = ["OUTCOMES", "OutcomeAccumulator", "patient_outcomes", "summarise", "incremental", "outcome_names",
           "increments_from_values", "combine_outcomes", "INCREMENTAL_COLUMNS"]

OUTCOMES = ("life_years", "life_years_discounted", "qalys", "qalys_discounted", "costs", "costs_discounted")


def outcome_names(model: Model) -> tuple[str, ...]:
    """The economic outcomes, then ``years in <state>`` for each living state."""
    return OUTCOMES + tuple(f"years in {s.name}" for s in model.states if not s.absorbing)


def combine_outcomes(model: Model, strategy: str, years: NDArray, years_e: NDArray, years_c: NDArray,
             moves_c: NDArray) -> dict[str, NDArray]:
    """Outcomes from time in state (undiscounted, at the effects rate, at the costs rate; last axis =
    states) and discounted one-off costs already summed per unit (``moves_c``)."""
    utility, cost = model.state_values(strategy)
    alive = np.array([not s.absorbing for s in model.states])
    out = {
        "life_years": years[..., alive].sum(axis=-1),
        "life_years_discounted": years_e[..., alive].sum(axis=-1),
        "qalys": years @ utility,
        "qalys_discounted": years_e @ utility,
    }
    one_off_undiscounted, one_off_discounted = moves_c
    out["costs"] = years @ cost + one_off_undiscounted
    out["costs_discounted"] = years_c @ cost + one_off_discounted
    for j, s in enumerate(model.states):
        if not s.absorbing:
            out[f"years in {s.name}"] = years[..., j]
    return out


# ----------------------------------------------------------------------------- simulation
def patient_outcomes(run: SimulationResult) -> pd.DataFrame:
    """Per-patient outcomes of a simulation: columns strategy, patient, then :func:`outcome_names`."""
    model, val = run.model, run.model.valuation
    d_c = np.log1p(val.discount_costs)
    frames = []
    for strategy in run.metadata.get("strategies", model.strategy_names):
        ev, pt = run.strategy(strategy)
        log = _prepare_log(ev, pt, model.state_names, strategy)
        yrs = _per_patient(log, 0.0)
        yrs_e = _per_patient(log, val.discount_effects)
        yrs_c = _per_patient(log, val.discount_costs)
        # one-off costs at each move, by the model's exit numbering
        cost_of_exit = model.exit_costs(strategy)
        codes = ev["transition"].cat.codes.to_numpy()
        c = cost_of_exit[codes]
        pid = np.searchsorted(yrs.index.to_numpy(), ev["patient"].to_numpy())
        undisc = np.bincount(pid, weights=c, minlength=len(yrs))
        disc = np.bincount(pid, weights=c * np.exp(-d_c * ev["time"].to_numpy()), minlength=len(yrs))
        values = combine_outcomes(model, strategy, yrs.to_numpy(), yrs_e.to_numpy(), yrs_c.to_numpy(), (undisc, disc))
        frame = pd.DataFrame(values)
        frame.insert(0, "patient", yrs.index.to_numpy())
        frame.insert(0, "strategy", strategy)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def summarise(per_patient: pd.DataFrame) -> pd.DataFrame:
    """Mean and Monte Carlo standard error (s / sqrt(n)) of every outcome per strategy (tidy: strategy,
    outcome, mean, mcse, n), from exact sums (:class:`OutcomeAccumulator`): the same bits as the
    accumulated chunks of a streamed or distributed run of the same patients."""
    return OutcomeAccumulator(None).add(per_patient).summary()


def incremental(per_patient: pd.DataFrame, comparator: str, willingness_to_pay: float,
                effect: str = "qalys_discounted", cost: str = "costs_discounted") -> pd.DataFrame:
    """Incremental analysis of every strategy against ``comparator`` with paired and unpaired MCSE.

    Returns columns strategy, comparator, quantity (delta_costs, delta_effects, icer, nmb), value,
    mcse (paired: from per-patient differences), mcse_unpaired (as if the strategies had independent
    patients); computed from exact sums by :class:`OutcomeAccumulator` (formulas in
    :mod:`sim.analysis.outcome_sums`).
    """
    present = set(per_patient["strategy"])
    if comparator not in present:
        raise ValueError(f"comparator must be one of {sorted(present)}, got {comparator!r}")
    return OutcomeAccumulator(comparator, willingness_to_pay, effect, cost).add(per_patient).increments()


def increments_from_values(values: pd.DataFrame, comparator: str, willingness_to_pay: float,
                           effect: str = "qalys_discounted", cost: str = "costs_discounted") -> pd.DataFrame:
    """Incremental analysis from deterministic per-strategy values (columns strategy, outcome, value):
    returns strategy, comparator, delta_costs, delta_effects, icer, nmb."""
    wide = values.pivot_table(index="strategy", columns="outcome", values="value", sort=False)
    if comparator not in wide.index:
        raise ValueError(f"comparator must be one of {list(wide.index)}, got {comparator!r}")
    rows = []
    for strategy in wide.index:
        if strategy == comparator:
            continue
        dc = wide.loc[strategy, cost] - wide.loc[comparator, cost]
        de = wide.loc[strategy, effect] - wide.loc[comparator, effect]
        rows.append((strategy, comparator, dc, de, dc / de if de != 0 else np.nan, willingness_to_pay * de - dc))
    return pd.DataFrame(rows, columns=["strategy", "comparator", "delta_costs", "delta_effects", "icer", "nmb"])
