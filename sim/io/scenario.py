"""Scenario files: a commented TOML format of this project's own design, read and written in one place.

A scenario holds a model (states, transitions, background mortality, population, horizon,
strategies, valuation) and the run settings (patients, seed, threads, cycle lengths to compare).
See ``docs/scenario-format.md`` for every key with its meaning and unit, and ``scenarios/`` for
examples.

Reading keeps the document (``tomlkit``, which preserves comments and order) so that an edited
scenario can be written back without losing what the user typed. Validation turns the document into a
:class:`~sim.model.Model`; every problem is a :class:`ScenarioError` naming the file, the key path,
the line where it can be found, the value and the rule, and one reading reports all the problems it
can find (:class:`ScenarioProblems`). Unknown keys are errors, never ignored.
"""

from __future__ import annotations

import copy
import hashlib
import math
import os
import re
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Mapping

import tomlkit
from tomlkit.exceptions import ParseError

from ..hazards import FAMILIES, Hazard, HazardParameterError, make_hazard
from ..model.multistate import BACKGROUND, BackgroundMortality, Clock, Horizon, Model, ModelError, State, Strategy, Transition
from ..model.population import EmpiricalAge, FixedAge, NormalAge, Population, PopulationError, UniformAge
from ..hazards.units import UnitError, rate_from_risk, rate_per_year, to_years
from ..model.valuation import Valuation, ValuationError

__all__ = ["FORMAT_VERSION", "Scenario", "RunSettings", "ScenarioError", "ScenarioProblems", "load_scenario",
           "parse_scenario", "scenario_text", "save_scenario", "document_from_model", "parse_duration"]

FORMAT_VERSION = 1
TIME_UNITS = ("days", "weeks", "months", "years")
# Parameters measured in time (converted to years), per time (converted to per year) and in log
# time (shifted by the log of the unit), by family; public so that editors can label units.
TIME_PARAMS = {"weibull": ("scale",), "loglogistic": ("scale",), "gamma": ("scale",), "piecewise": ("breaks",)}
RATE_PARAMS = {"exponential": ("rate",), "gompertz": ("rate", "shape"),
               "gompertz_makeham": ("rate", "shape", "constant"), "piecewise": ("rates",)}
LOG_TIME_PARAMS = {"lognormal": ("mu",)}


class ScenarioError(ValueError):
    """A problem in a scenario file: names the file, key path, line, value and rule."""

    def __init__(self, rule: str, *, file: str | None = None, key: str | None = None, line: int | None = None,
                 value: Any = None, has_value: bool = False) -> None:
        self.rule, self.file, self.key, self.line = rule, file, key, line
        self.value = value if has_value else None
        where = file or "<scenario>"
        if line is not None:
            where += f":{line}"
        text = f"{where}: "
        if key:
            text += f"{key}: "
        text += rule
        if has_value:
            text += f", got {value!r}"
        super().__init__(text)

    @property
    def problems(self) -> list["ScenarioError"]:
        """Every problem found (this one alone for a single problem)."""
        return [self]


class ScenarioProblems(ScenarioError):
    """Several problems found in one reading of a scenario; :attr:`problems` lists them in file order
    of the sections. ``key``, ``line`` and ``rule`` are those of the first, so that code handling a
    single :class:`ScenarioError` still points somewhere sensible."""

    def __init__(self, problems: list[ScenarioError], file: str | None = None) -> None:
        self._problems = list(problems)
        first = self._problems[0]
        ValueError.__init__(self, f"{file or '<scenario>'}: {len(self._problems)} problems:\n"
                            + "\n".join(f"  - {p}" for p in self._problems))
        self.rule, self.file, self.key, self.line, self.value = first.rule, file, first.key, first.line, first.value

    @property
    def problems(self) -> list[ScenarioError]:
        return list(self._problems)


@dataclass(frozen=True)
class RunSettings:
    """How to run a scenario: patients per strategy, seed, threads, cycle lengths to compare (years)."""

    patients: int = 100_000
    seed: int = 1
    workers: int = 2
    chunk_size: int = 100_000
    cycle_lengths: tuple[float, ...] = (1 / 52, 1 / 12, 1 / 4, 1 / 2, 1.0, 2.0)
    tolerance: float = 0.01


