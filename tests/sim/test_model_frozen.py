"""Model objects are deep-frozen, hashable and validated on construction: read-only tables, numbers
checked by sim.model.checks (numpy scalars accepted, bools and strings refused), every problem of a
model reported at once, RunSettings checking itself, and pickling."""

from __future__ import annotations

import dataclasses
import functools
import pickle

import numpy as np
import pytest

from sim.hazards import Exponential, Gompertz, PiecewiseConstant, ProportionalHazards, Weibull
from sim.model import (BackgroundMortality, EmpiricalAge, FixedAge, FrozenMap, Horizon, Model, ModelError, NormalAge,
                       Population, PopulationError, RunSettings, State, Strategy, Transition, UniformAge, Valuation,
                       ValuationError)
from sim.problems import ValidationError

STATES = (State("well"), State("sick"), State("dead", absorbing=True))


def _model(**kw) -> Model:
    base = dict(
        states=STATES,
        transitions=(Transition("onset", "well", "sick", Weibull(1.3, 30.0)),
                     Transition("death", "sick", "dead", Exponential(0.2))),
        population=Population(EmpiricalAge((50, 60), (1, 3)), "well", {"female": 0.4, "male": 0.6}),
        horizon=Horizon(20.0),
        background=BackgroundMortality("dead", {"female": Gompertz(1e-4, 0.08),
                                                "male": PiecewiseConstant((0.0, 60.0), (0.01, 0.03))}),
        strategies=(Strategy("usual care"),
                    Strategy("new therapy", hazard_ratios={"onset": 0.7}, replacements={"death": Exponential(0.1)},
                             state_costs={"sick": 900.0}, transition_costs={"onset": 50.0})),
        valuation=Valuation(utilities={"well": 0.9, "sick": 0.6}, state_costs={"sick": 1000.0},
                            transition_costs={"death": 3000.0}),
        name="frozen")
    base.update(kw)
    return Model(**base)


def _problems(err: ValidationError) -> list[tuple]:
    return [(p.path, p.rule, p.value) for p in err.problems]


# ----------------------------------------------------------------------------- immutability
def _every_table(model: Model) -> dict[str, object]:
    strategy = model.strategy("new therapy")
    return {"valuation.utilities": model.valuation.utilities,
            "valuation.state_costs": model.valuation.state_costs,
            "valuation.transition_costs": model.valuation.transition_costs,
            "strategy.hazard_ratios": strategy.hazard_ratios,
            "strategy.replacements": strategy.replacements,
            "strategy.state_costs": strategy.state_costs,
            "strategy.transition_costs": strategy.transition_costs,
            "background.hazards": model.background.hazards,
            "population.sex_mix": model.population.sex_mix}


@pytest.mark.parametrize("name", list(_every_table(_model())))
def test_every_table_is_read_only(name):
    table = _every_table(_model())[name]
    assert isinstance(table, FrozenMap) and table
    key = next(iter(table))
    with pytest.raises(TypeError):
        table[key] = 5  # type: ignore[index]
    with pytest.raises(TypeError):
        del table[key]  # type: ignore[attr-defined]
    with pytest.raises(AttributeError):
        table.update({key: 5})  # type: ignore[attr-defined]
    with pytest.raises(AttributeError):
        table._items = {}  # type: ignore[misc]


def test_changing_the_dict_given_does_not_change_the_model():
    utilities = {"well": 0.9}
    valuation = Valuation(utilities=utilities)
    utilities["well"] = 0.1
    assert valuation.utilities["well"] == 0.9


def test_utility_cannot_be_changed_after_validation():
    model = _model()
    with pytest.raises(TypeError):
        model.valuation.utilities["well"] = 5  # type: ignore[index]
    with pytest.raises(dataclasses.FrozenInstanceError):
        model.valuation.discount_costs = 0.5  # type: ignore[misc]
    assert isinstance(model.population.entry_age.ages, tuple) and isinstance(model.population.entry_age.weights, tuple)
    assert model.population.entry_age.ages == (50.0, 60.0)


