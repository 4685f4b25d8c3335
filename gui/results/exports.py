"""Saving result data: the event log, patient table and multi-state long format as Parquet or CSV,
and any shown table as CSV, through ``sim.io.export`` (atomic writes), in a worker thread.

The file dialog confirms overwriting, so the writes pass ``force=True``.
"""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
from PySide6.QtCore import QObject, Signal, Slot
from PySide6.QtWidgets import QWidget

from sim.io.export import long_format, write_table, write_tidy_csv
from sim.pipeline.run import RunResults

from ..export_plot import ask_save_path
from ..worker import FunctionWorker, Job

__all__ = ["DATA_KINDS", "data_table", "write_data", "Exporter"]

DATA_KINDS = {"events": "event log", "patients": "patient table", "long": "long format"}
TABLE_FILTERS = {"parquet": "Parquet table (*.parquet)", "csv": "CSV table (*.csv)"}
CSV_FILTER = {"csv": "CSV table (*.csv)"}


def data_table(results: RunResults, kind: str) -> pd.DataFrame:
    """The run's ``events``, ``patients`` or multi-state ``long`` format table (all strategies)."""
    sim = results.simulation
    if kind == "events":
        return sim.events
    if kind == "patients":
        return sim.patients
    if kind == "long":
        return long_format(sim.events, sim.patients, results.scenario.model)
    raise ValueError(f"kind must be one of {sorted(DATA_KINDS)}, got {kind!r}")


def write_data(results: RunResults, kind: str, path: str | os.PathLike[str], fmt: str | None = None,
               force: bool = False) -> Path:
    """Write :func:`data_table` as Parquet or CSV (``fmt`` or the suffix decides)."""
    return write_table(data_table(results, kind), path, fmt=fmt, force=force)


class Exporter(QObject):
    """Asks for a file name and writes in a worker thread; reports ``saved(path)`` or
    ``failed(message)``. Keeps the last folder used."""

    saved = Signal(str)
    failed = Signal(str)

    def __init__(self, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.directory = ""
        self.stem = "hazardtrace"
        self._jobs: list[Job] = []

    def _suggest(self, name: str, suffix: str) -> str:
        return str(Path(self.directory or os.getcwd()) / f"{self.stem}_{name}.{suffix}")

    def save_data(self, parent: QWidget | None, results: RunResults, kind: str) -> bool:
        """Ask for a Parquet/CSV file and write the ``kind`` table; False if the user cancelled."""
        answer = ask_save_path(parent, f"Save the {DATA_KINDS[kind]}", self._suggest(kind, "parquet"), TABLE_FILTERS)
        if answer is None:
            return False
        path, fmt = answer
        self._start(path, write_data, results, kind, path, fmt, True)
        return True

    def save_table(self, parent: QWidget | None, frame: pd.DataFrame, name: str) -> bool:
        """Ask for a CSV file and write ``frame`` (a shown table); False if the user cancelled."""
        answer = ask_save_path(parent, "Save table as CSV", self._suggest(name, "csv"), CSV_FILTER)
        if answer is None:
            return False
        path, _ = answer
        self._start(path, write_tidy_csv, frame, path, True)
        return True

    def is_busy(self) -> bool:
        return bool(self._jobs)

    def shutdown(self) -> None:
        for job in list(self._jobs):
            job.stop()
        self._jobs.clear()

    def _start(self, path: Path, fn, *args) -> None:
        self.directory = str(path.parent)
        job = Job(FunctionWorker(fn, *args))
        job.finished.connect(self._on_saved)
        job.failed.connect(self._on_failed)
        job.done.connect(self._on_done)
        self._jobs.append(job)
        job.start()

    @Slot(object)
    def _on_saved(self, path: object) -> None:
        self.saved.emit(str(path))

    @Slot(str)
    def _on_failed(self, message: str) -> None:
        self.failed.emit(message)

    @Slot()
    def _on_done(self) -> None:
        self._jobs = [j for j in self._jobs if j.is_running()]
