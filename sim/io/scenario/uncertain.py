"""Reading ``[[uncertainty]]``: each entry puts a distribution on one parameter (``parameter = "..."``)
or on a group drawn together (``parameters = [...]``: a Dirichlet on the shares of one table, a
multivariate normal on a correlated group), named as :func:`.parameters.parameters` names them
(``"valuation.utilities.well"``, ``"transitions[0].shape"``).

Checked here, every problem at its key (see docs/scenario-format.md, 'Uncertain inputs'):

* the distribution's own keys (one way of giving it: its parameters, or ``mean`` and ``se``
  fitted by the method of moments) and their domains (:mod:`sim.uncertainty`);
* each name is a numeric model parameter of this scenario (not a run setting, not the willingness
  to pay, which the analysis varies itself), named by one entry only;
* the distribution cannot give a value the parameter's rule refuses: its support lies inside the
  parameter's range (for hazard parameters, the family's domain, found by asking the family);
* a share of a table that sums to 1 (``population.sex_mix``, ``population.initial_state``) is
  varied only by a Dirichlet on all the shares of that table, and a Dirichlet names nothing else.

A parameter without a point value in the file takes the distribution's mean ("instead of"); with
one, the point value is used for the deterministic run ("beside") and the file is read exactly as
without the section.
"""

from __future__ import annotations

import functools
import math
import re
from typing import Any, Mapping

from ...hazards import FAMILY_DIMENSIONS, make_hazard
from ...model.checks import is_number
from ...problems import KeyPath, ValidationError, format_key
from ...uncertainty import (MOMENT_FITS, Beta, Dirichlet, Gamma, LogNormal, MultivariateNormal, Normal, Triangular,
                            UncertainInput, Uniform, Univariate, dirichlet_from_shares, lognormal_from_interval,
                            mvn_from_correlation)
from .checking import Checker, Invalid
from .errors import ScenarioError
from .schema import (EXPONENTIAL_FORMS, SCHEMA, UNCERTAINTY_FORMS, HazardTable, Number, Ref, StateOrShares, Text,
                     Variant, node_at)

__all__ = ["parse_key", "read_uncertainty", "distribution_of", "SHARE_TABLES", "NOT_UNCERTAIN",
           "renamed_parameter", "read_variant"]

SHARE_TABLES = (("population", "sex_mix"), ("population", "initial_state"))
"""Tables of shares that sum to 1 (``initial_state`` also per sex, one level down)."""
NOT_UNCERTAIN = {("valuation", "willingness_to_pay"): "the willingness to pay is the decision rule, not an "
                                                       "uncertain input: the analysis varies it over a range"}
_NATIVE = {"beta": Beta, "gamma": Gamma, "lognormal": LogNormal, "uniform": Uniform, "triangular": Triangular}
_TOKEN = re.compile(r'\s*(?:(?P<bare>[A-Za-z0-9_-]+)|"(?P<quoted>(?:[^"\\]|\\.)*)"|\[(?P<index>\d+)\])\s*')


@functools.lru_cache(maxsize=4096)
def parse_key(text: str) -> KeyPath | None:
    """``'strategies[1].hazard_ratios."disease death"'`` -> ``("strategies", 1, "hazard_ratios",
    "disease death")``: the inverse of :func:`sim.problems.format_key`; ``None`` if not a key."""
    if not isinstance(text, str):
        return None
    out: list[Any] = []
    pos, dot = 0, False
    while pos < len(text):
        if out and not dot and text[pos] == ".":
            pos, dot = pos + 1, True
            continue
        m = _TOKEN.match(text, pos)
        if m is None or (out and not dot and m.group("index") is None):
            return None
        if m.group("index") is not None:
            if not out or dot:
                return None
            out.append(int(m.group("index")))
        else:
            word = m.group("bare") if m.group("bare") is not None else re.sub(r"\\(.)", r"\1", m.group("quoted"))
            out.append(word)
        pos, dot = m.end(), False
    return tuple(out) if out and not dot and isinstance(out[0], str) else None


def _get(doc: Any, path: KeyPath) -> Any:
    for key in path:
        if isinstance(key, int):
            doc = doc[key] if isinstance(doc, list) and 0 <= key < len(doc) else None
        else:
            doc = doc.get(key) if isinstance(doc, Mapping) else None
    return doc


