"""The model in words, for ``hazardtrace check`` (written in :mod:`sim.report.describe`, which the
report shares)."""

from ..report import describe

__all__ = ["describe"]
