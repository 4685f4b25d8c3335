"""The error raised when output cannot be written as asked."""

from __future__ import annotations

__all__ = ["ExportError"]


class ExportError(ValueError):
    """Output cannot be written as asked; the message names the path (or field) and the rule."""
