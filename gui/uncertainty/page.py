"""The "Probabilistic analysis" page: run settings (draws, patients per draw, workers, the Dask
scheduler to run on (empty: this machine), the cycle-based approximations to compare), the
correlated groups of parameters (:mod:`gui.uncertainty.groups`, opened from here), Run and Cancel with progress and the estimated time left,
and the views of the finished analysis (:mod:`gui.uncertainty.views`). The analysis runs in a worker
thread (:class:`gui.uncertainty.worker.PsaJob`); the window never waits for it.
"""

from __future__ import annotations

import html
import os
from pathlib import Path

from PySide6.QtCore import QCoreApplication, Qt, Signal, Slot
from PySide6.QtWidgets import (QCheckBox, QComboBox, QFileDialog, QFormLayout, QGroupBox, QHBoxLayout, QLabel,
                               QLineEdit, QMessageBox, QPushButton, QSpinBox, QSplitter, QStackedWidget, QTabWidget,
                               QVBoxLayout, QWidget)

from gui.document import FieldError, ScenarioDocument
from gui.editors.fields import mark_invalid
from gui.job_controls import (ask_cancel, idle_bar, run_cancel_row, set_running, show_done, show_idle, start_job,
                              stop_job)
from gui.palette import OKABE_ITO
from gui.results.exports import Exporter
from gui.worker import FunctionWorker, Job
from sim.cli.psa import DEFAULT_DRAWS, DEFAULT_PATIENTS
from sim.io import Scenario
from sim.io.export import metadata_for
from sim.psa import CycleMethod, inputs_table, reference_method, write_psa
from sim.reference import Conversion, Correction
from sim.report import cycle_words, inputs_from_psa, write_report

from .group_list import GroupList
from .views import AcceptabilityView, CePlaneView, ConvergenceView, EvpiView, PsaTablesView
from .worker import PsaJob, PsaOutcome, PsaRequest, PsaWorker, eta_text

__all__ = ["PsaPage", "PsaRunControls", "CANCELLING_TEXT", "write_analysis_folder", "write_analysis_report",
           "analysis_metadata"]

CANCELLING_TEXT = "Cancelling… (after the block of draws running now)"
MAX_DRAWS = 1_000_000
MAX_PATIENTS = 100_000_000


def analysis_metadata(outcome: PsaOutcome) -> dict:
    """The analysis' provenance as ``hazardtrace psa`` records it in ``metadata.json``."""
    s, r = outcome.scenario, outcome.result
    return metadata_for(s.text, r.settings["seed"], outcome.request.patients, extra={
        "command": "psa", "scenario_file": str(s.path) if s.path else None,
        "draws": outcome.request.draws, "workers": outcome.request.workers, "scheduler": outcome.request.scheduler,
        "block_draws": r.settings["block_draws"], "cycle_methods": r.settings["cycle_methods"],
        "parameters": r.settings["parameters"], "notes": list(r.notes), "seconds": round(r.seconds, 3)})


def write_analysis_folder(outcome: PsaOutcome, folder: str) -> str:
    """The analysis as ``hazardtrace psa`` writes it (:func:`sim.psa.write_psa`: per-draw table and
    parameter draws as Parquet and CSV, the uncertain inputs and every summary table as CSV,
    ``metadata.json``), atomically,
    replacing ``folder`` (the window asked first); returns the folder."""
    r = outcome.result
    write_psa(folder, r.table, r.values, analysis_metadata(outcome), outcome.summaries, force=True,
              inputs=inputs_table(outcome.scenario))
    return str(folder)


def write_analysis_report(outcome: PsaOutcome, path: str, extra_tables: dict | None = None) -> str:
    """The report of the analysis on screen (:func:`sim.report.write_report`, HTML or PDF by the
    suffix), as ``hazardtrace report`` writes it for the analysis' folder
    (:func:`sim.report.inputs_from_psa`: the scenario with its uncertain inputs and the summary
    tables, with the analysis' metadata); ``extra_tables`` adds what the views show besides (the
    population EVPI)."""
    inputs, tables = inputs_from_psa(outcome.scenario, analysis_metadata(outcome),
                                     {**outcome.summaries, **(extra_tables or {})},
                                     "a probabilistic analysis in the window")
    return str(write_report(inputs, path, force=True, psa_tables=tables))


