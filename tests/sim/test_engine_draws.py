"""The engine's many-parameter-sets entry (sim.engine.simulate_draws): each draw's rows are those of
simulate_range of its own model over its own patients, bit for bit, for every way lanes are
evaluated (one hazard; per-lane numbers of every family that has them, Gompertz slopes of both
signs and 0 and Gompertz-Makeham included, with and without a hazard ratio that differs per draw,
on the entry and the age clock (left truncation); grouped by hazard) and for draws whose
populations differ."""

from __future__ import annotations

import dataclasses

import math

import numpy as np
import pandas as pd
import pytest

from sim.engine import DrawSet, simulate_draws, simulate_range
from sim.hazards import (Exponential, Gamma, Gompertz, GompertzMakeham, LogLogistic, LogNormal, PiecewiseConstant,
                         Weibull)
from sim.model import (BackgroundMortality, Clock, FixedAge, Horizon, Model, Population, State, Strategy, Transition,
                       UniformAge)

from .test_psa_fixtures import apply_values, draws_table, markov_model


def _draw_rows(table: pd.DataFrame, first: int, stop: int) -> pd.DataFrame:
    rows = table[(table["patient"] >= first) & (table["patient"] < stop)]
    return rows.reset_index(drop=True)


def _kinds(models, name, strategies=None):
    """``{(kind, family, ratio)}`` of exit ``name`` over the strategies' plans."""
    out = set()
    for s in strategies or models[0].strategy_names:
        for exits in DrawSet(models, 10, 0).plan(s):
            for ex in exits:
                if ex.name == name:
                    out.add((ex.kind, None if ex.lanes is None else ex.lanes.family,
                             None if ex.lanes is None else ex.lanes.ratio))
    return out


def _check_identical(models, n, seed, first_draw=0):
    events, patients = simulate_draws(models, seed, n, first_draw=first_draw)
    for i, model in enumerate(models):
        a = (first_draw + i) * n
        ev, pt = simulate_range(model, seed, a, a + n)
        pd.testing.assert_frame_equal(_draw_rows(events, a, a + n), ev, check_exact=True)
        pd.testing.assert_frame_equal(_draw_rows(patients, a, a + n), pt, check_exact=True)


@pytest.mark.parametrize("names,kinds", [
    # a varying rate, and the hazard ratio on it
    (("progression_rate",), {("lanes", "exponential", False), ("lanes", "exponential", True)}),
    # the hazard ratio alone varies on a shared base rate
    (("hr_new",), {("one", None, None), ("lanes", "exponential", True)}),
    (("utility_sick",), {("one", None, None)}),  # no hazard varies
])
def test_draws_equal_their_own_runs(names, kinds):
    base = markov_model(background=True)
    models = [apply_values(base, row) for row in draws_table(6, names=names).to_dict("records")]
    assert _kinds(models, "progression") == kinds
    _check_identical(models, 40, seed=11, first_draw=3)


def test_varying_weibull_takes_per_lane_numbers_and_is_identical():
    base = markov_model(weibull=True)
    models = [apply_values(base, row) for row in draws_table(5).to_dict("records")]
    assert _kinds(models, "progression") == {("lanes", "weibull", False), ("lanes", "weibull", True)}
    _check_identical(models, 30, seed=2)


SLOPES = (0.1, -0.2, 0.0, 0.05, -0.05, 0.15)  # Gompertz slopes per draw (per year)

# Per family, draw i's hazards: progression on the entry clock (clock 0 at the first visit) and death
# from "sick" on attained age (clock 60-80 at entry: left-truncated). Invented numbers, each giving
# events within the 20-year horizon.
FAMILY_DRAWS = {
    "exponential": (lambda i: Exponential(0.12 * (1 + 0.1 * i)), lambda i: Exponential(0.2 * (1 + 0.1 * i))),
    "weibull": (lambda i: Weibull(1.3 + 0.05 * i, 8.0 * (1 + 0.1 * i)), lambda i: Weibull(6.0 + 0.2 * i, 85.0 + i)),
    "loglogistic": (lambda i: LogLogistic(1.5 + 0.1 * i, 9.0 + i), lambda i: LogLogistic(8.0 + 0.3 * i, 80.0 + i)),
    "lognormal": (lambda i: LogNormal(math.log(9.0) + 0.05 * i, 0.8 + 0.05 * i),
                  lambda i: LogNormal(math.log(75.0) + 0.01 * i, 0.12 + 0.01 * i)),
    "gamma": (lambda i: Gamma(1.5 + 0.1 * i, 6.0 + 0.5 * i), lambda i: Gamma(30.0 + i, 2.5 + 0.02 * i)),
    # slopes that differ between draws: rising, 0 and falling (improper: some never have the event)
    "gompertz": (lambda i: Gompertz(0.08 * (1 + 0.1 * i), SLOPES[i]),
                 lambda i: Gompertz(0.1 * math.exp(-70.0 * SLOPES[i] / 2) * (1 + 0.1 * i), SLOPES[i] / 2)),
    # slopes as above, constants 0 (the Gompertz form) and > 0
    "gompertz_makeham": (lambda i: GompertzMakeham(0.05 * (1 + 0.1 * i), SLOPES[i], (0.0, 0.02, 0.04)[i % 3]),
                         lambda i: GompertzMakeham(0.05 * math.exp(-70.0 * SLOPES[i] / 2), SLOPES[i] / 2,
                                                   (0.03, 0.0, 0.01)[i % 3])),
    "piecewise": (lambda i: PiecewiseConstant((0.0, 2.0, 5.0, 10.0), tuple(r * (1 + 0.1 * i) for r in (0.05, 0.1, 0.0, 0.15))),
                  lambda i: PiecewiseConstant((0.0, 60.0, 70.0, 80.0), tuple(r * (1 + 0.1 * i) for r in (0.001, 0.02, 0.05, 0.12)))),
}


