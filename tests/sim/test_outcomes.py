"""Outcome definitions: exact closed forms, simulation vs exact within 4 MCSE, paired MCSE."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sim.engine.histories import simulate
from sim.hazards import Exponential
from sim.model.multistate import Clock, Horizon, Model, State, Strategy, Transition
from sim.reference.exact_outcomes import exact_outcomes, exact_outcomes_and_occupancy
from sim.analysis.outcomes import incremental, increments_from_values, patient_outcomes, summarise
from sim.model.population import FixedAge, Population
from sim.model.valuation import Valuation, ValuationError

from .conftest import FULL, illness_death

VAL = Valuation(utilities={"healthy": 0.9, "sick": 0.6}, state_costs={"healthy": 200.0, "sick": 5000.0},
                transition_costs={"onset": 1000.0, "disease death": 4000.0}, discount_costs=0.035,
                discount_effects=0.03, willingness_to_pay=25_000.0)


def test_exact_outcomes_constant_hazard_closed_forms():
    # One exit at rate r, horizon T, utility u, yearly cost c, one-off cost D at death; continuous
    # discounting delta = ln(1 + d) (docs/methods.md, 'Outcomes and increments'). Integrals of e^{-(r + delta) t} and of
    # e^{-delta t} r e^{-r t} over [0, T] (common practice, no source).
    r, T, u, c, D, dc, de = 0.12, 15.0, 0.8, 1000.0, 5000.0, 0.035, 0.03
    model = Model(states=(State("alive"), State("dead", absorbing=True)),
                  transitions=(Transition("death", "alive", "dead", Exponential(r), Clock.AGE),),
                  population=Population(FixedAge(60), "alive"), horizon=Horizon(T),
                  valuation=Valuation(utilities={"alive": u}, state_costs={"alive": c},
                                      transition_costs={"death": D}, discount_costs=dc, discount_effects=de))
    got = exact_outcomes(model).set_index("outcome")["value"]

    def ly(delta):
        return (1 - np.exp(-(r + delta) * T)) / (r + delta)

    def deaths(delta):
        return r / (r + delta) * (1 - np.exp(-(r + delta) * T))

    d_c, d_e = np.log1p(dc), np.log1p(de)
    expected = {"life_years": ly(0), "life_years_discounted": ly(d_e), "qalys": u * ly(0),
                "qalys_discounted": u * ly(d_e), "costs": c * ly(0) + D * deaths(0),
                "costs_discounted": c * ly(d_c) + D * deaths(d_c), "years in alive": ly(0)}
    for k, v in expected.items():
        np.testing.assert_allclose(got[k], v, rtol=1e-9, err_msg=k)


@pytest.fixture(scope="module")
def two_strategies():
    model = illness_death(strategies=(Strategy("standard"),
                                      Strategy("new", hazard_ratios={"onset": 0.6},
                                               state_costs={"healthy": 800.0, "sick": 800.0})))
    return Model(**{**model.__dict__, "valuation": VAL})


@pytest.mark.parametrize("n", [400_000 if FULL else 40_000])
def test_simulated_outcomes_match_exact(two_strategies, n):
    run = simulate(two_strategies, n, seed=4242)
    per = patient_outcomes(run)
    assert len(per) == 2 * n
    sim = summarise(per).set_index(["strategy", "outcome"])
    exact = exact_outcomes(two_strategies).set_index(["strategy", "outcome"])["value"]
    z = (sim["mean"] - exact.loc[sim.index]) / sim["mcse"]
    assert (z.abs() <= 4).all(), z[z.abs() > 4]
    # increments: paired MCSE from common random numbers is smaller than the unpaired one
    inc = incremental(per, "standard", VAL.willingness_to_pay).set_index("quantity")
    for q in ("delta_costs", "delta_effects", "nmb"):
        assert inc.loc[q, "mcse"] < inc.loc[q, "mcse_unpaired"]
    ex_inc = increments_from_values(exact.reset_index(), "standard", VAL.willingness_to_pay).iloc[0]
    for q in ("delta_costs", "delta_effects", "nmb", "icer"):
        assert abs(inc.loc[q, "value"] - ex_inc[q]) <= 4 * inc.loc[q, "mcse"], q
    np.testing.assert_allclose(inc.loc["icer", "value"], inc.loc["delta_costs", "value"] / inc.loc["delta_effects", "value"])


def test_valuation_errors():
    with pytest.raises(ValuationError, match="^valuation.utilities.sick: must be <= 1, got 1.2$"):
        Valuation(utilities={"sick": 1.2})
    with pytest.raises(ValuationError, match="^valuation.discount_costs: must be < 1, got 1.5$"):
        Valuation(discount_costs=1.5)
    with pytest.raises(ValuationError, match="^valuation.state_costs.x: must be finite, got nan$"):
        Valuation(state_costs={"x": float("nan")})


def test_streaming_accumulator_equals_whole_sample(two_strategies):
    # Chunk-by-chunk moments give the same means, MCSEs and paired increments as the whole table.
    from sim.engine.histories import SimulationResult, simulate_chunks
    from sim.analysis.outcomes import OutcomeAccumulator

    acc = OutcomeAccumulator("standard", VAL.willingness_to_pay)
    parts = []
    for ev, pt in simulate_chunks(two_strategies, 3000, seed=8, chunk_size=700):
        res = SimulationResult(two_strategies, 8, pt["patient"].nunique(), ev, pt, 700, 1,
                               {"strategies": two_strategies.strategy_names})
        per = patient_outcomes(res)
        acc.add(per)
        parts.append(per)
    whole = pd.concat(parts, ignore_index=True)
    a, b = acc.summary(), summarise(whole)
    np.testing.assert_allclose(a["mean"], b["mean"], rtol=1e-12)
    np.testing.assert_allclose(a["mcse"], b["mcse"], rtol=1e-9)
    inc_a = acc.increments().set_index("quantity")
    inc_b = incremental(whole, "standard", VAL.willingness_to_pay).set_index("quantity")
    np.testing.assert_allclose(inc_a["value"], inc_b["value"], rtol=1e-12)
    np.testing.assert_allclose(inc_a["mcse"], inc_b["mcse"], rtol=1e-8)
    np.testing.assert_allclose(inc_a["mcse_unpaired"], inc_b["mcse_unpaired"], rtol=1e-8)


def test_exact_outcomes_and_occupancy_match_the_separate_solvers():
    """One combined solve gives the same numbers as sim.reference.exact.solve_exact (itself checked against
    closed forms in test_exact.py) and exact_outcomes, to the ODE solver's tolerance."""
    from sim.io.demo import demo_model
    from sim.reference.exact import solve_exact

    model = demo_model("lanthic")
    times = np.linspace(0.0, 30.0, 7)
    values, occ = exact_outcomes_and_occupancy(model, times)
    ref_occ = solve_exact(model, times).occupancy
    pd.testing.assert_frame_equal(occ[["strategy", "time", "state"]], ref_occ[["strategy", "time", "state"]])
    np.testing.assert_allclose(occ["probability"], ref_occ["probability"], rtol=0, atol=1e-8)
    ref_values = exact_outcomes(model)
    pd.testing.assert_frame_equal(values[["strategy", "outcome"]], ref_values[["strategy", "outcome"]])
    np.testing.assert_allclose(values["value"], ref_values["value"], rtol=1e-7)
