"""The results side of the window: a header with the run's settings and seed, and four views in
tabs (curves, error study, outcomes, event log), plus saving data, tables and plots."""

from __future__ import annotations

import html
import re

import pandas as pd
from PySide6.QtCore import QCoreApplication, Qt, Signal, Slot
from PySide6.QtGui import QCloseEvent
from PySide6.QtWidgets import QHBoxLayout, QLabel, QMenu, QStackedWidget, QTabWidget, QToolButton, QVBoxLayout, QWidget

from sim.pipeline.run import RunResults
from sim.report import inputs_from_results, write_report

from ..worker import FunctionWorker, Job

from ..run_panel import settings_text
from .curves import CurvesView
from .error_study import ErrorStudyView
from .event_log import EventLogView
from .exports import Exporter
from .outcomes import OutcomesView, increments_frame, outcomes_frame
from .plot_panel import PlotPanel
from .table_view import TableView

__all__ = ["ResultsPanel", "write_run_report"]


def write_run_report(results: RunResults, path: str, psa_tables: dict | None = None) -> str:
    """The HTML or PDF report (by the suffix) of a run held in memory, with the summary tables of a
    probabilistic analysis of the same scenario (:func:`sim.report.write_report`); the written path."""
    return str(write_report(inputs_from_results(results), path, force=True, psa_tables=psa_tables))


def _stem(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_-]+", "_", text).strip("_").lower() or "hazardtrace"


