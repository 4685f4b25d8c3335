"""The scenario format, declared once: every section and key with its type, default, range or choices,
dimension, whether it is required, and which keys name states, transitions or sexes.

The reader (:mod:`.reader`), the writer (:mod:`.writer`), renaming (:mod:`.rename`), the list of
parameters (:func:`parameters`) and the property test of the format all read this declaration, so a
new key or a new hazard family is added here (hazard families' parameters and their dimensions come
from :data:`sim.hazards.FAMILY_DIMENSIONS`). ``docs/scenario-format.md`` describes the same keys in
words.

Nodes
-----
:class:`Number`, :class:`Text`, :class:`FreeText`, :class:`Flag`, :class:`Numbers` (a list of
numbers), :class:`Durations` (a list of durations), :class:`Table` (fixed keys, optionally extra keys
of one kind named by a reference), :class:`Items` (an array of tables with unique names),
:class:`NameMap` (a table ``name = value`` whose names may refer to states or transitions),
:class:`Variant` (a table whose keys depend on a tag such as ``distribution``), :class:`TextOrMap`
(a name, or a table of them), :class:`StateOrShares` (a state, or shares of states, optionally per
sex), :class:`HazardTable` (``family``, ``unit`` and the family's parameters), :class:`Texts` (a list
of names) and :class:`Matrix` (a square table of numbers).
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields
from enum import Enum
from types import MappingProxyType
from typing import Any, Iterator, Mapping

from ...hazards import FAMILIES, FAMILY_DIMENSIONS, WANING_SCALES, Dimension
from ...model import BACKGROUND, Clock, EmpiricalAge, FixedAge, NormalAge, RunSettings, UniformAge, Valuation
from ...model.settings import TUNNEL_ENTRIES
from ...problems import KeyPath
from ...uncertainty import TRANSFORMS

__all__ = ["FORMAT_VERSION", "TIME_UNITS", "Ref", "Node", "Number", "Text", "FreeText", "Flag", "Numbers",
           "Durations", "Table", "Items", "NameMap", "Variant", "TextOrMap", "StateOrShares", "HazardTable", "SCHEMA",
           "LIST_PARAMETERS", "EXPONENTIAL_FORMS", "ENTRY_AGES", "hazard_keys", "Reference", "references", "declared_keys", "file_keys",
           "Texts", "Matrix", "UNCERTAINTY_FORMS", "node_at"]

FORMAT_VERSION = 1
TIME_UNITS = ("days", "weeks", "months", "years")
NO_DEFAULT: Any = None


class Ref(str, Enum):
    """What a name in the file refers to."""

    STATE = "state"
    TRANSITION = "transition"
    EXIT = "exit"  # a transition or background death
    SEX = "sex"  # a sex of population.sex_mix (or "all")
    STRATEGY = "strategy"


@dataclass(frozen=True)
class Node:
    """A key's declaration. ``default`` is used when the key is absent (``None``: no default)."""

    doc: str = ""
    required: bool = False
    default: Any = NO_DEFAULT


@dataclass(frozen=True)
class Number(Node):
    """A number (``bool`` is not one). ``dimension`` is set for model parameters; ``parameter=False``
    marks settings that are numbers but not model inputs (run settings, the ages of a fit)."""

    minimum: float | None = None
    maximum: float | None = None
    strict_min: bool = False
    integer: bool = False
    dimension: Dimension | None = None
    parameter: bool = True


@dataclass(frozen=True)
class Text(Node):
    """A non-empty string, one of ``choices`` when given; ``ref``: the string names a state etc."""

    choices: tuple[str, ...] | None = None
    ref: Ref | None = None
    is_file: bool = False  # a file path; a relative one is read from the scenario file's folder


@dataclass(frozen=True)
class FreeText(Node):
    """Any string, empty included (descriptions)."""


@dataclass(frozen=True)
class Flag(Node):
    """``true`` or ``false``."""


@dataclass(frozen=True)
class Numbers(Node):
    """A non-empty list of numbers, each checked as ``element``; ``length`` fixes the count."""

    element: Number = field(default_factory=Number)
    length: int | None = None


@dataclass(frozen=True)
class Durations(Node):
    """A non-empty list of durations: numbers of years or strings such as ``"3 months"``."""


