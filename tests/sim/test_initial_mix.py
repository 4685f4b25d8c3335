"""Prevalent cohorts: a mix of initial states (population.initial_state as a table of shares,
optionally per sex), checked against the Kolmogorov solution by scipy.linalg.expm, the simulation
within 4 Monte Carlo standard errors, the cycle-based traces as the cycle shrinks, and bit for bit
against the single-state model when all the weight is on one state."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import tomlkit
from scipy import linalg

from sim.analysis import patient_outcomes, summarise
from sim.engine import simulate
from sim.hazards import Exponential, Gompertz
from sim.io.demo import DEMOS, SCENARIO_DIR
from sim.io.scenario import ScenarioError, document_from_model, parse_scenario, rename, scenario_text
from sim.model import (BackgroundMortality, Clock, FixedAge, Horizon, Model, ModelError, Population,
                       PopulationError, State, Strategy, Transition)
from sim.reference import cohort_trace, exact_outcomes, solve_exact

from .conftest import illness_death, occupancy_from_log

STATES = ("mild", "moderate", "dead")
MIX = {"mild": 0.7, "moderate": 0.3}
BY_SEX = {"female": {"mild": 0.9, "moderate": 0.1}, "male": {"mild": 0.4, "moderate": 0.6}}
SEX_MIX = {"female": 0.45, "male": 0.55}
# constant intensities (invented): mild -> moderate 0.2, mild -> dead 0.05, moderate -> dead 0.3,
# moderate -> mild 0.1
Q = np.array([[-0.25, 0.2, 0.05],
              [0.1, -0.4, 0.3],
              [0.0, 0.0, 0.0]])
HORIZON = 10.0


def _model(initial, sex_mix=None, background=None, horizon=HORIZON) -> Model:
    return Model(
        states=(State("mild"), State("moderate"), State("dead", absorbing=True)),
        transitions=(
            Transition("progression", "mild", "moderate", Exponential(0.2), Clock.ENTRY),
            Transition("mild death", "mild", "dead", Exponential(0.05), Clock.ENTRY),
            Transition("moderate death", "moderate", "dead", Exponential(0.3), Clock.STATE),
            Transition("remission", "moderate", "mild", Exponential(0.1), Clock.STATE),
        ),
        background=background,
        population=Population(FixedAge(60.0), initial, sex_mix or {"all": 1.0}),
        horizon=Horizon(horizon),
        strategies=(Strategy("usual"), Strategy("treated", hazard_ratios={"progression": 0.6})),
    )


def _p0(initial: dict, sex_mix: dict | None = None) -> np.ndarray:
    """The population's p(0) over STATES, written out by hand."""
    def row(shares):
        return np.array([shares.get(s, 0.0) for s in STATES])
    if sex_mix is None:
        return row(initial)
    return sum(w * row(initial[sex]) for sex, w in sex_mix.items())


def _occupancy(sol, strategy: str = "usual") -> pd.DataFrame:
    occ = sol.occupancy[sol.occupancy["strategy"] == strategy]
    return occ.pivot(index="time", columns="state", values="probability")[list(STATES)]


# ----------------------------------------------------------------------------- exact
@pytest.mark.parametrize("initial, sex_mix", [(MIX, None), (BY_SEX, SEX_MIX)])
def test_exact_solution_equals_the_matrix_exponential_from_the_mix(initial, sex_mix):
    # p(t) = p(0) expm(t Q) for constant intensities (Kolmogorov forward solution; scipy.linalg.expm
    # as the independent reference); per sex, the population average of the sexes' p(0) rows.
    times = np.array([0.0, 0.5, 2.0, 5.0, 10.0])
    sol = solve_exact(_model(initial, sex_mix), times)
    occ = _occupancy(sol)
    p0 = _p0(initial, sex_mix)
    for t in times:
        np.testing.assert_allclose(occ.loc[t].to_numpy(), p0 @ linalg.expm(t * Q), rtol=0, atol=1e-9)
    # time in state to the horizon: p(0) times the integral of expm(t Q) (Van Loan 1978, IEEE Trans
    # Autom Control 23(3):395-404: the upper-right block of expm([[Q, I], [0, 0]] T))
    block = np.zeros((6, 6))
    block[:3, :3], block[:3, 3:] = Q, np.eye(3)
    years = p0 @ linalg.expm(block * HORIZON)[:3, 3:]
    tis = sol.time_in_state[sol.time_in_state["strategy"] == "usual"].set_index("state")["years"]
    np.testing.assert_allclose(tis[list(STATES)].to_numpy(), years, rtol=1e-9, atol=1e-10)


