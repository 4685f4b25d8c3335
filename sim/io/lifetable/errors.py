"""The error raised when a life table file or argument breaks a rule."""

from __future__ import annotations

__all__ = ["LifeTableError"]


class LifeTableError(ValueError):
    """A life table file or argument breaks a rule.

    Messages name the file, the line (CSV, header line = 1) or row (xlsx, spreadsheet row number),
    the column, the value received and the rule, e.g.
    ``tables/x.csv line 7, column 'q_female': 1.2 is outside [0, 1]``.
    """
