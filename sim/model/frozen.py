"""A read-only, hashable mapping for the model's tables (utilities, costs, hazard ratios, sex mix,
background hazards), so that a validated model cannot be changed afterwards and can serve as a
dictionary or cache key."""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from typing import Any, TypeVar

__all__ = ["FrozenMap"]

K = TypeVar("K")
V = TypeVar("V")


class FrozenMap(Mapping[K, V]):
    """An immutable mapping holding a private copy of its items, in their original order.

    Equal to any mapping with the same items (a plain ``dict`` included) and hashable when its values
    are; the hash does not depend on the order of the items, like equality. ``repr`` looks like a
    ``dict``; pickles as one.

    Examples
    --------
    >>> m = FrozenMap({"well": 0.8, "dead": 0.0})
    >>> m == {"dead": 0.0, "well": 0.8}
    True
    >>> m["well"] = 1.0
    Traceback (most recent call last):
    ...
    TypeError: 'FrozenMap' object does not support item assignment
    """

    __slots__ = ("_items", "_hash")

    def __init__(self, items: Mapping[K, V] | Any = (), /) -> None:
        object.__setattr__(self, "_items", dict(items))
        object.__setattr__(self, "_hash", None)

    def __getitem__(self, key: K) -> V:
        return self._items[key]

    def __iter__(self) -> Iterator[K]:
        return iter(self._items)

    def __len__(self) -> int:
        return len(self._items)

    def __contains__(self, key: object) -> bool:
        return key in self._items

    def get(self, key: K, default: Any = None) -> Any:  # faster than Mapping.get's try/except
        return self._items.get(key, default)

    def __eq__(self, other: object) -> bool:
        if isinstance(other, FrozenMap):
            return self._items == other._items
        if isinstance(other, Mapping):
            return self._items == dict(other.items())
        return NotImplemented

    def __hash__(self) -> int:
        if self._hash is None:
            object.__setattr__(self, "_hash", hash(frozenset(self._items.items())))
        return self._hash

    def __setattr__(self, name: str, value: Any) -> None:
        raise AttributeError(f"{type(self).__name__} is read-only")

    def __delattr__(self, name: str) -> None:
        raise AttributeError(f"{type(self).__name__} is read-only")

    def __repr__(self) -> str:
        return repr(self._items)

    def __or__(self, other: Mapping[K, V]) -> "FrozenMap[K, V]":
        return FrozenMap({**self._items, **dict(other)})

    def __reduce__(self):
        return (FrozenMap, (self._items,))
