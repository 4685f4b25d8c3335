"""The summary tables of a probabilistic analysis, computed once from the per-draw table with the
value-of-information functions of :mod:`sim.uncertainty` (each per method: simulated, exact and every
cycle-based approximation, for the same draws).

``incremental`` (mean increments, ICER, quadrant), ``ce_plane`` (every draw's increments and their
mean), ``ceac`` and ``acceptability_frontier`` over the willingness-to-pay grid (Fenwick, Claxton &
Sculpher 2001, Health Econ 10:779-787), ``evpi`` per patient (Raiffa & Schlaifer 1961), the
simulated rows' ``noise_share`` (O'Hagan, Stevenson & Madan 2007, Health Econ 16:1009-1023) and
``convergence`` of the incremental net benefit; with a reference method and another method,
``acceptability_by_method`` and ``evpi_by_method`` (issue 14 item 4).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..model import Model
from ..uncertainty import (acceptability_curve, acceptability_frontier, ce_plane, compare_acceptability, compare_evpi,
                           evpi, inb_convergence, incremental_results, noise_share, per_method)
from .tables import EXACT, SIMULATED

__all__ = ["wtp_grid_for", "psa_summaries", "reference_method"]


def wtp_grid_for(model: Model, points: int = 61) -> np.ndarray:
    """Willingness to pay from 0 to three times the scenario's value (100,000 when it is 0)."""
    top = 3.0 * (model.valuation.willingness_to_pay or 100_000.0 / 3.0)
    return np.linspace(0.0, top, points)


def reference_method(table: pd.DataFrame) -> str:
    """The exact rows where there are any, else the simulated ones."""
    return EXACT if (table["method"] == EXACT).any() else SIMULATED


def psa_summaries(table: pd.DataFrame, model: Model, wtp: np.ndarray | None = None) -> dict[str, pd.DataFrame]:
    """The summary tables by name (none with a single strategy: nothing to compare)."""
    if len(model.strategy_names) < 2 or table.empty:
        return {}
    grid = wtp_grid_for(model) if wtp is None else np.asarray(wtp, dtype=float)
    comparator = model.strategy_names[0]
    out = {
        "incremental": per_method(incremental_results, table, comparator),
        "ce_plane": per_method(ce_plane, table, comparator),
        "ceac": per_method(acceptability_curve, table, grid),
        "acceptability_frontier": per_method(acceptability_frontier, table, grid),
        "evpi": per_method(evpi, table, grid),
    }
    simulated = table[table["method"] == SIMULATED]
    if len(simulated) and (simulated["patients"] > 1).all():
        out["noise_share"] = noise_share(simulated, ["costs_discounted", "qalys_discounted"])
        out["convergence"] = inb_convergence(simulated, comparator, model.valuation.willingness_to_pay)
    reference = reference_method(table)
    if table["method"].nunique() > 1:
        out["acceptability_by_method"] = compare_acceptability(table, reference, grid)
        out["evpi_by_method"] = compare_evpi(table, reference, grid)
    return out