@dataclass(frozen=True)
class Scenario:
    """A validated scenario: the model, the run settings, where it came from and its document."""

    model: Model
    run: RunSettings
    path: Path | None = None
    text: str = ""
    conversions: tuple[str, ...] = field(default_factory=tuple)

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.text.encode("utf-8")).hexdigest()


# ----------------------------------------------------------------------------- durations
_DURATION = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*([a-z]+)\s*$")
_UNIT_ALIASES = {"day": "days", "days": "days", "week": "weeks", "weeks": "weeks", "month": "months",
                 "months": "months", "year": "years", "years": "years"}


def parse_duration(value: Any) -> float:
    """A duration in years from a number (years) or a string such as ``"1 week"`` or ``"3 months"``."""
    if isinstance(value, bool):
        raise ValueError("must be a number of years or a string like '1 month'")
    if isinstance(value, (int, float)):
        v = float(value)
    elif isinstance(value, str):
        m = _DURATION.match(value.lower())
        if not m or m.group(2) not in _UNIT_ALIASES:
            raise ValueError("must be a number of years or a string like '1 week', '3 months', '1 year'")
        v = to_years(float(m.group(1)), _UNIT_ALIASES[m.group(2)])
    else:
        raise ValueError("must be a number of years or a string like '1 month'")
    if not (math.isfinite(v) and v > 0):
        raise ValueError("must be a positive duration")
    return v


# ----------------------------------------------------------------------------- reading helpers
class _Reader:
    """Walks a plain-dict document, tracking the key path for messages and which keys were used."""

    def __init__(self, text: str, file: str | None, base_dir: Path | None) -> None:
        self.text, self.file, self.base_dir = text, file, base_dir
        self.lines = text.splitlines()

    # locating keys in the text (best effort: TOML parsers do not report positions of keys)
    def line_of(self, path: tuple) -> int | None:
        headers = [(i, ln.strip()) for i, ln in enumerate(self.lines) if ln.strip().startswith("[")]
        start, end = 0, len(self.lines)
        i = 0
        table = []
        while i < len(path):
            part = path[i]
            nxt = path[i + 1] if i + 1 < len(path) else None
            if isinstance(nxt, int):  # array of tables element
                name = ".".join([*table, str(part)])
                hits = [h for h, s in headers if s == f"[[{name}]]" and start <= h < end]
                if len(hits) > nxt:
                    start = hits[nxt]
                    later = [h for h, s in headers if h > start and not s.startswith(f"[{name}.")
                             and not s.startswith(f"[[{name}.")]
                    end = min([h for h in later] + [end])
                    table.append(str(part))
                    i += 2
                    continue
                return None
            sub = ".".join([*table, str(part)])
            hits = [h for h, s in headers if s == f"[{sub}]" and start <= h < end]
            if hits:
                start = hits[0]
                table.append(str(part))
                i += 1
                continue
            key = re.compile(r'^\s*"?' + re.escape(str(part)) + r'"?\s*=')
            inline = re.compile(r'[{,]\s*"?' + re.escape(str(part)) + r'"?\s*=')
            for j in range(start, end):
                if key.search(self.lines[j]) or (i > 0 and inline.search(self.lines[j])):
                    if nxt is None or not isinstance(nxt, str) or "{" in self.lines[j] or "[" in self.lines[j]:
                        return j + 1
                    start = j
                    break
            else:
                return start + 1 if start else None
            i += 1
        return start + 1

    def error(self, path: tuple, rule: str, value: Any = None, has_value: bool = True) -> ScenarioError:
        return ScenarioError(rule, file=self.file, key=_fmt(path), line=self.line_of(path), value=value,
                             has_value=has_value)

    def table(self, data: Any, path: tuple, allowed: Iterable[str], required: Iterable[str] = ()) -> dict:
        if not isinstance(data, Mapping):
            raise self.error(path, "must be a table", data)
        allowed = set(allowed)
        for k in data:
            if k not in allowed:
                raise self.error((*path, k), f"unknown key; allowed here: {sorted(allowed)}", data[k])
        for k in required:
            if k not in data:
                raise self.error(path, f"missing required key {k!r}", has_value=False)
        return dict(data)

    def number(self, data: Mapping, path: tuple, key: str, default: Any = None, *, minimum: float | None = None,
               maximum: float | None = None, strict_min: bool = False, integer: bool = False) -> Any:
        if key not in data:
            if default is None:
                raise self.error(path, f"missing required key {key!r}", has_value=False)
            return default
        v = data[key]
        p = (*path, key)
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise self.error(p, "must be a number", v)
        if integer and (not isinstance(v, int)):
            raise self.error(p, "must be a whole number", v)
        if not math.isfinite(v):
            raise self.error(p, "must be finite", v)
        if minimum is not None and (v <= minimum if strict_min else v < minimum):
            raise self.error(p, f"must be {'>' if strict_min else '>='} {minimum:g}", v)
        if maximum is not None and v > maximum:
            raise self.error(p, f"must be <= {maximum:g}", v)
        return v

    def string(self, data: Mapping, path: tuple, key: str, default: str | None = None,
               choices: Iterable[str] | None = None) -> str:
        if key not in data:
            if default is None:
                raise self.error(path, f"missing required key {key!r}", has_value=False)
            return default
        v = data[key]
        if not isinstance(v, str) or not v.strip():
            raise self.error((*path, key), "must be a non-empty string", v)
        if choices is not None and v not in set(choices):
            raise self.error((*path, key), f"must be one of {list(choices)}", v)
        return v

    def number_map(self, data: Mapping, path: tuple, key: str, *, minimum: float | None = None,
                   maximum: float | None = None) -> dict[str, float]:
        raw = data.get(key, {})
        if not isinstance(raw, Mapping):
            raise self.error((*path, key), "must be a table of name = number", raw)
        out = {}
        for k in raw:
            out[k] = self.number(raw, (*path, key), k, minimum=minimum, maximum=maximum)
        return out