@dataclass(frozen=True)
class Table(Node):
    """A table with the declared ``keys``; ``extra`` declares further keys named by ``extra_ref``
    (e.g. one hazard per sex under ``[background]``). Other keys are errors."""

    keys: Mapping[str, Node] = field(default_factory=dict)
    extra: Node | None = None
    extra_ref: Ref | None = None
    inline: bool = False


@dataclass(frozen=True)
class Items(Node):
    """An array of tables (``[[states]]``), each with a unique ``name`` declaring a ``declares``."""

    item: Node = field(default_factory=Table)
    declares: Ref | None = None


@dataclass(frozen=True)
class NameMap(Node):
    """A table ``name = value``; the names refer to ``key_ref`` when given."""

    value: Node = field(default_factory=Number)
    key_ref: Ref | None = None
    inline: bool = True


@dataclass(frozen=True)
class Variant(Node):
    """A table whose other keys depend on the value of its ``tag`` key."""

    tag: str = ""
    variants: Mapping[str, Mapping[str, Node]] = field(default_factory=dict)
    inline: bool = True


@dataclass(frozen=True)
class TextOrMap(Node):
    """A single name, or a table ``name = text`` (life-table columns per sex)."""

    value: Text = field(default_factory=Text)
    key_ref: Ref | None = None


@dataclass(frozen=True)
class StateOrShares(Node):
    """Where patients start: a state name, a table ``state = share``, or a table
    ``sex = {state = share}`` with one table per sex of the sex mix (which form: the values are
    numbers or tables). ``share`` declares each share."""

    share: Number = field(default_factory=Number)

    def per_sex(self, value: Any) -> bool:
        """Whether ``value`` is the per-sex form (a non-empty table of tables)."""
        return isinstance(value, Mapping) and bool(value) and all(isinstance(v, Mapping) for v in value.values())


@dataclass(frozen=True)
class Texts(Node):
    """A non-empty list of non-empty strings (each one of ``choices`` when given)."""

    choices: tuple[str, ...] | None = None


@dataclass(frozen=True)
class Matrix(Node):
    """A square table of numbers: a list of rows, each a list of numbers (a covariance matrix)."""


@dataclass(frozen=True)
class HazardTable(Node):
    """A hazard: ``family``, ``unit`` and the family's parameters (:func:`hazard_keys`), plus the
    table's own ``keys`` (a transition's name, ends and clock)."""

    keys: Mapping[str, Node] = field(default_factory=dict)


# ----------------------------------------------------------------------------- hazards
LIST_PARAMETERS = frozenset({("piecewise", "breaks"), ("piecewise", "rates")})
"""Parameters written as lists of numbers; every other hazard parameter is one number."""
for _family, _param in LIST_PARAMETERS:
    assert _param in FAMILY_DIMENSIONS[_family], (_family, _param)

EXPONENTIAL_FORMS: Mapping[tuple[str, ...], Mapping[str, Number]] = MappingProxyType({
    ("rate",): {"rate": Number(minimum=0, dimension=Dimension.RATE, doc="events per unit of time")},
    ("events", "per"): {"events": Number(minimum=0, dimension=Dimension.DIMENSIONLESS, doc="events counted"),
                        "per": Number(minimum=0, strict_min=True, dimension=Dimension.TIME,
                                      doc="person-time (in the unit) over which they were counted")},
    ("risk", "period"): {"risk": Number(minimum=0, maximum=1, dimension=Dimension.SHARE,
                                        doc="probability of the event within the period, below 1"),
                         "period": Number(minimum=0, strict_min=True, dimension=Dimension.TIME,
                                          doc="the period the risk applies to (in the unit)")},
})
"""The three ways of writing a constant hazard; exactly one is given."""

HAZARD_BASE: Mapping[str, Node] = MappingProxyType({
    "family": Text(required=True, choices=tuple(FAMILIES), doc="hazard family"),
    "unit": Text(default="years", choices=TIME_UNITS, doc="time unit of the parameters"),
})


