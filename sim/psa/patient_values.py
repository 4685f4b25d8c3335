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


def _discounted(start: NDArray, end: NDArray, delta: NDArray, positive: bool) -> NDArray:
    """Discounted length of [start, end] at per-row continuous rates ``delta`` = ln(1 + d)
    (undiscounted where d is 0; ``positive``: every d > 0), the expression of
    ``sim.analysis.time_in_state``: exp(-delta t0) (-expm1(-delta (t1 - t0))) / delta."""
    with np.errstate(divide="ignore", invalid="ignore"):
        d = np.exp(-delta * start) * -np.expm1(-delta * (end - start)) / delta
    return d if positive else np.where(delta > 0.0, d, end - start)


def _strategy_rows(table: pd.DataFrame, k: int) -> slice:
    """Rows of the ``k``-th strategy (the engine's tables are sorted by strategy)."""
    codes = table["strategy"].cat.codes.to_numpy()
    a, b = np.searchsorted(codes, [k, k + 1])
    return slice(int(a), int(b))


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
    k = list(patients["strategy"].cat.categories).index(strategy)
    er, pr = _strategy_rows(events, k), _strategy_rows(patients, k)
    n, n_states = pr.stop - pr.start, len(model.states)
    e_pid = events["patient"].to_numpy()[er] - first
    e_time = events["time"].to_numpy()[er]
    e_from = events["from_state"].cat.codes.to_numpy()[er]
    e_exit = events["transition"].cat.codes.to_numpy()[er]
    exit_time = patients["exit_time"].to_numpy()[pr]
    final = patients["final_state"].cat.codes.to_numpy()[pr]
    # sojourns: one ending at each move (from the previous move, or entry), and the last one to exit
    same = e_pid[1:] == e_pid[:-1]
    e_start = np.empty(e_pid.size)
    if e_pid.size:
        e_start[0] = 0.0
        e_start[1:] = np.where(same, e_time[:-1], 0.0)
    last_move = np.ones(e_pid.size, dtype=bool)
    last_move[:-1] = ~same
    last_time = np.zeros(n)
    last_time[e_pid[last_move]] = e_time[last_move]
    pid = np.concatenate((e_pid, np.arange(n)))
    # cells state-major (state * n + patient): each state's column is contiguous below
    cell = np.concatenate((e_from, final)).astype(np.int64) * n + pid
    start = np.concatenate((e_start, last_time))
    end = np.concatenate((e_time, exit_time))
    row_draw: list = []  # each sojourn's draw, computed only if the discount rates differ by draw

    def rate_of(rates: NDArray, rows: NDArray, draw_of_rows) -> NDArray | float:
        """ln(1 + d) per row, or one number when every draw has the same rate (the same bits)."""
        delta = np.log1p(rates)
        if np.all(delta == delta[0]):
            return float(delta[0])
        if not draw_of_rows:
            draw_of_rows.append(rows // n_per_draw)
        return delta[draw_of_rows[0]]

    def years(rates: NDArray | None) -> NDArray:
        if rates is None:
            length = end - start
        else:
            length = _discounted(start, end, rate_of(rates, pid, row_draw), bool(np.all(rates > 0.0)))
        return np.bincount(cell, weights=length, minlength=n * n_states).reshape(n_states, n)

    y = years(None)
    y_e = years(values.discount_effects)
    same_rates = np.array_equal(values.discount_effects, values.discount_costs)
    y_c = y_e if same_rates else years(values.discount_costs)
    # one-off costs at each move, by the model's exit numbering, discounted at the move
    e_draw = e_pid // n_per_draw
    c = values.exit_cost[e_draw, e_exit]
    one_off = np.bincount(e_pid, weights=c, minlength=n)
    one_off_d = np.bincount(e_pid, weights=c * np.exp(-rate_of(values.discount_costs, e_pid, []) * e_time),
                            minlength=n)
    alive = [j for j, s in enumerate(model.states) if not s.absorbing]
    n_draws = -(-n // n_per_draw)

    def per_patient(column: NDArray) -> NDArray:
        """A per-draw value spread over the draw's patients."""
        return np.repeat(column, n_per_draw)[:n] if n_draws > 1 else np.full(n, column[0])

    def weighted(t: NDArray, w: NDArray | None) -> NDArray:
        # explicit sum over states in a fixed order: the same bits for any number of rows
        out = np.zeros(n)
        for j in (alive if w is None else range(n_states)):
            if w is None:
                out += t[j]
            elif np.any(w[:, j] != 0.0):
                out += t[j] * per_patient(w[:, j])
        return out

    u, kost = values.utility, values.state_cost
    return {"life_years": weighted(y, None), "life_years_discounted": weighted(y_e, None),
            "qalys": weighted(y, u), "qalys_discounted": weighted(y_e, u),
            "costs": weighted(y, kost) + one_off, "costs_discounted": weighted(y_c, kost) + one_off_d}


def draw_means(values: dict[str, NDArray[np.float64]], n_per_draw: int,
               comparator: dict[str, NDArray[np.float64]] | None = None) -> dict[str, NDArray[np.float64]]:
    """Per draw: the mean of each outcome and its Monte Carlo standard error s / sqrt(n) (NaN for
    n = 1) (docs/methods.md, 'Estimators'), as ``<outcome>`` and ``<outcome>_mcse`` arrays (D,).

    With ``comparator`` (the same patients' outcomes under the comparator strategy, common random
    numbers) also ``<outcome>_mcse_paired``: the MCSE of the mean difference from the comparator,
    from the per-patient differences within the draw, ``s_d / sqrt(n)`` with
    ``s_d² = Σ (x_i - y_i - (x̄ - ȳ))² / (n - 1)`` (the paired-sample standard error; with
    positively correlated outcomes it is below the independent ``sqrt(se_x² + se_y²)``: Stout &
    Goldie 2008, Health Care Manag Sci 11:399-406). 0 for the comparator itself, NaN for n = 1.
    """
    out: dict[str, NDArray[np.float64]] = {}
    for name in OUTCOMES:
        x = values[name].reshape(-1, n_per_draw)
        mean = x.mean(axis=1)
        out[name] = mean
        out[f"{name}_mcse"] = _mcse(x, mean, n_per_draw)
        if comparator is not None:
            d = x - comparator[name].reshape(-1, n_per_draw)
            out[f"{name}_mcse_paired"] = _mcse(d, d.mean(axis=1), n_per_draw)
    return out


def _mcse(x: NDArray[np.float64], mean: NDArray[np.float64], n_per_draw: int) -> NDArray[np.float64]:
    """Row by row: the sample standard deviation over sqrt(n) (NaN for n = 1)."""
    if n_per_draw > 1:
        return np.sqrt(((x - mean[:, None]) ** 2).sum(axis=1) / (n_per_draw - 1)) / np.sqrt(n_per_draw)
    return np.full(mean.size, np.nan)
