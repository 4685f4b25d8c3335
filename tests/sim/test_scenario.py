"""Scenario files: round trips, one test per validation rule (file, key path, line, value, rule),
and property-based malformed input that must give a ScenarioError, never a traceback."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sim.io.demo import DEMOS, SCENARIO_DIR
from sim.engine.histories import SimulationError, simulate
from sim.io.scenario import (ScenarioError, ScenarioProblems, document_from_model, load_scenario, parse_duration, parse_scenario,
                          save_scenario, scenario_text)

DEMO = (SCENARIO_DIR / "lanthic_syndrome.toml").read_text()


def _line(text: str, needle: str, nth: int = 0) -> int:
    return [i + 1 for i, ln in enumerate(text.splitlines()) if needle in ln][nth]


@pytest.mark.parametrize("name", sorted(DEMOS))
def test_every_demo_round_trips(name, tmp_path):
    s = load_scenario(SCENARIO_DIR / DEMOS[name])
    text = scenario_text(document_from_model(s.model, s.run), header="written by the round-trip test")
    path = save_scenario(text, tmp_path / "copy.toml")
    again = load_scenario(path)
    assert again.model == s.model
    assert again.run == s.run


def test_saving_keeps_comments_and_is_atomic(tmp_path):
    path = save_scenario(DEMO, tmp_path / "demo.toml")
    assert path.read_text() == DEMO  # the text as typed, comments included
    with pytest.raises(ScenarioError, match="exists; pass force=True"):
        save_scenario(DEMO, path, force=False)
    assert [p.name for p in tmp_path.iterdir()] == ["demo.toml"]  # no temporary files left


def test_conversions_are_reported():
    s = parse_scenario(DEMO.replace("rate = 0.15              # per person-year", "risk = 0.2\nperiod = 2"))
    note = [c for c in s.conversions if "transitions[1]" in c][0]
    assert "constant-rate assumption" in note.lower()  # the assumption is stated
    np.testing.assert_allclose(s.model.transitions[1].hazard.rate, -math.log(0.8) / 2, rtol=1e-14)


def test_units_convert_to_years():
    # 0.0125 per month = 0.15 per year; a Weibull scale of 360 months = 30 years
    s = parse_scenario(DEMO.replace("rate = 0.15              # per person-year", 'rate = 0.0125\nunit = "months"')
                       .replace('scale = 30.0             # years\nunit = "years"', 'scale = 360.0\nunit = "months"'))
    np.testing.assert_allclose(s.model.transitions[1].hazard.rate, 0.15, rtol=1e-14)
    np.testing.assert_allclose(s.model.transitions[0].hazard.scale, 30.0, rtol=1e-14)
    assert parse_duration("1 month") == pytest.approx(1 / 12)
    assert parse_duration(0.5) == 0.5


def _bad(old: str, new: str, count: int = 1) -> str:
    assert old in DEMO, old
    return DEMO.replace(old, new, count)


@pytest.mark.parametrize("text, key, message, line_of", [
    # a negative rate
    (_bad("rate = 0.15 ", "rate = -0.15 "), "transitions[1].rate", "must be >= 0, got -0.15", "rate = -0.15"),
    # a probability outside [0, 1)
    (_bad("rate = 0.15              # per person-year", "risk = 1.2\nperiod = 1"), "transitions[1].risk",
     "must be <= 1, got 1.2", "risk = 1.2"),
    (_bad("rate = 0.15              # per person-year", "risk = 1.0\nperiod = 1"), "transitions[1].risk",
     "must be in [0, 1)", "risk = 1.0"),
    # a risk without its period
    (_bad("rate = 0.15              # per person-year", "risk = 0.3"), "transitions[1]",
     "a risk needs its period", ("[[transitions]]", 1)),
    # a transition from an absorbing state
    (_bad('from = "lanthic"\nto = "well"', 'from = "dead"\nto = "well"'), "transitions[1].from",
     "is an absorbing state", 'from = "dead"'),
    # duplicate names
    (_bad('name = "lanthic"', 'name = "well"'), "states[1].name", "duplicate state name", None),
    (_bad('name = "recovery"', 'name = "onset"'), "transitions[1].name", "duplicate transition name", None),
    (_bad('name = "new therapy"', 'name = "usual care"'), "strategies[1].name", "duplicate strategy name", None),
    # unknown keys are errors
    (_bad("shape = 1.3", "shape = 1.3\nshap = 2"), "transitions[0].shap", "unknown key", "shap = 2"),
    (_bad("[run]", "[run]\nthreads = 4"), "run.threads", "unknown key", "threads = 4"),
    # a strategy naming a transition that does not exist
    (_bad('hazard_ratios = { onset = 0.7', 'hazard_ratios = { onst = 0.7'), "strategies[1].hazard_ratios.onst",
     "must name a transition", None),
    # families and parameters
    (_bad('family = "weibull"', 'family = "wiebull"'), "transitions[0].family", "must be one of", None),
    (_bad("shape = 1.3\n", ""), "transitions[0]", "missing parameter 'shape' of the weibull family", None),
    (_bad("shape = 1.3", "shape = -1.3"), "transitions[0].shape", "must be > 0 and finite, got -1.3",
     "shape = -1.3"),  # the family's own rule, at the parameter
    # population, horizon, valuation, run
    (_bad("sd = 8.0", "sd = 0.0"), "population.entry_age.sd", "must be > 0", None),
    (_bad("value = 100 ", "value = 140 "), "horizon.value", "must be <= 130", "value = 140"),
    (_bad("well = 0.86", "well = 1.5"), "valuation.utilities.well", "must be <= 1, got 1.5", None),
    (_bad('"1 week"', '"1 fortnight"'), "run.cycle_lengths[0]", "must be a number of years or a string", None),
    (_bad("format_version = 1", "format_version = 7"), "format_version", "reads format_version 1", None),
])
def test_validation_messages(text, key, message, line_of):
    with pytest.raises(ScenarioError) as info:
        parse_scenario(text, "scen.toml")
    err = info.value
    assert err.file == "scen.toml"
    assert err.key == key, str(err)
    assert message in str(err), str(err)
    assert str(err).startswith("scen.toml:")
    if line_of is not None:
        needle, nth = line_of if isinstance(line_of, tuple) else (line_of, 0)
        assert err.line == _line(text, needle, nth), str(err)


def test_model_level_rules_name_the_file():
    # no absorbing state
    text = _bad("absorbing = true\n", "")
    with pytest.raises(ScenarioError, match=r"^scen.toml:\d+: states: at least one state must be absorbing") as info:
        parse_scenario(text, "scen.toml")
    assert info.value.path == ("states",) and info.value.line == _line(text, "[[states]]")  # where, as data
    # a state that cannot be reached from the initial state
    text = _bad('[[states]]\nname = "dead"', '[[states]]\nname = "limbo"\n\n[[states]]\nname = "dead"')
    with pytest.raises(ScenarioError, match=r"states\[2\]\.name: cannot be reached from the initial state 'well'"):
        parse_scenario(text, "scen.toml")


def test_one_reading_reports_every_independent_problem():
    # three problems in different parts: a transition's parameter, the population, the run settings
    text = _bad("shape = 1.3", "shape = -1.3")
    text = text.replace("sd = 8.0", "sd = 0.0").replace("[run]", "[run]\nthreads = 4")
    with pytest.raises(ScenarioProblems) as info:
        parse_scenario(text, "scen.toml")
    err = info.value
    assert [p.key for p in err.problems] == ["transitions[0].shape", "population.entry_age.sd", "run.threads"]
    assert [p.line for p in err.problems] == [_line(text, "shape = -1.3"), _line(text, "sd = 0.0"),
                                              _line(text, "threads = 4")]
    message = str(err)
    assert message.startswith("scen.toml: 3 problems:")
    for p in err.problems:
        assert str(p) in message
    assert isinstance(err, ScenarioError) and err.key == "transitions[0].shape"  # the first, for single-error callers
    # a problem in one state does not make the transitions that name it fail too
    text = _bad('name = "lanthic"\n', 'name = "lanthic"\nabsorbing = "no"\n')
    with pytest.raises(ScenarioError) as info:
        parse_scenario(text, "scen.toml")
    assert [p.key for p in info.value.problems] == ["states[1].absorbing"]


def test_toml_syntax_error_has_a_line():
    text = DEMO.replace("shape = 1.3", "shape = = 1.3")
    with pytest.raises(ScenarioError, match="not valid TOML") as info:
        parse_scenario(text, "scen.toml")
    assert info.value.line == _line(text, "shape = = 1.3")


def test_unreadable_file(tmp_path):
    with pytest.raises(ScenarioError, match="cannot read the file"):
        load_scenario(tmp_path / "missing.toml")


# ----------------------------------------------------------------------------- property-based
_numbers = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.integers(-10**6, 10**6),
                     st.text(max_size=5), st.booleans(), st.lists(st.floats(-5, 5), max_size=3))
_KEYS = ["rate = 0.15 ", "shape = 1.3", "scale = 30.0", "mean = 55.0", "sd = 8.0", "value = 100 ",
         "well = 0.86", "discount_costs = 0.035", "patients = 100000", "seed = 2026", "onset = 0.7",
         "per = 100", "events = 8"]


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    return str(v)


@settings(max_examples=150, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(key=st.sampled_from(_KEYS), value=_numbers)
def test_malformed_values_give_clear_errors_or_valid_models(key, value):
    name = key.split("=")[0].strip()
    text = DEMO.replace(key, f"{name} = {_toml_value(value)}", 1)
    try:
        s = parse_scenario(text, "fuzz.toml")
    except ScenarioError as err:
        assert str(err).startswith("fuzz.toml")
        return
    # a valid scenario must run (or stop with the engine's own clear error, e.g. a runaway loop)
    try:
        run = simulate(s.model, 30, seed=1, max_transitions=500)
    except SimulationError as err:
        assert "transitions before the horizon" in str(err)
        return
    assert len(run.patients) == 30 * len(s.model.strategies)
    assert np.isfinite(run.patients["exit_time"]).all()


@settings(max_examples=60, deadline=None, derandomize=True)
@given(cut=st.integers(0, len(DEMO)))
def test_truncated_files_give_clear_errors(cut):
    try:
        parse_scenario(DEMO[:cut], "cut.toml")
    except ScenarioError as err:
        assert str(err).startswith("cut.toml")


def test_life_table_errors_name_the_scenario_key_and_the_table_line(tmp_path):
    # A life table with q outside [0, 1]: the scenario error points at the life_table key and
    # carries the table's own file, line and column.
    table = tmp_path / "lt.csv"
    table.write_text("age,q\n0,0.01\n1,0.02\n2,1.5\n3,1\n")
    text = (SCENARIO_DIR / DEMOS["ferrovian"]).read_text().replace(
        'file = "tables/synthetic_life_table.csv"', f'file = "{table}"').replace(
        'columns = { female = "q_female", male = "q_male" }', 'columns = "q"')
    with pytest.raises(ScenarioError) as info:
        parse_scenario(text, tmp_path / "scen.toml")
    msg = str(info.value)
    assert "background.life_table.file" in msg and "lt.csv line 4" in msg and "1.5" in msg


# ----------------------------------------------------------------------------- wrong types are clean errors
FERROVIAN = (SCENARIO_DIR / DEMOS["ferrovian"]).read_text()
_AGES = 'entry_age = { distribution = "normal", mean = 55.0, sd = 8.0, low = 40.0, high = 75.0 }'
_COLUMNS = 'columns = { female = "q_female", male = "q_male" }'


@pytest.mark.parametrize("text, key, rule", [
    (FERROVIAN.replace('age_column = "age"', 'age_column = "age"\nfit = "gompertz"\nfit_ages = 5'),
     "background.life_table.fit_ages", "must be a non-empty list of numbers, got 5"),
    (FERROVIAN.replace('age_column = "age"', "age_column = 5"), "background.life_table.age_column",
     "must be a non-empty string, got 5"),
    (FERROVIAN.replace('age_column = "age"', 'age_column = "age"\nsheet = 3'), "background.life_table.sheet",
     "must be a non-empty string, got 3"),
    (FERROVIAN.replace(_COLUMNS, "columns = 5"), "background.life_table.columns",
     "must be a column name or a table of sex = column, got 5"),
    (DEMO.replace(_AGES, 'entry_age = { distribution = "empirical", ages = [40, {}], weights = [1, 1] }'),
     "population.entry_age.ages[1]", "must be a number, got {}"),
    (DEMO.replace(_AGES, 'entry_age = { distribution = "empirical", ages = ["1.5"], weights = [1] }'),
     "population.entry_age.ages[0]", "must be a number, got '1.5'"),
    (DEMO.replace(_AGES, 'entry_age = { distribution = "empirical", ages = [true], weights = [1] }'),
     "population.entry_age.ages[0]", "must be a number, got True"),
    (DEMO.replace('family = "weibull"       # H(t) = (t / scale)^shape\nshape = 1.3\nscale = 30.0',
                  'family = "lognormal"\nmu = [1.0]\nsigma = 1.0'), "transitions[0].mu", "must be a number, got [1.0]"),
    (DEMO.replace("format_version = 1", "format_version = true"), "format_version", "must be a number, got True"),
    (DEMO.replace("format_version = 1", "format_version = 1.0"), "format_version", "must be a whole number, got 1.0"),
    (DEMO.replace('name = "Lanthic syndrome (invented demo)"', 'name = ""'), "name",
     "must be a non-empty string, got ''"),
    (DEMO.replace('description = "Standard care', 'description = 5\nnote = "Standard care'), "description",
     "must be a string, got 5"),
])
def test_wrong_types_are_clean_errors_at_their_key(text, key, rule):
    with pytest.raises(ScenarioError) as info:
        parse_scenario(text, SCENARIO_DIR / "scen.toml")
    found = {p.key: p for p in info.value.problems}
    assert key in found, str(info.value)
    assert str(found[key]).endswith(f"{key}: {rule}")
    assert found[key].line is not None


def test_a_file_that_is_not_utf8_is_a_clean_error(tmp_path):
    path = tmp_path / "latin1.toml"
    path.write_bytes(DEMO.encode("utf-8").replace(b"Standard care", b"Soins habituels \xe9"))  # latin-1 e-acute
    with pytest.raises(ScenarioError, match="not UTF-8 text") as info:
        load_scenario(path)
    assert info.value.file == str(path)
