"""Proportional hazards: a base hazard multiplied by a hazard ratio (made by :meth:`Hazard.scaled`)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from ._numerics import FloatArray
from .base import Hazard, _invalid, _param

__all__ = ["ProportionalHazards"]


@dataclass(frozen=True)
class ProportionalHazards(Hazard):
    """A base hazard multiplied by a hazard ratio.

    Parameters
    ----------
    base : Hazard
        The baseline hazard.
    hr : float
        Hazard ratio, ``>= 0`` and finite; ``0`` means the event never happens.

    Notes
    -----
    :math:`h = \\mathrm{hr}\\,h_0`, :math:`H = \\mathrm{hr}\\,H_0`,
    :math:`H^{-1}(y) = H_0^{-1}(y/\\mathrm{hr})` and conditional time with draw ``e`` equals the
    base's with ``e / hr`` (Bender, Augustin & Blettner 2005). Nested wrappers are flattened by
    :meth:`scaled`.
    """

    base: Hazard
    hr: float
    family: ClassVar[str] = "proportional_hazards"

    def __post_init__(self) -> None:
        if not isinstance(self.base, Hazard):
            raise _invalid(self.family, ("base",), "must be a Hazard", self.base)
        object.__setattr__(self, "hr", _param(self.family, "hr", self.hr, "nonnegative"))

    @property
    def cumhazard_limit(self) -> float:
        return 0.0 if self.hr == 0.0 else self.hr * self.base.cumhazard_limit

    def params(self) -> dict[str, Any]:
        """``{"hr": hr, "base.<name>": value, ...}`` plus ``"base.family"`` naming the base family."""
        out: dict[str, Any] = {"hr": self.hr, "base.family": self.base.family}
        out.update({f"base.{k}": v for k, v in self.base.params().items()})
        return out

    def scaled(self, hr: float) -> Hazard:
        hr = _param(self.family, "hr", hr, "nonnegative")
        if hr == 1.0:
            return self
        return ProportionalHazards(self.base, _param(self.family, "hr", self.hr * hr, "nonnegative"))

    def _hazard(self, t: FloatArray) -> FloatArray:
        return self.hr * self.base._hazard(t) if self.hr > 0.0 else np.zeros(t.shape)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return self.hr * self.base._cumhazard(t) if self.hr > 0.0 else np.zeros(t.shape)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self.base._inv_cumhazard(y / self.hr) if self.hr > 0.0 else np.full(y.shape, np.inf)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        if self.hr == 0.0:
            return np.full(e.shape, np.inf)
        return self.base._conditional_time(x, e / self.hr)