class PsaRunControls(QWidget):
    """Settings, Run/Cancel and progress of the analysis; emits ``finished(PsaOutcome)``."""

    finished = Signal(object)
    started = Signal()

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.scenario: Scenario | None = None
        self.job: PsaJob | None = None
        self.draws = QSpinBox()
        self.draws.setObjectName("psa_draws")
        self.draws.setRange(1, MAX_DRAWS)
        self.draws.setGroupSeparatorShown(True)
        self.draws.setValue(DEFAULT_DRAWS)
        self.draws.setToolTip("Parameter draws; draw i is the same whatever the number of draws or workers")
        self.patients = QSpinBox()
        self.patients.setObjectName("psa_patients")
        self.patients.setRange(0, MAX_PATIENTS)
        self.patients.setGroupSeparatorShown(True)
        self.patients.setValue(DEFAULT_PATIENTS)
        self.patients.setSpecialValueText("none (exact and cycle-based only)")
        self.patients.setToolTip("Simulated patients per draw and strategy (the same patients in every strategy)")
        self.workers = QSpinBox()
        self.workers.setObjectName("psa_workers")
        self.workers.setRange(1, max(64, os.cpu_count() or 1))
        self.workers.setToolTip("On this machine: 1 runs in this program; more start a local Dask cluster of "
                                "worker processes (a few seconds to start). With a scheduler: how many workers "
                                "to plan the blocks of draws for. The results do not depend on this number.")
        self.scheduler = QLineEdit()
        self.scheduler.setObjectName("psa_scheduler")
        self.scheduler.setPlaceholderText("empty: this machine")
        self.scheduler.setClearButtonEnabled(True)
        help_text = ("The address of a running Dask scheduler (tcp://host:8786) to run the analysis on its "
                     "workers; leave empty to run on this machine. The results are the same either way.")
        self.scheduler.setProperty("help", help_text)
        self.scheduler.setToolTip(help_text)
        self.scheduler.textEdited.connect(lambda _t: mark_invalid(self.scheduler, []))
        form = QFormLayout()
        form.addRow("Parameter draws", self.draws)
        form.addRow("Patients per draw", self.patients)
        form.addRow("Workers", self.workers)
        form.addRow("Dask scheduler", self.scheduler)

        self.approx = QGroupBox("Cycle-based approximations on the same draws")
        self.conversions: dict[str, QCheckBox] = {}
        box = QVBoxLayout(self.approx)
        for c in Conversion:
            cb = QCheckBox(c.value)
            cb.setObjectName(f"psa_conversion_{c.value}")
            cb.setChecked(True)
            self.conversions[c.value] = cb
            box.addWidget(cb)
        self.cycle_length = QComboBox()
        self.cycle_length.setObjectName("psa_cycle_length")
        self.correction = QComboBox()
        self.correction.setObjectName("psa_correction")
        for c in Correction:
            self.correction.addItem(c.value, c.value)
        self.correction.setCurrentIndex(self.correction.findData(Correction.HALF_CYCLE.value))
        sub = QFormLayout()
        sub.addRow("Cycle length", self.cycle_length)
        sub.addRow("Correction", self.correction)
        box.addLayout(sub)
        self.approx_note = QLabel()
        self.approx_note.setWordWrap(True)
        box.addWidget(self.approx_note)

        self.run_button, self.cancel_button, buttons = run_cancel_row("Run analysis")
        self.run_button.setObjectName("psa_run")
        self.cancel_button.setObjectName("psa_cancel")
        self.progress = idle_bar()
        self.status = QLabel("Idle")
        self.status.setObjectName("psa_status")
        self.status.setWordWrap(True)
        self.reason = QLabel()
        self.reason.setWordWrap(True)
        self.reason.setStyleSheet(f"color: {OKABE_ITO['vermillion']};")

        layout = QVBoxLayout(self)
        layout.addLayout(form)
        layout.addWidget(self.approx)
        layout.addLayout(buttons)
        layout.addWidget(self.progress)
        layout.addWidget(self.status)
        layout.addWidget(self.reason)
        layout.addStretch(1)
        self.run_button.clicked.connect(self.start)
        self.cancel_button.clicked.connect(self.cancel)
        app = QCoreApplication.instance()
        if app is not None:
            app.aboutToQuit.connect(self.shutdown)
        self.set_scenario(None, "Open a valid scenario to run its probabilistic analysis.")

    # ------------------------------------------------------------------ scenario
    def set_scenario(self, scenario: Scenario | None, reason: str = "") -> None:
        """The scenario the next analysis runs (None: Run is disabled and ``reason`` shown)."""
        first = self.scenario is None or scenario is None or scenario.run != self.scenario.run
        self.scenario = scenario
        if scenario is not None and not scenario.uncertainty and not reason:
            reason = ("This scenario has no [[uncertainty]] inputs: every draw is the point-value model. "
                      "Give parameters distributions with the ± button beside their fields.")
        self.reason.setText(reason)
        self.reason.setVisible(bool(reason))
        if scenario is not None and first:
            self.workers.setValue(min(int(scenario.run.workers), self.workers.maximum()))
            current = self.cycle_length.currentData()
            self.cycle_length.clear()
            for h in sorted(scenario.run.cycle_lengths):
                self.cycle_length.addItem(cycle_words(h), float(h))
            keep = self.cycle_length.findData(current)
            self.cycle_length.setCurrentIndex(keep if keep >= 0 else self.cycle_length.count() - 1)
        markov = scenario is not None and scenario.model.is_markov
        self.approx.setEnabled(markov and self.job is None)
        self.approx_note.setText("" if markov or scenario is None else
                                 "Only for Markov models (constant hazards or hazards on attained age): this model "
                                 "has no cycle-based or exact result per draw.")
        self.approx_note.setVisible(bool(self.approx_note.text()))
        self._update_enabled()

    def request(self) -> PsaRequest:
        """The analysis the fields ask for."""
        methods: tuple[CycleMethod, ...] = ()
        h = self.cycle_length.currentData()
        if self.scenario is not None and self.scenario.model.is_markov and h is not None:
            methods = tuple(CycleMethod(c, float(h), self.correction.currentData())
                            for c, cb in self.conversions.items() if cb.isChecked())
        return PsaRequest(self.draws.value(), self.patients.value(), self.workers.value(), methods,
                          self.scheduler.text().strip() or None)

    # ------------------------------------------------------------------ run
    def is_running(self) -> bool:
        return self.job is not None

    @Slot()
    def start(self) -> None:
        if self.job is not None or self.scenario is None:
            return
        request = self.request()
        mark_invalid(self.scheduler, [])
        job = PsaJob(PsaWorker(self.scenario, request))
        job.draws.connect(self._on_draws)
        start_job(job, self.progress, self.status, finished=self._on_finished, failed=self._on_failed,
                  cancelled=self._on_cancelled)
        if request.scheduler:
            self.status.setText(f"Connecting to the scheduler at {request.scheduler}…")
        self.job = job
        self._update_enabled()
        self.started.emit()
        job.start()

    @Slot()
    def cancel(self) -> None:
        ask_cancel(self.job, self.cancel_button, self.status, CANCELLING_TEXT)

    @Slot()
    def shutdown(self) -> None:
        """Cancel a running analysis and wait for its thread (before the window closes)."""
        if stop_job(self.job):
            self.job = None
            self._idle("Cancelled")

    def _update_enabled(self) -> None:
        running = self.job is not None
        set_running(running, self.scenario is not None, self.run_button, self.cancel_button,
                    (self.draws, self.patients, self.workers, self.scheduler))
        self.approx.setEnabled(not running and self.scenario is not None and self.scenario.model.is_markov)

    def _idle(self, text: str) -> None:
        show_idle(self.progress, self.status, text)
        self._update_enabled()

    @Slot(int, int, float)
    def _on_draws(self, done: int, total: int, left: float) -> None:
        if self.job is None or self.job.worker.cancel_requested:
            return
        self.progress.setRange(0, max(total, 1))
        self.progress.setValue(done)
        self.status.setText(eta_text(done, total, left))

    @Slot(object)
    def _on_finished(self, outcome: PsaOutcome) -> None:
        self.job = None
        show_done(self.progress)
        r = outcome.request
        self.status.setText(f"Done: {r.draws:,} draws × {r.patients:,} patients per draw in {outcome.seconds:.1f} s"
                            + "".join(f"\nNote: {n}" for n in outcome.result.notes))
        self._update_enabled()
        self.finished.emit(outcome)

    @Slot(str)
    def _on_failed(self, message: str) -> None:
        error = self.job.worker.error if self.job is not None else None
        self.job = None
        self._idle("Failed: " + message)
        problems = getattr(error, "problems", ())
        words = [FieldError.from_problem(p).text for p in problems if tuple(p.path[:1]) == ("scheduler",)]
        mark_invalid(self.scheduler, words)  # the address the analysis could not use, with sim's reason

    @Slot()
    def _on_cancelled(self) -> None:
        self.job = None
        self._idle("Cancelled; nothing was kept")


