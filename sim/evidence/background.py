"""Where a fitted hazard falls below the general population's: a fitted all-cause hazard, extrapolated,
may drop under the background mortality hazard at the patients' attained age, which is implausible
(docs/methods.md, 'Survival fits from trial evidence'). This module finds those stretches; the remedy
(the larger of the two hazards) is a transition option chosen, and reported, elsewhere.
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
from ..model import BackgroundMortality, Clock

__all__ = ["BelowBackground", "below_background"]


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

    def describe(self) -> str:
        if not self.intervals:
            return f"{self.label}, entry age {self.entry_age:g}: the fitted hazard stays above the background"
        parts = ", ".join(f"{a:.3g}-{b:.3g}" for a, b in self.intervals)
        return (f"{self.label}, entry age {self.entry_age:g}: the fitted hazard is below the background "
                f"hazard at years {parts} since entry (attained ages from {self.entry_age + self.intervals[0][0]:.3g})")


def _per_year(fitted: Any, unit: str):
    """The fitted hazard (clock in ``unit``, per ``unit``) as a hazard per year on a clock in years."""
    y = UNIT_IN_YEARS[unit]
    return lambda t_years: np.asarray(fitted.hazard(np.asarray(t_years) / y), dtype=np.float64) / y


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
    Compares :math:`h_\\mathrm{fit}(t)` with :math:`h_\\mathrm{bg}(a_0 + t)` on :math:`[0, T]`.
    Stretches shorter than the grid spacing between two scan points may be missed.
    """
    if isinstance(background, BackgroundMortality):
        hazards: Mapping[str, Hazard] = background.scaled_hazards  # times the multiplier (SMR)
        on_age = background.clock == Clock.AGE
    else:
        hazards, on_age = {"all": background}, True
    if not (math.isfinite(entry_age) and entry_age >= 0 and math.isfinite(horizon) and horizon > 0):
        from ..problems import ValidationError

        raise ValidationError(("entry_age" if not entry_age >= 0 else "horizon",),
                              "entry_age must be >= 0 and horizon > 0, both finite", (entry_age, horizon))
    h_fit = _per_year(fitted, unit)
    t = np.linspace(0.0, horizon, grid)
    out = []
    for label, bg in hazards.items():
        shift = entry_age if on_age else 0.0

        def gap(x: NDArray[np.float64] | float) -> NDArray[np.float64]:
            with np.errstate(divide="ignore", invalid="ignore"):
                return h_fit(x) - bg.hazard(np.asarray(x) + shift)

        below = gap(t) < 0.0
        intervals = []
        edges = np.flatnonzero(below[1:] != below[:-1])
        starts = [0.0] if below[0] else []
        ends = []
        for i in edges:
            a, b = t[i], t[i + 1]
            root = optimize.brentq(lambda x: float(gap(x)), a, b, xtol=1e-9) \
                if np.isfinite(gap(a)) and np.isfinite(gap(b)) else 0.5 * (a + b)
            (ends if below[i] else starts).append(float(root))
        if below[-1]:
            ends.append(float(horizon))
        intervals = tuple(zip(starts, ends))
        out.append(BelowBackground(str(label), float(entry_age), intervals))
    return out