def _names(doc: Mapping, ref: Ref) -> set[str]:
    """The names of ``ref`` the document declares (as typed), for checking a name in a key."""
    def of(items: Any) -> set[str]:
        return {x["name"] for x in items if isinstance(x, Mapping) and isinstance(x.get("name"), str)} \
            if isinstance(items, list) else set()
    if ref is Ref.STATE:
        return of(doc.get("states"))
    if ref in (Ref.TRANSITION, Ref.EXIT):
        return of(doc.get("transitions")) | ({"background death"} if ref is Ref.EXIT else set())
    if ref is Ref.SEX:
        mix = _get(doc, ("population", "sex_mix"))
        return set(mix) if isinstance(mix, Mapping) else {"all"}
    return set()


def _reference_problem(doc: Mapping, path: KeyPath) -> str | None:
    """A name inside the key that names no state/transition where the format expects one."""
    for n in range(1, len(path)):
        parent = node_at(doc, path[:n])
        key_ref = getattr(parent, "key_ref", None)
        if path[:n] == ("population", "sex_mix"):
            continue  # the sex mix declares the sexes
        if key_ref is not None and isinstance(path[n], str) and path[n] not in _names(doc, key_ref):
            return f"{format_key(path[:n + 1])} names no {key_ref.value} of this scenario"
    if path[:2] == ("population", "initial_state") and len(path) >= 3:
        states = _names(doc, Ref.STATE)
        if path[-1] not in states:
            return f"{format_key(path)} names no state of this scenario"
    return None


def _form_problem(doc: Mapping, path: KeyPath) -> str | None:
    """A constant hazard's parameter the file does not give while its table uses another form
    (``events`` and ``per`` given, a distribution on ``rate``)."""
    table = _get(doc, path[:-1])
    if not (isinstance(table, Mapping) and table.get("family") == "exponential" and path[-1] not in table):
        return None
    for form in EXPONENTIAL_FORMS:
        if path[-1] not in form and any(k in table for k in form):
            return (f"{format_key(path[:-1])} gives its constant hazard by {' and '.join(form)}: put the "
                    f"distribution on one of those, or write {path[-1]} there instead")
    return None


def _hazard_domain(doc: Mapping, path: KeyPath) -> tuple[float, bool] | None:
    """For a hazard family's parameter: its lower bound and whether it is strict, found by asking the
    family (a value of -1, then 0, with the table's other parameters); ``None`` when unbounded or
    unknown (the table itself has problems: reported at the table)."""
    for n in range(len(path) - 1, 0, -1):
        if isinstance(node_at(doc, path[:n]), HazardTable):
            table = _get(doc, path[:n])
            break
    else:
        return None
    family = table.get("family") if isinstance(table, Mapping) else None
    if family not in FAMILY_DIMENSIONS or family == "exponential":
        return None  # the exponential forms' ranges are declared in the schema
    name = path[n]
    params = {k: table.get(k) for k in FAMILY_DIMENSIONS[family]}
    if any(v is None for v in params.values()):
        return None

    def ok(value: float) -> bool:
        probe = dict(params)
        if len(path) > n + 1 and isinstance(probe[name], list):
            probe[name] = [value if i == path[n + 1] else v for i, v in enumerate(probe[name])]
        else:
            probe[name] = value
        try:
            make_hazard(family, **probe)
        except (ValidationError, ValueError, TypeError):
            return False
        return True

    try:
        make_hazard(family, **params)
    except (ValidationError, ValueError, TypeError):
        return None  # the point values themselves are refused: reported at the table
    if ok(-1.0):
        return None
    return 0.0, not ok(0.0)


def _rule(doc: Mapping, path: KeyPath, node: Number) -> tuple[float, bool, float, bool]:
    """``(low, strict_low, high, strict_high)``: the range a value of the parameter must lie in."""
    low, strict_low = (-math.inf, False) if node.minimum is None else (float(node.minimum), node.strict_min)
    high = math.inf if node.maximum is None else float(node.maximum)
    if node.minimum is None:
        found = _hazard_domain(doc, path)
        if found is not None:
            low, strict_low = found
    return low, strict_low, high, False


