"""Running mean of the incremental net benefit over the draws, with its Monte Carlo standard error:
has the PSA run enough draws? (docs/methods.md, 'Convergence over draws').
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from sim.uncertainty._tables import COSTS, EFFECTS, draw_arrays, wtp_grid
from sim.uncertainty.net_benefit import _increments

__all__ = ["running_mean", "inb_convergence"]


def running_mean(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Running mean and its standard error along the last axis.

    Returns
    -------
    mean, mcse : arrays of the same shape; ``mean[..., k-1] = (1/k) Σ_{i<=k} x_i`` and
        ``mcse[..., k-1] = s_k / sqrt(k)`` with ``s_k`` the sample standard deviation of the first
        ``k`` values (NaN for ``k = 1``).

    Notes
    -----
    Cumulative sums of the values shifted by their overall mean (the shift cancels exactly in the
    variance and keeps the sums small): ``s_k² = (Σ d² - (Σ d)²/k) / (k - 1)``, ``d = x - x̄``.
    """
    x = np.asarray(values, dtype=float)
    k = np.arange(1, x.shape[-1] + 1, dtype=float)
    d = x - x.mean(axis=-1, keepdims=True)
    s1 = np.cumsum(d, axis=-1)
    s2 = np.cumsum(d * d, axis=-1)
    mean = x.mean(axis=-1, keepdims=True) + s1 / k
    var = np.full_like(x, np.nan)
    var[..., 1:] = np.maximum(s2[..., 1:] - s1[..., 1:] ** 2 / k[1:], 0.0) / (k[1:] - 1)
    return mean, np.sqrt(var / k)


def inb_convergence(per_draw: pd.DataFrame, comparator: str, wtp: float | Sequence[float], *,
                    costs: str = COSTS, effects: str = EFFECTS) -> pd.DataFrame:
    """Running mean of each strategy's incremental net benefit against ``comparator`` as draws
    accumulate (in draw order), with its MCSE.

    Returns
    -------
    pandas.DataFrame
        Columns ``strategy``, ``comparator``, ``wtp``, ``draws`` (1, 2, ..., N), ``draw`` (the draw
        number added last), ``mean`` and ``mcse`` (see :func:`running_mean`).

    Notes
    -----
    ``INB_i(λ) = λ (E_{i,d} - E_{i,0}) - (C_{i,d} - C_{i,0})``; after ``k`` draws the estimate is
    ``(1/k) Σ_{i<=k} INB_i`` with MCSE ``s_k/sqrt(k)`` (common practice, no source). The draws are
    independent, so the MCSE is that of a mean of independent values.
    """
    arrays = draw_arrays(per_draw, [costs, effects])
    increments = _increments(arrays, comparator, costs, effects)
    grid = wtp_grid(wtp)
    n = len(arrays.draws)
    parts = []
    for strategy, dc, de in increments:
        mean, mcse = running_mean(grid[:, None] * de[None] - dc[None])
        parts.append(pd.DataFrame({
            "strategy": strategy, "comparator": comparator, "wtp": np.repeat(grid, n),
            "draws": np.tile(np.arange(1, n + 1), len(grid)), "draw": np.tile(arrays.draws, len(grid)),
            "mean": mean.reshape(-1), "mcse": mcse.reshape(-1),
        }))
    return pd.concat(parts, ignore_index=True)
