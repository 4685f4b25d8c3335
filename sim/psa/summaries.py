"""The summary tables of a probabilistic analysis, computed once from the per-draw table with the
value-of-information functions of :mod:`sim.uncertainty` (each per method: simulated, exact and every
cycle-based approximation, for the same draws).

``incremental`` (mean increments, ICER, quadrant), ``ce_plane`` (every draw's increments and their
mean), ``ceac`` and ``acceptability_frontier`` over the willingness-to-pay grid (Fenwick, Claxton &
Sculpher 2001, Health Econ 10:779-787), ``evpi`` per patient (Raiffa & Schlaifer 1961), the
simulated rows' ``noise_share`` (O'Hagan, Stevenson & Madan 2007, Health Econ 16:1009-1023) and
``convergence`` of the incremental net benefit; with a reference method and another method,
``acceptability_by_method`` and ``evpi_by_method`` (issue 14 item 4). Asked for, not by default:
``population_evpi`` (:func:`population_evpi_table`) and ``evppi`` of parameter groups
(:func:`evppi_table`), used by both ``hazardtrace psa`` and the report of an analysis's folder.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..model import Model
from ..problems import ValidationError
from ..uncertainty import (acceptability_curve, acceptability_frontier, ce_plane, compare_acceptability, compare_evpi,
                           evpi, evppi, inb_convergence, incremental_results, noise_share, per_method,
                           population_evpi)
from .tables import EXACT, SIMULATED

__all__ = ["wtp_grid_for", "psa_summaries", "reference_method", "wtp_points", "population_evpi_table", "evppi_table",
           "check_population"]


def wtp_grid_for(model: Model, points: int = 61) -> np.ndarray:
    """Willingness to pay from 0 to three times the scenario's value (100,000 when it is 0)."""
    top = 3.0 * (model.valuation.willingness_to_pay or 100_000.0 / 3.0)
    return np.linspace(0.0, top, points)


def reference_method(table: pd.DataFrame) -> str:
    """The exact rows where there are any, else the simulated ones."""
    return EXACT if (table["method"] == EXACT).any() else SIMULATED


def wtp_points(grid: np.ndarray, wtp: float, rows: int = 10) -> np.ndarray:
    """About ``rows`` evenly spaced values of the willingness-to-pay grid, with the grid value nearest
    the scenario's willingness to pay."""
    grid = np.unique(np.asarray(grid, dtype=float))
    step = max(1, int(np.ceil((len(grid) - 1) / rows)))
    idx = set(range(0, len(grid), step)) | {len(grid) - 1, int(np.abs(grid - wtp).argmin())}
    return grid[sorted(idx)]


def check_population(population: float | None, years: int | None) -> None:
    """Both or neither of the patients per year and the years of the population EVPI
    (:class:`sim.problems.ValidationError` naming ``--population`` or ``--years``)."""
    if (population is None) != (years is None):
        raise ValidationError(("--population" if population is None else "--years",),
                              "the population EVPI needs both the patients per year (--population) and the years "
                              "(--years): give both or neither", years if population is None else population)


def population_evpi_table(evpi_rows: pd.DataFrame, method: str, model: Model, population: float,
                          years: int) -> pd.DataFrame:
    """The population EVPI of ``method`` 's rows of the ``evpi`` table: per-patient EVPI times the
    patients per year discounted over the years at the scenario's cost discount rate, first year
    undiscounted (:func:`sim.uncertainty.population_evpi`)."""
    rows = evpi_rows[evpi_rows["method"] == method]
    return population_evpi(rows, population, int(years), model.valuation.discount_costs)


def evppi_table(table: pd.DataFrame, parameters: pd.DataFrame, model: Model, groups: Sequence[Sequence[str]],
                wtp: np.ndarray | None = None) -> pd.DataFrame:
    """EVPPI of each parameter group (:func:`sim.uncertainty.evppi`, regression on the group's
    draws: Strong, Oakley & Brennan 2014, Med Decis Making 34:311-326) for the reference method's
    rows, at ``wtp`` (default: about ten points of the summary grid with the scenario's value,
    :func:`wtp_points`); one table, the groups one after the other."""
    ref = reference_method(table)
    grid = wtp_points(wtp_grid_for(model), float(model.valuation.willingness_to_pay)) if wtp is None else \
        np.asarray(wtp, dtype=float)
    rows = table[table["method"] == ref]
    return pd.concat([evppi(rows, parameters, list(group), grid) for group in groups], ignore_index=True)


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
