"""Checking document values against the schema's nodes, collecting every problem.

:class:`Checker` records :class:`~sim.problems.Problem` objects (key path in document positions,
rule, value) and raises :class:`Invalid` when a part cannot be built; the reader catches it per state,
transition, strategy and section, so one reading reports every problem it can find. Numbers,
strings and flags are checked by :mod:`sim.model.checks`, the one way of checking values in ``sim``.
"""

from __future__ import annotations

from typing import Any, Callable, Iterable, Mapping, NoReturn, TypeVar

from ...model.checks import flag, number, string
from ...problems import NO_VALUE, KeyPath, Problem, ValidationError
from .durations import parse_duration
from .schema import (Durations, Flag, FreeText, HazardTable, Items, Matrix, NameMap, Node, Number, Numbers,
                     StateOrShares, Table, Text, Texts, TextOrMap, Variant)

__all__ = ["Invalid", "Checker"]

T = TypeVar("T")
_COMPOUND = (Table, Items, HazardTable, Variant)


class Invalid(Exception):
    """A part of the document has problems (already recorded); what depends on it is not built."""


class Checker:
    """Collects the problems of one reading."""

    def __init__(self) -> None:
        self.problems: list[Problem] = []

    # ------------------------------------------------------------------ recording
    def add(self, path: KeyPath, rule: str, value: Any = NO_VALUE) -> None:
        self.problems.append(Problem(tuple(path), rule, value))

    def fail(self, path: KeyPath, rule: str, value: Any = NO_VALUE) -> NoReturn:
        self.add(path, rule, value)
        raise Invalid

    def extend(self, problems: Iterable[Problem]) -> None:
        self.problems.extend(problems)

    def attempt(self, fn: Callable[..., T], *args: Any) -> T | None:
        """``fn(*args)``, or ``None`` when it found problems (recorded)."""
        try:
            return fn(*args)
        except Invalid:
            return None

    def guarded(self, fn: Callable[..., T], *args: Any, **kwargs: Any) -> T:
        """``fn(*args, **kwargs)``; a :class:`~sim.problems.ValidationError` becomes recorded problems."""
        try:
            return fn(*args, **kwargs)
        except ValidationError as err:
            self.extend(err.problems)
            raise Invalid from None

    # ------------------------------------------------------------------ values
    def value(self, node: Node, raw: Any, path: KeyPath) -> Any:
        """``raw`` checked against a leaf ``node``; raises :class:`Invalid` (problems recorded)."""
        if isinstance(node, Number):
            return self.guarded(lambda: number(path, raw, minimum=node.minimum, maximum=node.maximum,
                                               strict_min=node.strict_min, integer=node.integer))
        if isinstance(node, Text):
            return self.guarded(lambda: string(path, raw, choices=node.choices))
        if isinstance(node, FreeText):
            return raw if isinstance(raw, str) else self.fail(path, "must be a string", raw)
        if isinstance(node, Flag):
            return self.guarded(lambda: flag(path, raw))
        if isinstance(node, Numbers):
            return self.numbers(node, raw, path)
        if isinstance(node, Durations):
            return self.durations(raw, path)
        if isinstance(node, NameMap):
            return self.name_map(node, raw, path)
        if isinstance(node, TextOrMap):
            if isinstance(raw, str) and raw.strip():
                return raw
            if not isinstance(raw, Mapping) or not raw:
                self.fail(path, "must be a column name or a table of sex = column", raw)
            return self.name_map(NameMap(value=node.value), raw, path)
        if isinstance(node, StateOrShares):
            return self.state_or_shares(node, raw, path)
        if isinstance(node, Texts):
            return self.texts(node, raw, path)
        if isinstance(node, Matrix):
            return self.matrix(raw, path)
        raise TypeError(f"{type(node).__name__} is not a leaf of the schema")  # pragma: no cover

    def state_or_shares(self, node: StateOrShares, raw: Any, path: KeyPath) -> Any:
        """A state name, or its tables with each share checked; what the shares mean together (sum,
        sexes, states) is checked by :class:`sim.model.Population` and the model."""
        if isinstance(raw, str):
            return self.guarded(lambda: string(path, raw))
        if not isinstance(raw, Mapping) or not raw:
            self.fail(path, "must be a state name, a table of state = share, or a table of sex = "
                            "{state = share}", raw)
        if node.per_sex(raw):
            shares = NameMap(value=node.share)
            out, bad = {}, False
            for sex, table in raw.items():
                try:
                    out[sex] = self.name_map(shares, table, (*path, sex))
                except Invalid:
                    bad = True
            if bad:
                raise Invalid
            return out
        if any(isinstance(v, Mapping) for v in raw.values()):
            self.fail(path, "must be a table of state = share, or a table of sex = {state = share} "
                            "(not both)", raw)
        return self.name_map(NameMap(value=node.share), raw, path)

    def numbers(self, node: Numbers, raw: Any, path: KeyPath) -> tuple:
        if not isinstance(raw, list) or not raw:
            self.fail(path, "must be a non-empty list of numbers", raw)
        if node.length is not None and len(raw) != node.length:
            self.fail(path, f"must be a list of {node.length} numbers", raw)
        out, bad = [], False
        for i, x in enumerate(raw):
            try:
                out.append(self.value(node.element, x, (*path, i)))
            except Invalid:
                bad = True
        if bad:
            raise Invalid
        return tuple(out)

    def texts(self, node: Texts, raw: Any, path: KeyPath) -> tuple[str, ...]:
        if not isinstance(raw, list) or not raw:
            self.fail(path, "must be a non-empty list of strings", raw)
        out, bad = [], False
        for i, x in enumerate(raw):
            try:
                out.append(self.guarded(lambda: string((*path, i), x, choices=node.choices)))
            except Invalid:
                bad = True
        if bad:
            raise Invalid
        return tuple(out)

    def matrix(self, raw: Any, path: KeyPath) -> tuple[tuple[float, ...], ...]:
        """A square table of finite numbers (a list of equally long lists)."""
        if not isinstance(raw, list) or not raw or not all(isinstance(r, list) for r in raw):
            self.fail(path, "must be a list of rows, each a list of numbers ([[1.0, 0.2], [0.2, 2.0]])", raw)
        if any(len(r) != len(raw) for r in raw):
            self.fail(path, f"must be square: {len(raw)} rows of {len(raw)} numbers", raw)
        out, bad = [], False
        for i, row in enumerate(raw):
            vals = []
            for j, x in enumerate(row):
                try:
                    vals.append(self.guarded(lambda: number((*path, i, j), x)))
                except Invalid:
                    bad = True
            out.append(tuple(vals))
        if bad:
            raise Invalid
        return tuple(out)

    def durations(self, raw: Any, path: KeyPath) -> tuple[float, ...]:
        if not isinstance(raw, list) or not raw:
            self.fail(path, "must be a non-empty list of durations", raw)
        out, bad = [], False
        for j, c in enumerate(raw):
            try:
                out.append(parse_duration(c))
            except ValueError as err:
                self.add((*path, j), str(err), c)
                bad = True
        if bad:
            raise Invalid
        return tuple(out)

    def name_map(self, node: NameMap, raw: Any, path: KeyPath) -> dict[str, Any]:
        if not isinstance(raw, Mapping):
            kind = "number" if isinstance(node.value, Number) else "value"
            self.fail(path, f"must be a table of name = {kind}", raw)
        out, bad = {}, False
        for k, v in raw.items():
            try:
                out[k] = self.value(node.value, v, (*path, k))
            except Invalid:
                bad = True
        if bad:
            raise Invalid
        return out

    # ------------------------------------------------------------------ tables
    def table(self, raw: Any, path: KeyPath, keys: Mapping[str, Node], *, extra: Iterable[str] = (),
              defaults: bool = True, rule: str = "must be a table") -> dict[str, Any]:
        """The table ``raw`` with its leaf values checked (compound values passed through as they
        are, for their builders) and defaults filled in. Unknown keys, missing required keys and
        every bad value are recorded; raises :class:`Invalid` if there was any."""
        if not isinstance(raw, Mapping):
            self.fail(path, rule, raw)
        allowed = set(keys) | set(extra)
        before = len(self.problems)
        for k in raw:
            if k not in allowed:
                self.add((*path, k), f"unknown key; allowed here: {sorted(allowed)}", raw[k])
        for k, node in keys.items():
            if node.required and k not in raw:
                self.add(path, f"missing required key {k!r}")
        out: dict[str, Any] = {}
        for k, node in keys.items():
            if k not in raw:
                if defaults and node.default is not None:
                    out[k] = node.default
                continue
            if isinstance(node, _COMPOUND) or (isinstance(node, NameMap) and isinstance(node.value, _COMPOUND)):
                out[k] = raw[k]
                continue
            try:
                out[k] = self.value(node, raw[k], (*path, k))
            except Invalid:
                pass
        for k in extra:
            if k in raw and k not in keys:
                out[k] = raw[k]
        if len(self.problems) > before:
            raise Invalid
        return out