def hazard_keys(family: str) -> dict[str, Node]:
    """The parameter keys of ``family`` (every exponential form included), with their dimension."""
    if family == "exponential":
        return {k: v for form in EXPONENTIAL_FORMS.values() for k, v in form.items()}
    out: dict[str, Node] = {}
    for name, dim in FAMILY_DIMENSIONS[family].items():
        number = Number(required=True, dimension=dim)
        out[name] = Numbers(required=True, element=number) if (family, name) in LIST_PARAMETERS else number
    return out


# ----------------------------------------------------------------------------- the format
_CLOCKS = tuple(c.value for c in Clock)
_AGE = {"minimum": 0, "maximum": 130, "dimension": Dimension.TIME}
_RUN, _VALUATION = RunSettings(), Valuation()  # their defaults are the format's
_DISCOUNT = {"minimum": 0, "maximum": 0.999999, "default": _VALUATION.discount_costs, "dimension": Dimension.RATE}


def _money(ref: Ref) -> NameMap:
    return NameMap(value=Number(dimension=Dimension.MONEY), key_ref=ref)


# ----------------------------------------------------------------------------- uncertain inputs
_ANY = Number(parameter=False)
_POSITIVE = Number(minimum=0, strict_min=True, parameter=False)
_ONE: dict[str, Node] = {
    "parameter": Text(required=True, doc='the parameter, as `hazardtrace check` names it, e.g. "valuation.utilities.well"'),
    "description": FreeText(doc="free text, e.g. the source of the estimate"),
}
_GROUP: dict[str, Node] = {
    "parameters": Texts(required=True, doc="the parameters drawn together, in the order of the values"),
    "description": FreeText(doc="free text, e.g. the source of the estimate"),
}
_MEAN_SE = {"mean": _ANY, "se": _POSITIVE}
UNCERTAINTY_FORMS: Mapping[str, tuple[tuple[str, ...], ...]] = MappingProxyType({
    "beta": (("alpha", "beta"), ("mean", "se")),
    "gamma": (("shape", "scale"), ("mean", "se")),
    "lognormal": (("mu", "sigma"), ("mean", "se"), ("interval",)),
    "normal": (("mean", "sd"), ("mean", "se")),
    "uniform": (("low", "high"),),
    "triangular": (("low", "mode", "high"),),
    "dirichlet": (("alpha",), ("mean", "sample_size")),
    "multivariate_normal": (("mean", "covariance"), ("mean", "se", "correlation")),
})
"""For each ``[[uncertainty]]`` distribution, the ways of giving it (exactly one is given): its own
parameters, or ``mean`` and ``se`` fitted by the method of moments (see :mod:`sim.uncertainty`)."""
_UNCERTAINTY = Items(doc="uncertain inputs: a distribution on a parameter or a group of them", item=Variant(
    tag="distribution", inline=False, variants={
        "beta": {**_ONE, "alpha": _POSITIVE, "beta": _POSITIVE, **_MEAN_SE},
        "gamma": {**_ONE, "shape": _POSITIVE, "scale": _POSITIVE, **_MEAN_SE},
        "lognormal": {**_ONE, "mu": _ANY, "sigma": _POSITIVE, **_MEAN_SE,
                      "interval": Numbers(length=2, element=_POSITIVE, doc="a 95% interval [low, high]")},
        "normal": {**_ONE, "mean": Number(required=True, parameter=False), "sd": _POSITIVE, "se": _POSITIVE,
                   "low": _ANY, "high": _ANY},
        "uniform": {**_ONE, "low": Number(required=True, parameter=False),
                    "high": Number(required=True, parameter=False)},
        "triangular": {**_ONE, "low": Number(required=True, parameter=False),
                       "mode": Number(required=True, parameter=False),
                       "high": Number(required=True, parameter=False)},
        "dirichlet": {**_GROUP, "alpha": Numbers(element=_POSITIVE), "mean": Numbers(element=_POSITIVE),
                      "sample_size": _POSITIVE},
        "multivariate_normal": {**_GROUP, "mean": Numbers(required=True, element=_ANY),
                                "covariance": Matrix(doc="on the estimation scale"),
                                "se": Numbers(element=_POSITIVE, doc="standard errors on the estimation scale"),
                                "correlation": Matrix(doc="correlation matrix (with se, instead of covariance)"),
                                "transform": Texts(choices=TRANSFORMS,
                                                   doc="estimation scale of each parameter (default identity)")},
    }))
