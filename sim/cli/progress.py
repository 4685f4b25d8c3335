"""Progress on stderr for the command line: a bar per long stage of a run."""

from __future__ import annotations

import sys
from typing import TextIO

__all__ = ["ProgressBar", "StageProgress"]


class ProgressBar:
    """A progress bar on stderr: redrawn in place on a terminal, a line per 10% otherwise."""

    def __init__(self, label: str, stream: TextIO | None = None) -> None:
        self.label, self.last = label, -1
        self.stream = stream if stream is not None else sys.stderr
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()

    def __call__(self, done: int, total: int | None) -> None:
        if not total:
            return
        pct = int(100 * done / total)
        if self.tty:
            bar = "#" * (pct // 4)
            self.stream.write(f"\r{self.label} [{bar:<25}] {pct:3d}% ({done:,}/{total:,})")
            if done >= total:
                self.stream.write("\n")
        elif pct // 10 != self.last // 10 or done >= total:
            self.stream.write(f"{self.label}: {pct}% ({done:,}/{total:,})\n")
        self.last = pct
        self.stream.flush()


class StageProgress:
    """``progress(stage, done, total)`` of a run (:mod:`sim.pipeline`) as one bar per stage in
    ``shown`` (the stages that count something: patients, cohort traces); other stages are quiet."""

    def __init__(self, shown: tuple[str, ...] = ("simulating", "error study"), stream: TextIO | None = None) -> None:
        self.shown, self.stream = shown, stream
        self._bars: dict[str, ProgressBar] = {}

    def __call__(self, stage: str, done: int, total: int) -> None:
        if stage not in self.shown or done <= 0:
            return
        bar = self._bars.get(stage)
        if bar is None:
            bar = self._bars[stage] = ProgressBar(stage, self.stream)
        bar(done, total)
