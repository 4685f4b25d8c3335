"""A validation error that keeps an established message while carrying its problem as data.

:class:`sim.io.export.ExportError` and :class:`sim.io.lifetable.LifeTableError` existed before
:mod:`sim.problems`; their messages are relied on (documentation, the desktop window, users' scripts),
so they stay word for word. Their :attr:`~sim.problems.ValidationError.problems` hold the same facts as
data: the key path, file and line, the value received and the rule, so code that needs to know which
field is wrong reads those, never the message.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from typing import Any

from ..problems import NO_VALUE, KeyPath, Problem, ValidationError

__all__ = ["WordedValidationError"]


class WordedValidationError(ValidationError):
    """A :class:`~sim.problems.ValidationError` whose text is ``message`` as given.

    Parameters
    ----------
    message : str
        The error's text (``str(err)``). Empty: the text is built from the problems, as for any
        :class:`~sim.problems.ValidationError`.
    key : key path or str
        The field at fault (``("events", "transition")``, ``("seed",)``); empty for the document or
        file as a whole.
    rule : str, optional
        What the field must satisfy, in words; defaults to ``message``.
    value : optional
        The value received (omit when none applies).
    file, line : optional
        Where the field is written, when it comes from a file.
    problems : iterable of Problem, optional
        Give the problems directly instead of ``key``/``rule``/``value``/``file``/``line`` (used by
        :meth:`~sim.problems.ValidationError.of` and :meth:`~sim.problems.ValidationError.within`).
    """

    def __init__(self, message: str = "", *, key: KeyPath | str = (), rule: str | None = None,
                 value: Any = NO_VALUE, file: str | os.PathLike[str] | None = None, line: int | None = None,
                 problems: Iterable[Problem] | None = None) -> None:
        if problems is None:
            path = (key,) if isinstance(key, str) else tuple(key)
            problems = [Problem(path, message if rule is None else rule, value,
                                None if file is None else os.fspath(file), line)]
        super().__init__(problems=problems)
        if message:
            self.args = (message,)

    def __str__(self) -> str:
        return str(self.args[0]) if self.args else ""

    def __reduce__(self):  # picklable with its wording (ValidationError's would rebuild the text)
        return (_rebuild, (type(self), str(self), self.problems))


def _rebuild(cls: type, message: str, problems: tuple[Problem, ...]) -> WordedValidationError:
    err = cls.__new__(cls)
    WordedValidationError.__init__(err, message, problems=problems)
    return err
