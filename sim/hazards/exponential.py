"""The constant hazard (exponential event time): the memoryless family, and the one a rate or a
risk over a period converts to (:mod:`sim.hazards.units`)."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import ClassVar

import numpy as np

from ._numerics import FloatArray
from .base import Hazard, _param
from .dimensions import Dimension

__all__ = ["Exponential"]


@dataclass(frozen=True)
class Exponential(Hazard):
    """Constant hazard.

    Parameters
    ----------
    rate : float
        :math:`\\lambda \\ge 0` per year; ``0`` means the event never happens.

    Notes
    -----
    :math:`h(t) = \\lambda`, :math:`H(t) = \\lambda t`, :math:`H^{-1}(y) = y / \\lambda`,
    conditional time :math:`e / \\lambda` (memoryless). scipy: ``expon(scale=1/rate)``.
    """

    rate: float
    family: ClassVar[str] = "exponential"
    dimensions: ClassVar[Mapping[str, Dimension]] = MappingProxyType({"rate": Dimension.RATE})

    def __post_init__(self) -> None:
        object.__setattr__(self, "rate", _param(self.family, "rate", self.rate, "nonnegative"))

    @property
    def cumhazard_limit(self) -> float:
        return math.inf if self.rate > 0.0 else 0.0

    def params(self) -> dict[str, float]:
        return {"rate": self.rate}

    def _hazard(self, t: FloatArray) -> FloatArray:
        return np.full(t.shape, self.rate)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return self.rate * t if self.rate > 0.0 else np.zeros(t.shape)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return y / self.rate if self.rate > 0.0 else np.full(y.shape, np.inf)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return e / self.rate if self.rate > 0.0 else np.full(e.shape, np.inf)

    def _conditional_time_large_ratio(self, x: FloatArray, e: FloatArray, hr: float) -> FloatArray:
        """``e / (rate hr)`` as ``(e / rate) / hr``: finite where ``e / hr`` alone overflows."""
        return (e / self.rate) / hr if self.rate > 0.0 else np.full(e.shape, np.inf)
