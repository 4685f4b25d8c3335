"""The error raised when output cannot be written as asked."""

from __future__ import annotations

from .._worded import WordedValidationError

__all__ = ["ExportError"]


class ExportError(WordedValidationError):
    """Output cannot be written as asked; the message names the path (or field) and the rule.

    A :class:`sim.problems.ValidationError` (hence a ``ValueError``): :attr:`problems` holds the key
    path of the field at fault (``("events", "transition")``, ``("seed",)``) or the file, the value
    received and the rule, as data; the message keeps its established wording. Raise as
    ``ExportError(message, key=..., rule=..., value=..., file=...)``.
    """