def _fmt(path: tuple) -> str:
    out = ""
    for p in path:
        if isinstance(p, int):
            out += f"[{p}]"
        else:
            out += ("." if out else "") + (p if re.fullmatch(r"[A-Za-z0-9_-]+", p) else f'"{p}"')
    return out


# ----------------------------------------------------------------------------- hazards
def _hazard(r: _Reader, data: Any, path: tuple, notes: list[str], extra_keys: Iterable[str] = ()) -> Hazard:
    """A hazard from ``family`` and its parameters (with ``unit``; exponential also from
    ``events``/``per`` or ``risk``/``period``)."""
    if not isinstance(data, Mapping):
        raise r.error(path, "must be a table with a 'family' and its parameters", data)
    family = r.string(data, path, "family", choices=tuple(FAMILIES))
    unit = r.string(data, path, "unit", default="years", choices=TIME_UNITS)
    u = to_years(1.0, unit)  # years per unit
    import dataclasses

    names = [f.name for f in dataclasses.fields(FAMILIES[family]) if not f.name.startswith("_")]
    allowed = {"family", "unit", *names, *extra_keys}
    if family == "exponential":
        allowed |= {"events", "per", "risk", "period"}
    r.table(data, path, allowed)
    params: dict[str, Any] = {}
    if family == "exponential":
        forms = [k for k in (("rate",), ("events", "per"), ("risk", "period")) if any(x in data for x in k)]
        if len(forms) != 1:
            raise r.error(path, "an exponential hazard needs exactly one of: rate; events and per; risk and "
                                "period", {k: data[k] for k in ("rate", "events", "per", "risk", "period") if k in data})
        form = forms[0]
        if form == ("rate",):
            params["rate"] = r.number(data, path, "rate", minimum=0) / u
        elif form == ("events", "per"):
            ev = r.number(data, path, "events", minimum=0)
            per = r.number(data, path, "per", minimum=0, strict_min=True)
            params["rate"] = rate_per_year(ev, per, unit)
            notes.append(f"{_fmt(path)}: {ev:g} events per {per:g} person-{unit} = {params['rate']:.6g} per year")
        else:
            if "period" not in data:
                raise r.error(path, "a risk needs its period (the time over which the risk applies)",
                              data.get("risk"))
            p = r.number(data, path, "risk", minimum=0, maximum=1)
            if p >= 1:
                raise r.error((*path, "risk"), "must be in [0, 1) (a risk of 1 means an infinite rate)", p)
            period = r.number(data, path, "period", minimum=0, strict_min=True)
            conv = rate_from_risk(p, period, unit)
            params["rate"] = conv.rate
            notes.append(f"{_fmt(path)}: {conv.note}")
        try:
            return make_hazard(family, **params)
        except (HazardParameterError, UnitError, ValueError) as err:
            raise r.error(path, str(err), has_value=False) from None
    for name in names:
        if name not in data:
            raise r.error(path, f"missing parameter {name!r} of the {family} family", has_value=False)
        v = data[name]
        if isinstance(v, list):
            if not v or not all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v):
                raise r.error((*path, name), "must be a non-empty list of numbers", v)
            v = [float(x) for x in v]
        elif isinstance(v, bool) or not isinstance(v, (int, float)):
            raise r.error((*path, name), "must be a number", v)
        if name in TIME_PARAMS.get(family, ()):
            v = [x * u for x in v] if isinstance(v, list) else v * u
        elif name in RATE_PARAMS.get(family, ()):
            v = [x / u for x in v] if isinstance(v, list) else v / u
        elif name in LOG_TIME_PARAMS.get(family, ()):
            v = v + math.log(u)
        params[name] = tuple(v) if isinstance(v, list) else v
    try:
        return make_hazard(family, **params)
    except (HazardParameterError, ValueError) as err:
        raise r.error(path, str(err), has_value=False) from None


