"""Reading hazards: a hazard table (``family``, ``unit`` and the family's parameters, converted to
years by their dimension) and background mortality from a life table.

Parameter domains (a Weibull shape > 0, ...) are the hazard families' own: their
:class:`~sim.hazards.HazardParameterError` carries the parameter's key path, which is placed under
the hazard's path in the document.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from typing import Any, Mapping

from ...hazards import (Hazard, HazardParameterError, UnitError, make_hazard, rate_from_risk,
                        rate_per_year, to_year_units, to_years)
from ...problems import KeyPath, Problem, ValidationError, format_key
from .checking import Checker, Invalid
from .schema import EXPONENTIAL_FORMS, HAZARD_BASE, Node, Numbers, Table, hazard_keys

__all__ = ["read_hazard", "read_life_table_hazards"]


def _hazard_problems(err: ValidationError, data: Mapping, path: KeyPath) -> list[Problem]:
    """A hazard family's problems placed under ``path``, with the value as written in the file."""
    out = []
    for p in err.problems:
        written = _lookup(data, p.path)
        out.append(p.located(path=(*path, *p.path)) if written is None else
                   Problem((*path, *p.path), p.rule, written))
    return out


def _lookup(data: Any, path: KeyPath) -> Any:
    for part in path:
        if isinstance(part, int) and isinstance(data, list) and 0 <= part < len(data):
            data = data[part]
        elif isinstance(part, str) and isinstance(data, Mapping) and part in data:
            data = data[part]
        else:
            return None
    return data


def read_hazard(ck: Checker, data: Any, path: KeyPath, notes: list[str],
                own_keys: Mapping[str, Node] | None = None) -> Hazard:
    """The hazard described by the table ``data`` at ``path`` (``own_keys``: the other keys the
    table may hold, checked by the caller). Raises :class:`Invalid` with the problems recorded."""
    if not isinstance(data, Mapping):
        ck.fail(path, "must be a table with a 'family' and its parameters", data)
    own = dict(own_keys or {})
    if "family" not in data:
        ck.fail(path, "missing required key 'family'")
    family = ck.value(HAZARD_BASE["family"], data["family"], (*path, "family"))
    params_decl = hazard_keys(family)
    keys = {**HAZARD_BASE, **params_decl}
    before = len(ck.problems)
    if family != "exponential":
        for name in params_decl:
            if name not in data:
                ck.add(path, f"missing parameter {name!r} of the {family} family")
        keys = {k: (v if k in HAZARD_BASE else _optional(v)) for k, v in keys.items()}
    values = ck.table(data, path, keys, extra=own)
    if len(ck.problems) > before:
        raise Invalid
    unit = values["unit"]
    per_unit = to_years(1.0, unit)  # years per unit
    if family == "exponential":
        params = _exponential(ck, data, values, path, unit, notes)
    else:
        params = {name: to_year_units(decl.element.dimension if isinstance(decl, Numbers) else decl.dimension,
                                      values[name], per_unit)
                  for name, decl in params_decl.items()}
    try:
        return make_hazard(family, **params)
    except HazardParameterError as err:
        ck.extend(_hazard_problems(err, data, path))
    except (UnitError, ValueError) as err:
        ck.add(path, str(err))
    raise Invalid


def _optional(node: Node) -> Node:
    """The same declaration without ``required`` (a missing parameter has its own message)."""
    return replace(node, required=False)


