"""Simulated outcomes per parameter draw: the inner loop of the probabilistic analysis.

Draw ``d`` simulates patients ``d * n .. (d + 1) * n - 1`` (``n`` patients per draw) with the run's
seed, under every strategy: strategies share their random numbers within a draw (common random
numbers, keyed on seed, patient, stream and occurrence), and different draws have different
patients, so the inner samples of different draws are independent (as the variance decomposition
of O'Hagan, Stevenson & Madan 2007, Health Econ 16(10):1009-1023, assumes). Draw ``d``'s outcomes
therefore depend on nothing but the seed, ``n``, ``d`` and its model: not on the block it was run in,
the number of workers or the scheduler.

Two paths give the same bits:

- :func:`simulated_per_draw`: one engine call (:func:`sim.engine.simulate_range`) per draw;
- :func:`simulated_vectorised`: one call of :func:`sim.engine.simulate_draws` for a block of
  consecutive draws, the patients of each draw carrying their draw's hazards (per-patient parameter
  arrays inside the engine).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from ..engine import simulate_draws, simulate_range
from ..model import Model
from .patient_values import Valuations, Workspace, block_rows, draw_means, strategy_outcomes
from .tables import SIMULATED, draw_frame, sort_draw_table

__all__ = ["ApplyDraw", "base_model", "models_for_draws", "simulated_per_draw", "simulated_vectorised", "consecutive_runs"]

ApplyDraw = Callable[[Any, Mapping[str, float]], Model]
"""``apply(source, values) -> Model``: the model with one draw's parameter values (by parameter name),
``source`` being the scenario or model the draws refer to (e.g. :func:`sim.psa.model_for_draw`)."""


def base_model(source: Any) -> Model:
    """The point-value model of a source: a :class:`Model`, or anything with a ``model`` (a scenario)."""
    return source if isinstance(source, Model) else source.model


def models_for_draws(source: Any, values: pd.DataFrame, apply: ApplyDraw | None) -> list[Model]:
    """One model per row of ``values`` (index: draw; one column per parameter); the point-value
    model for every draw when there are no columns or no ``apply``."""
    if apply is None or values.shape[1] == 0:
        return [base_model(source)] * len(values)
    names = [str(c) for c in values.columns]
    return [apply(source, dict(zip(names, map(float, row)))) for row in values.to_numpy(dtype=float)]


def _rows(models: Sequence[Model], draws: np.ndarray, events: pd.DataFrame, patients: pd.DataFrame, first: int,
          n: int, strategies: tuple[str, ...], workspace: Workspace | None = None) -> pd.DataFrame:
    """The block's simulated rows, ordered as :func:`sort_draw_table` orders them (by draw, then
    strategy in ``strategies`` order)."""
    ws = Workspace() if workspace is None else workspace  # scratch arrays shared by the strategies
    means = []
    comparator = None  # the first strategy's per-patient outcomes: the paired MCSE of the others' increments
    rows = block_rows(events, patients, first)  # the engine's tables read once for every strategy
    for k, s in enumerate(strategies):
        values = strategy_outcomes(models[0], rows[s], n, Valuations.of(list(models), s), ws, keep=f"outcomes{k}")
        comparator = values if comparator is None else comparator
        means.append(draw_means(values, n, comparator, ws))
    k = len(strategies)
    # one frame with the strategies interleaved within each draw (the table's row order)
    table = draw_frame(np.repeat(np.asarray(draws, dtype=np.int64), k), strategies[0], SIMULATED,
                       {c: np.stack([m[c] for m in means], axis=1).ravel() for c in means[0]}, n)
    table["strategy"] = np.tile(np.array(strategies, dtype=object), len(draws))
    return table


def simulated_per_draw(models: Sequence[Model], draws: Sequence[int], patients: int, seed: int,
                       strategies: tuple[str, ...] | None = None,
                       workspace: Workspace | None = None) -> pd.DataFrame:
    """Simulated outcomes per draw and strategy (rows of the per-draw table, method ``"simulated"``),
    one engine call per draw."""
    names = tuple(strategies or models[0].strategy_names)
    n = int(patients)
    parts = []
    ws = Workspace() if workspace is None else workspace
    for model, d in zip(models, draws):
        first = int(d) * n
        events, pts = simulate_range(model, seed, first, first + n, strategies=names)
        parts.append(_rows([model], np.array([d]), events, pts, first, n, names, ws))
    return sort_draw_table(parts, names)


def consecutive_runs(draws: Sequence[int]) -> list[tuple[int, int]]:
    """``(start, stop)`` positions of the runs of consecutive draw numbers in ``draws``."""
    d = np.asarray(draws, dtype=np.int64)
    if d.size == 0:
        return []
    cut = np.flatnonzero(np.diff(d) != 1) + 1
    bounds = np.concatenate(([0], cut, [d.size]))
    return [(int(a), int(b)) for a, b in zip(bounds[:-1], bounds[1:])]


def simulated_vectorised(models: Sequence[Model], draws: Sequence[int], patients: int, seed: int,
                         strategies: tuple[str, ...] | None = None,
                         workspace: Workspace | None = None) -> pd.DataFrame:
    """As :func:`simulated_per_draw` with one engine call per run of consecutive draws.

    ``workspace`` (both paths): scratch arrays to reuse, e.g. across the blocks of an inline run
    (:class:`sim.psa.patient_values.Workspace`; results do not depend on it)."""
    names = tuple(strategies or models[0].strategy_names)
    n = int(patients)
    d_all = np.asarray(draws, dtype=np.int64)
    parts = []
    ws = Workspace() if workspace is None else workspace
    for a, b in consecutive_runs(d_all):
        block = list(models[a:b])
        first = int(d_all[a]) * n
        events, pts = simulate_draws(block, seed, n, first_draw=int(d_all[a]), strategies=names)
        parts.append(_rows(block, d_all[a:b], events, pts, first, n, names, ws))
    # one run of consecutive draws (a block job): its rows are already in the table's order
    return parts[0] if len(parts) == 1 else sort_draw_table(parts, names)
