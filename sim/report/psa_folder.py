"""Reading a probabilistic analysis's folder (written by ``hazardtrace psa``) back for a report, and
the report's inputs of an analysis held in memory (the window's).

The folder's ``metadata.json`` says what it is (``"command": "psa"``); its tables are shown as
recorded: the summary tables, the uncertain inputs (``inputs.csv``; from the recorded scenario,
:func:`sim.psa.inputs_table`, for a folder written before the file existed), the population EVPI
(``population_evpi.csv``) and the EVPPI (``evppi.csv``) where ``hazardtrace psa`` computed them.
Only what is asked is computed here, from the recorded per-draw table and parameter draws, by the
same functions as ``hazardtrace psa`` (:func:`sim.psa.summaries.population_evpi_table` with a
population and years, :func:`sim.psa.summaries.evppi_table` for parameter groups), replacing the
recorded table of the same name.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..io import Scenario
from ..io.export import ExportError
from ..psa import inputs_table
from ..psa.summaries import check_population, evppi_table, population_evpi_table, reference_method, wtp_points
from .inputs import ReportInputs
from .run_folder import metadata_path, read_metadata, scenario_of

__all__ = ["folder_kind", "load_psa_folder", "inputs_from_psa", "read_inputs_csv", "PSA_TABLES"]

#: the summary tables ``hazardtrace psa`` writes (those present are read)
PSA_TABLES = ("incremental", "ce_plane", "ceac", "acceptability_frontier", "evpi", "noise_share", "convergence",
              "acceptability_by_method", "evpi_by_method", "population_evpi", "evppi")
_TEXT = ("parameter", "distribution", "parameters", "fitted_from", "description")


def folder_kind(where: str | Path) -> str:
    """``"psa"`` for a folder (or metadata file) written by ``hazardtrace psa``, ``"run"`` for any
    other run folder (its metadata is read and checked as a run's; raises
    :class:`sim.io.export.ExportError` if it is neither)."""
    meta = read_metadata(where)
    return "psa" if meta.get("command") == "psa" else "run"


def read_inputs_csv(path: str | Path) -> pd.DataFrame:
    """``inputs.csv`` as :func:`sim.psa.inputs_table` gives it (empty text cells as ``""``)."""
    table = pd.read_csv(path, keep_default_na=True)
    for name in _TEXT:
        if name in table.columns:
            table[name] = table[name].fillna("").astype(str)
    return table


def inputs_from_psa(scenario: Scenario, metadata: Mapping[str, Any], tables: Mapping[str, pd.DataFrame],
                    source: str) -> tuple[ReportInputs, dict[str, pd.DataFrame]]:
    """The report's inputs of an analysis (scenario and the analysis' metadata as ``hazardtrace psa``
    records it; no run outcomes or curves) and its uncertainty tables: ``tables`` with the uncertain
    inputs (:func:`sim.psa.inputs_table`) where they lack them. Used for a folder
    (:func:`load_psa_folder`) and for an analysis in the window."""
    shown: dict[str, pd.DataFrame] = dict(tables)
    if "inputs" not in shown:
        shown = {"inputs": inputs_table(scenario), **shown}
    meta: dict[str, Any] = dict(metadata)
    meta.setdefault("threads", meta.get("workers"))
    if isinstance(meta.get("seconds"), (int, float)):
        meta["run_seconds"] = meta.pop("seconds")
    return ReportInputs(scenario=scenario, metadata=meta, source=source), shown


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
    tables: dict[str, pd.DataFrame] = {}
    if (root / "inputs.csv").exists():
        tables["inputs"] = read_inputs_csv(root / "inputs.csv")
    for name in PSA_TABLES:
        path = root / f"{name}.csv"
        if path.exists():
            tables[name] = pd.read_csv(path, keep_default_na=True)
    draws_path = root / "draws.parquet"
    if (population is not None or years is not None or evppi_groups) and not draws_path.exists():
        raise ExportError(f"{root}: no draws.parquet; population EVPI and EVPPI need the per-draw table",
                          file=draws_path, rule="a finished analysis's folder has draws.parquet")
    check_population(population, years)
    model = scenario.model
    if population is not None and "evpi" in tables:
        ref = reference_method(pd.read_parquet(draws_path, columns=["method"]))
        tables["population_evpi"] = population_evpi_table(tables["evpi"], ref, model, population, int(years))
    if evppi_groups:
        table = pd.read_parquet(draws_path)
        params = pd.read_parquet(root / "parameters.parquet")
        wtp = float(model.valuation.willingness_to_pay)
        grid = wtp_points(tables["evpi"]["wtp"].to_numpy(float), wtp) if "evpi" in tables else np.array([wtp])
        tables["evppi"] = evppi_table(table, params, model, evppi_groups, grid)
    return inputs_from_psa(scenario, meta, tables, f"the probabilistic analysis folder {root}")
