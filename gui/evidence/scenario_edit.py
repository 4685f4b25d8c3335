"""Putting a fit into the open scenario: the transition's hazard (``family``, ``unit`` and the
family's parameters), optionally its covariance as a ``[[uncertainty]]`` multivariate-normal group,
the explicit ``at_least_background`` choice (docs/scenario-format.md, ``[[transitions]]`` and
``[[uncertainty]]``) and, for a two-arm fit, the compared arm in a strategy: its hazard ratio in
``hazard_ratios`` (or, for an accelerated-failure-time family, its own hazard in ``replacements``)
with the compared-arm covariance group (:func:`sim.evidence.compared_arm`,
:func:`sim.evidence.compared_arm_group`). No Qt here: :func:`fit_edit` returns a change that
:meth:`gui.document.ScenarioDocument.edit` applies to the tomlkit document as one undoable step,
keeping the user's comments. The keys and the group are the fit's own
(:meth:`sim.evidence.Fit.hazard_keys`, :meth:`sim.evidence.Fit.uncertainty_group`: the fit's normal
approximation on its estimation scale); only their place in the document is decided here.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import tomlkit
from tomlkit.items import Comment, Whitespace

from gui.editors.hazard_form import ALL_HAZARD_KEYS
from gui.toml_edit import append_table, get_item, remove_table, remove_value, set_value, to_plain
from sim.evidence import Fit, compared_arm, compared_arm_group
from sim.hazards import UNIT_IN_YEARS, from_years, to_years
from sim.io.scenario import parse_key
from sim.problems import ValidationError, format_key

__all__ = ["FitChoice", "fit_edit", "waning_note"]


@dataclass(frozen=True)
class FitChoice:
    """What the user asked to apply.

    ``arm`` is ``"reference"`` (the fit's hazard) or ``"compared"`` (the second arm's hazard in the
    same family, :meth:`sim.evidence.Fit.compared_parameters`); ``covariance`` asks for the
    ``[[uncertainty]]`` group (reference arm only); ``at_least_background`` is written as given
    (``True`` sets the key, ``False`` removes it).
    """

    transition: int
    arm: str = "reference"
    covariance: bool = False
    at_least_background: bool = False
    strategy: int | None = None
    """Two arms, reference arm only: the ``[[strategies]]`` index that takes the compared arm (its hazard
    ratio, or its replacement hazard for an accelerated-failure-time family); None writes nothing there."""
    new_strategy: str | None = None
    """A name: ``[[strategies]]`` table ``strategy`` is appended first, with this name (after a
    comparator strategy named after the reference arm when the scenario has no strategies: the model's
    single implicit strategy would otherwise become the compared arm)."""


def _names_hazard_of(entry: Any, transition: int) -> bool:
    """True when an ``[[uncertainty]]`` table names a hazard parameter of the transition."""
    prefix = format_key(("transitions", transition)) + "."
    plain = to_plain(entry) if entry is not None else {}
    if not isinstance(plain, dict):
        return False
    names = plain.get("parameters", [plain.get("parameter")])
    for name in names if isinstance(names, list) else []:
        if isinstance(name, str) and name.startswith(prefix):
            key = name[len(prefix):].split("[")[0].split(".")[0]
            if key in ALL_HAZARD_KEYS:
                return True
    return False


def _names_strategy_entry_of(entry: Any, strategy: int, transition: str) -> bool:
    """True when an ``[[uncertainty]]`` table names the strategy's hazard ratio or replacement for the
    transition (names read by :func:`sim.io.scenario.parse_key`, so any quoting matches)."""
    plain = to_plain(entry) if entry is not None else {}
    if not isinstance(plain, dict):
        return False
    names = plain.get("parameters", [plain.get("parameter")])
    for name in names if isinstance(names, list) else []:
        try:
            path = parse_key(name) if isinstance(name, str) else ()
        except (ValueError, ValidationError):
            continue
        if (len(path) >= 4 and path[:2] == ("strategies", strategy) and path[2] in ("hazard_ratios", "replacements")
                and path[3] == transition):
            return True
    return False


def _remove_groups(doc: Any, stale: Callable[[Any], bool]) -> None:
    entries = get_item(doc, ("uncertainty",))
    if entries is None:
        return
    for j in reversed(range(len(entries))):
        if stale(entries[j]):
            remove_table(doc, ("uncertainty",), j)
    if len(get_item(doc, ("uncertainty",))) == 0:
        remove_value(doc, ("uncertainty",))


def _inline(values: dict[str, Any]) -> Any:
    table = tomlkit.inline_table()
    for key, value in values.items():
        table.append(key, value)
    return table


def _write_compared_arm(doc: Any, fit: Fit, choice: FitChoice) -> tuple[int, str, Any]:
    """Put the compared arm into strategy ``choice.strategy`` (appended first when ``new_strategy``);
    returns the strategy index, the transition's name and the :class:`sim.evidence.ComparedArm`."""
    i = choice.transition
    name = to_plain(get_item(doc, ("transitions", i, "name")))
    if not isinstance(name, str) or not name:
        raise ValueError(f"{format_key(('transitions', i))} has no name: a strategy names its transitions")
    k = choice.strategy
    assert k is not None
    if choice.new_strategy is not None:
        existing = get_item(doc, ("strategies",))
        if (existing is None or len(existing) == 0) and fit.effect is not None:
            append_table(doc, ("strategies",), {"name": fit.effect.reference})
        k = append_table(doc, ("strategies",), {"name": choice.new_strategy})
        if k != choice.strategy:
            raise ValueError(f"the new strategy would be strategies[{k}], not strategies[{choice.strategy}]")
    elif get_item(doc, ("strategies", k)) is None:
        raise KeyError(format_key(("strategies", k)))
    arm = compared_arm(fit, transition=name, strategy=k)
    if arm.hazard_ratio is not None:
        remove_value(doc, ("strategies", k, "replacements", name))  # a replacement would override the ratio
        set_value(doc, ("strategies", k, "hazard_ratios", name), arm.hazard_ratio)
    else:  # no acceleration-factor key: the compared arm's own hazard; a ratio and its waning would not apply
        remove_value(doc, ("strategies", k, "hazard_ratios", name))
        remove_value(doc, ("strategies", k, "waning", name))
        hazard = _inline(arm.replacement or {})
        if get_item(doc, ("strategies", k, "replacements")) is None:
            set_value(doc, ("strategies", k, "replacements"), _inline({name: hazard}))
        else:
            set_value(doc, ("strategies", k, "replacements", name), hazard)
    return k, name, arm


