"""Edits of a tomlkit document at key paths, keeping the user's comments, order and formatting:
reading (:func:`get_item`, :func:`to_plain`, :func:`display_value`), setting and removing values
(:func:`set_value`, :func:`remove_value`), elements of arrays of tables (:func:`append_table`,
:func:`remove_table`) and of arrays of values (:func:`set_item`, :func:`append_item`,
:func:`remove_item`). No Qt here.

Key paths are tuples of table keys and array indices, e.g. ``("transitions", 0, "rate")``.
"""

from __future__ import annotations

from typing import Any

import tomlkit
from tomlkit.container import Container
from tomlkit.items import AoT, Array, Comment, InlineTable, Item, Table, Whitespace
from tomlkit.toml_document import TOMLDocument

from sim.problems import format_key

__all__ = ["KeyPath", "INLINE_KEYS", "get_item", "to_plain", "display_value", "set_value", "remove_value",
           "append_table", "remove_table", "set_item", "append_item", "remove_item"]

KeyPath = tuple[Any, ...]

# Tables the scenario format writes inline (`name = { a = 1 }`) when they are created from scratch.
INLINE_KEYS = frozenset({"hazard_ratios", "state_costs", "transition_costs", "utilities", "sex_mix", "entry_age",
                         "columns"})


def _child(node: Any, key: Any) -> Any:
    if isinstance(key, int):
        if isinstance(node, (AoT, Array, list)) and 0 <= key < len(node):
            return node[key]
        return None
    if _is_table(node) and key in node:
        return node[key]
    return None


def get_item(doc: Any, path: KeyPath) -> Any:
    """The item at ``path`` or ``None`` when any part of it is missing."""
    node = doc
    for key in path:
        node = _child(node, key)
        if node is None:
            return None
    return node


def to_plain(item: Any) -> Any:
    """A plain Python value (dict, list, str, float, ...) from a tomlkit item."""
    return item.unwrap() if hasattr(item, "unwrap") else item


def display_value(item: Any) -> str:
    """Text for an edit field: numbers as the user wrote them (``3.0e-5`` stays ``3.0e-5``),
    strings unquoted, lists comma-separated, booleans ``true``/``false``; ``""`` when missing."""
    if item is None:
        return ""
    plain = to_plain(item)
    if isinstance(plain, str):
        return plain
    if isinstance(plain, bool):
        return "true" if plain else "false"
    if isinstance(plain, list):
        return ", ".join(display_value(x) for x in (item if isinstance(item, Array) else plain))
    if isinstance(item, Item):
        return item.as_string().strip()
    return repr(plain) if isinstance(plain, float) else str(plain)


def _new_container(key: Any, parent: Any) -> Any:
    if isinstance(parent, InlineTable) or key in INLINE_KEYS:
        return tomlkit.inline_table()
    return tomlkit.table()


def _to_item(key: Any, value: Any, parent: Any) -> Any:
    if isinstance(value, dict) and not isinstance(value, (Table, InlineTable)):
        out = _new_container(key, parent)
        for k, v in value.items():
            out[k] = _to_item(k, v, out)
        return out
    return value


def _is_table(node: Any) -> bool:
    return isinstance(node, (Container, Table, InlineTable, TOMLDocument, dict))


def _container(doc: Any, path: KeyPath, create: bool) -> Any:
    """The table or array at ``path``; with ``create``, missing tables are added and a value that is
    not a table where one is needed is replaced by one (the user asked to put a key inside it)."""
    node = doc
    for i, key in enumerate(path):
        nxt = _child(node, key)
        needs_table = i + 1 == len(path) or not isinstance(path[i + 1], int)
        if nxt is None or (create and needs_table and not _is_table(nxt)):
            if not create or isinstance(key, int) or not _is_table(node):
                raise KeyError(format_key(path))
            node[key] = _new_container(key, node)
            nxt = node[key]
        node = nxt
    return node


def _tidy_inline(parent: Any, key: Any) -> None:
    """Re-create an inline table so that its spacing stays regular after keys were added or removed."""
    table = parent[key]
    if isinstance(table, InlineTable):
        fresh = tomlkit.inline_table()
        for k, v in table.items():
            fresh[k] = v
        parent[key] = fresh


