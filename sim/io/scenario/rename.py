"""Renaming a state or a transition together with every reference to it, wherever the schema
declares that a key names one (:func:`.schema.references`)."""

from __future__ import annotations

from typing import Any, Iterator, MutableMapping

from ...model.checks import is_number
from .schema import Ref, references
from .uncertain import renamed_parameter

__all__ = ["rename", "RENAMEABLE"]

RENAMEABLE = {"states": Ref.STATE, "transitions": Ref.TRANSITION}
"""The arrays of tables whose items can be renamed, and what their names are."""

_FOLLOWS = {Ref.STATE: (Ref.STATE,), Ref.TRANSITION: (Ref.TRANSITION, Ref.EXIT)}


def _places(doc: Any, pattern: tuple, prefix: tuple = ()) -> Iterator[tuple[Any, Any]]:
    """(container, key) pairs of ``doc`` matching ``pattern`` (``"*"``: every item of an array, or
    every key of a table)."""
    if not pattern:
        return
    head, rest = pattern[0], pattern[1:]
    if head == "*":
        if isinstance(doc, list):
            for item in doc:
                yield from _places(item, rest)
        elif isinstance(doc, MutableMapping):
            for key in list(doc):
                if rest:
                    yield from _places(doc[key], rest)
                else:
                    yield doc, key
        return
    if not isinstance(doc, MutableMapping) or head not in doc:
        return
    if rest:
        yield from _places(doc[head], rest)
    else:
        yield doc, head


def rename(doc: Any, array: str, index: int, new: str) -> None:
    """Rename item ``index`` of ``[[array]]`` (``"states"`` or ``"transitions"``) in the document
    ``doc`` (a tomlkit document or plain mapping, changed in place) to ``new``, and every reference
    to its old name. A name already in use (or an item without a name) is set without touching
    references: the reader then reports the duplicate.
    """
    kind = RENAMEABLE[array]
    items = doc[array]
    item = items[index]
    old = item.get("name")
    taken = any(isinstance(x, MutableMapping) and x.get("name") == new for x in items)
    item["name"] = new
    if taken or not isinstance(old, str) or not old or old == new:
        return
    for ref in references():
        if ref.ref not in _FOLLOWS[kind]:
            continue
        for container, key in _places(doc, ref.pattern):
            value = container[key]
            if ref.as_key:
                if ref.numbers_only and isinstance(value, MutableMapping) and not all(
                        is_number(v) for v in value.values()):
                    continue
                if isinstance(value, MutableMapping) and old in value:
                    moved = value[old]
                    del value[old]
                    value[new] = moved
            elif value == old:
                container[key] = new
    _rename_uncertain(doc, _FOLLOWS[kind], old, new)


def _rename_uncertain(doc: Any, refs: tuple[Ref, ...], old: str, new: str) -> None:
    """Parameter names in ``[[uncertainty]]`` that contain the old name follow it."""
    entries = doc.get("uncertainty") if isinstance(doc, MutableMapping) else None
    if not isinstance(entries, list):
        return
    for entry in entries:
        if not isinstance(entry, MutableMapping):
            continue
        if isinstance(entry.get("parameter"), str):
            got = renamed_parameter(doc, entry["parameter"], refs, old, new)
            if got != entry["parameter"]:
                entry["parameter"] = got
        names = entry.get("parameters")
        if isinstance(names, list):
            for i, name in enumerate(names):
                got = renamed_parameter(doc, name, refs, old, new)
                if got != name:
                    names[i] = got
