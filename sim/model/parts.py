"""The parts of a multi-state model: states, transitions on clocks, background mortality, the
horizon and strategies. Frozen data classes, validated once at construction with the checks of
:mod:`sim.model.checks`, holding read-only tables (:class:`~sim.model.FrozenMap`); each reports every
problem it finds as one :class:`~sim.model.ModelError` whose key paths use the scenario file's names.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import Enum
from typing import Any, Mapping

import numpy as np

from ..hazards import WANING_SCALES, Hazard, PiecewiseConstant
from ..problems import KeyPath, ValidationError
from .checks import Problems, flag, number, number_map, string
from .errors import ModelError
from .frozen import FrozenMap

__all__ = ["BACKGROUND", "Clock", "State", "Waning", "MAX_WANING_YEARS", "Transition", "BackgroundMortality",
           "scaled_background", "Horizon", "Strategy", "item_key"]

BACKGROUND = "background death"


def item_key(name: Any) -> str:
    """How an item of a list of tables (a state, transition, strategy) is named in a key path: by its
    ``name``, or by the ``repr`` of an invalid name (a path part that is an int means a position)."""
    return name if isinstance(name, str) else repr(name)


def _set(obj: object, **values: object) -> None:
    for name, value in values.items():
        object.__setattr__(obj, name, value)


class Clock(str, Enum):
    """The time scale a transition's hazard is written on.

    AGE: attained age (entry age + time since entry). ENTRY: time since entry into the model.
    STATE: time since entering the current state (clock reset on every entry: semi-Markov).
    """

    AGE = "age"
    ENTRY = "entry"
    STATE = "state"

    @classmethod
    def parse(cls, value: "str | Clock", path: KeyPath = ("clock",)) -> "Clock":
        """The clock named ``value``; a :class:`ModelError` at ``path`` otherwise."""
        try:
            return cls(value)
        except (ValueError, TypeError):
            raise ModelError(tuple(path), f"must be one of {[c.value for c in cls]}", value) from None


@dataclass(frozen=True)
class State:
    """A health state. ``absorbing`` states (e.g. death) have no exits."""

    name: str
    absorbing: bool = False

    def __post_init__(self) -> None:
        found = Problems()
        where = ("states", item_key(self.name))
        found.check(string, (*where, "name"), self.name, error=ModelError)
        absorbing = found.check(flag, (*where, "absorbing"), self.absorbing, error=ModelError)
        found.raise_if_any(ModelError)
        _set(self, absorbing=absorbing)


MAX_WANING_YEARS = 1000.0
"""Waning times are at most 1,000 years (far beyond any follow-up; keeps the window's quadrature
panels on a range where the hazards are finite)."""


@dataclass(frozen=True)
class Waning:
    """A hazard ratio that holds until ``start``, moves to 1 by ``end`` and is 1 afterwards, on the
    transition's clock (years since entry, or since entering the state).

    ``scale``: ``"log"`` (the log hazard ratio moves linearly; the default) or ``"hr"`` (the ratio
    itself moves linearly). Problems are at ``("start",)``, ``("end",)``, ``("scale",)``; use
    :meth:`at` to place them under the waning's key path.
    """

    start: float
    end: float
    scale: str = "log"

    def __post_init__(self) -> None:
        found = Problems()
        start = found.check(number, ("start",), self.start, minimum=0.0, error=ModelError)
        end = found.check(number, ("end",), self.end, minimum=0.0, maximum=MAX_WANING_YEARS, error=ModelError)
        scale = found.check(string, ("scale",), self.scale, choices=WANING_SCALES, error=ModelError)
        if start is not None and end is not None and not end > start:
            found.add(("end",), f"must be > waning.start ({start:g} years): the ratio wanes from start to end",
                      self.end)
        found.raise_if_any(ModelError)
        _set(self, start=start, end=end, scale=scale)

    @classmethod
    def at(cls, path: KeyPath, start: Any, end: Any, scale: Any = "log") -> "Waning":
        """A :class:`Waning`, or a :class:`ModelError` whose problems are under ``path``."""
        try:
            return cls(start, end, scale)
        except ValidationError as err:
            raise ModelError.of([p.located(path=(*path, *p.path)) for p in err.problems]) from None

    def words(self) -> str:
        """``'wanes to 1 on the log scale from 2 to 5 years'``, for descriptions."""
        scale = "log scale" if self.scale == "log" else "hazard-ratio scale"
        return f"wanes to 1 on the {scale} from {self.start:g} to {self.end:g} years"


@dataclass(frozen=True)
class Transition:
    """A possible move ``source -> target`` (the scenario keys ``from`` and ``to``) with its
    cause-specific hazard on a clock.

    Optional effects (docs/methods.md, 'Treatment-effect waning' and 'The larger of a fit and the
    background hazard'): ``hazard_ratio`` multiplies ``hazard`` in every strategy, waning to 1 as
    ``waning`` says; with ``at_least_background`` the hazard (after every ratio or replacement of the
    strategy) is at least the background hazard. ``hazard`` itself stays the hazard as given (the
    fit); :meth:`sim.model.Model.resolve` applies the effects. The rules that relate them to the
    clock, the background and the strategies are the model's (:mod:`sim.model.effects`).
    """

    name: str
    source: str
    target: str
    hazard: Hazard
    clock: Clock = Clock.ENTRY
    hazard_ratio: float | None = None
    waning: Waning | None = None
    at_least_background: bool = False

    def __post_init__(self) -> None:
        found = Problems()
        where = ("transitions", item_key(self.name))
        found.check(string, (*where, "name"), self.name, error=ModelError)
        found.check(string, (*where, "from"), self.source, error=ModelError)
        found.check(string, (*where, "to"), self.target, error=ModelError)
        clock = found.check(Clock.parse, self.clock, (*where, "clock"))
        if not isinstance(self.hazard, Hazard):
            found.add((*where, "hazard"), "must be a Hazard", self.hazard)
        hr = self.hazard_ratio
        if hr is not None:
            hr = found.check(number, (*where, "hazard_ratio"), hr, minimum=0.0, error=ModelError)
        if self.waning is not None and not isinstance(self.waning, Waning):
            found.add((*where, "waning"), "must be a Waning (start, end, scale) or None", self.waning)
        floor = found.check(flag, (*where, "at_least_background"), self.at_least_background, error=ModelError)
        found.raise_if_any(ModelError)
        _set(self, clock=clock, hazard_ratio=hr, at_least_background=floor)


def _hazard_map(found: Problems, path: KeyPath, hazards: Any) -> FrozenMap:
    """A read-only table ``name = Hazard``; problems at ``(*path, name)``."""
    if not isinstance(hazards, Mapping):
        found.add(path, "must be a table of name = hazard", hazards)
        return FrozenMap()
    for key, h in hazards.items():
        if not isinstance(key, str) or not key.strip():
            found.add(path, "names must be non-empty strings", key)
        elif not isinstance(h, Hazard):
            found.add((*path, key), "must be a Hazard", h)
    return FrozenMap(hazards)


@dataclass(frozen=True)
class BackgroundMortality:
    """Death from other causes, competing from every non-absorbing state.

    ``hazards`` maps each sex label of the population's sex mix (or ``"all"``) to a hazard on
    ``clock`` (attained age by default: a Gompertz law or a piecewise-constant life table); it is kept
    as a read-only :class:`~sim.model.FrozenMap`. In a scenario file the hazards are the tables
    ``[background.<sex>]``, so their problems are at ``("background", sex)``.

    ``multiplier`` (> 0, finite; default 1) is a standardised mortality ratio applied to every
    background hazard: the model's background hazard is ``multiplier * h(t)`` (docs/methods.md,
    'Background mortality multiplier'). ``hazards`` keep the hazards as given; :meth:`hazard_for`
    gives the scaled one the model uses. A piecewise-constant hazard (a life table) stays piecewise
    constant (its rates scaled), so the exact solver still sees its band edges; any other hazard is
    wrapped by :meth:`sim.hazards.Hazard.scaled`. A multiplier of 1 returns the hazards themselves.
    """

    target: str
    hazards: Mapping[str, Hazard]
    clock: Clock = Clock.AGE
    multiplier: float = 1.0

    def __post_init__(self) -> None:
        found = Problems()
        found.check(string, ("background", "to"), self.target, error=ModelError)
        clock = found.check(Clock.parse, self.clock, ("background", "clock"))
        hazards = _hazard_map(found, ("background",), self.hazards)
        if isinstance(self.hazards, Mapping) and not self.hazards:
            found.add(("background",), "must give at least one hazard (per sex or 'all')", {})
        multiplier = found.check(number, ("background", "multiplier"), self.multiplier, minimum=0.0,
                                 strict_min=True, error=ModelError)
        found.raise_if_any(ModelError)
        scaled = {}
        for sex, h in hazards.items():
            try:
                scaled[sex] = scaled_background(h, multiplier)
            except ValidationError:  # e.g. a band rate times the multiplier beyond the largest double
                found.add(("background", "multiplier"), f"makes the background hazard of {sex!r} too large "
                                                        f"(not finite)", multiplier)
        found.raise_if_any(ModelError)
        _set(self, clock=clock, hazards=hazards, multiplier=multiplier)
        object.__setattr__(self, "_scaled", FrozenMap(scaled))  # derived: not a field (no part in ==, hash)

    @property
    def scaled_hazards(self) -> Mapping[str, Hazard]:
        """Per sex (or ``"all"``), the hazard times :attr:`multiplier` (the given hazards when it is 1)."""
        return self._scaled

    def hazard_for(self, sex: str) -> Hazard:
        """The background hazard (times :attr:`multiplier`) of ``sex``, or of ``"all"``."""
        return self._scaled.get(sex, self._scaled.get("all"))


def scaled_background(h: Hazard, multiplier: float) -> Hazard:
    """``multiplier * h``: ``h`` itself when the multiplier is 1; a piecewise-constant hazard with its
    rates scaled (still piecewise constant: the exact solver's band handling sees its edges); else
    :meth:`sim.hazards.Hazard.scaled` (a proportional-hazards wrapper).

    Raises
    ------
    ValidationError
        A scaled rate is not finite, or ``multiplier`` is not a number >= 0.
    """
    if multiplier == 1.0:
        return h
    if type(h) is PiecewiseConstant:
        return PiecewiseConstant(h.breaks, tuple(float(r) * multiplier for r in h.rates))
    return h.scaled(multiplier)


MAX_AGE = 130.0


@dataclass(frozen=True)
class Horizon:
    """End of follow-up: ``value`` years since entry (scale ``"time"``) or attained age (``"age"``)."""

    value: float
    scale: str = "time"

    def __post_init__(self) -> None:
        found = Problems()
        scale = found.check(string, ("horizon", "scale"), self.scale, choices=("time", "age"), error=ModelError)
        value = found.check(number, ("horizon", "value"), self.value, minimum=0.0, strict_min=True,
                            error=ModelError)
        if scale == "age" and value is not None and value > MAX_AGE:
            found.add(("horizon", "value"), f"must be an attained age <= {MAX_AGE:g} when horizon.scale is 'age'",
                      self.value)
        found.raise_if_any(ModelError)
        _set(self, value=value)

    def time_limit(self, entry_age):
        """Follow-up time available to a patient entering at ``entry_age`` (numpy-broadcast)."""
        if self.scale == "time":
            return np.full(np.shape(entry_age), self.value)
        return np.maximum(self.value - np.asarray(entry_age, dtype=float), 0.0)


@dataclass(frozen=True)
class Strategy:
    """A named variant of the model: hazard ratios on, or replacement hazards for, named transitions,
    and costs it adds (e.g. a treatment's yearly cost while in a state, or a one-off cost at a move).
    ``waning`` says, per transition with a hazard ratio here, how that ratio wanes to 1.

    The five tables are kept as read-only :class:`~sim.model.FrozenMap`; problems are at
    ``("strategies", name, key, item)``.
    """

    name: str
    hazard_ratios: Mapping[str, float] = field(default_factory=FrozenMap)
    replacements: Mapping[str, Hazard] = field(default_factory=FrozenMap)
    state_costs: Mapping[str, float] = field(default_factory=FrozenMap)
    transition_costs: Mapping[str, float] = field(default_factory=FrozenMap)
    waning: Mapping[str, Waning] = field(default_factory=FrozenMap)

    def __post_init__(self) -> None:
        found = Problems()
        where = ("strategies", item_key(self.name))
        found.check(string, (*where, "name"), self.name, error=ModelError)
        hrs = found.check(number_map, (*where, "hazard_ratios"), self.hazard_ratios, minimum=0.0, error=ModelError)
        replacements = _hazard_map(found, (*where, "replacements"), self.replacements)
        costs = {key: found.check(number_map, (*where, key), getattr(self, key), error=ModelError)
                 for key in ("state_costs", "transition_costs")}
        waning = self.waning
        if not isinstance(waning, Mapping):
            found.add((*where, "waning"), "must be a table of transition = waning", waning)
            waning = {}
        for key, w in waning.items():
            if not isinstance(w, Waning):
                found.add((*where, "waning", item_key(key)), "must be a Waning (start, end, scale)", w)
        for t in sorted(set(hrs or ()) & set(replacements)):
            found.add((*where, "hazard_ratios", t), "give either a hazard ratio or a replacement hazard for a "
                                                    "transition, not both", hrs[t])
        found.raise_if_any(ModelError)
        _set(self, hazard_ratios=FrozenMap(hrs), replacements=replacements, waning=FrozenMap(waning),
             **{key: FrozenMap(table) for key, table in costs.items()})
