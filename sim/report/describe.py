"""The model in words: ``hazardtrace check`` prints it, the report shows it (one text, one place)."""

from __future__ import annotations

from ..io import Scenario
from ..model import BACKGROUND, Clock, Population, transition_effect_words

__all__ = ["describe", "describe_lines", "CLOCK_WORDS"]

CLOCK_WORDS = {Clock.AGE: "attained age", Clock.ENTRY: "time since entry", Clock.STATE: "time in the current state"}


def _initial_words(p: Population) -> str:
    """``'well'``, or a mix such as ``well 80%, lanthic 20%`` (per sex: ``female: ...; male: ...``)."""
    if p.single_initial_state is not None:
        return repr(p.single_initial_state)

    def shares(table) -> str:
        return ", ".join(f"{s} {100 * v:.4g}%" for s, v in table.items())

    if p.initial_by_sex:
        return "a mix by sex (" + "; ".join(f"{sex}: {shares(p.initial_shares(sex))}" for sex in p.sexes) + ")"
    return f"a mix ({shares(p.initial_state)})"


def describe(scenario: Scenario) -> str:
    """The model in words (for ``check``): :func:`describe_lines` joined by newlines."""
    return "\n".join(describe_lines(scenario))


def _values(table, unit: str) -> str:
    return ", ".join(f"{k} {v:,.4g}{unit}" for k, v in table.items()) or "none"


def describe_lines(scenario: Scenario, conversions: bool = True) -> list[str]:
    """The model in words, one line each: name, states, transitions (family, parameters, clock),
    background mortality, population, horizon, strategies, valuation, Markov or not, and (with
    ``conversions``) the conversions the reader made; lines that belong to a heading above are
    indented two spaces."""
    m = scenario.model
    lines = [f"{m.name}", ""]
    lines.append("States: " + ", ".join(f"{s.name}{' (absorbing)' if s.absorbing else ''}" for s in m.states))
    lines.append("Transitions:")
    for t in m.transitions:
        lines.append(f"  {t.name}: {t.source} -> {t.target}, {t.hazard.family} {t.hazard.params()} "
                     f"on {CLOCK_WORDS[t.clock]}")
        lines += [f"  transition {t.name}: {words}" for words in transition_effect_words(m, t.name)]
    if m.background is not None:
        bg = m.background
        for sex, h in bg.hazards.items():
            lines.append(f"  {BACKGROUND} ({sex}): every living state -> {bg.target}, {h.family} "
                         f"on {CLOCK_WORDS[bg.clock]}")
        if bg.multiplier != 1.0:
            lines.append(f"  {BACKGROUND}: every hazard above times {bg.multiplier:g} "
                         f"(background.multiplier, a standardised mortality ratio)")
    p = m.population
    lines.append(f"Population: start in {_initial_words(p)}, entry age {type(p.entry_age).__name__} "
                 f"(mean {p.entry_age.mean:.1f}), sex mix {dict(p.sex_mix)}")
    lines.append(f"Horizon: {m.horizon.value:g} {'years since entry' if m.horizon.scale == 'time' else '(attained age)'}")
    lines.append("Strategies:")
    for st in m.strategies:
        parts = [f"hazard ratio {v:g} on {k}" + (f" ({st.waning[k].words()})" if k in st.waning else "")
                 for k, v in st.hazard_ratios.items()]
        parts += [f"{k} replaced by {h.family}" for k, h in st.replacements.items()]
        parts += [f"+{v:g}/year in {k}" for k, v in st.state_costs.items()]
        lines.append(f"  {st.name}: " + ("; ".join(parts) if parts else "as defined"))
    v = m.valuation
    lines.append(f"Utilities (QALY weight per year): {_values(v.utilities, '')}")
    lines.append(f"State costs ({v.currency} per year): {_values(v.state_costs, '')}; "
                 f"transition costs ({v.currency} once): {_values(v.transition_costs, '')}")
    lines.append(f"Discount rates: costs {100 * v.discount_costs:g}%, effects {100 * v.discount_effects:g}% per "
                 f"year; willingness to pay {v.willingness_to_pay:,.0f} {v.currency} per QALY")
    lines.append("Markov (exact solution available)" if m.is_markov else
                 f"Semi-Markov through {m.semi_markov_transitions()}: no exact solution; a large simulation "
                 f"serves as the reference")
    for note in scenario.conversions if conversions else ():
        lines.append(f"Conversion: {note}")
    return lines