for _dist, _forms in UNCERTAINTY_FORMS.items():
    assert all(k in _UNCERTAINTY.item.variants[_dist] for form in _forms for k in form), _dist

def _waning(unit: str) -> Table:
    """A hazard ratio's waning: ``{start = ..., end = ..., scale = "log"}`` (docs/scenario-format.md)."""
    return Table(inline=True, keys={
        "start": Number(required=True, minimum=0, dimension=Dimension.TIME, doc=f"the ratio starts to wane ({unit})"),
        "end": Number(required=True, minimum=0, strict_min=True, dimension=Dimension.TIME,
                      doc=f"the ratio is 1 from here on ({unit}); > start"),
        "scale": Text(default="log", choices=WANING_SCALES, doc="'log': log HR linear in time; 'hr': HR linear"),
    })


SCHEMA = Table(keys={
    "format_version": Number(required=True, integer=True, parameter=False, doc=f"{FORMAT_VERSION}"),
    "name": Text(doc="label for reports (default: the file name)"),
    "description": FreeText(doc="free text"),
    "states": Items(required=True, declares=Ref.STATE, item=Table(keys={
        "name": Text(required=True),
        "absorbing": Flag(default=False),
        "description": FreeText(),
    })),
    "transitions": Items(required=True, declares=Ref.TRANSITION, item=HazardTable(keys={
        "name": Text(required=True),
        "from": Text(required=True, ref=Ref.STATE),
        "to": Text(required=True, ref=Ref.STATE),
        "clock": Text(default="entry", choices=_CLOCKS),
        "description": FreeText(),
        "hazard_ratio": Number(minimum=0, dimension=Dimension.RATIO,
                               doc="multiplies this transition's hazard in every strategy"),
        "waning": _waning("in the transition's unit"),
        "at_least_background": Flag(default=False, doc="the hazard is at least the background hazard"),
    })),
    "background": Table(keys={
        "to": Text(required=True, ref=Ref.STATE),
        "clock": Text(default="age", choices=_CLOCKS),
        "multiplier": Number(default=1.0, minimum=0, strict_min=True, dimension=Dimension.RATIO,
                             doc="standardised mortality ratio: multiplies every background hazard (> 0)"),
        "life_table": Table(keys={
            "file": Text(required=True, is_file=True, doc="CSV or .xlsx file"),
            "kind": Text(required=True, choices=("q", "m")),
            "age_column": Text(default="age"),
            "columns": TextOrMap(required=True, key_ref=Ref.SEX),
            "sheet": Text(),
            "fit": Text(choices=("gompertz", "gompertz_makeham")),
            "fit_ages": Numbers(default=(40, 90), length=2,
                                element=Number(minimum=0, maximum=130, parameter=False)),
            "fit_method": Text(default="poisson", choices=("poisson", "wls")),
        }),
    }, extra=HazardTable(), extra_ref=Ref.SEX),
    "population": Table(required=True, keys={
        "initial_state": StateOrShares(required=True, share=Number(minimum=0, maximum=1, dimension=Dimension.SHARE),
                                       doc="a state, {state = share, ...} or {sex = {state = share, ...}, ...}"),
        "sex_mix": NameMap(value=Number(minimum=0, maximum=1, dimension=Dimension.SHARE), key_ref=Ref.SEX),
        "entry_age": Variant(required=True, tag="distribution", variants={
            "fixed": {"age": Number(required=True, **_AGE)},
            "uniform": {"low": Number(required=True, **_AGE), "high": Number(required=True, **_AGE)},
            "normal": {"mean": Number(required=True, dimension=Dimension.TIME),
                       "sd": Number(required=True, minimum=0, strict_min=True, dimension=Dimension.TIME),
                       "low": Number(required=True, **_AGE), "high": Number(required=True, **_AGE)},
            "empirical": {"ages": Numbers(required=True, element=Number(**_AGE)),
                          "weights": Numbers(required=True,
                                             element=Number(minimum=0, dimension=Dimension.DIMENSIONLESS))},
        }),
    }),
    "horizon": Table(required=True, keys={
        "value": Number(required=True, minimum=0, strict_min=True, dimension=Dimension.TIME,
                        doc="years since entry, or an attained age <= 130 (scale 'age')"),
        "scale": Text(default="time", choices=("time", "age")),
    }),
    "strategies": Items(declares=Ref.STRATEGY, item=Table(keys={
        "name": Text(required=True),
        "description": FreeText(),
        "hazard_ratios": NameMap(value=Number(minimum=0, dimension=Dimension.RATIO), key_ref=Ref.TRANSITION),
        "replacements": NameMap(value=HazardTable(), key_ref=Ref.TRANSITION, inline=False),
        "state_costs": _money(Ref.STATE),
        "transition_costs": _money(Ref.EXIT),
        "waning": NameMap(value=_waning("in years"), key_ref=Ref.TRANSITION, inline=False,
                          doc="per transition with a hazard ratio here: how the ratio wanes"),
    })),
    "valuation": Table(keys={
        "utilities": NameMap(value=Number(maximum=1, dimension=Dimension.SHARE), key_ref=Ref.STATE),
        "state_costs": _money(Ref.STATE),
        "transition_costs": _money(Ref.EXIT),
        "discount_costs": Number(**_DISCOUNT),
        "discount_effects": Number(**_DISCOUNT),
        "willingness_to_pay": Number(minimum=0, default=_VALUATION.willingness_to_pay, dimension=Dimension.MONEY),
        "currency": Text(default=_VALUATION.currency),
    }),
    "run": Table(keys={
        "patients": Number(minimum=1, integer=True, parameter=False, default=_RUN.patients),
        "seed": Number(minimum=0, integer=True, parameter=False, default=_RUN.seed),
        "workers": Number(minimum=1, maximum=64, integer=True, parameter=False, default=_RUN.workers),
        "chunk_size": Number(minimum=1, integer=True, parameter=False, default=_RUN.chunk_size),
        "cycle_lengths": Durations(default=_RUN.cycle_lengths),
        "tolerance": Number(minimum=0, strict_min=True, parameter=False, default=_RUN.tolerance),
        "tunnel_entry": Text(default=_RUN.tunnel_entry, choices=TUNNEL_ENTRIES,
                             doc="time in state credited to entries into tunnel states within a cycle"),
    }),
    "uncertainty": _UNCERTAINTY,
})
"""The whole scenario format (format_version 1)."""

