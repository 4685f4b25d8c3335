"""The headless ``hazardtrace`` command line (run, compare, check, demo)."""

from .commands import describe, main

__all__ = ["describe", "main"]
