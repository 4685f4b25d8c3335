"""The run controls: patients, seed, threads, Run and Cancel, and a progress bar with the stage.

The panel runs the scenario it was given with :meth:`RunPanel.set_scenario` through
:class:`gui.worker.RunWorker` in a worker thread, and emits ``results_ready(RunResults)`` or
``run_failed(message)``. Connect ``results_ready`` to ``ResultsPanel.show_results``. Call
:meth:`RunPanel.shutdown` before the window closes (it also runs on application quit).
"""

from __future__ import annotations

import os
import time

from PySide6.QtCore import QCoreApplication, QRegularExpression, Signal, Slot
from PySide6.QtGui import QCloseEvent, QRegularExpressionValidator
from PySide6.QtWidgets import QCheckBox, QFormLayout, QLabel, QLineEdit, QSpinBox, QVBoxLayout, QWidget

from sim.io.scenario import RunSettings, Scenario

from .job_controls import (ask_cancel, idle_bar, run_cancel_row, set_running, show_done, show_idle, start_job,
                           stop_job)
from .worker import Job, RunWorker

__all__ = ["RunPanel", "STAGE_TEXT", "settings_text", "timing_text", "CANCELLING_TEXT"]

#: What the user reads for each stage reported by ``sim.pipeline.run.run_scenario``.
STAGE_TEXT = {
    "simulating": "Simulating patient histories",
    "outcomes": "Computing outcomes",
    "exact solution": "Solving the model exactly",
    "estimates": "Estimating survival and state occupancy",
    "error study": "Running the cycle-length error study",
    "done": "Finishing",
}
MAX_PATIENTS = 2_000_000_000
#: Shown while a cancel request waits for the run's next check (short: the run panel is narrow).
CANCELLING_TEXT = "Cancelling… (at the next check)"


def settings_text(settings: dict, seconds: dict | None = None) -> str:
    """One line with a finished run's settings and seed, e.g. for the results header."""
    text = (f"{settings['patients']:,} patients per strategy · seed {settings['seed']} · "
            f"{settings['workers']} thread{'s' if settings['workers'] != 1 else ''}")
    if seconds:
        text += f" · {sum(seconds.values()):.1f} s"
    return text


def timing_text(wall: float, seconds: dict, shown: float | None = None) -> str:
    """What the user waited, then where the time went: ``wall`` seconds from Run to the run's end,
    ``shown`` from Run to the results on screen (curves drawn), and the pipeline's stages (``seconds``,
    as ``RunResults.seconds``); what the stages do not account for is the window's own work."""
    total = shown if shown is not None else wall
    head = f"{total:.1f} s from Run to results shown" if shown is not None else f"{wall:.1f} s from Run to the run's end"
    parts = [f"{name} {value:.1f} s" for name, value in seconds.items()]
    rest = total - sum(seconds.values())
    if rest >= 0.05:
        parts.append(f"window (start, tables and curves) {rest:.1f} s")
    return head + (" (" + ", ".join(parts) + ")" if parts else "")


