"""A plain run on Dask (sim.distributed.run): the partitioned event log is the local run's bit for
bit, the summary and increments equal the local run's bit for bit (exact sums, sim.analysis.exact_sums), a cancel or an unreachable scheduler leaves
nothing behind. Cluster: two worker processes on the loopback interface, started here and closed."""

from __future__ import annotations

import dataclasses
import json
import threading

import numpy as np
import pandas as pd
import pyarrow.dataset as ds
import pytest

from sim.cli.commands import main
from sim.distributed import cluster as cluster_module
from sim.distributed import PARTITIONED_FORMAT, read_partitioned, run_distributed
from sim.engine import SimulationCancelled
from sim.io.demo import SCENARIO_DIR
from sim.pipeline import RunPlan, chunk_jobs, run_plan, simulate_chunk

N, CHUNK, SEED = 3000, 1000, 5



def _plan(scenario, patients=N) -> RunPlan:
    plan = RunPlan.from_scenario(scenario, patients=patients, seed=SEED, workers=2)
    return dataclasses.replace(plan, chunk_size=CHUNK)


@pytest.fixture(scope="module")
def runs(lanthic, loopback_scheduler, tmp_path_factory):
    plan = _plan(lanthic)
    folder = tmp_path_factory.mktemp("dask") / "run"
    local = run_plan(lanthic, plan, study=False)  # the in-memory run: the whole log and per-patient outcomes
    seen = []
    on_dask = run_distributed(lanthic, plan, folder, scheduler=loopback_scheduler, study=False,
                              progress=lambda stage, done, total: seen.append((stage, done, total)))
    return local, on_dask, folder, seen


def test_partitioned_log_is_the_local_log_bit_for_bit(lanthic, runs):
    local, _, folder, _ = runs
    for table, whole in (("events", local.simulation.events), ("patients", local.simulation.patients)):
        parts = sorted((folder / table).glob("*.parquet"))
        assert [p.name for p in parts] == ["part-00000.parquet", "part-00001.parquet", "part-00002.parquet"]
        pd.testing.assert_frame_equal(read_partitioned(folder, table), whole, check_exact=True)
    # partition k is chunk k of the local run (same chunking), readable as one pyarrow dataset
    jobs = chunk_jobs(lanthic.model, N, SEED, CHUNK)
    pd.testing.assert_frame_equal(pd.read_parquet(folder / "events" / "part-00001.parquet"),
                                  simulate_chunk(jobs[1]).events, check_exact=True)
    assert ds.dataset(folder / "events", format="parquet").count_rows() == len(local.simulation.events)


def test_summary_and_increments_equal_the_local_run(runs):
    local, on_dask, folder, seen = runs
    for got in (on_dask.outcomes, pd.read_csv(folder / "summary.csv", float_precision="round_trip")):
        assert list(got["strategy"]) == list(local.outcomes["strategy"])
        assert list(got["outcome"]) == list(local.outcomes["outcome"])
        assert (got["n"] == local.outcomes["n"]).all()
        # exact sums merged in partition order vs the whole sample: the same bits
        np.testing.assert_array_equal(got["mean"], local.outcomes["mean"])
        np.testing.assert_array_equal(got["mcse"], local.outcomes["mcse"])
    # numpy on the per-patient outcomes of the kept log, outside the project's formulas
    per = local.per_patient
    for (strategy, outcome), row in on_dask.outcomes.set_index(["strategy", "outcome"]).iterrows():
        x = per.loc[per["strategy"] == strategy, outcome].to_numpy()
        assert row["mean"] == pytest.approx(np.mean(x), rel=1e-12, abs=1e-12)
        assert row["mcse"] == pytest.approx(np.std(x, ddof=1) / np.sqrt(x.size), rel=1e-9, abs=1e-15)
    np.testing.assert_array_equal(on_dask.increments["value"], local.increments["value"])
    np.testing.assert_array_equal(on_dask.increments["mcse"], local.increments["mcse"])
    assert on_dask.n_events == len(local.simulation.events)
    meta = json.loads((folder / "metadata.json").read_text())
    assert meta["format"] == PARTITIONED_FORMAT and meta["chunk_size"] == CHUNK and meta["chunks"] == 3
    assert sum(p["events_rows"] for p in meta["partitions"]) == len(local.simulation.events)
    assert [s for s in seen if s[0] == "simulating"][-1] == ("simulating", N, N)
    assert not [p for p in folder.parent.iterdir() if p.name != "run"]  # no temporary folder left


def test_cancel_leaves_nothing(lanthic, loopback_scheduler, tmp_path):
    stop = threading.Event()

    def progress(stage, done, total):
        if stage == "simulating" and done > 0:
            stop.set()  # after the first chunk

    with pytest.raises(SimulationCancelled):
        run_distributed(lanthic, _plan(lanthic, patients=30_000), tmp_path / "run", scheduler=loopback_scheduler,
                        study=False, progress=progress, cancel=stop)
    assert list(tmp_path.iterdir()) == []


def test_cli_unreachable_scheduler_exits_2_and_leaves_nothing(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr(cluster_module, "CONNECT_TIMEOUT", "1s")
    code = main(["run", str(SCENARIO_DIR / "lanthic_syndrome.toml"), "--patients", "2000", "--no-study",
                 "--scheduler", "tcp://127.0.0.1:9", "--output", str(tmp_path / "out" / "run")])
    assert code == 2
    err = capsys.readouterr().err
    assert "scheduler" in err and "tcp://127.0.0.1:9" in err and len(err.strip().splitlines()) == 1
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("extra, named", [(["--workers", "0"], "--workers"),
                                           (["--workers", "2", "--format", "csv"], "--format"),
                                           (["--workers", "2", "--long-format"], "--long-format")])
def test_cli_options_the_partitioned_run_cannot_take_exit_2(tmp_path, capsys, extra, named):
    code = main(["run", str(SCENARIO_DIR / "lanthic_syndrome.toml"), "--patients", "2000", "--no-study",
                 "--output", str(tmp_path / "out" / "run"), *extra])
    assert code == 2
    assert named in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_cli_run_on_a_scheduler_writes_partitioned_parquet(loopback_scheduler, tmp_path, capsys):
    code = main(["run", str(SCENARIO_DIR / "lanthic_syndrome.toml"), "--patients", "2000", "--seed", "3",
                 "--no-study", "--scheduler", loopback_scheduler, "--output", str(tmp_path / "run")])
    assert code == 0, capsys.readouterr().err
    assert "partitioned parquet" in capsys.readouterr().out
    meta = json.loads((tmp_path / "run" / "metadata.json").read_text())
    assert meta["command"] == "run" and meta["format"] == PARTITIONED_FORMAT and meta["seed"] == 3
    events = ds.dataset(tmp_path / "run" / "events", format="parquet").to_table().to_pandas()
    assert len(events) == sum(p["events_rows"] for p in meta["partitions"]) > 0