def _background(r: _Reader, data: Any, path: tuple, notes: list[str], sexes: tuple[str, ...]) -> BackgroundMortality:
    data = r.table(data, path, {"to", "clock", "life_table", "female", "male", "all", *sexes}, ["to"])
    target = r.string(data, path, "to")
    clock = r.string(data, path, "clock", default="age", choices=[c.value for c in Clock])
    hazards: dict[str, Hazard] = {}
    if "life_table" in data:
        lt = r.table(data["life_table"], (*path, "life_table"),
                     {"file", "kind", "age_column", "columns", "sheet", "fit", "fit_ages", "fit_method"},
                     ["file", "kind", "columns"])
        hazards = _life_table_hazards(r, lt, (*path, "life_table"), notes)
        others = [k for k in data if k not in ("to", "clock", "life_table")]
        if others:
            raise r.error((*path, others[0]), "give background hazards either by life_table or per sex, not both",
                          has_value=False)
    else:
        for sex in [k for k in data if k not in ("to", "clock")]:
            hazards[sex] = _hazard(r, data[sex], (*path, sex), notes)
        if not hazards:
            raise r.error(path, "needs a life_table or a hazard per sex (or 'all')", has_value=False)
    try:
        return BackgroundMortality(target=target, hazards=hazards, clock=clock)
    except ModelError as err:
        raise r.error(path, str(err), has_value=False) from None


def _life_table_hazards(r: _Reader, lt: dict, path: tuple, notes: list[str]) -> dict[str, Hazard]:
    from . import lifetable  # imported here: optional xlsx support lives there

    file = r.string(lt, path, "file")
    kind = r.string(lt, path, "kind", choices=("q", "m"))
    columns = lt["columns"]
    if isinstance(columns, str):
        columns = {"all": columns}
    if not isinstance(columns, Mapping) or not columns:
        raise r.error((*path, "columns"), "must be a column name or a table of sex = column", columns)
    target = Path(file)
    if not target.is_absolute():
        target = (r.base_dir or Path.cwd()) / target
    try:
        table = lifetable.read_life_table(target, kind=kind, age_column=lt.get("age_column", "age"),
                                          value_columns=dict(columns), sheet=lt.get("sheet"))
    except (OSError, ValueError) as err:
        raise r.error((*path, "file"), f"cannot use the life table: {err}", file) from None
    out: dict[str, Hazard] = {}
    fit = lt.get("fit")
    for sex in columns:
        if fit is None:
            out[sex] = table.to_hazard(sex)
            notes.append(f"{_fmt(path)} ({sex}): {table.conversion_note(sex)}")
        else:
            if fit not in ("gompertz", "gompertz_makeham"):
                raise r.error((*path, "fit"), "must be 'gompertz' or 'gompertz_makeham'", fit)
            ages = lt.get("fit_ages", [40, 90])
            method = lt.get("fit_method", "poisson")
            try:
                res = lifetable.fit_gompertz(table, sex=sex, age_range=tuple(ages), method=method,
                                             makeham=fit == "gompertz_makeham")
            except ValueError as err:
                raise r.error((*path, "fit"), str(err), fit) from None
            out[sex] = res.to_hazard()
            notes.append(f"{_fmt(path)} ({sex}): {fit} fitted by {method} over ages {ages}: b = {res.b:.4g}, "
                         f"g = {res.g:.4g}, doubling time {res.doubling_time:.3g} years")
    return out


