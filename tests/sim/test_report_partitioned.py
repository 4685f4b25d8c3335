"""``hazardtrace report`` on a partitioned (Dask) run folder: the survival and occupancy curves come
from counts added across the partitions (sim.analysis.curve_counts), one partition in memory at a
time, and equal the curves of the whole (small) event log computed by sim.analysis, bit for bit; the
occupancy also equals a direct count of each patient's state in the log (tests/sim/conftest)."""

from __future__ import annotations

import dataclasses
import shutil

import numpy as np
import pandas as pd
import pytest

from sim.analysis import curve_counts, occupancy_to_own_horizon, survival_to_own_horizon
from sim.distributed import PARTITIONED_FORMAT, partition_paths, read_partitioned, run_distributed
from sim.io import demo_scenario
from sim.pipeline import RunPlan, time_grid
from sim.report import load_run_folder, report_html
from sim.report.plots import step_times
from sim.report.run_folder import PARTITIONED_FORMAT as REPORT_FORMAT

from .conftest import occupancy_from_log

N, CHUNK, SEED = 3000, 1000, 9


@pytest.fixture(scope="module")
def partitioned(tmp_path_factory):
    """A lanthic run (horizon at attained age 100: own horizons differ) in three partitions, on a
    one-worker cluster of this process."""
    scenario = demo_scenario("lanthic")
    plan = dataclasses.replace(RunPlan.from_scenario(scenario, patients=N, seed=SEED, workers=1), chunk_size=CHUNK)
    folder = tmp_path_factory.mktemp("partitioned") / "run"
    run_distributed(scenario, plan, folder, processes=False, study=False)
    return scenario, folder


def _whole_log_curves(scenario, folder, grid, times):
    """The curves of the concatenated log, per strategy, with sim.analysis' whole-log functions;
    survival read at ``times`` from its step function (last row at or before each time)."""
    events, patients = read_partitioned(folder, "events"), read_partitioned(folder, "patients")
    model = scenario.model
    surv, occ = [], []
    for name in model.strategy_names:
        ev = events[events["strategy"] == name].reset_index(drop=True)
        pt = patients[patients["strategy"] == name].reset_index(drop=True)
        occ.append(occupancy_to_own_horizon(ev, pt, model.state_names, grid).assign(strategy=name))
        km = survival_to_own_horizon(pt)
        idx = np.searchsorted(km["time"].to_numpy(), times, side="right") - 1
        absorbed = np.cumsum(km["events"].to_numpy())[idx]
        surv.append(pd.DataFrame({"time": times, "events": np.diff(absorbed, prepend=0).astype(np.int64),
                                  "survival": km["survival"].to_numpy()[idx],
                                  "std_error": km["std_error"].to_numpy()[idx]}).assign(strategy=name))
    return (pd.concat(surv, ignore_index=True), pd.concat(occ, ignore_index=True), events, patients)


def test_report_curves_of_a_partitioned_run_equal_the_whole_logs(partitioned):
    scenario, folder = partitioned
    assert REPORT_FORMAT == PARTITIONED_FORMAT
    assert len(partition_paths(folder, "events")) == 3
    inputs = load_run_folder(folder)
    grid = time_grid(scenario)
    times = step_times(float(grid[-1]))
    survival, occupancy, events, patients = _whole_log_curves(scenario, folder, grid, times)
    pd.testing.assert_frame_equal(inputs.occupancy, occupancy, check_exact=True)
    pd.testing.assert_frame_equal(inputs.survival, survival, check_exact=True)
    np.testing.assert_array_equal(inputs.grid, grid)
    assert any("3 partitions" in note for note in inputs.notes)
    # the curves are not trivial: patients censored at different own horizons, deaths along the way
    assert (patients["exit_reason"] == "censored").any()
    assert np.unique(patients.loc[patients["exit_reason"] == "censored", "exit_time"]).size > 10
    first = survival[survival["strategy"] == scenario.model.strategy_names[0]]
    assert first["survival"].iloc[0] == 1.0 and first["survival"].iloc[-1] < 0.5
    # occupancy against a direct count of each patient's last state at t (no sim.analysis code)
    states = scenario.model.state_names
    for name in scenario.model.strategy_names:
        ev, pt = events[events["strategy"] == name], patients[patients["strategy"] == name]
        got = inputs.occupancy[inputs.occupancy["strategy"] == name]
        for t in grid[[0, 30, 120, len(grid) - 1]]:
            at = got[got["time"] == t].set_index("state")["probability"].reindex(states).to_numpy()
            np.testing.assert_array_equal(at * len(pt), occupancy_from_log(ev, pt, states, t) * len(pt))


def test_counts_merge_in_any_order_to_the_whole_logs(partitioned):
    scenario, folder = partitioned
    states, grid = scenario.model.state_names, time_grid(scenario)
    times = np.array([0.0, 5.0, 12.5, 40.0])
    parts = [curve_counts(pd.read_parquet(e), pd.read_parquet(p), states, grid, times)
             for e, p in zip(partition_paths(folder, "events"), partition_paths(folder, "patients"))]
    merged = parts[2]
    for part in (parts[0], parts[1]):
        merged.merge(part)
    whole = curve_counts(read_partitioned(folder, "events"), read_partitioned(folder, "patients"), states, grid, times)
    assert merged.n == whole.n and sum(whole.n.values()) == N * len(scenario.model.strategy_names)
    for name in whole.n:
        np.testing.assert_array_equal(merged.occupied[name], whole.occupied[name])
        np.testing.assert_array_equal(merged.absorbed[name], whole.absorbed[name])
        assert (whole.occupied[name].sum(axis=1) == whole.n[name]).all()  # everyone is somewhere
    with pytest.raises(ValueError, match="same states and time grids"):
        merged.merge(curve_counts(read_partitioned(folder, "events"), read_partitioned(folder, "patients"),
                                  states, grid[:-1], times))


def test_report_draws_the_simulated_curves(partitioned):
    _, folder = partitioned
    html = report_html(load_run_folder(folder))
    assert "simulated (solid, 95% band shaded)" in html and "no simulated curve" not in html


def test_a_missing_partition_leaves_the_curves_out_with_a_note(partitioned, tmp_path):
    _, folder = partitioned
    copy = tmp_path / "run"
    shutil.copytree(folder, copy)
    (copy / "patients" / "part-00001.parquet").unlink()
    inputs = load_run_folder(copy)
    assert inputs.survival is None and inputs.occupancy is None
    assert any("partition" in note and "no simulated curves" in note for note in inputs.notes)
    assert inputs.outcomes is not None and len(inputs.outcomes)  # the tables are still shown
