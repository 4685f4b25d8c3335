"""Treatment effects and hazard floors on a transition: a hazard ratio that wanes
(:class:`sim.model.parts.Waning`), and the rule that a transition's hazard is at least the background hazard (``at_least_background``).

:func:`with_ratio` and :func:`at_least_background` build the hazards the engine, the exact solver and
the cycle-based traces read (through :meth:`sim.model.Model.resolve`); :func:`effect_problems`
holds the rules that relate an effect to its transition, its strategy and the background
(docs/methods.md, 'Treatment-effect waning' and 'The larger of a fit and the background hazard').
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Callable

from ..hazards import AtLeastHazard, EntryAgeFloor, Hazard, ShiftedClock, waning_ratio
from ..problems import KeyPath
from .parts import Clock, Waning

if TYPE_CHECKING:
    from .multistate import Model

__all__ = ["with_ratio", "floor_clock_rule", "at_least_background", "DISCRETE_AGES", "clock_end", "effect_problems", "floor_words",
           "transition_effect_words"]

def with_ratio(h: Hazard, hr: float, wanes: Waning | None) -> Hazard:
    """``h`` times the hazard ratio ``hr``, constant or waning."""
    if wanes is None:
        return h.scaled(hr)
    return waning_ratio(h, hr, wanes.start, wanes.end, wanes.scale)


def floor_clock_rule(clock: Clock, model: "Model") -> str | None:
    """Why a transition on ``clock`` cannot be floored at the model's background hazard (``None``
    when it can): both hazards must be on one clock, or the transition on time since entry with the
    background on age (read at each patient's entry age plus the time since entry)."""
    bg = model.background
    if bg is None:
        return "needs background mortality ([background]) to be at least"
    if clock is bg.clock or (clock is Clock.ENTRY and bg.clock is Clock.AGE):
        return None
    return (f"needs the transition on the background's clock ({bg.clock.value!r}), or on 'entry' with "
            f"background on 'age' (the background is then read at the entry age plus the time since entry)")


def clock_end(model: "Model", clock: Clock) -> float:
    """The largest value ``clock`` reaches during follow-up (years): the oldest attained age, or the
    longest follow-up."""
    age, horizon = model.population.entry_age, model.horizon
    follow = horizon.value if horizon.scale == "time" else max(horizon.value - age.low, 0.0)
    if clock is Clock.AGE:
        return horizon.value if horizon.scale == "age" else age.high + horizon.value
    return max(follow, 1e-9)


DISCRETE_AGES = 64
"""An empirical entry-age distribution with at most this many ages is floored age by age
(:class:`sim.hazards.EntryAgeFloor` with ``ages``); more are treated as continuous."""


def at_least_background(h: Hazard, clock: Clock, model: "Model", background: Hazard) -> Hazard:
    """``max(h, background)`` on the transition's clock. On time since entry with the background on
    age: the background shifted by the entry age, :class:`~sim.hazards.ShiftedClock` when every patient
    enters at one age, else :class:`~sim.hazards.EntryAgeFloor` (each patient's own entry age)."""
    bg = model.background
    assert bg is not None
    until = clock_end(model, clock)
    if clock is bg.clock:
        return AtLeastHazard(h, background, until)
    age = model.population.entry_age  # entry clock, background on age (floor_clock_rule)
    if age.low == age.high:
        return AtLeastHazard(h, ShiftedClock(background, age.low), until)
    ages = getattr(age, "ages", None)  # an empirical distribution: its ages
    discrete = tuple(sorted(set(ages))) if ages is not None and len(set(ages)) <= DISCRETE_AGES else ()
    return EntryAgeFloor(h, background, until, age.low, age.high, discrete)


def effect_problems(model: "Model", add: Callable[..., None]) -> None:
    """The rules relating waning and floors to their transitions, strategies and the background;
    each broken rule is passed to ``add(path, rule, value)``."""
    by_name = {t.name: t for t in model.transitions}
    states = {s.name: s for s in model.states}
    for t in model.transitions:
        where = ("transitions", t.name)
        if t.waning is not None:
            if t.hazard_ratio is None:
                add((*where, "waning"), "needs a hazard_ratio on the same transition (the ratio that wanes)")
            _ratio_rules(add, (*where, "hazard_ratio"), t.hazard_ratio, t.waning)
            _clock_rule(add, (*where, "waning"), t.clock)
        if t.at_least_background:
            rule = floor_clock_rule(t.clock, model)
            if rule is not None:
                add((*where, "at_least_background"), rule, True)
            target = states.get(t.target)
            if target is not None and not target.absorbing:
                add((*where, "at_least_background"), f"is for a death transition: 'to' ({t.target!r}) must be "
                                                     f"an absorbing state", True)
    for st in model.strategies:
        where = ("strategies", st.name, "waning")
        for name, w in st.waning.items():
            if name not in st.hazard_ratios:
                add((*where, name), "needs a hazard ratio for this transition in the strategy's hazard_ratios "
                                    "(the ratio that wanes)", name)
                continue
            _ratio_rules(add, ("strategies", st.name, "hazard_ratios", name), st.hazard_ratios[name], w)
            if name in by_name:
                _clock_rule(add, (*where, name), by_name[name].clock)


def _ratio_rules(add: Callable[..., None], path: KeyPath, hr: float | None, w: Waning) -> None:
    if hr is not None and w.scale == "log" and hr == 0.0:
        add(path, "must be > 0 when it wanes on the log scale (waning.scale = 'hr' allows 0)", hr)


def _clock_rule(add: Callable[..., None], path: KeyPath, clock: Clock) -> None:
    if clock is Clock.AGE:
        add(path, "needs the transition on the 'entry' or 'state' clock: waning start and end are times "
                  "since entry or since entering the state, not ages")


def _ages(model: "Model", clock: Clock) -> tuple[str, float]:
    """How a clock value reads in words for a floor: ``("age", 0)`` on the age clock, ``("age",
    entry age)`` on time since entry with the background on age (the youngest entry age; each entry
    age's own for an :class:`~sim.hazards.EntryAgeFloor`), else ``("time", 0)``."""
    bg = model.background
    if clock is Clock.AGE or (clock is Clock.ENTRY and bg is not None and bg.clock is Clock.AGE):
        return "age", (0.0 if clock is Clock.AGE else model.population.entry_age.low)
    return "time", 0.0


def _crossing_words(h: AtLeastHazard, what: str, offset: float, unit: str) -> str:
    """Where the fit of ``h`` crosses its floor, in words, clock values read as ``what`` plus ``offset``."""
    parts = [f"falls {'below' if c.direction == 'below' else 'back above'} it from {what} "
             f"{offset + c.at:.1f}{unit}" for c in h.crossings]
    if not parts:
        side = "below" if h.floor.hazard(h.until) >= h.fit.hazard(h.until) else "above"
        parts = [f"stays {side} it up to {what} {offset + h.until:.1f}{unit}"]
    return "the fit " + ", then ".join(parts)


def floor_words(model: "Model", name: str) -> str:
    """What ``at_least_background`` does to transition ``name``, for ``hazardtrace check``: where the
    fit (with each strategy's ratio) falls below the background hazard, per strategy and sex (and, on
    time since entry with entry ages that vary, for the youngest and the oldest entrants), e.g.
    ``"hazard at least the background hazard; the fit falls below it from age 81.4"``."""
    k = next(i for i, t in enumerate(model.transitions) if t.name == name)
    t = model.transitions[k]
    what, offset = _ages(model, t.clock)
    unit = "" if what == "age" else " years"
    found: dict[str, list[str]] = {}
    for st in model.strategy_names:
        ex = next(e for exits in model.resolve(st) for e in exits if e.index == k)
        for sex, h in zip(model.population.sexes, ex.hazards):
            if isinstance(h, EntryAgeFloor):  # entry ages vary: the youngest and the oldest entrants
                text = ", ".join(f"entering at age {a:.1f} {_crossing_words(h.at(a), what, a, unit)}"
                                 for a in (h.low, h.high))
            elif isinstance(h, AtLeastHazard):
                text = _crossing_words(h, what, offset, unit)
            else:
                continue
            who = [st] + ([sex] if len(model.population.sexes) > 1 else [])
            found.setdefault(text, []).append(", ".join(who))
    if len(found) == 1 and len(model.strategy_names) * len(model.population.sexes) > 0:
        (text, _), = found.items()
        return f"hazard at least the background hazard; {text}"
    return "hazard at least the background hazard; " + "; ".join(
        f"{text} ({'; '.join(who)})" for text, who in found.items())


def transition_effect_words(model: "Model", name: str) -> list[str]:
    """The effects on transition ``name`` in words (its own waning hazard ratio, its floor)."""
    t = next(t for t in model.transitions if t.name == name)
    out = []
    if t.hazard_ratio is not None:
        text = f"hazard ratio {t.hazard_ratio:g} in every strategy"
        out.append(text + (f", {t.waning.words()}" if t.waning is not None else ""))
    if t.at_least_background:
        out.append(floor_words(model, name))
    return out
