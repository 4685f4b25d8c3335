"""The probabilistic analysis off the GUI thread: :class:`PsaWorker` runs :func:`sim.distributed.run_psa` and
:func:`sim.psa.psa_summaries` (the same calls as ``hazardtrace psa``) in a ``QThread`` through
:class:`PsaJob`, the window's :class:`gui.worker.Job` with the analysis' progress (draws done, draws
in all, seconds left) and its cancel flag. Never ``processEvents()``.
"""

from __future__ import annotations

import logging
import threading
import time
from dataclasses import dataclass, field

import pandas as pd
from PySide6.QtCore import QCoreApplication, QObject, Signal, Slot

from gui.worker import Job, error_message
from sim.engine import SimulationCancelled
from sim.io import Scenario
from sim.distributed import PsaResult, run_psa
from sim.problems import ValidationError
from sim.psa import CycleMethod, psa_summaries

__all__ = ["PsaRequest", "PsaOutcome", "PsaWorker", "PsaJob", "NO_ESTIMATE", "eta_text"]

log = logging.getLogger(__name__)
NO_ESTIMATE = -1.0  # seconds left: not known yet


@dataclass(frozen=True)
class PsaRequest:
    """What the user asked for: draws, patients per draw and strategy, workers, the cycle-based
    approximations to run on every draw, and the Dask scheduler's address (None: this machine)."""

    draws: int
    patients: int
    workers: int
    cycle_methods: tuple[CycleMethod, ...] = ()
    scheduler: str | None = None


@dataclass(frozen=True)
class PsaOutcome:
    """A finished analysis and its summary tables (by name, as :func:`sim.psa.psa_summaries`)."""

    scenario: Scenario
    request: PsaRequest
    result: PsaResult
    summaries: dict[str, pd.DataFrame] = field(default_factory=dict)
    seconds: float = 0.0

    @property
    def methods(self) -> list[str]:
        """The methods of the per-draw table, in its order."""
        return list(pd.unique(self.result.table["method"]))


class PsaWorker(QObject):
    """Runs one analysis; lives in a worker thread (see :class:`PsaJob`).

    Signals: ``progress(done, total, seconds_left)`` (``NO_ESTIMATE`` while unknown), at most every
    ``min_interval`` seconds except the last; ``finished(PsaOutcome)``; ``failed(message)``;
    ``cancelled()``. After ``failed``, :attr:`error` holds the exception (a
    :class:`sim.problems.ValidationError` names the key it concerns, e.g. ``scheduler``). A cancel
    asked for while the scheduler is still being reached ends as ``cancelled`` once the attempt
    returns (Dask's connection cannot be interrupted; the window does not wait for it).
    """

    progress = Signal(int, int, float)
    finished = Signal(object)
    failed = Signal(str)
    cancelled = Signal()

    def __init__(self, scenario: Scenario, request: PsaRequest, min_interval: float = 0.1) -> None:
        super().__init__()
        self._scenario = scenario
        self._request = request
        self._cancel = threading.Event()
        self._min_interval = float(min_interval)
        self._last = 0.0
        self.error: BaseException | None = None

    def cancel(self) -> None:
        """Ask the analysis to stop at its next check (between blocks of draws). Thread-safe."""
        self._cancel.set()

    @property
    def cancel_requested(self) -> bool:
        return self._cancel.is_set()

    def _report(self, done: int, total: int, left: float | None) -> None:
        now = time.monotonic()
        if done < total and now - self._last < self._min_interval:
            return
        self._last = now
        self.progress.emit(int(done), int(total), NO_ESTIMATE if left is None else float(left))

    @Slot()
    def run(self) -> None:
        r = self._request
        t0 = time.perf_counter()
        try:
            result = run_psa(self._scenario, r.draws, r.patients, workers=r.workers, scheduler=r.scheduler,
                             progress=self._report, cancel=self._cancel, cycle_methods=r.cycle_methods)
            summaries = psa_summaries(result.table, self._scenario.model)
        except SimulationCancelled:
            self.cancelled.emit()
        except Exception as err:  # every failure reaches the user as a message
            if self._cancel.is_set():  # e.g. the scheduler could not be reached after Cancel was pressed
                self.cancelled.emit()
            else:
                if not isinstance(err, ValidationError):
                    log.exception("probabilistic analysis failed")
                self.error = err
                self.failed.emit(error_message(err))
        else:
            self.finished.emit(PsaOutcome(self._scenario, r, result, summaries, time.perf_counter() - t0))
        app = QCoreApplication.instance()  # back to the GUI thread, to be destroyed there
        if app is not None:
            self.moveToThread(app.thread())


class PsaJob(Job):
    """A :class:`gui.worker.Job` for a :class:`PsaWorker`: relays ``draws(done, total, seconds_left)``
    while it runs and ``cancelled`` after the thread stopped; :meth:`cancel` sets the worker's flag."""

    draws = Signal(int, int, float)

    def __init__(self, worker: PsaWorker) -> None:
        super().__init__(worker)  # type: ignore[arg-type]
        worker.progress.connect(self._on_draws)
        worker.cancelled.connect(self._on_cancelled)

    def cancel(self) -> None:
        self.worker.cancel()

    @Slot(int, int, float)
    def _on_draws(self, done: int, total: int, left: float) -> None:
        if not (self._over or self._stopped):
            self.draws.emit(done, total, left)


def eta_text(done: int, total: int, left: float) -> str:
    """``"120 of 500 draws · about 35 s left"``."""
    text = f"{done:,} of {total:,} draws"
    if left >= 0 and done < total:
        text += f" · about {left:,.0f} s left" if left >= 1 else " · under a second left"
    return text
