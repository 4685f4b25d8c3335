"""A scenario's model with some parameters set to other values (one parameter draw of a probabilistic
analysis), validated as the reader validates the file.

Values are given by parameter name (:func:`.parameters.parameters`' keys, e.g.
``"transitions[0].scale"``) in the units and form the file writes them: a hazard parameter in its
table's ``unit``, ``events`` and ``per`` of an exponential as counted, a risk over its period. Only
the parts of the model that hold a changed parameter are read again, through the reader's own
functions (units, conversions, every rule); the others are reused. A value that breaks a rule
raises a :class:`.errors.ScenarioError` naming the key, the value and the rule.
"""

from __future__ import annotations

import functools
from typing import Any, Mapping

import tomlkit

from ...model import Model
from ...problems import KeyPath, ValidationError
from .checking import Invalid
from .errors import ScenarioError
from .limits import _follow_up, _hazard_problems
from .positions import KeyLines
from .parameters import Parameter, parameters
from .reader import Scenario, _document_paths, _raw_names, _Reading
from .uncertain import _get, parse_key, with_values
from .writer import document_from_model

__all__ = ["model_with_values", "point_values", "scenario_document"]


@functools.lru_cache(maxsize=16)
def _text_document(text: str, specs: tuple) -> tuple[dict, dict[str, Parameter]]:
    """The document of ``text`` with the means of ``specs`` filled in where the file gives no value
    (as the reader did), and its parameters by key."""
    doc = tomlkit.parse(text).unwrap()
    fills = {}
    for spec in specs:
        for key, mean in spec.means().items():
            path = parse_key(key)
            value = _get(doc, path) if path is not None else None
            if path is not None and (isinstance(value, bool) or not isinstance(value, (int, float))):
                fills[path] = mean
    if fills:
        doc = with_values(doc, fills)
    return doc, {p.key: p for p in parameters(doc)}


@functools.lru_cache(maxsize=16)
def _model_document(model: Model) -> tuple[dict, dict[str, Parameter]]:
    doc = document_from_model(model)
    return doc, {p.key: p for p in parameters(doc)}


def scenario_document(source: Scenario | Model) -> tuple[dict, dict[str, Parameter]]:
    """The document a scenario was read from (with the means filled in for parameters given only by a
    distribution), or for a bare :class:`Model` the document :func:`.writer.document_from_model`
    writes (parameters in years, constant hazards as ``rate``); and its parameters by key. Cached:
    do not change the returned objects."""
    if isinstance(source, Scenario):
        if not source.text:
            return _model_document(source.model)
        return _text_document(source.text, tuple(source.uncertainty))
    if isinstance(source, Model):
        return _model_document(source)
    raise TypeError(f"expected a Scenario or a Model, got {type(source).__name__}")


def point_values(source: Scenario | Model) -> dict[str, float]:
    """Every numeric model parameter's value in the deterministic run, by key, as the file writes it
    (a parameter given only by a distribution: its mean)."""
    _, params = scenario_document(source)
    return {k: p.value for k, p in params.items()}


def model_with_values(source: Scenario | Model, values: Mapping[str, float]) -> Model:
    """``source``'s model with the parameters ``values`` (by key) set, validated.

    Parameters
    ----------
    source : a :class:`Scenario` (keys and values as its file writes them: the table's time unit,
        ``events``/``per``, ``risk``/``period``), or a bare :class:`Model` (keys of
        :func:`.writer.document_from_model`'s document: every parameter in years, constant hazards
        as ``rate``).
    values : parameter key -> value.

    Raises
    ------
    ScenarioError
        A key that names no parameter, or a value that breaks a rule (key, value and rule; the file
        and line of the parameter when the scenario has a file).
    """
    doc, params = scenario_document(source)
    model = source.model if isinstance(source, Scenario) else source
    file = str(source.path) if isinstance(source, Scenario) and source.path else None
    paths: dict[KeyPath, float] = {}
    for key, value in values.items():
        path = parse_key(key) if key in params else None
        if path is None:
            raise ScenarioError("names no numeric parameter of this model (see sim.io.scenario.parameters)",
                                path=("parameter",), value=key, file=file)
        paths[path] = value
    if not paths:
        return model
    new = with_values(doc, paths)
    base_dir = source.path.resolve().parent if isinstance(source, Scenario) and source.path else None
    r = _Reading(new, file, base_dir)
    r.states = list(model.states)
    parts: dict[str, Any] = {"transitions": list(model.transitions), "strategies": list(model.strategies),
                             "population": model.population, "background": model.background,
                             "horizon": model.horizon, "valuation": model.valuation}
    text = source.text if isinstance(source, Scenario) else ""
    try:
        _rebuild(r, new, parts, {p[0] for p in paths}, {(p[0], p[1]) for p in paths if isinstance(p[1], int)})
        out = Model(states=model.states, transitions=tuple(parts["transitions"]), population=parts["population"],
                    horizon=parts["horizon"], background=parts["background"],
                    strategies=tuple(parts["strategies"]) if "strategies" in new else (),
                    valuation=parts["valuation"], name=model.name)
    except Invalid:
        raise _located(r.ck.problems, file, text) from None
    except ValidationError as err:
        raise _located(_document_paths(err.problems, new), file, text) from None
    beyond = _hazard_problems(out, _follow_up(out))
    if beyond:
        raise _located(_document_paths(tuple(beyond), new), file, text)
    return out


@functools.lru_cache(maxsize=4)
def _key_lines(text: str) -> KeyLines:
    return KeyLines(text)


def _located(problems, file: str | None, text: str) -> ScenarioError:
    lines = _key_lines(text) if text else None
    return ScenarioError.of(p.located(file=file, line=lines.line_of(p.path) if lines else None) for p in problems)


def _rebuild(r: _Reading, doc: Mapping, parts: dict[str, Any], sections: set[str], items: set[tuple]) -> None:
    """Read again the parts of ``doc`` that hold a changed parameter, into ``parts``."""
    ck = r.ck
    names = [s.name for s in r.states]
    tnames = _raw_names(doc.get("transitions", []))
    for array, index in sorted(items):
        raw = doc[array][index]
        if array == "transitions":
            r.transitions = [t for j, t in enumerate(parts["transitions"]) if j != index]
            parts["transitions"][index] = ck.attempt(r.transition, index, raw, names)
        elif array == "strategies":
            r.strategies = [s for j, s in enumerate(parts["strategies"]) if j != index]
            parts["strategies"][index] = ck.attempt(r.strategy, index, raw, tnames)
    if "population" in sections:
        parts["population"] = ck.attempt(r.population, doc["population"])
    if "background" in sections:
        sexes = parts["population"].sexes if parts["population"] is not None else ()
        parts["background"] = ck.attempt(r.background, doc["background"], sexes)
    if "horizon" in sections:
        parts["horizon"] = ck.attempt(r.horizon, doc["horizon"])
    if "valuation" in sections:
        parts["valuation"] = ck.attempt(r.valuation, doc["valuation"])
    if ck.problems:
        raise Invalid