def test_all_weight_on_one_state_is_the_single_state_model_exactly():
    single, mix = _model("moderate"), _model({"mild": 0.0, "moderate": 1.0})
    times = np.linspace(0.0, HORIZON, 6)
    a, b = solve_exact(single, times), solve_exact(mix, times)
    pd.testing.assert_frame_equal(a.occupancy, b.occupancy, check_exact=True)
    pd.testing.assert_frame_equal(a.time_in_state, b.time_in_state, check_exact=True)
    pd.testing.assert_frame_equal(exact_outcomes(single), exact_outcomes(mix), check_exact=True)


def test_all_weight_on_one_state_simulates_bit_identically():
    """The engine draws the initial-state word only for a mix, and a mix with one state holding all
    the weight always picks it: the same histories, bit for bit (here a Weibull, sex-specific,
    age-dependent model)."""
    base = illness_death(strategies=(Strategy("usual"), Strategy("treated", hazard_ratios={"onset": 0.7})))
    pop = Population(base.population.entry_age, {"healthy": 1.0, "sick": 0.0}, base.population.sex_mix)
    mixed = Model(states=base.states, transitions=base.transitions, background=base.background,
                  population=pop, horizon=base.horizon, strategies=base.strategies)
    a, b = simulate(base, 3000, seed=11, chunk_size=700), simulate(mixed, 3000, seed=11, chunk_size=1000)
    pd.testing.assert_frame_equal(a.events, b.events, check_exact=True)
    pd.testing.assert_frame_equal(a.patients, b.patients, check_exact=True)


# ----------------------------------------------------------------------------- simulation
def _sim_vs_exact(model: Model, n: int, seed: int) -> None:
    run = simulate(model, n, seed=seed)
    times = np.array([1.0, 4.0, 9.0])
    exact_occ = solve_exact(model, times)
    for strategy in model.strategy_names:
        ev, pt = run.strategy(strategy)
        ref = _occupancy(exact_occ, strategy)
        for t in times:
            got = occupancy_from_log(ev, pt, STATES, t)
            p = ref.loc[t].to_numpy()
            se = np.sqrt(p * (1 - p) / n)  # binomial standard error of a share
            assert np.all(np.abs(got - p) <= 4 * se + 1e-12), (strategy, t, got, p)
    summary = summarise(patient_outcomes(run)).merge(exact_outcomes(model), on=["strategy", "outcome"])
    for outcome in ("life_years", "life_years_discounted", "years in mild", "years in moderate"):
        rows = summary[summary["outcome"] == outcome]
        assert np.all(np.abs(rows["mean"] - rows["value"]) <= 4 * rows["mcse"]), rows


def test_simulation_matches_exact_for_a_mix():
    _sim_vs_exact(_model(MIX), 20_000, seed=5)


def test_simulation_matches_exact_for_a_mix_per_sex_with_sex_specific_background():
    bg = BackgroundMortality("dead", {"female": Gompertz(rate=3e-5, shape=0.085),
                                      "male": Gompertz(rate=5e-5, shape=0.09)}, Clock.AGE)
    _sim_vs_exact(_model(BY_SEX, SEX_MIX, background=bg), 20_000, seed=6)


def test_initial_states_follow_the_shares_and_are_common_to_every_strategy():
    n = 40_000
    run = simulate(_model(BY_SEX, SEX_MIX), n, seed=9)
    _, usual = run.strategy("usual")
    _, treated = run.strategy("treated")
    np.testing.assert_array_equal(usual["initial_state"].to_numpy(), treated["initial_state"].to_numpy())
    for sex, shares in BY_SEX.items():
        got = usual.loc[usual["sex"] == sex, "initial_state"].astype(str)
        k = got.size
        for state, p in shares.items():
            assert abs((got == state).mean() - p) <= 4 * np.sqrt(p * (1 - p) / k), (sex, state)
    assert (usual["initial_state"] != "dead").all()


