"""Proportional hazards: a base hazard multiplied by a hazard ratio (made by :meth:`Hazard.scaled`)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from ._log_space import conditional_time_log_space
from ._numerics import FloatArray
from .base import Hazard, _invalid, _param

__all__ = ["ProportionalHazards", "ratio_draws"]

_TINY_NORMAL = float(np.finfo(np.float64).tiny)  # smallest normal double


def ratio_draws(e: FloatArray, hr: FloatArray | float) -> tuple[FloatArray, FloatArray]:
    """``(y, lost)``: the draw ``y = e / hr`` for the base hazard under a hazard ratio ``hr > 0``
    (a number or one per lane), and the lanes where it overflowed (a tiny ``hr``: the event time
    may be finite) or underflowed to a subnormal or 0 (a large ``hr``: the event time may be far
    above the smallest double), which need the hazard's own edge handling."""
    y = e / hr
    return y, ((y == np.inf) & (e < np.inf)) | ((y < _TINY_NORMAL) & (e > 0.0))


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
        y, lost = ratio_draws(e, self.hr)
        t = self.base._conditional_time(x, y)
        if np.any(lost):
            same = self._same_family()
            if same is not None:
                t = np.array(t, dtype=np.float64)
                t[lost] = same._conditional_time(x[lost], e[lost])
            else:  # a form in e and hr of the base's own, where e / hr overflowed
                over = (y == np.inf) & (e < np.inf)
                if np.any(over):
                    fix = self.base._conditional_time_large_ratio(x[over], e[over], self.hr)
                    if fix is not None:
                        t = np.array(t, dtype=np.float64)
                        t[over] = fix
                under = (y < _TINY_NORMAL) & (e > 0.0) & (e < np.inf)
                if np.any(under) and self.base._log_forms:  # e / hr subnormal or 0: on the log scale
                    t = np.array(t, dtype=np.float64)
                    xu = x[under]
                    upper = self.base._conditional_time(xu, np.full(xu.shape, _TINY_NORMAL))
                    t[under] = conditional_time_log_space(self.base._log_cumhazard_lt, self.base._log_hazard_lt,
                                                          xu, e[under], self.hr, upper)
        return t

    def _same_family(self) -> Hazard | None:
        """``hr * base`` written as a member of the base's own family where one exists
        (exponential, Weibull, Gompertz(-Makeham), piecewise-constant: the rate parameters times
        ``hr``, the Weibull scale times ``hr ** (-1 / shape)``), so that its conditional time takes
        the draw ``e`` itself instead of ``e / hr``; ``None`` for the other families, or where the
        scaled parameters leave their domain (overflow) or lose digits (a rate times ``hr``
        subnormal or 0)."""
        from .exponential import Exponential
        from .gompertz import Gompertz, GompertzMakeham
        from .piecewise import PiecewiseConstant
        from .shape_scale import Weibull

        b, hr = self.base, self.hr
        rates = [getattr(b, n) for n in ("rate", "constant") if hasattr(b, n)] + list(getattr(b, "rates", ()))
        if any(0.0 < r * hr < _TINY_NORMAL for r in rates):  # a scaled rate subnormal or 0: digits lost
            return None
        try:
            with np.errstate(over="ignore", under="ignore"):
                if isinstance(b, Exponential):
                    return Exponential(b.rate * hr)
                if isinstance(b, Weibull):
                    return Weibull(b.shape, math.exp(math.log(b.scale) - math.log(hr) / b.shape))
                if isinstance(b, GompertzMakeham):
                    return GompertzMakeham(b.rate * hr, b.shape, b.constant * hr)
                if isinstance(b, Gompertz):
                    return Gompertz(b.rate * hr, b.shape)
                if isinstance(b, PiecewiseConstant):
                    return PiecewiseConstant(b.breaks, tuple(r * hr for r in b.rates))
        except (ValueError, OverflowError):  # a scaled parameter left its domain
            return None
        return None