class RunPanel(QWidget):
    """Run settings, Run/Cancel and progress; see the module docstring."""

    results_ready = Signal(object)
    run_failed = Signal(str)
    run_started = Signal()
    run_cancelled = Signal()

    def __init__(self, scenario: Scenario | None = None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._scenario: Scenario | None = None
        self._applied: RunSettings | None = None
        self._job: Job | None = None
        self._started = 0.0
        self._finished_after: float | None = None
        self._results_seconds: dict = {}
        self._last_settings = ""
        self._build()
        app = QCoreApplication.instance()
        if app is not None:
            app.aboutToQuit.connect(self.shutdown)
        self.set_scenario(scenario, "" if scenario is not None else "Open or create a scenario to run it.")

    # ------------------------------------------------------------------ layout
    def _build(self) -> None:
        self.patients = QSpinBox()
        self.patients.setRange(1, MAX_PATIENTS)
        self.patients.setGroupSeparatorShown(True)
        self.patients.setToolTip("Patients simulated under each strategy (the same patients in every strategy)")
        self.seed = QLineEdit()
        self.seed.setValidator(QRegularExpressionValidator(QRegularExpression(r"\d{1,19}")))
        self.seed.setToolTip("Random seed: the same seed and scenario give the same results, bit for bit")
        self.threads = QSpinBox()
        self.threads.setRange(1, max(64, os.cpu_count() or 1))
        self.threads.setToolTip("Worker threads; the results do not depend on this number")
        self.study = QCheckBox("Also run the cycle-length error study")
        self.study.setChecked(True)
        form = QFormLayout()
        form.addRow("Patients per strategy", self.patients)
        form.addRow("Seed", self.seed)
        form.addRow("Threads", self.threads)
        form.addRow("", self.study)

        self.run_button, self.cancel_button, buttons = run_cancel_row("Run")
        self.run_button.setDefault(True)

        self.progress = idle_bar()
        self.progress.setTextVisible(True)
        self.stage = QLabel("Idle")
        self.stage.setWordWrap(True)  # long stage texts wrap in the narrow panel instead of being cut
        self.reason = QLabel()
        self.reason.setWordWrap(True)
        self.reason.setStyleSheet("color: #D55E00;")  # Okabe-Ito vermillion
        self.last_run = QLabel()
        self.last_run.setWordWrap(True)

        layout = QVBoxLayout(self)
        layout.addLayout(form)
        layout.addLayout(buttons)
        layout.addWidget(self.progress)
        layout.addWidget(self.stage)
        layout.addWidget(self.reason)
        layout.addWidget(self.last_run)
        layout.addStretch(1)

        self.run_button.clicked.connect(self.start_run)
        self.cancel_button.clicked.connect(self.cancel_run)

    # ------------------------------------------------------------------ public API
    def set_scenario(self, scenario: Scenario | None, reason: str = "") -> None:
        """Use ``scenario`` for the next run; ``None`` disables Run and shows ``reason``. The fields
        take the scenario's run settings when these change, so the user's edits survive model edits."""
        self._scenario = scenario
        if scenario is None:
            self.reason.setText(reason or "The scenario cannot be run.")
        else:
            self.reason.setText(reason)
            if scenario.run != self._applied:
                self._apply_settings(scenario.run)
        self.reason.setVisible(bool(self.reason.text()))
        self._update_enabled()

    def is_running(self) -> bool:
        return self._job is not None

    @Slot()
    def start_run(self) -> None:
        """Start a run with the fields' values (no-op while running or without a scenario)."""
        if self._job is not None or self._scenario is None:
            return
        seed_text = self.seed.text().strip()
        seed = int(seed_text) if seed_text else self._scenario.run.seed
        worker = RunWorker(self._scenario, patients=self.patients.value(), seed=seed, workers=self.threads.value(),
                           study=self.study.isChecked())
        job = Job(worker)
        job.progress.connect(self._on_progress)
        start_job(job, self.progress, self.stage, finished=self._on_finished, failed=self._on_failed,
                  cancelled=self._on_cancelled)
        self._job = job
        self._started = time.monotonic()
        self._finished_after: float | None = None
        self._results_seconds: dict = {}
        self._update_enabled()
        self.run_started.emit()
        job.start()

    @Slot()
    def cancel_run(self) -> None:
        if self._job is not None:
            ask_cancel(self._job, self.cancel_button, self.stage, CANCELLING_TEXT)
            self.stage.setToolTip("The run stops at its next check, between chunks of patients or stages")

    @Slot()
    def shutdown(self) -> None:
        """Cancel a running run and wait for its thread (call before the window closes)."""
        if stop_job(self._job):
            self._job = None
            self._to_idle("Cancelled")

    def closeEvent(self, event: QCloseEvent) -> None:  # noqa: N802 (Qt name)
        self.shutdown()
        super().closeEvent(event)

    # ------------------------------------------------------------------ slots
    def _apply_settings(self, run: RunSettings) -> None:
        self.patients.setValue(min(int(run.patients), MAX_PATIENTS))
        self.seed.setText(str(run.seed))
        self.threads.setValue(min(int(run.workers), self.threads.maximum()))
        self._applied = run

    def _update_enabled(self) -> None:
        set_running(self._job is not None, self._scenario is not None, self.run_button, self.cancel_button,
                    (self.patients, self.seed, self.threads, self.study))

    def _to_idle(self, text: str) -> None:
        show_idle(self.progress, self.stage, text)
        self._update_enabled()

    @Slot(str, int, int)
    def _on_progress(self, stage: str, done: int, total: int) -> None:
        label = STAGE_TEXT.get(stage, stage)
        if stage == "simulating" and total > 0:
            self.progress.setRange(0, total)
            self.progress.setValue(done)
            self.stage.setText(f"{label}: {done:,} of {total:,} patients")
        elif stage == "error study" and total > 1:
            self.progress.setRange(0, total)
            self.progress.setValue(done)
            self.stage.setText(f"{label}: {done} of {total} cohort traces")
        else:
            self.progress.setRange(0, 0)  # busy: this stage reports no fraction
            self.stage.setText(f"{label}…")

    @Slot(object)
    def _on_finished(self, results: object) -> None:
        self._job = None
        show_done(self.progress)
        # a later stage that failed is reported; the simulation's results are shown all the same
        self.stage.setText("; ".join(["Done", *results.failure_lines()]))
        self._update_enabled()
        self._finished_after = time.monotonic() - self._started
        self._results_seconds = dict(results.seconds)
        self._last_settings = settings_text(results.settings)
        self.last_run.setText(f"Last run: {self._last_settings} · "
                              f"{timing_text(self._finished_after, self._results_seconds)}")
        self.results_ready.emit(results)

    @Slot()
    def mark_shown(self) -> None:
        """The results are on screen (connect ``ResultsPanel.results_shown``): report the time from
        Run to now, which is what the user waited."""
        if self._finished_after is None:
            return
        shown = time.monotonic() - self._started
        self.last_run.setText(f"Last run: {self._last_settings} · "
                              f"{timing_text(self._finished_after, self._results_seconds, shown)}")
        self._finished_after = None

    @Slot(str)
    def _on_failed(self, message: str) -> None:
        self._job = None
        self._to_idle("Failed: " + message)
        self.run_failed.emit(message)

    @Slot()
    def _on_cancelled(self) -> None:
        self._job = None
        self._to_idle("Cancelled")
        self.run_cancelled.emit()
