"""The parametric families that can be fitted, each with its parameters in the scenario file's own
parameterisation, the unconstrained scale the optimiser works on, starting values and the kind of
two-arm effect (docs/methods.md, 'Survival fits from trial evidence').

Positive parameters are optimised as logarithms, the others as they are. Families that are also
scenario hazard families build the project's own hazard class (:mod:`sim.hazards`), so the fitted
values are exactly the keys a ``[[transitions]]`` table takes.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..hazards import Exponential, Gamma, Gompertz, LogLogistic, LogNormal, PiecewiseConstant, Weibull
from ..model.checks import number
from ..problems import ValidationError
from .data import SurvivalData
from .gengamma import GeneralizedGamma

__all__ = ["FamilySpec", "FAMILY_NAMES", "family_spec", "HAZARD_RATIO", "ACCELERATION_FACTOR"]

HAZARD_RATIO = "hazard_ratio"
ACCELERATION_FACTOR = "acceleration_factor"

FAMILY_NAMES: tuple[str, ...] = ("exponential", "weibull", "gompertz", "loglogistic", "lognormal", "gamma",
                                 "gengamma", "piecewise", "spline")
"""Families :func:`family_spec` knows, in the order of the fit table."""


@dataclass(frozen=True)
class FamilySpec:
    """How one family is fitted.

    Attributes
    ----------
    name : family name (a scenario family name where ``scenario`` is true).
    names : the reported parameter names, flat (``rates[0]``, ``rates[1]``, ... for piecewise).
    positive : per parameter, whether it is optimised on the log scale.
    effect : ``"hazard_ratio"`` (proportional hazards: ``H1 = HR H0``) or ``"acceleration_factor"``
        (accelerated failure time: ``S1(t) = S0(t / AF)``) for two arms.
    build : reported values -> a hazard object with ``hazard`` (or ``log_hazard``) and ``cumhazard``.
    start : data -> starting values (reported scale).
    scenario : whether the fit can be written as a scenario hazard table.
    extra : fixed settings written with the fit (piecewise ``breaks``, spline ``knots``).
    """

    name: str
    names: tuple[str, ...]
    positive: tuple[bool, ...]
    effect: str
    build: Callable[[NDArray[np.float64]], Any]
    start: Callable[[SurvivalData], NDArray[np.float64]]
    scenario: bool = True
    extra: tuple[tuple[str, Any], ...] = ()

    def to_values(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """Unconstrained -> reported values."""
        pos = np.asarray(self.positive)
        with np.errstate(over="ignore"):
            return np.where(pos, np.exp(theta), theta)

    def to_theta(self, values: NDArray[np.float64]) -> NDArray[np.float64]:
        pos = np.asarray(self.positive)
        return np.where(pos, np.log(np.where(pos, values, 1.0)), values)

    def jacobian(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """d(reported) / d(theta), diagonal (for the delta method)."""
        return np.diag(np.where(np.asarray(self.positive), np.exp(theta), 1.0))

    def parameters(self, values: NDArray[np.float64]) -> dict[str, Any]:
        """Reported values as the scenario keys (piecewise: ``breaks`` and ``rates`` tuples)."""
        if self.name == "piecewise":
            return {**dict(self.extra), "rates": tuple(float(v) for v in values)}
        return {**{n: float(v) for n, v in zip(self.names, values)}, **dict(self.extra)}


def _exposure_rate(data: SurvivalData) -> float:
    """Events per unit of time at risk: the exponential maximum-likelihood rate."""
    return data.n_events / float(np.sum(data.time - data.entry))


def _exponential() -> FamilySpec:
    return FamilySpec("exponential", ("rate",), (True,), HAZARD_RATIO, lambda v: Exponential(rate=v[0]),
                      lambda d: np.array([_exposure_rate(d)]))


def _shape_scale(name: str, cls: type, effect: str, scale0: Callable[[float], float]) -> FamilySpec:
    return FamilySpec(name, ("shape", "scale"), (True, True), effect, lambda v: cls(shape=v[0], scale=v[1]),
                      lambda d: np.array([1.0, scale0(_exposure_rate(d))]))


def _gompertz() -> FamilySpec:
    return FamilySpec("gompertz", ("rate", "shape"), (True, False), HAZARD_RATIO,
                      lambda v: Gompertz(rate=v[0], shape=v[1]), lambda d: np.array([_exposure_rate(d), 0.0]))


def _lognormal() -> FamilySpec:
    return FamilySpec("lognormal", ("mu", "sigma"), (False, True), ACCELERATION_FACTOR,
                      lambda v: LogNormal(mu=v[0], sigma=v[1]),
                      lambda d: np.array([math.log(math.log(2.0) / _exposure_rate(d)), 1.0]))


def _gengamma() -> FamilySpec:
    return FamilySpec("gengamma", ("mu", "sigma", "q"), (False, True, False), ACCELERATION_FACTOR,
                      lambda v: GeneralizedGamma(mu=v[0], sigma=v[1], q=v[2]),
                      lambda d: np.array([math.log(1.0 / _exposure_rate(d)), 1.0, 1.0]), scenario=False)


def check_breaks(breaks: Sequence[float], data: SurvivalData | None = None) -> tuple[float, ...]:
    """Piecewise break points: finite, strictly increasing, ``>= 0``; 0 is added as the first band
    start when missing. With ``data``, every band must start before the last exit time."""
    out: list[float] = []
    for i, b in enumerate(breaks):
        b = number(("breaks", i), b, minimum=0.0)
        if out and not b > out[-1]:
            raise ValidationError(("breaks", i), f"must be greater than the previous break {out[-1]!r}", b)
        out.append(float(b))
    if not out or out[0] != 0.0:
        out.insert(0, 0.0)
    if data is not None and out[-1] >= float(np.max(data.time)):
        raise ValidationError(("breaks", len(out) - 1), f"must be below the last exit time "
                              f"{float(np.max(data.time))!r} (a band with nobody at risk cannot be fitted)",
                              out[-1])
    return tuple(out)


def _piecewise(breaks: Sequence[float]) -> FamilySpec:
    b = check_breaks(breaks)
    k = len(b)

    def start(d: SurvivalData) -> NDArray[np.float64]:
        # closed-form maximum likelihood per band: events / time at risk in the band
        lo, hi = np.asarray(b), np.append(np.asarray(b[1:]), np.inf)
        at_risk = np.clip(np.minimum(d.time[:, None], hi) - np.maximum(d.entry[:, None], lo), 0.0, None).sum(0)
        band = np.searchsorted(lo, d.time[d.event], side="right") - 1
        events = np.bincount(band, minlength=k).astype(float)
        rate = np.where(at_risk > 0, np.maximum(events, 0.5) / np.where(at_risk > 0, at_risk, 1.0),
                        _exposure_rate(d))
        return rate

    return FamilySpec("piecewise", tuple(f"rates[{i}]" for i in range(k)), (True,) * k, HAZARD_RATIO,
                      lambda v: PiecewiseConstant(breaks=b, rates=tuple(v)), start, extra=(("breaks", b),))


def family_spec(name: str, *, breaks: Sequence[float] | None = None, knots: int | None = None,
                data: SurvivalData | None = None) -> FamilySpec:
    """The fitting recipe of a family by name.

    Parameters
    ----------
    name : str
        One of :data:`FAMILY_NAMES`.
    breaks : sequence of float, optional
        Piecewise band starts (required for ``piecewise``), in the data's unit.
    knots : int, optional
        Interior knots (1-3) of the Royston-Parmar spline (``spline``; default 1).
    data : SurvivalData, optional
        Needed by ``spline`` (the knots sit at quantiles of the log event times).
    """
    simple = {"exponential": _exponential,
              "weibull": lambda: _shape_scale("weibull", Weibull, HAZARD_RATIO, lambda r: 1.0 / r),
              "gompertz": _gompertz,
              "loglogistic": lambda: _shape_scale("loglogistic", LogLogistic, ACCELERATION_FACTOR,
                                                  lambda r: math.log(2.0) / r),
              "lognormal": _lognormal,
              "gamma": lambda: _shape_scale("gamma", Gamma, ACCELERATION_FACTOR, lambda r: 1.0 / r),
              "gengamma": _gengamma}
    if name in simple:
        return simple[name]()
    if name == "piecewise":
        if breaks is None:
            raise ValidationError(("breaks",), "are required for the piecewise family (band starts, e.g. 0 6 12)")
        return _piecewise(breaks)
    if name == "spline":
        from .spline import spline_spec  # the spline family needs the data to place its knots

        if data is None:
            raise ValidationError(("knots",), "the spline family needs the data to place its knots")
        return spline_spec(data, 1 if knots is None else knots)
    raise ValidationError(("families",), f"must be among {', '.join(FAMILY_NAMES)}", name)
