"""Net monetary benefit per draw, incremental results against a comparator, the incremental analysis
with dominance among all strategies, and the cost-effectiveness plane.

Inputs are per-draw tables: one row per parameter draw and strategy with ``draw``, ``strategy`` and
outcome columns, one method at a time. Methods are described in docs/methods.md, 'Net benefit and
incremental results'.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from ..problems import ValidationError
from ._tables import COSTS, EFFECTS, DrawArrays, draw_arrays, net_benefits, wtp_grid

__all__ = ["net_benefit", "incremental_results", "incremental_analysis", "ce_plane"]


def _net_benefits_over_wtp(per_draw: pd.DataFrame, wtp: float | Sequence[float], costs: str,
                           effects: str) -> tuple[DrawArrays, np.ndarray, np.ndarray]:
    """What every statistic over a willingness-to-pay grid starts from: the checked per-draw arrays,
    the grid, and the net benefits ``NB_{i,d}(λ) = λ E_{i,d} - C_{i,d}`` as an (n_wtp, N, D) array.
    """
    arrays = draw_arrays(per_draw, [costs, effects])
    grid = wtp_grid(wtp)
    return arrays, grid, net_benefits(arrays, grid, costs, effects)


def _increments(arrays: DrawArrays, comparator: str, costs: str,
                effects: str) -> list[tuple[str, np.ndarray, np.ndarray]]:
    """Per-draw increments against ``comparator``: ``(strategy, ΔC_i, ΔE_i)`` for each other strategy,
    in strategy order, with ``ΔC_i = C_{i,d} - C_{i,0}`` and ``ΔE_i = E_{i,d} - E_{i,0}``.

    Raises
    ------
    ValidationError
        When ``comparator`` is not one of the strategies (checked here, before anything else is), or
        the table holds only one strategy.
    """
    base = arrays.index_of(comparator)
    if len(arrays.strategies) < 2:
        raise ValidationError(("per_draw", "strategy"), "needs at least two strategies to compare",
                              list(arrays.strategies))
    c, e = arrays.values[costs], arrays.values[effects]
    return [(strategy, c[:, j] - c[:, base], e[:, j] - e[:, base])
            for j, strategy in enumerate(arrays.strategies) if j != base]


def net_benefit(per_draw: pd.DataFrame, wtp: float | Sequence[float], *, costs: str = COSTS,
                effects: str = EFFECTS) -> pd.DataFrame:
    """Net monetary benefit of every strategy in every draw at each willingness to pay.

    Parameters
    ----------
    per_draw : one row per draw and strategy with ``draw``, ``strategy``, ``costs`` and ``effects``.
    wtp : willingness to pay per unit of effect (per QALY), one value or a grid; each >= 0.
    costs, effects : the outcome columns to use (discounted costs and QALYs by default).

    Returns
    -------
    pandas.DataFrame
        Columns ``wtp``, ``draw``, ``strategy``, ``net_benefit``; ordered by wtp, draw, strategy.

    Notes
    -----
    ``NB_d(λ) = λ E_d - C_d`` (net monetary benefit; Stinnett & Mullahy 1998, from memory;
    docs/methods.md, 'Net benefit and incremental results').
    """
    arrays, grid, nb = _net_benefits_over_wtp(per_draw, wtp, costs, effects)
    n_wtp, n, d = nb.shape
    return pd.DataFrame({
        "wtp": np.repeat(grid, n * d),
        "draw": np.tile(np.repeat(arrays.draws, d), n_wtp),
        "strategy": np.tile(np.asarray(arrays.strategies, dtype=object), n_wtp * n),
        "net_benefit": nb.reshape(-1),
    })


def incremental_results(per_draw: pd.DataFrame, comparator: str, *, costs: str = COSTS,
                        effects: str = EFFECTS) -> pd.DataFrame:
    """Mean incremental costs and effects of each strategy against ``comparator``, and the ICER of
    the means.

    Parameters
    ----------
    per_draw : per-draw table (one method).
    comparator : the strategy the others are compared with.
    costs, effects : outcome columns.

    Returns
    -------
    pandas.DataFrame
        One row per strategy other than the comparator: ``strategy``, ``comparator``,
        ``delta_costs``, ``delta_effects`` (means over draws), ``sd_delta_costs``,
        ``sd_delta_effects`` (their spread over draws: parameter uncertainty), ``icer`` and
        ``quadrant``: ``"NE"`` (costs more, gains), ``"SW"`` (saves, loses), ``"dominant"``
        (costs no more, gains no less, not both equal), ``"dominated"`` (costs no less, gains no
        more, not both equal) or ``"equal"``. ``icer`` is ``ΔC/ΔE`` of the means in the NE and SW
        quadrants and NaN otherwise.

    Notes
    -----
    ``ΔC = mean_i (C_{i,d} - C_{i,0})``, ``ΔE`` likewise, ``ICER = ΔC / ΔE`` (the ratio of the means,
    not the mean of the per-draw ratios, which is unstable when ``ΔE`` crosses zero). Quadrant labels
    follow common practice, no source.
    """
    arrays = draw_arrays(per_draw, [costs, effects])
    rows = []
    for strategy, dc, de in _increments(arrays, comparator, costs, effects):
        mc, me = float(dc.mean()), float(de.mean())
        quadrant = _quadrant(mc, me)
        icer = mc / me if quadrant in ("NE", "SW") else np.nan
        sd = (lambda x: float(x.std(ddof=1)) if len(x) > 1 else np.nan)  # noqa: E731
        rows.append((strategy, comparator, mc, me, sd(dc), sd(de), icer, quadrant))
    return pd.DataFrame(rows, columns=["strategy", "comparator", "delta_costs", "delta_effects",
                                       "sd_delta_costs", "sd_delta_effects", "icer", "quadrant"])


def _quadrant(dc: float, de: float) -> str:
    if dc == 0 and de == 0:
        return "equal"
    if dc <= 0 and de >= 0:
        return "dominant"
    if dc >= 0 and de <= 0:
        return "dominated"
    return "NE" if dc > 0 else "SW"


def incremental_analysis(per_draw: pd.DataFrame, *, costs: str = COSTS, effects: str = EFFECTS) -> pd.DataFrame:
    """Incremental analysis of all strategies on their mean costs and effects, with dominance and
    extended dominance.

    Parameters
    ----------
    per_draw : per-draw table (one method).
    costs, effects : outcome columns.

    Returns
    -------
    pandas.DataFrame
        One row per strategy, by increasing mean cost: ``strategy``, ``costs``, ``effects`` (means
        over draws), ``status`` (``"frontier"``, ``"dominated"``, ``"extendedly dominated"``),
        ``compared_with`` (the next cheaper strategy on the frontier; empty for the cheapest),
        ``delta_costs``, ``delta_effects`` and ``icer`` against it (NaN off the frontier).

    Notes
    -----
    Common practice, no source: sort by mean cost (ties: more effective first); a strategy is
    *dominated* when another costs no more and is no less effective, one of the two strictly (of two
    identical strategies the later listed is marked dominated); among the rest, a strategy is
    *extendedly dominated* when its ICER against the previous frontier strategy exceeds the ICER of
    the next one, i.e. a mix of its neighbours would do better; removed one at a time until the ICERs
    increase along the frontier. A strategy with the largest effect among those of least cost starts
    the frontier.
    """
    arrays = draw_arrays(per_draw, [costs, effects])
    c = arrays.values[costs].mean(axis=0)
    e = arrays.values[effects].mean(axis=0)
    names = arrays.strategies
    order = sorted(range(len(names)), key=lambda j: (c[j], -e[j], j))
    status = {j: "frontier" for j in order}
    for pos, j in enumerate(order):
        for k in order:
            if k == j:
                continue
            better = c[k] <= c[j] and e[k] >= e[j]
            identical = c[k] == c[j] and e[k] == e[j]
            if better and (not identical or order.index(k) < pos):
                status[j] = "dominated"
                break
    frontier = [j for j in order if status[j] == "frontier"]
    changed = True
    while changed and len(frontier) > 2:
        changed = False
        icers = [(c[b] - c[a]) / (e[b] - e[a]) for a, b in zip(frontier, frontier[1:])]
        for pos in range(len(icers) - 1):
            if icers[pos] > icers[pos + 1]:
                status[frontier[pos + 1]] = "extendedly dominated"
                del frontier[pos + 1]
                changed = True
                break
    rows = []
    for j in order:
        prev = None
        if status[j] == "frontier" and frontier.index(j) > 0:
            prev = frontier[frontier.index(j) - 1]
        dc = c[j] - c[prev] if prev is not None else np.nan
        de = e[j] - e[prev] if prev is not None else np.nan
        rows.append((names[j], float(c[j]), float(e[j]), status[j], names[prev] if prev is not None else "",
                     float(dc), float(de), float(dc / de) if prev is not None else np.nan))
    return pd.DataFrame(rows, columns=["strategy", "costs", "effects", "status", "compared_with",
                                       "delta_costs", "delta_effects", "icer"])


def ce_plane(per_draw: pd.DataFrame, comparator: str, *, costs: str = COSTS, effects: str = EFFECTS) -> pd.DataFrame:
    """Points of the cost-effectiveness plane: incremental effects and costs of each strategy against
    ``comparator`` in every draw, plus their mean.

    Returns
    -------
    pandas.DataFrame
        Columns ``strategy``, ``comparator``, ``point`` (``"draw"`` or ``"mean"``), ``draw``
        (nullable integer, missing on the mean row), ``delta_effects``, ``delta_costs``.

    Notes
    -----
    ``ΔE_i = E_{i,d} - E_{i,0}``, ``ΔC_i = C_{i,d} - C_{i,0}`` for draw ``i``; the mean point is
    ``(mean ΔE_i, mean ΔC_i)`` (common practice, no source; docs/methods.md, 'Net benefit and
    incremental results').
    """
    arrays = draw_arrays(per_draw, [costs, effects])
    parts = []
    for strategy, dc, de in _increments(arrays, comparator, costs, effects):
        n = len(de)
        parts.append(pd.DataFrame({
            "strategy": [strategy] * (n + 1), "comparator": [comparator] * (n + 1),
            "point": ["draw"] * n + ["mean"],
            "draw": pd.array(list(arrays.draws) + [pd.NA], dtype="Int64"),
            "delta_effects": np.append(de, de.mean()), "delta_costs": np.append(dc, dc.mean()),
        }))
    if not parts:
        return pd.DataFrame({"strategy": [], "comparator": [], "point": [],
                             "draw": pd.array([], dtype="Int64"), "delta_effects": [], "delta_costs": []})
    return pd.concat(parts, ignore_index=True)
