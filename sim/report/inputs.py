"""What a report is made from: :class:`ReportInputs`, built from a finished run held in memory
(:func:`inputs_from_results`), from a comparison alone (:func:`inputs_from_study`) or from a run
folder written by ``hazardtrace run`` (:func:`sim.report.load_run_folder`)."""

from __future__ import annotations

import platform
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .. import __version__
from ..io import Scenario
from ..io.export import input_files
from ..pipeline import RunResults, time_grid
from ..reference import StudyResult

__all__ = ["ReportInputs", "inputs_from_results", "inputs_from_study"]


@dataclass(frozen=True)
class ReportInputs:
    """Everything a report shows; a missing part (None) leaves its section out or says why.

    scenario : the validated scenario (its text is the one that was run).
    outcomes : strategy, outcome, mean, mcse, n, exact, z (``RunResults.outcomes``).
    increments : strategy, comparator, quantity, value, mcse, mcse_unpaired, exact.
    survival, occupancy, exact_occupancy : the curves' tables as in :class:`sim.pipeline.RunResults`.
    grid : times since entry of the curves.
    exact_note : why there is no exact solution, or "".
    study : the discretization-error study.
    metadata : provenance: tool_version, seed, patients, threads, date_utc, run_seconds or seconds per
        stage, input_files (with SHA-256), event_log_sha256, ... (as ``metadata.json``).
    source : what the report was made from, in words.
    notes : anything else the reader must know (failed or skipped stages).
    """

    scenario: Scenario
    outcomes: pd.DataFrame | None = None
    increments: pd.DataFrame | None = None
    survival: pd.DataFrame | None = None
    occupancy: pd.DataFrame | None = None
    exact_occupancy: pd.DataFrame | None = None
    grid: np.ndarray | None = None
    exact_note: str = ""
    study: StudyResult | None = None
    metadata: dict[str, Any] = field(default_factory=dict)
    source: str = ""
    notes: tuple[str, ...] = ()


def _base_metadata(scenario: Scenario) -> dict[str, Any]:
    base = scenario.path.resolve().parent if scenario.path else None
    return {"tool_version": __version__, "python": platform.python_version(), "numpy": np.__version__,
            "pandas": pd.__version__, "scenario_file": str(scenario.path) if scenario.path else None,
            "scenario_sha256": scenario.sha256, "input_files": input_files(scenario.text, base)}


def inputs_from_results(results: RunResults, metadata: dict[str, Any] | None = None,
                        source: str = "a run held in memory") -> ReportInputs:
    """The report's inputs from a finished run (``metadata``: a run folder's ``metadata.json`` when
    the run was also written to disk; otherwise the settings and versions of this process)."""
    meta = _base_metadata(results.scenario)
    s = results.settings
    meta.update({"seed": s.get("seed"), "patients": s.get("patients"), "threads": s.get("workers"),
                 "chunk_size": s.get("chunk_size"), "seconds": dict(results.seconds),
                 "events": results.n_events})
    if metadata:
        meta.update(metadata)
    notes = tuple(results.failure_lines()) + tuple(f"{stage} skipped: {why}" for stage, why in results.skipped.items())
    return ReportInputs(scenario=results.scenario, outcomes=results.outcomes, increments=results.increments,
                        survival=results.survival, occupancy=results.occupancy,
                        exact_occupancy=results.exact_occupancy, grid=results.grid, exact_note=results.exact_note,
                        study=results.study, metadata=meta, source=source, notes=notes)


def inputs_from_study(scenario: Scenario, study: StudyResult, source: str = "a comparison (the error study)"
                      ) -> ReportInputs:
    """The report's inputs from the discretization-error study alone (``hazardtrace compare``): no
    simulated outcomes or curves beyond the cycle-based ones."""
    meta = _base_metadata(scenario)
    meta.update({"seed": scenario.run.seed, "cycle_lengths": list(scenario.run.cycle_lengths)})
    return ReportInputs(scenario=scenario, study=study, grid=time_grid(scenario), metadata=meta, source=source)
