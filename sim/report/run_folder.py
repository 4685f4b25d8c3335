"""Reading a run folder written by ``hazardtrace run`` back for a report or a rerun.

The folder holds the scenario's text as run, the seed, sizes and versions (``metadata.json``), the
event log and patient table, and the result tables (summary, increments, the error study's tables).
The result tables are shown as recorded; the survival and occupancy curves, which a streamed run does
not store, are estimated again from the recorded event log with the same functions the run uses
(:func:`sim.analysis.survival_to_own_horizon`, :func:`sim.analysis.occupancy_to_own_horizon`) and,
for a Markov model, the exact occupancy is solved again (:func:`sim.reference.exact_outcomes_and_occupancy`).

A partitioned run folder (``hazardtrace run --workers N`` or ``--scheduler``; its metadata lists the
partitions) is read one partition at a time: each gives its counts on the time grid
(:func:`sim.analysis.curve_counts`), added across partitions, so the curves of 10^8 patients never
need their rows in memory. They are the same curves, on the grid; survival is read at the times the
report draws it (:func:`sim.report.plots.step_times`), so the figure is the one the whole log gives.
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pandas as pd

from ..analysis import curve_counts, occupancy_to_own_horizon, survival_to_own_horizon
from ..io import Scenario, parse_scenario
from ..io.export import ExportError
from ..pipeline import time_grid
from ..reference import NoExactSolution, StudyResult, exact_outcomes_and_occupancy
from .inputs import ReportInputs
from .plots import step_times

__all__ = ["read_metadata", "scenario_of", "load_run_folder", "metadata_path"]

PARTITIONED_FORMAT = "parquet-partitioned"  # sim.distributed.PARTITIONED_FORMAT (report may not import Dask's package)
EVENT_COLUMNS = ["strategy", "patient", "time", "from_state", "to_state", "transition"]
PATIENT_COLUMNS = ["strategy", "patient", "initial_state", "exit_time", "final_state", "exit_reason"]
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


def _partitioned_curves(folder: Path, scenario: Scenario, meta: dict[str, Any], grid
                        ) -> tuple[pd.DataFrame, pd.DataFrame, str] | None:
    """Survival and occupancy of a partitioned run from its partitions' counts (None when a partition
    is missing), and a note saying how they were computed."""
    model = scenario.model
    names = [str(p.get("name")) for p in meta.get("partitions", []) if isinstance(p, dict)]
    paths = [(folder / "events" / n, folder / "patients" / n) for n in names]
    if (not paths or not all(re.fullmatch(r"part-\d+\.parquet", n) for n in names)
            or not all(e.is_file() and p.is_file() for e, p in paths)):
        return None
    counts = None
    times = step_times(float(grid[-1]))
    for events_path, patients_path in paths:  # one partition in memory at a time
        events = pd.read_parquet(events_path, columns=EVENT_COLUMNS)
        patients = pd.read_parquet(patients_path, columns=PATIENT_COLUMNS)
        present = set(patients["strategy"].astype(str))
        part = curve_counts(events, patients, model.state_names, grid, times,
                            strategies=[s for s in model.strategy_names if s in present])
        counts = part if counts is None else counts.merge(part)
    assert counts is not None
    parts = f"{len(paths)} partitions" if len(paths) != 1 else "one partition"
    note = f"simulated curves from the {parts} of the event log (counts added across partitions); survival at " \
           f"{len(times)} even times"
    return counts.survival(), counts.occupancy(), note


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
    if meta.get("format") == PARTITIONED_FORMAT:
        curves = _partitioned_curves(folder, scenario, meta, grid)
        if curves is None:
            notes.append("a partition of the event log is not in the run folder: no simulated curves")
        else:
            survival, occupancy, note = curves
            notes.append(note)
    else:
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
