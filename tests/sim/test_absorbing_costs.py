"""Costs in absorbing states (issue 11 item 5): a yearly cost on an absorbing state is refused (the
simulation ends a history on absorption, so the three methods could not agree on it); one-off costs
of the move into death agree between the simulation, the exact solution and cycle-based traces; a z
with no Monte Carlo standard error is NaN, never infinite."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from sim.analysis import patient_outcomes, summarise
from sim.engine import simulate
from sim.io.scenario import ScenarioError, parse_scenario
from sim.reference import cohort_trace, exact_outcomes, trace_outcomes, with_exact

from .conftest import two_state_text

TEXT = """
format_version = 1
name = "constant hazard (invented)"
""" + two_state_text('family = "exponential"\nrate = 0.1') + """[[strategies]]
name = "usual"
{strategy_costs}
[valuation]
discount_costs = 0.035
{valuation_costs}
"""


def _text(strategy_costs: str = "", valuation_costs: str = "") -> str:
    return TEXT.replace("{strategy_costs}", strategy_costs).replace("{valuation_costs}", valuation_costs)


@pytest.mark.parametrize("strategy_costs, valuation_costs, key", [
    ("", "state_costs = { dead = 100 }", "valuation.state_costs.dead"),
    ("state_costs = { alive = 5, dead = 100 }", "", "strategies[0].state_costs.dead"),
])
def test_a_yearly_cost_on_dead_is_an_error_naming_the_key(strategy_costs, valuation_costs, key):
    # the example: constant hazard 0.1, 10 years, 100 a year in "dead" (exact 367.88,
    # cycle-based 367.35, simulated 0 before this rule)
    with pytest.raises(ScenarioError) as info:
        parse_scenario(_text(strategy_costs, valuation_costs), "costs.toml")
    found = {p.key: p for p in info.value.problems}
    assert key in found, str(info.value)
    assert found[key].rule.startswith("must be 0 for an absorbing state") and found[key].value == 100
    assert found[key].line is not None
    # 0 is accepted, as for utilities
    parse_scenario(_text(valuation_costs="state_costs = { dead = 0 }"))


def test_a_one_off_cost_into_death_agrees_between_the_three_methods():
    model = parse_scenario(_text(valuation_costs="transition_costs = { death = 1000 }")).model
    lam, T, delta = 0.1, 10.0, math.log1p(0.035)
    # closed forms (common practice, no source): E[cost] = 1000 P(death by T) = 1000 (1 - e^{-lam T});
    # discounted: 1000 integral_0^T lam e^{-(lam + delta) t} dt
    undiscounted = 1000 * -math.expm1(-lam * T)
    discounted = 1000 * lam / (lam + delta) * -math.expm1(-(lam + delta) * T)
    ex = exact_outcomes(model).set_index("outcome")["value"]
    assert ex["costs"] == pytest.approx(undiscounted, rel=1e-9)
    assert ex["costs_discounted"] == pytest.approx(discounted, rel=1e-9)
    sim = summarise(patient_outcomes(simulate(model, 40_000, seed=3))).set_index("outcome")
    for outcome, value in (("costs", undiscounted), ("costs_discounted", discounted)):
        assert abs(sim.loc[outcome, "mean"] - value) <= 4 * sim.loc[outcome, "mcse"]
    # cycle-based: moves counted per cycle, discounted at the cycle's midpoint or ends; converges in h
    errors = [abs(trace_outcomes(cohort_trace(model, "usual", h), "half-cycle")["costs_discounted"] - discounted)
              for h in (1.0, 0.1)]
    assert errors[1] < errors[0] and errors[1] < 1e-3 * discounted


def test_z_is_nan_where_the_monte_carlo_standard_error_is_zero():
    model = parse_scenario(_text()).model
    summary = pd.DataFrame({"strategy": ["usual", "usual"], "outcome": ["costs", "life_years"],
                            "mean": [0.0, 6.0], "mcse": [0.0, 0.05], "n": [10, 10]})
    exact = pd.DataFrame({"strategy": ["usual", "usual"], "outcome": ["costs", "life_years"],
                          "value": [1.0, 6.1]})
    out, _, _ = with_exact(model, summary, pd.DataFrame(columns=["strategy", "comparator", "quantity"]),
                           "usual", 30_000.0, exact)
    z = out.set_index("outcome")["z"]
    assert math.isnan(z["costs"]) and z["life_years"] == pytest.approx((6.0 - 6.1) / 0.05)
    assert not np.isinf(out["z"]).any()
