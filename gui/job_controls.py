"""What a panel with Run, Cancel, a progress bar and a status line does around a background job
(:class:`gui.worker.Job`), written once for the run panel and the probabilistic analysis page.

The panels keep their own texts and signals; these functions only set the widgets' states:

- :func:`start_job` connects the job's outcome to the panel's slots and shows a busy bar (the panel
  then records the job, emits its own "started" signal and calls ``job.start()``);
- :func:`ask_cancel` requests cancellation and says so (the Cancel button greys out until the
  job answers);
- :func:`stop_job` cancels and waits for the thread (before the window closes);
- :func:`show_idle`, :func:`show_done` and :func:`set_running` set the bar, the status and which
  controls are enabled;
- :func:`run_cancel_row` and :func:`idle_bar` build the buttons and the bar.
"""

from __future__ import annotations

from typing import Callable, Iterable

from PySide6.QtWidgets import QAbstractButton, QHBoxLayout, QLabel, QProgressBar, QPushButton, QWidget

from .worker import Job

__all__ = ["start_job", "ask_cancel", "stop_job", "show_idle", "show_done", "set_running", "run_cancel_row",
           "idle_bar"]


def start_job(job: Job, progress: QProgressBar, status: QLabel, *, finished: Callable, failed: Callable,
              cancelled: Callable) -> None:
    """Connect ``job``'s outcome to the slots and show a busy bar and "Starting…". The caller
    records the job, updates its controls and then calls ``job.start()``."""
    job.finished.connect(finished)
    job.failed.connect(failed)
    job.cancelled.connect(cancelled)
    progress.setRange(0, 0)
    status.setText("Starting…")


def ask_cancel(job: Job | None, cancel_button: QAbstractButton, status: QLabel, text: str) -> None:
    """Ask ``job`` (if any) to stop at its next check; grey out Cancel and show ``text``."""
    if job is not None:
        job.cancel()
        cancel_button.setEnabled(False)
        status.setText(text)


def stop_job(job: Job | None) -> bool:
    """Cancel ``job`` (if any) and wait for its thread; True if there was one."""
    if job is None:
        return False
    job.stop()
    return True


def show_idle(progress: QProgressBar, status: QLabel, text: str) -> None:
    """An empty bar and ``text`` (after a failure or a cancel)."""
    progress.setRange(0, 1)
    progress.setValue(0)
    status.setText(text)


def show_done(progress: QProgressBar) -> None:
    """A full bar (the caller writes what was done)."""
    progress.setRange(0, 1)
    progress.setValue(1)


def set_running(running: bool, can_run: bool, run_button: QAbstractButton, cancel_button: QAbstractButton,
                fields: Iterable[QWidget]) -> None:
    """Run only when idle and ``can_run``; Cancel only while running; ``fields`` only when idle."""
    run_button.setEnabled(not running and can_run)
    cancel_button.setEnabled(running)
    for w in fields:
        w.setEnabled(not running)


def run_cancel_row(run_text: str) -> tuple[QPushButton, QPushButton, QHBoxLayout]:
    """A Run button labelled ``run_text`` and a disabled Cancel button, left-aligned in a row."""
    run_button = QPushButton(run_text)
    cancel_button = QPushButton("Cancel")
    cancel_button.setEnabled(False)
    row = QHBoxLayout()
    row.addWidget(run_button)
    row.addWidget(cancel_button)
    row.addStretch(1)
    return run_button, cancel_button, row


def idle_bar() -> QProgressBar:
    """An empty progress bar (range 0-1), as before the first run."""
    bar = QProgressBar()
    bar.setRange(0, 1)
    bar.setValue(0)
    return bar