ENTRY_AGES: Mapping[str, type] = MappingProxyType({"fixed": FixedAge, "uniform": UniformAge, "normal": NormalAge,
                                                  "empirical": EmpiricalAge})
"""The model class of each ``entry_age.distribution``; its fields, in order, are the variant's keys."""
for _tag, _keys in SCHEMA.keys["population"].keys["entry_age"].variants.items():
    assert len(_keys) == len([f for f in fields(ENTRY_AGES[_tag]) if f.init]), _tag

RESERVED_NAMES: Mapping[Ref, tuple[str, ...]] = MappingProxyType({Ref.TRANSITION: (BACKGROUND,)})


# ----------------------------------------------------------------------------- walking a document
def _children(node: Node, value: Any) -> Iterator[tuple[Any, Node]]:
    """The (key, node) pairs declared under ``node`` for the document value ``value``: declared keys
    (present or not), items of arrays and maps as present, a variant's or family's keys."""
    if isinstance(node, Table):
        yield from node.keys.items()
        if node.extra is not None and isinstance(value, Mapping):
            for k in value:
                if k not in node.keys:
                    yield k, node.extra
    elif isinstance(node, Items):
        if isinstance(value, list):
            for i in range(len(value)):
                yield i, node.item
    elif isinstance(node, NameMap):
        if isinstance(value, Mapping):
            for k in value:
                yield k, node.value
    elif isinstance(node, Variant):
        yield node.tag, Text(required=True, choices=tuple(node.variants))
        tag = value.get(node.tag) if isinstance(value, Mapping) else None
        if isinstance(tag, str) and tag in node.variants:
            yield from node.variants[tag].items()
    elif isinstance(node, HazardTable):
        yield from node.keys.items()
        yield from HAZARD_BASE.items()
        family = value.get("family") if isinstance(value, Mapping) else None
        if isinstance(family, str) and family in FAMILIES:
            yield from hazard_keys(family).items()
    elif isinstance(node, TextOrMap):
        if isinstance(value, Mapping):
            for k in value:
                yield k, node.value
    elif isinstance(node, StateOrShares) and isinstance(value, Mapping):
        shares = NameMap(value=node.share, key_ref=Ref.STATE)
        for k in value:
            yield k, shares if node.per_sex(value) else node.share
    elif isinstance(node, Numbers) and isinstance(value, list):
        for i in range(len(value)):
            yield i, node.element
    elif isinstance(node, Texts) and isinstance(value, list):
        for i in range(len(value)):
            yield i, Text(choices=node.choices)


