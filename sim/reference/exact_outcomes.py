"""Outcomes from the exact (Kolmogorov forward) solution, with the definitions of
:mod:`sim.analysis.outcomes` so that simulated, exact and cycle-based results are comparable, and the
merge of exact values into simulated summaries."""

from __future__ import annotations

from typing import Callable

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..analysis.outcomes import combine_outcomes, increments_from_values
from ..engine import CancelToken
from ..model.multistate import Model
from .exact import NoExactSolution, at_own_horizon, occupancy_frame, population_pairs, solve_stacked

__all__ = ["exact_outcomes", "exact_outcomes_and_occupancy", "with_exact"]


def exact_outcomes(model: Model, strategies: tuple[str, ...] | None = None, n_nodes: int = 48,
                   cancel: CancelToken | Callable[[], bool] | None = None) -> pd.DataFrame:
    """Outcomes from the Kolmogorov forward solution (Markov models only): columns strategy, outcome,
    value. Time in state and transition flows are integrated in the same ODE (see
    :mod:`sim.reference.exact`). Raises :class:`NoExactSolution` (semi-Markov model, or the solver's
    bounded work does not reach the solution) and, on a ``cancel`` request,
    :class:`sim.engine.SimulationCancelled`."""
    return exact_outcomes_and_occupancy(model, np.zeros(1), strategies, n_nodes, cancel)[0]


def exact_outcomes_and_occupancy(model: Model, times: NDArray[np.float64], strategies: tuple[str, ...] | None = None,
                                 n_nodes: int = 48, cancel: CancelToken | Callable[[], bool] | None = None
                                 ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """:func:`exact_outcomes` and the population-averaged state occupancy at ``times`` (columns
    strategy, time, state, probability, as ``sim.reference.exact.solve_exact(...).occupancy``) from one
    solve of the forward equations for all strategies; ``cancel`` as for :func:`exact_outcomes`.

    Each (entry age, sex) pair contributes its occupancy at ``min(t, its horizon)``: past its
    horizon it counts in the state it occupied when follow-up ended, the quantity the simulation
    estimates to the last horizon (:func:`sim.analysis.occupancy_to_own_horizon`; docs/methods.md,
    'Curves to the last horizon'). Where ``t`` is within every horizon this is
    ``solve_exact(...).occupancy``."""
    val = model.valuation
    rates = (0.0, val.discount_effects, val.discount_costs)
    age, sex, w = population_pairs(model, n_nodes)
    horizon = model.horizon.time_limit(age)
    times = np.atleast_1d(np.asarray(times, dtype=float))
    rows, occupancy = [], []
    names = tuple(strategies or model.strategy_names)
    at, where = at_own_horizon(times, horizon)  # read each pair at min(t, own horizon)
    # one solve for all strategies, each pair only to its own horizon (all that is read)
    sol = solve_stacked(model, names, age, sex, at, horizon, rates, cancel, to_horizon=True)
    m0 = age.size
    states = model.state_names
    for j, strategy in enumerate(names):
        block = slice(j * m0, (j + 1) * m0)
        integrals = np.einsum("m,rmn->rn", w, sol.integrals[:, block])
        flows = np.einsum("m,rmk->rk", w, sol.flows[:, block])
        c_exit = model.exit_costs(strategy)[sol.exit_index]
        values = combine_outcomes(model, strategy, integrals[0], integrals[1], integrals[2],
                          (flows[0] @ c_exit, flows[2] @ c_exit))
        rows += [(strategy, k, float(v)) for k, v in values.items()]
        own = np.take_along_axis(sol.occupancy[block], where[:, :, None], axis=1)  # (pairs, times, states)
        occupancy.append(occupancy_frame(strategy, times, states, np.einsum("m,mtn->tn", w, own)))
    return (pd.DataFrame(rows, columns=["strategy", "outcome", "value"]),
            pd.concat(occupancy, ignore_index=True))


def with_exact(model: Model, summary: pd.DataFrame, increments: pd.DataFrame, comparator: str,
               willingness_to_pay: float, exact: pd.DataFrame | NoExactSolution | None = None
               ) -> tuple[pd.DataFrame, pd.DataFrame, str]:
    """Add an ``exact`` column (and ``z`` = (mean - exact) / mcse, NaN where mcse is 0 or missing) to
    simulated summaries and increments. For a semi-Markov model the columns are NaN and the returned note says why.
    ``exact`` is the :func:`exact_outcomes` table if the caller already has it, or the
    :class:`NoExactSolution` the caller met (the columns are then NaN and the note is its message)."""
    try:
        if isinstance(exact, NoExactSolution):
            raise exact
        if exact is None:
            exact = exact_outcomes(model)
    except NoExactSolution as err:
        summary = summary.assign(exact=np.nan, z=np.nan)
        return summary, increments.assign(exact=np.nan), str(err)
    summary = summary.merge(exact.rename(columns={"value": "exact"}), on=["strategy", "outcome"], how="left")
    # z is undefined (NaN, shown blank) where the Monte Carlo standard error is 0: every simulated
    # patient gave the same value, so a difference from the exact value is not a sampling error
    mcse = summary["mcse"].to_numpy(dtype=float)
    diff = (summary["mean"] - summary["exact"]).to_numpy(dtype=float)
    summary["z"] = np.divide(diff, mcse, out=np.full(len(summary), np.nan), where=mcse > 0)
    if len(increments):
        ex_inc = increments_from_values(exact, comparator, willingness_to_pay).melt(
            id_vars=["strategy", "comparator"], var_name="quantity", value_name="exact")
        increments = increments.merge(ex_inc, on=["strategy", "comparator", "quantity"], how="left")
    else:
        increments = increments.assign(exact=np.nan)
    return summary, increments, ""
