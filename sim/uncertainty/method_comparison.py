"""The same parameter draws under several methods (simulated, exact, cycle-based approximations):
acceptability curves and EVPI side by side, and the willingness-to-pay ranges where an approximation
changes the probability of being cost-effective by more than a stated amount (docs/methods.md,
'Comparing methods on the same draws').
"""

from __future__ import annotations

from typing import Any, Callable, Sequence

import numpy as np
import pandas as pd

from sim.problems import ValidationError
from sim.uncertainty._tables import COSTS, EFFECTS, DrawArrays, draw_arrays, net_benefits, wtp_grid
from sim.uncertainty.acceptability import best_indicator
from sim.uncertainty.value_of_information import evpi_from_net_benefit

__all__ = ["per_method", "compare_acceptability", "compare_evpi", "differing_wtp_ranges"]


def per_method(statistic: Callable[..., pd.DataFrame], per_draw: pd.DataFrame, *args: Any,
               **kwargs: Any) -> pd.DataFrame:
    """Apply a one-method statistic to each method of a table with a ``method`` column and stack
    the results with a leading ``method`` column (methods in order of first appearance)."""
    if "method" not in per_draw.columns:
        raise ValidationError(("per_draw", "method"), "is a required column")
    parts = []
    for method, table in per_draw.groupby("method", sort=False):
        out = statistic(table, *args, **kwargs)
        out.insert(0, "method", method)
        parts.append(out)
    return pd.concat(parts, ignore_index=True)


def _by_method(per_draw: pd.DataFrame, reference: str, costs: str, effects: str) -> dict[str, DrawArrays]:
    if "method" not in per_draw.columns:
        raise ValidationError(("per_draw", "method"), "is a required column")
    methods = [str(m) for m in pd.unique(per_draw["method"])]
    if reference not in methods:
        raise ValidationError(("reference",), f"must be one of the methods {methods}", reference)
    arrays = {m: draw_arrays(per_draw[per_draw["method"] == m], [costs, effects]) for m in methods}
    ref = arrays[reference]
    for m, a in arrays.items():
        if not np.array_equal(a.draws, ref.draws) or set(a.strategies) != set(ref.strategies):
            raise ValidationError(("per_draw", "method"), f"must have the same draws and strategies as the "
                                  f"reference {reference!r}", m)
        if a.strategies != ref.strategies:  # same set, other order: align to the reference
            order = [a.strategies.index(s) for s in ref.strategies]
            arrays[m] = DrawArrays(a.draws, ref.strategies, {k: v[:, order] for k, v in a.values.items()})
    return arrays


def compare_acceptability(per_draw: pd.DataFrame, reference: str, wtp: float | Sequence[float], *,
                          costs: str = COSTS, effects: str = EFFECTS) -> pd.DataFrame:
    """Acceptability curves of every method next to the reference method's, on the same draws.

    Parameters
    ----------
    per_draw : per-draw table of several methods (a ``method`` column; every method with the same
        draws and strategies).
    reference : the method compared against (``"exact"`` or ``"simulated"``).
    wtp : willingness-to-pay grid.

    Returns
    -------
    pandas.DataFrame
        Columns ``method``, ``wtp``, ``strategy``, ``probability``, ``reference_probability``,
        ``difference`` (method minus reference) and ``difference_mcse``. The reference's own rows have
        difference 0.

    Notes
    -----
    With ``b_{i,d}`` the share of "best" strategy ``d`` gets in draw ``i`` (see
    :func:`sim.uncertainty.best_indicator`), ``Δ_d(λ) = (1/N) Σ_i (b^m_{i,d} - b^ref_{i,d})``; the
    draws are shared, so its MCSE is the paired ``sd_i(b^m_{i,d} - b^ref_{i,d}) / sqrt(N)``: it
    measures how much the difference would move with other parameter draws (common practice, no
    source).
    """
    arrays = _by_method(per_draw, reference, costs, effects)
    grid = wtp_grid(wtp)
    ref_best = best_indicator(net_benefits(arrays[reference], grid, costs, effects))  # (W, N, D)
    n = ref_best.shape[1]
    strategies = arrays[reference].strategies
    parts = []
    for method, a in arrays.items():
        best = best_indicator(net_benefits(a, grid, costs, effects))
        diff = best - ref_best
        sd = diff.std(axis=1, ddof=1) if n > 1 else np.full(diff.shape[::2], np.nan)
        parts.append(pd.DataFrame({
            "method": method, "wtp": np.repeat(grid, len(strategies)),
            "strategy": np.tile(np.asarray(strategies, dtype=object), len(grid)),
            "probability": best.mean(axis=1).reshape(-1),
            "reference_probability": ref_best.mean(axis=1).reshape(-1),
            "difference": diff.mean(axis=1).reshape(-1),
            "difference_mcse": (sd / np.sqrt(n)).reshape(-1),
        }))
    return pd.concat(parts, ignore_index=True)


