"""Time units and conversions between rates and risks (probabilities).

Internally HazardTrace measures time in **years**. Other units convert with the fixed factors

* 1 year = 365.25 days (Julian year), 1 week = 7 days,
* 1 year = 12 months (so a month is 365.25 / 12 = 30.4375 days),

which are common practice, no source: a study that counts 365-day years or 30-day months should
convert its numbers first.

Definitions (docs/methods.md, 'Rates, risks and units'): a *rate* is events per person-time at risk; a *risk*
(probability) is the share of people at risk who have the event within a stated period. Under the assumption that
the rate ``r`` is constant over the period ``t``,

.. math:: p = 1 - e^{-r t}, \\qquad r = -\\ln(1 - p) / t, \\qquad p' = 1 - (1 - p)^{t'/t}

(Miller & Homan 1994; Fleurence & Hollenbeak 2007). The functions below evaluate these with
``expm1``/``log1p`` so that small risks and rates keep full relative precision. They apply to a
single exit; with several competing exits convert the total rate and split it in proportion to the
cause-specific rates instead (Gidwani & Russell 2020).

References
----------
.. [1] Miller DK, Homan SM. Determining transition probabilities: confusion and suggestions.
   Med Decis Making 1994;14:52-58.
.. [2] Fleurence RL, Hollenbeak CS. Rates and probabilities in economic modelling: transformation,
   translation and appropriate application. PharmacoEconomics 2007;25(1):3-6.
.. [3] Gidwani R, Russell LB. Estimating transition probabilities from published evidence: a tutorial
   for decision modelers. PharmacoEconomics 2020;38:1153-1164.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

import numpy as np

__all__ = [
    "DAYS_PER_YEAR",
    "MONTHS_PER_YEAR",
    "UNIT_IN_YEARS",
    "RateConversion",
    "UnitError",
    "from_years",
    "rate_from_risk",
    "rate_per_year",
    "rescale_risk",
    "risk_from_rate",
    "to_years",
]

DAYS_PER_YEAR: float = 365.25
"""Days per year (Julian year; common practice, no source)."""

MONTHS_PER_YEAR: float = 12.0
"""Months per year (common practice, no source)."""

UNIT_IN_YEARS: Mapping[str, float] = MappingProxyType({
    "days": 1.0 / DAYS_PER_YEAR,
    "weeks": 7.0 / DAYS_PER_YEAR,
    "months": 1.0 / MONTHS_PER_YEAR,
    "years": 1.0,
})
"""Length of one unit in years (read-only)."""


class UnitError(ValueError):
    """An argument of a unit or rate/risk conversion is outside its domain."""


def _number(func: str, name: str, value: Any) -> float:
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        raise UnitError(f"{func}: {name} must be a real number, got {value!r}")
    return float(value)


def _check(func: str, name: str, value: Any, rule: str) -> float:
    """Check ``value`` against ``rule``: 'positive', 'nonnegative', 'nonnegative_or_inf', 'risk'."""
    v = _number(func, name, value)
    if rule == "positive":
        ok, text = v > 0.0 and math.isfinite(v), "> 0 and finite"
    elif rule == "nonnegative":
        ok, text = v >= 0.0 and math.isfinite(v), ">= 0 and finite"
    elif rule == "nonnegative_or_inf":
        ok, text = v >= 0.0, ">= 0 (inf allowed, NaN not)"
    elif rule == "risk":
        ok, text = 0.0 <= v < 1.0, "in [0, 1)"
        if v == 1.0:
            text += " (a risk of 1 corresponds to an infinite rate)"
    else:  # pragma: no cover - programming error
        raise AssertionError(rule)
    if not ok:
        raise UnitError(f"{func}: {name} must be {text}, got {v!r}")
    return v


def _unit(func: str, unit: Any) -> float:
    try:
        return UNIT_IN_YEARS[unit]
    except (KeyError, TypeError):
        raise UnitError(f"{func}: unit must be one of {', '.join(map(repr, UNIT_IN_YEARS))}, "
                        f"got {unit!r}") from None


def to_years(value: float, unit: str) -> float:
    """Convert a duration to years.

    Parameters
    ----------
    value : float
        Duration, ``>= 0`` (``inf`` allowed, e.g. an unlimited horizon).
    unit : {"days", "weeks", "months", "years"}
        Unit of ``value``.

    Returns
    -------
    float
        ``value`` in years, using 365.25 days and 12 months per year (common practice, no source).

    Raises
    ------
    UnitError
        Unknown unit, or a negative / NaN value.
    """
    factor = _unit("to_years", unit)
    return _check("to_years", "value", value, "nonnegative_or_inf") * factor


def from_years(value: float, unit: str) -> float:
    """Convert a duration in years to ``unit`` (inverse of :func:`to_years`)."""
    factor = _unit("from_years", unit)
    return _check("from_years", "value", value, "nonnegative_or_inf") / factor


def rate_per_year(value: float, per: float = 1.0, unit: str = "years") -> float:
    """Constant rate per person-year from "``value`` events per ``per`` person-``unit``".

    Parameters
    ----------
    value : float
        Number of events, ``>= 0`` and finite.
    per : float
        Amount of person-time the events are counted over, ``> 0``, in ``unit``.
    unit : {"days", "weeks", "months", "years"}
        Unit of the person-time.

    Returns
    -------
    float
        ``value / (per * unit_in_years)``, e.g. 3 per 1000 person-years gives 0.003 per year and
        3 per 1000 person-months gives 0.036 per year.
    """
    factor = _unit("rate_per_year", unit)
    v = _check("rate_per_year", "value", value, "nonnegative")
    n = _check("rate_per_year", "per", per, "positive")
    return v / (n * factor)


@dataclass(frozen=True)
class RateConversion:
    """Result of :func:`rate_from_risk`.

    Attributes
    ----------
    rate : float
        Constant rate per year.
    risk : float
        The risk converted.
    period_years : float
        The period of the risk, in years.
    note : str
        Human-readable statement of the assumption applied and the numbers in and out, for
        reports and audit trails.
    """

    rate: float
    risk: float
    period_years: float
    note: str


def rate_from_risk(p: float, period: float, unit: str = "years") -> RateConversion:
    """Constant rate per year equivalent to a risk ``p`` over ``period``.

    Parameters
    ----------
    p : float
        Risk (probability) of the event within the period, in ``[0, 1)``.
    period : float
        Length of the period, ``> 0`` and finite, in ``unit``.
    unit : {"days", "weeks", "months", "years"}
        Unit of ``period``.

    Returns
    -------
    RateConversion
        ``rate = -ln(1 - p) / t`` (``-log1p(-p) / t``) with ``t`` the period in years, and a ``note``
        recording the constant-rate assumption with input and output.

    Raises
    ------
    UnitError
        ``p`` outside ``[0, 1)`` (``p = 1`` would be an infinite rate), a period that is not positive
        and finite, or an unknown unit.

    Notes
    -----
    Assumes the rate is constant over the period, :math:`r = -\\ln(1 - p)/t` (Miller & Homan 1994;
    Fleurence & Hollenbeak 2007). For one exit only; see the module notes for competing exits.

    References
    ----------
    .. [1] Miller DK, Homan SM. Med Decis Making 1994;14:52-58.
    .. [2] Fleurence RL, Hollenbeak CS. PharmacoEconomics 2007;25(1):3-6.
    """
    factor = _unit("rate_from_risk", unit)
    risk = _check("rate_from_risk", "p", p, "risk")
    per = _check("rate_from_risk", "period", period, "positive")
    years = per * factor
    rate = -math.log1p(-risk) / years
    period_text = f"{per!r} {unit}" + ("" if unit == "years" else f" (t = {years!r} years)")
    note = (f"Constant-rate assumption applied, r = -ln(1 - p) / t (Miller & Homan 1994; Fleurence & "
            f"Hollenbeak 2007): risk p = {risk!r} over {period_text} gives rate r = {rate!r} per year.")
    return RateConversion(rate=rate, risk=risk, period_years=years, note=note)


def risk_from_rate(rate: float, period: float, unit: str = "years") -> float:
    """Risk over ``period`` for a constant rate per year: :math:`p = 1 - e^{-r t}`.

    Parameters
    ----------
    rate : float
        Constant rate per year, ``>= 0`` and finite.
    period : float
        Length of the period, ``> 0`` and finite, in ``unit``.
    unit : {"days", "weeks", "months", "years"}
        Unit of ``period`` (default years).

    Returns
    -------
    float
        ``-expm1(-rate * t)`` with ``t`` in years (Miller & Homan 1994; Fleurence & Hollenbeak
        2007); about ``rate * t`` when that is small.
    """
    factor = _unit("risk_from_rate", unit)
    r = _check("risk_from_rate", "rate", rate, "nonnegative")
    per = _check("risk_from_rate", "period", period, "positive")
    return -math.expm1(-r * per * factor)


def rescale_risk(p: float, period: float, new_period: float) -> float:
    """Risk over ``new_period`` equivalent to risk ``p`` over ``period`` at a constant rate.

    Parameters
    ----------
    p : float
        Risk over ``period``, in ``[0, 1)``.
    period, new_period : float
        Period lengths in the same (any) unit, ``> 0`` and finite.

    Returns
    -------
    float
        :math:`p' = 1 - (1 - p)^{t'/t}`, computed as ``-expm1((t'/t) * log1p(-p))`` (Miller &
        Homan 1994; Fleurence & Hollenbeak 2007). Rescaling a probability by ``t'/t`` linearly
        is wrong except as a first-order approximation.
    """
    risk = _check("rescale_risk", "p", p, "risk")
    t = _check("rescale_risk", "period", period, "positive")
    t_new = _check("rescale_risk", "new_period", new_period, "positive")
    return -math.expm1((t_new / t) * math.log1p(-risk))
