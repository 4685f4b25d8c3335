"""The background-mortality multiplier ``[background] multiplier`` (a standardised mortality ratio on
every background hazard; issue 14 item 1, the background level as an uncertain input): 1 changes
nothing (the demos' event logs bit for bit), m on a constant background is the exact solution with
rate m r (closed form), m on a life table is the exact solution of the bands with rates m r_b
(scipy.linalg.expm per band, floor included), the engine agrees with the exact solver within 4 Monte
Carlo standard errors, a probabilistic draw on it changes the model, and bad values name key, value,
rule and line (docs/methods.md, 'Background mortality multiplier')."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import tomlkit
from scipy import linalg, stats

from sim.engine import simulate
from sim.hazards import Dimension, Exponential, Gompertz, PiecewiseConstant, ProportionalHazards
from sim.io.demo import DEMOS, SCENARIO_DIR
from sim.io.scenario import ScenarioError, document_from_model, parameters, parse_scenario, scenario_text
from sim.model import BackgroundMortality, Clock, FixedAge, Horizon, Model, ModelError, Population, State, Transition
from sim.distributed import run_psa
from sim.psa import model_for_draw, point_values, uncertain_parameters
import sim.reference.exact as exact_module
from sim.reference.exact import occupancy_for_entry, solve_exact
from sim.reference.factored import background_target
from sim.reference.forward import band_edges
from sim.report.describe import describe_lines
from sim.uncertainty import draw_table

from .conftest import occupancy_from_log, simulate_within_4_mcse

LANTHIC = SCENARIO_DIR / DEMOS["lanthic"]  # Gompertz background per sex
FERROVIAN = SCENARIO_DIR / DEMOS["ferrovian"]  # life-table background per sex
ONSET, DISEASE = 0.1, 0.3  # invented rates per year


def _with_multiplier(path, value: str) -> str:
    text = path.read_text(encoding="utf-8")
    assert text.count("[background]\n") == 1
    return text.replace("[background]\n", f"[background]\nmultiplier = {value}\n", 1)


def _illness_death(background: dict, multiplier: float = 1.0, floor: bool = False, age: float = 50.0,
                   horizon: float = 30.0) -> Model:
    """well -> sick (ONSET) -> dead (DISEASE, optionally at least the background), background death
    from both living states, everyone entering at ``age``."""
    clock = Clock.AGE if floor else Clock.ENTRY
    return Model(
        states=(State("well"), State("sick"), State("dead", absorbing=True)),
        transitions=(Transition("onset", "well", "sick", Exponential(ONSET), Clock.ENTRY),
                     Transition("disease death", "sick", "dead", Exponential(DISEASE), clock,
                                at_least_background=floor)),
        background=BackgroundMortality("dead", background, Clock.AGE, multiplier),
        population=Population(FixedAge(age), "well"),
        horizon=Horizon(horizon, "time"),
    )


# ----------------------------------------------------------------------------- 1 changes nothing
@pytest.mark.parametrize("path", [LANTHIC, FERROVIAN], ids=["gompertz", "life table"])
def test_a_multiplier_of_1_leaves_the_demo_event_log_bit_identical(path):
    plain = parse_scenario(path.read_text(encoding="utf-8"), path).model
    one = parse_scenario(_with_multiplier(path, "1.0"), path).model
    assert one == plain and hash(one) == hash(plain) and plain.background.multiplier == 1.0
    for st in plain.strategy_names:  # the very hazard objects as given: nothing wraps them
        bg = [e for per in one.resolve(st) for e in per if e.is_background]
        assert all(h is one.background.hazards[sex] for e in bg for h, sex in zip(e.hazards, one.population.sexes))
    a, b = simulate(plain, 3_000, seed=11), simulate(one, 3_000, seed=11)
    pd.testing.assert_frame_equal(a.events, b.events, check_exact=True)
    pd.testing.assert_frame_equal(a.patients, b.patients, check_exact=True)


# ----------------------------------------------------------------------------- constant background
def test_multiplier_on_a_constant_background_is_the_closed_form_with_rate_m_r():
    # Illness-death with constant rates a (onset), c (disease death) and background m r from both
    # living states: P(well) = exp(-(a + m r) t), P(sick) = a/(a - c) (exp(-(c + m r) t) - exp(-(a + m r) t))
    # (the two-state Kolmogorov solution; common practice, no source). Same as the model whose
    # background is the constant rate m r.
    r, m = 0.02, 2.5
    times = np.array([1.0, 7.5, 20.0, 29.0])
    scaled = _illness_death({"all": Exponential(r)}, m)
    direct = _illness_death({"all": Exponential(m * r)})
    got = solve_exact(scaled, times).occupancy.pivot(index="time", columns="state", values="probability")
    ref = solve_exact(direct, times).occupancy.pivot(index="time", columns="state", values="probability")
    well = np.exp(-(ONSET + m * r) * times)
    sick = ONSET / (ONSET - DISEASE) * (np.exp(-(DISEASE + m * r) * times) - np.exp(-(ONSET + m * r) * times))
    np.testing.assert_allclose(got["well"].to_numpy(), well, rtol=1e-8)
    np.testing.assert_allclose(got["sick"].to_numpy(), sick, rtol=1e-8)
    np.testing.assert_allclose(got.to_numpy(), ref.to_numpy(), rtol=1e-10, atol=1e-14)


# ----------------------------------------------------------------------------- life table
BREAKS = (0.0, 55.0, 60.0, 65.0, 70.0, 75.0, 80.0)  # invented life table: rates per year by age band
RATES = (0.002, 0.006, 0.009, 0.014, 0.022, 0.035, 0.06)


def _band_reference(m: float, floor: bool, age: float, times: np.ndarray) -> np.ndarray:
    """Occupancy of (well, sick, dead) at ``times`` by products of scipy.linalg.expm of the generator
    over each band of attained age, the background rate m r_b constant within a band (and the disease
    death max(c, m r_b) when floored)."""
    cuts = sorted({0.0, *[b - age for b in BREAKS if b > age], *times.tolist()})
    p, out, t_prev = np.array([1.0, 0.0, 0.0]), {}, 0.0
    for t in cuts[1:]:
        mu = m * RATES[int(np.searchsorted(BREAKS, age + 0.5 * (t_prev + t), side="right")) - 1]
        c = max(DISEASE, mu) if floor else DISEASE
        q = np.array([[-(ONSET + mu), ONSET, mu], [0.0, -(c + mu), c + mu], [0.0, 0.0, 0.0]])
        p = p @ linalg.expm(q * (t - t_prev))
        out[t], t_prev = p, t
    return np.array([out[t] for t in times])


@pytest.mark.parametrize("m,floor", [(1.8, False), (0.6, False), (12.0, True)],
                         ids=["m 1.8", "m 0.6", "m 12, floored"])
def test_a_life_table_times_m_is_exact_against_expm_per_band(monkeypatch, m, floor):
    seen = []
    monkeypatch.setattr(exact_module, "background_target", lambda *a: seen.append(background_target(*a)) or seen[-1])
    table = PiecewiseConstant(BREAKS, RATES)
    model = _illness_death({"all": table}, m, floor=floor)
    (h,) = model.background.scaled_hazards.values()
    # still piecewise constant with the table's bands: the exact solver restarts (or factors the
    # background out) at the same edges
    assert type(h) is PiecewiseConstant and h.breaks == table.breaks
    np.testing.assert_array_equal(h.rates, np.asarray(RATES) * m)
    np.testing.assert_array_equal(band_edges(h), band_edges(table))
    times = np.array([2.5, 5.0, 12.0, 19.9, 29.5])
    occ, _, _ = occupancy_for_entry(model, "base", 50.0, 0, times, 30.0)
    np.testing.assert_allclose(occ, _band_reference(m, floor, 50.0, times), rtol=1e-8, atol=1e-12)
    # the scaled table is factored out of the forward equations as the table itself would be (a
    # transition floored at it jumps with it: then the solve restarts at its band edges instead)
    assert seen == [None if floor else 2]


def test_the_floor_is_at_the_scaled_background():
    m = 12.0
    model = _illness_death({"all": PiecewiseConstant(BREAKS, RATES)}, m, floor=True)
    (ex,) = [e for per in model.resolve("base") for e in per if e.name == "disease death"]
    assert ex.hazards[0].floor is model.background.hazard_for("all")
    ages = np.array([52.0, 58.0, 72.0, 79.0])
    band_rates = np.asarray(RATES)[np.searchsorted(BREAKS, ages, "right") - 1]
    np.testing.assert_array_equal(ex.hazards[0].hazard(ages), np.maximum(DISEASE, m * band_rates))


# ----------------------------------------------------------------------------- engine
@pytest.mark.parametrize("background", [{"all": Gompertz(rate=3e-5, shape=0.085)},
                                        {"all": PiecewiseConstant(BREAKS, RATES)}], ids=["gompertz", "life table"])
def test_engine_matches_the_exact_solver_within_4_mcse(background):
    model = _illness_death(background, 3.0, age=60.0)
    if "all" in background and isinstance(background["all"], Gompertz):
        assert isinstance(model.background.hazard_for("all"), ProportionalHazards)
    n = 20_000
    times = np.array([3.0, 10.0, 20.0, 29.0])
    run = simulate_within_4_mcse(model, n, 2026, times)
    # and the run sees the multiplier: its share dead is beyond 4 MCSE of the exact share with m = 1
    plain = solve_exact(_illness_death(background, age=60.0), times).occupancy
    dead_plain = plain[plain["state"] == "dead"]["probability"].to_numpy()
    dead_hat = np.array([occupancy_from_log(run.events, run.patients, model.state_names, t)[2] for t in times])
    assert np.all(dead_hat - dead_plain > 4 * np.sqrt(dead_plain * (1 - dead_plain) / n))


# ----------------------------------------------------------------------------- scenario file
def test_read_written_listed_and_described():
    text = _with_multiplier(FERROVIAN, "1.7")
    s = parse_scenario(text, FERROVIAN)
    assert s.model.background.multiplier == 1.7
    found = {p.key: p for p in parameters(tomlkit.parse(text).unwrap())}
    assert found["background.multiplier"].dimension is Dimension.RATIO
    assert found["background.multiplier"].value == 1.7
    again = parse_scenario(scenario_text(document_from_model(s.model, s.run)), FERROVIAN)
    assert again.model == s.model and again.model.background.multiplier == 1.7
    assert "  background death: every hazard above times 1.7 (background.multiplier, a standardised " \
           "mortality ratio)" in describe_lines(s)
    assert not any("background.multiplier" in ln for ln in describe_lines(parse_scenario(
        FERROVIAN.read_text(encoding="utf-8"), FERROVIAN)))


SIGMA = (math.log(1.6) - math.log(0.8)) / (2 * float(stats.norm.ppf(0.975)))
PSA = f"""
[[uncertainty]]
parameter = "background.multiplier"
distribution = "lognormal"
mu = {0.5 * (math.log(0.8) + math.log(1.6))!r}
sigma = {SIGMA!r}
description = "log-normal with the 95% interval 0.8 to 1.6"
"""


def test_a_probabilistic_draw_on_the_multiplier_changes_the_model():
    # A log-normal from a 95% interval [lo, hi]: mu = (ln lo + ln hi)/2, sigma = (ln hi - ln lo)/(2 z_0.975)
    # (Briggs, Claxton & Sculpher 2006, Decision Modelling for Health Economic Evaluation, ch. 4),
    # given by mu and sigma: the "interval" form fails today in sim.io.scenario.substitute, whose cache
    # hashes the specs (an interval's fitted_from holds a list).
    s = parse_scenario(LANTHIC.read_text(encoding="utf-8") + PSA, LANTHIC)
    (spec,) = uncertain_parameters(s)
    assert spec.keys == ("background.multiplier",)
    want = stats.lognorm(s=SIGMA, scale=math.sqrt(0.8 * 1.6))
    np.testing.assert_allclose(spec.intervals()["background.multiplier"], (0.8, 1.6), rtol=1e-12)
    assert point_values(s)["background.multiplier"] == pytest.approx(want.mean(), rel=1e-12)  # none in the file
    assert s.model.background.multiplier == pytest.approx(want.mean(), rel=1e-12)
    draws = draw_table([spec], 4, s.run.seed)["background.multiplier"].to_numpy()
    assert np.all(draws > 0) and len(set(draws)) == 4
    times = np.array([10.0, 30.0])
    le = []
    for value in (0.8, 1.6):
        m = model_for_draw(s, {"background.multiplier": value})
        assert m.background.multiplier == value and m.background.hazards == s.model.background.hazards
        assert m.transitions == s.model.transitions
        bg = [e for per in m.resolve(m.strategy_names[0]) for e in per if e.is_background][0]
        assert bg.hazards[0] == s.model.background.hazards["female"].scaled(value)
        le.append(solve_exact(m, times).life_expectancy["years"].to_numpy())
    assert np.all(le[1] < le[0])  # a higher background level shortens life in every strategy
    # a bare model (written with its multiplier) takes the key too
    m = model_for_draw(s.model, {"background.multiplier": 2.0})
    assert m.background.multiplier == 2.0


def test_the_exact_rows_of_a_probabilistic_analysis_follow_the_drawn_multiplier():
    # Wiring: each draw's exact row is the exact solution of the model with the drawn multiplier (the
    # solver itself is checked against closed forms and scipy.linalg.expm above).
    s = parse_scenario(LANTHIC.read_text(encoding="utf-8") + PSA.replace(repr(SIGMA), "0.5"), LANTHIC)
    result = run_psa(s, draws=3, patients=0, workers=1, processes=False)
    assert result.values["background.multiplier"].nunique() == 3
    for draw, row in result.values.iterrows():
        m = model_for_draw(s, row.to_dict())
        assert m.background.multiplier == row["background.multiplier"]
        want = solve_exact(m, np.array([1.0]), discount_rate=m.valuation.discount_effects).life_expectancy
        got = result.table[result.table["draw"] == draw].set_index("strategy")
        for _, w in want.iterrows():
            assert got.loc[w["strategy"], "life_years"] == pytest.approx(w["years"], rel=1e-9)
            assert got.loc[w["strategy"], "life_years_discounted"] == pytest.approx(w["discounted_years"], rel=1e-9)


@pytest.mark.parametrize("value,rule", [("0", "must be > 0"), ("-1.5", "must be > 0"), ("inf", "must be finite"),
                                        ("nan", "must be finite"), ('"high"', "must be a number"),
                                        ("true", "must be a number")])
def test_bad_values_name_key_value_rule_and_line(value, rule):
    text = _with_multiplier(FERROVIAN, value)
    line = text.splitlines().index(f"multiplier = {value}") + 1
    with pytest.raises(ScenarioError) as err:
        parse_scenario(text, FERROVIAN)
    (p,) = err.value.problems
    assert p.path == ("background", "multiplier") and p.rule == rule and p.line == line
    assert str(p.value) == str(tomlkit.parse(f"x = {value}").unwrap()["x"])
    assert f":{line}: background.multiplier: {rule}" in str(err.value)


def test_bad_draws_and_bad_model_values_are_named():
    s = parse_scenario(_with_multiplier(LANTHIC, "1.2"), LANTHIC)
    with pytest.raises(ScenarioError) as err:
        model_for_draw(s, {"background.multiplier": 0.0})
    (p,) = err.value.problems
    assert p.path == ("background", "multiplier") and p.rule == "must be > 0" and p.value == 0.0
    assert p.line == s.text.splitlines().index("multiplier = 1.2") + 1
    with pytest.raises(ModelError) as err:
        BackgroundMortality("dead", {"all": Exponential(0.01)}, Clock.AGE, -2.0)
    assert err.value.problems[0].path == ("background", "multiplier") and err.value.problems[0].value == -2.0
    with pytest.raises(ModelError) as err:  # a band rate times the multiplier beyond the largest double
        BackgroundMortality("dead", {"all": PiecewiseConstant((0.0, 1.0), (1.0, 1e300))}, Clock.AGE, 1e10)
    assert err.value.problems[0].path == ("background", "multiplier")
    assert "not finite" in err.value.problems[0].rule