def _support_problem(key: str, family: str, support: tuple[float, float], closed: tuple[bool, bool],
                     rule: tuple[float, bool, float, bool]) -> str | None:
    """Why draws of a distribution with ``support`` can break the parameter's ``rule`` (or None)."""
    lo, hi = support
    low, strict_low, high, strict_high = rule
    below = lo < low or (lo == low and strict_low and closed[0])
    above = hi > high or (hi == high and strict_high and closed[1])
    if not (below or above):
        return None
    if below:
        bound = f"{'>' if strict_low else '>='} {low:g}"
        hint = ("; truncate it (low = ...) or use a gamma or log-normal" if family == "normal" and low == 0
                else "; truncate it (low = ...)" if family == "normal" else "")
        return f"a {family} distribution can give values {'below' if lo < low else 'equal to'} {low:g} (its " \
               f"lowest is {lo:g}), but {key} must be {bound}{hint}"
    bound = f"{'<' if strict_high else '<='} {high:g}"
    hint = "; use a beta or truncate it (high = ...)" if high == 1 and family != "beta" else ""
    return f"a {family} distribution can give values above {high:g} (its highest is {hi:g}), but {key} must " \
           f"be {bound}{hint}"


def _share_table(path: KeyPath, doc: Mapping) -> KeyPath | None:
    """The share table a share belongs to (``("population", "sex_mix")`` etc.), else None."""
    for table in SHARE_TABLES:
        if path[:len(table)] == table:
            value = _get(doc, table)
            per_sex = isinstance(value, Mapping) and value and all(isinstance(v, Mapping) for v in value.values())
            return path[:len(table) + 1] if per_sex and table[-1] == "initial_state" and len(path) == 4 else table
    return None


def _distribution(ck: Checker, dist: str, v: Mapping, p: KeyPath, raw: Mapping) -> tuple[Any, dict]:
    """The distribution of entry ``v`` (checked values) and what it was fitted from."""
    forms = UNCERTAINTY_FORMS[dist]
    given = [f for f in forms if all(k in v for k in f)]
    if dist == "normal":
        if "sd" in v and "se" in v:
            ck.fail((*p, "se"), "give sd or se (the same for a normal), not both", v["se"])
        given = given[:1]
    used = {k for f in forms for k in f}
    if len(given) != 1 or any(k in v for k in used - set(given[0])):
        if len(forms) == 1:
            ck.fail(p, f"a {dist} distribution needs {' and '.join(forms[0])}")
        ways = " or ".join(" and ".join(f) for f in forms)
        ck.fail(p, f"give a {dist} distribution by exactly one of: {ways}")
    form = given[0]
    try:
        if dist == "normal":
            sd = v.get("sd", v.get("se"))
            d = Normal(v["mean"], sd, v.get("low", -math.inf), v.get("high", math.inf))
            return d, {}
        if dist == "dirichlet":
            if form == ("alpha",):
                return Dirichlet(v["alpha"]), {}
            return dirichlet_from_shares(v["mean"], v["sample_size"]), {"mean": list(v["mean"]),
                                                                        "sample_size": v["sample_size"]}
        if dist == "multivariate_normal":
            if form == ("mean", "covariance"):
                return MultivariateNormal(v["mean"], v["covariance"], v.get("transform", ())), {}
            fitted = {k: _listed(v[k]) for k in ("mean", "se", "correlation", "transform") if k in v}
            return mvn_from_correlation(v["mean"], v["se"], v["correlation"], v.get("transform", ())), fitted
        if form == ("interval",):
            return lognormal_from_interval(v["interval"]), {"interval": list(v["interval"])}
        if form == ("mean", "se"):
            return MOMENT_FITS[dist](v["mean"], v["se"]), {"mean": v["mean"], "se": v["se"]}
        return _NATIVE[dist](*[v[k] for k in form]), {}
    except ValidationError as err:  # each problem with the value as written in the file
        for problem in err.problems:
            written = _get(raw, problem.path)
            ck.add((*p, *problem.path), problem.rule, problem.value if written is None else written)
        raise Invalid from None


