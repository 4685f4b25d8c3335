"""Starting parameters for a hazard whose family the user changes: the new family's usual shape, at
the old hazard's level.

Changing a transition from, say, an exponential rate of 0.15 per year to Gompertz must not jump to
a mortality-style default (rate 0.0001, a hazard 500 times lower). The new family keeps its default
shape parameters (given by the caller, e.g. the window's defaults) and its level parameter is chosen so that
the new hazard equals the old one at a reference clock value ``t``:

- exponential ``rate = h(t)``; Gompertz ``rate = h(t) exp(-shape t)``; Gompertz-Makeham half of
  ``h(t)`` from the constant, half from the Gompertz part; piecewise: every band's rate scaled by
  the same factor;
- families with a time scale (Weibull, log-logistic, gamma: ``scale``; log-normal:
  ``exp(mu)``): ``h(t; scale) = g(t / scale) / scale``, solved for the scale on a log grid and
  refined with Brent's method (scipy.optimize.brentq).

The hazards themselves come from :func:`.registry.make_hazard`; all values are per year and are
converted to the table's time unit with :func:`sim.hazards.from_year_units`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np
from scipy.optimize import brentq

from .base import Hazard
from .dimensions import from_year_units
from .registry import FAMILY_DIMENSIONS, make_hazard
from .units import to_years

__all__ = ["FamilyStart", "matched_start"]

_SCALE = {"weibull": "scale", "loglogistic": "scale", "gamma": "scale", "lognormal": "mu"}


@dataclass(frozen=True)
class FamilyStart:
    """Parameters to write (in the table's unit) and a sentence saying what was matched."""

    params: dict[str, Any]
    note: str


def _hazard_at(family: str, params: Mapping[str, Any], t: float) -> float:
    return float(make_hazard(family, **params).hazard(np.array([t]))[0])


def _solve_scale(family: str, params: dict[str, Any], t: float, target: float) -> dict[str, Any] | None:
    """The time scale (or log-normal mu) giving ``hazard(t) == target``; None when none does."""
    key = _SCALE[family]

    def with_scale(log_scale: float) -> dict[str, Any]:
        return {**params, key: log_scale if key == "mu" else math.exp(log_scale)}

    def gap(log_scale: float) -> float:
        h = _hazard_at(family, with_scale(log_scale), t)
        return math.log(h) - math.log(target) if h > 0 and math.isfinite(h) else -math.inf

    grid = np.linspace(math.log(1e-3), math.log(1e4), 281)
    values = np.array([gap(x) for x in grid])
    finite = np.isfinite(values)
    for i in range(len(grid) - 1):
        if finite[i] and finite[i + 1] and values[i] * values[i + 1] <= 0:
            return with_scale(brentq(gap, grid[i], grid[i + 1], xtol=1e-12))
    return None


def matched_start(family: str, defaults: Mapping[str, Any], old: Hazard | None, t: float, unit: str,
                  where: str) -> FamilyStart:
    """Parameters of ``family`` starting from ``defaults`` (per year) at the level of ``old`` at clock
    value ``t`` (years), written in ``unit``; ``where`` says what ``t`` is ("age 55")."""
    params = dict(defaults)
    target = _hazard_at_old(old, t)
    matched: dict[str, Any] | None = None
    if target is not None and target > 0:
        if family == "exponential":
            matched = {"rate": target}
        elif family == "gompertz":
            matched = {**params, "rate": target * math.exp(-params["shape"] * t)}
        elif family == "gompertz_makeham":
            matched = {**params, "rate": 0.5 * target * math.exp(-params["shape"] * t), "constant": 0.5 * target}
        elif family == "piecewise":
            here = _hazard_at(family, params, t)
            matched = {**params, "rates": [r * target / here for r in params["rates"]]} if here > 0 else None
        elif family in _SCALE:
            matched = _solve_scale(family, params, t, target)
    years = to_years(1.0, unit)
    chosen = matched if matched is not None else params
    written = {}
    for k, v in chosen.items():
        dim = FAMILY_DIMENSIONS[family][k]
        value = from_year_units(dim, v, years)
        written[k] = [float(f"{x:.6g}") for x in value] if isinstance(value, tuple) else float(f"{value:.6g}")
    if matched is None:
        note = (f"Started {family} from its usual values: the previous hazard could not be matched "
                f"at {where}.") if old is not None else f"Started {family} from its usual values."
    else:
        note = (f"Started {family} at the previous hazard's level: {target:.4g} per year at {where} "
                f"(shape parameters are the family's usual ones; edit them next).")
    return FamilyStart(written, note)


def _hazard_at_old(old: Hazard | None, t: float) -> float | None:
    if old is None:
        return None
    h = float(old.hazard(np.array([t]))[0])
    return h if math.isfinite(h) else None