def test_frozen_map_behaves_like_a_read_only_dict():
    m = FrozenMap({"b": 2.0, "a": 1.0})
    assert m == {"a": 1.0, "b": 2.0} and {"a": 1.0, "b": 2.0} == m and m != {"a": 1.0}
    assert list(m) == ["b", "a"] and repr(m) == "{'b': 2.0, 'a': 1.0}"  # order kept, shown as a dict
    assert hash(m) == hash(FrozenMap({"a": 1.0, "b": 2.0}))  # like equality, the hash ignores order
    assert m.get("c", 3.0) == 3.0 and "a" in m and len(m) == 2 and dict(m) == {"b": 2.0, "a": 1.0}
    again = pickle.loads(pickle.dumps(m))
    assert again == m and isinstance(again, FrozenMap)
    assert (m | {"c": 3.0}) == {"a": 1.0, "b": 2.0, "c": 3.0} and m == {"a": 1.0, "b": 2.0}


# ----------------------------------------------------------------------------- hashing
def test_equal_models_are_equal_and_hash_equal():
    a, b = _model(), _model()
    assert a is not b and a == b and hash(a) == hash(b)
    assert {a: "cached"}[b] == "cached"
    other = _model(valuation=Valuation(utilities={"well": 0.8, "sick": 0.6}))
    assert other != a  # (hashes of unequal models may collide; equality decides)


def test_model_is_an_lru_cache_key():
    calls = []

    @functools.lru_cache(maxsize=4)
    def exits(model: Model) -> int:
        calls.append(model.name)
        return sum(len(per) for per in model.resolve("new therapy"))

    assert exits(_model()) == exits(_model()) == 4  # onset, death, background death twice
    assert calls == ["frozen"]


@pytest.mark.parametrize("hazard", [Exponential(0.1), Weibull(1.3, 30.0), Gompertz(1e-4, 0.08),
                                    PiecewiseConstant((0.0, 5.0, 10.0), (0.1, 0.2, 0.0)),
                                    ProportionalHazards(Weibull(1.3, 30.0), 0.7)])
def test_hazards_hash_by_value(hazard):
    twin = pickle.loads(pickle.dumps(hazard))
    assert twin == hazard and hash(twin) == hash(hazard)


def test_resolve_is_computed_once_per_strategy():
    model = _model()
    first, second = model.resolve("new therapy"), model.resolve("new therapy")
    assert first == second and first is not second  # new lists, the same exits
    assert all(a is b for x, y in zip(first, second) for a, b in zip(x, y))
    first[0].clear()  # a caller changing its lists does not change the model's
    assert len(model.resolve("new therapy")[0]) == 2
    np.testing.assert_allclose(first[1][0].hazards[0].cumhazard([2.0]), Exponential(0.1).cumhazard([2.0]))


def test_pickle_round_trip_of_a_model_and_of_its_error():
    model = _model()
    again = pickle.loads(pickle.dumps(model))
    assert again == model and hash(again) == hash(model)
    assert again.resolve("usual care") == model.resolve("usual care")
    assert again.valuation.utilities == {"well": 0.9, "sick": 0.6}
    with pytest.raises(ModelError) as info:
        _model(population=Population(FixedAge(50), "dead"), horizon=Horizon(40.0, "age"))
    err = pickle.loads(pickle.dumps(info.value))
    assert type(err) is ModelError and err.problems == info.value.problems and str(err) == str(info.value)


def test_model_rebuilt_from_its_fields():
    model = _model()
    assert Model(**model.__dict__) == model
    assert dataclasses.replace(model, horizon=Horizon(5.0)).horizon.value == 5.0


