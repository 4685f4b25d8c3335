"""A plain run on Dask, written as partitioned Parquet (``hazardtrace run --workers N`` or
``--scheduler tcp://host:port``).

The run is cut into the same chunks as :mod:`sim.pipeline` (:func:`sim.pipeline.chunk_jobs` with the
plan's ``chunk_size``), each a task calling the pure :func:`sim.pipeline.simulate_chunk` on a worker,
which writes the chunk as ``events/part-NNNNN.parquet`` and ``patients/part-NNNNN.parquet`` (NNNNN
the chunk's number) and sends back only row counts and the chunk's :class:`sim.analysis.OutcomeAccumulator`
(exact sums, a few kilobytes), which the client merges in partition order. Memory on the client is
bounded whatever the number of patients. The sums being exact, the summary and increments are the
local run's bit for bit (streamed or in memory), for any number of workers and either scheduler. The event log is the local
run's, bit for bit, cut by chunk: partition k holds patients ``k * chunk_size ..`` of every strategy
(strategy, then patient); :func:`read_partitioned` joins them back in the local run's row order.

Everything goes into a hidden temporary sibling of the output folder (with a remote scheduler that
path must be on a file system the workers share), renamed into place once every partition, the
result tables (CSV, as :class:`sim.io.export.RunWriter` adds them) and ``metadata.json`` are
written; on an error, a cancel request or Ctrl-C the futures are cancelled and the temporary folder
is removed, leaving the output folder as it was. The stages after the simulation are the pipeline's
(:data:`sim.pipeline.STAGES`: outcomes from the merged sums, the exact solution, the error study;
the survival and occupancy estimates need the whole log and are skipped, as in a streamed run;
``hazardtrace report`` computes them on a grid from the partitions, :func:`sim.analysis.curve_counts`).
"""

from __future__ import annotations

import json
import os
import shutil
import time
import uuid
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Mapping

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from ..analysis import OutcomeAccumulator, patient_outcomes
from ..engine import CancelToken
from ..io import Scenario
from ..io.atomic import replace_folder
from ..io.export import ExportError, TableHash, write_tidy_csv
from ..io.export.leftovers import remove_leftovers, remove_owner, temporary_folder_for, write_owner
from ..io.export.metadata import metadata_for
from ..pipeline import STAGES, ChunkJob, RunPlan, RunResults, RunState, SerialExecutor, chunk_jobs, run_stages, simulate_chunk
from ..pipeline.sinks import chunk_result, result_tables
from .cluster import cancel_futures, completed, connect

__all__ = ["PartitionTask", "PartitionReport", "write_partition", "run_distributed", "read_partitioned",
           "partition_paths", "PARTITIONED_FORMAT"]

PARTITIONED_FORMAT = "parquet-partitioned"
Progress = Callable[[str, int, int], None]


@dataclass(frozen=True)
class PartitionTask:
    """One chunk to simulate and write into ``folder`` (an absolute path the worker can reach)."""

    job: ChunkJob
    index: int
    folder: str
    plan: RunPlan


@dataclass(frozen=True)
class PartitionReport:
    """What a worker sends back for one chunk: rows written, content hashes, the chunk's exact sums."""

    index: int
    patients: int
    events_rows: int
    patients_rows: int
    events_sha256: str
    patients_sha256: str
    sums: OutcomeAccumulator | None


def part_name(index: int) -> str:
    return f"part-{index:05d}.parquet"


def write_partition(task: PartitionTask) -> PartitionReport:
    """Simulate ``task.job`` and write its two partitions (runs on a worker; pure but for the files,
    which a retried task rewrites with the same bytes)."""
    chunk = simulate_chunk(task.job)
    for table, df in (("events", chunk.events), ("patients", chunk.patients)):
        pq.write_table(pa.Table.from_pandas(df, preserve_index=False),
                       os.path.join(task.folder, table, part_name(task.index)), row_group_size=max(len(df), 1))
    model = task.plan.model
    sums = OutcomeAccumulator(model.strategy_names[0], model.valuation.willingness_to_pay)
    sums.add(patient_outcomes(chunk_result(task.plan, chunk)))  # as StreamSink.add for the local run
    return PartitionReport(task.index, chunk.n_patients, len(chunk.events), len(chunk.patients),
                           TableHash.of([chunk.events]), TableHash.of([chunk.patients]), sums)


