"""The multi-state patient model: states, transitions on clocks, background mortality, population,
horizon and strategies. Frozen, hashable data classes validated once at construction; everything
downstream (engine, exact solver, cohort approximations) reads a :class:`Model`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np

from ..hazards import Exponential, Hazard, PiecewiseConstant, ProportionalHazards
from .consistency import model_problems, part_type_problems
from .effects import at_least_background, with_ratio
from .errors import ModelError
from .parts import BACKGROUND, BackgroundMortality, Clock, Horizon, State, Strategy, Transition
from .population import Population
from .valuation import Valuation

__all__ = [
    "Clock", "State", "Transition", "BackgroundMortality", "Horizon", "Strategy", "Model",
    "ModelError", "ResolvedExit", "BACKGROUND",
]


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

    __slots__ = ("__dict__", "_memo")

    def __post_init__(self) -> None:
        object.__setattr__(self, "states", tuple(self.states))
        object.__setattr__(self, "transitions", tuple(self.transitions))
        strategies = tuple(self.strategies) or (Strategy("base"),)
        object.__setattr__(self, "strategies", strategies)
        problems = part_type_problems(self)
        if problems:  # the parts themselves are wrong: their relations cannot be checked
            raise ModelError.of(problems)
        problems = model_problems(self)
        if problems:
            raise ModelError.of(problems)
        self._init_lookups()

    def _init_lookups(self) -> None:
        """Name lookups and the per-strategy cache of :meth:`resolve` (the model is immutable, so
        they never go stale). They live in a slot, not in ``__dict__``: they take no part in
        equality, hashing, pickling or ``Model(**model.__dict__)``."""
        object.__setattr__(self, "_memo", {
            "state_index": {s.name: i for i, s in enumerate(self.states)},
            "strategy": {s.name: s for s in self.strategies},
            "resolved": {},
            "hash": None,
        })

    def __hash__(self) -> int:
        memo = self._memo
        if memo["hash"] is None:
            memo["hash"] = hash(tuple(getattr(self, f) for f in _MODEL_FIELDS))
        return memo["hash"]

    def __getstate__(self) -> dict:
        return {f: getattr(self, f) for f in _MODEL_FIELDS}

    def __setstate__(self, state: dict) -> None:
        for name, value in state.items():
            object.__setattr__(self, name, value)
        self._init_lookups()

    # ------------------------------------------------------------------ queries
    @property
    def state_names(self) -> tuple[str, ...]:
        return tuple(s.name for s in self.states)

    @property
    def strategy_names(self) -> tuple[str, ...]:
        return tuple(s.name for s in self.strategies)

    def state_index(self, name: str) -> int:
        try:
            return self._memo["state_index"][name]
        except (KeyError, TypeError):
            raise ValueError(f"{name!r} is not in {list(self.state_names)}") from None

    def strategy(self, name: str) -> Strategy:
        try:
            return self._memo["strategy"][name]
        except (KeyError, TypeError):
            raise ModelError((), f"strategy must be one of {list(self.strategy_names)}", name) from None

    def exits_of(self, state: str, include_background: bool = True) -> list[str]:
        out = [t.name for t in self.transitions if t.source == state]
        if include_background and self.background is not None and not self._is_absorbing(state):
            out.append(BACKGROUND)
        return out

    def _is_absorbing(self, state: str) -> bool:
        return self.states[self.state_index(state)].absorbing

    @property
    def exit_names(self) -> tuple[str, ...]:
        """Stable names of all exits: transitions, then ``background death`` (one per state)."""
        return tuple(t.name for t in self.transitions) + ((BACKGROUND,) if self.background else ())

    def resolve(self, strategy: str) -> list[list[ResolvedExit]]:
        """Per state index, its competing exits with the strategy's hazards applied (computed once
        per strategy; each call returns new lists of the same exits)."""
        resolved = self._memo["resolved"]
        cached = resolved.get(strategy)
        if cached is None:
            cached = resolved[strategy] = self._resolve(strategy)
        return [list(exits) for exits in cached]

    def _resolve(self, strategy: str) -> tuple[tuple[ResolvedExit, ...], ...]:
        st = self.strategy(strategy)
        sexes = self.population.sexes
        per_state: list[list[ResolvedExit]] = [[] for _ in self.states]
        for k, t in enumerate(self.transitions):
            h = t.hazard
            if t.hazard_ratio is not None:  # the transition's own effect, in every strategy
                h = with_ratio(h, float(t.hazard_ratio), t.waning)
            if t.name in st.replacements:
                h = st.replacements[t.name]
            elif t.name in st.hazard_ratios:
                h = with_ratio(h, float(st.hazard_ratios[t.name]), st.waning.get(t.name))
            hazards = (h,) * len(sexes)
            if t.at_least_background and self.background is not None:
                bg = self.background
                hazards = tuple(at_least_background(h, t.clock, self, bg.hazard_for(sex)) for sex in sexes)
            src = self.state_index(t.source)
            per_state[src].append(ResolvedExit(
                index=k, slot=len(per_state[src]), name=t.name, source=src,
                target=self.state_index(t.target), clock=t.clock, hazards=hazards,
                is_background=False))
        if self.background is not None:
            bg = self.background
            hz = tuple(bg.hazard_for(sex) for sex in sexes)  # times bg.multiplier
            for s, state in enumerate(self.states):
                if not state.absorbing:
                    per_state[s].append(ResolvedExit(
                        index=len(self.transitions), slot=len(per_state[s]), name=BACKGROUND, source=s,
                        target=self.state_index(bg.target), clock=bg.clock, hazards=hz,
                        is_background=True))
        return tuple(tuple(exits) for exits in per_state)

    def state_values(self, strategy: str) -> tuple[np.ndarray, np.ndarray]:
        """Utility per year and cost per year in each state under ``strategy`` (arrays over states)."""
        st, val = self.strategy(strategy), self.valuation
        return (np.array(val.utility_row(self.state_names), dtype=float),
                np.array(val.state_cost_row(self.state_names, st.state_costs), dtype=float))

    def exit_costs(self, strategy: str) -> np.ndarray:
        """One-off cost per occurrence of each exit, indexed like :attr:`exit_names`."""
        st, val = self.strategy(strategy), self.valuation
        return np.array(val.exit_cost_row(self.exit_names, st.transition_costs), dtype=float)

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


_MODEL_FIELDS = tuple(f.name for f in fields(Model))


def is_constant_hazard(h: Hazard) -> bool:
    """Whether ``h`` is constant in time (memoryless), recognised structurally."""
    if isinstance(h, Exponential):
        return True
    if isinstance(h, ProportionalHazards):
        return is_constant_hazard(h.base)
    if isinstance(h, PiecewiseConstant):
        return bool(np.all(np.asarray(h.rates) == np.asarray(h.rates)[0]))
    return False
