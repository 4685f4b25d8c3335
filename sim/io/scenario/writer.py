"""Writing scenarios: a document equivalent to a model (:func:`document_from_model`), its TOML text
(:func:`scenario_text`) and saving text atomically (:func:`save_scenario`).

Keys are written in the order the schema declares them, parameters in years (no ``unit``), and a
key is left out when it holds nothing (an empty table, a false flag, no description).
"""

from __future__ import annotations

import copy
import errno
from dataclasses import fields
from pathlib import Path
from typing import Any, Mapping

import tomlkit

from ...hazards import FAMILIES, FAMILY_DIMENSIONS, Hazard
from ...model import Model, RunSettings
from ...uncertainty import UncertainInput
from ..atomic import AtomicWriteError, write_text_atomic
from .errors import ScenarioError
from .schema import ENTRY_AGES, FORMAT_VERSION, SCHEMA, Flag, Items, Node

__all__ = ["document_from_model", "scenario_text", "save_scenario", "uncertainty_entry"]


def _plain(value: Any) -> Any:
    """Model values as TOML-ready plain values (read-only maps to dicts, tuples to lists)."""
    if isinstance(value, Mapping):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (tuple, list)):
        return [_plain(v) for v in value]
    return value


def _empty(node: Node | None, value: Any) -> bool:
    if value is None or (isinstance(value, (Mapping, list, tuple, str)) and not value):
        return True
    return isinstance(node, Flag) and value == node.default


def _section(keys: Mapping[str, Node], values: Mapping[str, Any], required: tuple[str, ...] = ()) -> dict:
    """``values`` in the schema's order of ``keys``, without empty ones (``required`` always kept)."""
    unknown = set(values) - set(keys)
    if unknown:  # pragma: no cover - a writer and schema out of step is a programming error
        raise KeyError(f"not in the schema: {sorted(unknown)}")
    out = {}
    for k, node in keys.items():
        if k in values and (k in required or node.required or not _empty(node, values[k])):
            out[k] = _plain(values[k])
    return out


def _keys(name: str) -> Mapping[str, Node]:
    node = SCHEMA.keys[name]
    return node.item.keys if isinstance(node, Items) else node.keys


def _hazard_doc(h: Hazard) -> dict:
    if h.family not in FAMILIES:
        raise ScenarioError(f"a {h.family} hazard cannot be written to a scenario file; use hazard_ratios "
                            f"for proportional hazards")
    params = h.params()
    out: dict[str, Any] = {"family": h.family}
    for k in FAMILY_DIMENSIONS[h.family]:
        v = params[k]
        out[k] = [float(x) for x in v] if isinstance(v, (tuple, list)) else float(v)
    return out


def _waning_doc(w: Any) -> dict | None:
    """A waning as its table (times in years), or None."""
    return None if w is None else {"start": w.start, "end": w.end, "scale": w.scale}


def _entry_age(entry: Any) -> dict:
    node = _keys("population")["entry_age"]
    tag = next(t for t, cls in ENTRY_AGES.items() if isinstance(entry, cls))
    attrs = [f.name for f in fields(entry) if f.init]
    return {node.tag: tag, **{k: _plain(getattr(entry, a)) for k, a in zip(node.variants[tag], attrs)}}


def uncertainty_entry(spec: UncertainInput) -> dict:
    """One ``[[uncertainty]]`` table for ``spec``: the parameter (or group), the distribution and the
    values it was given by (``mean`` and ``se`` when fitted by the method of moments, else its own
    parameters), and the description."""
    out: dict[str, Any] = {"parameter": spec.keys[0]} if spec.univariate else {"parameters": list(spec.keys)}
    out["distribution"] = spec.distribution.family
    out.update(spec.fitted_from or spec.distribution.parameters())
    if spec.description:
        out["description"] = spec.description
    return _plain(out)


def document_from_model(model: Model, run: RunSettings | None = None, description: str = "",
                        uncertainty: tuple[UncertainInput, ...] = ()) -> dict:
    """A scenario document (plain dict) equivalent to ``model`` (with the ``[[uncertainty]]`` entries
    of ``uncertainty``); :func:`scenario_text` renders it."""
    doc = _section(SCHEMA.keys, {"format_version": FORMAT_VERSION, "name": model.name, "description": description})
    doc["states"] = [_section(_keys("states"), {"name": s.name, "absorbing": s.absorbing}) for s in model.states]
    doc["transitions"] = [{**_section(_keys("transitions"), {"name": t.name, "from": t.source, "to": t.target,
                                                              "clock": t.clock.value, "hazard_ratio": t.hazard_ratio,
                                                              "waning": _waning_doc(t.waning),
                                                              "at_least_background": t.at_least_background}),
                           **_hazard_doc(t.hazard)} for t in model.transitions]
    if model.background is not None:
        bg = model.background
        doc["background"] = {**_section(_keys("background"), {"to": bg.target, "clock": bg.clock.value,
                                                                "multiplier": bg.multiplier}),
                             **{sex: _hazard_doc(h) for sex, h in bg.hazards.items()}}
    pop = model.population
    doc["population"] = _section(_keys("population"), {"initial_state": pop.initial_state, "sex_mix": pop.sex_mix,
                                                       "entry_age": _entry_age(pop.entry_age)})
    doc["horizon"] = _section(_keys("horizon"), {"value": model.horizon.value, "scale": model.horizon.scale})
    doc["strategies"] = [
        _section(_keys("strategies"), {"name": st.name, "hazard_ratios": st.hazard_ratios,
                                       "replacements": {k: _hazard_doc(v) for k, v in st.replacements.items()},
                                       "state_costs": st.state_costs, "transition_costs": st.transition_costs,
                                       "waning": {k: _waning_doc(w) for k, w in st.waning.items()}})
        for st in model.strategies]
    v = model.valuation
    keys = _keys("valuation")
    doc["valuation"] = _section(keys, {k: getattr(v, k) for k in keys}, required=tuple(keys))
    if run is not None:
        keys = _keys("run")
        doc["run"] = _section(keys, {k: getattr(run, k) for k in keys}, required=tuple(keys))
    if uncertainty:
        doc["uncertainty"] = [uncertainty_entry(u) for u in uncertainty]
    return doc


def scenario_text(doc: Mapping, header: str = "") -> str:
    """Render a document as TOML (tomlkit), with an optional comment header."""
    body = tomlkit.dumps(copy.deepcopy(_plain(dict(doc))))
    if header:
        body = "".join(f"# {ln}\n" if ln else "#\n" for ln in header.splitlines()) + "\n" + body
    return body


def save_scenario(text_or_doc: str | Mapping, path: str | Path, *, force: bool = True) -> Path:
    """Write a scenario atomically (:func:`sim.io.atomic.write_text_atomic`: a temporary file, synced,
    then renamed; the file's mode follows the umask). ``text_or_doc`` is TOML text (kept exactly,
    comments included) or a document mapping (serialised with tomlkit). The folder is created if
    missing.

    Raises
    ------
    ScenarioError
        ``path`` exists and ``force`` is False.
    OSError
        The file cannot be written.
    """
    path = Path(path)
    text = text_or_doc if isinstance(text_or_doc, str) else tomlkit.dumps(text_or_doc)
    if path.exists() and not force:
        raise ScenarioError("exists; pass force=True to overwrite", file=str(path))
    path.parent.mkdir(parents=True, exist_ok=True)
    try:
        return write_text_atomic(path, text, force=force)
    except AtomicWriteError as err:
        if err.errno == errno.EEXIST:
            raise ScenarioError(err.reason, file=str(path)) from None
        raise
