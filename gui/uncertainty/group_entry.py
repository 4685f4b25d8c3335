"""A group's ``[[uncertainty]]`` entry in the scenario text (parameters drawn together: a
multivariate normal on a correlated group, or a Dirichlet on shares): listing the groups, writing a
draft of one into a copy of the text (comments and the rest of the file kept, through
:mod:`gui.toml_edit`), and checking the draft with the scenario reader
(:func:`sim.io.scenario.parse_scenario`), which says what is wrong at which key (a matrix that is
not positive semi-definite, shares that do not belong together, a name that is no parameter) and
gives the validated distribution. No Qt and no modelling here: every rule and number comes from
``sim``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import tomlkit

from gui.toml_edit import append_table, get_item, remove_table, remove_value, set_value, to_plain
from sim.io.scenario import ScenarioError, parameters, parse_scenario
from sim.io.scenario.schema import UNCERTAINTY_FORMS
from sim.io.scenario.uncertain import parse_key
from sim.problems import Problem
from sim.uncertainty import TRANSFORMS, UncertainInput

from .entry import find_entry, is_uncertain_parameter

__all__ = ["GROUP_FAMILIES", "GROUP_LABELS", "GROUP_FORM_LABELS", "SCALE_LABELS", "group_forms", "groups",
           "candidate_parameters", "group_text", "removed_group_text", "GroupCheck", "check_group",
           "replaced_entries", "group_summary"]

#: The distributions of a group, in the order of docs/scenario-format.md.
GROUP_FAMILIES = ("multivariate_normal", "dirichlet")
GROUP_LABELS = {"multivariate_normal": "correlated parameters (multivariate normal)",
                "dirichlet": "shares that sum to 1 (Dirichlet)"}
#: How the user reads each way of giving a group (keys of ``UNCERTAINTY_FORMS``).
GROUP_FORM_LABELS = {("mean", "covariance"): "means and a covariance matrix",
                     ("mean", "se", "correlation"): "means, standard errors and a correlation matrix",
                     ("alpha",): "a count (alpha) per share",
                     ("mean", "sample_size"): "mean shares and a sample size"}
#: A multivariate normal's estimation scales (``transform``), in the user's words.
SCALE_LABELS = {"identity": "natural", "log": "log", "logit": "logit"}
assert set(SCALE_LABELS) == set(TRANSFORMS)
#: Keys of an entry that the editor leaves as they are.
_KEPT = ("description",)


def group_forms(family: str) -> list[tuple[str, ...]]:
    """The ways of giving ``family`` (the schema's forms)."""
    return list(UNCERTAINTY_FORMS.get(family, ()))


def groups(data: Mapping | None) -> list[tuple[int, dict]]:
    """``(index, entry)`` of every ``[[uncertainty]]`` entry that names a group (``parameters``)."""
    entries = to_plain(get_item(data, ("uncertainty",))) if data is not None else None
    if not isinstance(entries, list):
        return []
    return [(i, e) for i, e in enumerate(entries) if isinstance(e, dict) and "parameters" in e]


def group_summary(entry: Mapping) -> str:
    """``"multivariate normal: transitions[1].rate, transitions[3].rate"`` (for a list of groups)."""
    names = entry.get("parameters")
    names = ", ".join(str(n) for n in names) if isinstance(names, list) else str(names)
    family = str(entry.get("distribution", "?")).replace("_", " ")
    return f"{family}: {names}"


def candidate_parameters(data: Mapping | None) -> list[str]:
    """The parameters of the scenario that may carry a distribution, as ``[[uncertainty]]`` names
    them (:func:`sim.io.scenario.parameters`, without run settings and the willingness to pay)."""
    if data is None:
        return []
    return [p.key for p in parameters(to_plain(data)) if is_uncertain_parameter(data, p.path)]


def replaced_entries(data: Mapping | None, names: list[Any], index: int | None) -> list[tuple[int, str]]:
    """``(index, name)`` of the single-parameter entries of ``names`` that the group (entry ``index``,
    None for a new one) replaces: a parameter has one distribution, the group's once it is in one."""
    out = []
    for name in names:
        key = parse_key(name) if isinstance(name, str) else None
        if key is None:
            continue
        i, group = find_entry(data, key)
        if i is not None and not group and i != index:
            out.append((i, name))
    return sorted(set(out))


def group_text(text: str, index: int | None, values: Mapping[str, Any]) -> tuple[str, int]:
    """``text`` with group entry ``index`` (None: a new one, appended) set to ``values``
    (``parameters``, ``distribution`` and the form's keys), and the entry's index afterwards.

    An existing entry keeps its place, its ``description`` and the comments beside the keys that stay;
    keys the new form does not use are removed. The members' own single-parameter entries are
    removed (see :func:`replaced_entries`)."""
    doc = tomlkit.parse(text)
    replaced = [i for i, _ in replaced_entries(doc, list(values.get("parameters", [])), index)]
    if index is None:
        index = append_table(doc, ("uncertainty",), dict(values))
    else:
        base = ("uncertainty", index)
        entry = to_plain(get_item(doc, base))
        for k in list(entry if isinstance(entry, dict) else ()):
            if k not in values and k not in _KEPT:
                remove_value(doc, (*base, k))
        for k, v in values.items():
            set_value(doc, (*base, k), v)
    for i in sorted(replaced, reverse=True):
        remove_table(doc, ("uncertainty",), i)
    index -= sum(1 for i in replaced if i < index)
    return tomlkit.dumps(doc), index


def removed_group_text(text: str, index: int) -> str:
    """``text`` without ``[[uncertainty]]`` entry ``index``."""
    doc = tomlkit.parse(text)
    aot = get_item(doc, ("uncertainty",))
    if aot is None or not 0 <= index < len(aot):
        return text
    if len(aot) == 1:
        remove_value(doc, ("uncertainty",))
    else:
        remove_table(doc, ("uncertainty",), index)
    return tomlkit.dumps(doc)


@dataclass
class GroupCheck:
    """What the scenario reader says about a draft group.

    problems : the reader's problems inside the entry (key paths within the whole file).
    spec : the validated group (with its distribution) when the draft and the file are valid.
    other_problems : how many problems the rest of the file has.
    """

    problems: list[Problem] = field(default_factory=list)
    spec: UncertainInput | None = None
    other_problems: int = 0


def check_group(text: str, index: int, path: Path | None) -> GroupCheck:
    """Read the draft ``text`` with the scenario reader; problems of entry ``index`` and its spec."""
    try:
        scenario = parse_scenario(text, path)
    except ScenarioError as err:
        inside = [p for p in err.problems if tuple(p.path[:2]) == ("uncertainty", index)]
        return GroupCheck(problems=inside, other_problems=len(err.problems) - len(inside))
    names = to_plain(get_item(tomlkit.parse(text), ("uncertainty", index, "parameters")))
    keys = [parse_key(n) for n in names or ()]
    spec = next((s for s in scenario.uncertainty if [parse_key(k) for k in s.keys] == keys), None)
    return GroupCheck(spec=spec)
