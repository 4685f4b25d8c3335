"""The per-draw table read once into arrays, with the checks every statistic needs.

A per-draw table has one row per parameter draw and strategy: ``draw`` (int), ``strategy`` (str) and
outcome columns (``costs_discounted``, ``qalys_discounted``, ...), for simulated results also their
Monte Carlo standard errors ``<outcome>_mcse`` and the number of patients ``patients``. A table may
hold one method only (a ``method`` column, when present, must have a single value); a helper applies
the statistics per method.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from sim.problems import Problem, ValidationError

COSTS = "costs_discounted"
EFFECTS = "qalys_discounted"


@dataclass(frozen=True)
class DrawArrays:
    """Outcomes of a per-draw table as (draws x strategies) arrays.

    Attributes
    ----------
    draws : the draw numbers, sorted (length N).
    strategies : the strategy names in order of first appearance (length D).
    values : outcome name -> (N, D) float array.
    """

    draws: np.ndarray
    strategies: tuple[str, ...]
    values: dict[str, np.ndarray]

    def index_of(self, strategy: str, *, name: str = "comparator") -> int:
        if strategy not in self.strategies:
            raise ValidationError((name,), f"must be one of the strategies {list(self.strategies)}", strategy)
        return self.strategies.index(strategy)


def draw_arrays(per_draw: pd.DataFrame, outcomes: Sequence[str], *, table: str = "per_draw",
                min_draws: int = 1) -> DrawArrays:
    """Check ``per_draw`` and pivot ``outcomes`` to (draws x strategies) arrays.

    Raises
    ------
    ValidationError
        When a column is missing, the table mixes methods, a (draw, strategy) pair repeats, a draw
        lacks a strategy, a value is not finite, or there are fewer than ``min_draws`` draws.
    """
    if not isinstance(per_draw, pd.DataFrame):
        raise ValidationError((table,), "must be a pandas DataFrame", type(per_draw).__name__)
    missing = [c for c in ("draw", "strategy", *outcomes) if c not in per_draw.columns]
    if missing:
        raise ValidationError.of(Problem((table, c), "is a required column") for c in missing)
    if "method" in per_draw.columns and per_draw["method"].nunique(dropna=False) > 1:
        raise ValidationError((table, "method"), "must hold one method (apply the statistic per method)",
                              sorted(map(str, per_draw["method"].unique())))
    if per_draw.duplicated(["draw", "strategy"]).any():
        row = per_draw[per_draw.duplicated(["draw", "strategy"])].iloc[0]
        raise ValidationError((table, "draw"), "must have one row per draw and strategy",
                              (row["draw"], row["strategy"]))
    raw = list(pd.unique(per_draw["strategy"]))
    strategies = tuple(str(s) for s in raw)
    draws = np.sort(pd.unique(per_draw["draw"]))
    if len(draws) < min_draws:
        raise ValidationError((table, "draw"), f"must hold at least {min_draws} draws", len(draws))
    if len(per_draw) != len(draws) * len(strategies):
        raise ValidationError((table, "strategy"), "must have every strategy in every draw",
                              f"{len(per_draw)} rows for {len(draws)} draws x {len(strategies)} strategies")
    values = {}
    for outcome in outcomes:
        wide = per_draw.pivot(index="draw", columns="strategy", values=outcome)
        arr = wide.loc[draws, raw].to_numpy(dtype=float)
        if not np.isfinite(arr).all():
            raise ValidationError((table, outcome), "must be finite in every draw", "NaN or infinite")
        values[outcome] = arr
    return DrawArrays(np.asarray(draws), strategies, values)


def wtp_grid(wtp: float | Sequence[float] | np.ndarray, *, name: str = "wtp") -> np.ndarray:
    """Willingness-to-pay values as a 1-d float array; each finite and >= 0."""
    try:
        grid = np.atleast_1d(np.asarray(wtp, dtype=float))
    except (TypeError, ValueError):
        raise ValidationError((name,), "must be a number or a list of numbers", wtp) from None
    if grid.ndim != 1 or grid.size == 0:
        raise ValidationError((name,), "must be a number or a non-empty list of numbers", wtp)
    bad = ~np.isfinite(grid) | (grid < 0)
    if bad.any():
        raise ValidationError((name,), "must be finite and >= 0", float(grid[bad][0]))
    return grid


def net_benefits(arrays: DrawArrays, grid: np.ndarray, costs: str, effects: str) -> np.ndarray:
    """Net monetary benefit ``λ E - C`` as an (n_wtp, N, D) array."""
    return grid[:, None, None] * arrays.values[effects][None] - arrays.values[costs][None]


def check_positive(value: float, name: str, *, integer: bool = False, allow_zero: bool = False) -> float:
    """A finite number > 0 (>= 0 with ``allow_zero``), an integer when asked."""
    ok = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
    ok = ok and np.isfinite(value) and (value >= 0 if allow_zero else value > 0)
    if ok and integer:
        ok = float(value).is_integer()
    if not ok:
        kind = "an integer" if integer else "a finite number"
        raise ValidationError((name,), f"must be {kind} {'>= 0' if allow_zero else '> 0'}", value)
    return float(value)
