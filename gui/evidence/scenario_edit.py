"""Putting a fit into the open scenario: the transition's hazard (``family``, ``unit`` and the
family's parameters), optionally its covariance as a ``[[uncertainty]]`` multivariate-normal group,
and the explicit ``at_least_background`` choice (docs/scenario-format.md, ``[[transitions]]`` and
``[[uncertainty]]``). No Qt here: :func:`fit_edit` returns a change that
:meth:`gui.document.ScenarioDocument.edit` applies to the tomlkit document as one undoable step,
keeping the user's comments. The keys and the group are the fit's own
(:meth:`sim.evidence.Fit.hazard_keys`, :meth:`sim.evidence.Fit.uncertainty_group`: the fit's normal
approximation on its estimation scale); only their place in the document is decided here.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from tomlkit.items import Comment, Whitespace

from gui.editors.hazard_form import ALL_HAZARD_KEYS
from gui.toml_edit import append_table, get_item, remove_table, remove_value, set_value, to_plain
from sim.evidence import Fit
from sim.hazards import UNIT_IN_YEARS, from_years, to_years
from sim.problems import format_key

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
    values = fit.hazard_keys(choice.arm)
    group = fit.uncertainty_group(choice.transition) if choice.covariance else None
    if choice.covariance and group is None:
        raise ValueError(f"the {fit.label} fit has no covariance ({fit.message})")
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
        entries = get_item(doc, ("uncertainty",))
        if entries is not None:
            for j in reversed(range(len(entries))):
                if _names_hazard_of(entries[j], i):
                    remove_table(doc, ("uncertainty",), j)
            if len(get_item(doc, ("uncertainty",))) == 0:
                remove_value(doc, ("uncertainty",))
        if group is not None:
            append_table(doc, ("uncertainty",), group)

    arm = f" ({fit.effect.compared} arm)" if choice.arm == "compared" and fit.effect is not None else ""
    where = f"transition {name!r}" if name else f"transition {i}"
    label = f"Fit {fit.label}{arm} to {where}" + (" with its covariance" if group is not None else "")
    return change, label

