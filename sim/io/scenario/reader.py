"""Reading a scenario: TOML text to a validated :class:`Scenario`, driven by the schema.

Each state, transition, strategy and section is checked on its own (unknown keys, types and ranges
from :data:`.schema.SCHEMA`), so one reading reports every problem it can find; a problem in one part
stops only what depends on that part. Problems of the model as a whole (:class:`sim.model.ModelError`
and its kin name list items by name) are translated to document positions. Every problem is then
located once in an index of the text's key lines and raised together as a :class:`ScenarioError`.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Mapping

import tomlkit
from tomlkit.exceptions import ParseError

from ...hazards import to_years
from ...model import (BACKGROUND, BackgroundMortality, Horizon, Model, Population, RunSettings, State, Strategy,
                      Transition, Valuation, Waning)
from ...problems import Problem, ValidationError
from ...uncertainty import UncertainInput
from .checking import Checker, Invalid
from .errors import ScenarioError
from .hazard_reading import read_hazard, read_life_table_hazards
from .limits import MAX_FILE_BYTES, document_problems, run_problems, size_problems
from .positions import KeyLines
from .schema import ENTRY_AGES, FORMAT_VERSION, SCHEMA, Items, Ref, Table, Variant
from .uncertain import read_uncertainty, read_variant, with_values

__all__ = ["Scenario", "parse_scenario", "load_scenario"]

_NAMED = {"states": Ref.STATE, "transitions": Ref.TRANSITION, "strategies": Ref.STRATEGY}


@dataclass(frozen=True)
class Scenario:
    """A validated scenario: the model, the run settings, where it came from and its document."""

    model: Model
    run: RunSettings
    path: Path | None = None
    text: str = ""
    conversions: tuple[str, ...] = field(default_factory=tuple)
    uncertainty: tuple[UncertainInput, ...] = field(default_factory=tuple)
    """The ``[[uncertainty]]`` entries: distributions on parameters (empty without the section)."""

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.text.encode("utf-8")).hexdigest()


def _keys(name: str) -> Mapping:
    node = SCHEMA.keys[name]
    if isinstance(node, Items):
        node = node.item
    return node.keys


def _raw_names(items: Any) -> list[str]:
    """The ``name`` strings of a list of tables, as typed (for checks that go on when one of the
    tables has a problem of its own)."""
    if not isinstance(items, list):
        return []
    return [x["name"] for x in items if isinstance(x, Mapping) and isinstance(x.get("name"), str)]


class _Reading:
    """One reading of a document: the checker, the conversion notes and the parts built so far."""

    def __init__(self, doc: Mapping, file: str | None, base_dir: Path | None) -> None:
        self.doc, self.file, self.base_dir = doc, file, base_dir
        self.ck = Checker()
        self.notes: list[str] = []
        self.states: list[State] = []
        self.transitions: list[Transition] = []
        self.strategies: list[Strategy] = []

    # ------------------------------------------------------------------ arrays of tables
    def items(self, name: str) -> list:
        raw = self.doc.get(name, [])
        if not isinstance(raw, list) or (name == "states" and name in self.doc and not raw):
            self.ck.add((name,), f"must be a list of [[{name}]] tables", raw)
            return []
        return raw

    def state(self, i: int, raw: Any) -> State:
        p = ("states", i)
        s = self.ck.table(raw, p, _keys("states"))
        if any(st.name == s["name"] for st in self.states):
            self.ck.fail((*p, "name"), "duplicate state name", s["name"])
        return State(s["name"], s["absorbing"])

    def transition(self, i: int, raw: Any, names: list[str]) -> Transition:
        p = ("transitions", i)
        ck = self.ck
        if not isinstance(raw, Mapping):
            ck.fail(p, "must be a table", raw)
        own = dict(_keys("transitions"))
        before = len(ck.problems)
        # with no readable state names (the states list itself is broken) only that problem is reported
        ends = {k: replace(own[k], choices=tuple(names) or None) for k in ("from", "to")}
        t = {}
        for k, node in {**own, **ends}.items():
            if isinstance(node, Table):  # the waning table, read below
                continue
            if k in raw:
                t[k] = ck.attempt(ck.value, node, raw[k], (*p, k))
            elif node.required:
                ck.add(p, f"missing required key {k!r}")
            else:
                t[k] = node.default
        if len(ck.problems) == before:
            if any(tr.name == t["name"] for tr in self.transitions) or t["name"] == BACKGROUND:
                ck.add((*p, "name"), f"duplicate transition name (or the reserved {BACKGROUND!r})", t["name"])
            if any(st.name == t["from"] and st.absorbing for st in self.states):
                ck.add((*p, "from"), "is an absorbing state; absorbing states have no exits", t["from"])
            elif t["from"] == t["to"]:
                ck.add((*p, "to"), "must differ from 'from'", t["to"])
        hazard = ck.attempt(read_hazard, ck, raw, p, self.notes, own)
        wanes = ck.attempt(_read_waning, ck, raw["waning"], (*p, "waning"), _years_per(raw)) if "waning" in raw else None
        if len(ck.problems) > before:
            raise Invalid
        return Transition(t["name"], t["from"], t["to"], hazard, t["clock"], t.get("hazard_ratio"), wanes,
                          t.get("at_least_background", False))

    def strategy(self, i: int, raw: Any, tnames: list[str]) -> Strategy:
        p = ("strategies", i)
        ck = self.ck
        s = ck.table(raw, p, _keys("strategies"))
        if any(st.name == s["name"] for st in self.strategies):
            ck.fail((*p, "name"), "duplicate strategy name", s["name"])
        replacements = s.get("replacements", {})
        if not isinstance(replacements, Mapping):
            ck.fail((*p, "replacements"), "must be a table of transition = hazard", replacements)
        waning = s.get("waning", {})
        if not isinstance(waning, Mapping):
            ck.fail((*p, "waning"), "must be a table of transition = {start = ..., end = ..., scale = ...}", waning)
        before = len(ck.problems)
        repl = {t: ck.attempt(read_hazard, ck, h, (*p, "replacements", t), self.notes)
                for t, h in replacements.items()}
        wanes = {t: ck.attempt(_read_waning, ck, w, (*p, "waning", t), 1.0) for t, w in waning.items()}
        hrs = s.get("hazard_ratios", {})
        for key, names in (("hazard_ratios", hrs), ("replacements", replacements), ("waning", waning)):
            for t in names:
                if t not in tnames:
                    ck.add((*p, key, t), f"must name a transition {tnames}", t)
        if len(ck.problems) > before:
            raise Invalid
        return ck.guarded(Strategy, s["name"], hrs, repl, s.get("state_costs", {}), s.get("transition_costs", {}),
                          wanes)

    # ------------------------------------------------------------------ sections
    def population(self, raw: Any) -> Population:
        ck = self.ck
        path = ("population",)
        keys = _keys("population")
        data = ck.attempt(ck.table, raw, path, keys)
        entry = ck.attempt(self.entry_age, raw.get("entry_age") if isinstance(raw, Mapping) else None)
        if data is None or entry is None:
            raise Invalid
        return ck.guarded(Population, entry, data["initial_state"], data.get("sex_mix") or {"all": 1.0})

    def entry_age(self, ea: Any) -> Any:
        ck = self.ck
        node: Variant = _keys("population")["entry_age"]
        path = ("population", "entry_age")
        if ea is None:
            raise Invalid  # reported as a missing key of the population
        dist, v = read_variant(ck, ea, path, node)
        return ck.guarded(ENTRY_AGES[dist], *[v[k] for k in node.variants[dist]])

    def background(self, raw: Any, sexes: tuple[str, ...]) -> BackgroundMortality:
        ck = self.ck
        path = ("background",)
        node: Table = SCHEMA.keys["background"]
        extra = {"female", "male", "all", *sexes} - set(node.keys)
        data = ck.table(raw, path, node.keys, extra=extra)
        others = [k for k in raw if k not in node.keys]
        if "life_table" in raw:
            if others:
                ck.fail((*path, others[0]), "give background hazards either by life_table or per sex, not both")
            hazards = read_life_table_hazards(ck, raw["life_table"], (*path, "life_table"),
                                              node.keys["life_table"], self.base_dir, self.notes)
        else:
            if not others:
                ck.fail(path, "needs a life_table or a hazard per sex (or 'all')")
            got = {sex: ck.attempt(read_hazard, ck, raw[sex], (*path, sex), self.notes) for sex in others}
            if any(h is None for h in got.values()):
                raise Invalid
            hazards = got
        return ck.guarded(BackgroundMortality, data["to"], hazards, data["clock"], data["multiplier"])

    def horizon(self, raw: Any) -> Horizon:
        ck = self.ck
        keys = _keys("horizon")
        data = ck.table(raw, ("horizon",), {k: n for k, n in keys.items() if k != "value"}, extra=("value",))
        if "value" not in raw:
            ck.fail(("horizon",), "missing required key 'value'")
        node = keys["value"]
        value = ck.value(replace(node, maximum=130 if data["scale"] == "age" else None), raw["value"],
                         ("horizon", "value"))
        return ck.guarded(Horizon, value, data["scale"])

    def valuation(self, raw: Any) -> Valuation:
        v = self.ck.table(raw, ("valuation",), _keys("valuation"))
        return self.ck.guarded(Valuation, **v)

    def run(self, raw: Any) -> RunSettings:
        v = self.ck.table(raw, ("run",), _keys("run"))
        return self.ck.guarded(RunSettings, **v)


def _years_per(raw: Mapping) -> float:
    """Years per unit of a hazard table's ``unit`` (1 when it is missing or bad: reported elsewhere)."""
    try:
        return to_years(1.0, raw.get("unit", "years"))
    except (ValueError, TypeError):
        return 1.0


