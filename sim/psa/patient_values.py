"""Per-patient outcomes of a block of parameter draws, straight from the engine's tables, and their
per-draw means with Monte Carlo standard errors.

A block holds ``D`` draws of ``n`` patients each (patients ``first_draw * n ..`` in draw order, as
:func:`sim.engine.simulate_draws` and :func:`sim.engine.simulate_range` give them). Every draw has
its own valuation (utilities, state and transition costs, discount rates), spread to its patients as
per-patient arrays, so that the whole block is valued in a few array operations and a block of one
draw goes through exactly the same operations as a block of many: each patient's outcomes, and
hence each draw's means, have the same bits whatever the block size (tested).

Definitions as :mod:`sim.analysis.outcomes` (docs/methods.md, 'Outcomes and increments'): a sojourn
from t0 to t1 accrues t1 - t0 years, or exp(-delta t0) (-expm1(-delta (t1 - t0))) / delta discounted
years with delta = ln(1 + d); a one-off transition cost at t is discounted by exp(-delta t). The
engine's tables are trusted (sorted by patient, then time; checked by the engine's own tests), so
none of the event-log validation of :mod:`sim.analysis` is repeated here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..analysis import OUTCOMES
from ..model import Model

__all__ = ["Valuations", "block_outcomes", "draw_means"]


@dataclass(frozen=True)
class Valuations:
    """Per-draw values of one strategy: ``utility`` and ``state_cost`` (D, states), ``exit_cost``
    (D, exits; the model's exit numbering), ``discount_effects`` and ``discount_costs`` (D,)."""

    utility: NDArray[np.float64]
    state_cost: NDArray[np.float64]
    exit_cost: NDArray[np.float64]
    discount_effects: NDArray[np.float64]
    discount_costs: NDArray[np.float64]

    @classmethod
    def of(cls, models: list[Model], strategy: str) -> "Valuations":
        pairs = [m.state_values(strategy) for m in models]
        return cls(utility=np.array([u for u, _ in pairs]), state_cost=np.array([c for _, c in pairs]),
                   exit_cost=np.array([m.exit_costs(strategy) for m in models]),
                   discount_effects=np.array([m.valuation.discount_effects for m in models], dtype=float),
                   discount_costs=np.array([m.valuation.discount_costs for m in models], dtype=float))


def _discounted(start: NDArray, end: NDArray, rate: NDArray) -> NDArray:
    """Discounted length of [start, end] at per-row annual rates (undiscounted where the rate is 0),
    the expression of ``sim.analysis.time_in_state``."""
    delta = np.log1p(rate)
    with np.errstate(divide="ignore", invalid="ignore"):
        d = np.exp(-delta * start) * -np.expm1(-delta * (end - start)) / delta
    return np.where(rate > 0.0, d, end - start)


def _years(n: int, n_states: int, pid: NDArray, state: NDArray, start: NDArray, end: NDArray,
           rate: NDArray | None) -> NDArray:
    length = end - start if rate is None else _discounted(start, end, rate)
    return np.bincount(pid * n_states + state, weights=length, minlength=n * n_states).reshape(n, n_states)


def block_outcomes(model: Model, strategy: str, events: pd.DataFrame, patients: pd.DataFrame, first: int,
                   n_per_draw: int, values: Valuations) -> dict[str, NDArray[np.float64]]:
    """Each patient's outcomes (:data:`sim.analysis.OUTCOMES`) under ``strategy``, in patient order.

    Parameters
    ----------
    model : any draw's model (only its states are read: the same in every draw).
    events, patients : the engine's tables of the block (every strategy; rows by strategy, then
        patient, then time).
    first : the block's first patient id; patient ``p`` belongs to draw ``(p - first) // n_per_draw``
        of the block.
    values : the block's per-draw valuation of ``strategy``.
    """
    ev = events[events["strategy"] == strategy] if events["strategy"].nunique() > 1 else events
    pt = patients[patients["strategy"] == strategy] if patients["strategy"].nunique() > 1 else patients
    n, n_states = len(pt), len(model.states)
    draw = np.arange(n) // n_per_draw  # patients come in id order, one block of draws
    e_pid = ev["patient"].to_numpy() - first
    e_time = ev["time"].to_numpy()
    e_from = ev["from_state"].cat.codes.to_numpy().astype(np.int64)
    exit_time = pt["exit_time"].to_numpy()
    final = pt["final_state"].cat.codes.to_numpy().astype(np.int64)
    # sojourns: one ending at each move (from the previous move, or entry), and the last one to exit
    first_move = np.ones(e_pid.size, dtype=bool)
    first_move[1:] = e_pid[1:] != e_pid[:-1]
    last_move = np.ones(e_pid.size, dtype=bool)
    last_move[:-1] = e_pid[1:] != e_pid[:-1]
    e_start = np.where(first_move, 0.0, np.concatenate(([0.0], e_time[:-1])))
    last_time = np.zeros(n)
    last_time[e_pid[last_move]] = e_time[last_move]
    pid = np.concatenate((e_pid, np.arange(n)))
    state = np.concatenate((e_from, final))
    start = np.concatenate((e_start, last_time))
    end = np.concatenate((e_time, exit_time))
    row_draw = draw[pid]
    years = _years(n, n_states, pid, state, start, end, None)
    years_e = _years(n, n_states, pid, state, start, end, values.discount_effects[row_draw])
    years_c = _years(n, n_states, pid, state, start, end, values.discount_costs[row_draw])
    # one-off costs at each move, by the model's exit numbering, discounted at the move
    e_draw = draw[e_pid]
    c = values.exit_cost[e_draw, ev["transition"].cat.codes.to_numpy().astype(np.int64)]
    one_off = np.bincount(e_pid, weights=c, minlength=n)
    one_off_d = np.bincount(e_pid, weights=c * np.exp(-np.log1p(values.discount_costs[e_draw]) * e_time), minlength=n)
    alive = [j for j, s in enumerate(model.states) if not s.absorbing]
    u = values.utility[draw]
    k = values.state_cost[draw]

    def weighted(y: NDArray, w: NDArray | None) -> NDArray:
        # explicit sum over states in a fixed order: the same bits for any number of rows
        out = np.zeros(n)
        for j in (alive if w is None else range(n_states)):
            out += y[:, j] if w is None else y[:, j] * w[:, j]
        return out

    return {"life_years": weighted(years, None), "life_years_discounted": weighted(years_e, None),
            "qalys": weighted(years, u), "qalys_discounted": weighted(years_e, u),
            "costs": weighted(years, k) + one_off, "costs_discounted": weighted(years_c, k) + one_off_d}


def draw_means(values: dict[str, NDArray[np.float64]], n_per_draw: int) -> dict[str, NDArray[np.float64]]:
    """Per draw: the mean of each outcome and its Monte Carlo standard error s / sqrt(n) (NaN for
    n = 1) (docs/methods.md, 'Estimators'), as ``<outcome>`` and ``<outcome>_mcse`` arrays (D,)."""
    out: dict[str, NDArray[np.float64]] = {}
    for name in OUTCOMES:
        x = values[name].reshape(-1, n_per_draw)
        mean = x.mean(axis=1)
        out[name] = mean
        if n_per_draw > 1:
            out[f"{name}_mcse"] = np.sqrt(((x - mean[:, None]) ** 2).sum(axis=1) / (n_per_draw - 1)) / np.sqrt(n_per_draw)
        else:
            out[f"{name}_mcse"] = np.full(mean.size, np.nan)
    return out
