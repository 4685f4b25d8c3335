"""Errors of ``sim.evidence`` in words for the evidence window: each problem's file, line, column,
value and rule (read from the :class:`sim.problems.Problem` data, never from a message)."""

from __future__ import annotations

from pathlib import Path

from sim.problems import NO_VALUE, Problem, ValidationError

__all__ = ["problem_words", "error_words"]


def problem_words(p: Problem) -> str:
    """``trial.csv, line 5, column 'event': 2 must be 0 (censored) or 1 (event)``."""
    where = []
    if p.file:
        where.append(Path(p.file).name)
    if p.line:
        where.append(f"line {p.line}")
    if p.path:
        where.append(f"column '{p.path[0]}'" if len(p.path) == 1 else ".".join(map(str, p.path)))
    value = "" if p.value is NO_VALUE or p.value is None else f"{p.value!r} "
    head = ", ".join(where)
    return f"{head}: {value}{p.rule}" if head else f"{value}{p.rule}"


def error_words(err: BaseException) -> str:
    """All problems of a validation error, one per line; another error's own text."""
    if isinstance(err, ValidationError) and err.problems:
        return "\n".join(problem_words(p) for p in err.problems)
    return str(err) or type(err).__name__