def distribution_of(entry: Any) -> tuple[Any, dict]:
    """The distribution an ``[[uncertainty]]`` table describes, and what it was fitted from (empty
    when given by its own parameters), without looking at the parameters it names: for a preview
    while the table is being edited.

    Raises
    ------
    ScenarioError
        Every problem of the table's distribution keys, with key paths relative to the table
        (``("se",)``, ``("covariance", 0, 1)``).
    """
    ck = Checker()
    node = SCHEMA.keys["uncertainty"].item
    try:
        if not isinstance(entry, Mapping):
            ck.fail((), "must be a table with a 'distribution'", entry)
        if node.tag not in entry:
            ck.fail((), f"missing required key {node.tag!r}")
        dist = ck.value(Text(choices=tuple(node.variants)), entry[node.tag], (node.tag,))
        keys = {k: n for k, n in node.variants[dist].items() if k not in ("parameter", "parameters")}
        v = ck.table(entry, (), keys, extra=(node.tag, "parameter", "parameters"))
        return _distribution(ck, dist, v, (), entry)
    except Invalid:
        raise ScenarioError.of(ck.problems) from None


def _listed(value: Any) -> Any:
    """Tuples (as the checker returns lists) back to lists, as the file writes them."""
    return [_listed(x) for x in value] if isinstance(value, (tuple, list)) else value


def read_variant(ck: Checker, raw: Any, path: KeyPath, node: Variant) -> tuple[str, dict[str, Any]]:
    """A table whose tag key (``distribution``) picks its variant: the variant and its checked keys."""
    if not isinstance(raw, Mapping):
        ck.fail(path, "must be a table with a 'distribution'", raw)
    if node.tag not in raw:
        ck.fail(path, f"missing required key {node.tag!r}")
    dist = ck.value(Text(choices=tuple(node.variants)), raw[node.tag], (*path, node.tag))
    return dist, ck.table(raw, path, node.variants[dist], extra=(node.tag,))


def _entry(ck: Checker, doc: Mapping, i: int, raw: Any) -> UncertainInput:
    p = ("uncertainty", i)
    dist, v = read_variant(ck, raw, p, SCHEMA.keys["uncertainty"].item)
    d, fitted = _distribution(ck, dist, v, p, raw)
    where = (*p, "parameter") if "parameter" in v else (*p, "parameters")
    names = (v["parameter"],) if "parameter" in v else v["parameters"]
    paths = []
    for j, name in enumerate(names):
        at = where if "parameter" in v else (*where, j)
        path = parse_key(name)
        node_ = node_at(doc, path) if path is not None else None
        if path is None or not (isinstance(node_, Number) and node_.parameter and node_.dimension is not None):
            ck.add(at, "must name a numeric model parameter as `hazardtrace check` lists it, e.g. "
                       "\"valuation.utilities.well\" or \"transitions[0].shape\"", name)
            continue
        if path in NOT_UNCERTAIN:
            ck.add(at, NOT_UNCERTAIN[path], name)
            continue
        wrong = _reference_problem(doc, path) or _form_problem(doc, path)
        if wrong:
            ck.add(at, wrong, name)
            continue
        paths.append((at, path, node_))
    if len(paths) != len(names):
        raise Invalid
    keys = tuple(format_key(path) for _, path, _ in paths)
    try:
        spec = UncertainInput(keys, d, fitted, v.get("description", ""))
    except ValidationError as err:
        ck.extend(err.within(*p).problems)
        raise Invalid from None
    _check_supports(ck, doc, spec, paths)
    _check_shares(ck, doc, spec, paths, p)
    return spec


def _check_supports(ck: Checker, doc: Mapping, spec: UncertainInput, paths: list) -> None:
    d = spec.distribution
    before = len(ck.problems)
    for j, (at, path, node) in enumerate(paths):
        if isinstance(d, Univariate):
            support, closed = d.support, d.closed
        elif isinstance(d, Dirichlet):
            support, closed = (0.0, 1.0), (False, False)
        else:
            t = d.transforms[j]
            support = {"identity": (-math.inf, math.inf), "log": (0.0, math.inf), "logit": (0.0, 1.0)}[t]
            closed = (False, False)
        probe = doc if is_number(_get(doc, path)) else with_values(doc, {path: spec.means()[spec.keys[j]]})
        why = _support_problem(spec.keys[j], d.family, support, closed, _rule(probe, path, node))
        if why:
            ck.add(at, why, spec.keys[j])
    if len(ck.problems) > before:
        raise Invalid


