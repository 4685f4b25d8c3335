"""The window's cycle-based curves use the scenario's tunnel-entry rule (run.tunnel_entry), the
same traces as sim.reference.cohort_trace with that rule."""

import numpy as np
import pytest

from gui.results.series import compute_traces
from sim.io import demo_scenario
from sim.reference import cohort_trace


@pytest.mark.parametrize("rule", ["half-cycle", "boundary"])
def test_window_traces_follow_the_tunnel_entry_rule(rule):
    model = demo_scenario("ferrovian").model  # semi-Markov: traces need tunnel states
    strategy, h, t_end = model.strategy_names[0], 0.5, 10.0
    got = compute_traces(model, [(strategy, "matrix-exponential", h)], t_end, rule)[(strategy, "matrix-exponential", h)]
    tunnels = int(np.ceil(t_end / h - 1e-9))
    ref = cohort_trace(model, strategy, h, "matrix-exponential", tunnel_cycles=tunnels, tunnel_entry=rule).table()
    ref = ref[ref["time"] <= t_end * (1 + 1e-9)]
    for state, g in ref.groupby("state", sort=False):
        np.testing.assert_array_equal(got.occupancy[str(state)].y, g["probability"].to_numpy(float))


def test_the_two_rules_give_different_window_traces():
    model = demo_scenario("ferrovian").model
    strategy = model.strategy_names[0]
    key = (strategy, "matrix-exponential", 1.0)
    half = compute_traces(model, [key], 10.0, "half-cycle")[key]
    boundary = compute_traces(model, [key], 10.0, "boundary")[key]
    assert not np.array_equal(half.survival.y, boundary.survival.y)
