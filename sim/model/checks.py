"""The one way of checking values in ``sim``: numbers, strings, flags and tables of numbers.

Every model object, the scenario reader and the run settings check their numbers here, so that the
same value gets the same verdict and the same wording everywhere:

* a number is a Python ``int`` or ``float`` or a numpy integer or floating scalar; ``bool`` (Python
  or numpy), strings, lists and ``None`` are not numbers;
* a number comes back as a plain Python ``float`` (or ``int`` when ``integer=True``), never as a
  numpy scalar or a string;
* a failed check raises a :class:`~sim.problems.ValidationError` (or the subclass given as ``error``)
  carrying one :class:`~sim.problems.Problem` with the key path, the rule and the value received.

Rules, in the order they are tested: ``"must be a number"``, ``"must be a whole number"``,
``"must be finite"``, ``"must be >= 0"`` / ``"must be > 0"``, ``"must be <= 1"`` / ``"must be < 1"``.

:class:`Problems` collects the problems of several checks so that a validator reports all of them at
once (``ValidationError.of``) rather than stopping at the first.
"""

from __future__ import annotations

import math
import numbers
from typing import Any, Callable, Iterable, Mapping, TypeVar

import numpy as np

from ..problems import NO_VALUE, KeyPath, Problem, ValidationError

__all__ = ["is_number", "number", "string", "flag", "number_map", "Problems"]

T = TypeVar("T")
ErrorType = type[ValidationError]


def is_number(value: Any) -> bool:
    """Whether ``value`` counts as a number: a real int/float (Python or numpy), not a bool."""
    if isinstance(value, (bool, np.bool_)):
        return False
    return isinstance(value, (int, float, np.integer, np.floating))


def _bound(x: float) -> str:
    return f"{x:g}"


def number(path: KeyPath, value: Any, *, minimum: float | None = None, maximum: float | None = None,
           strict_min: bool = False, strict_max: bool = False, integer: bool = False, finite: bool = True,
           error: ErrorType = ValidationError) -> Any:
    """Check that ``value`` is a number within the given bounds and return it as a Python number.

    Parameters
    ----------
    path : key path of the value, for the problem (``("horizon", "value")``).
    value : the value received.
    minimum, maximum : optional bounds, inclusive unless ``strict_min`` / ``strict_max``.
    integer : require a whole number of integer type (``5.0`` is refused: it is written as a float).
    finite : refuse ``nan`` and ``±inf`` (with ``finite=False`` infinities pass, ``nan`` never does).
    error : the :class:`~sim.problems.ValidationError` subclass to raise.

    Returns
    -------
    int or float
        ``int`` when ``integer`` is true, otherwise ``float``.

    Raises
    ------
    ValidationError (or ``error``)
        With one problem ``Problem(path, rule, value)``.
    """
    path = tuple(path)
    if not is_number(value):
        raise error(path, "must be a number", value)
    if integer:
        if not isinstance(value, (int, np.integer)):
            raise error(path, "must be a whole number", value)
        out: Any = int(value)
        v = float(out) if abs(out) < 2**1023 else math.copysign(math.inf, out)
    else:
        try:
            out = v = float(value)
        except OverflowError:  # an int too large for a float
            raise error(path, "must be finite", value) from None
        if math.isnan(v):
            raise error(path, "must be finite" if finite else "must be a number (not NaN)", value)
        if finite and math.isinf(v):
            raise error(path, "must be finite", value)
    if minimum is not None and (v <= minimum if strict_min else v < minimum):
        raise error(path, f"must be {'>' if strict_min else '>='} {_bound(minimum)}", value)
    if maximum is not None and (v >= maximum if strict_max else v > maximum):
        raise error(path, f"must be {'<' if strict_max else '<='} {_bound(maximum)}", value)
    return out


def string(path: KeyPath, value: Any, *, choices: Iterable[str] | None = None,
           error: ErrorType = ValidationError) -> str:
    """Check that ``value`` is a non-empty string (one of ``choices`` when given) and return it.

    Rules: ``"must be a non-empty string"``, ``"must be one of [...]"``.
    """
    path = tuple(path)
    if not isinstance(value, str) or not value.strip():
        raise error(path, "must be a non-empty string", value)
    if choices is not None:
        options = list(choices)
        if value not in options:
            raise error(path, f"must be one of {options}", value)
    return str(value)


def flag(path: KeyPath, value: Any, *, error: ErrorType = ValidationError) -> bool:
    """Check that ``value`` is ``True`` or ``False`` (Python or numpy bool) and return a Python bool.

    Rule: ``"must be true or false"``.
    """
    if not isinstance(value, (bool, np.bool_)):
        raise error(tuple(path), "must be true or false", value)
    return bool(value)


def number_map(path: KeyPath, mapping: Any, *, error: ErrorType = ValidationError,
               **bounds: Any) -> dict[str, Any]:
    """Check a table ``name = number`` and return it as a new ``dict`` of Python numbers.

    Each value is checked with :func:`number` (``bounds`` are its keyword arguments) at
    ``(*path, name)``; every bad entry is reported, not only the first. Rules: ``"must be a table of
    name = number"`` for the table, ``"must be a non-empty string"`` for a name.
    """
    path = tuple(path)
    if not isinstance(mapping, Mapping):
        raise error(path, "must be a table of name = number", mapping)
    found = Problems()
    out: dict[str, Any] = {}
    for key, value in mapping.items():
        if not isinstance(key, str) or not key.strip():
            found.add(path, "names must be non-empty strings", key)
            continue
        got = found.check(number, (*path, key), value, **bounds)
        if got is not None:
            out[key] = got
    found.raise_if_any(error)
    return out


class Problems:
    """Collects problems from several checks, to raise them together.

    Used as::

        found = Problems()
        value = found.check(number, ("horizon", "value"), raw, minimum=0, strict_min=True)  # None if bad
        found.add(("states",), "at least one state must be absorbing (e.g. death)")
        found.raise_if_any(ModelError)  # one error listing every problem recorded
    """

    def __init__(self) -> None:
        self.items: list[Problem] = []

    def __bool__(self) -> bool:
        return bool(self.items)

    def __len__(self) -> int:
        return len(self.items)

    def add(self, path: KeyPath, rule: str, value: Any = NO_VALUE) -> None:
        """Record one problem."""
        self.items.append(Problem(tuple(path), rule, value))

    def extend(self, problems: Iterable[Problem]) -> None:
        self.items.extend(problems)

    def check(self, fn: Callable[..., T], *args: Any, **kwargs: Any) -> T | None:
        """Call ``fn``; on a :class:`~sim.problems.ValidationError` record its problems and return
        ``None`` (so the caller goes on checking the rest)."""
        try:
            return fn(*args, **kwargs)
        except ValidationError as err:
            self.items.extend(err.problems)
            return None

    def raise_if_any(self, error: ErrorType = ValidationError) -> None:
        """Raise ``error.of(problems)`` when any were recorded."""
        if self.items:
            raise error.of(self.items)
