"""A parameter draw applied to the model (sim.psa.model_for_draw): values in the file's units and
forms, only the changed parts read again, every rule still checked, and the demo's draws all valid."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from sim.hazards import Exponential, Weibull
from sim.io.demo import DEMOS, SCENARIO_DIR
from sim.io.scenario import ScenarioError, load_scenario, parse_scenario
from sim.psa import model_for_draw, point_values, uncertain_parameters
from sim.uncertainty import draw_table

DEMO = SCENARIO_DIR / "quorrel_psa.toml"
LANTHIC = SCENARIO_DIR / DEMOS["lanthic"]


def test_the_point_values_give_the_scenario_model_back() -> None:
    for path in (DEMO, LANTHIC, SCENARIO_DIR / DEMOS["ferrovian"]):
        s = load_scenario(path)
        assert model_for_draw(s, point_values(s)) == s.model
        assert model_for_draw(s, {}) is s.model


def test_values_are_read_in_the_files_units_and_forms() -> None:
    text = LANTHIC.read_text(encoding="utf-8")
    text = text.replace('scale = 30.0             # years\nunit = "years"', 'scale = 360.0\nunit = "months"')
    s = parse_scenario(text, LANTHIC)
    assert s.model.transitions[0].hazard == Weibull(1.3, 30.0)
    m = model_for_draw(s, {"transitions[0].scale": 240.0, "transitions[2].events": 12.0,
                           "transitions[2].per": 150.0})
    assert m.transitions[0].hazard == Weibull(1.3, 20.0)  # 240 months
    assert m.transitions[2].hazard == Exponential(12.0 / 150.0)  # events per person-years
    ferrovian = load_scenario(SCENARIO_DIR / DEMOS["ferrovian"])
    m = model_for_draw(ferrovian, {"transitions[0].risk": 0.3})
    # a risk p over t years is the constant rate -ln(1 - p)/t (Miller & Homan 1994, Med Decis Making
    # 14:52-58)
    assert m.transitions[0].hazard.rate == pytest.approx(-math.log(1 - 0.3) / 3.0, rel=1e-15)


def test_only_the_parts_holding_a_changed_parameter_are_new() -> None:
    s = load_scenario(DEMO)
    m = model_for_draw(s, {"valuation.utilities.well": 0.8, "strategies[1].hazard_ratios.progression": 0.5})
    assert m.valuation.utilities["well"] == 0.8 and m.strategies[1].hazard_ratios["progression"] == 0.5
    assert all(a is b for a, b in zip(m.transitions, s.model.transitions))
    assert m.population is s.model.population and m.background is s.model.background
    assert m.strategies[0] is s.model.strategies[0]
    m = model_for_draw(s, {"transitions[2].rate": 0.07, "background.male.rate": 6e-5,
                           "population.initial_state.well": 0.6, "population.initial_state.mild": 0.4})
    assert m.transitions[2].hazard == Exponential(0.07) and m.transitions[0] is s.model.transitions[0]
    assert m.background.hazards["male"].rate == 6e-5 and m.population.initial_state == {"well": 0.6, "mild": 0.4}


@pytest.mark.parametrize("values, key, words", [
    ({"transitions[0].rate": -0.1}, "transitions[0].rate", "must be >= 0"),
    ({"valuation.utilities.well": 1.2}, "valuation.utilities.well", "must be <= 1"),
    ({"population.initial_state.well": 0.9}, "population.initial_state", "sum to 1"),
    ({"background.female.rate": 0.0}, "background.female.rate", "must be > 0"),
    ({"transitions[9].rate": 0.1}, "parameter", "names no numeric parameter"),
    ({"run.seed": 3.0}, "parameter", "names no numeric parameter"),
])
def test_a_draw_that_breaks_a_rule_names_the_key_value_and_rule(values, key, words) -> None:
    s = load_scenario(DEMO)
    with pytest.raises(ScenarioError) as err:
        model_for_draw(s, values)
    p = err.value.problem
    assert p.key == key and words in p.rule and p.file == str(DEMO)
    if key != "parameter":
        assert p.line is not None


def test_a_bare_model_takes_the_keys_of_its_own_document() -> None:
    s = load_scenario(LANTHIC)
    m = model_for_draw(s.model, {"transitions[2].rate": 0.1, "valuation.state_costs.well": 310.0})
    assert m.transitions[2].hazard == Exponential(0.1) and m.valuation.state_costs["well"] == 310.0
    with pytest.raises(ScenarioError, match="names no numeric parameter"):
        model_for_draw(s.model, {"transitions[2].events": 10.0})  # the file's form; the model has a rate
    assert uncertain_parameters(s.model) == ()


def test_every_draw_of_the_demo_gives_a_valid_model_holding_its_values() -> None:
    s = load_scenario(DEMO)
    table = draw_table(uncertain_parameters(s), 200, s.run.seed)
    for i, row in table.iterrows():
        m = model_for_draw(s, row.to_dict())
        assert m.valuation.utilities["well"] == row["valuation.utilities.well"]
        assert m.transitions[1].hazard.rate == row["transitions[1].rate"]
        assert m.strategies[1].hazard_ratios["disease death"] == row['strategies[1].hazard_ratios."disease death"']
        assert sum(m.population.initial_state.values()) == pytest.approx(1.0, abs=1e-12)
    # the draws' means agree with the distributions' (4 Monte Carlo standard errors)
    means = {k: v for u in uncertain_parameters(s) for k, v in u.means().items()}
    sd = table.std()
    assert np.all(np.abs(table.mean() - pd.Series(means)[table.columns]) <= 4 * sd / math.sqrt(len(table)))


def test_the_inputs_table_lists_each_uncertain_parameter() -> None:
    from sim.psa import inputs_table
    s = load_scenario(DEMO)
    table = inputs_table(s)
    assert len(table) == 17 and table["parameter"].is_unique
    row = table.set_index("parameter").loc["transitions[2].rate"]
    assert row["distribution"] == "gamma" and row["mean"] == 0.05 and not row["point_from_file"]
    assert row["low_95"] < 0.05 < row["high_95"]
    assert table.set_index("parameter").loc["transitions[0].rate", "point_from_file"]
    assert inputs_table(load_scenario(LANTHIC)).empty
