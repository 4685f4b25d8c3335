"""The hazard families by name (:data:`FAMILIES`) and :func:`make_hazard`, which builds one from
its name and named parameters (as the scenario file writes them)."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import MISSING, fields
from types import MappingProxyType
from typing import Any

from ..problems import Problem
from .base import Hazard, HazardParameterError
from .dimensions import Dimension
from .exponential import Exponential
from .gamma import Gamma
from .gompertz import Gompertz, GompertzMakeham
from .lognormal import LogNormal
from .piecewise import PiecewiseConstant
from .shape_scale import LogLogistic, Weibull

__all__ = ["FAMILIES", "FAMILY_DIMENSIONS", "make_hazard"]

FAMILIES: Mapping[str, type[Hazard]] = MappingProxyType({
    cls.family: cls
    for cls in (Exponential, Weibull, Gompertz, GompertzMakeham, LogLogistic, LogNormal, Gamma,
                PiecewiseConstant)
})
"""Read-only map from family name to class (``ProportionalHazards`` is made by ``.scaled``)."""

FAMILY_DIMENSIONS: Mapping[str, Mapping[str, Dimension]] = MappingProxyType(
    {name: cls.dimensions for name, cls in FAMILIES.items()})
"""Per family name, the dimension of each parameter in constructor order, as each family declares
it (``Weibull.dimensions``); see :mod:`sim.hazards.dimensions`."""


def make_hazard(family: str, **params: Any) -> Hazard:
    """Build a hazard from its family name and named parameters.

    Parameters
    ----------
    family : str
        A key of :data:`FAMILIES`, e.g. ``"weibull"``.
    **params
        The family's parameters by name, e.g. ``shape=1.3, scale=30.0``.

    Returns
    -------
    Hazard

    Raises
    ------
    HazardParameterError
        Unknown family (the message lists the known ones), unknown or missing parameter names, or
        a parameter outside its domain.
    """
    cls = FAMILIES.get(family)
    if cls is None:
        known = ", ".join(sorted(FAMILIES))
        raise HazardParameterError(("family",), f"must be one of the known families: {known}", family,
                                   message=f"unknown hazard family {family!r}; known families: {known}")
    expected = [f.name for f in fields(cls) if f.init]
    unknown = sorted(set(params) - set(expected))
    missing = [n for n in expected if n not in params and _field_default(cls, n) is MISSING]
    if unknown or missing:
        parts = []
        if unknown:
            parts.append(f"unknown parameter(s) {', '.join(map(repr, unknown))}")
        if missing:
            parts.append(f"missing parameter(s) {', '.join(map(repr, missing))}")
        listed = ", ".join(expected)
        problems = [Problem((n,), f"is not a parameter of the {family} family (expected: {listed})", params[n])
                    for n in unknown]
        problems += [Problem((n,), f"is required (a parameter of the {family} family)") for n in missing]
        raise HazardParameterError(problems=problems,
                                   message=f"{family}: {'; '.join(parts)}; expected parameters: {listed}")
    return cls(**params)


def _field_default(cls: type, name: str) -> Any:
    """Default of dataclass field ``name`` (``MISSING`` when required)."""
    f = next(f for f in fields(cls) if f.name == name)
    return f.default if f.default_factory is MISSING else f.default_factory
