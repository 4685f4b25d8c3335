"""The error raised when a life table file or argument breaks a rule."""

from __future__ import annotations

from .._worded import WordedValidationError

__all__ = ["LifeTableError"]


class LifeTableError(WordedValidationError):
    """A life table file or argument breaks a rule.

    Messages name the file, the line (CSV, header line = 1) or row (xlsx, spreadsheet row number),
    the column, the value received and the rule, e.g.
    ``tables/x.csv line 7, column 'q_female': 1.2 is outside [0, 1]``.

    A :class:`sim.problems.ValidationError` (hence a ``ValueError``): :attr:`problems` holds the same
    facts as data. A cell of a file: ``file``, ``line`` (the CSV line or spreadsheet row) and the key
    path ``(column,)``; a :class:`LifeTable` built in code: ``("ages", i)`` or ``("values", sex, i)``;
    an argument: its name (``("age_range",)``, ``("exposure", i)``); with the value and the rule.
    """
