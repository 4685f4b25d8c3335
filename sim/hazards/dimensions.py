"""What each model parameter measures, so that units are converted in one place.

A hazard family's parameters are written in a time unit of the user's choice (``unit = "months"``)
and stored in years. How a value changes with the unit follows from its dimension:

- ``TIME`` (a Weibull scale, piecewise break points): multiplied by years per unit;
- ``RATE`` (events per unit of time; also the Gompertz shape, whose unit is 1/time): divided by
  years per unit;
- ``LOG_TIME`` (the log-normal location mu = E[log T]): shifted by log(years per unit);
- ``DIMENSIONLESS`` (shape parameters, log-normal sigma): unchanged.

Each family declares its parameters' dimensions (``Weibull.dimensions``);
:data:`sim.hazards.FAMILY_DIMENSIONS` collects them by family name. Model inputs outside the hazards use ``RATIO`` (hazard ratios), ``SHARE`` (utilities, proportions)
and ``MONEY`` (costs), none of which depends on the time unit. The scenario schema
(:mod:`sim.io.scenario`) and the window's editors read the dimensions from here.
"""

from __future__ import annotations

import math
from enum import Enum
from typing import Sequence

__all__ = ["Dimension", "to_year_units", "from_year_units"]


class Dimension(str, Enum):
    """The physical dimension of a model parameter."""

    TIME = "time"
    RATE = "rate"
    LOG_TIME = "log-time"
    DIMENSIONLESS = "dimensionless"
    RATIO = "ratio"
    SHARE = "share"
    MONEY = "money"


def to_year_units(dimension: Dimension, value: float | Sequence[float], years_per_unit: float
                  ) -> float | tuple[float, ...]:
    """A parameter given in a unit of ``years_per_unit`` years, expressed in years."""
    if not isinstance(value, (int, float)):
        return tuple(float(to_year_units(dimension, v, years_per_unit)) for v in value)
    if dimension is Dimension.TIME:
        return value * years_per_unit
    if dimension is Dimension.RATE:
        return value / years_per_unit
    if dimension is Dimension.LOG_TIME:
        return value + math.log(years_per_unit)
    return value


def from_year_units(dimension: Dimension, value: float | Sequence[float], years_per_unit: float
                    ) -> float | tuple[float, ...]:
    """The inverse of :func:`to_year_units`: a parameter in years expressed in the other unit."""
    if not isinstance(value, (int, float)):
        return tuple(float(from_year_units(dimension, v, years_per_unit)) for v in value)
    if dimension is Dimension.TIME:
        return value / years_per_unit
    if dimension is Dimension.RATE:
        return value * years_per_unit
    if dimension is Dimension.LOG_TIME:
        return value - math.log(years_per_unit)
    return value
