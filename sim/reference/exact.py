"""Exact reference for Markov models: the Kolmogorov forward equations.

For a model whose exits depend only on attained age and time since entry (a constant hazard on the
time-in-state clock is memoryless and allowed), the state occupancy row vector p(t) of a patient who
entered at age a0 solves

    dp/dt = p Q(t; a0),  p(0) = p0 (e_initial, or the initial shares of the patient's sex),

with Q the generator: Q_ij(t) = sum of the hazards of the exits i -> j at their clock values, and
Q_ii = -sum_j Q_ij (docs/methods.md, 'Exact solution'; the forward equations for a time-inhomogeneous Markov
process, e.g. Andersen, Borgan, Gill & Keiding 1993, from memory). Time in each state up to the horizon
T is the integral of p over [0, T], computed alongside p in the same ODE, undiscounted and with
continuous discounting at delta = ln(1 + d): integral of exp(-delta t) p(t) dt.

Results are averaged over the entry-age distribution (Gauss-Legendre nodes on its quantile scale, or
the points of an empirical distribution) and over the sex mix. The solver is
``scipy.integrate.solve_ivp`` at rtol 1e-10, atol 1e-12, restarted at every jump of a hazard (life-table
band edges) on the axis (time since entry or attained age) with fewer jumps; DOP853, or BDF where the
system is stiff, with bounded work (:mod:`sim.reference.forward`). When the work limit is reached,
:class:`NoExactSolution` says so. A life-table background from every living state into the only
absorbing state is factored out of the ODE instead (:mod:`sim.reference.factored`: no restarts at its
band edges, tolerances 100 times tighter).

A model with a non-constant hazard on the time-in-state clock (semi-Markov) has no such reference:
:class:`NoExactSolution` says which transitions make it so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from ..engine import CancelToken
from ..hazards import KERNEL_ERRSTATE, by_entry_age
from ..model.multistate import Clock, Model, ResolvedExit
from .factored import background_target, integrate_factored
from .forward import ATOL, RTOL, ExitRates, NoExactSolution, integrate_segments

__all__ = ["NoExactSolution", "ExactSolution", "StackedSolution", "solve_exact", "solve_stacked",
           "occupancy_for_entry", "occupancy_frame", "population_pairs", "at_own_horizon"]

@dataclass(frozen=True)
class ExactSolution:
    """Exact results per strategy.

    occupancy : tidy table strategy, time, state, probability.
    time_in_state : strategy, state, years, discounted_years (to each patient's horizon, averaged).
    life_expectancy : strategy, years, discounted_years (time in non-absorbing states).
    """

    occupancy: pd.DataFrame
    time_in_state: pd.DataFrame
    life_expectancy: pd.DataFrame
    discount_rate: float


def _check_markov(model: Model) -> None:
    semi = model.semi_markov_transitions()
    if semi:
        raise NoExactSolution(
            f"no exact reference: transitions {semi} have non-constant hazards on the time-in-state "
            f"clock, so the process is semi-Markov and the Kolmogorov forward equations do not apply; "
            f"use a large simulation (with its Monte Carlo standard error) as the reference instead")


def _clock_offset(ex: ResolvedExit, entry_age: NDArray[np.float64]) -> tuple[NDArray[np.float64], bool]:
    """Clock reading at entry (attained age, or 0) and whether the clock advances with time."""
    if ex.clock is Clock.AGE:
        return entry_age, True
    if ex.clock is Clock.ENTRY:
        return np.zeros_like(entry_age), True
    return np.zeros_like(entry_age), False  # constant hazard on the time-in-state clock


@dataclass(frozen=True)
class StackedSolution:
    """Raw forward-equation output for m (entry age, sex) pairs and R discount rates.

    occupancy : (m, len(times), n_states). integrals : (R, m, n_states), integral of
    exp(-delta_r t) p(t) over [0, horizon_m]. flows : (R, m, n_exits), the expected discounted number
    of moves through each exit over [0, horizon_m] (integral of exp(-delta_r t) p_src(t) h_k(t)), with
    exits in the order of ``exit_index``, the model's stable exit numbering.
    """

    occupancy: NDArray[np.float64]
    integrals: NDArray[np.float64]
    flows: NDArray[np.float64]
    exit_index: NDArray[np.int64]


def solve_stacked(model: Model, strategy: str | tuple[str, ...], entry_age: NDArray[np.float64],
                  sex: NDArray[np.int64], times: NDArray[np.float64], horizon: NDArray[np.float64],
                  discount_rates: tuple[float, ...] = (0.0,),
                  cancel: CancelToken | Callable[[], bool] | None = None,
                  to_horizon: bool = False) -> StackedSolution:
    """Forward equations for m (entry age, sex) pairs at once, stacked into one ODE system, with the
    time-in-state integrals and exit flows for each annual discount rate accumulated alongside.

    ``strategy`` may be a tuple of names: the system then holds every pair under every strategy
    (rows strategy-major, m = len(strategies) x pairs), one solver call for all of them. ``cancel``
    (an object with ``is_set()`` or a callable) is checked during the integration and raises
    :class:`sim.engine.SimulationCancelled`; :class:`NoExactSolution` is raised for a semi-Markov model
    and when the solver's bounded work does not reach the solution (:mod:`sim.reference.forward`).
    ``to_horizon``: occupancy is wanted only at times up to each pair's horizon (later entries are NaN;
    what :func:`at_own_horizon` reads), and each pair is integrated only that far."""
    _check_markov(model)
    names = (strategy,) if isinstance(strategy, str) else tuple(strategy)
    m0 = entry_age.size
    per_strategy = [[e for per in model.resolve(nm) for e in per] for nm in names]
    exits = per_strategy[0]
    entry_age = np.tile(entry_age, len(names))
    sex = np.tile(sex, len(names))
    horizon = np.tile(horizon, len(names))
    n, m, k_ex = len(model.states), entry_age.size, len(exits)
    deltas = np.log1p(np.asarray(discount_rates, dtype=float))
    r_n = deltas.size
    # per exit: (source, target, [(hazard, rows using it)], clock offset per row, advances?); rows of
    # different strategies or sexes that share one hazard object share one evaluation
    plan = []
    for k, e in enumerate(exits):
        offset, moving = _clock_offset(e, entry_age)
        by_hazard: dict[int, tuple] = {}
        for j, exits_j in enumerate(per_strategy):
            for code, h in enumerate(exits_j[k].hazards):
                rows = j * m0 + np.flatnonzero(sex[:m0] == code)
                if rows.size:
                    prev = by_hazard.get(id(h))
                    by_hazard[id(h)] = (h, rows if prev is None else np.concatenate([prev[1], rows]))
        plan.append((e.source, e.target, list(by_hazard.values()), offset, moving))
    src = np.array([e.source for e in exits], dtype=int)
    dst = np.array([e.target for e in exits], dtype=int)
    size_p, size_i, size_f = m * n, r_n * m * n, r_n * m * k_ex

    def rates_at_entry() -> NDArray[np.float64]:
        # every exit's hazard at the clock reading at entry, to see whether one is infinite there
        out = np.zeros((k_ex, m))
        with np.errstate(**KERNEL_ERRSTATE):
            for k, (_, _, groups, offset, _) in enumerate(plan):
                for h, rows in groups:
                    out[k, rows] = (h._hazard_at_entry(offset[rows], entry_age[rows])
                                    if getattr(h, "reads_entry_age", False) else h._hazard(offset[rows]))
        return out

    y0 = np.zeros(size_p + size_i + size_f)
    p0 = y0[:size_p].reshape(m, n)
    # p(0): each pair's initial distribution (its sex's row; one 1.0 for a single initial state)
    p0[:] = model.population.initial_matrix(model.state_names)[sex]
    init = set(np.flatnonzero(p0.any(axis=0)).tolist())  # states some pair starts in
    t_end = max(float(horizon.max(initial=0.0)), float(times.max(initial=0.0)))
    t0 = 0.0
    if not np.all(np.isfinite(rates_at_entry())):
        # A hazard infinite at clock 0 (e.g. Weibull shape < 1): step over [0, t0] with the
        # competing-exit formula on the cumulative hazards, from each initial state with its initial
        # mass a; the neglected second moves are O(H^2).
        t0 = 1e-12 * max(t_end, 1.0)
        dh = np.zeros((k_ex, m))
        for k, (s_k, _, groups, offset, moving) in enumerate(plan):
            if s_k not in init:
                continue
            for h_rows, rows_h in groups:
                # a hazard that reads the entry age (EntryAgeFloor): each row's own entry age's
                for h, rows in by_entry_age(h_rows, entry_age, rows_h):
                    x = offset[rows]
                    dh[k, rows] = (h.cumhazard(x + t0) - h.cumhazard(x)) if moving else h.hazard(x) * t0
        a = p0.copy()
        total = np.zeros((m, n))
        for k in range(k_ex):
            total[:, src[k]] += dh[k]
        pos = total > 0
        p0[pos] = a[pos] * np.exp(-total[pos])
        moved = np.where(pos, a * (-np.expm1(-total) / np.where(pos, total, 1.0)), 0.0)
        for k in range(k_ex):
            p0[:, dst[k]] += moved[:, src[k]] * dh[k]
        f0 = y0[size_p + size_i:].reshape(r_n, m, k_ex)
        f0[:] = (moved[:, src] * dh.T)[None]
    occ = np.empty((m, times.size, n))
    if t_end <= t0:
        occ[:] = p0[:, None, :]
        return StackedSolution(occ, np.zeros((r_n, m, n)), y0[size_p + size_i:].reshape(r_n, m, k_ex),
                               np.array([e.index for e in exits]))
    exit_rates = [ExitRates(s_k, d_k, tuple(groups), offset, moving) for s_k, d_k, groups, offset, moving in plan]
    f0 = y0[size_p + size_i:].reshape(r_n, m, k_ex)
    background = [e.is_background for e in exits]
    d = background_target(exit_rates, background, np.array([s.absorbing for s in model.states]))
    if d is not None:  # a life table: factored out of the ODE (no restarts at its band edges)
        occ, integrals, flows = integrate_factored(exit_rates, background, d, n, entry_age, p0, f0, t0, times,
                                                   horizon, deltas, cancel, to_horizon)
    else:
        occ, integrals, flows = integrate_segments(exit_rates, n, entry_age, p0, f0, t0, times, horizon, deltas,
                                                   cancel, to_horizon)
    return StackedSolution(occ, integrals, flows, np.array([e.index for e in exits]))


def occupancy_frame(strategy: str, times: NDArray[np.float64], states: tuple[str, ...],
                    occupancy: NDArray[np.float64]) -> pd.DataFrame:
    """Tidy table strategy, time, state, probability of an occupancy array (len(times), n_states)."""
    return pd.DataFrame({"strategy": strategy, "time": np.repeat(times, len(states)),
                         "state": np.tile(np.array(states, dtype=object), len(times)),
                         "probability": np.asarray(occupancy, dtype=float).ravel()})


def population_pairs(model: Model, n_nodes: int = 48) -> tuple[NDArray[np.float64], NDArray[np.int64],
                                                                  NDArray[np.float64]]:
    """(entry age, sex code, weight) pairs averaging over the entry-age distribution and sex mix."""
    ages, weights = model.population.entry_age.nodes(n_nodes)
    sex_w = np.array(list(model.population.sex_mix.values()), dtype=float)
    pair_age = np.repeat(ages, sex_w.size)
    pair_sex = np.tile(np.arange(sex_w.size), ages.size)
    pair_w = np.repeat(weights, sex_w.size) * np.tile(sex_w, ages.size)
    keep = pair_w > 0
    return pair_age[keep], pair_sex[keep], pair_w[keep]


def occupancy_for_entry(model: Model, strategy: str, entry_age: float, sex: int, times: ArrayLike,
                        horizon_time: float, discount_rate: float = 0.0
                        ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Exact occupancy at ``times`` and time in state up to ``horizon_time`` for one entry age and sex.

    Returns
    -------
    occupancy : array (len(times), n_states).
    years : array (n_states,), integral of p over [0, horizon_time].
    discounted_years : array (n_states,), integral of exp(-delta t) p over [0, horizon_time].
    """
    sol = solve_stacked(model, strategy, np.array([float(entry_age)]), np.array([int(sex)]),
                        np.atleast_1d(np.asarray(times, dtype=float)), np.array([float(horizon_time)]),
                        (0.0, discount_rate))
    return sol.occupancy[0], sol.integrals[0, 0], sol.integrals[1, 0]