# ----------------------------------------------------------------------------- cycle-based traces
def test_cycle_based_traces_converge_to_the_exact_solution_for_a_mix():
    model = _model(BY_SEX, SEX_MIX)
    exact = _occupancy(solve_exact(model, [HORIZON])).loc[HORIZON].to_numpy()
    errors = []
    for h in (1.0, 0.5, 0.25):
        trace = cohort_trace(model, "usual", h, conversion="competing-exit")
        occ = np.einsum("m,mn->n", trace.weights, trace.occupancy[:, -1])
        errors.append(np.abs(occ - exact).max())
    # competing-exit conversion with rates held over the cycle: first-order error in h
    assert errors[0] > errors[1] > errors[2] > 0
    assert np.log2(errors[1] / errors[2]) == pytest.approx(1.0, abs=0.2)
    # with the matrix exponential, constant rates make the trace exact at any cycle length
    trace = cohort_trace(model, "usual", 1.0, conversion="matrix-exponential")
    np.testing.assert_allclose(np.einsum("m,mn->n", trace.weights, trace.occupancy[:, -1]), exact, atol=1e-9)


# ----------------------------------------------------------------------------- validation
def test_the_model_refuses_bad_mixes_with_key_paths():
    cases = [
        ({"mild": 0.7, "moderate": 0.2}, None, ("population", "initial_state"), "shares must sum to 1"),
        ({"mild": -0.1, "moderate": 1.1}, None, ("population", "initial_state", "mild"), "must be >= 0"),
        ({"mild": 0.5, "moderate": "0.5"}, None, ("population", "initial_state", "moderate"), "must be a number"),
        ({}, None, ("population", "initial_state"), "must name at least one state"),
        (3, None, ("population", "initial_state"), "must be a state name, a table"),
        ({"female": {"mild": 1.0}}, SEX_MIX, ("population", "initial_state"), "missing ['male']"),
        ({"female": {"mild": 1.0}, "male": {"mild": 1.0}, "other": {"mild": 1.0}}, SEX_MIX,
         ("population", "initial_state", "other"), "must name a sex"),
        ({"female": {"mild": 1.0}, "male": 1.0}, SEX_MIX, ("population", "initial_state"),
         "must be a state name, a table"),
    ]
    for initial, sex_mix, path, rule in cases:
        with pytest.raises(PopulationError) as info:
            Population(FixedAge(60.0), initial, sex_mix or {"all": 1.0})
        assert any(p.path == path and rule in p.rule for p in info.value.problems), (initial, info.value.problems)
    for initial, path in (({"mild": 0.5, "dead": 0.5}, ("population", "initial_state", "dead")),
                          ({"mild": 0.5, "sevre": 0.5}, ("population", "initial_state", "sevre"))):
        with pytest.raises(ModelError) as info:
            _model(initial)
        assert [p.path for p in info.value.problems] == [path]
        assert "must name a non-absorbing state" in info.value.problems[0].rule


def test_a_population_mix_is_deep_frozen_and_hashable():
    pop = Population(FixedAge(60.0), BY_SEX, SEX_MIX)
    with pytest.raises(TypeError):
        pop.initial_state["female"]["mild"] = 0.5  # type: ignore[index]
    assert hash(pop) == hash(Population(FixedAge(60.0), BY_SEX, SEX_MIX))
    assert pop.initial_states == ("mild", "moderate") and pop.initial_by_sex
    m = pop.initial_matrix(STATES)
    assert not m.flags.writeable
    np.testing.assert_array_equal(m, [[0.9, 0.1, 0.0], [0.4, 0.6, 0.0]])


LANTHIC = (SCENARIO_DIR / DEMOS["lanthic"]).read_text(encoding="utf-8")
_INITIAL = 'initial_state = "well"'


def _with(initial: str) -> str:
    assert _INITIAL in LANTHIC
    return LANTHIC.replace(_INITIAL, initial)


@pytest.mark.parametrize("initial, key, rule", [
    ('initial_state = { well = 0.8, lanthic = 0.3 }', "population.initial_state", "shares must sum to 1"),
    ('initial_state = { well = 0.8, dead = 0.2 }', "population.initial_state.dead", "must name a non-absorbing"),
    ('initial_state = { well = 1.2, lanthic = -0.2 }', "population.initial_state.well", "must be <= 1"),
    ('initial_state = { female = { well = 1.0 }, male = { well = 0.5, dead = 0.5 } }',
     "population.initial_state.male.dead", "must name a non-absorbing"),
    ('initial_state = { female = { well = 1.0 } }', "population.initial_state", "missing ['male']"),
    ('initial_state = []', "population.initial_state", "must be a state name, a table"),
])
def test_scenario_errors_name_the_key_and_line(initial, key, rule):
    with pytest.raises(ScenarioError) as info:
        parse_scenario(_with(initial), SCENARIO_DIR / "mix.toml")
    found = {p.key: p for p in info.value.problems}
    assert key in found and rule in found[key].rule, str(info.value)
    assert found[key].line == LANTHIC[:LANTHIC.index(_INITIAL)].count("\n") + 1