def _read_waning(ck: Checker, raw: Any, path: tuple, years_per_unit: float) -> Waning:
    """A waning table ``{start = ..., end = ..., scale = ...}`` at ``path``, its times in years."""
    node: Table = _keys("transitions")["waning"]
    v = ck.table(raw, path, node.keys, rule="must be a table {start = ..., end = ..., scale = ...}")
    try:
        return Waning.at(path, v["start"] * years_per_unit, v["end"] * years_per_unit, v["scale"])
    except ValidationError as err:  # the values as written in the file, not in years
        ck.extend(Problem(q.path, q.rule, raw.get(q.path[-1], q.value)) for q in err.problems)
        raise Invalid from None


def _build(doc: Mapping, file: str | None, base_dir: Path | None
           ) -> tuple[Model, RunSettings, list[str], list[UncertainInput]]:
    """Validate the whole document (see the module docstring). Problems are raised without lines;
    :func:`parse_scenario` locates them."""
    if not isinstance(doc, Mapping):
        raise ScenarioError("must be a table", value=doc)
    r = _Reading(doc, file, base_dir)
    ck = r.ck
    for k in doc:
        if k not in SCHEMA.keys:
            ck.add((k,), f"unknown key; allowed here: {sorted(SCHEMA.keys)}", doc[k])
    for k, node in SCHEMA.keys.items():
        if node.required and k not in doc:
            ck.add((), f"missing required key {k!r}")
    if "format_version" in doc:
        version = ck.attempt(ck.value, SCHEMA.keys["format_version"], doc["format_version"], ("format_version",))
        if version is not None and version != FORMAT_VERSION:
            ck.add(("format_version",), f"this HazardTrace reads format_version {FORMAT_VERSION}", version)
        if version != FORMAT_VERSION:  # a different format: nothing else can be read reliably
            raise ScenarioError.of([ck.problems[-1]])
    specs, fills = read_uncertainty(ck, doc)  # parameters given only by a distribution take its mean
    if fills:
        doc = r.doc = with_values(doc, fills)

    for i, s in enumerate(r.items("states")):
        got = ck.attempt(r.state, i, s)
        if got is not None:
            r.states.append(got)
    raw_states = doc.get("states", [])
    names = list(dict.fromkeys([st.name for st in r.states] + _raw_names(raw_states)))
    raw_transitions = doc.get("transitions", [])
    for i, t in enumerate(r.items("transitions")):
        got = ck.attempt(r.transition, i, t, names)
        if got is not None:
            r.transitions.append(got)
    tnames = list(dict.fromkeys([t.name for t in r.transitions] + _raw_names(raw_transitions)))

    population = ck.attempt(r.population, doc["population"]) if "population" in doc else None
    background = None
    if "background" in doc:  # its per-sex keys follow the population's sexes (as typed if it failed)
        if population is not None:
            sexes = population.sexes
        else:
            raw_pop = doc.get("population")
            mix = raw_pop.get("sex_mix", {}) if isinstance(raw_pop, Mapping) else {}
            sexes = tuple(mix) if isinstance(mix, Mapping) else ()
        background = ck.attempt(r.background, doc["background"], sexes)
    horizon = ck.attempt(r.horizon, doc["horizon"]) if "horizon" in doc else None
    for i, st in enumerate(r.items("strategies")):
        got = ck.attempt(r.strategy, i, st, tnames)
        if got is not None:
            r.strategies.append(got)
    valuation = ck.attempt(r.valuation, doc["valuation"]) if "valuation" in doc else Valuation()
    run = ck.attempt(r.run, doc["run"]) if "run" in doc else RunSettings()
    name = Path(file).stem if file else "scenario"
    if "name" in doc:
        name = ck.attempt(ck.value, SCHEMA.keys["name"], doc["name"], ("name",))
    if "description" in doc:
        ck.attempt(ck.value, SCHEMA.keys["description"], doc["description"], ("description",))
    if ck.problems:
        raise ScenarioError.of(ck.problems)
    try:
        model = Model(states=tuple(r.states), transitions=tuple(r.transitions), population=population,
                      horizon=horizon, background=background, strategies=tuple(r.strategies),
                      valuation=valuation, name=name)
    except ValidationError as err:  # a rule between parts (ModelError and its kin)
        raise ScenarioError.of(_document_paths(err.problems, doc)) from None
    _check_reachable(model)
    return model, run, r.notes, specs


