"""The results side of the desktop window: :class:`ResultsPanel` and its views."""

from .panel import ResultsPanel

__all__ = ["ResultsPanel"]