def compare_evpi(per_draw: pd.DataFrame, reference: str, wtp: float | Sequence[float], *,
                 costs: str = COSTS, effects: str = EFFECTS) -> pd.DataFrame:
    """EVPI per patient of every method next to the reference method's, on the same draws.

    Returns
    -------
    pandas.DataFrame
        Columns ``method``, ``wtp``, ``evpi``, ``mcse``, ``optimal_strategy``, ``reference_evpi``,
        ``difference`` (method minus reference), ``difference_mcse`` (paired over draws: the
        standard deviation of the difference of the per-draw opportunity losses over ``sqrt(N)``).
    """
    arrays = _by_method(per_draw, reference, costs, effects)
    grid = wtp_grid(wtp)

    def loss(a: DrawArrays) -> tuple[np.ndarray, np.ndarray]:
        nb = net_benefits(a, grid, costs, effects)
        _, _, best = evpi_from_net_benefit(nb)
        chosen = np.take_along_axis(nb, best[:, None, None], axis=-1)[..., 0]
        return nb.max(axis=-1) - chosen, best

    ref_loss, _ = loss(arrays[reference])
    n = ref_loss.shape[1]
    strategies = np.asarray(arrays[reference].strategies, dtype=object)
    parts = []
    for method, a in arrays.items():
        values, best = loss(a)
        diff = values - ref_loss
        sd = (lambda v: v.std(axis=1, ddof=1) / np.sqrt(n) if n > 1 else np.full(len(grid), np.nan))  # noqa: E731
        parts.append(pd.DataFrame({
            "method": method, "wtp": grid, "evpi": values.mean(axis=1), "mcse": sd(values),
            "optimal_strategy": strategies[best], "reference_evpi": ref_loss.mean(axis=1),
            "difference": diff.mean(axis=1), "difference_mcse": sd(diff),
        }))
    return pd.concat(parts, ignore_index=True)


def differing_wtp_ranges(comparison: pd.DataFrame, threshold: float) -> pd.DataFrame:
    """Willingness-to-pay ranges where a method's probability of being cost-effective differs from
    the reference's by more than ``threshold``.

    Parameters
    ----------
    comparison : the output of :func:`compare_acceptability`.
    threshold : the largest acceptable absolute difference in probability (0 < threshold < 1).

    Returns
    -------
    pandas.DataFrame
        One row per run of consecutive grid points with ``|difference| > threshold``, per method and
        strategy: ``method``, ``strategy``, ``wtp_from``, ``wtp_to`` (the first and last grid points
        of the run: the true edges lie within one grid step outside), ``largest_difference`` (signed,
        the largest in absolute value), ``at_wtp`` (where it occurs) and its ``difference_mcse``.
        Empty when no method differs by more than the threshold.
    """
    needed = ("method", "wtp", "strategy", "difference", "difference_mcse")
    missing = [c for c in needed if c not in comparison.columns]
    if missing:
        raise ValidationError(("comparison", missing[0]), "is a required column (pass the output of "
                              "compare_acceptability)")
    t = float(threshold)
    if not 0 < t < 1:
        raise ValidationError(("threshold",), "must be > 0 and < 1", threshold)
    rows = []
    for (method, strategy), g in comparison.groupby(["method", "strategy"], sort=False):
        g = g.sort_values("wtp")
        over = (g["difference"].abs() > t).to_numpy()
        if not over.any():
            continue
        run_id = np.cumsum(np.r_[True, over[1:] != over[:-1]])
        for rid in np.unique(run_id[over]):
            run = g[run_id == rid]
            k = int(np.argmax(run["difference"].abs().to_numpy()))
            rows.append((method, strategy, float(run["wtp"].iloc[0]), float(run["wtp"].iloc[-1]),
                         float(run["difference"].iloc[k]), float(run["wtp"].iloc[k]),
                         float(run["difference_mcse"].iloc[k])))
    return pd.DataFrame(rows, columns=["method", "strategy", "wtp_from", "wtp_to", "largest_difference",
                                       "at_wtp", "difference_mcse"])
