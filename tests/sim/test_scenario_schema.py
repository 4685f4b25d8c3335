"""The scenario schema: writing what was read gives the same model, the list of parameters with
their dimensions, renames that follow every declared reference, and key lines found in one pass."""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pytest
import tomlkit

import sim.io.scenario.reader as reader_module
from sim.hazards import FAMILY_DIMENSIONS, Dimension, from_year_units
from sim.io.demo import SCENARIO_DIR
from sim.io.scenario import (ScenarioError, declared_keys, document_from_model, load_scenario, parameters,
                             parse_scenario, references, rename, scenario_text)
from sim.io.scenario.positions import KeyLines
from sim.model import BACKGROUND

SCENARIOS = sorted(SCENARIO_DIR.glob("*.toml"))
LANTHIC = SCENARIO_DIR / "lanthic_syndrome.toml"


def _doc(path: Path) -> dict:
    return tomlkit.parse(path.read_text(encoding="utf-8")).unwrap()


@pytest.mark.parametrize("path", SCENARIOS, ids=lambda p: p.stem)
def test_writing_what_was_read_gives_an_equal_model(path: Path) -> None:
    s = load_scenario(path)
    text = scenario_text(document_from_model(s.model, s.run, description="round trip"))
    again = parse_scenario(text, path)  # same folder: relative life tables resolve alike
    assert again.model == s.model and hash(again.model) == hash(s.model)
    assert again.run == s.run
    # and once more: the written document is a fixed point of read-then-write
    assert document_from_model(again.model, again.run, "round trip") == document_from_model(s.model, s.run,
                                                                                             "round trip")


def test_lanthic_parameters_and_their_dimensions() -> None:
    found = {p.key: p.dimension for p in parameters(_doc(LANTHIC))}
    hazard = {k: v for k, v in found.items() if k.startswith(("transitions", "background"))}
    assert hazard == {
        "transitions[0].shape": Dimension.DIMENSIONLESS, "transitions[0].scale": Dimension.TIME,  # Weibull
        "transitions[1].rate": Dimension.RATE,  # exponential rate
        "transitions[2].events": Dimension.DIMENSIONLESS, "transitions[2].per": Dimension.TIME,  # events per time
        "background.female.rate": Dimension.RATE, "background.female.shape": Dimension.RATE,  # Gompertz
        "background.male.rate": Dimension.RATE, "background.male.shape": Dimension.RATE,
    }
    assert found["strategies[1].hazard_ratios.onset"] is Dimension.RATIO
    assert found["valuation.utilities.well"] is Dimension.SHARE
    assert found["population.sex_mix.female"] is Dimension.SHARE
    assert found["strategies[1].state_costs.well"] is Dimension.MONEY
    assert found["valuation.transition_costs.\"disease death\""] is Dimension.MONEY
    assert found["population.entry_age.mean"] is Dimension.TIME and found["horizon.value"] is Dimension.TIME
    assert not any(k.startswith(("run", "format_version")) for k in found)  # settings are not parameters
    values = {p.key: p.value for p in parameters(_doc(LANTHIC))}
    assert values["transitions[0].scale"] == 30.0 and values["background.male.rate"] == 5.0e-5


@pytest.mark.parametrize("family, params", [
    ("weibull", {"shape": 1.3, "scale": 30.0}),
    ("gompertz", {"rate": 3e-3, "shape": 0.085}),
    ("gompertz_makeham", {"rate": 3e-3, "shape": 0.085, "constant": 2e-3}),
    ("loglogistic", {"shape": 2.0, "scale": 12.0}),
    ("lognormal", {"mu": 2.5, "sigma": 0.8}),
    ("gamma", {"shape": 2.0, "scale": 5.0}),
    ("piecewise", {"breaks": [0.0, 5.0, 10.0], "rates": [0.02, 0.05, 0.1]}),
])
def test_each_parameter_dimension_is_what_a_change_of_unit_needs(family: str, params: dict) -> None:
    # The same hazard written in months: every parameter converted by its listed dimension
    # (time x 12, rate / 12, log-time - log(1/12)) must give the same hazard in years. A wrong
    # dimension gives a different hazard, so the list is checked against the model's behaviour.
    doc = _doc(LANTHIC)
    onset = doc["transitions"][0]
    for k in ("shape", "scale", "unit"):
        onset.pop(k, None)
    onset.update(family=family, **params)
    in_years = parse_scenario(scenario_text(doc)).model.transitions[0].hazard
    listed = {p.path[-1] if isinstance(p.path[-1], str) else p.path[-2]: p.dimension
              for p in parameters(doc) if p.path[:2] == ("transitions", 0)}
    assert listed == dict(FAMILY_DIMENSIONS[family])
    months = copy.deepcopy(doc)
    for name, value in params.items():
        converted = from_year_units(listed[name], value, 1 / 12)
        months["transitions"][0][name] = list(converted) if isinstance(converted, tuple) else converted
    months["transitions"][0]["unit"] = "months"
    in_months = parse_scenario(scenario_text(months)).model.transitions[0].hazard
    t = np.linspace(0.0, 40.0, 81)
    np.testing.assert_allclose(in_months.cumhazard(t), in_years.cumhazard(t), rtol=1e-12, atol=1e-300)