class PsaPage(QWidget):
    """The run controls beside the views; follows ``document`` (the scenario validated last).

    Signals: ``results_shown()`` once a finished analysis is drawn; ``written(path)`` after a report or
    folder was written."""

    results_shown = Signal()
    written = Signal(str)

    def __init__(self, document: ScenarioDocument, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.document = document
        self.outcome: PsaOutcome | None = None
        self.controls = PsaRunControls()
        self.groups = GroupList(document)
        self.exporter = Exporter(self)
        self.title = QLabel()
        self.title.setWordWrap(True)
        self.title.setTextFormat(Qt.TextFormat.RichText)
        self.save_folder = QPushButton("Save analysis folder…")
        self.save_folder.setObjectName("psa_save_folder")
        self.save_folder.setToolTip("Every table of the analysis and its metadata in one folder, as "
                                    "'hazardtrace psa' writes it")
        self.save_folder.setEnabled(False)
        self.save_folder.clicked.connect(self.ask_save_folder)
        self._jobs: list[Job] = []
        self.ce_plane = CePlaneView()
        self.acceptability = AcceptabilityView()
        self.evpi = EvpiView()
        self.convergence = ConvergenceView()
        self.tables = PsaTablesView()
        self.tabs = QTabWidget()
        self.tabs.addTab(self.ce_plane, "Cost-effectiveness plane")
        self.tabs.addTab(self.acceptability, "Acceptability")
        self.tabs.addTab(self.evpi, "EVPI")
        self.tabs.addTab(self.convergence, "Convergence")
        self.tabs.addTab(self.tables, "Tables")
        placeholder = QLabel("Run the probabilistic analysis to see the cost-effectiveness plane, the acceptability "
                             "curves, the EVPI and the convergence here.")
        placeholder.setWordWrap(True)
        placeholder.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.stack = QStackedWidget()
        self.stack.addWidget(placeholder)
        self.stack.addWidget(self.tabs)
        self.status = QLabel()
        self.status.setWordWrap(True)
        self.stale = QLabel()
        self.stale.setObjectName("psa_stale")
        self.stale.setWordWrap(True)
        self.stale.setStyleSheet(f"QLabel {{ border: 1px solid {OKABE_ITO['orange']}; padding: 4px; "
                                 f"background: #FFF4E0; }}")
        self.stale.hide()
        right = QWidget()
        rv = QVBoxLayout(right)
        rv.setContentsMargins(0, 0, 0, 0)
        rv.addWidget(self.stale)
        head = QHBoxLayout()
        head.addWidget(self.title, 1)
        head.addWidget(self.save_folder, 0, Qt.AlignmentFlag.AlignTop)
        rv.addLayout(head)
        rv.addWidget(self.stack, 1)
        rv.addWidget(self.status)
        left = QWidget()
        lv = QVBoxLayout(left)
        lv.addWidget(QLabel("<b>Probabilistic analysis</b>"))
        lv.addWidget(self.controls, 1)
        lv.addWidget(self.groups)
        left.setMinimumWidth(330)
        left.setMaximumWidth(420)
        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(left)
        split.addWidget(right)
        split.setStretchFactor(1, 1)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(split)

        self.controls.finished.connect(self.show_outcome)
        document.validated.connect(self._on_validated)
        self.tables.save_requested.connect(lambda frame, name: self.exporter.save_table(self, frame, name))
        for view in self.views():
            view.panel.save_bar.saved.connect(self._on_saved)
            view.panel.save_bar.failed.connect(self._on_failed)
        self.exporter.saved.connect(self._on_saved)
        self.exporter.failed.connect(self._on_failed)
        self._on_validated(document.scenario, document.errors)

    def views(self) -> list:
        return [self.ce_plane, self.acceptability, self.evpi, self.convergence]

    def _on_validated(self, scenario: object, errors: list) -> None:
        reason = "" if scenario is not None else (errors[0].text if errors else "The scenario cannot be read.")
        self.controls.set_scenario(scenario, reason)  # type: ignore[arg-type]
        self._update_stale()

    def _update_stale(self) -> None:
        """Say so when the scenario shown was edited after the analysis on screen."""
        changed = self.outcome is not None and self.document.text != self.outcome.scenario.text
        self.stale.setText("The scenario has changed since this analysis: the views show the analysis of the "
                           "earlier version. Run it again to update them." if changed else "")
        self.stale.setVisible(changed)

    @Slot(object)
    def show_outcome(self, outcome: PsaOutcome) -> None:
        """Show a finished analysis in every view."""
        self.outcome = outcome
        model, r = outcome.scenario.model, outcome.request
        self.title.setText(f"<b>{html.escape(model.name)}</b> — {r.draws:,} parameter draws of "
                           f"{len(outcome.result.settings.get('parameters', []))} uncertain parameters, "
                           f"{r.patients:,} patients per draw and strategy, seed {outcome.result.settings['seed']}")
        self.stack.setCurrentWidget(self.tabs)
        for view in self.views():
            view.show_outcome(outcome)
        self.tables.show_outcome(outcome)
        self.save_folder.setEnabled(True)
        self._update_stale()
        self.results_shown.emit()

    def write_report(self, path: str) -> bool:
        """Write the report of the analysis on screen (with the population EVPI when the EVPI view
        shows one) to ``path`` in a worker thread; ``report_written(path)`` follows."""
        if self.outcome is None:
            return False
        extra = {}
        if self.evpi.population.value() and self.evpi.frames:
            reference = reference_method(self.outcome.result.table)
            extra["population_evpi"] = self.evpi.frames.get(reference)
        self._start(write_analysis_report, self.outcome, str(path), {k: v for k, v in extra.items() if v is not None})
        self.status.setText(f"Writing the report to {path}…")
        return True

    def _start(self, fn, *args) -> None:
        job = Job(FunctionWorker(fn, *args))
        job.finished.connect(lambda written: (self._on_saved(str(written)), self.written.emit(str(written))))
        job.failed.connect(self._on_failed)
        job.done.connect(lambda: setattr(self, "_jobs", [j for j in self._jobs if j.is_running()]))
        self._jobs.append(job)
        job.start()

    def ask_save_folder(self) -> bool:
        """Ask for a folder name and write the analysis there (asks before replacing a folder)."""
        o = self.outcome
        if o is None:
            return False
        stem = o.scenario.path.stem if o.scenario.path else "scenario"
        start = str(Path(self.exporter.directory or self.document.dialog_folder()) / f"{stem}-psa")
        path, _ = QFileDialog.getSaveFileName(self, "Save the analysis as a folder", start, "Folder (*)",
                                              options=QFileDialog.Option.DontConfirmOverwrite)
        if not path:
            return False
        if Path(path).exists():
            answer = QMessageBox.question(self, "Replace folder", f"{path} exists. Replace it with this analysis?",
                                          QMessageBox.StandardButton.Yes | QMessageBox.StandardButton.No,
                                          QMessageBox.StandardButton.No)
            if answer != QMessageBox.StandardButton.Yes:
                return False
        return self.save_analysis_folder(path)

    def save_analysis_folder(self, path: str) -> bool:
        """Write the analysis on screen to the folder ``path`` in a worker thread."""
        if self.outcome is None:
            return False
        self.exporter.directory = str(Path(path).parent)
        self._start(write_analysis_folder, self.outcome, path)
        self.status.setText(f"Writing {path}…")
        return True

    def shutdown(self) -> None:
        self.controls.shutdown()
        self.exporter.shutdown()
        for job in list(self._jobs):
            job.stop()
        self._jobs.clear()

    @Slot(str)
    def _on_saved(self, path: str) -> None:
        self.status.setText(f"Saved {path}")

    @Slot(str)
    def _on_failed(self, message: str) -> None:
        self.status.setText(f"Not saved: {message}")
