"""One parameter's ``[[uncertainty]]`` entry in the scenario text: finding it, writing a draft of it
into a copy of the text (comments and the rest of the file kept, through :mod:`gui.toml_edit`), and
checking the draft with the scenario reader (:func:`sim.io.scenario.parse_scenario`), which says
what is wrong at which key and gives the distribution for the preview. No Qt and no modelling here:
every rule and every number comes from ``sim``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import tomlkit

from gui.toml_edit import KeyPath, append_table, get_item, remove_table, remove_value, set_item, set_value, to_plain
from sim.io.scenario import ScenarioError, parse_scenario
from sim.io.scenario.schema import UNCERTAINTY_FORMS, Number, node_at
from sim.io.scenario.uncertain import NOT_UNCERTAIN, parse_key
from sim.problems import Problem, format_key
from sim.uncertainty import UncertainInput, Univariate

__all__ = ["FAMILIES", "FAMILY_LABELS", "FORM_LABELS", "KEY_LABELS", "OPTIONAL_KEYS", "parameter_name",
           "is_uncertain_parameter", "find_entry", "EntryCheck", "draft_text", "check_draft", "forms_of",
           "removed_text", "spec_for", "BAND_LISTS", "band_groups", "forget_band"]

#: Families offered for one parameter (groups, Dirichlet and multivariate normal, are edited by
#: :mod:`gui.uncertainty.groups`), in the order of docs/scenario-format.md.
FAMILIES = ("beta", "gamma", "lognormal", "normal", "uniform", "triangular")
FAMILY_LABELS = {"beta": "beta", "gamma": "gamma", "lognormal": "log-normal", "normal": "normal (optionally truncated)",
                 "uniform": "uniform", "triangular": "triangular"}
#: How the user reads each way of giving a distribution (keys of ``UNCERTAINTY_FORMS``).
FORM_LABELS = {("mean", "se"): "mean and standard error (method of moments)", ("alpha", "beta"): "alpha and beta",
               ("shape", "scale"): "shape and scale", ("mu", "sigma"): "mu and sigma of the log",
               ("mean", "sd"): "mean and standard deviation", ("low", "high"): "low and high",
               ("low", "mode", "high"): "low, mode and high"}
KEY_LABELS = {"mean": "mean", "se": "standard error (se)", "sd": "standard deviation (sd)", "alpha": "alpha",
              "beta": "beta", "shape": "shape", "scale": "scale", "mu": "mu (mean of the log)",
              "sigma": "sigma (sd of the log)", "low": "low", "high": "high", "mode": "mode"}
#: Keys a family may add to any of its forms (a normal's truncation).
OPTIONAL_KEYS = {"normal": ("low", "high")}
#: Keys of an entry that the editor leaves as they are.
_KEPT = ("parameter", "description")


def forms_of(family: str) -> list[tuple[str, ...]]:
    """The ways of giving ``family`` that take single numbers (the schema's forms, without lists such
    as a log-normal's ``interval``, which the text view edits)."""
    return [f for f in UNCERTAINTY_FORMS.get(family, ()) if f in FORM_LABELS]


def parameter_name(key: KeyPath) -> str:
    """The parameter's name as ``[[uncertainty]]`` writes it (``transitions[0].rate``)."""
    return format_key(tuple(key))


def is_uncertain_parameter(data: Mapping | None, key: KeyPath) -> bool:
    """True when the scenario format declares ``key`` a numeric model parameter that may carry a
    distribution (the schema's declaration, as the reader uses it)."""
    if data is None:
        return False
    key = tuple(key)
    try:
        node = node_at(data, key)
    except (KeyError, IndexError, TypeError, ValueError):
        return False
    return (isinstance(node, Number) and bool(node.parameter) and node.dimension is not None
            and key not in NOT_UNCERTAIN)


def find_entry(data: Mapping | None, key: KeyPath) -> tuple[int | None, bool]:
    """(index of the ``[[uncertainty]]`` entry naming ``key``, whether that entry is a group);
    ``(None, False)`` when none does."""
    entries = to_plain(get_item(data, ("uncertainty",))) if data is not None else None
    if not isinstance(entries, list):
        return None, False
    key = tuple(key)
    for i, entry in enumerate(entries):
        if not isinstance(entry, dict):
            continue
        if isinstance(entry.get("parameter"), str) and parse_key(entry["parameter"]) == key:
            return i, False
        names = entry.get("parameters")
        if isinstance(names, list) and any(isinstance(n, str) and parse_key(n) == key for n in names):
            return i, True
    return None, False


def draft_text(text: str, key: KeyPath, values: Mapping[str, Any]) -> tuple[str, int]:
    """``text`` with the entry of ``key`` set to ``values`` (``distribution`` and its keys), and the
    entry's index. An existing entry keeps its place, ``parameter``, ``description`` and comments; a
    new one is appended at the end of the file."""
    doc = tomlkit.parse(text)
    index, group = find_entry(doc, key)
    if group:
        raise ValueError(f"{parameter_name(key)} is in a group (uncertainty[{index}]); edit it in the text")
    if index is None:
        index = append_table(doc, ("uncertainty",), {"parameter": parameter_name(key), **values})
    else:
        base = ("uncertainty", index)
        entry = to_plain(get_item(doc, base))
        for k in list(entry):
            if k not in _KEPT:
                remove_value(doc, (*base, k))
        for k, v in values.items():
            set_value(doc, (*base, k), v)
    return tomlkit.dumps(doc), index


def removed_text(text: str, key: KeyPath) -> str:
    """``text`` without the single-parameter entry of ``key`` (unchanged when there is none)."""
    doc = tomlkit.parse(text)
    index, group = find_entry(doc, key)
    if index is None or group:
        return text
    aot = get_item(doc, ("uncertainty",))
    if len(aot) == 1:
        remove_value(doc, ("uncertainty",))
    else:
        remove_table(doc, ("uncertainty",), index)
    return tomlkit.dumps(doc)


#: The lists of a piecewise-constant hazard whose elements are parameters, one element per band.
BAND_LISTS = ("breaks", "rates")


def _band_of(name: Any, base: KeyPath) -> int | None:
    """The band whose break or rate of the hazard at ``base`` the parameter ``name`` is, else None."""
    path = parse_key(name) if isinstance(name, str) else None
    if path is None or len(path) != len(base) + 2 or path[:len(base)] != tuple(base) or path[-2] not in BAND_LISTS:
        return None
    return path[-1]


def band_groups(data: Mapping | None, base: KeyPath, band: int) -> list[int]:
    """The indices of the ``[[uncertainty]]`` groups that name band ``band`` of the piecewise hazard at
    ``base`` (such a band cannot be removed without changing what the group means)."""
    entries = to_plain(get_item(data, ("uncertainty",))) if data is not None else None
    return [i for i, e in enumerate(entries if isinstance(entries, list) else ())
            if isinstance(e, dict) and isinstance(e.get("parameters"), list)
            and any(_band_of(n, base) == band for n in e["parameters"])]


def forget_band(doc: Any, base: KeyPath, band: int) -> None:
    """After band ``band`` of the piecewise hazard at ``base`` was removed from ``doc``: remove the
    single-parameter entries of its break and rate, and renumber the names of the later bands."""
    aot = get_item(doc, ("uncertainty",))
    for i in reversed(range(len(aot) if aot is not None else 0)):
        entry = to_plain(aot[i])
        if not isinstance(entry, dict):
            continue
        if _band_of(entry.get("parameter"), base) == band:
            if len(aot) == 1:
                remove_value(doc, ("uncertainty",))
            else:
                remove_table(doc, ("uncertainty",), i)
            continue
        where = [(("uncertainty", i, "parameter"), entry.get("parameter"))]
        if isinstance(entry.get("parameters"), list):
            where = [(("uncertainty", i, "parameters", j), n) for j, n in enumerate(entry["parameters"])]
        for path, name in where:
            k = _band_of(name, base)
            if k is not None and k > band:
                new = parameter_name((*parse_key(name)[:-1], k - 1))
                (set_item if isinstance(path[-1], int) else set_value)(doc, path, new)


def spec_for(uncertainty: Any, key: KeyPath) -> UncertainInput | None:
    """The validated input of ``key`` among a scenario's ``uncertainty`` (None when it has none)."""
    name = parameter_name(key)
    for spec in uncertainty or ():
        if name in spec.keys:
            return spec
    return None


@dataclass
class EntryCheck:
    """What the scenario reader says about a draft entry.

    problems : the reader's problems inside the entry (key path within the whole file).
    spec : the validated input (with its distribution) when the draft and the file are valid.
    other_problems : how many problems the rest of the file has (then there is no preview).
    """

    problems: list[Problem] = field(default_factory=list)
    spec: UncertainInput | None = None
    other_problems: int = 0

    @property
    def distribution(self) -> Univariate | None:
        d = self.spec.distribution if self.spec is not None else None
        return d if isinstance(d, Univariate) else None


def check_draft(text: str, index: int, key: KeyPath, path: Path | None) -> EntryCheck:
    """Read the draft ``text`` with the scenario reader; problems of entry ``index`` and its spec."""
    try:
        scenario = parse_scenario(text, path)
    except ScenarioError as err:
        inside = [p for p in err.problems if tuple(p.path[:2]) == ("uncertainty", index)]
        return EntryCheck(problems=inside, other_problems=len(err.problems) - len(inside))
    return EntryCheck(spec=spec_for(scenario.uncertainty, key))