class ResultsPanel(QWidget):
    """Shows a :class:`sim.pipeline.run.RunResults`; ``results_shown`` is emitted (from the GUI thread)
    once every view has drawn it."""

    results_shown = Signal()
    report_written = Signal(str)

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.results: RunResults | None = None
        self._report_jobs: list[Job] = []
        self._waiting_for_curves = False
        self.exporter = Exporter(self)

        self.title = QLabel()
        self.title.setTextFormat(Qt.TextFormat.RichText)
        self.title.setWordWrap(True)
        self.status = QLabel()
        self.status.setWordWrap(True)
        self.save_menu = QMenu(self)
        self.save_button = QToolButton()
        self.save_button.setText("Save data")
        self.save_button.setPopupMode(QToolButton.ToolButtonPopupMode.InstantPopup)
        self.save_button.setMenu(self.save_menu)
        self._fill_save_menu()
        header = QHBoxLayout()
        header.addWidget(self.title, 1)
        header.addWidget(self.save_button, 0, Qt.AlignmentFlag.AlignTop)

        self.curves = CurvesView()
        self.study = ErrorStudyView()
        self.outcomes = OutcomesView()
        self.event_log = EventLogView()
        self.tabs = QTabWidget()
        self.tabs.addTab(self.curves, "Curves")
        self.tabs.addTab(self.study, "Error study")
        self.tabs.addTab(self.outcomes, "Outcomes")
        self.tabs.addTab(self.event_log, "Event log")

        placeholder = QLabel("Run the scenario to see its results here.")
        placeholder.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self._stack = QStackedWidget()
        self._stack.addWidget(placeholder)
        self._stack.addWidget(self.tabs)
        self.save_button.setEnabled(False)

        layout = QVBoxLayout(self)
        layout.addLayout(header)
        layout.addWidget(self._stack, 1)
        layout.addWidget(self.status)

        self.curves.drawn.connect(self._on_curves_drawn)
        self.event_log.export_requested.connect(self._save_data)
        self.exporter.saved.connect(self._on_saved)
        self.exporter.failed.connect(self._on_save_failed)
        for table in self.tables():
            table.save_requested.connect(self._save_table)
        for plot in self.plots():
            plot.save_bar.saved.connect(self._on_saved)
            plot.save_bar.failed.connect(self._on_save_failed)
        app = QCoreApplication.instance()
        if app is not None:
            app.aboutToQuit.connect(self.shutdown)

    # ------------------------------------------------------------------ public API
    def show_results(self, results: RunResults) -> None:
        """Show a finished run in every view; ``results_shown`` follows when all have drawn it."""
        self.results = results
        model = results.scenario.model
        source = results.scenario.path.name if results.scenario.path else "unsaved scenario"
        self.exporter.stem = _stem(results.scenario.path.stem if results.scenario.path else model.name)
        reference = "exact solution available" if results.exact_occupancy is not None else "no exact solution"
        self.title.setText(f"<b>{html.escape(model.name)}</b> ({html.escape(source)}) — "
                           f"{settings_text(results.settings)} — {reference}")  # times: the run panel
        self.status.setText("")
        self._stack.setCurrentWidget(self.tabs)
        self.save_button.setEnabled(True)
        self.study.show_results(results)
        self.outcomes.show_results(results)
        self.event_log.show_results(results)
        self._waiting_for_curves = True
        self.curves.show_results(results)  # emits drawn (now or from its worker thread's result)

    def tables(self) -> list[TableView]:
        return [self.study.safe_table, self.study.errors, self.study.decisions, self.outcomes.outcomes,
                self.outcomes.increments, self.event_log.table]

    def plots(self) -> list[PlotPanel]:
        return [self.curves.survival_panel, self.curves.occupancy_panel, self.study.panel]

    @Slot()
    def shutdown(self) -> None:
        """Wait for background work (curve computation, exports); call before the window closes."""
        self.curves.shutdown()
        self.exporter.shutdown()
        for job in list(self._report_jobs):
            job.stop()
        self._report_jobs.clear()

    def write_report(self, path: str, psa_tables: dict | None = None) -> bool:
        """Write the report of the run on screen to ``path`` (.html or .pdf) in a worker thread;
        ``report_written(path)`` or a "Not saved" status follows. False without results."""
        if self.results is None:
            return False
        job = Job(FunctionWorker(write_run_report, self.results, str(path), psa_tables))
        job.finished.connect(lambda written: (self._on_saved(str(written)), self.report_written.emit(str(written))))
        job.failed.connect(self._on_save_failed)
        job.done.connect(lambda: setattr(self, "_report_jobs", [j for j in self._report_jobs if j.is_running()]))
        self._report_jobs.append(job)
        self.status.setText(f"Writing the report to {path}…")
        job.start()
        return True

    def closeEvent(self, event: QCloseEvent) -> None:  # noqa: N802 (Qt name)
        self.shutdown()
        super().closeEvent(event)

    # ------------------------------------------------------------------ slots
    @Slot()
    def _on_curves_drawn(self) -> None:
        if self._waiting_for_curves:
            self._waiting_for_curves = False
            self.results_shown.emit()

    def _fill_save_menu(self) -> None:
        m = self.save_menu
        m.addAction("Event log (Parquet or CSV)…", lambda: self._save_data("events"))
        m.addAction("Patient table (Parquet or CSV)…", lambda: self._save_data("patients"))
        m.addAction("Long format: one row per patient, sojourn and exit (Parquet or CSV)…",
                    lambda: self._save_data("long"))
        m.addSeparator()
        m.addAction("Outcomes table (CSV)…", lambda: self._save_result_table("outcomes"))
        m.addAction("Increments table (CSV)…", lambda: self._save_result_table("increments"))
        m.addAction("Survival curves, Kaplan–Meier (CSV)…", lambda: self._save_result_table("survival"))
        m.addAction("State occupancy curves, Aalen–Johansen (CSV)…", lambda: self._save_result_table("occupancy"))
        m.addAction("Exact occupancy curves (CSV)…", lambda: self._save_result_table("exact_occupancy"))
        m.addAction("Error study table (CSV)…", lambda: self._save_result_table("study"))
        m.addAction("Largest safe cycle lengths at the current tolerance (CSV)…",
                    lambda: self._save_result_table("largest_cycle"))
        m.addAction("Decision comparison of the error study (CSV)…", lambda: self._save_result_table("decisions"))

    def result_table(self, name: str) -> pd.DataFrame | None:
        """A whole result table by name (None if the run has none)."""
        r = self.results
        if r is None:
            return None
        tables = {"outcomes": lambda: outcomes_frame(r), "increments": lambda: increments_frame(r),
                  "survival": lambda: r.survival, "occupancy": lambda: r.occupancy,
                  "exact_occupancy": lambda: r.exact_occupancy,
                  "study": lambda: r.study.table if r.study else None,
                  "largest_cycle": lambda: self.study.largest,
                  "decisions": lambda: r.study.decisions if r.study else None}
        return tables[name]()

    @Slot(str)
    def _save_data(self, kind: str) -> None:
        if self.results is not None:
            self.exporter.save_data(self, self.results, kind)

    def _save_result_table(self, name: str) -> None:
        frame = self.result_table(name)
        if frame is None:
            self.status.setText(f"This run has no {name.replace('_', ' ')} table.")
            return
        self.exporter.save_table(self, frame, name)

    @Slot(object, str)
    def _save_table(self, frame: object, name: str) -> None:
        self.exporter.save_table(self, frame, name)

    @Slot(str)
    def _on_saved(self, path: str) -> None:
        self.status.setText(f"Saved {path}")

    @Slot(str)
    def _on_save_failed(self, message: str) -> None:
        self.status.setText(f"Not saved: {message}")
