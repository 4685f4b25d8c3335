"""Reproducing a run from its metadata: the recorded scenario copy, seed, sizes and chunking, run
again with this installation, and the event log's content hash compared with the recorded one.

Same scenario text, same input files (by SHA-256), same seed and sizes give the same event log bit
for bit (counter-based random numbers: the draws do not depend on chunking or threads). When the
hashes differ, :class:`RerunResult` names what changed: the program's version or its libraries', an
input file (a life table) whose SHA-256 differs or that is gone, the scenario copy itself.
"""

from __future__ import annotations

import platform
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from .. import __version__
from ..engine import STREAM_LAYOUT
from ..analysis import OutcomeAccumulator, patient_outcomes
from ..engine import SimulationResult
from ..io.export import TableHash, input_files
from ..pipeline import STAGES, ChunkSink, ChunkTables, RunPlan, RunState, executor_for, run_stages
from .run_folder import metadata_path, read_metadata, scenario_of

__all__ = ["RerunResult", "rerun"]


class _HashSink(ChunkSink):
    """Hashes the event log and the patient table chunk by chunk and accumulates the outcomes (so the
    rerun keeps nothing but moments in memory and writes nothing)."""

    def __init__(self) -> None:
        self.events, self.patients = TableHash(), TableHash()
        self._acc: OutcomeAccumulator | None = None
        self._plan: RunPlan | None = None

    def open(self, plan: RunPlan) -> None:
        self._plan = plan
        self.events, self.patients = TableHash(), TableHash()
        m = plan.model
        self._acc = OutcomeAccumulator(m.strategy_names[0], m.valuation.willingness_to_pay)

    def add(self, chunk: ChunkTables) -> None:
        assert self._plan is not None and self._acc is not None
        self.events.update(chunk.events)
        self.patients.update(chunk.patients)
        p = self._plan
        self._acc.add(patient_outcomes(SimulationResult(p.model, p.seed, chunk.n_patients, chunk.events,
                                                        chunk.patients, p.chunk_size, p.workers,
                                                        {"strategies": p.strategies})))

    def accumulator(self) -> OutcomeAccumulator | None:
        return self._acc


@dataclass(frozen=True)
class RerunResult:
    """What a rerun found.

    identical : the event log's content hash equals the recorded one.
    recorded_hash, new_hash : the two SHA-256 digests (``recorded_hash`` None when the folder has
        neither the hash nor an event log to hash).
    differences : what changed since the run, in words (empty when nothing did).
    patients, seed, threads, chunk_size : what was rerun.
    summary : the rerun's outcome table (strategy, outcome, mean, mcse, ...).
    """

    identical: bool
    recorded_hash: str | None
    new_hash: str
    differences: tuple[str, ...]
    patients: int
    seed: int
    threads: int
    chunk_size: int
    summary: pd.DataFrame = field(repr=False, default_factory=pd.DataFrame)


def _recorded_hash(meta: dict[str, Any], folder: Path) -> tuple[str | None, str]:
    """The recorded event-log hash, or the hash of the recorded event log file (runs written before
    the hash was recorded), and where it came from."""
    if meta.get("event_log_sha256"):
        return str(meta["event_log_sha256"]), "metadata"
    fmt = meta.get("format", "parquet")
    path = folder / f"events.{'parquet' if fmt == 'parquet' else 'csv'}"
    if fmt == "parquet" and path.exists():
        return TableHash.of([pd.read_parquet(path)]), "event log file"
    return None, "nothing"


def _differences(meta: dict[str, Any], scenario_text: str, base: Path) -> list[str]:
    out = []
    versions = {"tool_version": ("HazardTrace", __version__), "python": ("Python", platform.python_version()),
                "numpy": ("numpy", np.__version__), "pandas": ("pandas", pd.__version__),
                "pyarrow": ("pyarrow", pa.__version__)}
    for key, (name, now) in versions.items():
        if meta.get(key) is not None and str(meta[key]) != now:
            out.append(f"{name} version: recorded {meta[key]}, now {now}")
    layout = meta.get("stream_layout", 1)  # runs from before the layout was recorded used layout 1
    if layout != STREAM_LAYOUT:
        out.append(f"random-number stream layout: recorded {layout}, now {STREAM_LAYOUT} (the same seed "
                   f"gives other draws)")
    recorded = {f["key"]: f for f in meta.get("input_files") or []}
    for f in input_files(scenario_text, base):
        old = recorded.get(f["key"])
        if old is None:
            out.append(f"input file {f['path']} ({f['key']}): no hash was recorded")
        elif f["sha256"] is None:
            out.append(f"input file {f['resolved']} ({f['key']}): cannot be read now")
        elif old.get("sha256") != f["sha256"]:
            out.append(f"input file changed: {f['resolved']} ({f['key']}): SHA-256 recorded "
                       f"{str(old.get('sha256'))[:16]}…, now {f['sha256'][:16]}…")
    original = meta.get("scenario_file")
    if original and Path(original).is_file():
        try:
            if Path(original).read_text(encoding="utf-8") != scenario_text:
                out.append(f"note: the scenario file {original} has changed since the run (the rerun used the "
                           f"recorded copy)")
        except (OSError, UnicodeDecodeError):
            pass
    return out


def rerun(where: str | Path, workers: int | None = None) -> RerunResult:
    """Rerun the run recorded at ``where`` (a run folder or its ``metadata.json``) and compare.

    Parameters
    ----------
    workers : threads for the rerun (default: the recorded number; the event log does not depend
        on it).

    Raises
    ------
    sim.io.export.ExportError
        Not a run's metadata.
    sim.io.ScenarioError
        The recorded scenario no longer reads (e.g. its life table is gone).
    """
    meta = read_metadata(where)
    folder = metadata_path(where).parent
    scenario = scenario_of(meta, folder)
    original = meta.get("scenario_file")
    base = Path(original).resolve().parent if original and Path(original).resolve().parent.is_dir() else folder
    patients, seed = int(meta["patients"]), int(meta["seed"])
    threads = int(workers or meta.get("threads") or scenario.run.workers)
    chunk = int(meta.get("chunk_size") or RunPlan.from_scenario(scenario, patients=patients).chunk_size)
    base_plan = RunPlan.from_scenario(scenario, patients=patients, seed=seed, workers=threads)
    plan = RunPlan(model=base_plan.model, patients=patients, seed=seed, workers=threads, chunk_size=chunk,
                   cycle_lengths=base_plan.cycle_lengths, tolerance=base_plan.tolerance,
                   tunnel_entry=base_plan.tunnel_entry)
    sink = _HashSink()
    sink.open(plan)
    state = RunState(scenario=scenario, plan=plan, sinks=(sink,), executor=executor_for(threads), want_study=False)
    run_stages(state, tuple(s for s in STAGES if s.name in ("simulation", "outcomes")))  # no exact, curves, study
    new = sink.events.hexdigest()
    recorded, _ = _recorded_hash(meta, folder)
    diffs = _differences(meta, meta["scenario"], base)
    if recorded is None:
        diffs.insert(0, "the run folder records no event-log hash and holds no Parquet event log to hash")
    return RerunResult(identical=recorded == new, recorded_hash=recorded, new_hash=new, differences=tuple(diffs),
                       patients=patients, seed=seed, threads=threads, chunk_size=chunk, summary=state.outcomes)
