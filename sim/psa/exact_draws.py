"""The exact probabilistic analysis of Markov models: the Kolmogorov result per parameter draw, free
of patient-level noise.

Constant intensities (every exit's hazard constant in every strategy and draw): the occupancy of a
(sex) stratum is p(t) = p0 expm(Q t), and what the outcomes need are its discounted integrals
int_0^T exp(-delta t) p(t) dt = p0 int_0^T expm((Q - delta I) t) dt, read off one matrix
exponential of the block matrix [[Q - delta I, I], [0, 0]] T, whose upper right block is that
integral (Van Loan 1978, "Computing integrals involving the matrix exponential", IEEE Trans Autom
Control 23(3):395-404). Every strategy, stratum, horizon and discount rate of a draw is one matrix of
a stack given to :func:`sim.reference.expm_batched` at once.
Expected moves through exit k (for one-off costs) are int exp(-delta t) p_source(t) q_k dt, the
source's integral times the exit's rate.

Time-varying intensities (attained age, time since entry; still Markov): the forward equations draw by
draw with vectorised intensities (:mod:`sim.psa.exact_stacked`), or, for life tables and hazards
infinite at entry, the reference solver draw by draw (:func:`sim.reference.exact_outcomes`).

Each draw is computed on its own (its own matrix-exponential stack, its own ODE system), so its bits
do not depend on the other draws of its block: the table is the same for any blocks and workers.
Semi-Markov models have no exact result (:class:`sim.reference.NoExactSolution`).

Outcome definitions: :func:`sim.analysis.combine_outcomes` (docs/methods.md, 'Outcomes and
increments'), as for the simulated and cycle-based rows.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..analysis import OUTCOMES, combine_outcomes
from ..model import Model, is_constant_hazard
from ..reference import exact_outcomes, expm_batched, population_pairs
from .exact_stacked import exact_stacked, stackable
from .tables import EXACT, draw_frame, sort_draw_table

__all__ = ["constant_intensities", "exact_per_draw", "exact_constant_draws"]


def constant_intensities(model: Model) -> bool:
    """Whether every exit's hazard is constant in time under every strategy (a time-homogeneous
    Markov model)."""
    return all(is_constant_hazard(h) for s in model.strategy_names for exits in model.resolve(s)
               for ex in exits for h in ex.hazards)


def _generator(model: Model, strategy: str) -> tuple[NDArray, list[tuple[int, int, NDArray]]]:
    """Generators Q (sexes, S, S) and the exits as (model exit index, source, rate per sex)."""
    n_sex, n = len(model.population.sexes), len(model.states)
    q = np.zeros((n_sex, n, n))
    exits = []
    for per_state in model.resolve(strategy):
        for ex in per_state:
            rates = np.array([float(h.hazard(0.0)) for h in ex.hazards])
            q[:, ex.source, ex.target] += rates
            q[:, ex.source, ex.source] -= rates
            exits.append((ex.index, ex.source, rates))
    return q, exits


def exact_constant_draws(models: Sequence[Model], draws: Sequence[int], strategies: tuple[str, ...] | None = None,
                         n_nodes: int = 48) -> pd.DataFrame:
    """Exact outcomes per draw and strategy for time-homogeneous Markov models (rows of the
    per-draw table, method ``"exact"``), each draw's matrices in one batch of matrix exponentials."""
    names = tuple(strategies or models[0].strategy_names)
    if not all(constant_intensities(m) for m in models):
        raise ValueError("exact_constant_draws needs constant hazards in every draw")
    n = len(models[0].states)
    mats, jobs = [], []  # one augmented matrix per (draw, strategy, sex, horizon, rate)
    for d, model in enumerate(models):
        age, sex, w = population_pairs(model, n_nodes)
        horizon = model.horizon.time_limit(age)
        keys = {}
        for a, c, wt, t in zip(age, sex, w, horizon):  # strata that differ only in entry age share a solve
            keys[(int(c), float(t))] = keys.get((int(c), float(t)), 0.0) + float(wt)
        val = model.valuation
        rates = (0.0, val.discount_effects, val.discount_costs)
        for j, s in enumerate(names):
            q, exits = _generator(model, s)
            for (c, t), wt in keys.items():
                for r, rate in enumerate(rates):
                    m = np.zeros((2 * n, 2 * n))
                    m[:n, :n] = q[c] - np.log1p(rate) * np.eye(n)
                    m[:n, n:] = np.eye(n)
                    mats.append(m * t)
                    jobs.append((d, j, c, wt, r))
    # one stack per draw: the scaling of expm_batched follows the largest matrix of its stack, so a
    # draw's bits must not depend on the other draws of the block
    owner = np.array([job[0] for job in jobs])
    stack = np.array(mats)
    blocks = np.zeros((len(mats), n, n))
    for d in range(len(models)):
        mine = np.flatnonzero(owner == d)
        if mine.size:
            blocks[mine] = expm_batched(stack[mine])[:, :n, n:]
    n_sex = max(len(m.population.sexes) for m in models)
    integrals = np.zeros((len(models), len(names), 3, n_sex, n))  # per sex: the flows need its rates
    for (d, j, c, wt, r), block in zip(jobs, blocks):
        p0 = models[d].population.initial_matrix(models[d].state_names)[c]
        integrals[d, j, r, c] += wt * (p0 @ block)
    parts = []
    for j, s in enumerate(names):
        values = {o: np.empty(len(models)) for o in OUTCOMES}
        for d, model in enumerate(models):
            _, exits = _generator(model, s)
            cost = model.exit_costs(s)
            per_sex = integrals[d, j]  # (rate, sex, state)
            yrs, yrs_e, yrs_c = per_sex.sum(axis=1)
            moves = np.zeros(2)
            for k, src, rate in exits:  # expected moves: time in the source x the exit's rate, per sex
                moves += cost[k] * np.array([rate @ per_sex[0, :rate.size, src], rate @ per_sex[2, :rate.size, src]])
            out = combine_outcomes(model, s, yrs, yrs_e, yrs_c, (moves[0], moves[1]))
            for o in OUTCOMES:
                values[o][d] = float(out[o])
        parts.append(draw_frame(np.asarray(draws), s, EXACT, values, 0))
    return sort_draw_table(parts, names)


def exact_per_draw(models: Sequence[Model], draws: Sequence[int], strategies: tuple[str, ...] | None = None,
                   n_nodes: int = 48) -> pd.DataFrame:
    """Exact outcomes per draw and strategy (method ``"exact"``): batched matrix exponentials when
    every draw has constant intensities, else the forward equations with vectorised intensities, else
    the reference solver, each draw by itself. Raises
    :class:`sim.reference.NoExactSolution` for a semi-Markov model."""
    names = tuple(strategies or models[0].strategy_names)
    if all(constant_intensities(m) for m in models):
        return exact_constant_draws(models, draws, names, n_nodes)
    if stackable(models, names):
        try:
            return exact_stacked(models, draws, names, n_nodes)
        except ValueError:  # a hazard infinite at entry, or the stacked solve failed: the reference solver
            pass
    parts = []
    for model, d in zip(models, draws):
        table = exact_outcomes(model, names, n_nodes).pivot(index="strategy", columns="outcome", values="value")
        for s in names:
            parts.append(draw_frame(np.array([d]), s, EXACT, {o: np.array([table.loc[s, o]]) for o in OUTCOMES}, 0))
    return sort_draw_table(parts, names)

