"""The engine's many-parameter-sets entry (sim.engine.simulate_draws): each draw's rows are those of
simulate_range of its own model over its own patients, bit for bit, for every way lanes are
evaluated (one hazard, per-lane rates, per-lane hazard ratios, grouped by hazard) and for draws
whose populations differ."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from sim.engine import DrawSet, simulate_draws, simulate_range
from sim.model import FixedAge, Population, UniformAge

from .test_psa_fixtures import apply_values, draws_table, markov_model


def _draw_rows(table: pd.DataFrame, first: int, stop: int) -> pd.DataFrame:
    rows = table[(table["patient"] >= first) & (table["patient"] < stop)]
    return rows.reset_index(drop=True)


def _check_identical(models, n, seed, first_draw=0):
    events, patients = simulate_draws(models, seed, n, first_draw=first_draw)
    for i, model in enumerate(models):
        a = (first_draw + i) * n
        ev, pt = simulate_range(model, seed, a, a + n)
        pd.testing.assert_frame_equal(_draw_rows(events, a, a + n), ev, check_exact=True)
        pd.testing.assert_frame_equal(_draw_rows(patients, a, a + n), pt, check_exact=True)


@pytest.mark.parametrize("names,kinds", [
    (("progression_rate",), {"rate", "ratio"}),  # a varying rate, and the hazard ratio on it
    (("hr_new",), {"one", "ratio"}),  # the hazard ratio alone varies on a shared base rate
    (("utility_sick",), {"one"}),  # no hazard varies
])
def test_draws_equal_their_own_runs(names, kinds):
    base = markov_model(background=True)
    models = [apply_values(base, row) for row in draws_table(6, names=names).to_dict("records")]
    found = {ex.kind for plan in (DrawSet(models, 40, 3).plan(s) for s in base.strategy_names)
             for exits in plan for ex in exits if ex.name == "progression"}
    assert found == kinds
    _check_identical(models, 40, seed=11, first_draw=3)


def test_varying_weibull_is_grouped_and_identical():
    base = markov_model(weibull=True)
    models = [apply_values(base, row) for row in draws_table(5).to_dict("records")]
    kinds = {ex.kind for exits in DrawSet(models, 30, 0).plan("usual") for ex in exits if ex.name == "progression"}
    assert kinds == {"group"}
    _check_identical(models, 30, seed=2)


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
    from sim.hazards import Gompertz
    from sim.model import BackgroundMortality

    base = markov_model()
    pop = Population(UniformAge(50.0, 70.0), "healthy", {"female": 0.5, "male": 0.5})
    models = [dataclasses.replace(base, population=pop, background=BackgroundMortality(
        "dead", {"female": Gompertz(2e-5 * (1 + 0.1 * i), 0.09), "male": Gompertz(3e-5 * (1 + 0.05 * i), 0.09)}))
        for i in range(5)]
    kinds = {ex.kind for exits in DrawSet(models, 30, 0).plan("usual") for ex in exits if ex.is_background}
    assert kinds == {"gompertz"}
    _check_identical(models, 30, seed=6, first_draw=2)
