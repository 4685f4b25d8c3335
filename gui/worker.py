"""Long work off the GUI thread: worker objects run in a ``QThread`` and report through signals.

- :class:`RunWorker` runs :func:`sim.pipeline.run_scenario` (the run pipeline the command line uses
  too) with the event log kept in memory (:class:`sim.pipeline.MemorySink`, for the curves and the
  event log view) and a ``threading.Event`` as its cancel flag; it emits ``progress(stage, done,
  total)`` (throttled), ``finished(results)``, ``failed(message)`` or ``cancelled()``.
- :class:`FunctionWorker` runs any callable (cohort traces, exports) and emits ``finished(value)``
  or ``failed(message)``.
- :class:`Job` owns one worker and its thread from the GUI thread. It relays the worker's signals
  from the GUI thread *after* the thread has stopped, so receivers never race the thread's shutdown.

Never call ``processEvents()``: the GUI thread keeps its own event loop while the worker runs.

Running jobs are kept in :attr:`Job.running` until their thread has stopped (as napari keeps its
workers), so a job outlives a panel that is deleted while it works, and a ``QThread`` is never
destroyed while running; at interpreter exit :meth:`Job.stop_all` cancels and waits for them.

While any job runs, Python's automatic cyclic garbage collection is paused, and it is resumed (with
one collection) from the GUI thread when the last job ends: a collection triggered by allocations in
a worker thread could otherwise be the one that destroys Qt objects (widgets closed earlier),
outside their thread.
"""

from __future__ import annotations

import atexit
import gc
import logging
import threading
import time
from typing import Any, Callable, ClassVar

from PySide6.QtCore import QCoreApplication, QObject, QThread, QTimer, Signal, Slot

from sim.engine import SimulationCancelled
from sim.io import Scenario
from sim.pipeline import MemorySink, run_scenario

__all__ = ["RunWorker", "FunctionWorker", "Job", "error_message"]

log = logging.getLogger(__name__)


def error_message(err: BaseException) -> str:
    """The message shown to the user: the error's own text (sim errors name field, value and rule),
    or its type when it has none."""
    text = str(err).strip()
    if isinstance(err, MemoryError):
        return "out of memory: try fewer patients" + (f" ({text})" if text else "")
    return text or type(err).__name__


def _return_to_main_thread(worker: QObject) -> None:
    """Hand a worker whose work is over back to the GUI thread (called from its own thread), so that
    it is later destroyed in the thread it belongs to."""
    app = QCoreApplication.instance()
    if app is not None:
        worker.moveToThread(app.thread())


class RunWorker(QObject):
    """Runs one scenario; lives in a worker thread (see :class:`Job`).

    Parameters
    ----------
    scenario : the validated scenario.
    patients, seed, workers : override the scenario's run settings.
    study : also run the cycle-length error study.
    min_interval : seconds between two progress signals of the same stage (a stage change or the
        last step of a stage is always reported).
    """

    progress = Signal(str, int, int)
    finished = Signal(object)
    failed = Signal(str)
    cancelled = Signal()

    def __init__(self, scenario: Scenario, *, patients: int, seed: int, workers: int, study: bool = True,
                 min_interval: float = 0.05) -> None:
        super().__init__()
        self._scenario = scenario
        self._args = {"patients": int(patients), "seed": int(seed), "workers": int(workers), "study": bool(study)}
        self._cancel = threading.Event()
        self._min_interval = float(min_interval)
        self._last_stage = ""
        self._last_time = 0.0

    def cancel(self) -> None:
        """Ask the run to stop at its next check (between simulation chunks and stages). Thread-safe:
        call it directly from the GUI thread (the worker thread is busy and handles no events)."""
        self._cancel.set()

    @property
    def cancel_requested(self) -> bool:
        return self._cancel.is_set()

    def _report(self, stage: str, done: int, total: int) -> None:
        now = time.monotonic()
        if stage == self._last_stage and done < total and now - self._last_time < self._min_interval:
            return
        self._last_stage, self._last_time = stage, now
        self.progress.emit(stage, int(done), int(total))

    @Slot()
    def run(self) -> None:
        try:
            results = run_scenario(self._scenario, progress=self._report, cancel=self._cancel, sinks=(MemorySink(),),
                                   **self._args)
        except SimulationCancelled:
            self.cancelled.emit()
        except Exception as err:  # every failure reaches the user as a message, never a dead thread
            log.exception("run failed")
            self.failed.emit(error_message(err))
        else:
            self.finished.emit(results)
        _return_to_main_thread(self)