def set_value(doc: Any, path: KeyPath, value: Any) -> None:
    """Set ``path`` to ``value`` (creating missing tables); ``None`` removes the key."""
    if value is None:
        remove_value(doc, path)
        return
    if path and isinstance(path[-1], int) and isinstance(get_item(doc, path[:-1]), (Array, list)):
        set_item(doc, path, value)
        return
    parent = _container(doc, path[:-1], create=True)
    key = path[-1]
    new_key = _child(parent, key) is None
    parent[key] = _to_item(key, value, parent)
    if new_key and len(path) >= 2 and isinstance(parent, InlineTable):
        _tidy_inline(_container(doc, path[:-2], create=False), path[-2])


def remove_value(doc: Any, path: KeyPath) -> None:
    """Remove ``path`` if present; an inline map left empty by the removal is removed as well."""
    try:
        parent = _container(doc, path[:-1], create=False)
    except KeyError:
        return
    key = path[-1]
    if _child(parent, key) is None:
        return
    del parent[key]
    if len(path) >= 2 and isinstance(parent, InlineTable):
        grand = _container(doc, path[:-2], create=False)
        if len(parent) == 0:
            del grand[path[-2]]
        else:
            _tidy_inline(grand, path[-2])


def _trailing_trivia(table: Table) -> list[tuple[Any, Any]]:
    """Pop the comments and blank lines at the end of a table's body (they belong to what follows)."""
    body = table.value.body
    tail: list[tuple[Any, Any]] = []
    while body and body[-1][0] is None and isinstance(body[-1][1], (Whitespace, Comment)):
        tail.insert(0, body.pop())
    return tail


def append_table(doc: Any, path: KeyPath, values: dict) -> int:
    """Append a table to the array of tables at ``path`` (created if missing); returns its index.

    Comments that sat at the end of the previous last element (they introduce the next section of
    the file) move below the new element, so they stay in front of the section they describe.
    """
    aot = get_item(doc, path)
    table = tomlkit.table()
    for k, v in values.items():
        table[k] = _to_item(k, v, table)
    if aot is None:
        parent = _container(doc, path[:-1], create=True)
        parent[path[-1]] = tomlkit.aot()
        aot = parent[path[-1]]
    tail: list[tuple[Any, Any]] = []
    if len(aot):
        prev = aot[-1]
        tail = _trailing_trivia(prev)
        prev.value.body.append((None, Whitespace("\n")))
    aot.append(table)
    new = aot[-1]
    if tail:
        new.value.body.extend(tail)
    else:
        new.value.body.append((None, Whitespace("\n")))
    return len(aot) - 1


def remove_table(doc: Any, path: KeyPath, index: int) -> None:
    """Remove element ``index`` of the array of tables at ``path``, keeping comments that introduce
    the next section (moved to the element before, when there is one)."""
    aot = get_item(doc, path)
    if aot is None or not 0 <= index < len(aot):
        raise KeyError(f"{format_key(path)}[{index}]")
    tail = _trailing_trivia(aot[index]) if index == len(aot) - 1 and index > 0 else []
    if index == len(aot) - 1 and index > 0:
        _trailing_trivia(aot[index - 1])
    del aot[index]
    if tail:
        aot[index - 1].value.body.extend(tail)


def _array(doc: Any, path: KeyPath) -> Any:
    array = get_item(doc, path)
    if not isinstance(array, (Array, list)):
        raise KeyError(format_key(path))
    return array


def set_item(doc: Any, path: KeyPath, value: Any) -> None:
    """Set element ``path[-1]`` of the array of values at ``path[:-1]`` (the array keeps its
    comments and layout; ``breaks = [0.0, 5.0]  # years`` stays one line with its comment); the
    index just past the end appends."""
    array = _array(doc, path[:-1])
    if path[-1] == len(array):  # the element after the last: appended (a list shorter than its partner)
        array.append(value)
        return
    if not 0 <= path[-1] < len(array):
        raise KeyError(format_key(path))
    array[path[-1]] = value


def append_item(doc: Any, path: KeyPath, value: Any) -> None:
    """Append ``value`` to the array of values at ``path``."""
    _array(doc, path).append(value)


def remove_item(doc: Any, path: KeyPath) -> None:
    """Remove element ``path[-1]`` of the array of values at ``path[:-1]`` (the later ones move up)."""
    array = _array(doc, path[:-1])
    if not 0 <= path[-1] < len(array):
        raise KeyError(format_key(path))
    del array[path[-1]]
