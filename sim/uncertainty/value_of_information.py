"""Expected value of perfect information, per patient and for a population.

docs/methods.md, 'Expected value of perfect information'.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import pandas as pd

from sim.problems import ValidationError
from sim.uncertainty._tables import COSTS, EFFECTS, check_positive
from sim.uncertainty.net_benefit import _net_benefits_over_wtp

__all__ = ["evpi", "evpi_from_net_benefit", "population_factor", "population_evpi"]


def evpi_from_net_benefit(nb: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """EVPI, its Monte Carlo standard error and the optimal strategy from net benefits.

    Parameters
    ----------
    nb : array (..., N, D): net benefit of D strategies in N draws (leading axes e.g. wtp).

    Returns
    -------
    evpi, mcse, best : arrays of the leading shape; ``best`` is the index of the strategy with the
        highest mean net benefit.

    Notes
    -----
    ``EVPI = (1/N) Σ_i max_d NB_{i,d} - max_d (1/N) Σ_i NB_{i,d} = (1/N) Σ_i L_i`` with the
    opportunity loss ``L_i = max_d NB_{i,d} - NB_{i,d*}`` of the strategy ``d*`` chosen on current
    information. The MCSE is ``sd(L_i)/sqrt(N)``, treating ``d*`` as fixed (a first-order statement:
    when two strategies' expected net benefits are within their standard errors the choice of
    ``d*`` adds variance not counted here).
    """
    nb = np.asarray(nb, dtype=float)
    n = nb.shape[-2]
    best = nb.mean(axis=-2).argmax(axis=-1)
    chosen = np.take_along_axis(nb, best[..., None, None], axis=-1)[..., 0]
    loss = nb.max(axis=-1) - chosen
    value = loss.mean(axis=-1)
    mcse = loss.std(axis=-1, ddof=1) / np.sqrt(n) if n > 1 else np.full_like(value, np.nan)
    return value, mcse, best


def evpi(per_draw: pd.DataFrame, wtp: float | Sequence[float], *, costs: str = COSTS,
         effects: str = EFFECTS) -> pd.DataFrame:
    """Expected value of perfect information per patient at each willingness to pay.

    Parameters
    ----------
    per_draw : per-draw table (one method).
    wtp : willingness to pay per QALY, one value or a grid (each >= 0).
    costs, effects : outcome columns.

    Returns
    -------
    pandas.DataFrame
        Columns ``wtp``, ``evpi`` (in money per patient), ``mcse``, ``optimal_strategy`` (highest
        expected net benefit on current information).

    Notes
    -----
    ``EVPI(λ) = E_θ[max_d NB_d(λ, θ)] - max_d E_θ[NB_d(λ, θ)]``, estimated by the means over the
    draws (see :func:`evpi_from_net_benefit`). For two strategies with normal incremental net benefit
    ``N(μ, σ²)``, ``EVPI = σ L(|μ|/σ)`` with the unit normal loss integral
    ``L(z) = φ(z) - z (1 - Φ(z))`` (Raiffa & Schlaifer 1961, Applied Statistical Decision Theory;
    Claxton 1999, from memory).
    """
    arrays, grid, nb = _net_benefits_over_wtp(per_draw, wtp, costs, effects)
    value, mcse, best = evpi_from_net_benefit(nb)
    return pd.DataFrame({"wtp": grid, "evpi": value, "mcse": mcse,
                         "optimal_strategy": np.asarray(arrays.strategies, dtype=object)[best]})


def population_factor(annual_population: float, years: int, discount_rate: float, *,
                      first_year_discounted: bool = False) -> float:
    """The discounted number of patients who benefit from a decision over ``years`` years.

    Parameters
    ----------
    annual_population : patients affected per year (> 0).
    years : the decision's time horizon in whole years (>= 1).
    discount_rate : annual discount rate ``r`` (>= 0, e.g. 0.035).
    first_year_discounted : if False (default) the first year's patients count in full
        (``t = 0, ..., T - 1``); if True they are discounted by one year (``t = 1, ..., T``).

    Returns
    -------
    float
        ``F = Σ_{t=0}^{T-1} P (1 + r)^{-t} = P (1 - (1 + r)^{-T}) / (1 - (1 + r)^{-1})``, or with
        ``first_year_discounted`` ``Σ_{t=1}^{T} P (1 + r)^{-t} = P (1 - (1 + r)^{-T}) / r``; ``P T``
        when ``r = 0``. Common practice, no source (the timing convention varies between
        guidelines, hence the switch).
    """
    p = check_positive(annual_population, "annual_population")
    t = int(check_positive(years, "years", integer=True))
    r = check_positive(discount_rate, "discount_rate", allow_zero=True)
    if r == 0:
        return p * t
    total = -np.expm1(-t * np.log1p(r))  # 1 - (1 + r)^-T without cancellation for small r
    factor = total / r if first_year_discounted else total * (1 + r) / r
    return float(p * factor)


def population_evpi(evpi_table: pd.DataFrame, annual_population: float, years: int, discount_rate: float, *,
                    first_year_discounted: bool = False) -> pd.DataFrame:
    """Population EVPI: per-patient EVPI times the discounted number of patients.

    Parameters
    ----------
    evpi_table : the output of :func:`evpi` (columns ``wtp``, ``evpi``, ``mcse``).
    annual_population, years, discount_rate, first_year_discounted : see :func:`population_factor`.

    Returns
    -------
    pandas.DataFrame
        ``evpi_table`` with ``population_evpi`` and ``population_evpi_mcse`` added (both ``F`` times
        the per-patient values) and the factor ``F`` in ``population_factor``.
    """
    missing = [c for c in ("wtp", "evpi", "mcse") if c not in evpi_table.columns]
    if missing:
        raise ValidationError(("evpi_table", missing[0]), "is a required column (pass the output of evpi)")
    factor = population_factor(annual_population, years, discount_rate,
                               first_year_discounted=first_year_discounted)
    out = evpi_table.copy()
    out["population_factor"] = factor
    out["population_evpi"] = factor * out["evpi"]
    out["population_evpi_mcse"] = factor * out["mcse"]
    return out