def _commit(tmp: Path, out: Path, force: bool) -> None:
    """Rename the finished temporary folder to ``out`` (replacing it with ``force``)."""
    if out.exists() or out.is_symlink():
        if not force:
            rule = "exists (created while the run was being written); pass --force to overwrite"
            raise ExportError(f"{out} {rule}", file=out, rule=rule)
    replace_folder(tmp, out)


def run_distributed(scenario: Scenario, plan: RunPlan, out_dir: str | os.PathLike[str], *,
                    scheduler: str | None = None, processes: bool = True, force: bool = False,
                    study: bool = True, metadata: Mapping[str, Any] | None = None,
                    progress: Progress | None = None,
                    cancel: CancelToken | Callable[[], bool] | None = None) -> RunResults:
    """Run ``plan`` on Dask and write ``out_dir`` as partitioned Parquet (see the module docstring).

    Parameters
    ----------
    plan : the resolved run settings; ``plan.workers`` workers of a loopback ``LocalCluster`` when
        ``scheduler`` is None, else the chunks go to the scheduler's workers.
    scheduler : ``tcp://host:port`` of a running Dask scheduler (its workers need HazardTrace and
        ``out_dir``'s parent on a shared file system).
    processes : worker processes (True) or threads of this process (False) for a local cluster.
    force : replace an existing ``out_dir`` once the new one is complete.
    study : run the discretization-error study.
    metadata : recorded in ``metadata.json`` (default :func:`sim.io.export.metadata_for` of the
        scenario); the run adds ``format``, ``chunks``, ``partitions`` and ``run_seconds``.
    progress : ``progress(stage, done, total)`` as :func:`sim.pipeline.run_plan`.
    cancel : an object with ``is_set()`` or a callable; raises :class:`sim.engine.SimulationCancelled`.

    Raises
    ------
    sim.distributed.SchedulerError : the scheduler address cannot be used.
    sim.io.export.ExportError : ``out_dir`` exists and ``force`` is not set.
    """
    out = Path(out_dir).absolute()
    if (out.exists() or out.is_symlink()) and not force:
        rule = "exists; pass --force to overwrite"
        raise ExportError(f"{out_dir} {rule}", file=out, rule=rule)
    report = progress or (lambda stage, done, total: None)
    model = plan.model
    jobs = chunk_jobs(model, plan.patients, plan.seed, plan.chunk_size, plan.strategies)
    t0 = time.perf_counter()
    made = [p for p in reversed(out.parents) if not p.exists()]  # removed again if the run fails
    out.parent.mkdir(parents=True, exist_ok=True)
    remove_leftovers(out)
    tmp = temporary_folder_for(out)
    tmp.mkdir()
    client = cluster = None
    futures: list = []
    try:
        write_owner(tmp)
        for table in ("events", "patients"):
            (tmp / table).mkdir()
        client, cluster = connect(scheduler, plan.workers, processes)
        token = uuid.uuid4().hex[:12]
        futures = [client.submit(write_partition, PartitionTask(job, i, str(tmp), plan),
                                 key=f"hazardtrace-run-{token}-{i}", pure=False) for i, job in enumerate(jobs)]
        sums = OutcomeAccumulator(model.strategy_names[0], model.valuation.willingness_to_pay)
        reports: dict[int, PartitionReport] = {}
        merged = done = 0
        report("simulating", 0, plan.patients)
        for i, part in completed(futures, cancel, "simulation"):
            reports[i] = part
            futures[i] = None  # the result is here; let the cluster forget it
            done += part.patients
            while merged in reports:  # merge in partition order (exact sums: any order gives the same bits)
                part_sums = reports[merged].sums
                assert part_sums is not None
                sums.merge(part_sums)
                reports[merged] = replace(reports[merged], sums=None)
                merged += 1
            report("simulating", done, plan.patients)
        futures = []
        seconds = time.perf_counter() - t0
        state = RunState(scenario=scenario, plan=plan, sinks=(), executor=SerialExecutor(), want_study=bool(study),
                         report=report, cancel=cancel, accumulator=sums,
                         n_events=sum(r.events_rows for r in reports.values()))
        run_stages(state, STAGES[1:])
        state.seconds["simulation"] = seconds
        results = _results(state)
        _write_results(tmp, results)
        meta = dict(metadata) if metadata is not None else metadata_for(scenario.text, plan.seed, plan.patients)
        ordered = [reports[i] for i in range(len(jobs))]
        meta.update({"format": PARTITIONED_FORMAT, "chunk_size": plan.chunk_size, "chunks": len(jobs),
                     "workers": plan.workers, "scheduler": scheduler, "run_seconds": round(time.perf_counter() - t0, 3),
                     "partitions": [{"name": part_name(r.index), "patients": r.patients, "events_rows": r.events_rows,
                                     "patients_rows": r.patients_rows, "events_sha256": r.events_sha256,
                                     "patients_sha256": r.patients_sha256} for r in ordered]})
        remove_owner(tmp)
        _write_metadata(tmp / "metadata.json", meta)
        client.close()
        if cluster is not None:
            cluster.close()
        client = cluster = None
        _commit(tmp, out, force)
    except BaseException:
        if client is not None:
            cancel_futures(client, [f for f in futures if f is not None])
        shutil.rmtree(tmp, ignore_errors=True)
        for folder in reversed(made):
            try:
                folder.rmdir()  # only if still empty
            except OSError:
                break
        raise
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()
    report("done", 1, 1)
    return results


