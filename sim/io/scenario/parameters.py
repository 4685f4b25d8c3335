"""Every numeric parameter of a scenario, with its key path and dimension, read from the schema (for
putting a distribution on any parameter, and for listing what a scenario assumes)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

from ...hazards import Dimension, to_years
from ...model.checks import is_number
from ...problems import KeyPath, format_key
from .schema import HazardTable, Number, walk

__all__ = ["Parameter", "parameters"]


@dataclass(frozen=True)
class Parameter:
    """A number of the scenario that is a model input.

    Attributes
    ----------
    path : its key path in the document (``("transitions", 0, "shape")``; an element of a list has
        its index: ``("transitions", 2, "rates", 1)``).
    dimension : what it measures (:class:`sim.hazards.Dimension`).
    value : the value as written in the file.
    years_per_unit : the time unit it is written in (hazard parameters follow their table's
        ``unit``; everything else is in years): convert with :func:`sim.hazards.to_year_units`.
    """

    path: KeyPath
    dimension: Dimension
    value: float
    years_per_unit: float = 1.0

    @property
    def key(self) -> str:
        return format_key(self.path)


def _unit_of(doc: Mapping, path: KeyPath, hazards: dict[KeyPath, float]) -> float:
    for n in range(len(path), 0, -1):
        if path[:n] in hazards:
            return hazards[path[:n]]
    return 1.0


def parameters(doc: Mapping[str, Any]) -> list[Parameter]:
    """The numeric model parameters of the scenario document ``doc`` (a plain or tomlkit mapping, as
    read from a file), in document order. Run settings and the ages of a life-table fit are not
    parameters; keys whose value is not a number are skipped (the reader reports them)."""
    hazards: dict[KeyPath, float] = {}
    out: list[Parameter] = []
    for path, node, value in walk(doc):
        if isinstance(node, HazardTable) and isinstance(value, Mapping):
            unit = value.get("unit", "years")
            try:
                hazards[path] = to_years(1.0, unit) if isinstance(unit, str) else 1.0
            except ValueError:
                hazards[path] = 1.0
        elif isinstance(node, Number) and node.parameter and node.dimension is not None and is_number(value):
            out.append(Parameter(path, node.dimension, value, _unit_of(doc, path, hazards)))
    return out


