"""The rules that relate the parts of a model (each part has checked its own values already): names
are unique, transitions join existing states, absorbing states have no exits, no utility and no
yearly cost, the initial state (or every state of an initial mix) is a living state, the
background mortality covers every sex, the strategies and the valuation name existing transitions
and states, the horizon lies beyond the youngest entry age.

:func:`model_problems` returns every broken rule as a :class:`~sim.problems.Problem` so that the model
reports them all at once. Key paths use the scenario file's names, with items of a list of tables
named by their ``name``: ``("transitions", "progression", "from")``.
"""

from __future__ import annotations

from collections import Counter
from typing import TYPE_CHECKING, Any, Iterable

from ..problems import NO_VALUE, Problem
from .effects import effect_problems
from .parts import BACKGROUND, BackgroundMortality, Horizon, State, Strategy, Transition
from .population import Population
from .valuation import Valuation

if TYPE_CHECKING:
    from .multistate import Model

__all__ = ["part_type_problems", "model_problems"]


def part_type_problems(model: "Model") -> list[Problem]:
    """Problems with the types of the model's parts (a list of states holding something else, ...)."""
    out: list[Problem] = []
    for key, cls in (("states", State), ("transitions", Transition), ("strategies", Strategy)):
        for i, item in enumerate(getattr(model, key)):
            if not isinstance(item, cls):
                out.append(Problem((key, i), f"must be a {cls.__name__}", item))
    for key, cls in (("population", Population), ("horizon", Horizon), ("valuation", Valuation)):
        if not isinstance(getattr(model, key), cls):
            out.append(Problem((key,), f"must be a {cls.__name__}", getattr(model, key)))
    if model.background is not None and not isinstance(model.background, BackgroundMortality):
        out.append(Problem(("background",), "must be a BackgroundMortality or None", model.background))
    if not isinstance(model.name, str):
        out.append(Problem(("name",), "must be a string", model.name))
    return out


def _duplicates(names: Iterable[str]) -> list[str]:
    counts = Counter(names)
    return [n for n, k in counts.items() if k > 1]


