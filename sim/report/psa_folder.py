"""Reading a probabilistic analysis's folder (written by ``hazardtrace psa``) back for a report.

The folder's ``metadata.json`` says what it is (``"command": "psa"``); its summary tables are shown
as recorded. What the folder does not hold is computed here from its recorded per-draw table and
parameter draws, with the functions of :mod:`sim.uncertainty`: the uncertain inputs' table
(:func:`sim.psa.inputs_table` of the recorded scenario), the population EVPI when a population and
years are given (:func:`sim.uncertainty.population_evpi`, discounted at the scenario's cost discount
rate) and the EVPPI of the parameter groups asked for (:func:`sim.uncertainty.evppi`, reference
method, at the willingness-to-pay values of the report's EVPI table).
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..io.export import ExportError
from ..psa.apply import inputs_table  # not the package: its __init__ names the Dask runner
from ..psa.summaries import reference_method
from ..uncertainty import evppi, population_evpi
from .inputs import ReportInputs
from .psa_tables import wtp_points
from .run_folder import metadata_path, read_metadata, scenario_of

__all__ = ["folder_kind", "load_psa_folder", "PSA_TABLES"]

#: the summary tables ``hazardtrace psa`` writes (those present are read)
PSA_TABLES = ("incremental", "ce_plane", "ceac", "acceptability_frontier", "evpi", "noise_share", "convergence",
              "acceptability_by_method", "evpi_by_method")


def folder_kind(where: str | Path) -> str:
    """``"psa"`` for a folder (or metadata file) written by ``hazardtrace psa``, ``"run"`` for any
    other run folder (its metadata is read and checked as a run's; raises
    :class:`sim.io.export.ExportError` if it is neither)."""
    meta = read_metadata(where)
    return "psa" if meta.get("command") == "psa" else "run"


def load_psa_folder(folder: str | Path, *, population: float | None = None, years: int | None = None,
                    evppi_groups: Sequence[Sequence[str]] = ()) -> tuple[ReportInputs, dict[str, pd.DataFrame]]:
    """The report's inputs (scenario and metadata; no run outcomes or curves) and its uncertainty
    tables by name (see the module docstring).

    Raises
    ------
    ExportError
        Not a probabilistic analysis's folder, or one without its per-draw table.
    sim.problems.ValidationError
        A population, years or parameter group that the statistics refuse (key, value, rule).
    """
    meta = read_metadata(folder)
    root = metadata_path(folder).parent
    if meta.get("command") != "psa":
        raise ExportError(f"{root}: not a probabilistic analysis's folder (its metadata has no \"command\": "
                          f"\"psa\")", file=root, rule="must be a folder written by 'hazardtrace psa'")
    scenario = scenario_of(meta, root)
    tables: dict[str, pd.DataFrame] = {"inputs": inputs_table(scenario)}
    for name in PSA_TABLES:
        path = root / f"{name}.csv"
        if path.exists():
            tables[name] = pd.read_csv(path, keep_default_na=True)
    draws_path = root / "draws.parquet"
    if (population is not None or years is not None or evppi_groups) and not draws_path.exists():
        raise ExportError(f"{root}: no draws.parquet; population EVPI and EVPPI need the per-draw table",
                          file=draws_path, rule="a finished analysis's folder has draws.parquet")
    if (population is None) != (years is None):
        raise ExportError("the population EVPI needs both the patients per year (--population) and the years "
                          "(--years)", key=("--population" if population is None else "--years",),
                          rule="give both or neither")
    if population is not None and "evpi" in tables:
        ref = reference_method(pd.read_parquet(draws_path, columns=["method"]))
        rows = tables["evpi"][tables["evpi"]["method"] == ref]
        tables["population_evpi"] = population_evpi(rows, population, int(years),
                                                    scenario.model.valuation.discount_costs)
    if evppi_groups:
        table = pd.read_parquet(draws_path)
        params = pd.read_parquet(root / "parameters.parquet")
        ref = reference_method(table)
        wtp = float(scenario.model.valuation.willingness_to_pay)
        grid = wtp_points(tables["evpi"]["wtp"].to_numpy(float), wtp) if "evpi" in tables else np.array([wtp])
        tables["evppi"] = pd.concat([evppi(table[table["method"] == ref], params, list(group), grid)
                                     for group in evppi_groups], ignore_index=True)
    source = f"the probabilistic analysis folder {root}"
    meta_shown: dict[str, Any] = dict(meta)
    meta_shown.setdefault("threads", meta.get("workers"))
    if isinstance(meta.get("seconds"), (int, float)):
        meta_shown["run_seconds"] = meta_shown.pop("seconds")
    return ReportInputs(scenario=scenario, metadata=meta_shown, source=source), tables
