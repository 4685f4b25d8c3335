"""Fitting off the GUI thread: one family after another in a worker thread (:class:`gui.worker.Job`),
with progress after each family and a cancel flag checked between families.

The fits themselves are :func:`sim.evidence.fit_family`'s; the table is
:func:`sim.evidence.fit_table`'s. This module only orders the calls and reports.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass

from PySide6.QtCore import Signal

from gui.worker import FunctionWorker
from sim.evidence import Fit, SurvivalData, family_spec, fit_family

__all__ = ["FitRequest", "FitOutcome", "FitWorker", "run_fits"]


@dataclass(frozen=True)
class FitRequest:
    """What to fit: the families (``spline`` once per number of knots), piecewise breaks, spline knots."""

    families: tuple[str, ...]
    breaks: tuple[float, ...] | None = None
    knots: tuple[int, ...] = (1,)

    def steps(self) -> list[tuple[str, int | None]]:
        """(family, knots) in fitting order; knots only for ``spline``."""
        out: list[tuple[str, int | None]] = []
        for name in self.families:
            if name == "spline":
                out.extend(("spline", k) for k in (self.knots or (1,)))
            else:
                out.append((name, None))
        return out


@dataclass(frozen=True)
class FitOutcome:
    """The fits done (all of them, or those finished before a cancel)."""

    fits: tuple[Fit, ...]
    cancelled: bool
    total: int


def run_fits(data: SurvivalData, request: FitRequest, cancel: threading.Event,
             progress: Callable[[str, int, int], None]) -> FitOutcome:
    """Fit ``request``'s families one by one; stop between families when ``cancel`` is set."""
    steps = request.steps()
    fits: list[Fit] = []
    for i, (name, knots) in enumerate(steps):
        if cancel.is_set():
            return FitOutcome(tuple(fits), True, len(steps))
        label = f"spline ({knots} knot{'s' if knots != 1 else ''})" if name == "spline" else name
        progress(label, i, len(steps))
        if name == "spline":
            fits.append(fit_family(data, family_spec("spline", knots=knots, data=data)))
        else:
            fits.append(fit_family(data, name, breaks=request.breaks))
    progress("", len(steps), len(steps))
    return FitOutcome(tuple(fits), False, len(steps))


class FitWorker(FunctionWorker):
    """A :class:`gui.worker.FunctionWorker` running :func:`run_fits`, with ``progress(family, done,
    total)`` and :meth:`cancel` (thread-safe: sets a flag read between families). A cancelled run
    ends with ``finished(FitOutcome(cancelled=True))`` holding the fits done so far."""

    progress = Signal(str, int, int)

    def __init__(self, data: SurvivalData, request: FitRequest) -> None:
        self._cancel = threading.Event()
        super().__init__(run_fits, data, request, self._cancel, self._emit_progress)

    def _emit_progress(self, family: str, done: int, total: int) -> None:
        self.progress.emit(family, done, total)

    def cancel(self) -> None:
        self._cancel.set()

    @property
    def cancel_requested(self) -> bool:
        return self._cancel.is_set()