def walk(doc: Any, node: Node = SCHEMA, path: KeyPath = ()) -> Iterator[tuple[KeyPath, Node, Any]]:
    """Every declared key of ``doc`` with its node and value (``None`` when absent), depth first."""
    for key, child in _children(node, doc):
        value = _get(doc, key)
        sub = (*path, key)
        yield sub, child, value
        if value is not None:
            yield from walk(value, child, sub)


def file_keys(doc: Any) -> list[KeyPath]:
    """The key paths of ``doc`` that hold a file path (text values only), e.g. the life table's
    ``file``: what must be rewritten when a scenario is saved to another folder."""
    return [p for p, node, value in walk(doc) if isinstance(node, Text) and node.is_file and isinstance(value, str)]


def declared_keys(doc: Any) -> list[KeyPath]:
    """Every key path the schema declares for ``doc``: the keys present and the optional keys that
    could be added (for the property test that mutates every key)."""
    return [p for p, _, _ in walk(doc)]


def node_at(doc: Any, path: KeyPath) -> Node | None:
    """The schema's node for the key ``path`` of ``doc`` (present, or a key that could be added: a
    name of a ``name = value`` table need not be there yet, an item of an array must), or ``None``
    when the format has no such key. Whether a name refers to an existing state or transition is
    the caller's to check."""
    node: Node = SCHEMA
    value = doc
    for key in path:
        child: Node | None = None
        if isinstance(node, NameMap):
            child = node.value if isinstance(key, str) else None
        elif isinstance(node, StateOrShares):
            if isinstance(value, Mapping) and isinstance(key, str):
                child = NameMap(value=node.share, key_ref=Ref.STATE) if node.per_sex(value) else node.share
        else:
            for k, c in _children(node, value):
                if k == key and type(k) is type(key):
                    child = c
                    break
        if child is None:
            return None
        node, value = child, _get(value, key)
    return node


def _get(value: Any, key: Any) -> Any:
    if isinstance(key, int):
        return value[key] if isinstance(value, list) and 0 <= key < len(value) else None
    return value.get(key) if isinstance(value, Mapping) else None


# ----------------------------------------------------------------------------- references
@dataclass(frozen=True)
class Reference:
    """Where names of ``ref`` appear: at key paths matching ``pattern`` (``"*"`` matches any item of
    an array), either as the value (``as_key=False``) or as the keys of the table there."""

    pattern: tuple[Any, ...]
    ref: Ref
    as_key: bool
    numbers_only: bool = False
    """The keys are names only when every value of the table is a number (the shares of
    ``initial_state``, whose per-sex form has sexes as keys); ``"*"`` in a pattern also matches every
    value of a table."""


def _references(node: Node, pattern: tuple) -> Iterator[Reference]:
    if isinstance(node, Text) and node.ref is not None:
        yield Reference(pattern, node.ref, as_key=False)
    if isinstance(node, (NameMap, TextOrMap)) and node.key_ref is not None:
        yield Reference(pattern, node.key_ref, as_key=True)
    if isinstance(node, StateOrShares):
        yield Reference(pattern, Ref.STATE, as_key=False)
        yield Reference(pattern, Ref.STATE, as_key=True, numbers_only=True)
        yield Reference((*pattern, "*"), Ref.STATE, as_key=True, numbers_only=True)
    if isinstance(node, (Table, HazardTable)):
        for k, child in node.keys.items():
            yield from _references(child, (*pattern, k))
        if isinstance(node, Table) and node.extra_ref is not None:
            yield Reference(pattern, node.extra_ref, as_key=True)
    elif isinstance(node, Items):
        yield from _references(node.item, (*pattern, "*"))


def references() -> tuple[Reference, ...]:
    """Every place in the format where a state, transition or sex is named."""
    return tuple(_references(SCHEMA, ()))
