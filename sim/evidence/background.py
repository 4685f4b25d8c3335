"""Where a fitted hazard falls below the general population's: a fitted all-cause hazard, extrapolated,
may drop under the background mortality hazard at the patients' attained age, which is implausible
(docs/methods.md, 'Survival fits from trial evidence'). This module puts the model's background hazard
on the fit's clock (:func:`background_on_fit_clock`: time since the start of follow-up in the data's
unit, per that unit), gives the years of follow-up a scenario's horizon leaves (:func:`follow_up_years`)
and finds where a fit falls below the background (:func:`below_background`); the remedy (the larger of
the two hazards) is a transition option chosen, and reported, elsewhere. The evidence window and
``hazardtrace fit --background`` both call these.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy import optimize

from ..hazards import UNIT_IN_YEARS, Hazard
from ..model import BackgroundMortality, Clock, Horizon
from ..problems import ValidationError

__all__ = ["BelowBackground", "below_background", "BackgroundOnFitClock", "background_on_fit_clock",
           "follow_up_years"]


@dataclass(frozen=True)
class BelowBackground:
    """Stretches of follow-up where the fitted hazard is below the background hazard.

    Attributes
    ----------
    label : the background hazard's label (sex, or ``"all"``).
    entry_age : attained age at time 0 (years).
    intervals : ``(start, end)`` pairs in years since time 0 within ``[0, horizon]``.
    """

    label: str
    entry_age: float
    intervals: tuple[tuple[float, float], ...]

    @property
    def first(self) -> float | None:
        """The first time (years) at which the fitted hazard is below the background, or None."""
        return self.intervals[0][0] if self.intervals else None

    def intervals_in(self, unit: str) -> tuple[tuple[float, float], ...]:
        """:attr:`intervals` in ``unit`` (e.g. the data's unit, for a plot on the fit's clock)."""
        y = UNIT_IN_YEARS[_unit(unit)]
        return tuple((a / y, b / y) for a, b in self.intervals)

    def describe(self) -> str:
        if not self.intervals:
            return f"{self.label}, entry age {self.entry_age:g}: the fitted hazard stays above the background"
        parts = ", ".join(f"{a:.3g}-{b:.3g}" for a, b in self.intervals)
        return (f"{self.label}, entry age {self.entry_age:g}: the fitted hazard is below the background "
                f"hazard at years {parts} since entry (attained ages from {self.entry_age + self.intervals[0][0]:.3g})")


def _unit(unit: str) -> str:
    if unit not in UNIT_IN_YEARS:
        raise ValidationError(("unit",), f"must be one of {', '.join(UNIT_IN_YEARS)}", unit)
    return unit


@dataclass(frozen=True)
class BackgroundOnFitClock:
    """One background hazard read on a fit's clock.

    The fit's clock is time :math:`t` since the start of follow-up in ``unit``; the background hazard
    :math:`h_\\mathrm{bg}` is per year on its own clock in years (attained age, or time since entry).
    With :math:`y` the years per ``unit`` and :math:`s` the background clock at :math:`t = 0` (the entry
    age on the age clock, else 0):

    .. math:: h(t) = y\\, h_\\mathrm{bg}(s + y t), \\qquad
              H(t) = \\int_0^t h(u)\\, du = H_\\mathrm{bg}(s + y t) - H_\\mathrm{bg}(s)

    (a change of variable; a rate per year times years per unit is a rate per unit, docs/methods.md,
    'Survival fits from trial evidence'). :meth:`sf` is :math:`e^{-H(t)}`, survival from entry.

    Attributes
    ----------
    label : the background hazard's label (sex, or ``"all"``).
    background : the (multiplier-scaled) background hazard on its clock in years.
    shift : the background clock (years) at ``t = 0``.
    unit : the fit's time unit.
    """

    label: str
    background: Hazard
    shift: float
    unit: str

    @property
    def years_per_unit(self) -> float:
        return UNIT_IN_YEARS[self.unit]

    def _clock(self, t: Any) -> NDArray[np.float64]:
        return self.shift + self.years_per_unit * np.asarray(t, dtype=np.float64)

    def hazard(self, t: Any) -> NDArray[np.float64]:
        """Hazard per ``unit`` at ``t`` units since the start of follow-up."""
        return np.asarray(self.background.hazard(self._clock(t)), dtype=np.float64) * self.years_per_unit

    def cumhazard(self, t: Any) -> NDArray[np.float64]:
        """Cumulative hazard from the start of follow-up to ``t`` (units)."""
        start = np.asarray(self.background.cumhazard(np.array([self.shift])), dtype=np.float64)[0]
        return np.asarray(self.background.cumhazard(self._clock(t)), dtype=np.float64) - start

    def sf(self, t: Any) -> NDArray[np.float64]:
        """Background survival from the start of follow-up to ``t``."""
        return np.exp(-self.cumhazard(t))


def background_on_fit_clock(background: Hazard | BackgroundMortality, *, unit: str,
                            entry_age: float) -> list[BackgroundOnFitClock]:
    """The model's background hazard(s) on a fit's clock (:class:`BackgroundOnFitClock`).

    Parameters
    ----------
    background : Hazard or BackgroundMortality
        General-population mortality: a hazard on attained age in years, or the model's
        ``[background]`` (one result per sex, each times the model's multiplier; a background on the
        ``entry`` clock is read at time since entry, ignoring ``entry_age``).
    unit : str
        The fit's (the data's) time unit.
    entry_age : float
        Attained age (years) at time 0 of the data.

    Raises
    ------
    ValidationError
        An unknown unit, or an entry age that is negative or not finite.
    """
    _unit(unit)
    if not (math.isfinite(entry_age) and entry_age >= 0):
        raise ValidationError(("entry_age",), "must be a finite age >= 0 (years)", entry_age)
    if isinstance(background, BackgroundMortality):
        hazards: Mapping[str, Hazard] = background.scaled_hazards  # times the multiplier (SMR)
        on_age = background.clock == Clock.AGE
    else:
        hazards, on_age = {"all": background}, True
    shift = float(entry_age) if on_age else 0.0
    return [BackgroundOnFitClock(str(label), hz, shift, unit) for label, hz in hazards.items()]


def follow_up_years(horizon: Horizon, entry_age: float) -> float:
    """Years of follow-up the model's horizon leaves a patient entering at ``entry_age``: the horizon
    itself on the ``time`` scale, ``horizon - entry_age`` on the ``age`` scale (may be <= 0)."""
    return float(horizon.value) - (float(entry_age) if horizon.scale == "age" else 0.0)


def below_background(fitted: Any, background: Hazard | BackgroundMortality, *, entry_age: float,
                     horizon: float, unit: str = "years", grid: int = 4001) -> list[BelowBackground]:
    """Find where ``fitted`` drops below the background hazard at attained age.

    Parameters
    ----------
    fitted : hazard
        The fitted hazard (e.g. ``Fit.hazard()``), its clock time since the start of follow-up in
        ``unit``.
    background : Hazard or BackgroundMortality
        General-population mortality: a hazard on attained age in years, or the model's background
        (one result per sex; a background on another clock than age is read at time since entry).
    entry_age : float
        Attained age (years) at time 0.
    horizon : float
        Years of follow-up to examine.
    unit : str
        Time unit of the fitted hazard.
    grid : int
        Points of the first scan; each change of sign is then located by Brent's method to 1e-9 years.

    Returns
    -------
    list of BelowBackground
        One per background hazard.

    Notes
    -----
    Compares :math:`h_\\mathrm{fit}(t)` with the background on the fit's clock,
    :math:`y\\, h_\\mathrm{bg}(a_0 + y t)` (:func:`background_on_fit_clock`), on :math:`[0, T / y]`.
    Stretches shorter than the grid spacing between two scan points may be missed.
    """
    if not (math.isfinite(entry_age) and entry_age >= 0 and math.isfinite(horizon) and horizon > 0):
        raise ValidationError(("entry_age" if not entry_age >= 0 else "horizon",),
                              "entry_age must be >= 0 and horizon > 0, both finite", (entry_age, horizon))
    y = UNIT_IN_YEARS[_unit(unit)]
    end = horizon / y  # on the fit's clock
    t = np.linspace(0.0, end, grid)
    out = []
    for bg in background_on_fit_clock(background, unit=unit, entry_age=entry_age):

        def gap(x: NDArray[np.float64] | float) -> NDArray[np.float64]:
            with np.errstate(divide="ignore", invalid="ignore"):
                return np.asarray(fitted.hazard(np.asarray(x)), dtype=np.float64) - bg.hazard(x)

        below = gap(t) < 0.0
        edges = np.flatnonzero(below[1:] != below[:-1])
        starts = [0.0] if below[0] else []
        ends = []
        for i in edges:
            a, b = t[i], t[i + 1]
            root = optimize.brentq(lambda x: float(gap(x)), a, b, xtol=1e-9 / y) \
                if np.isfinite(gap(a)) and np.isfinite(gap(b)) else 0.5 * (a + b)
            (ends if below[i] else starts).append(float(root) * y)
        if below[-1]:
            ends.append(float(horizon))
        out.append(BelowBackground(bg.label, float(entry_age), tuple(zip(starts, ends))))
    return out
