"""Errors of the scenario format: :class:`ScenarioError` (one or more problems of a file) and
:class:`ScenarioProblems` (the same, when one reading found several).

Both are :class:`sim.problems.ValidationError`: :attr:`~sim.problems.ValidationError.problems` holds
:class:`~sim.problems.Problem` objects with the file, the line, the key path in document positions
(``("transitions", 2, "rate")``: the ``rate`` of the third ``[[transitions]]`` table), the value and
the rule. The message is built from them: ``scen.toml:37: transitions[1].rate: must be >= 0, got -0.15``.
The attributes ``rule``, ``file``, ``key`` (the key path as text), ``path``, ``line`` and ``value``
are those of the first problem, for code that shows one.
"""

from __future__ import annotations

from typing import Any, Iterable

from ...problems import NO_VALUE, KeyPath, Problem, ValidationError

__all__ = ["ScenarioError", "ScenarioProblems", "problem_text"]

UNNAMED = "<scenario>"
"""How messages name a scenario that has no file."""


def problem_text(problem: Problem) -> str:
    """One problem as the scenario messages write it: ``file:line: key: rule, got value`` (a scenario
    without a file is ``<scenario>``)."""
    where = problem.file or UNNAMED
    if problem.line is not None:
        where += f":{problem.line}"
    text = f"{where}: " + (f"{problem.key}: " if problem.path else "") + problem.rule
    if problem.has_value:
        text += f", got {problem.value!r}"
    return text


class ScenarioError(ValidationError):
    """A problem in a scenario file: names the file, key path, line, value and rule.

    Raise a single problem as ``ScenarioError(rule, file=..., path=..., line=..., value=...)`` (no
    ``value`` when none applies, e.g. a missing key), or several with :meth:`of`, which gives a
    :class:`ScenarioProblems` when there is more than one.
    """

    def __init__(self, rule: str = "", *, file: str | None = None, path: KeyPath = (), line: int | None = None,
                 value: Any = NO_VALUE, problems: Iterable[Problem] | None = None) -> None:
        if problems is None:
            problems = [Problem(tuple(path), rule, value, file, line)]
        super().__init__(problems=problems)

    @classmethod
    def of(cls, problems: Iterable[Problem]) -> "ScenarioError":
        found = list(problems)
        kind = ScenarioProblems if len(found) > 1 else ScenarioError
        err = kind.__new__(kind)
        ValidationError.__init__(err, problems=found)
        return err

    # the first problem's fields, for callers that show one
    @property
    def rule(self) -> str:
        return self.problem.rule

    @property
    def file(self) -> str | None:
        return self.problem.file

    @property
    def path(self) -> KeyPath:
        return self.problem.path

    @property
    def key(self) -> str | None:
        return self.problem.key or None

    @property
    def line(self) -> int | None:
        return self.problem.line

    @property
    def value(self) -> Any:
        return self.problem.value if self.problem.has_value else None

    def _message(self) -> str:
        if len(self.problems) == 1:
            return problem_text(self.problems[0])
        return (f"{self.problems[0].file or UNNAMED}: {len(self.problems)} problems:\n"
                + "\n".join(f"  - {problem_text(p)}" for p in self.problems))


class ScenarioProblems(ScenarioError):
    """Several problems found in one reading of a scenario; :attr:`problems` lists them in the order
    of the sections. ``key``, ``line`` and ``rule`` are those of the first."""