def family_model(progression, death_sick, hr_new: float, horizon: float = 20.0) -> Model:
    """healthy -> sick (entry clock), sick -> dead (attained age), healthy -> dead; strategy "new"
    multiplies the progression hazard by ``hr_new`` (invented numbers)."""
    transitions = (Transition("progression", "healthy", "sick", progression, Clock.ENTRY),
                   Transition("death_healthy", "healthy", "dead", Exponential(0.02), Clock.ENTRY),
                   Transition("death_sick", "sick", "dead", death_sick, Clock.AGE))
    return Model(states=(State("healthy"), State("sick"), State("dead", absorbing=True)), transitions=transitions,
                 population=Population(UniformAge(60.0, 70.0), "healthy"), horizon=Horizon(horizon),
                 strategies=(Strategy("usual"), Strategy("new", hazard_ratios={"progression": hr_new})),
                 name="per-lane families (invented)")


@pytest.mark.parametrize("family", sorted(FAMILY_DRAWS))
def test_every_family_with_draw_varying_numbers_is_one_call_and_identical(family):
    prog, death = FAMILY_DRAWS[family]
    models = [family_model(prog(i), death(i), 0.6 * (1 + 0.05 * i)) for i in range(6)]
    assert _kinds(models, "progression") == {("lanes", family, False), ("lanes", family, True)}
    assert _kinds(models, "death_sick") == {("lanes", family, False)}
    _check_identical(models, 40, seed=21, first_draw=1)


@pytest.mark.parametrize("family", ["weibull", "lognormal", "gamma", "loglogistic", "piecewise", "gompertz",
                                    "gompertz_makeham"])
def test_extreme_hazard_ratios_go_through_their_own_hazard(family):
    # e / hr underflows (hr near the largest double: the log-space solver or the family's own form)
    # or overflows (a subnormal hr) in some lanes: those lanes take their hazard's own edge handling
    prog, death = FAMILY_DRAWS[family]
    ratios = [1e308, 0.7, 5e-324, 1.5e308, 1e-310, 1.3]
    models = [family_model(prog(i), death(i), hr) for i, hr in enumerate(ratios)]
    assert ("lanes", family, True) in _kinds(models, "progression")
    _check_identical(models, 30, seed=8)


@pytest.mark.parametrize("make,kind", [
    (lambda i: Gompertz(0.05, 0.1) if i % 2 else GompertzMakeham(0.05, 0.1, 0.01), ("group", None, None)),  # 2 families
    (lambda i: PiecewiseConstant((0.0, 1.0 + i), (0.1, 0.2)), ("group", None, None)),  # band starts differ
    (lambda i: Weibull(1.2, 8.0) if i % 2 else LogNormal(2.0, 0.8), ("group", None, None)),  # mixed families
])
def test_hazards_without_a_shared_kernel_are_grouped_and_identical(make, kind):
    models = [family_model(make(i), Exponential(0.2), 0.6) for i in range(4)]
    assert _kinds(models, "progression", ["usual"]) == {kind}
    _check_identical(models, 30, seed=3)


def test_draws_with_their_own_populations():
    base = markov_model(background=True)
    models = [dataclasses.replace(base, population=Population(FixedAge(55.0 + 3 * i) if i % 2 else
                                                              UniformAge(50.0, 60.0 + i), "healthy"))
              for i in range(4)]
    assert not DrawSet(models, 25, 0).same_population
    _check_identical(models, 25, seed=4, first_draw=1)


def test_a_different_structure_is_refused():
    base = markov_model()
    other = dataclasses.replace(base, transitions=base.transitions[:2] + (
        dataclasses.replace(base.transitions[2], target="healthy"),))
    with pytest.raises(ValueError, match="structure"):
        simulate_draws([base, other], 1, 10)