class FunctionWorker(QObject):
    """Runs ``fn(*args, **kwargs)`` in a worker thread; emits its return value or the error message."""

    finished = Signal(object)
    failed = Signal(str)

    def __init__(self, fn: Callable[..., Any], *args: Any, **kwargs: Any) -> None:
        super().__init__()
        self._call = (fn, args, kwargs)

    @Slot()
    def run(self) -> None:
        fn, args, kwargs = self._call
        try:
            value = fn(*args, **kwargs)
        except Exception as err:
            log.exception("background task failed")
            self.failed.emit(error_message(err))
        else:
            self.finished.emit(value)
        _return_to_main_thread(self)


class Job(QObject):
    """One worker in its own ``QThread``, owned by the GUI thread.

    The worker's ``progress`` is relayed as it comes; its outcome (``finished``, ``failed`` or
    ``cancelled``) is relayed once the thread has stopped, followed by ``done``; nothing is relayed
    after :meth:`stop`. The job keeps itself alive while it runs (:attr:`running`) and lets go one
    event-loop turn after it ended, never inside its own slot.
    """

    progress = Signal(str, int, int)
    finished = Signal(object)
    failed = Signal(str)
    cancelled = Signal()
    done = Signal()

    #: jobs whose thread has started and not yet stopped (keeps them alive; see the module docstring)
    running: ClassVar[set["Job"]] = set()
    _gc_was_enabled: ClassVar[bool] = False

    def __init__(self, worker: RunWorker | FunctionWorker) -> None:
        super().__init__()
        self.worker = worker
        self._thread = QThread()
        self._thread.setObjectName(f"hazardtrace-{type(worker).__name__}")
        worker.moveToThread(self._thread)
        self._thread.started.connect(worker.run)
        worker.finished.connect(self._on_finished)
        worker.failed.connect(self._on_failed)
        if isinstance(worker, RunWorker):
            worker.progress.connect(self._on_progress)
            worker.cancelled.connect(self._on_cancelled)
        self._over = False
        self._stopped = False

    def start(self) -> None:
        if not Job.running:
            Job._gc_was_enabled = gc.isenabled()
            gc.disable()
        Job.running.add(self)
        self._thread.start()

    @staticmethod
    def _forget(job: "Job") -> None:
        """Drop ``job`` from :attr:`running` (GUI thread); the last one resumes garbage collection."""
        if job in Job.running:
            Job.running.discard(job)
            if not Job.running and Job._gc_was_enabled:
                gc.enable()
                gc.collect()

    @classmethod
    def stop_all(cls, timeout_ms: int = 60_000) -> None:
        """Cancel what can be cancelled and wait for every running job's thread."""
        for job in list(cls.running):
            job.stop(timeout_ms)

    def is_running(self) -> bool:
        return not self._over

    def cancel(self) -> None:
        """Request cancellation (run workers only; other tasks run to their end)."""
        if isinstance(self.worker, RunWorker):
            self.worker.cancel()

    def stop(self, timeout_ms: int = 60_000) -> bool:
        """Cancel if possible and wait for the thread (when the window closes). True if it stopped."""
        self._stopped = True
        self.cancel()
        self._thread.quit()
        stopped = bool(self._thread.wait(timeout_ms))
        if stopped:
            self._over = True
            Job._forget(self)
        return stopped

    def _end(self) -> bool:
        """The thread has delivered its outcome: stop it; True if the outcome is to be relayed."""
        if self._over:
            return False
        self._over = True
        self._thread.quit()
        self._thread.wait()
        QTimer.singleShot(0, self._release)  # not now: this object is handling its own event
        return not self._stopped

    def _release(self) -> None:
        Job._forget(self)

    @Slot(str, int, int)
    def _on_progress(self, stage: str, done: int, total: int) -> None:
        if not (self._over or self._stopped):
            self.progress.emit(stage, done, total)

    @Slot(object)
    def _on_finished(self, value: object) -> None:
        if self._end():
            self.finished.emit(value)
            self.done.emit()

    @Slot(str)
    def _on_failed(self, message: str) -> None:
        if self._end():
            self.failed.emit(message)
            self.done.emit()

    @Slot()
    def _on_cancelled(self) -> None:
        if self._end():
            self.cancelled.emit()
            self.done.emit()


atexit.register(Job.stop_all)
