"""Per-patient outcomes of a block of parameter draws, straight from the engine's tables, and their
per-draw means with Monte Carlo standard errors.

A block holds ``D`` draws of ``n`` patients each (patients ``first_draw * n ..`` in draw order, as
:func:`sim.engine.simulate_draws` and :func:`sim.engine.simulate_range` give them). Every draw has
its own valuation (utilities, state and transition costs, discount rates), spread to its patients by
broadcasting over a (draws, patients) view, so that the whole block is valued in a few array
operations and a block of one draw goes through exactly the same operations as a block of many:
each patient's outcomes, and hence each draw's means, have the same bits whatever the block size
(tested).

Definitions as :mod:`sim.analysis.outcomes` (docs/methods.md, 'Outcomes and increments'): a sojourn
from t0 to t1 accrues t1 - t0 years, or exp(-delta t0) (-expm1(-delta (t1 - t0))) / delta discounted
years with delta = ln(1 + d); a one-off transition cost at t is discounted by exp(-delta t). The
engine's tables are trusted (sorted by strategy, then patient, then time; checked by the engine's
own tests), so none of the event-log validation of :mod:`sim.analysis` is repeated here.

How it is kept cheap (the PSA's inner loop values 10^6 patients per strategy; benchmarks/RESULTS.md,
issue 14): the tables are read once per block for every strategy (:func:`block_rows`); the sojourns
(one ending at each move, then each patient's last one) are laid out in place in a
:class:`Workspace` reused by the strategies and blocks, since fresh multi-megabyte arrays cost more
in page faults than in arithmetic; each sojourn's start factor exp(-delta t0) is the factor at the
previous move, so exp is evaluated once per move and reused for the one-off costs at the moves;
per-state cells are summed with ``np.add.at`` (the additions of ``np.bincount``, in sojourn order);
draws are broadcast over a (draws, patients) view instead of repeated; moves through exits without
cost, multiplications by 1 and a zero discount rate skip their arithmetic, and a rate shared by
every draw stays one number. Every value is the result of the same IEEE operations on the same
operands, added in the same order, as the direct formulas above, so the outcomes are bit-identical
to those of the straightforward evaluation (checked against it when written; tested against a
pandas group-by and ``scipy.integrate.quad``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..analysis import OUTCOMES
from ..model import Model

__all__ = ["Valuations", "StrategyRows", "Workspace", "block_rows", "block_outcomes", "strategy_outcomes",
           "draw_means"]


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
        """The rows of :meth:`sim.model.Model.state_values` and :meth:`~sim.model.Model.exit_costs`
        of each draw's model (built by the same :meth:`sim.model.Valuation.state_cost_row` and its
        siblings), read from the draws' valuations and strategies in one pass: the models of a block
        share their states and exits (as :func:`sim.engine.simulate_draws` requires)."""
        states, exits = models[0].state_names, models[0].exit_names
        vals = [m.valuation for m in models]
        plans = [m.strategy(strategy) for m in models]
        return cls(utility=np.array([v.utility_row(states) for v in vals], dtype=float),
                   state_cost=np.array([v.state_cost_row(states, p.state_costs) for v, p in zip(vals, plans)],
                                       dtype=float),
                   exit_cost=np.array([v.exit_cost_row(exits, p.transition_costs) for v, p in zip(vals, plans)],
                                      dtype=float).reshape(len(models), len(exits)),
                   discount_effects=np.array([v.discount_effects for v in vals], dtype=float),
                   discount_costs=np.array([v.discount_costs for v in vals], dtype=float))


@dataclass(frozen=True)
class StrategyRows:
    """One strategy's rows of a block's engine tables, as arrays.

    ``pid`` (moves; patient id minus the block's first patient, int64), ``time`` (of each move),
    ``source`` (the state left, state code), ``exit`` (the exit taken, the model's exit numbering);
    ``exit_time`` and ``final`` (per patient, in patient order: when and in which state the patient
    left the simulation)."""

    pid: NDArray[np.int64]
    time: NDArray[np.float64]
    source: NDArray[np.integer]
    exit: NDArray[np.integer]
    exit_time: NDArray[np.float64]
    final: NDArray[np.integer]

    @property
    def n(self) -> int:
        return int(self.exit_time.size)


def block_rows(events: pd.DataFrame, patients: pd.DataFrame, first: int) -> dict[str, StrategyRows]:
    """Every strategy's :class:`StrategyRows` of a block (tables read once; rows of each strategy are
    contiguous, the engine's tables being sorted by strategy)."""
    cats = list(patients["strategy"].cat.categories)
    e_code = events["strategy"].cat.codes.to_numpy()
    p_code = patients["strategy"].cat.codes.to_numpy()
    e_cut = np.searchsorted(e_code, np.arange(len(cats) + 1))
    p_cut = np.searchsorted(p_code, np.arange(len(cats) + 1))
    pid = events["patient"].to_numpy()
    time = events["time"].to_numpy()
    source = events["from_state"].cat.codes.to_numpy()
    exit_ = events["transition"].cat.codes.to_numpy()
    exit_time = patients["exit_time"].to_numpy()
    final = patients["final_state"].cat.codes.to_numpy()
    out = {}
    for k, name in enumerate(cats):
        e, p = slice(int(e_cut[k]), int(e_cut[k + 1])), slice(int(p_cut[k]), int(p_cut[k + 1]))
        out[str(name)] = StrategyRows(pid[e] - first, time[e], source[e], exit_[e], exit_time[p], final[p])
    return out


def _rate(rates: NDArray[np.float64]) -> float | NDArray[np.float64]:
    """ln(1 + d) per draw, or one number when every draw has the same rate (the same bits)."""
    delta = np.log1p(np.asarray(rates, dtype=float))
    return float(delta[0]) if np.all(delta == delta[0]) else delta


class Workspace:
    """Scratch arrays reused by every strategy (and block) valued with it.

    A block's sojourn arrays are a few megabytes each; allocated afresh for every strategy, their
    pages are faulted in on first touch (the allocator hands large freed blocks back to the system),
    which cost more than the arithmetic. :meth:`take` returns a view of a buffer kept by name and
    grown when needed. Not shared between threads.
    """

    def __init__(self) -> None:
        self._buffers: dict[str, NDArray] = {}

    def take(self, name: str, size: int, dtype: type = np.float64) -> NDArray:
        """An uninitialised array of ``size`` elements (a view of the buffer ``name``)."""
        buf = self._buffers.get(name)
        if buf is None or buf.size < size or buf.dtype != np.dtype(dtype):
            buf = self._buffers[name] = np.empty(size + size // 8, dtype=dtype)
        return buf[:size]


class _Sojourns:
    """The sojourns of one strategy's patients, moves first, then one per patient: sojourn ``j < m``
    ends at move ``j`` (from the patient's previous move, or entry at 0); sojourn ``m + p`` is patient
    ``p``'s last one (from its last move, or 0, to its exit). Built in place in the workspace."""

    def __init__(self, rows: StrategyRows, n_per_draw: int, n_states: int, ws: Workspace) -> None:
        self.rows, self.n_per_draw, self.n_states, self.ws = rows, int(n_per_draw), int(n_states), ws
        pid, time, n = rows.pid, rows.time, rows.n
        m = self.m = int(pid.size)
        empty = np.zeros(0, dtype=np.int64)
        cut = np.flatnonzero(pid[1:] != pid[:-1]) + 1 if m else empty  # where a patient's moves begin
        self.first = np.concatenate(([0], cut)) if m else empty
        self.last = np.concatenate((cut - 1, [m - 1])) if m else empty
        self.who = pid[self.last]  # the patients who moved, each once, in order
        self.everyone = self.who.size == n  # then who == 0 .. n - 1
        # lengths: t1 - t0 with t0 the previous move's time, or 0 (t - 0.0 is t: no subtraction)
        length = ws.take("length", m + n)
        length[:m] = time
        if m:
            length[1:m] -= time[:-1]
            length[cut] = time[cut]
        length[m:] = rows.exit_time
        if self.everyone:
            length[m:] -= time[self.last]
        else:
            length[m + self.who] -= time[self.last]
        self.length = length
        # cells state-major (state * n + patient): each state's column is contiguous
        cell = ws.take("cell", m + n, np.int64)
        np.multiply(rows.source, np.int64(n), out=cell[:m])
        cell[:m] += pid
        np.multiply(rows.final, np.int64(n), out=cell[m:])
        cell[m:] += np.arange(n)
        self.cell = cell
        self._draw_of_move: NDArray[np.int64] | None = None
        self._factor: dict[object, NDArray[np.float64]] = {}

    @property
    def draw_of_move(self) -> NDArray[np.int64]:
        if self._draw_of_move is None:
            self._draw_of_move = self.rows.pid // self.n_per_draw
        return self._draw_of_move

    def per_sojourn(self, per_draw: NDArray, name: str) -> NDArray:
        """A per-draw value for each sojourn (the draw of its patient), in the workspace."""
        out = self.ws.take(name, self.m + self.rows.n, per_draw.dtype.type)
        np.take(per_draw, self.draw_of_move, out=out[:self.m])
        out[self.m:] = np.repeat(per_draw, self.n_per_draw)[:self.rows.n]
        return out

    def move_factor(self, delta: float | NDArray[np.float64]) -> NDArray[np.float64]:
        """exp(-delta t) at each move (computed once per rate)."""
        key = delta if isinstance(delta, float) else delta.tobytes()
        if key not in self._factor:
            out = self.ws.take(f"factor{len(self._factor)}", self.m)
            np.multiply(self.rows.time, -delta if isinstance(delta, float) else -delta[self.draw_of_move], out=out)
            self._factor[key] = np.exp(out, out=out)
        return self._factor[key]

    def cells(self, weights: NDArray[np.float64], name: str) -> NDArray[np.float64]:
        """Sum of ``weights`` (one per sojourn) per state and patient, shape (states, n), added in
        sojourn order from +0.0 (``np.add.at``: the additions of ``np.bincount``, into a reused
        buffer)."""
        n = self.rows.n
        out = self.ws.take(name, n * self.n_states)
        out.fill(0.0)
        np.add.at(out, self.cell, weights)
        return out.reshape(self.n_states, n)

    def years(self) -> NDArray[np.float64]:
        return self.cells(self.length, "years")

    def discounted_years(self, delta: float | NDArray[np.float64], name: str) -> NDArray[np.float64]:
        """Discounted years per state and patient at ln(1 + d) = ``delta`` (a number, or per draw):
        exp(-delta t0) (-expm1(-delta (t1 - t0))) / delta per sojourn, in place, each sojourn's start
        factor exp(-delta t0) being the factor at the previous move (1 at entry: multiplying by 1.0
        is skipped, it changes no bit)."""
        if isinstance(delta, float) and not delta > 0.0:  # undiscounted
            return self.years()
        m = self.m
        factor = self.move_factor(delta)
        rate = delta if isinstance(delta, float) else self.per_sojourn(delta, "rate")
        work = self.ws.take("work", self.length.size)
        np.multiply(self.length, -rate, out=work)
        np.expm1(work, out=work)
        if m:
            at_entry = work[self.first]
            work[1:m] *= factor[:-1]
            work[self.first] = at_entry
        if self.everyone:
            work[m:] *= factor[self.last]
        else:
            work[m + self.who] *= factor[self.last]
        with np.errstate(divide="ignore", invalid="ignore"):
            work /= -rate  # (-a) b / delta: negation is exact, so the bits of exp(..) (-expm1(..)) / delta
        if not isinstance(rate, float):
            flat = ~(rate > 0.0)  # undiscounted draws
            if np.any(flat):
                work[flat] = self.length[flat]
        return self.cells(work, name)


def strategy_outcomes(model: Model, rows: StrategyRows, n_per_draw: int, values: Valuations,
                      workspace: Workspace | None = None, keep: str | None = None) -> dict[str, NDArray[np.float64]]:
    """Each patient's outcomes (:data:`sim.analysis.OUTCOMES`) under one strategy, in patient order.

    Parameters
    ----------
    model : any draw's model (only its states are read: the same in every draw).
    rows : the strategy's rows of the block (:func:`block_rows`); patient ``p`` (counted from the
        block's first patient) belongs to draw ``p // n_per_draw`` of the block.
    values : the block's per-draw valuation of the strategy.
    workspace : scratch arrays to reuse (e.g. one for every strategy of a block); a new one by default.
    keep : the outcomes are written into the workspace's buffer of this name (valid until the next
        use of the name); by default into new arrays.
    """
    n, n_states = rows.n, len(model.states)
    ws = Workspace() if workspace is None else workspace
    soj = _Sojourns(rows, n_per_draw, n_states, ws)
    delta_e, delta_c = _rate(values.discount_effects), _rate(values.discount_costs)
    same_rates = np.array_equal(values.discount_effects, values.discount_costs)
    y = soj.years()
    y_e = soj.discounted_years(delta_e, "years_effects")
    y_c = y_e if same_rates else soj.discounted_years(delta_c, "years_costs")
    # one-off costs at each move, by the model's exit numbering, discounted at the move
    one_off = one_off_d = None
    exit_cost = values.exit_cost
    costly = np.any(exit_cost != 0.0, axis=0) if exit_cost.size else np.zeros(0, dtype=bool)
    if costly.any():
        # only the moves through exits that cost something in some draw: adding the others' zeros
        # would change no bit (each patient's sum starts at +0.0)
        moves = np.flatnonzero(costly[rows.exit]) if not costly.all() else None
        pick = (lambda a: a) if moves is None else (lambda a: a[moves])
        pid, exit_ = pick(rows.pid), pick(rows.exit)
        if np.all(exit_cost == exit_cost[0]):
            c = exit_cost[0][exit_]
        else:
            c = exit_cost.ravel()[(pid // n_per_draw) * exit_cost.shape[1] + exit_]
        one_off = np.bincount(pid, weights=c, minlength=n)
        if isinstance(delta_c, float) and delta_c == 0.0:
            one_off_d = one_off  # c exp(-0 t) = c
        else:
            c *= pick(soj.move_factor(delta_c))
            one_off_d = np.bincount(pid, weights=c, minlength=n)
    alive = [j for j, s in enumerate(model.states) if not s.absorbing]
    n_draws = -(-n // n_per_draw)
    shape = (n_draws, n_per_draw) if n_draws * n_per_draw == n else (1, n)
    scratch = ws.take("scratch", n).reshape(shape)
    results = np.zeros((len(OUTCOMES), n)) if keep is None else ws.take(keep, len(OUTCOMES) * n).reshape(-1, n)
    slots = iter(results)

    def weighted(t: NDArray, w: NDArray | None, extra: NDArray | None = None) -> NDArray:
        # explicit sum over states in a fixed order from +0.0: the same bits for any number of rows
        out = next(slots)
        out.fill(0.0)
        view = out.reshape(shape)
        for j in (alive if w is None else range(n_states)):
            if w is None:
                out += t[j]
            elif np.any(w[:, j] != 0.0):
                if shape[0] == n_draws:  # broadcast each draw's value over its patients
                    np.multiply(t[j].reshape(shape), w[:, j, None], out=scratch)
                else:
                    np.multiply(t[j].reshape(shape), np.repeat(w[:, j], n_per_draw)[:n], out=scratch)
                view += scratch
        if extra is not None:
            out += extra
        return out

    u, kost = values.utility, values.state_cost
    return {"life_years": weighted(y, None), "life_years_discounted": weighted(y_e, None),
            "qalys": weighted(y, u), "qalys_discounted": weighted(y_e, u),
            "costs": weighted(y, kost, one_off), "costs_discounted": weighted(y_c, kost, one_off_d)}


def block_outcomes(model: Model, strategy: str, events: pd.DataFrame, patients: pd.DataFrame, first: int,
                   n_per_draw: int, values: Valuations) -> dict[str, NDArray[np.float64]]:
    """Each patient's outcomes under ``strategy`` from a block's engine tables (every strategy; rows by
    strategy, then patient, then time), ``first`` being the block's first patient id:
    :func:`strategy_outcomes` of the strategy's :func:`block_rows`."""
    return strategy_outcomes(model, block_rows(events, patients, first)[strategy], n_per_draw, values)


def draw_means(values: dict[str, NDArray[np.float64]], n_per_draw: int,
               comparator: dict[str, NDArray[np.float64]] | None = None,
               workspace: Workspace | None = None) -> dict[str, NDArray[np.float64]]:
    """Per draw: the mean of each outcome and its Monte Carlo standard error s / sqrt(n) (NaN for
    n = 1) (docs/methods.md, 'Estimators'), as ``<outcome>`` and ``<outcome>_mcse`` arrays (D,).

    With ``comparator`` (the same patients' outcomes under the comparator strategy, common random
    numbers) also ``<outcome>_mcse_paired``: the MCSE of the mean difference from the comparator,
    from the per-patient differences within the draw, ``s_d / sqrt(n)`` with
    ``s_d² = Σ (x_i - y_i - (x̄ - ȳ))² / (n - 1)`` (the paired-sample standard error; with
    positively correlated outcomes it is below the independent ``sqrt(se_x² + se_y²)``: Stout &
    Goldie 2008, Health Care Manag Sci 11:399-406). 0 for the comparator itself, NaN for n = 1.
    ``workspace`` lends the scratch arrays.
    """
    out: dict[str, NDArray[np.float64]] = {}
    ws = Workspace() if workspace is None else workspace
    for name in OUTCOMES:
        x = values[name].reshape(-1, n_per_draw)
        work, diff = (ws.take(b, x.size).reshape(x.shape) for b in ("deviations", "differences"))
        mean = x.mean(axis=1)
        out[name] = mean
        out[f"{name}_mcse"] = _mcse(x, mean, n_per_draw, work)
        if comparator is not None:
            if comparator is values:  # the comparator itself: every difference is 0
                out[f"{name}_mcse_paired"] = np.zeros(mean.size) if n_per_draw > 1 else np.full(mean.size, np.nan)
                continue
            d = np.subtract(x, comparator[name].reshape(-1, n_per_draw), out=diff)
            out[f"{name}_mcse_paired"] = _mcse(d, d.mean(axis=1), n_per_draw, work)
    return out


def _mcse(x: NDArray[np.float64], mean: NDArray[np.float64], n_per_draw: int,
          work: NDArray[np.float64] | None = None) -> NDArray[np.float64]:
    """Row by row: the sample standard deviation over sqrt(n) (NaN for n = 1), i.e.
    sqrt(Σ (x_i - x̄)² / (n - 1)) / sqrt(n), the squared deviations formed in ``work`` (x's shape)."""
    if n_per_draw > 1:
        dev = np.subtract(x, mean[:, None], out=work)
        np.square(dev, out=dev)
        return np.sqrt(dev.sum(axis=1) / (n_per_draw - 1)) / np.sqrt(n_per_draw)
    return np.full(mean.size, np.nan)
