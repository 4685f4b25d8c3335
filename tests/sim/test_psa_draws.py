"""Simulated outcomes per parameter draw: the vectorised path (one engine call per block of draws)
equals the per-draw path (one call per draw) bit for bit; each draw's means and MCSEs equal those of
sim.analysis (the project's one set of outcome definitions) for the draw's own simulation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sim.analysis import OUTCOMES, patient_outcomes, summarise
from sim.engine import SimulationResult, simulate_range
from sim.psa.draws_run import consecutive_runs, models_for_draws, simulated_per_draw, simulated_vectorised
from sim.psa.tables import DRAW_COLUMNS, table_hash

from .test_psa_fixtures import apply_values, draws_table, entry_spread, markov_model


@pytest.mark.parametrize("weibull", [False, True])
def test_vectorised_equals_per_draw(weibull):
    model = markov_model(background=True, weibull=weibull, entry=entry_spread())
    draws = draws_table(12)
    models = models_for_draws(model, draws, apply_values)
    a = simulated_per_draw(models, draws.index, 150, seed=3)
    b = simulated_vectorised(models, draws.index, 150, seed=3)
    assert list(a.columns) == list(DRAW_COLUMNS)
    assert table_hash(a) == table_hash(b)
    pd.testing.assert_frame_equal(a, b, check_exact=True)


def test_blocks_do_not_matter():
    model = markov_model(background=True)
    draws = draws_table(10)
    models = models_for_draws(model, draws, apply_values)
    whole = simulated_vectorised(models, draws.index, 80, seed=9)
    parts = pd.concat([simulated_vectorised(models[a:b], draws.index[a:b], 80, seed=9)
                       for a, b in ((0, 3), (3, 4), (4, 10))], ignore_index=True)
    assert table_hash(whole) == table_hash(parts)


def test_each_draw_agrees_with_the_analysis_outcomes():
    # the same simulation valued by sim.analysis.patient_outcomes/summarise (matmul sums, another
    # order of additions): equal to rounding
    model = markov_model(background=True, entry=entry_spread())
    draws = draws_table(3)
    models = models_for_draws(model, draws, apply_values)
    n = 300
    table = simulated_vectorised(models, draws.index, n, seed=21)
    for d, m in enumerate(models):
        ev, pt = simulate_range(m, 21, d * n, (d + 1) * n)
        res = SimulationResult(m, 21, n, ev, pt, n, 1, {"strategies": m.strategy_names})
        ref = summarise(patient_outcomes(res)).set_index(["strategy", "outcome"])
        for s in m.strategy_names:
            row = table[(table["draw"] == d) & (table["strategy"] == s)].iloc[0]
            assert row["patients"] == n
            for o in OUTCOMES:
                assert row[o] == pytest.approx(ref.loc[(s, o), "mean"], rel=1e-12, abs=1e-9)
                assert row[f"{o}_mcse"] == pytest.approx(ref.loc[(s, o), "mcse"], rel=1e-9, abs=1e-9)


def test_point_values_without_draws():
    model = markov_model()
    models = models_for_draws(model, pd.DataFrame(index=pd.RangeIndex(3, name="draw")), None)
    assert models == [model] * 3


def test_consecutive_runs():
    assert consecutive_runs([4, 5, 6, 9, 10, 12]) == [(0, 3), (3, 5), (5, 6)]
    assert consecutive_runs(np.array([], dtype=int)) == []
