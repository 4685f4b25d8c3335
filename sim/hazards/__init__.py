"""Hazard families and unit conversions: the hazard h(t), cumulative hazard H(t), survival S = exp(-H)
and a stable conditional inverse of H for each family (exponential, Weibull, Gompertz,
Gompertz-Makeham, log-logistic, log-normal, gamma, piecewise-constant, proportional hazards, a waning hazard ratio, the larger of a fit and a floor), and the
conversions between rates, risks over a period and time units. See docs/methods.md."""

from .base import KERNEL_ERRSTATE, Hazard, HazardParameterError
from .dimensions import Dimension, from_year_units, to_year_units
from .exponential import Exponential
from .floor import AtLeastHazard, Crossing, EntryAgeFloor, ShiftedClock, by_entry_age, entry_age_times
from .gamma import Gamma
from .gompertz import Gompertz, GompertzMakeham, gompertz_times
from .level_match import FamilyStart, matched_start
from .lanes import LaneHazards
from .lognormal import LogNormal
from .piecewise import PiecewiseConstant
from .proportional import ProportionalHazards
from .registry import FAMILIES, FAMILY_DIMENSIONS, make_hazard
from .shape_scale import LogLogistic, Weibull, loglogistic_times, weibull_times
from .waning import WANING_SCALES, WaningHazardRatio, rough_points, waning_ratio
from .units import (DAYS_PER_YEAR, MONTHS_PER_YEAR, UNIT_IN_YEARS, RateConversion, UnitError, from_years,
                    rate_from_risk, rate_per_year, rescale_risk, risk_from_rate, to_years)

__all__ = ["FAMILY_DIMENSIONS", "Dimension", "from_year_units", "to_year_units", "FAMILIES", "KERNEL_ERRSTATE",
           "FamilyStart", "matched_start", "Exponential", "Gamma", "Gompertz", "GompertzMakeham", "gompertz_times", "Hazard", "HazardParameterError", "LogLogistic", "LogNormal", "PiecewiseConstant", "ProportionalHazards",
           "Weibull", "make_hazard", "DAYS_PER_YEAR", "MONTHS_PER_YEAR", "UNIT_IN_YEARS", "RateConversion",
           "UnitError", "from_years", "rate_from_risk", "rate_per_year", "rescale_risk", "risk_from_rate",
           "to_years", "AtLeastHazard", "Crossing", "ShiftedClock", "EntryAgeFloor", "by_entry_age", "entry_age_times", "WANING_SCALES", "WaningHazardRatio",
           "rough_points", "waning_ratio", "LaneHazards", "loglogistic_times", "weibull_times"]
