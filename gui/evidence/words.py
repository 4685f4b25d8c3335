"""Errors of ``sim.evidence`` in words for the evidence window: each problem's file, line, column,
value and rule (read from the :class:`sim.problems.Problem` data, never from a message)."""

from __future__ import annotations

from pathlib import Path

from sim.problems import NO_VALUE, Problem, ValidationError, format_key

__all__ = ["problem_words", "error_words"]


def problem_words(p: Problem) -> str:
    """``trial.csv, line 5, column 'event': 2 must be 0 (censored) or 1 (event)``."""
    where = []
    if p.file:
        where.append(Path(p.file).name)
    if p.line:
        where.append(f"line {p.line}")
    if p.path:  # a column of a file, else a setting of the window (breaks, knots, families)
        where.append(f"column '{p.path[0]}'" if p.file and len(p.path) == 1 else format_key(p.path))
    v = p.value
    if isinstance(v, float) and v.is_integer():
        v = int(v)  # a code read as a number: 2, not 2.0
    value = "" if v is NO_VALUE or v is None else f"{v!r} "
    head = ", ".join(where)
    return f"{head}: {value}{p.rule}" if head else f"{value}{p.rule}"


def error_words(err: BaseException) -> str:
    """All problems of a validation error, one per line; another error's own text."""
    if isinstance(err, ValidationError) and err.problems:
        return "\n".join(problem_words(p) for p in err.problems)
    return str(err) or type(err).__name__
