"""The validated multi-state patient model: states, transitions on clocks, background mortality, the
entry population, the horizon, strategies and the valuation (utilities, costs, discounting).
Everything downstream (engine, exact solver, cycle-based traces) reads a :class:`Model`.

Model objects are frozen, hashable and deep-immutable (their tables are :class:`FrozenMap`); they
check their values on construction with :mod:`sim.model.checks` (the one number check of ``sim``)
and report every problem at once as a :class:`ModelError` (a :class:`sim.problems.ValidationError`)
whose key paths use the scenario file's names, with items of a list named by their ``name``:
``("transitions", "progression", "from")``.
"""

from . import checks
from .checks import Problems
from .effects import transition_effect_words
from .errors import ModelError, PopulationError, ValuationError
from .frozen import FrozenMap
from .multistate import Model, ResolvedExit, is_constant_hazard
from .parts import BACKGROUND, BackgroundMortality, Clock, Horizon, State, Strategy, Transition, Waning, item_key
from .settings import RunSettings
from .population import EmpiricalAge, EntryAge, FixedAge, InitialState, NormalAge, Population, UniformAge
from .valuation import Valuation

__all__ = ["checks", "Problems", "FrozenMap", "BACKGROUND", "BackgroundMortality", "Clock", "Horizon", "Model",
           "ModelError", "ResolvedExit", "State", "Strategy", "Transition", "Waning", "is_constant_hazard", "item_key",
           "EmpiricalAge", "EntryAge", "FixedAge", "InitialState", "NormalAge", "Population", "PopulationError", "UniformAge",
           "Valuation", "ValuationError", "RunSettings", "transition_effect_words"]