def model_problems(model: "Model") -> list[Problem]:
    """Every rule relating the parts of ``model`` that is broken, in the order of the scenario file's
    sections (states, transitions, background, population, horizon, strategies, valuation)."""
    out: list[Problem] = []

    def add(path: tuple, rule: str, value: Any = NO_VALUE) -> None:
        out.append(Problem(tuple(path), rule, value))

    # states
    names = list(dict.fromkeys(s.name for s in model.states))
    by_name = {s.name: s for s in model.states}
    for n in _duplicates(s.name for s in model.states):
        add(("states", n, "name"), "duplicate state name", n)
    any_absorbing = any(s.absorbing for s in model.states)
    if not any_absorbing:
        add(("states",), "at least one state must be absorbing (e.g. death), got none")

    # transitions
    tnames = [t.name for t in model.transitions]
    known_transitions = list(dict.fromkeys(tnames))
    for n in _duplicates(tnames):
        add(("transitions", n, "name"), f"duplicate transition name (or the reserved {BACKGROUND!r})", n)
    if BACKGROUND in tnames:
        add(("transitions", BACKGROUND, "name"), f"duplicate transition name (or the reserved {BACKGROUND!r})",
            BACKGROUND)
    for t in model.transitions:
        where = ("transitions", t.name)
        for end, key in (("source", "from"), ("target", "to")):
            if getattr(t, end) not in by_name:
                add((*where, key), f"must name a state {names}", getattr(t, end))
        if t.source == t.target:
            add((*where, "to"), "must differ from 'from'", t.target)
        elif t.source in by_name and by_name[t.source].absorbing:
            add((*where, "from"), "is an absorbing state; absorbing states have no exits", t.source)

    # background
    bg = model.background
    sexes = list(model.population.sexes)
    if bg is not None:
        if bg.target not in by_name or (not by_name[bg.target].absorbing and any_absorbing):
            # (with no absorbing state at all, that problem alone is reported)
            add(("background", "to"), "must name an absorbing state", bg.target)
        given = set(bg.hazards)
        if given != {"all"} and not set(sexes) <= given:
            add(("background",), f"must give a hazard for every sex in population.sex_mix {sorted(sexes)} "
                                 f"(or one for 'all')", sorted(given))
    sources = {t.source for t in model.transitions}
    for s in model.states:
        if not s.absorbing and s.name not in sources and bg is None:
            add(("states", s.name), "is not absorbing but has no exits; mark it absorbing or add a transition")

    # population and horizon
    _initial_state_problems(add, model.population, by_name)
    low = model.population.entry_age.low
    if model.horizon.scale == "age" and model.horizon.value <= low:
        add(("horizon", "value"), f"must exceed the lowest entry age {low!r} when horizon.scale is 'age'",
            model.horizon.value)

    # strategies
    snames = [s.name for s in model.strategies]
    for n in _duplicates(snames):
        add(("strategies", n, "name"), "duplicate strategy name", n)
    exits = list(dict.fromkeys(model.exit_names))
    for st in model.strategies:
        where = ("strategies", st.name)
        for key in ("hazard_ratios", "replacements", "waning"):
            for t in getattr(st, key):
                if t not in tnames:
                    add((*where, key, t), f"must name a transition {known_transitions}", t)
        _unknown(add, (*where, "state_costs"), st.state_costs, names, "state")
        _absorbing_costs(add, (*where, "state_costs"), st.state_costs, by_name)
        _unknown(add, (*where, "transition_costs"), st.transition_costs, exits, "transition")

    # treatment effects that wane, hazards at least the background (sim.model.effects)
    effect_problems(model, add)

    # valuation
    val = model.valuation
    _unknown(add, ("valuation", "utilities"), val.utilities, names, "state")
    _unknown(add, ("valuation", "state_costs"), val.state_costs, names, "state")
    _absorbing_costs(add, ("valuation", "state_costs"), val.state_costs, by_name)
    _unknown(add, ("valuation", "transition_costs"), val.transition_costs, exits, "transition")
    for s in model.states:
        if s.absorbing and val.utilities.get(s.name, 0.0) != 0.0:
            add(("valuation", "utilities", s.name), "must be 0 for an absorbing state", val.utilities[s.name])
    return out


def _unknown(add: Any, path: tuple, table: Iterable[str], known: list[str], what: str) -> None:
    for key in table:
        if key not in known:
            add((*path, key), f"must name a {what} {known}", key)


ABSORBING_COST_RULE = ("must be 0 for an absorbing state: a yearly cost accrues only while the patient is in a "
                       "living state; charge a one-off cost on the transition into it instead")


def _absorbing_costs(add: Any, path: tuple, costs: Any, by_name: dict[str, State]) -> None:
    """Yearly costs on absorbing states are refused (as utilities there are): the simulation ends a
    history on absorption, so only a definition without them makes the simulated, exact and
    cycle-based costs the same quantity."""
    for key, value in costs.items():
        if key in by_name and by_name[key].absorbing and value != 0.0:
            add((*path, key), ABSORBING_COST_RULE, value)


def _initial_state_problems(add: Any, population: Population, by_name: dict[str, State]) -> None:
    """The initial state, or every state of an initial mix, names a non-absorbing state of the model
    (key paths ``population.initial_state[.sex].state`` for a mix)."""
    init = population.initial_state
    if isinstance(init, str):
        if init not in by_name or by_name[init].absorbing:
            add(("population", "initial_state"), "must name a non-absorbing state", init)
        return
    tables = init.items() if population.initial_by_sex else [(None, init)]
    for sex, shares in tables:
        for state in shares:
            path = ("population", "initial_state", *(() if sex is None else (sex,)), state)
            if state not in by_name:
                add(path, f"must name a non-absorbing state {[n for n, s in by_name.items() if not s.absorbing]}",
                    state)
            elif by_name[state].absorbing:
                add(path, "must name a non-absorbing state (patients cannot start in an absorbing state)", state)