def test_arguments_are_checked():
    with pytest.raises(ValueError, match="n_per_draw"):
        simulate_draws([markov_model()], 1, 0)
    with pytest.raises(ValueError, match="at least one model"):
        simulate_draws([], 1, 10)
    assert np.array_equal(DrawSet([markov_model()] * 3, 10, 2).draw_of(25, 41), (np.arange(25, 41) - 20) // 10)


def test_a_varying_gompertz_background_uses_per_lane_rates():
    # the background's rate differs per draw and per sex (one shape): evaluated as one array of
    # log-rates (sim.hazards.gompertz_times), the same bits as each draw's own run
    base = markov_model()
    pop = Population(UniformAge(50.0, 70.0), "healthy", {"female": 0.5, "male": 0.5})
    models = [dataclasses.replace(base, population=pop, background=BackgroundMortality(
        "dead", {"female": Gompertz(2e-5 * (1 + 0.1 * i), 0.09), "male": Gompertz(3e-5 * (1 + 0.05 * i), 0.09)}))
        for i in range(5)]
    kinds = {(ex.kind, ex.lanes.family) for exits in DrawSet(models, 30, 0).plan("usual") for ex in exits
             if ex.is_background}
    assert kinds == {("lanes", "gompertz")}
    _check_identical(models, 30, seed=6, first_draw=2)


def test_a_varying_makeham_background_with_slopes_and_constants_by_draw_is_one_call():
    # background Gompertz-Makeham per sex whose rate, slope and constant all differ by draw (a slope
    # of 0 in one draw, a constant of 0 in another): one per-lane call, each draw its own run's bits
    base = markov_model()
    pop = Population(UniformAge(50.0, 70.0), "healthy", {"female": 0.5, "male": 0.5})
    slopes, constants = (0.09, 0.0, 0.085, 0.1, 0.07), (0.001, 0.002, 0.0, 0.0005, 0.003)
    models = [dataclasses.replace(base, population=pop, background=BackgroundMortality("dead", {
        "female": GompertzMakeham(2e-5 * (1 + 0.1 * i), slopes[i], constants[i]),
        "male": GompertzMakeham(3e-5 * (1 + 0.05 * i), slopes[i] * 1.02, constants[i] * 1.5)})) for i in range(5)]
    models[1] = dataclasses.replace(models[1], background=BackgroundMortality("dead", {
        "female": GompertzMakeham(0.01, 0.0, 0.002), "male": GompertzMakeham(0.015, 0.0, 0.003)}))
    kinds = {(ex.kind, ex.lanes.family) for exits in DrawSet(models, 30, 0).plan("usual") for ex in exits
             if ex.is_background}
    assert kinds == {("lanes", "gompertz_makeham")}
    _check_identical(models, 30, seed=13, first_draw=1)


def test_a_varying_life_table_by_sex_uses_per_lane_band_rates():
    # a life table per sex whose band rates differ per draw (shared ages): one call with each lane's
    # row of band rates, the same bits as each draw's own run
    base = markov_model()
    pop = Population(UniformAge(50.0, 70.0), "healthy", {"female": 0.5, "male": 0.5})
    ages = (0.0, 50.0, 60.0, 70.0, 80.0, 90.0)
    female = (0.001, 0.004, 0.01, 0.03, 0.08, 0.2)
    male = (0.0015, 0.006, 0.015, 0.04, 0.1, 0.25)
    models = [dataclasses.replace(base, population=pop, background=BackgroundMortality("dead", {
        "female": PiecewiseConstant(ages, tuple(r * (1 + 0.1 * i) for r in female)),
        "male": PiecewiseConstant(ages, tuple(r * (1 + 0.07 * i) for r in male))})) for i in range(5)]
    kinds = {(ex.kind, ex.lanes.family) for exits in DrawSet(models, 30, 0).plan("usual") for ex in exits
             if ex.is_background}
    assert kinds == {("lanes", "piecewise")}
    _check_identical(models, 30, seed=12)


@pytest.mark.parametrize("death", [
    # steep at 60-90 (hazards of 3-15 per year): short, left-truncated times
    lambda i: LogNormal(math.log(55.0) + 0.01 * i, 0.02 + 0.002 * i),
    lambda i: Gamma(2.0 + 0.2 * i, 0.1 + 0.002 * i),  # far into its tail at 60-90 (flat hazard ~ 10 per year)
], ids=["lognormal", "gamma"])
def test_newton_polished_lanes_stop_on_their_own(death, monkeypatch):
    # Left-truncated times short next to the clock are polished by Newton iterations, each lane
    # stopping on its own: a draw's lanes get the bits of its own run although they share the
    # iterations with other draws' lanes. The probe checks the polish ran on many lanes.
    from sim.hazards import _lane_kernels

    polished = []
    real = _lane_kernels._polish

    def probe(k, x, e, t0):
        polished.append(x.size)
        return real(k, x, e, t0)

    monkeypatch.setattr(_lane_kernels, "_polish", probe)
    models = [family_model(Exponential(0.3 * (1 + 0.1 * i)), death(i), 0.6) for i in range(6)]
    assert _kinds(models, "death_sick") == {("lanes", death(0).family, False)}
    _check_identical(models, 40, seed=5)
    assert sum(polished) >= 50