def _document_paths(problems: tuple[Problem, ...], doc: Mapping) -> list[Problem]:
    """Model problems name list items by name (``("transitions", "onset", "from")``); the document
    has positions (``("transitions", 0, "from")``)."""
    out = []
    for p in problems:
        path = list(p.path)
        if len(path) >= 2 and path[0] in _NAMED and isinstance(path[1], str):
            names = [x.get("name") if isinstance(x, Mapping) else None for x in doc.get(path[0], [])]
            path = [path[0], names.index(path[1]), *path[2:]] if path[1] in names else [path[0]]
        out.append(p.located(path=tuple(path)))
    return out


def _check_reachable(model: Model) -> None:
    """Every state must be reachable from an initial state (else it is a typo or dead code)."""
    starts = model.population.initial_states
    reach = set(starts)
    edges = [(t.source, t.target) for t in model.transitions]
    if model.background is not None:
        edges += [(s.name, model.background.target) for s in model.states if not s.absorbing]
    changed = True
    while changed:
        changed = False
        for a, b in edges:
            if a in reach and b not in reach:
                reach.add(b)
                changed = True
    for i, s in enumerate(model.states):
        if s.name not in reach:
            where = f"the initial state {starts[0]!r}" if len(starts) == 1 else f"the initial states {list(starts)}"
            raise ScenarioError(f"cannot be reached from {where}", path=("states", i, "name"), value=s.name)


