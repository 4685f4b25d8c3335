"""The probabilistic analysis runner: the per-draw table is bit-identical (hash of the table) inline,
on a 2-worker Dask LocalCluster started here on loopback, with any block size and with the per-draw
engine path; progress comes with an estimated time left; cancel and an unreachable scheduler stop
the run with a clear error."""

from __future__ import annotations

import threading

import numpy as np
import pytest
from dask.distributed import LocalCluster

from sim.engine import SimulationCancelled
from sim.io import Scenario
from sim.model import RunSettings
from sim.distributed import cluster as dask_runner  # CONNECT_TIMEOUT
from sim.psa.cohort_draws import cycle_methods
from sim.distributed import SchedulerError, run_psa
from sim.psa.tables import DRAW_COLUMNS, table_hash

from .test_psa_fixtures import apply_values, draws_table, markov_model

DRAWS = 24


@pytest.fixture(scope="module")
def scenario():
    return Scenario(model=markov_model(background=True), run=RunSettings(seed=8, workers=1))


@pytest.fixture(scope="module")
def inline(scenario):
    return run_psa(scenario, DRAWS, 120, workers=1, values=draws_table(DRAWS), apply=apply_values,
                   cycle_methods=cycle_methods(["competing-exit"], [1.0]))


def test_inline_table(inline):
    t = inline.table
    assert list(t.columns) == list(DRAW_COLUMNS)
    assert np.array_equal(t["draw"].unique(), np.arange(DRAWS))
    assert set(t["method"]) == {"simulated", "exact", "competing-exit|1.0|half-cycle"}
    assert len(t) == DRAWS * 2 * 3
    assert inline.settings["parameters"] == list(draws_table(1).columns)


def test_same_bits_on_a_loopback_cluster_blocks_and_paths(scenario, inline):
    expected = table_hash(inline.table)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, protocol="tcp", host="127.0.0.1",
                      dashboard_address=None, worker_dashboard_address=None) as cluster:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        seen = []
        on_cluster = run_psa(scenario, DRAWS, 120, scheduler=cluster.scheduler_address, values=draws_table(DRAWS),
                             apply=apply_values, cycle_methods=cycle_methods(["competing-exit"], [1.0]),
                             block_draws=5, progress=lambda done, total, left: seen.append((done, total, left)))
    assert table_hash(on_cluster.table) == expected
    assert seen[0] == (0, DRAWS, None) and seen[-1][:2] == (DRAWS, DRAWS)
    assert all(left is not None and left >= 0 for _, _, left in seen[1:])
    other = [run_psa(scenario, DRAWS, 120, workers=1, values=draws_table(DRAWS), apply=apply_values,
                     cycle_methods=cycle_methods(["competing-exit"], [1.0]), block_draws=b, vectorised=v)
             for b, v in ((1, False), (7, True), (DRAWS, True))]
    assert {table_hash(r.table) for r in other} == {expected}


def test_same_bits_on_a_local_cluster_of_two_workers(scenario, inline):
    result = run_psa(scenario, DRAWS, 120, workers=2, processes=False, values=draws_table(DRAWS),
                     apply=apply_values, cycle_methods=cycle_methods(["competing-exit"], [1.0]))
    assert table_hash(result.table) == table_hash(inline.table)
    assert result.settings["workers"] == 2


@pytest.mark.parametrize("workers", [1, 2])
def test_cancel_stops_the_run(scenario, workers):
    stop = threading.Event()

    def progress(done, total, left):
        if done > 0:
            stop.set()

    with pytest.raises(SimulationCancelled):
        run_psa(scenario, DRAWS, 120, workers=workers, processes=False, values=draws_table(DRAWS),
                apply=apply_values, block_draws=2, progress=progress, cancel=stop)


def test_unreachable_scheduler_is_a_clear_error(scenario, monkeypatch):
    monkeypatch.setattr(dask_runner, "CONNECT_TIMEOUT", "1s")
    with pytest.raises(SchedulerError, match="scheduler") as err:
        run_psa(scenario, 4, 10, scheduler="tcp://127.0.0.1:9")
    assert err.value.problem.path == ("scheduler",)
    with pytest.raises(SchedulerError, match="tcp://host"):
        run_psa(scenario, 4, 10, scheduler="localhost")


def test_scenario_without_uncertainty_runs_point_values(scenario):
    result = run_psa(scenario, 3, 50, workers=1, exact=False)
    assert result.values.shape == (3, 0)
    sim = result.table
    # every draw has the point-value model; different draws still have different patients
    assert sim[sim["strategy"] == "usual"]["qalys"].nunique() == 3


def test_only_the_runner_module_imports_dask():
    import ast
    from pathlib import Path

    root = Path(__file__).resolve().parents[2] / "sim"
    found = set()
    for path in root.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import)
                     else [node.module or ""] if isinstance(node, ast.ImportFrom) and not node.level else [])
            if any(n.split(".")[0] in ("dask", "distributed") for n in names):
                found.add(path.relative_to(root.parent).as_posix())
    assert found and all(p.startswith("sim/distributed/") for p in found), found


def test_draw_i_does_not_depend_on_the_number_of_draws():
    # the scenario's own [[uncertainty]] inputs (sim.uncertainty.draw_table keyed by seed and names)
    # and patients d*n.. for draw d: the first draws of a longer analysis are the same rows
    from sim.io import parse_scenario

    from .test_psa_cli import SCENARIO

    scenario = parse_scenario(SCENARIO)
    short = run_psa(scenario, 4, 50, workers=1, cycle_methods=cycle_methods(["competing-exit"], [1.0]))
    long = run_psa(scenario, 9, 50, workers=1, cycle_methods=cycle_methods(["competing-exit"], [1.0]), block_draws=2)
    assert short.values.shape == (4, 2)
    head = long.table[long.table["draw"] < 4].reset_index(drop=True)
    assert table_hash(head) == table_hash(short.table)
    assert long.values.iloc[:4].equals(short.values)