def _exponential(ck: Checker, data: Mapping, values: dict, path: KeyPath, unit: str, notes: list[str]
                 ) -> dict[str, float]:
    forms = [form for form in EXPONENTIAL_FORMS if any(k in data for k in form)]
    if len(forms) != 1:
        given = {k: data[k] for form in EXPONENTIAL_FORMS for k in form if k in data}
        ck.fail(path, "an exponential hazard needs exactly one of: rate; events and per; risk and period", given)
    form = forms[0]
    if form == ("risk", "period") and "period" not in data:
        ck.fail(path, "a risk needs its period (the time over which the risk applies)", data.get("risk"))
    for k in form:
        if k not in data:
            ck.fail(path, f"missing required key {k!r}")
    try:
        if form == ("rate",):
            return {"rate": values["rate"] / to_years(1.0, unit)}
        if form == ("events", "per"):
            ev, per = values["events"], values["per"]
            rate = rate_per_year(ev, per, unit)
            notes.append(f"{format_key(path)}: {ev:g} events per {per:g} person-{unit} = {rate:.6g} per year")
            return {"rate": rate}
        risk = values["risk"]
        if risk >= 1:
            ck.fail((*path, "risk"), "must be in [0, 1) (a risk of 1 means an infinite rate)", data["risk"])
        conv = rate_from_risk(risk, values["period"], unit)
        notes.append(f"{format_key(path)}: {conv.note}")
        return {"rate": conv.rate}
    except (UnitError, ValueError, OverflowError) as err:
        ck.fail(path, str(err))


# ----------------------------------------------------------------------------- life tables
def _life_table_key(path: KeyPath, lt: Mapping[str, Any], err: Exception) -> KeyPath:
    """The key a life-table reading error is about: a column the file lacks is blamed on the key
    naming it (``age_column``, ``columns.<sex>``), anything else (a bad cell, an unreadable file) on
    ``file``. From the error's problems (:class:`sim.io.lifetable.LifeTableError`: the column as
    key path, no value for a missing column), not its wording."""
    problems = getattr(err, "problems", ())
    missing = bool(problems) and bool(problems[0].path) and not problems[0].has_value
    column = problems[0].path[0] if missing else None
    if column is not None and column == lt.get("age_column"):
        return (*path, "age_column")
    columns = lt.get("columns")
    if isinstance(columns, str) and column == columns:
        return (*path, "columns")
    if isinstance(columns, Mapping):
        for sex, name in columns.items():
            if name == column:
                return (*path, "columns", sex)
    return (*path, "file")


def _get_key(table: Mapping[str, Any], rest: KeyPath) -> Any:
    for key in rest:
        table = table[key]
    return table


def read_life_table_hazards(ck: Checker, raw: Any, path: KeyPath, node: Table, base_dir: Path | None,
                            notes: list[str]) -> dict[str, Hazard]:
    """Background hazards per sex from ``[background.life_table]``: the table's bands, or a fitted
    Gompertz(-Makeham) law."""
    from .. import lifetable  # the life-table reader (optional xlsx support lives there)

    lt = ck.table(raw, path, node.keys)
    columns = lt["columns"]
    columns = {"all": columns} if isinstance(columns, str) else dict(columns)
    target = Path(lt["file"])
    if not target.is_absolute():
        target = (base_dir or Path.cwd()) / target
    try:
        table = lifetable.read_life_table(target, kind=lt["kind"], age_column=lt["age_column"],
                                          value_columns=columns, sheet=lt.get("sheet"))
    except (OSError, ValueError) as err:
        key = _life_table_key(path, lt, err)
        ck.fail(key, f"cannot use the life table: {err}", lt["file"] if key[-1] == "file" else _get_key(lt, key[len(path):]))
    out: dict[str, Hazard] = {}
    fit = lt.get("fit")
    for sex in columns:
        if fit is None:
            out[sex] = table.to_hazard(sex)
            notes.append(f"{format_key(path)} ({sex}): {table.conversion_note(sex)}")
            continue
        ages, method = raw.get("fit_ages", list(lt["fit_ages"])), lt["fit_method"]
        try:
            res = lifetable.fit_gompertz(table, sex=sex, age_range=tuple(lt["fit_ages"]), method=method,
                                         makeham=fit == "gompertz_makeham")
        except ValueError as err:
            ck.fail((*path, "fit"), str(err), fit)
        out[sex] = res.to_hazard()
        notes.append(f"{format_key(path)} ({sex}): {fit} fitted by {method} over ages {ages}: "
                     f"b = {res.b:.4g}, g = {res.g:.4g}, doubling time {res.doubling_time:.3g} years")
    return out

