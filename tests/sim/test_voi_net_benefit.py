"""Net benefit, incremental results with dominance, the cost-effectiveness plane and convergence
(sim.uncertainty), against hand-computed values and numpy."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from sim.problems import ValidationError
from sim.uncertainty import (ce_plane, inb_convergence, incremental_analysis, incremental_results, net_benefit,
                             running_mean)


def constant_table(means: dict[str, tuple[float, float]], draws: int = 3) -> pd.DataFrame:
    """Every draw the same (costs, effects) per strategy: the means are the values."""
    rows = [(d, s, c, e) for d in range(draws) for s, (c, e) in means.items()]
    return pd.DataFrame(rows, columns=["draw", "strategy", "costs_discounted", "qalys_discounted"])


def test_incremental_analysis_removes_dominated_and_extendedly_dominated():
    # Hand-computed (common practice, no source). By cost: A (0, 0), B (1000, 1.0), E (1500, 1.1),
    # D (2000, 0.9), C (3000, 2.0). D costs more than B and gains less: dominated. ICER B->E = 5000
    # exceeds E->C = 1500/0.9 = 1667: E is extendedly dominated. Frontier A, B, C with ICERs
    # 1000 (B vs A) and 2000 (C vs B).
    table = constant_table({"A": (0, 0), "C": (3000, 2.0), "B": (1000, 1.0), "E": (1500, 1.1), "D": (2000, 0.9)})
    out = incremental_analysis(table).set_index("strategy")
    assert list(out.index) == ["A", "B", "E", "D", "C"]
    assert out.loc["D", "status"] == "dominated"
    assert out.loc["E", "status"] == "extendedly dominated"
    assert list(out[out.status == "frontier"].index) == ["A", "B", "C"]
    assert out.loc["B", "compared_with"] == "A" and out.loc["C", "compared_with"] == "B"
    assert out.loc["B", "icer"] == pytest.approx(1000.0, rel=1e-12)
    assert out.loc["C", "icer"] == pytest.approx(2000.0, rel=1e-12)
    assert np.isnan(out.loc["A", "icer"]) and np.isnan(out.loc["E", "icer"])


def test_incremental_analysis_ties_and_a_chain_of_extended_dominance():
    # Two strategies of equal cost: the more effective one stays. Then P (100, 0.1), Q (300, 0.2),
    # R (400, 0.5): ICER P->Q 2000 > Q->R 1000, Q out; then O->P 1000, P->R 300/0.4 = 750: P out too.
    table = constant_table({"O": (0, 0), "O2": (0, -0.1), "P": (100, 0.1), "Q": (300, 0.2), "R": (400, 0.5)})
    out = incremental_analysis(table).set_index("strategy")
    assert out.loc["O2", "status"] == "dominated"
    assert out.loc["Q", "status"] == "extendedly dominated"
    assert out.loc["P", "status"] == "extendedly dominated"
    assert out.loc["R", "icer"] == pytest.approx(400 / 0.5, rel=1e-12)


def test_incremental_results_quadrants_and_icer_of_the_means():
    rng = np.random.default_rng(3)
    n = 50
    dc, de = rng.normal(500, 100, n), rng.normal(0.05, 0.01, n)
    draws = np.arange(n)
    table = pd.concat([
        pd.DataFrame({"draw": draws, "strategy": "old", "costs_discounted": 1000.0, "qalys_discounted": 5.0}),
        pd.DataFrame({"draw": draws, "strategy": "new", "costs_discounted": 1000 + dc, "qalys_discounted": 5 + de}),
        pd.DataFrame({"draw": draws, "strategy": "worse", "costs_discounted": 1100.0, "qalys_discounted": 4.9}),
        pd.DataFrame({"draw": draws, "strategy": "better", "costs_discounted": 900.0, "qalys_discounted": 5.1}),
    ])
    out = incremental_results(table, "old").set_index("strategy")
    assert out.loc["new", "quadrant"] == "NE"
    assert out.loc["new", "icer"] == pytest.approx(dc.mean() / de.mean(), rel=1e-9)
    assert out.loc["new", "sd_delta_costs"] == pytest.approx(dc.std(ddof=1), rel=1e-9)
    assert out.loc["worse", "quadrant"] == "dominated" and np.isnan(out.loc["worse", "icer"])
    assert out.loc["better", "quadrant"] == "dominant"
    with pytest.raises(ValidationError) as err:
        incremental_results(table, "nobody")
    assert err.value.problem.path == ("comparator",)


def test_net_benefit_and_plane_values():
    table = constant_table({"a": (100.0, 1.0), "b": (400.0, 1.5)}, draws=2)
    table.loc[table.strategy == "b", "costs_discounted"] = [400.0, 600.0]
    nb = net_benefit(table, [0.0, 1000.0])
    # NB = λ E - C (net monetary benefit; common practice)
    got = nb.set_index(["wtp", "draw", "strategy"])["net_benefit"]
    assert got[(1000.0, 1, "b")] == 1000 * 1.5 - 600
    assert got[(0.0, 0, "a")] == -100
    assert len(nb) == 2 * 2 * 2
    plane = ce_plane(table, "a")
    assert list(plane["point"]) == ["draw", "draw", "mean"]
    assert list(plane["delta_costs"]) == [300.0, 500.0, 400.0]
    assert plane["draw"].isna().tolist() == [False, False, True]


def test_running_mean_matches_numpy_on_every_prefix():
    x = np.random.default_rng(11).normal(3.0, 2.0, 200)
    mean, mcse = running_mean(x)
    for k in (2, 7, 50, 200):
        assert mean[k - 1] == pytest.approx(x[:k].mean(), rel=1e-12)
        assert mcse[k - 1] == pytest.approx(x[:k].std(ddof=1) / np.sqrt(k), rel=1e-10)
    assert np.isnan(mcse[0])


def test_inb_convergence_runs_over_draws_in_draw_order():
    rng = np.random.default_rng(5)
    n = 100
    draws = rng.permutation(n)  # rows not in draw order
    de, dc = rng.normal(0.1, 0.05, n), rng.normal(1000, 300, n)
    table = pd.concat([
        pd.DataFrame({"draw": draws, "strategy": "a", "costs_discounted": 0.0, "qalys_discounted": 0.0}),
        pd.DataFrame({"draw": draws, "strategy": "b", "costs_discounted": dc, "qalys_discounted": de}),
    ])
    out = inb_convergence(table, "a", [20_000.0])
    order = np.argsort(draws)
    inb = 20_000 * de[order] - dc[order]
    assert list(out["draw"]) == list(range(n))
    assert out["mean"].iloc[-1] == pytest.approx(inb.mean(), rel=1e-12)
    assert out["mean"].iloc[9] == pytest.approx(inb[:10].mean(), rel=1e-12)
    assert out["mcse"].iloc[-1] == pytest.approx(inb.std(ddof=1) / np.sqrt(n), rel=1e-10)


def test_strategy_labels_need_not_be_text_and_grids_must_be_numbers():
    table = pd.DataFrame({"draw": [0, 0, 1, 1], "strategy": [1, 2, 1, 2],
                          "costs_discounted": [0.0, 100.0, 0.0, 300.0], "qalys_discounted": [0.0, 0.1, 0.0, 0.1]})
    nb = net_benefit(table, [5000.0])
    assert list(nb["strategy"]) == ["1", "2", "1", "2"]
    assert list(nb["net_benefit"]) == [0.0, 400.0, 0.0, 200.0]  # λ E - C by hand
    with pytest.raises(ValidationError) as err:
        net_benefit(table, "a lot")
    assert err.value.problem.path == ("wtp",)


@pytest.mark.parametrize("statistic", [incremental_results, ce_plane, inb_convergence])
def test_one_strategy_has_no_increments(statistic):
    # A table with only the comparator: a clear error naming the strategies, not a pandas failure.
    table = pd.DataFrame({"draw": [0, 1], "strategy": ["usual care"] * 2,
                          "costs_discounted": [1.0, 2.0], "qalys_discounted": [0.5, 0.6]})
    args = ("usual care", 20_000.0) if statistic is inb_convergence else ("usual care",)
    with pytest.raises(ValidationError, match="at least two strategies"):
        statistic(table, *args)
