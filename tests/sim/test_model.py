"""Model and population validation: every error names the field, the value and the rule."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from sim.hazards import Exponential, Gompertz, Weibull
from sim.model.multistate import (BACKGROUND, BackgroundMortality, Clock, Horizon, Model, ModelError, State,
                       Strategy, Transition)
from sim.model.population import EmpiricalAge, FixedAge, NormalAge, Population, PopulationError, UniformAge

from .conftest import illness_death

STATES = (State("well"), State("sick"), State("dead", absorbing=True))


def _model(**kw):
    base = dict(states=STATES,
                transitions=(Transition("onset", "well", "sick", Exponential(0.1)),
                             Transition("death", "sick", "dead", Exponential(0.2))),
                population=Population(FixedAge(50), "well"), horizon=Horizon(20.0))
    base.update(kw)
    return Model(**base)


@pytest.mark.parametrize("kw, message", [
    (dict(states=(State("a"), State("b"))), "at least one state must be absorbing"),
    (dict(states=(State("well"), State("well"), State("dead", absorbing=True))), "duplicates \\['well'\\]"),
    (dict(transitions=(Transition("x", "well", "nowhere", Exponential(0.1)),)), "target must name a state.*'nowhere'"),
    (dict(transitions=(Transition("x", "well", "well", Exponential(0.1)),)), "source and target must differ"),
    (dict(transitions=(Transition("x", "dead", "well", Exponential(0.1)),)), "'dead' is absorbing"),
    (dict(transitions=(Transition("onset", "well", "sick", Exponential(0.1)),)), "states\\['sick'\\] is not absorbing but has no exits"),
    (dict(population=Population(FixedAge(50), "dead")), "initial_state must name a non-absorbing state, got 'dead'"),
    (dict(horizon=Horizon(40.0, "age")), "must exceed the lowest entry age 50.0"),
    (dict(strategies=(Strategy("s", hazard_ratios={"cure": 0.5}),)), "refers to transition 'cure'"),
    (dict(background=BackgroundMortality("sick", {"all": Exponential(0.01)})), "background.target must name an absorbing state, got 'sick'"),
])
def test_model_errors(kw, message):
    with pytest.raises(ModelError, match=message):
        _model(**kw)


def test_field_level_errors():
    with pytest.raises(ModelError, match="clock must be one of \\['age', 'entry', 'state'\\], got 'calendar'"):
        Transition("x", "a", "b", Exponential(0.1), "calendar")
    with pytest.raises(ModelError, match="horizon.value must be a finite number of years > 0, got -3"):
        Horizon(-3)
    with pytest.raises(ModelError, match="horizon.scale must be 'time' or 'age', got 'cycles'"):
        Horizon(10, "cycles")
    with pytest.raises(ModelError, match="hazard_ratios\\['onset'\\] must be a finite number >= 0, got -0.5"):
        Strategy("s", hazard_ratios={"onset": -0.5})
    with pytest.raises(ModelError, match="sex in population.sex_mix"):
        _model(population=Population(FixedAge(50), "well", {"female": 0.5, "male": 0.5}),
               background=BackgroundMortality("dead", {"female": Exponential(0.01)}))


def test_population_errors():
    with pytest.raises(PopulationError, match="entry_age.age must be a finite age in \\[0, 130\\] years, got 150"):
        FixedAge(150)
    with pytest.raises(PopulationError, match="entry_age.high must be > entry_age.low"):
        UniformAge(60, 50)
    with pytest.raises(PopulationError, match="entry_age.sd must be > 0"):
        NormalAge(50, 0, 40, 60)
    with pytest.raises(PopulationError, match="sex_mix shares must sum to 1"):
        Population(FixedAge(50), "well", {"female": 0.5, "male": 0.6})
    with pytest.raises(PopulationError, match="weights must be finite, >= 0"):
        EmpiricalAge((50, 60), (1, -1))


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
