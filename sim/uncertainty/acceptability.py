"""Cost-effectiveness acceptability curves and the acceptability frontier.

docs/methods.md, 'Acceptability curves and frontier'.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from sim.uncertainty._tables import COSTS, EFFECTS
from sim.uncertainty.net_benefit import _net_benefits_over_wtp

__all__ = ["acceptability_curve", "acceptability_frontier", "best_indicator"]


def best_indicator(nb: np.ndarray) -> np.ndarray:
    """Share of "best" each strategy gets in each draw: 1 for the strategy with the highest net
    benefit, ties (exactly equal net benefits) shared equally, so each draw's shares sum to 1.

    Parameters
    ----------
    nb : array (..., N, D) of net benefits.

    Returns
    -------
    numpy.ndarray of the same shape, entries in {0, 1/k, 1}.
    """
    top = nb.max(axis=-1, keepdims=True)
    hit = (nb == top).astype(float)
    return hit / hit.sum(axis=-1, keepdims=True)


def acceptability_curve(per_draw: pd.DataFrame, wtp: float | Sequence[float], *, costs: str = COSTS,
                        effects: str = EFFECTS) -> pd.DataFrame:
    """Probability that each strategy has the highest net benefit, at each willingness to pay.

    Parameters
    ----------
    per_draw : per-draw table (one method).
    wtp : willingness to pay per QALY, one value or a grid (each >= 0).
    costs, effects : outcome columns.

    Returns
    -------
    pandas.DataFrame
        Columns ``wtp``, ``strategy``, ``probability``, ``mcse`` (binomial Monte Carlo standard
        error over the draws, ``sqrt(p (1 - p) / N)``).

    Notes
    -----
    ``P_d(λ) = (1/N) Σ_i 1[NB_{i,d}(λ) = max_k NB_{i,k}(λ)]`` with ``NB = λ E - C`` (Fenwick,
    Claxton & Sculpher 2001, Health Econ 10:779-787; van Hout et al. 1994, from memory). For two
    strategies with normal incremental net benefit ``N(μ, σ²)`` this is ``Φ(μ/σ)``.
    """
    arrays, grid, nb = _net_benefits_over_wtp(per_draw, wtp, costs, effects)
    p = best_indicator(nb).mean(axis=1)  # (n_wtp, D)
    n = len(arrays.draws)
    d = len(arrays.strategies)
    return pd.DataFrame({
        "wtp": np.repeat(grid, d),
        "strategy": np.tile(np.asarray(arrays.strategies, dtype=object), len(grid)),
        "probability": p.reshape(-1),
        "mcse": np.sqrt(p * (1 - p) / n).reshape(-1),
    })


def acceptability_frontier(per_draw: pd.DataFrame, wtp: float | Sequence[float], *, costs: str = COSTS,
                           effects: str = EFFECTS) -> pd.DataFrame:
    """The strategy with the highest expected net benefit at each willingness to pay, with the
    probability that it is the most cost-effective.

    Returns
    -------
    pandas.DataFrame
        Columns ``wtp``, ``strategy`` (the optimal one: highest mean net benefit; the first listed on
        an exact tie), ``expected_net_benefit``, ``probability`` (its value on the acceptability
        curve) and ``mcse``.

    Notes
    -----
    ``d*(λ) = argmax_d (1/N) Σ_i NB_{i,d}(λ)``; the frontier is ``P_{d*(λ)}(λ)``. It differs from the
    highest acceptability curve where the distribution of net benefit is skewed (Fenwick, Claxton &
    Sculpher 2001, Health Econ 10:779-787).
    """
    arrays, grid, nb = _net_benefits_over_wtp(per_draw, wtp, costs, effects)
    mean_nb = nb.mean(axis=1)  # (n_wtp, D)
    best = mean_nb.argmax(axis=1)
    p = best_indicator(nb).mean(axis=1)[np.arange(len(grid)), best]
    n = len(arrays.draws)
    return pd.DataFrame({
        "wtp": grid,
        "strategy": np.asarray(arrays.strategies, dtype=object)[best],
        "expected_net_benefit": mean_nb[np.arange(len(grid)), best],
        "probability": p,
        "mcse": np.sqrt(p * (1 - p) / n),
    })