def test_a_rename_follows_every_reference() -> None:
    doc = tomlkit.parse(LANTHIC.read_text(encoding="utf-8"))
    before = parse_scenario(tomlkit.dumps(doc)).model
    rename(doc, "states", 1, "sick")
    rename(doc, "transitions", 0, "first onset")
    text = tomlkit.dumps(doc)
    assert '"lanthic"' not in text and "lanthic =" not in text and "onset =" not in text.replace("first onset", "")
    model = parse_scenario(text).model
    assert model.state_names == ("well", "sick", "dead")
    assert [(t.name, t.source, t.target) for t in model.transitions] == [
        ("first onset", "well", "sick"), ("recovery", "sick", "well"), ("disease death", "sick", "dead")]
    assert model.valuation.utilities["sick"] == before.valuation.utilities["lanthic"]
    assert model.valuation.state_costs["sick"] == before.valuation.state_costs["lanthic"]
    assert model.valuation.transition_costs["first onset"] == before.valuation.transition_costs["onset"]
    therapy = model.strategy("new therapy")
    assert therapy.hazard_ratios["first onset"] == 0.7 and therapy.state_costs["sick"] == 1100.0
    assert "# time since entry into the model" in text  # comments stay


def test_renamed_references_cover_the_format() -> None:
    places = {(ref.pattern, ref.ref.value, ref.as_key) for ref in references()}
    assert {(("transitions", "*", "from"), "state", False), (("transitions", "*", "to"), "state", False),
            (("background", "to"), "state", False), (("population", "initial_state"), "state", False),
            (("valuation", "utilities"), "state", True), (("valuation", "state_costs"), "state", True),
            (("strategies", "*", "state_costs"), "state", True),
            (("valuation", "transition_costs"), "exit", True),
            (("strategies", "*", "hazard_ratios"), "transition", True),
            (("strategies", "*", "replacements"), "transition", True),
            (("strategies", "*", "transition_costs"), "exit", True)} <= places


def test_a_rename_to_a_name_in_use_leaves_references_alone() -> None:
    doc = _doc(LANTHIC)
    rename(doc, "states", 1, "well")
    assert doc["states"][1]["name"] == "well" and doc["transitions"][1]["from"] == "lanthic"
    with pytest.raises(ScenarioError, match="duplicate state name"):
        parse_scenario(scenario_text(doc))


def test_a_replacement_and_a_background_cost_are_renamed_too() -> None:
    doc = _doc(LANTHIC)
    doc["strategies"][1]["replacements"] = {"recovery": {"family": "exponential", "rate": 0.2}}
    doc["strategies"][1]["transition_costs"] = {"recovery": 10.0, BACKGROUND: 5.0}
    rename(doc, "transitions", 1, "remission")
    st = parse_scenario(scenario_text(doc)).model.strategy("new therapy")
    assert set(st.replacements) == {"remission"} and dict(st.transition_costs) == {"remission": 10.0, BACKGROUND: 5.0}


def test_declared_keys_cover_the_document_and_the_optional_keys() -> None:
    doc = _doc(LANTHIC)
    keys = set(declared_keys(doc))
    present = {(*p,) for p in _leaf_paths(doc)}
    assert present <= keys
    assert {("states", 0, "description"), ("transitions", 1, "unit"), ("run", "chunk_size")} <= keys


def _leaf_paths(value, path=()):
    if isinstance(value, dict):
        for k, v in value.items():
            yield from _leaf_paths(v, (*path, k))
    elif isinstance(value, list) and value and isinstance(value[0], dict):
        for i, v in enumerate(value):
            yield from _leaf_paths(v, (*path, i))
    else:
        yield path


# ----------------------------------------------------------------------------- key lines
def test_key_lines_of_tricky_toml() -> None:
    text = "\n".join([
        'name = "a = b # not a comment"',                  # 1
        "list = [",                                       # 2
        '  "x = 1",  # comment',                          # 3
        "  2,",                                           # 4
        "]",                                              # 5
        'text = """',                                     # 6
        "[not.a.table]",                                  # 7
        'fake = 1"""',                                    # 8
        "[a.\"b c\"]",                                    # 9
        "d.e = { f = 1, 'g h' = [1, { i = 2 }] }",        # 10
        "[[arr]]",                                        # 11
        "k = 1",                                          # 12
        "[[arr]]",                                        # 13
        "k = 2",                                          # 14
        "[arr.sub]",                                      # 15
        "m = 3",                                          # 16
    ])
    tomlkit.parse(text)  # valid TOML
    lines = KeyLines(text)
    expect = {("name",): 1, ("list",): 2, ("list", 1): 4, ("text",): 6, ("not",): None, ("fake",): None,
              ("a", "b c"): 9, ("a", "b c", "d", "e", "f"): 10, ("a", "b c", "d", "e", "g h", 1, "i"): 10,
              ("arr", 0, "k"): 12, ("arr", 1): 13, ("arr", 1, "k"): 14, ("arr", 1, "sub", "m"): 16,
              ("arr", 1, "missing"): 13}
    assert {k: lines.line_of(k) for k in expect} == expect


def test_problems_are_located_with_one_pass_over_the_text(monkeypatch) -> None:
    built = []

    class Counting(KeyLines):
        def __init__(self, text: str) -> None:
            built.append(1)
            super().__init__(text)

    monkeypatch.setattr(reader_module, "KeyLines", Counting)
    text = LANTHIC.read_text().replace("[run]", "[run]\n" + "".join(f"k{i} = {i}\n" for i in range(300)))
    with pytest.raises(ScenarioError) as info:
        parse_scenario(text, "many.toml")
    problems = info.value.problems
    assert len(problems) == 300 and len(built) == 1
    lines = text.splitlines()
    assert all(lines[p.line - 1] == f"{p.path[-1]} = {p.value}" for p in problems)