# ----------------------------------------------------------------------------- numbers
def test_numpy_scalars_are_accepted_and_become_python_floats():
    h = Horizon(np.float64(5))
    assert h.value == 5.0 and type(h.value) is float
    v = Valuation(utilities={"well": np.float32(0.5)}, state_costs={"well": np.int64(10)},
                  discount_costs=np.float64(0.03), willingness_to_pay=np.int32(30000))
    assert type(v.utilities["well"]) is float and type(v.state_costs["well"]) is float
    assert type(v.discount_costs) is float and type(v.willingness_to_pay) is float
    s = Strategy("s", hazard_ratios={"onset": np.int64(1)}, state_costs={"sick": np.float64(2.5)})
    assert type(s.hazard_ratios["onset"]) is float
    p = Population(UniformAge(np.int64(40), np.float64(60.5)), "well", {"female": np.float64(0.5), "male": 0.5})
    assert type(p.entry_age.low) is float and type(p.sex_mix["female"]) is float
    assert type(NormalAge(np.float32(55), 8, 40, 70).mu) is float
    assert EmpiricalAge(np.array([50, 60]), np.array([1, 3])).ages == (50.0, 60.0)
    r = RunSettings(patients=np.int64(10), seed=np.uint32(3), cycle_lengths=np.array([0.5, 1.0]))
    assert (type(r.patients), type(r.seed), r.cycle_lengths) == (int, int, (0.5, 1.0))


@pytest.mark.parametrize("make, path", [
    (lambda: Horizon(True), ("horizon", "value")),
    (lambda: Horizon("5"), ("horizon", "value")),
    (lambda: Valuation(discount_costs=False), ("valuation", "discount_costs")),
    (lambda: Valuation(willingness_to_pay=np.True_), ("valuation", "willingness_to_pay")),
    (lambda: Valuation(utilities={"well": True}), ("valuation", "utilities", "well")),
    (lambda: Valuation(transition_costs={"onset": "10"}), ("valuation", "transition_costs", "onset")),
    (lambda: Strategy("s", hazard_ratios={"onset": True}), ("strategies", "s", "hazard_ratios", "onset")),
    (lambda: Strategy("s", state_costs={"sick": None}), ("strategies", "s", "state_costs", "sick")),
    (lambda: Population(FixedAge(50), "well", {"all": True}), ("population", "sex_mix", "all")),
    (lambda: FixedAge(True), ("population", "entry_age", "age")),
    (lambda: UniformAge("40", 60), ("population", "entry_age", "low")),
    (lambda: NormalAge(50, False, 40, 60), ("population", "entry_age", "sd")),
    (lambda: EmpiricalAge((50, True), (1, 1)), ("population", "entry_age", "ages", 1)),
    (lambda: RunSettings(seed=True), ("run", "seed")),
    (lambda: RunSettings(tolerance="0.01"), ("run", "tolerance")),
])
def test_bools_and_strings_are_not_numbers(make, path):
    with pytest.raises(ModelError) as info:
        make()
    (problem,) = info.value.problems
    assert problem.path == path and problem.rule == "must be a number"


def test_other_values_are_checked_on_construction():
    with pytest.raises(ModelError) as info:
        State("dead", absorbing="yes")
    assert _problems(info.value) == [(("states", "dead", "absorbing"), "must be true or false", "yes")]
    with pytest.raises(ModelError) as info:
        Transition("x", "well", "", "not a hazard")
    assert _problems(info.value) == [(("transitions", "x", "to"), "must be a non-empty string", ""),
                                     (("transitions", "x", "hazard"), "must be a Hazard", "not a hazard")]
    with pytest.raises(ModelError) as info:
        BackgroundMortality("dead", {"female": 0.01}, "calendar")
    assert _problems(info.value) == [
        (("background", "clock"), "must be one of ['age', 'entry', 'state']", "calendar"),
        (("background", "female"), "must be a Hazard", 0.01)]
    with pytest.raises(ModelError) as info:
        Strategy("s", hazard_ratios={"onset": 0.5}, replacements={"onset": Exponential(0.1)})
    assert _problems(info.value)[0][0] == ("strategies", "s", "hazard_ratios", "onset")
    with pytest.raises(ValuationError) as info:
        Valuation(utilities={"well": 1.5}, discount_effects=1.0, currency="")
    assert [p.path for p in info.value.problems] == [("valuation", "utilities", "well"),
                                                     ("valuation", "discount_effects"), ("valuation", "currency")]