def _keep_waning_times(doc: Any, i: int, new_unit: str) -> None:
    """A transition's ``waning`` times are in its ``unit``: when the fit brings another unit, the
    same times are written in it (:func:`sim.hazards.to_years`, :func:`sim.hazards.from_years`)."""
    old_unit = to_plain(get_item(doc, ("transitions", i, "unit"))) or "years"
    waning = to_plain(get_item(doc, ("transitions", i, "waning")))
    if old_unit == new_unit or not isinstance(waning, dict) or old_unit not in UNIT_IN_YEARS:
        return
    for key in ("start", "end"):
        value = waning.get(key)
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            set_value(doc, ("transitions", i, "waning", key), from_years(to_years(float(value), old_unit), new_unit))


def waning_note(document_table: dict, fit: Fit) -> str:
    """Words for the undo label when :func:`fit_edit` rewrites a transition's waning times."""
    old_unit = document_table.get("unit", "years")
    if isinstance(document_table.get("waning"), dict) and old_unit != fit.unit:
        return f"; waning times rewritten from {old_unit} to {fit.unit}"
    return ""


def _pop_trailing_trivia(table: Any) -> list[tuple[Any, Any]]:
    """Remove and return the comments and blank lines at the end of a table's body: they belong to
    what follows the table in the file, so keys added to the table go above them."""
    body = table.value.body
    tail: list[tuple[Any, Any]] = []
    while body and body[-1][0] is None and isinstance(body[-1][1], (Whitespace, Comment)):
        tail.insert(0, body.pop())
    return tail


def fit_edit(fit: Fit, choice: FitChoice, name: str = "") -> tuple[Callable[[Any], None], str]:
    """The change to the scenario document and its undo label.

    The transition's previous hazard keys are removed (its name, states, clock, hazard ratio and
    waning stay); ``[[uncertainty]]`` tables that named its previous hazard parameters are removed
    (they described a hazard that is no longer there); with ``covariance``, the fit's group is added.
    """
    if choice.covariance and choice.arm != "reference":
        raise ValueError("the covariance group is written for the reference arm's hazard only")
    two_arms = choice.strategy is not None
    if two_arms and choice.arm != "reference":
        raise ValueError("the compared arm goes into a strategy when the transition takes the reference arm's hazard")
    if two_arms:
        compared_arm(fit, transition="", strategy=choice.strategy)  # refuses one arm, another family, no convergence
    values = fit.hazard_keys(choice.arm)
    group = fit.uncertainty_group(choice.transition) if choice.covariance and not two_arms else None
    if choice.covariance and fit.theta_covariance is None:
        raise ValueError(f"the {fit.label} fit has no covariance ({fit.message})")
    if choice.covariance and not two_arms and group is None:
        raise ValueError(f"the {fit.label} fit has no covariance group ({fit.message})")
    i = choice.transition

    def change(doc: Any) -> None:
        table = get_item(doc, ("transitions", i))
        if table is None:
            raise KeyError(format_key(("transitions", i)))
        for key in [k for k in list(table.keys()) if k in ALL_HAZARD_KEYS and k not in values]:
            remove_value(doc, ("transitions", i, key))
        _keep_waning_times(doc, i, values["unit"])
        if not choice.at_least_background:
            remove_value(doc, ("transitions", i, "at_least_background"))
        tail = _pop_trailing_trivia(table)  # comments that introduce the next section stay below the new keys
        for key, value in values.items():
            set_value(doc, ("transitions", i, key), value)
        if choice.at_least_background:
            set_value(doc, ("transitions", i, "at_least_background"), True)
        table.value.body.extend(tail)
        _remove_groups(doc, lambda entry: _names_hazard_of(entry, i))
        new_group = group
        if two_arms:
            k, transition_name, _arm = _write_compared_arm(doc, fit, choice)
            _remove_groups(doc, lambda entry: _names_strategy_entry_of(entry, k, transition_name))
            if choice.covariance:
                new_group = compared_arm_group(fit, transition=i, transition_name=transition_name, strategy=k)
        if new_group is not None:
            append_table(doc, ("uncertainty",), new_group)

    arm = f" ({fit.effect.compared} arm)" if choice.arm == "compared" and fit.effect is not None else ""
    where = f"transition {name!r}" if name else f"transition {i}"
    label = f"Fit {fit.label}{arm} to {where}"
    if two_arms and fit.effect is not None:
        strategy = repr(choice.new_strategy) if choice.new_strategy is not None else f"strategies[{choice.strategy}]"
        new = " (new)" if choice.new_strategy is not None else ""
        what = ("the hazard ratio" if fit.effect.kind == "hazard_ratio" else
                "the own hazard (a replacement: the fit's effect is an acceleration factor)")
        label += f", {what} of arm {fit.effect.compared!r} to strategy {strategy}{new}"
    if choice.covariance:
        label += " with the joint covariance" if two_arms else " with its covariance"
    return change, label