def _check_shares(ck: Checker, doc: Mapping, spec: UncertainInput, paths: list, p: KeyPath) -> None:
    tables = {_share_table(path, doc) for _, path, _ in paths}
    if isinstance(spec.distribution, Dirichlet):
        if len(tables) != 1 or None in tables:
            ck.fail((*p, "parameters"), "a Dirichlet must name the shares of one table that sums to 1 (all of "
                                        "population.sex_mix, or of population.initial_state (per sex: of one "
                                        "sex)); these shares do not belong together", list(spec.keys))
        table = tables.pop()
        present = _get(doc, table)
        present = set(present) if isinstance(present, Mapping) else set()
        named = {path[len(table)] for _, path, _ in paths}
        missing = sorted(present - named)
        if missing:
            ck.fail((*p, "parameters"), f"a Dirichlet must name every share of {format_key(table)} (they sum to "
                                        f"1 together); missing: {missing}", list(spec.keys))
        return
    for at, path, _ in paths:
        table = _share_table(path, doc)
        if table is not None:
            ck.fail(at, f"a share of {format_key(table)} moves the others (they sum to 1): put a dirichlet "
                        f"distribution on all of its shares", format_key(path))


def read_uncertainty(ck: Checker, doc: Mapping) -> tuple[list[UncertainInput], dict[KeyPath, float]]:
    """The uncertain inputs of ``doc`` (problems recorded in ``ck``) and the point values to fill in
    for parameters the file does not give (the distribution's mean), by key path."""
    raw = doc.get("uncertainty")
    if raw is None:
        return [], {}
    if not isinstance(raw, list):
        ck.add(("uncertainty",), "must be a list of [[uncertainty]] tables", raw)
        return [], {}
    specs: list[UncertainInput] = []
    owner: dict[str, int] = {}
    fills: dict[KeyPath, float] = {}
    for i, entry in enumerate(raw):
        spec = ck.attempt(_entry, ck, doc, i, entry)
        if spec is None:
            continue
        clash = [k for k in spec.keys if k in owner]
        if clash:
            ck.add(("uncertainty", i), f"{clash[0]} already has a distribution (uncertainty[{owner[clash[0]]}]); "
                                       f"give each parameter one", clash[0])
            continue
        owner.update({k: i for k in spec.keys})
        specs.append(spec)
        for k, mean in spec.means().items():
            path = parse_key(k)
            assert path is not None
            if not is_number(_get(doc, path)):
                fills[path] = mean
    return specs, fills


def with_values(doc: Mapping, values: Mapping[KeyPath, float]) -> dict:
    """A copy of ``doc`` with ``values`` set at their key paths (missing tables created). Only the
    tables and arrays on the paths are copied (shallowly); everything else is shared with ``doc``."""
    out = dict(doc)
    fresh: set[int] = {id(out)}  # containers already copied for this call
    for path, value in values.items():
        node: Any = out
        for key in path[:-1]:
            nxt = node[key] if isinstance(key, int) else node.get(key)
            if not isinstance(nxt, (Mapping, list)):
                nxt = {}
            elif id(nxt) not in fresh:
                nxt = list(nxt) if isinstance(nxt, list) else dict(nxt)
            fresh.add(id(nxt))
            node[key] = nxt
            node = nxt
        node[path[-1]] = float(value)
    return out


def renamed_parameter(doc: Mapping, name: Any, refs: tuple[Ref, ...], old: str, new: str) -> Any:
    """The parameter name ``name`` with each part that names ``old`` (a state, transition, ...: one of
    ``refs``) renamed to ``new``; anything that is not a parameter name is returned unchanged."""
    path = parse_key(name) if isinstance(name, str) else None
    if path is None:
        return name
    out = list(path)
    for n in range(1, len(path)):
        parent = node_at(doc, tuple(out[:n]))
        if isinstance(parent, StateOrShares):
            table = _get(doc, path[:n])
            per_sex = isinstance(table, Mapping) and table and all(isinstance(v, Mapping) for v in table.values())
            ref = None if per_sex else Ref.STATE
        else:
            ref = getattr(parent, "key_ref", None)
            if ref is None and n >= 2 and isinstance(node_at(doc, tuple(out[:n - 1])), StateOrShares):
                ref = Ref.STATE  # a state of one sex's table
        if ref in refs and out[n] == old:
            out[n] = new
    return format_key(tuple(out)) if out != list(path) else name
