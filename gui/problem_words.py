"""Problems in the modeller's words, built from the problems' data (key path, rule, value), never
from the wording of a message.

``("transitions", 1, "rate")`` with rule ``must be >= 0`` and value ``-0.5`` becomes
"Transition 'recovery': rate must not be negative (got −0.5)". The file, line and key path stay
available (:attr:`gui.document.FieldError.message`) for the scenario-text view and the command line.
"""

from __future__ import annotations

import math
from typing import Any, Callable

from sim.problems import NO_VALUE, KeyPath

__all__ = ["describe_problem", "item_label", "field_label", "value_text", "rule_text"]

# How a section names its items, and how its keys read.
_ITEMS = {"states": "State", "transitions": "Transition", "strategies": "Strategy"}
_SECTIONS = {
    "population": "Population", "horizon": "Horizon", "valuation": "Valuation", "run": "Run settings",
    "background": "Background mortality", "format_version": "Scenario file", "name": "Model",
    "description": "Model",
}
_FIELDS = {
    "from": "from state", "to": "to state", "name": "name", "initial_state": "initial state",
    "entry_age": "entry age", "sex_mix": "sex mix", "hazard_ratios": "hazard ratio",
    "replacements": "replacement hazard", "state_costs": "state cost", "transition_costs": "transition cost",
    "utilities": "utility", "discount_costs": "discount rate of costs", "discount_effects": "discount rate of effects",
    "willingness_to_pay": "willingness to pay", "cycle_lengths": "cycle lengths", "chunk_size": "chunk size",
    "age_column": "age column", "fit_ages": "fit ages", "fit_method": "fit method", "value": "value",
    "scale": "scale", "unit": "time unit", "family": "family", "absorbing": "absorbing",
}
# Rules whose comparison reads better in words (exact rule texts of sim.model.checks).
_RULES = {
    "must be > 0": "must be positive",
    "must be >= 0": "must not be negative",
    "must be > 0 and finite": "must be positive and finite",
    "must be >= 0 and finite": "must not be negative and must be finite",
    "must be a non-empty string": "must not be empty",
}


def value_text(value: Any) -> str:
    """A value as a modeller reads it: numbers plainly (a typographic minus), text quoted."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        text = f"{value:g}" if isinstance(value, float) and math.isfinite(value) else str(value)
        return text.replace("-", "\u2212", 1) if text.startswith("-") else text
    if isinstance(value, str):
        return f"'{value}'"
    return repr(value)


def rule_text(rule: str) -> str:
    return _RULES.get(rule, rule)


def field_label(key: Any) -> str:
    return _FIELDS.get(key, str(key).replace("_", " ")) if isinstance(key, str) else f"entry {key + 1}"


def item_label(path: KeyPath, name_of: Callable[[KeyPath], Any]) -> tuple[str, KeyPath]:
    """Who the problem is about ("Transition 'onset'") and the rest of the path (the field)."""
    if not path:
        return "Scenario", ()
    head = path[0]
    if head in _ITEMS and len(path) > 1 and isinstance(path[1], int):
        name = name_of((head, path[1], "name"))
        who = f"{_ITEMS[head]} '{name}'" if isinstance(name, str) and name else f"{_ITEMS[head]} {path[1] + 1}"
        return who, tuple(path[2:])
    if head in _ITEMS:
        return head.capitalize(), tuple(path[1:])
    if head == "background" and len(path) > 1:
        if path[1] == "life_table":
            return "Life table", tuple(path[2:])
        if path[1] not in ("to", "clock"):
            return f"Background mortality ({path[1]})", tuple(path[2:])
    if head in ("name", "description", "format_version"):
        return _SECTIONS[head], (head,)
    return _SECTIONS.get(head, str(head)), tuple(path[1:])


def _field_words(rest: KeyPath) -> str:
    """The field part: ``rate``, ``hazard ratio for 'onset'``, ``column for female``, ``entry age mean``."""
    if not rest:
        return ""
    first = rest[0]
    if first in ("hazard_ratios", "replacements", "state_costs", "transition_costs", "utilities", "sex_mix"):
        words = field_label(first)
        if len(rest) > 1:
            preposition = "of" if first in ("utilities", "state_costs") else "for"
            words += f" {preposition} '{rest[1]}'"
            if len(rest) > 2:
                words += " " + " ".join(field_label(k) for k in rest[2:])
        return words
    if first == "columns":
        return "column" + (f" for {rest[1]}" if len(rest) > 1 else "")
    return " ".join(field_label(k) for k in rest)


def describe_problem(path: KeyPath, rule: str, value: Any = NO_VALUE,
                     name_of: Callable[[KeyPath], Any] = lambda _p: None) -> str:
    """One problem in the user's words: who, which field, the rule, and what was given.

    ``name_of(path)`` returns the value at a key path of the document (used for item names).
    """
    who, rest = item_label(tuple(path), name_of)
    if rest == ("name",) and path[0] in _ITEMS and not rule.startswith("must"):
        rest, value = (), NO_VALUE  # about the item itself, whose name is already said
    field = _field_words(rest)
    text = f"{who}: {field} {rule_text(rule)}" if field else f"{who} {rule_text(rule)}"
    if value is not NO_VALUE and value != "":  # "must not be empty (got '')" says nothing more
        text += f" (got {value_text(value)})"
    return text