# ----------------------------------------------------------------------------- the document
TOP_KEYS = ("format_version", "name", "description", "states", "transitions", "background", "population",
            "horizon", "strategies", "valuation", "run")


def _population(r: _Reader, data: Any) -> Population:
    path = ("population",)
    data = r.table(data, path, {"initial_state", "sex_mix", "entry_age"}, ["initial_state", "entry_age"])
    ea_path = (*path, "entry_age")
    ea = data["entry_age"]
    if not isinstance(ea, Mapping):
        raise r.error(ea_path, "must be a table with a 'distribution'", ea)
    dist = r.string(ea, ea_path, "distribution", choices=("fixed", "uniform", "normal", "empirical"))
    keys = {"fixed": ("age",), "uniform": ("low", "high"), "normal": ("mean", "sd", "low", "high"),
            "empirical": ("ages", "weights")}[dist]
    r.table(ea, ea_path, {"distribution", *keys}, keys)
    try:
        if dist == "fixed":
            entry = FixedAge(r.number(ea, ea_path, "age", minimum=0, maximum=130))
        elif dist == "uniform":
            entry = UniformAge(r.number(ea, ea_path, "low", minimum=0, maximum=130),
                               r.number(ea, ea_path, "high", minimum=0, maximum=130))
        elif dist == "normal":
            entry = NormalAge(r.number(ea, ea_path, "mean"), r.number(ea, ea_path, "sd", minimum=0, strict_min=True),
                              r.number(ea, ea_path, "low", minimum=0, maximum=130),
                              r.number(ea, ea_path, "high", minimum=0, maximum=130))
        else:
            for k in ("ages", "weights"):
                if not isinstance(ea[k], list) or not ea[k]:
                    raise r.error((*ea_path, k), "must be a non-empty list of numbers", ea[k])
            entry = EmpiricalAge(tuple(ea["ages"]), tuple(ea["weights"]))
        sex_mix = r.number_map(data, path, "sex_mix", minimum=0, maximum=1) or {"all": 1.0}
        return Population(entry, r.string(data, path, "initial_state"), sex_mix)
    except PopulationError as err:
        raise r.error(path, str(err), has_value=False) from None


def _raw_names(items: Any) -> list[str]:
    """The ``name`` strings of a list of tables, as typed (for checks that must go on when one of the
    tables has a problem of its own)."""
    if not isinstance(items, list):
        return []
    return [x["name"] for x in items if isinstance(x, Mapping) and isinstance(x.get("name"), str)]