# ----------------------------------------------------------------------------- every problem at once
def test_three_independent_mistakes_give_three_problems():
    with pytest.raises(ModelError) as info:
        _model(transitions=(Transition("onset", "well", "sick", Weibull(1.3, 30.0)),
                            Transition("death", "sick", "grave", Exponential(0.2))),
               population=Population(FixedAge(50), "dead", {"female": 0.4, "male": 0.6}),
               valuation=Valuation(utilities={"wel": 0.9}))
    assert _problems(info.value) == [
        (("transitions", "death", "to"), "must name a state ['well', 'sick', 'dead']", "grave"),
        (("population", "initial_state"), "must name a non-absorbing state", "dead"),
        (("valuation", "utilities", "wel"), "must name a state ['well', 'sick', 'dead']", "wel")]
    assert str(info.value).startswith("3 problems:\n  - transitions.death.to: must name a state")


def test_population_reports_all_its_problems():
    with pytest.raises(PopulationError) as info:
        UniformAge(-1, 200)
    assert [p.path for p in info.value.problems] == [("population", "entry_age", "low"),
                                                     ("population", "entry_age", "high")]
    with pytest.raises(PopulationError) as info:
        Population(FixedAge(50), "", {"female": 0.5, "male": -0.5})
    assert _problems(info.value) == [(("population", "initial_state"), "must be a non-empty string", ""),
                                     (("population", "sex_mix", "male"), "must be >= 0", -0.5)]


def test_strategy_names_with_spaces_keep_their_name_in_the_path():
    with pytest.raises(ModelError) as info:
        _model(strategies=(Strategy("new therapy", hazard_ratios={"progression": 0.5}),))
    (problem,) = info.value.problems
    assert problem.path == ("strategies", "new therapy", "hazard_ratios", "progression")
    assert problem.key == 'strategies."new therapy".hazard_ratios.progression'


# ----------------------------------------------------------------------------- run settings
def test_run_settings_defaults_and_conversion():
    r = RunSettings()
    assert (r.patients, r.seed, r.workers, r.chunk_size, r.tolerance) == (100_000, 1, 2, 100_000, 0.01)
    assert r.cycle_lengths == (1 / 52, 1 / 12, 1 / 4, 1 / 2, 1.0, 2.0)
    assert RunSettings(cycle_lengths=[1, 0.5]).cycle_lengths == (1.0, 0.5)
    assert hash(RunSettings(cycle_lengths=[1, 0.5])) == hash(RunSettings(cycle_lengths=(1.0, 0.5)))


def test_run_settings_report_every_problem():
    with pytest.raises(ModelError) as info:
        RunSettings(patients=0, seed=-1, workers=65, chunk_size=1000.0, cycle_lengths=(0.5, 0.0, float("inf")),
                    tolerance=0)
    assert _problems(info.value) == [
        (("run", "patients"), "must be >= 1", 0),
        (("run", "seed"), "must be >= 0", -1),
        (("run", "workers"), "must be <= 64", 65),
        (("run", "chunk_size"), "must be a whole number", 1000.0),
        (("run", "cycle_lengths", 1), "must be > 0", 0.0),
        (("run", "cycle_lengths", 2), "must be finite", float("inf")),
        (("run", "tolerance"), "must be > 0", 0)]
    for empty in ((), [], "1 week", None):
        with pytest.raises(ModelError) as info:
            RunSettings(cycle_lengths=empty)
        assert _problems(info.value) == [(("run", "cycle_lengths"), "must be a non-empty list of durations", empty)]
