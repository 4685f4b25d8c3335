"""The multi-state patient model: states, transitions on clocks, background mortality, population,
horizon and strategies. Frozen data classes validated once at construction; everything downstream
(engine, exact solver, cohort approximations) reads a :class:`Model`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from enum import Enum
from typing import Mapping

import numpy as np

from ..hazards import Exponential, Hazard, PiecewiseConstant, ProportionalHazards
from .population import Population
from .valuation import Valuation

__all__ = [
    "Clock", "State", "Transition", "BackgroundMortality", "Horizon", "Strategy", "Model",
    "ModelError", "ResolvedExit", "BACKGROUND",
]

BACKGROUND = "background death"


class ModelError(ValueError):
    """Invalid model; the message names the field, the value and the rule."""


class Clock(str, Enum):
    """The time scale a transition's hazard is written on.

    AGE: attained age (entry age + time since entry). ENTRY: time since entry into the model.
    STATE: time since entering the current state (clock reset on every entry: semi-Markov).
    """

    AGE = "age"
    ENTRY = "entry"
    STATE = "state"

    @classmethod
    def parse(cls, value: "str | Clock", where: str = "clock") -> "Clock":
        try:
            return cls(value)
        except ValueError:
            raise ModelError(f"{where} must be one of {[c.value for c in cls]}, got {value!r}") from None


@dataclass(frozen=True)
class State:
    """A health state. ``absorbing`` states (e.g. death) have no exits."""

    name: str
    absorbing: bool = False


@dataclass(frozen=True)
class Transition:
    """A possible move ``source -> target`` with its cause-specific hazard on a clock."""

    name: str
    source: str
    target: str
    hazard: Hazard
    clock: Clock = Clock.ENTRY

    def __post_init__(self) -> None:
        object.__setattr__(self, "clock", Clock.parse(self.clock, f"transitions[{self.name!r}].clock"))
        if not isinstance(self.hazard, Hazard):
            raise ModelError(f"transitions[{self.name!r}].hazard must be a Hazard, got {self.hazard!r}")


@dataclass(frozen=True)
class BackgroundMortality:
    """Death from other causes, competing from every non-absorbing state.

    ``hazards`` maps each sex label of the population's sex mix (or ``"all"``) to a hazard on
    ``clock`` (attained age by default: a Gompertz law or a piecewise-constant life table).
    """

    target: str
    hazards: Mapping[str, Hazard]
    clock: Clock = Clock.AGE

    def __post_init__(self) -> None:
        object.__setattr__(self, "clock", Clock.parse(self.clock, "background.clock"))
        object.__setattr__(self, "hazards", dict(self.hazards))
        if not self.hazards:
            raise ModelError("background.hazards must give at least one hazard, got none")
        for sex, h in self.hazards.items():
            if not isinstance(h, Hazard):
                raise ModelError(f"background.hazards[{sex!r}] must be a Hazard, got {h!r}")


@dataclass(frozen=True)
class Horizon:
    """End of follow-up: ``value`` years since entry (scale ``"time"``) or attained age (``"age"``)."""

    value: float
    scale: str = "time"

    def __post_init__(self) -> None:
        if self.scale not in ("time", "age"):
            raise ModelError(f"horizon.scale must be 'time' or 'age', got {self.scale!r}")
        v = float(self.value)
        if not (math.isfinite(v) and v > 0):
            raise ModelError(f"horizon.value must be a finite number of years > 0, got {self.value!r}")
        if self.scale == "age" and v > 130:
            raise ModelError(f"horizon.value must be an attained age <= 130 when horizon.scale is 'age', "
                             f"got {self.value!r}")

    def time_limit(self, entry_age):
        """Follow-up time available to a patient entering at ``entry_age`` (numpy-broadcast)."""
        if self.scale == "time":
            return np.full(np.shape(entry_age), float(self.value))
        return np.maximum(float(self.value) - np.asarray(entry_age, dtype=float), 0.0)


@dataclass(frozen=True)
class Strategy:
    """A named variant of the model: hazard ratios on, or replacement hazards for, named transitions,
    and costs it adds (e.g. a treatment's yearly cost while in a state, or a one-off cost at a move)."""

    name: str
    hazard_ratios: Mapping[str, float] = field(default_factory=dict)
    replacements: Mapping[str, Hazard] = field(default_factory=dict)
    state_costs: Mapping[str, float] = field(default_factory=dict)
    transition_costs: Mapping[str, float] = field(default_factory=dict)

    def __post_init__(self) -> None:
        for name in ("hazard_ratios", "replacements", "state_costs", "transition_costs"):
            object.__setattr__(self, name, dict(getattr(self, name)))
        for name in ("state_costs", "transition_costs"):
            for k, v in getattr(self, name).items():
                if not (isinstance(v, (int, float)) and math.isfinite(v)):
                    raise ModelError(f"strategies[{self.name!r}].{name}[{k!r}] must be a finite number, got {v!r}")
        for t, hr in self.hazard_ratios.items():
            if not (isinstance(hr, (int, float)) and math.isfinite(hr) and hr >= 0):
                raise ModelError(f"strategies[{self.name!r}].hazard_ratios[{t!r}] must be a finite "
                                 f"number >= 0, got {hr!r}")
        both = set(self.hazard_ratios) & set(self.replacements)
        if both:
            raise ModelError(f"strategies[{self.name!r}] both replaces and applies a hazard ratio to "
                             f"{sorted(both)}; give one or the other")


@dataclass(frozen=True)
class ResolvedExit:
    """One competing exit of a state under a given strategy (what the engine and solvers consume).

    ``index`` is the exit's stable position in the model (transitions first, then background death
    per state), used to key random numbers; ``slot`` is its position among the state's exits.
    """

    index: int
    slot: int
    name: str
    source: int
    target: int
    clock: Clock
    hazards: tuple[Hazard, ...]  # one per sex code; identical entries if not sex-specific
    is_background: bool


@dataclass(frozen=True)
class Model:
    """A validated multi-state model.

    Parameters
    ----------
    states, transitions : the state space and the cause-specific transitions.
    population : entry ages, sex mix and initial state.
    horizon : end of follow-up.
    background : optional background mortality competing from every non-absorbing state.
    strategies : named variants; if empty, a single strategy ``"base"`` with no changes.
    valuation : utilities, costs and discount rates (default: none, 3.5% discounting).
    name : label for reports.
    """

    states: tuple[State, ...]
    transitions: tuple[Transition, ...]
    population: Population
    horizon: Horizon
    background: BackgroundMortality | None = None
    strategies: tuple[Strategy, ...] = ()
    valuation: Valuation = field(default_factory=Valuation)
    name: str = "model"

    def __post_init__(self) -> None:
        object.__setattr__(self, "states", tuple(self.states))
        object.__setattr__(self, "transitions", tuple(self.transitions))
        strategies = tuple(self.strategies) or (Strategy("base"),)
        object.__setattr__(self, "strategies", strategies)
        self._validate()

    # ------------------------------------------------------------------ validation
    def _validate(self) -> None:
        names = [s.name for s in self.states]
        if len(names) != len(set(names)):
            dup = sorted({n for n in names if names.count(n) > 1})
            raise ModelError(f"states: names must be unique, got duplicates {dup}")
        if not any(s.absorbing for s in self.states):
            raise ModelError("states: at least one state must be absorbing (e.g. death), got none")
        by_name = {s.name: s for s in self.states}
        tnames = [t.name for t in self.transitions]
        if BACKGROUND in tnames or len(tnames) != len(set(tnames)):
            raise ModelError(f"transitions: names must be unique and not {BACKGROUND!r}, got {tnames}")
        for t in self.transitions:
            where = f"transitions[{t.name!r}]"
            for end in ("source", "target"):
                if getattr(t, end) not in by_name:
                    raise ModelError(f"{where}.{end} must name a state {names}, got {getattr(t, end)!r}")
            if t.source == t.target:
                raise ModelError(f"{where}: source and target must differ, got {t.source!r} for both")
            if by_name[t.source].absorbing:
                raise ModelError(f"{where}.source {t.source!r} is absorbing; absorbing states have no exits")
        if self.background is not None:
            if self.background.target not in by_name or not by_name[self.background.target].absorbing:
                raise ModelError(f"background.target must name an absorbing state, got {self.background.target!r}")
            sexes = set(self.population.sexes)
            given = set(self.background.hazards)
            if given != {"all"} and not sexes <= given:
                raise ModelError(f"background.hazards must give a hazard for every sex in population.sex_mix "
                                 f"{sorted(sexes)} (or one for 'all'), got {sorted(given)}")
        for s in self.states:
            if not s.absorbing and not self.exits_of(s.name, include_background=True):
                raise ModelError(f"states[{s.name!r}] is not absorbing but has no exits; mark it absorbing "
                                 f"or add a transition")
        init = self.population.initial_state
        if init not in by_name or by_name[init].absorbing:
            raise ModelError(f"population.initial_state must name a non-absorbing state, got {init!r}")
        if self.horizon.scale == "age" and self.horizon.value <= self.population.entry_age.low:
            raise ModelError(f"horizon.value (attained age {self.horizon.value!r}) must exceed the lowest "
                             f"entry age {self.population.entry_age.low!r}")
        snames = [s.name for s in self.strategies]
        if len(snames) != len(set(snames)):
            raise ModelError(f"strategies: names must be unique, got {snames}")
        exits = list(self.exit_names)
        for st in self.strategies:
            for t in (*st.hazard_ratios, *st.replacements):
                if t not in tnames:
                    raise ModelError(f"strategies[{st.name!r}] refers to transition {t!r}, which is not "
                                     f"one of {tnames}")
            for s in st.state_costs:
                if s not in by_name:
                    raise ModelError(f"strategies[{st.name!r}].state_costs refers to state {s!r}, which is "
                                     f"not one of {names}")
            for t in st.transition_costs:
                if t not in exits:
                    raise ModelError(f"strategies[{st.name!r}].transition_costs refers to transition {t!r}, "
                                     f"which is not one of {exits}")
        val = self.valuation
        for field_name in ("utilities", "state_costs"):
            for s in getattr(val, field_name):
                if s not in by_name:
                    raise ModelError(f"valuation.{field_name} refers to state {s!r}, which is not one of {names}")
        for t in val.transition_costs:
            if t not in exits:
                raise ModelError(f"valuation.transition_costs refers to transition {t!r}, which is not one of {exits}")
        for s in self.states:
            if s.absorbing and val.utilities.get(s.name, 0.0) != 0.0:
                raise ModelError(f"valuation.utilities[{s.name!r}] must be 0 for an absorbing state, "
                                 f"got {val.utilities[s.name]!r}")

    # ------------------------------------------------------------------ queries
    @property
    def state_names(self) -> tuple[str, ...]:
        return tuple(s.name for s in self.states)

    @property
    def strategy_names(self) -> tuple[str, ...]:
        return tuple(s.name for s in self.strategies)

    def state_index(self, name: str) -> int:
        return self.state_names.index(name)

    def strategy(self, name: str) -> Strategy:
        for s in self.strategies:
            if s.name == name:
                return s
        raise ModelError(f"strategy must be one of {list(self.strategy_names)}, got {name!r}")

    def exits_of(self, state: str, include_background: bool = True) -> list[str]:
        out = [t.name for t in self.transitions if t.source == state]
        if include_background and self.background is not None and not self._is_absorbing(state):
            out.append(BACKGROUND)
        return out

    def _is_absorbing(self, state: str) -> bool:
        return next(s.absorbing for s in self.states if s.name == state)

    @property
    def exit_names(self) -> tuple[str, ...]:
        """Stable names of all exits: transitions, then ``background death`` (one per state)."""
        return tuple(t.name for t in self.transitions) + ((BACKGROUND,) if self.background else ())

    def resolve(self, strategy: str) -> list[list[ResolvedExit]]:
        """Per state index, its competing exits with the strategy's hazards applied."""
        st = self.strategy(strategy)
        sexes = self.population.sexes
        per_state: list[list[ResolvedExit]] = [[] for _ in self.states]
        for k, t in enumerate(self.transitions):
            h = t.hazard
            if t.name in st.replacements:
                h = st.replacements[t.name]
            elif t.name in st.hazard_ratios:
                h = h.scaled(float(st.hazard_ratios[t.name]))
            src = self.state_index(t.source)
            per_state[src].append(ResolvedExit(
                index=k, slot=len(per_state[src]), name=t.name, source=src,
                target=self.state_index(t.target), clock=t.clock, hazards=(h,) * len(sexes),
                is_background=False))
        if self.background is not None:
            bg = self.background
            hz = tuple(bg.hazards.get(sex, bg.hazards.get("all")) for sex in sexes)
            for s, state in enumerate(self.states):
                if not state.absorbing:
                    per_state[s].append(ResolvedExit(
                        index=len(self.transitions), slot=len(per_state[s]), name=BACKGROUND, source=s,
                        target=self.state_index(bg.target), clock=bg.clock, hazards=hz,
                        is_background=True))
        return per_state

    def state_values(self, strategy: str) -> tuple[np.ndarray, np.ndarray]:
        """Utility per year and cost per year in each state under ``strategy`` (arrays over states)."""
        st, val = self.strategy(strategy), self.valuation
        utility = np.array([val.utilities.get(s, 0.0) for s in self.state_names])
        cost = np.array([val.state_costs.get(s, 0.0) + st.state_costs.get(s, 0.0) for s in self.state_names])
        return utility, cost

    def exit_costs(self, strategy: str) -> np.ndarray:
        """One-off cost per occurrence of each exit, indexed like :attr:`exit_names`."""
        st, val = self.strategy(strategy), self.valuation
        return np.array([val.transition_costs.get(e, 0.0) + st.transition_costs.get(e, 0.0)
                         for e in self.exit_names])

    @property
    def is_markov(self) -> bool:
        """True when no exit depends on time in the current state (a constant hazard on the
        state clock is memoryless and therefore still Markov)."""
        return not self.semi_markov_transitions()

    def semi_markov_transitions(self) -> list[str]:
        """Names of transitions whose hazard runs on the time-in-state clock and is not constant,
        in any strategy."""
        out: list[str] = []
        for st in self.strategy_names:
            for exits in self.resolve(st):
                for e in exits:
                    if e.clock is Clock.STATE and not all(is_constant_hazard(h) for h in e.hazards):
                        if e.name not in out:
                            out.append(e.name)
        return out


def is_constant_hazard(h: Hazard) -> bool:
    """Whether ``h`` is constant in time (memoryless), recognised structurally."""
    if isinstance(h, Exponential):
        return True
    if isinstance(h, ProportionalHazards):
        return is_constant_hazard(h.base)
    if isinstance(h, PiecewiseConstant):
        return bool(np.all(np.asarray(h.rates) == np.asarray(h.rates)[0]))
    return False