def _build(doc: Mapping, text: str, file: str | None, base_dir: Path | None) -> Scenario:
    """Validate the whole document. Each state, transition, strategy and section is checked on its
    own, so one reading reports every problem it can find (a problem in one part stops only what
    depends on that part); they are raised together as :class:`ScenarioProblems`."""
    r = _Reader(text, file, base_dir)
    problems: list[ScenarioError] = []

    def attempt(fn, *args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except ScenarioError as err:
            problems.append(err)
            return None

    if not isinstance(doc, Mapping):
        raise r.error((), "must be a table", doc)
    for k in doc:
        if k not in TOP_KEYS:
            problems.append(r.error((k,), f"unknown key; allowed here: {sorted(TOP_KEYS)}", doc[k]))
    for k in ("format_version", "states", "transitions", "population", "horizon"):
        if k not in doc:
            problems.append(r.error((), f"missing required key {k!r}", has_value=False))
    version = doc.get("format_version", FORMAT_VERSION)
    if version != FORMAT_VERSION:  # a different format: nothing else can be read reliably
        raise r.error(("format_version",), f"this HazardTrace reads format_version {FORMAT_VERSION}", version)
    notes: list[str] = []

    # states
    states: list[State] = []
    raw_states = doc.get("states", [])
    if "states" in doc and (not isinstance(raw_states, list) or not raw_states):
        problems.append(r.error(("states",), "must be a list of [[states]] tables", raw_states))
        raw_states = []

    def state(i: int, s: Any) -> State:
        p = ("states", i)
        s = r.table(s, p, {"name", "absorbing", "description"}, ["name"])
        absorbing = s.get("absorbing", False)
        if not isinstance(absorbing, bool):
            raise r.error((*p, "absorbing"), "must be true or false", absorbing)
        name = r.string(s, p, "name")
        if any(st.name == name for st in states):
            raise r.error((*p, "name"), "duplicate state name", name)
        return State(name, absorbing)

    for i, s in enumerate(raw_states):
        got = attempt(state, i, s)
        if got is not None:
            states.append(got)
    names = list(dict.fromkeys([st.name for st in states] + _raw_names(raw_states)))

    # transitions
    transitions: list[Transition] = []
    raw_transitions = doc.get("transitions", [])
    if not isinstance(raw_transitions, list):
        problems.append(r.error(("transitions",), "must be a list of [[transitions]] tables", raw_transitions))
        raw_transitions = []

    def transition(i: int, t: Any) -> Transition:
        p = ("transitions", i)
        if not isinstance(t, Mapping):
            raise r.error(p, "must be a table", t)
        name = r.string(t, p, "name")
        # with no readable state names (the states list itself is broken) only that problem is reported
        src = r.string(t, p, "from", choices=names or None)
        dst = r.string(t, p, "to", choices=names or None)
        if any(tr.name == name for tr in transitions) or name == BACKGROUND:
            raise r.error((*p, "name"), f"duplicate transition name (or the reserved {BACKGROUND!r})", name)
        if any(st.name == src and st.absorbing for st in states):
            raise r.error((*p, "from"), "is an absorbing state; absorbing states have no exits", src)
        if src == dst:
            raise r.error((*p, "to"), "must differ from 'from'", dst)
        clock = r.string(t, p, "clock", default="entry", choices=[c.value for c in Clock])
        hz = _hazard(r, t, p, notes, extra_keys=("name", "from", "to", "clock", "description"))
        return Transition(name, src, dst, hz, clock)

    for i, t in enumerate(raw_transitions):
        got = attempt(transition, i, t)
        if got is not None:
            transitions.append(got)
    tnames = list(dict.fromkeys([t.name for t in transitions] + _raw_names(raw_transitions)))

    population = attempt(_population, r, doc["population"]) if "population" in doc else None
    # background (its per-sex keys follow the population's sexes, as typed if the population failed)
    background = None
    if "background" in doc:
        if population is not None:
            sexes = population.sexes
        else:
            mix = doc.get("population", {}).get("sex_mix", {}) if isinstance(doc.get("population"), Mapping) else {}
            sexes = tuple(mix) if isinstance(mix, Mapping) else ()
        background = attempt(_background, r, doc["background"], ("background",), notes, sexes)

    def horizon_of(data: Any) -> Horizon:
        hz_data = r.table(data, ("horizon",), {"value", "scale"}, ["value"])
        scale = r.string(hz_data, ("horizon",), "scale", default="time", choices=("time", "age"))
        value = r.number(hz_data, ("horizon",), "value", minimum=0, strict_min=True,
                         maximum=130 if scale == "age" else None)
        return Horizon(float(value), scale)

    horizon = attempt(horizon_of, doc["horizon"]) if "horizon" in doc else None

    # strategies
    strategies: list[Strategy] = []
    raw_strategies = doc.get("strategies", [])
    if not isinstance(raw_strategies, list):
        problems.append(r.error(("strategies",), "must be a list of [[strategies]] tables", raw_strategies))
        raw_strategies = []

    def strategy(i: int, s: Any) -> Strategy:
        p = ("strategies", i)
        s = r.table(s, p, {"name", "description", "hazard_ratios", "replacements", "state_costs",
                           "transition_costs"}, ["name"])
        name = r.string(s, p, "name")
        if any(st.name == name for st in strategies):
            raise r.error((*p, "name"), "duplicate strategy name", name)
        hrs = r.number_map(s, p, "hazard_ratios", minimum=0)
        repl = {}
        raw_repl = s.get("replacements", {})
        if not isinstance(raw_repl, Mapping):
            raise r.error((*p, "replacements"), "must be a table of transition = hazard", raw_repl)
        for tname, hdata in raw_repl.items():
            repl[tname] = _hazard(r, hdata, (*p, "replacements", tname), notes)
        for tname in (*hrs, *repl):
            if tname not in tnames:
                key = "hazard_ratios" if tname in hrs else "replacements"
                raise r.error((*p, key, tname), f"must name a transition {tnames}", tname)
        try:
            return Strategy(name, hrs, repl, r.number_map(s, p, "state_costs"), r.number_map(s, p, "transition_costs"))
        except ModelError as err:
            raise r.error(p, str(err), has_value=False) from None

    for i, st in enumerate(raw_strategies):
        got = attempt(strategy, i, st)
        if got is not None:
            strategies.append(got)

    def valuation_of(data: Any) -> Valuation:
        p = ("valuation",)
        v = r.table(data, p, {"utilities", "state_costs", "transition_costs", "discount_costs",
                              "discount_effects", "willingness_to_pay", "currency"})
        try:
            return Valuation(
                utilities=r.number_map(v, p, "utilities", maximum=1),
                state_costs=r.number_map(v, p, "state_costs"),
                transition_costs=r.number_map(v, p, "transition_costs"),
                discount_costs=r.number(v, p, "discount_costs", 0.035, minimum=0, maximum=0.999999),
                discount_effects=r.number(v, p, "discount_effects", 0.035, minimum=0, maximum=0.999999),
                willingness_to_pay=r.number(v, p, "willingness_to_pay", 20_000.0, minimum=0),
                currency=r.string(v, p, "currency", default="EUR"))
        except ValuationError as err:
            raise r.error(p, str(err), has_value=False) from None

    valuation = attempt(valuation_of, doc["valuation"]) if "valuation" in doc else Valuation()

    def run_of(data: Any) -> RunSettings:
        default = RunSettings()
        p = ("run",)
        rd = r.table(data, p, {"patients", "seed", "workers", "chunk_size", "cycle_lengths", "tolerance"})
        cycles = rd.get("cycle_lengths", list(default.cycle_lengths))
        if not isinstance(cycles, list) or not cycles:
            raise r.error((*p, "cycle_lengths"), "must be a non-empty list of durations", cycles)
        parsed = []
        for j, c in enumerate(cycles):
            try:
                parsed.append(parse_duration(c))
            except ValueError as err:
                raise r.error((*p, "cycle_lengths", j), str(err), c) from None
        return RunSettings(patients=r.number(rd, p, "patients", default.patients, minimum=1, integer=True),
                           seed=r.number(rd, p, "seed", default.seed, minimum=0, integer=True),
                           workers=r.number(rd, p, "workers", default.workers, minimum=1, maximum=64, integer=True),
                           chunk_size=r.number(rd, p, "chunk_size", default.chunk_size, minimum=1, integer=True),
                           cycle_lengths=tuple(parsed),
                           tolerance=r.number(rd, p, "tolerance", default.tolerance, minimum=0, strict_min=True))

    run = attempt(run_of, doc["run"]) if "run" in doc else RunSettings()
    name = doc.get("name", Path(file).stem if file else "scenario")
    if not isinstance(name, str):
        problems.append(r.error(("name",), "must be a string", name))
    if problems:
        raise problems[0] if len(problems) == 1 else ScenarioProblems(problems, file=file)
    try:
        model = Model(states=tuple(states), transitions=tuple(transitions), population=population,
                      horizon=horizon, background=background, strategies=tuple(strategies),
                      valuation=valuation, name=name)
    except (ModelError, PopulationError, ValuationError) as err:
        raise ScenarioError(str(err), file=file) from None
    _check_reachable(r, model)
    return Scenario(model=model, run=run, path=Path(file) if file else None, text=text,
                    conversions=tuple(notes))


def _check_reachable(r: _Reader, model: Model) -> None:
    """Every state must be reachable from the initial state (else it is a typo or dead code)."""
    reach = {model.population.initial_state}
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
            raise r.error(("states", i, "name"), f"cannot be reached from the initial state "
                                                 f"{model.population.initial_state!r}", s.name)


def parse_scenario(text: str, file: str | Path | None = None, base_dir: Path | None = None) -> Scenario:
    """Validate scenario ``text`` (TOML). ``file`` names it in messages; relative paths inside resolve
    against ``base_dir`` (default: the file's folder)."""
    fname = str(file) if file is not None else None
    try:
        doc = tomlkit.parse(text).unwrap()
    except ParseError as err:
        raise ScenarioError(f"not valid TOML: {err}", file=fname, line=getattr(err, "line", None)) from None
    if base_dir is None and file is not None:
        base_dir = Path(file).resolve().parent
    return _build(doc, text, fname, base_dir)


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as err:
        raise ScenarioError(f"cannot read the file: {err.strerror}", file=str(path)) from None
    return parse_scenario(text, path)


def save_scenario(text_or_doc: str | Mapping, path: str | Path, *, force: bool = True) -> Path:
    """Write a scenario atomically (temporary file, then rename). ``text_or_doc`` is TOML text (kept
    exactly, comments included) or a document mapping (serialised with tomlkit)."""
    path = Path(path)
    text = text_or_doc if isinstance(text_or_doc, str) else tomlkit.dumps(text_or_doc)
    if path.exists() and not force:
        raise ScenarioError("exists; pass force=True to overwrite", file=str(path))
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


# ----------------------------------------------------------------------------- writing from a model
def _hazard_doc(h: Hazard) -> dict:
    params = h.params()
    if h.family not in FAMILIES:
        raise ScenarioError(f"a {h.family} hazard cannot be written to a scenario file; use hazard_ratios "
                            f"for proportional hazards")
    out: dict[str, Any] = {"family": h.family}
    for k, v in params.items():
        out[k] = list(v) if isinstance(v, tuple) else float(v)
    return out


def document_from_model(model: Model, run: RunSettings | None = None, description: str = "") -> dict:
    """A scenario document (plain dict) equivalent to ``model``; ``scenario_text`` renders it."""
    doc: dict[str, Any] = {"format_version": FORMAT_VERSION, "name": model.name}
    if description:
        doc["description"] = description
    doc["states"] = [{"name": s.name, **({"absorbing": True} if s.absorbing else {})} for s in model.states]
    doc["transitions"] = [{"name": t.name, "from": t.source, "to": t.target, "clock": t.clock.value,
                           **_hazard_doc(t.hazard)} for t in model.transitions]
    if model.background is not None:
        bg = model.background
        doc["background"] = {"to": bg.target, "clock": bg.clock.value,
                             **{sex: _hazard_doc(h) for sex, h in bg.hazards.items()}}
    ea = model.population.entry_age
    if isinstance(ea, FixedAge):
        ead = {"distribution": "fixed", "age": ea.age}
    elif isinstance(ea, UniformAge):
        ead = {"distribution": "uniform", "low": ea.low, "high": ea.high}
    elif isinstance(ea, NormalAge):
        ead = {"distribution": "normal", "mean": ea.mu, "sd": ea.sd, "low": ea.low, "high": ea.high}
    else:
        ead = {"distribution": "empirical", "ages": list(ea.ages), "weights": list(ea.weights)}
    doc["population"] = {"initial_state": model.population.initial_state,
                         "sex_mix": dict(model.population.sex_mix), "entry_age": ead}
    doc["horizon"] = {"value": model.horizon.value, "scale": model.horizon.scale}
    doc["strategies"] = []
    for st in model.strategies:
        sd: dict[str, Any] = {"name": st.name}
        for key in ("hazard_ratios", "state_costs", "transition_costs"):
            if getattr(st, key):
                sd[key] = dict(getattr(st, key))
        if st.replacements:
            sd["replacements"] = {k: _hazard_doc(v) for k, v in st.replacements.items()}
        doc["strategies"].append(sd)
    v = model.valuation
    doc["valuation"] = {"utilities": dict(v.utilities), "state_costs": dict(v.state_costs),
                        "transition_costs": dict(v.transition_costs), "discount_costs": v.discount_costs,
                        "discount_effects": v.discount_effects, "willingness_to_pay": v.willingness_to_pay,
                        "currency": v.currency}
    if run is not None:
        doc["run"] = {"patients": run.patients, "seed": run.seed, "workers": run.workers,
                      "chunk_size": run.chunk_size, "cycle_lengths": list(run.cycle_lengths),
                      "tolerance": run.tolerance}
    return doc


def scenario_text(doc: Mapping, header: str = "") -> str:
    """Render a document as TOML (tomlkit), with an optional comment header."""
    body = tomlkit.dumps(copy.deepcopy(dict(doc)))
    if header:
        body = "".join(f"# {ln}\n" if ln else "#\n" for ln in header.splitlines()) + "\n" + body
    return body