def at_own_horizon(times: NDArray[np.float64], horizon: NDArray[np.float64]
                   ) -> tuple[NDArray[np.float64], NDArray[np.intp]]:
    """Where to read each (entry age, sex) pair's occupancy so that it counts at ``min(t, its
    horizon)`` (docs/methods.md, 'Curves to the last horizon'): the sorted unique values ``at`` of
    min(t, h_m) to solve at, and ``where`` (pairs, times), the index of min(t, h_m) in ``at``. Read
    with ``np.take_along_axis(occupancy, where[:, :, None], axis=1)``."""
    own_end = np.minimum(np.asarray(times, dtype=float)[None, :], np.asarray(horizon, dtype=float)[:, None])
    at = np.unique(own_end)
    return at, np.searchsorted(at, own_end)


def solve_exact(model: Model, times: ArrayLike, strategies: tuple[str, ...] | None = None,
                discount_rate: float = 0.0, n_nodes: int = 48,
                cancel: CancelToken | Callable[[], bool] | None = None) -> ExactSolution:
    """Exact occupancy, time in state and life expectancy per strategy, averaged over the population.

    The occupancy counts each (entry age, sex) pair at ``min(t, its horizon)``: past its horizon, in
    the state it occupied when follow-up ended (:func:`at_own_horizon`), as the run's simulated
    curves do.

    Parameters
    ----------
    times : times since entry (years) at which to report occupancy.
    discount_rate : annual rate d for the discounted time in state (continuous delta = ln(1 + d)).
    n_nodes : Gauss-Legendre nodes over a continuous entry-age distribution.

    Raises
    ------
    NoExactSolution : the model is semi-Markov, or the solver's bounded work does not reach the solution.
    sim.engine.SimulationCancelled : ``cancel`` (an object with ``is_set()`` or a callable) asked to stop.
    """
    _check_markov(model)
    if not (math.isfinite(discount_rate) and 0 <= discount_rate < 1):
        raise ValueError(f"discount_rate must be an annual rate in [0, 1), got {discount_rate!r}")
    times = np.atleast_1d(np.asarray(times, dtype=float))
    if np.any(times < 0) or np.any(~np.isfinite(times)):
        raise ValueError(f"times must be finite and >= 0, got {times!r}")
    names = strategies if strategies is not None else model.strategy_names
    states = model.state_names
    alive = np.array([not s.absorbing for s in model.states])
    occ_parts, tis_rows, le_rows = [], [], []
    pair_age, pair_sex, pair_w = population_pairs(model, n_nodes)
    horizon = model.horizon.time_limit(pair_age)
    at, where = at_own_horizon(times, horizon)
    for name in names:
        sol = solve_stacked(model, name, pair_age, pair_sex, at, horizon, (0.0, discount_rate), cancel, to_horizon=True)
        own = np.take_along_axis(sol.occupancy, where[:, :, None], axis=1)  # (pairs, times, states)
        occ_parts.append(occupancy_frame(name, times, states, np.einsum("m,mtn->tn", pair_w, own)))
        yrs = pair_w @ sol.integrals[0]
        dyrs = pair_w @ sol.integrals[1]
        for j, s in enumerate(states):
            tis_rows.append((name, s, yrs[j], dyrs[j]))
        le_rows.append((name, yrs[alive].sum(), dyrs[alive].sum()))
    return ExactSolution(
        occupancy=pd.concat(occ_parts, ignore_index=True),
        time_in_state=pd.DataFrame(tis_rows, columns=["strategy", "state", "years", "discounted_years"]),
        life_expectancy=pd.DataFrame(le_rows, columns=["strategy", "years", "discounted_years"]),
        discount_rate=float(discount_rate),
    )
