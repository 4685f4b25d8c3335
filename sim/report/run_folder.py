"""Reading a run folder written by ``hazardtrace run`` back for a report or a rerun.

The folder holds the scenario's text as run, the seed, sizes and versions (``metadata.json``), the
event log and patient table, and the result tables (summary, increments, the error study's tables).
The result tables are shown as recorded; the survival and occupancy curves, which a streamed run does
not store, are estimated again from the recorded event log with the same functions the run uses
(:func:`sim.analysis.survival_to_own_horizon`, :func:`sim.analysis.occupancy_to_own_horizon`) and,
for a Markov model, the exact occupancy is solved again (:func:`sim.reference.exact_outcomes_and_occupancy`).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pandas as pd

from ..analysis import occupancy_to_own_horizon, survival_to_own_horizon
from ..io import Scenario, parse_scenario
from ..io.export import ExportError
from ..pipeline import time_grid
from ..reference import NoExactSolution, StudyResult, exact_outcomes_and_occupancy
from .inputs import ReportInputs

__all__ = ["read_metadata", "scenario_of", "load_run_folder", "metadata_path"]

CATEGORIES = ("strategy", "from_state", "to_state", "transition", "sex", "initial_state", "final_state",
              "exit_reason")


def metadata_path(where: str | Path) -> Path:
    """``metadata.json`` of a run folder (``where`` is the folder or the file itself)."""
    where = Path(where)
    return where / "metadata.json" if where.is_dir() else where


def read_metadata(where: str | Path) -> dict[str, Any]:
    """A run's ``metadata.json`` (``where``: the run folder or the file).

    Raises
    ------
    ExportError
        No such file, or one that is not a run's metadata (JSON with ``scenario`` and ``seed``).
    """
    path = metadata_path(where)
    try:
        meta = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ExportError(f"{path}: no such file; give a run folder written by 'hazardtrace run' or its "
                          f"metadata.json", file=path, rule="must be a run folder or its metadata.json") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
        raise ExportError(f"{path}: cannot read the run's metadata: {err}", file=path,
                          rule="must be a run's metadata.json (JSON)") from None
    for key in ("scenario", "seed", "patients"):
        if not isinstance(meta, dict) or key not in meta:
            raise ExportError(f"{path}: not a run's metadata: key {key!r} is missing", file=path, key=(key,),
                              rule="a run's metadata.json records the scenario, seed and patients")
    return meta


def scenario_of(meta: dict[str, Any], folder: Path) -> Scenario:
    """The recorded scenario copy, validated; relative file paths in it (a life table) are read from
    the original scenario file's folder when it still exists, else from the run folder."""
    original = meta.get("scenario_file")
    base = Path(original).resolve().parent if original and Path(original).resolve().parent.is_dir() else folder
    name = f"{folder / 'metadata.json'} (scenario copy of {original or 'an unsaved scenario'})"
    return parse_scenario(meta["scenario"], file=name, base_dir=base)


def _table(folder: Path, name: str) -> pd.DataFrame | None:
    path = folder / f"{name}.csv"
    return pd.read_csv(path) if path.exists() else None


def _log(folder: Path, name: str, meta: dict[str, Any]) -> pd.DataFrame | None:
    fmt = meta.get("format", "parquet")
    path = folder / f"{name}.{'parquet' if fmt == 'parquet' else 'csv'}"
    if not path.exists():
        return None
    if fmt == "parquet":
        return pd.read_parquet(path)
    df = pd.read_csv(path)
    for col in CATEGORIES:
        if col in df.columns:
            df[col] = df[col].astype("category")
    return df


def _study(folder: Path, scenario: Scenario, meta: dict[str, Any]) -> StudyResult | None:
    table = _table(folder, "error_study")
    if table is None:
        return None
    model = scenario.model
    kind = "exact" if model.is_markov else f"simulation ({int(meta['patients']):,} patients, seed {int(meta['seed'])})"
    decisions = _table(folder, "error_study_decisions")
    return StudyResult(table=table, reference=pd.DataFrame(), orders=_table(folder, "error_study_orders"),
                       largest_cycle=_table(folder, "error_study_largest_cycle"),
                       decisions=decisions if decisions is not None else pd.DataFrame(),
                       jump_over=pd.DataFrame(), reference_kind=kind, notes=[],
                       tunnel_entry=None if model.is_markov else str(scenario.run.tunnel_entry))


def _curves(scenario: Scenario, events: pd.DataFrame, patients: pd.DataFrame, grid) -> tuple[pd.DataFrame, pd.DataFrame]:
    model = scenario.model
    surv, occ = [], []
    for name in model.strategy_names:
        ev = events[events["strategy"] == name].reset_index(drop=True)
        pt = patients[patients["strategy"] == name].reset_index(drop=True)
        if len(pt) == 0:
            continue
        surv.append(survival_to_own_horizon(pt).assign(strategy=name))
        occ.append(occupancy_to_own_horizon(ev, pt, model.state_names, grid).assign(strategy=name))
    return pd.concat(surv, ignore_index=True), pd.concat(occ, ignore_index=True)


def load_run_folder(folder: str | Path) -> ReportInputs:
    """The report's inputs from a run folder (see the module docstring).

    Raises
    ------
    ExportError
        Not a run folder (no readable ``metadata.json``, no ``summary.csv``).
    sim.io.ScenarioError
        The recorded scenario no longer reads (e.g. its life table is gone).
    """
    folder = Path(folder)
    meta = read_metadata(folder)
    folder = metadata_path(folder).parent
    scenario = scenario_of(meta, folder)
    outcomes = _table(folder, "summary")
    if outcomes is None:
        raise ExportError(f"{folder}: no summary.csv; the run did not finish", file=folder,
                          rule="a finished run folder has summary.csv")
    increments = _table(folder, "increments")
    grid = time_grid(scenario)
    notes: list[str] = []
    survival = occupancy = None
    events, patients = _log(folder, "events", meta), _log(folder, "patients", meta)
    if events is not None and patients is not None:
        survival, occupancy = _curves(scenario, events, patients, grid)
    else:
        notes.append("the event log is not in the run folder: no simulated curves")
    exact_occupancy, exact_note = None, ""
    if scenario.model.is_markov:
        try:
            exact_occupancy = exact_outcomes_and_occupancy(scenario.model, grid)[1]
        except NoExactSolution as err:
            exact_note = f"no exact solution: {err}"
    else:
        exact_note = (f"no exact solution: transitions {scenario.model.semi_markov_transitions()} are semi-Markov")
    return ReportInputs(scenario=scenario, outcomes=outcomes, increments=increments, survival=survival,
                        occupancy=occupancy, exact_occupancy=exact_occupancy, grid=grid, exact_note=exact_note,
                        study=_study(folder, scenario, meta), metadata=meta, source=f"the run folder {folder}",
                        notes=tuple(notes))
