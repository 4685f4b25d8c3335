"""Validation problems as data: where (a key path), what was given (the value) and the rule broken.

Every validation error in ``sim`` carries one or more :class:`Problem` objects; its message is built
from them, never the other way round. Code that needs to know which field is wrong (the desktop
window's highlighting, the command line's listing) reads :attr:`ValidationError.problems`, never the
wording of a message.

Key paths follow the scenario document: ``("transitions", 2, "rate")`` is the ``rate`` key of the
third ``[[transitions]]`` table. Model objects built in code, which have no document, name items of
a list by their ``name`` instead of their position (``("transitions", "progression", "rate")``);
:func:`format_key` renders either form.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, replace
from typing import Any, Iterable, Union

__all__ = ["NO_VALUE", "PathPart", "KeyPath", "Problem", "ValidationError", "format_key"]

PathPart = Union[str, int]
KeyPath = tuple[PathPart, ...]


class _NoValue:
    """Marker: the problem concerns a missing key or a relation, not one value."""

    _instance: "_NoValue | None" = None

    def __new__(cls) -> "_NoValue":
        if cls._instance is None:
            cls._instance = super().__new__(cls)
        return cls._instance

    def __repr__(self) -> str:
        return "NO_VALUE"

    def __reduce__(self) -> str:
        return "NO_VALUE"


NO_VALUE: Any = _NoValue()
_BARE = re.compile(r"[A-Za-z0-9_-]+")


def format_key(path: Iterable[PathPart]) -> str:
    """``("transitions", 0, "rate")`` -> ``transitions[0].rate``; names that are not bare TOML keys
    are quoted (``strategies[1].hazard_ratios."to death"``)."""
    out = ""
    for part in path:
        if isinstance(part, int) and not isinstance(part, bool):
            out += f"[{part}]"
        else:
            text = str(part)
            out += ("." if out else "") + (text if _BARE.fullmatch(text) else f'"{text}"')
    return out


@dataclass(frozen=True)
class Problem:
    """One validation problem.

    Attributes
    ----------
    path : key path of the offending field (empty for the document as a whole).
    rule : what the field must satisfy, in words ("must be a number >= 0").
    value : the value received, or :data:`NO_VALUE` when none applies (a missing key).
    file, line : where the field is written, when it comes from a file.
    """

    path: KeyPath
    rule: str
    value: Any = NO_VALUE
    file: str | None = None
    line: int | None = None

    @property
    def has_value(self) -> bool:
        return self.value is not NO_VALUE

    @property
    def key(self) -> str:
        return format_key(self.path)

    def located(self, *, file: str | None = None, line: int | None = None,
                path: KeyPath | None = None) -> "Problem":
        """A copy with a file, line or a (translated) key path filled in."""
        return replace(self, file=self.file if file is None else file, line=self.line if line is None else line,
                       path=self.path if path is None else tuple(path))

    def within(self, *prefix: PathPart) -> "Problem":
        """The same problem seen from an enclosing table (``prefix`` prepended to the path)."""
        return replace(self, path=(*prefix, *self.path))

    def __str__(self) -> str:
        where = ""
        if self.file is not None:
            where = self.file + (f":{self.line}" if self.line is not None else "") + ": "
        text = where + (f"{self.key}: " if self.path else "") + self.rule
        if self.has_value:
            text += f", got {self.value!r}"
        return text


class ValidationError(ValueError):
    """Invalid input, described by one or more :class:`Problem` objects (:attr:`problems`).

    Raise with a single problem (``ValidationError(path, rule, value)``) or with a list of problems
    (``ValidationError.of(problems)``). The message lists them all.
    """

    def __init__(self, path: KeyPath | str = (), rule: str = "", value: Any = NO_VALUE, *,
                 problems: Iterable[Problem] | None = None) -> None:
        if problems is None:
            if isinstance(path, str):  # a single key given as text, e.g. "horizon.value"
                path = (path,) if path else ()
            problems = [Problem(tuple(path), rule, value)]
        self._problems: tuple[Problem, ...] = tuple(problems)
        if not self._problems:
            raise ValueError("a ValidationError needs at least one problem")
        super().__init__(self._message())

    @classmethod
    def of(cls, problems: Iterable[Problem]) -> "ValidationError":
        return cls(problems=list(problems))

    @property
    def problems(self) -> tuple[Problem, ...]:
        return self._problems

    @property
    def problem(self) -> Problem:
        """The first problem (for code that shows one)."""
        return self._problems[0]

    def within(self, *prefix: PathPart) -> "ValidationError":
        """The same error with every path seen from an enclosing table."""
        return type(self).of(p.within(*prefix) for p in self._problems)

    def _message(self) -> str:
        if len(self._problems) == 1:
            return str(self._problems[0])
        return f"{len(self._problems)} problems:\n" + "\n".join(f"  - {p}" for p in self._problems)

    def __reduce__(self):  # picklable (process and Dask executors send errors between processes)
        return (_rebuild, (type(self), self._problems))


def _rebuild(cls: type, problems: tuple[Problem, ...]) -> ValidationError:
    err = cls.__new__(cls)
    ValidationError.__init__(err, problems=problems)
    return err
