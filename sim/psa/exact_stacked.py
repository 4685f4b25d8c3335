"""The exact result of parameter draws of a time-varying Markov model, one small ODE system per draw.

Every (strategy, entry age, sex) of a draw is a row of one system of Kolmogorov forward equations
dp/dt = p Q(t) (docs/methods.md, 'Exact solution'), integrated with the discounted occupancy integrals
and the expected (discounted) moves through each exit alongside, as :mod:`sim.reference.exact` does
for the strategies of one model. What makes it cheap is how the intensities are evaluated: per exit,
constant hazards are a per-row rate array, Gompertz hazards (and hazard ratios on them) a per-row
log-rate and slope, b exp(g x), so a right-hand side costs a few array operations; other smooth
hazards are evaluated once per distinct hazard. Draws are not stacked into one system: the adaptive
steps would then depend on which draws share a block, and draw i's bits on the number of workers.

Scope (else :func:`sim.psa.exact_draws.exact_per_draw` uses :func:`sim.reference.exact_outcomes`):
hazards of the smooth families (exponential, Gompertz(-Makeham), Weibull, log-logistic, log-normal,
gamma, hazard ratios on them; no life table: the reference restarts its solver at every band edge),
every hazard finite at the clock reading at entry.
Solved by ``scipy.integrate.solve_ivp`` (DOP853, rtol 1e-10, atol 1e-12), restarted at each distinct
horizon so that every row is read at its own horizon; checked against the reference solver. About
5-10 ms per draw of the demo, against about 40 ms with the reference solver.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy.integrate import solve_ivp

from ..analysis import OUTCOMES, combine_outcomes
from ..hazards import (Exponential, Gamma, Gompertz, GompertzMakeham, Hazard, LogLogistic, LogNormal,
                       ProportionalHazards, Weibull)
from ..model import Clock, Model, is_constant_hazard
from ..reference import population_pairs
from .tables import EXACT, draw_frame, sort_draw_table

__all__ = ["stackable", "exact_stacked"]

RTOL, ATOL = 1e-10, 1e-12


_SMOOTH = (Exponential, Gompertz, GompertzMakeham, Weibull, LogLogistic, LogNormal, Gamma)


def _smooth(h: Hazard) -> bool:
    """A family whose hazard is smooth for clock > 0 (or a constant piecewise hazard), possibly under
    a hazard ratio; anything else (life tables, hazards with kinks or jumps of other kinds) is left
    to the reference solver, which restarts at jumps."""
    if type(h) is ProportionalHazards:
        return _smooth(h.base)
    return type(h) in _SMOOTH or is_constant_hazard(h)


def _gompertz(h: Hazard) -> tuple[float, float] | None:
    """(log b, g) of a Gompertz hazard, or of a hazard ratio on one (log b + log hr); else None."""
    if type(h) is Gompertz:
        return math.log(h.rate), h.shape
    if type(h) is ProportionalHazards and type(h.base) is Gompertz and h.hr > 0.0:
        return math.log(h.base.rate) + math.log(h.hr), h.base.shape
    return None


def stackable(models: Sequence[Model], strategies: tuple[str, ...]) -> bool:
    """Whether the draws share one structure of exits, are Markov, and have only smooth hazards."""
    first = [[(e.index, e.source, e.target, e.clock) for e in exits] for exits in models[0].resolve(strategies[0])]
    for m in models:
        if not m.is_markov or m.state_names != models[0].state_names:
            return False
        for s in strategies:
            plan = m.resolve(s)
            if [[(e.index, e.source, e.target, e.clock) for e in exits] for exits in plan] != first:
                return False
            if not all(_smooth(h) for exits in plan for e in exits for h in e.hazards):
                return False
    return True


class _Rates:
    """Per exit, the intensities of every row at a time t (rows: draw x strategy x pair)."""

    def __init__(self, per_row_exits: list[list], age: np.ndarray, sex: np.ndarray) -> None:
        rows, k_ex = len(per_row_exits), len(per_row_exits[0])
        self.const = np.zeros((k_ex, rows))
        self.g_idx, self.g_lb, self.g_g, self.g_off = [], [], [], []
        self.groups: list[tuple[int, Hazard, np.ndarray, np.ndarray]] = []
        by_hazard: dict[tuple[int, int], list[int]] = {}
        hazard_of: dict[tuple[int, int], Hazard] = {}
        for r, exits in enumerate(per_row_exits):
            for k, e in enumerate(exits):
                h = e.hazards[sex[r]]
                off = age[r] if e.clock is Clock.AGE else 0.0
                if is_constant_hazard(h) or e.clock is Clock.STATE:
                    self.const[k, r] = float(h.hazard(0.0))
                elif (lg := _gompertz(h)) is not None:
                    self.g_idx.append(k * rows + r)
                    self.g_lb.append(lg[0])
                    self.g_g.append(lg[1])
                    self.g_off.append(off)
                else:
                    by_hazard.setdefault((k, id(h)), []).append(r)
                    hazard_of[(k, id(h))] = h
        for (k, key), rs in by_hazard.items():
            rs_a = np.array(rs)
            self.groups.append((k, hazard_of[(k, key)], rs_a, np.where([per_row_exits[r][k].clock is Clock.AGE
                                                                          for r in rs], age[rs_a], 0.0)))
        self.g_idx = np.array(self.g_idx, dtype=np.int64)
        self.g_lb, self.g_g, self.g_off = (np.array(a, dtype=float) for a in (self.g_lb, self.g_g, self.g_off))

    def at(self, t: float) -> np.ndarray:
        out = self.const.copy()
        if self.g_idx.size:
            out.ravel()[self.g_idx] = np.exp(self.g_lb + self.g_g * (self.g_off + t))
        for k, h, rs, off in self.groups:
            out[k, rs] = h.hazard(off + t)
        return out

    def finite_at_entry(self) -> bool:
        return bool(np.all(np.isfinite(self.at(0.0))))


def _solve_draw(model: Model, names: tuple[str, ...], n_nodes: int) -> dict[str, dict[str, float]]:
    """Outcomes of every strategy of one draw (its strategies and strata stacked in one system)."""
    n = len(model.states)
    a, c, w = population_pairs(model, n_nodes)
    init = model.population.initial_matrix(model.state_names)
    val = model.valuation
    delta = [math.log1p(r) for r in (0.0, val.discount_effects, val.discount_costs)]
    rows_exits, age, sex, weight, horizon, p0, owner = [], [], [], [], [], [], []
    for j, s in enumerate(names):
        exits = [e for per in model.resolve(s) for e in per]
        for ai, ci, wi in zip(a, c, w):
            rows_exits.append(exits)
            age.append(ai)
            sex.append(int(ci))
            weight.append(wi)
            horizon.append(float(model.horizon.time_limit(np.array([ai]))[0]))
            p0.append(init[int(ci)])
            owner.append(j)
    age_a, sex_a, horizon_a = np.array(age), np.array(sex), np.array(horizon)
    rates = _Rates(rows_exits, age_a, sex_a)
    if not rates.finite_at_entry():
        raise ValueError("a hazard is infinite at entry")
    rows, k_ex = len(rows_exits), len(rows_exits[0])
    src = np.array([e.source for e in rows_exits[0]])
    move = np.zeros((k_ex, n))
    move[np.arange(k_ex), [e.target for e in rows_exits[0]]] += 1.0
    move[np.arange(k_ex), src] -= 1.0
    dl = np.array(delta)[:, None]  # (3, 1): undiscounted, effects, costs
    size_p, size_i = rows * n, 3 * rows * n

    def rhs(t: float, y: np.ndarray) -> np.ndarray:
        p = y[:size_p].reshape(rows, n)
        flow = p[:, src] * rates.at(t).T  # (rows, exits)
        disc = np.exp(-dl * t)  # (3, 1)
        return np.concatenate(((flow @ move).ravel(), (disc[:, :, None] * p[None]).ravel(),
                               (disc[[0, 2], :, None] * flow[None]).ravel()))

    y = np.concatenate((np.array(p0).ravel(), np.zeros(size_i + 2 * rows * k_ex)))
    integ = np.empty((3, rows, n))  # each row's integrals and flows read at its own horizon
    flows = np.empty((2, rows, k_ex))
    t_prev = 0.0
    for t_end in np.unique(horizon_a):  # restart at each horizon: every row read at its own
        if t_end > t_prev:
            sol = solve_ivp(rhs, (t_prev, t_end), y, method="DOP853", rtol=RTOL, atol=ATOL)
            if not sol.success:
                raise ValueError(f"the forward equations failed: {sol.message}")
            y = sol.y[:, -1]
        here = horizon_a == t_end
        integ[:, here] = y[size_p:size_p + size_i].reshape(3, rows, n)[:, here]
        flows[:, here] = y[size_p + size_i:].reshape(2, rows, k_ex)[:, here]
        t_prev = t_end
    w_a, owner_a = np.array(weight), np.array(owner)
    out = {}
    for j, s in enumerate(names):
        sel = owner_a == j
        yrs = np.einsum("m,rmn->rn", w_a[sel], integ[:, sel])
        fl = np.einsum("m,rmk->rk", w_a[sel], flows[:, sel])
        cost = model.exit_costs(s)[[e.index for e in rows_exits[np.flatnonzero(sel)[0]]]]
        values = combine_outcomes(model, s, yrs[0], yrs[1], yrs[2], (fl[0] @ cost, fl[1] @ cost))
        out[s] = {o: float(values[o]) for o in OUTCOMES}
    return out


def exact_stacked(models: Sequence[Model], draws: Sequence[int], strategies: tuple[str, ...] | None = None,
                  n_nodes: int = 48) -> pd.DataFrame:
    """Exact outcomes per draw and strategy (method ``"exact"``), one system per draw. Raises
    ``ValueError`` outside the scope of the module docstring."""
    names = tuple(strategies or models[0].strategy_names)
    if not stackable(models, names):
        raise ValueError("the draws are not one Markov structure with smooth hazards")
    solved = [_solve_draw(m, names, n_nodes) for m in models]
    parts = [draw_frame(np.asarray(draws), s, EXACT, {o: np.array([r[s][o] for r in solved]) for o in OUTCOMES}, 0)
             for s in names]
    return sort_draw_table(parts, names)
