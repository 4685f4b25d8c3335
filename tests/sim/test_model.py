"""Model and population validation: every error names the field, the value and the rule."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from sim.hazards import Exponential, Gompertz, Weibull
from sim.model.multistate import (BACKGROUND, BackgroundMortality, Clock, Horizon, Model, ModelError, State,
                       Strategy, Transition)
from sim.model.population import EmpiricalAge, FixedAge, NormalAge, Population, PopulationError, UniformAge
from sim.model.valuation import Valuation
from sim.problems import NO_VALUE

from .conftest import illness_death

STATES = (State("well"), State("sick"), State("dead", absorbing=True))


def _model(**kw):
    base = dict(states=STATES,
                transitions=(Transition("onset", "well", "sick", Exponential(0.1)),
                             Transition("death", "sick", "dead", Exponential(0.2))),
                population=Population(FixedAge(50), "well"), horizon=Horizon(20.0))
    base.update(kw)
    return Model(**base)


# each mistake: the model's keyword changed, the problem's key path, words of its rule, its value
_ONE_MISTAKE = [
    (dict(states=(State("a"), State("b"))), ("states",), "at least one state must be absorbing", NO_VALUE),
    (dict(transitions=(Transition("x", "well", "nowhere", Exponential(0.1)),)), ("transitions", "x", "to"),
     "must name a state ['well', 'sick', 'dead']", "nowhere"),
    (dict(transitions=(Transition("x", "well", "well", Exponential(0.1)),)), ("transitions", "x", "to"),
     "must differ from 'from'", "well"),
    (dict(transitions=(Transition("x", "dead", "well", Exponential(0.1)),)), ("transitions", "x", "from"),
     "is an absorbing state; absorbing states have no exits", "dead"),
    (dict(transitions=(Transition("onset", "well", "sick", Exponential(0.1)),)), ("states", "sick"),
     "is not absorbing but has no exits", NO_VALUE),
    (dict(population=Population(FixedAge(50), "dead")), ("population", "initial_state"),
     "must name a non-absorbing state", "dead"),
    (dict(horizon=Horizon(40.0, "age")), ("horizon", "value"), "must exceed the lowest entry age 50.0", 40.0),
    (dict(strategies=(Strategy("s", hazard_ratios={"cure": 0.5}),)), ("strategies", "s", "hazard_ratios", "cure"),
     "must name a transition ['onset', 'death']", "cure"),
    (dict(background=BackgroundMortality("sick", {"all": Exponential(0.01)})), ("background", "to"),
     "must name an absorbing state", "sick"),
    (dict(valuation=Valuation(utilities={"dead": 0.1})), ("valuation", "utilities", "dead"),
     "must be 0 for an absorbing state", 0.1),
    (dict(valuation=Valuation(state_costs={"limbo": 10})), ("valuation", "state_costs", "limbo"),
     "must name a state", "limbo"),
]


@pytest.mark.parametrize("kw, path, rule, value", _ONE_MISTAKE)
def test_model_errors(kw, path, rule, value):
    with pytest.raises(ModelError) as info:
        _model(**kw)
    found = [p for p in info.value.problems if p.path == path and rule in p.rule]
    assert len(found) == 1, info.value.problems
    problem = found[0]
    assert problem.value == value if value is not NO_VALUE else not problem.has_value
    assert str(problem) in str(info.value)


def test_duplicate_state_names():
    with pytest.raises(ModelError) as info:
        _model(states=(State("well"), State("well"), State("sick"), State("dead", absorbing=True)))
    assert [(p.path, p.rule, p.value) for p in info.value.problems] == [
        (("states", "well", "name"), "duplicate state name", "well")]


def test_field_level_errors():
    def problem(fn, *args):
        with pytest.raises(ModelError) as info:
            fn(*args)
        (p,) = info.value.problems
        return p.path, p.rule, p.value

    assert problem(Transition, "x", "a", "b", Exponential(0.1), "calendar") == (
        ("transitions", "x", "clock"), "must be one of ['age', 'entry', 'state']", "calendar")
    assert problem(Horizon, -3) == (("horizon", "value"), "must be > 0", -3)
    assert problem(Horizon, 10, "cycles") == (("horizon", "scale"), "must be one of ['time', 'age']", "cycles")
    assert problem(Horizon, 140, "age") == (("horizon", "value"),
                                            "must be an attained age <= 130 when horizon.scale is 'age'", 140)
    assert problem(lambda: Strategy("s", hazard_ratios={"onset": -0.5})) == (
        ("strategies", "s", "hazard_ratios", "onset"), "must be >= 0", -0.5)
    with pytest.raises(ModelError, match="sex in population.sex_mix") as info:
        _model(population=Population(FixedAge(50), "well", {"female": 0.5, "male": 0.5}),
               background=BackgroundMortality("dead", {"female": Exponential(0.01)}))
    assert info.value.problem.path == ("background",) and info.value.problem.value == ["female"]


def test_population_errors():
    def problem(fn, *args):
        with pytest.raises(PopulationError) as info:
            fn(*args)
        (p,) = info.value.problems
        return p.path, p.rule, p.value

    assert problem(FixedAge, 150) == (("population", "entry_age", "age"), "must be <= 130", 150)
    assert problem(UniformAge, 60, 50) == (("population", "entry_age", "high"), "must be > entry_age.low (60.0)", 50)
    assert problem(NormalAge, 50, 0, 40, 60) == (("population", "entry_age", "sd"), "must be > 0", 0)
    assert problem(Population, FixedAge(50), "well", {"female": 0.5, "male": 0.6}) == (
        ("population", "sex_mix"), "shares must sum to 1 (sum 1.1)", {"female": 0.5, "male": 0.6})
    assert problem(EmpiricalAge, (50, 60), (1, -1)) == (("population", "entry_age", "weights", 1), "must be >= 0", -1)
    assert problem(EmpiricalAge, (50, 60), (0, 0)) == (("population", "entry_age", "weights"), "must not be all 0",
                                                      [0, 0])


def test_strategy_resolution_applies_ratios_and_replacements():
    repl = Weibull(2.0, 10.0)
    model = _model(background=BackgroundMortality("dead", {"all": Gompertz(1e-4, 0.08)}, Clock.AGE),
                   strategies=(Strategy("base"), Strategy("hr", hazard_ratios={"onset": 0.5}),
                               Strategy("swap", replacements={"death": repl})))
    t = np.array([1.0, 5.0])
    base, hr, swap = (model.resolve(s) for s in ("base", "hr", "swap"))
    np.testing.assert_allclose(hr[0][0].hazards[0].cumhazard(t), 0.5 * base[0][0].hazards[0].cumhazard(t))
    assert swap[1][0].hazards[0] is repl
    assert [e.name for e in base[0]] == ["onset", BACKGROUND]
    assert base[0][1].is_background and base[0][1].clock is Clock.AGE
    assert model.exit_names == ("onset", "death", BACKGROUND)


def test_markov_detection():
    assert illness_death().is_markov  # constant hazards on the time-in-state clock are memoryless
    semi = _model(transitions=(Transition("onset", "well", "sick", Exponential(0.1)),
                               Transition("death", "sick", "dead", Weibull(1.2, 5.0), Clock.STATE)))
    assert semi.semi_markov_transitions() == ["death"]


@pytest.mark.parametrize("dist, ref", [
    (UniformAge(40, 80), stats.uniform(loc=40, scale=40)),
    (NormalAge(55, 8, 40, 75), stats.truncnorm((40 - 55) / 8, (75 - 55) / 8, loc=55, scale=8)),
])
def test_entry_age_quantiles_and_nodes(dist, ref):
    u = np.linspace(0.01, 0.99, 21)
    np.testing.assert_allclose(dist.ppf(u), ref.ppf(u), rtol=1e-10)
    ages, w = dist.nodes(24)
    np.testing.assert_allclose(w.sum(), 1.0, rtol=1e-12)
    np.testing.assert_allclose((w * ages).sum(), ref.mean(), rtol=1e-6)  # quadrature of the mean
    np.testing.assert_allclose(dist.mean, ref.mean(), rtol=1e-10)


def test_empirical_age_inverse_cdf():
    dist = EmpiricalAge((50, 60, 70), (1, 2, 1))
    np.testing.assert_array_equal(dist.ppf(np.array([0.1, 0.25, 0.26, 0.75, 0.76, 1.0])), [50, 50, 60, 60, 70, 70])
    ages, w = dist.nodes()
    np.testing.assert_allclose(w, [0.25, 0.5, 0.25])
    assert dist.mean == 60.0