def test_every_state_must_be_reachable_from_some_initial_state():
    doc = tomlkit.parse(_with('initial_state = { well = 1.0, lanthic = 0.0 }')).unwrap()
    doc["transitions"] = [t for t in doc["transitions"] if t["name"] != "onset"]
    doc["valuation"]["transition_costs"].pop("onset", None)
    for st in doc.get("strategies", []):
        st.get("hazard_ratios", {}).pop("onset", None)
    with pytest.raises(ScenarioError, match=r"cannot be reached from the initial state 'well'"):
        parse_scenario(tomlkit.dumps(doc))
    doc["population"]["initial_state"] = {"well": 0.5, "lanthic": 0.5}  # lanthic is reached: some start there
    assert parse_scenario(tomlkit.dumps(doc)).model.population.initial_states == ("well", "lanthic")


def test_a_mix_survives_writing_and_reading():
    for initial in ('initial_state = { well = 0.75, lanthic = 0.25 }',
                    'initial_state = { female = { well = 1.0 }, male = { well = 0.5, lanthic = 0.5 } }'):
        model = parse_scenario(_with(initial)).model
        again = parse_scenario(scenario_text(document_from_model(model))).model
        assert again.population == model.population and again == model


def test_a_state_rename_updates_the_share_keys():
    doc = tomlkit.parse(_with('initial_state = { well = 0.75, lanthic = 0.25 }'))
    rename(doc, "states", 1, "sick")
    assert parse_scenario(tomlkit.dumps(doc)).model.population.initial_state == {"well": 0.75, "sick": 0.25}
    doc = tomlkit.parse(_with('initial_state = { female = { well = 1.0 }, male = { well = 0.5, lanthic = 0.5 } }'))
    rename(doc, "states", 1, "sick")
    pop = parse_scenario(tomlkit.dumps(doc)).model.population
    assert pop.initial_state == {"female": {"well": 1.0}, "male": {"well": 0.5, "sick": 0.5}}


def test_renaming_a_state_named_like_a_sex_leaves_the_sex_keys_alone():
    doc = {"states": [{"name": "male"}], "population": {"initial_state": {"female": {"male": 1.0},
                                                                          "male": {"male": 1.0}}}}
    rename(doc, "states", 0, "moderate")
    assert doc["population"]["initial_state"] == {"female": {"moderate": 1.0}, "male": {"moderate": 1.0}}


def test_patients_in_several_states_in_one_round_move_once_whatever_the_chunks():
    """Regression: when every patient of a chunk was active and they sat in several states, a patient
    moved into a state handled later in the same round moved twice (an IndexError with 2-patient
    chunks of a branching model). A mix of initial states makes that the first round of every chunk."""
    model = Model(states=(State("a"), State("b"), State("c"), State("dead", absorbing=True)),
                  transitions=(Transition("ab", "a", "b", Exponential(1.0), Clock.ENTRY),
                               Transition("ac", "a", "c", Exponential(1.0), Clock.ENTRY),
                               Transition("bc", "b", "c", Exponential(1.0), Clock.ENTRY),
                               Transition("cb", "c", "b", Exponential(1.0), Clock.ENTRY),
                               Transition("cd", "c", "dead", Exponential(0.2), Clock.ENTRY)),
                  population=Population(FixedAge(50.0), "a"), horizon=Horizon(5.0))
    for m in (model, Model(states=model.states, transitions=model.transitions, horizon=model.horizon,
                           population=Population(FixedAge(50.0), {"a": 0.3, "b": 0.3, "c": 0.4}))):
        small, large = simulate(m, 300, seed=1, chunk_size=2), simulate(m, 300, seed=1, chunk_size=300)
        pd.testing.assert_frame_equal(small.events, large.events, check_exact=True)
        pd.testing.assert_frame_equal(small.patients, large.patients, check_exact=True)