def parse_scenario(text: str, file: str | Path | None = None, base_dir: Path | None = None) -> Scenario:
    """Validate scenario ``text`` (TOML). ``file`` names it in messages; relative paths inside resolve
    against ``base_dir`` (default: the file's folder).

    Raises
    ------
    ScenarioError
        With every problem found (:class:`ScenarioProblems` when there are several), each with the
        file, line, key path, value and rule.
    """
    fname = str(file) if file is not None else None
    too_big = size_problems(len(text.encode("utf-8", "surrogatepass")) if len(text) > MAX_FILE_BYTES // 4 else 0)
    if too_big:  # limits: see .limits and docs/scenario-format.md
        raise ScenarioError.of(p.located(file=fname) for p in too_big)
    try:
        doc = tomlkit.parse(text).unwrap()
    except ParseError as err:
        raise ScenarioError(f"not valid TOML: {err}", file=fname, line=getattr(err, "line", None)) from None
    if base_dir is None and file is not None:
        base_dir = Path(file).resolve().parent
    try:
        oversized = document_problems(doc)
        if oversized:
            raise ScenarioError.of(oversized)
        model, run, notes, specs = _build(doc, fname, base_dir)
        impossible = run_problems(model, run)
        if impossible:
            raise ScenarioError.of(_document_paths(tuple(impossible), doc))
    except ScenarioError as err:
        lines = KeyLines(text)  # one pass over the text, however many problems
        raise ScenarioError.of(p.located(file=fname, line=lines.line_of(p.path)) for p in err.problems) from None
    return Scenario(model=model, run=run, path=Path(file) if file else None, text=text,
                    conversions=tuple(notes), uncertainty=tuple(specs))


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file (UTF-8 TOML)."""
    path = Path(path)
    try:
        with path.open("rb") as f:  # never more than the limit (a huge file or a device is not read whole)
            data = f.read(MAX_FILE_BYTES + 1)
        too_big = size_problems(len(data), more=True)
        if too_big:
            raise ScenarioError.of(p.located(file=str(path)) for p in too_big)
        text = data.decode("utf-8").replace("\r\n", "\n").replace("\r", "\n")  # as text mode reads it
    except OSError as err:
        raise ScenarioError(f"cannot read the file: {err.strerror}", file=str(path)) from None
    except UnicodeDecodeError as err:
        raise ScenarioError(f"not UTF-8 text (byte {err.start}); save the file as UTF-8",
                            file=str(path)) from None
    return parse_scenario(text, path)