def _results(state: RunState) -> RunResults:
    assert state.outcomes is not None and state.increments is not None and state.grid is not None
    return RunResults(scenario=state.scenario, simulation=None, per_patient=None, outcomes=state.outcomes,
                      increments=state.increments, survival=None, occupancy=None, grid=state.grid,
                      exact_occupancy=state.exact_occupancy, exact_note=state.exact_note, study=state.study,
                      settings=state.plan.settings(), seconds=dict(state.seconds), n_events=state.n_events,
                      skipped=dict(state.skipped), failed=dict(state.failed))


def _write_results(folder: Path, results: RunResults) -> None:
    """The result tables as CSV, as :class:`sim.io.export.RunWriter` adds them to a streamed run."""
    for name, table in result_tables(results):  # survival and occupancy are None here (not computed)
        write_tidy_csv(table, folder / f"{name}.csv")


def _write_metadata(path: Path, meta: Mapping[str, Any]) -> None:
    """``metadata.json`` (numpy numbers as plain numbers, paths as text; NaN refused)."""
    def plain(value: Any) -> Any:
        if isinstance(value, np.generic):
            return value.item()
        if isinstance(value, (os.PathLike, tuple, set, frozenset)):
            return os.fspath(value) if isinstance(value, os.PathLike) else list(value)
        raise TypeError(f"{type(value).__name__} is not JSON serialisable")

    path.write_text(json.dumps(meta, indent=2, ensure_ascii=False, allow_nan=False, default=plain) + "\n",
                    encoding="utf-8")


def partition_paths(folder: str | os.PathLike[str], table: str = "events") -> list[Path]:
    """The partition files of one table (``events`` or ``patients``) of a partitioned run folder, in
    partition order (partition k holds patients ``k * chunk_size ..`` of every strategy)."""
    return sorted((Path(folder) / table).glob("part-*.parquet"), key=lambda p: int(p.stem.split("-")[1]))


def read_partitioned(folder: str | os.PathLike[str], table: str = "events") -> pd.DataFrame:
    """One table of a partitioned run folder in the local run's row order (strategy, then patient):
    for runs that fit in memory. Larger ones: one partition at a time (:func:`partition_paths`) or
    ``pyarrow.dataset.dataset(folder / table)``."""
    frames = [pd.read_parquet(p) for p in partition_paths(folder, table)]
    df = pd.concat(frames, ignore_index=True)
    codes = df["strategy"].cat.codes if isinstance(df["strategy"].dtype, pd.CategoricalDtype) else None
    if codes is None:
        order = {s: k for k, s in enumerate(dict.fromkeys(df["strategy"]))}
        codes = df["strategy"].map(order)
    return df.iloc[codes.to_numpy().argsort(kind="stable")].reset_index(drop=True)
