"""The validated multi-state patient model: states, transitions on clocks, background mortality, the
entry population, the horizon, strategies and the valuation (utilities, costs, discounting).
Everything downstream (engine, exact solver, cycle-based traces) reads a :class:`Model`."""

from .multistate import (BACKGROUND, BackgroundMortality, Clock, Horizon, Model, ModelError, ResolvedExit, State,
                         Strategy, Transition)
from .population import EmpiricalAge, EntryAge, FixedAge, NormalAge, Population, PopulationError, UniformAge
from .valuation import Valuation, ValuationError

__all__ = ["BACKGROUND", "BackgroundMortality", "Clock", "Horizon", "Model", "ModelError", "ResolvedExit", "State",
           "Strategy", "Transition", "EmpiricalAge", "EntryAge", "FixedAge", "NormalAge", "Population",
           "PopulationError", "UniformAge", "Valuation", "ValuationError"]
