"""The staged run pipeline (sim.pipeline): chunks through executors into sinks, stage by stage.

Checks against things outside the pipeline: the engine's own ``simulate`` (bit-identical event log
and patient table whatever the executor, number of workers or chunking), numpy's mean and standard
deviation of the per-patient outcomes (the streamed run's accumulated summary), the study run on its
own simulation (the run's study reference), and the files a streamed run leaves (or, cancelled, does
not leave) on disk.
"""

from __future__ import annotations

import dataclasses
import threading
import time

import numpy as np
import pandas as pd
import pytest

import sim.pipeline.chunks as chunks_module
import sim.reference.study as study_module
from sim.engine import SimulationCancelled, simulate
from sim.io import load_scenario
from sim.io.demo import SCENARIO_DIR
from sim.io.export import RunWriter, metadata_for
from sim.pipeline import (MemorySink, RunPlan, SerialExecutor, StrategyMajorJoin, StreamSink, ThreadExecutor,
                          chunk_jobs, executor_for, run_plan, run_scenario, simulate_chunk)
from sim.problems import ValidationError
from sim.reference import discretization_study

N = 3000


@pytest.fixture(scope="module")
def ferrovian():
    return load_scenario(SCENARIO_DIR / "ferrovian_progression.toml")


def _plan(scenario, patients=N, seed=5, workers=1, chunk_size=None) -> RunPlan:
    plan = RunPlan.from_scenario(scenario, patients=patients, seed=seed, workers=workers)
    return plan if chunk_size is None else dataclasses.replace(plan, chunk_size=chunk_size)


def _writer(folder, scenario, plan, fmt="csv") -> RunWriter:
    return RunWriter(folder, fmt=fmt, metadata=metadata_for(scenario.text, plan.seed, plan.patients))


# ----------------------------------------------------------------------------- executors and chunks
def test_thread_executor_yields_in_item_order_whatever_order_they_finish():
    def slow_first(i: int) -> int:
        time.sleep(0.02 * (5 - i))  # item 0 finishes last
        return i * i

    assert list(ThreadExecutor(3).map(slow_first, range(6))) == [i * i for i in range(6)]
    assert list(SerialExecutor().map(slow_first, range(3))) == [0, 1, 4]


def test_closing_a_thread_map_early_drops_the_items_not_started():
    started = []
    lock = threading.Lock()

    def work(i: int) -> int:
        with lock:
            started.append(i)
        time.sleep(0.01)
        return i

    results = ThreadExecutor(2, in_flight=2).map(work, range(100))
    assert next(results) == 0
    results.close()
    assert len(started) <= 4  # the two in flight plus at most the one submitted after the first result


def test_executor_for_checks_workers():
    assert isinstance(executor_for(1), SerialExecutor) and isinstance(executor_for(3), ThreadExecutor)
    with pytest.raises(ValidationError) as err:
        executor_for(0)
    assert err.value.problem.path == ("workers",) and err.value.problem.value == 0


def test_chunks_joined_strategy_major_equal_the_engine(lanthic):
    model = lanthic.model
    ref = simulate(model, N, 9, chunk_size=100_000)
    for size in (700, 1000, N):
        events, patients = StrategyMajorJoin(), StrategyMajorJoin()
        for chunk in ThreadExecutor(2).map(simulate_chunk, chunk_jobs(model, N, 9, size)):
            events.add(chunk.events)
            patients.add(chunk.patients)
        pd.testing.assert_frame_equal(events.join(), ref.events, check_exact=True)
        pd.testing.assert_frame_equal(patients.join(), ref.patients, check_exact=True)


def test_join_refuses_a_chunk_not_ordered_by_strategy(lanthic):
    chunk = simulate_chunk(chunk_jobs(lanthic.model, 50, 1, 50)[0])
    with pytest.raises(ValueError, match="ordered by strategy"):
        StrategyMajorJoin().add(chunk.events.iloc[::-1])


# ----------------------------------------------------------------------------- bit-identical runs
@pytest.mark.parametrize("workers,chunk_size", [(1, 1000), (2, 1000), (2, 450), (1, N)])
def test_event_log_is_bit_identical_for_any_workers_and_chunking(lanthic, workers, chunk_size):
    plan = _plan(lanthic, workers=workers, chunk_size=chunk_size)
    res = run_plan(lanthic, plan, study=False)
    ref = simulate(lanthic.model, N, plan.seed, chunk_size=100_000)  # one chunk, one thread
    pd.testing.assert_frame_equal(res.simulation.events, ref.events, check_exact=True)
    pd.testing.assert_frame_equal(res.simulation.patients, ref.patients, check_exact=True)
    assert res.n_events == len(ref.events)


def test_stages_are_timed_and_reported_in_order(lanthic):
    seen: list[str] = []
    res = run_scenario(lanthic, patients=N, seed=2, workers=2, progress=lambda s, d, n: seen.append(s))
    assert set(res.seconds) == {"simulation", "outcomes", "exact", "estimates", "study"}
    assert all(v >= 0 for v in res.seconds.values()) and res.skipped == {}
    order = list(dict.fromkeys(seen))
    assert order == ["simulating", "outcomes", "exact solution", "estimates", "error study", "done"]
    assert res.settings["patients"] == N and res.settings["seed"] == 2 and res.settings["workers"] == 2


# ----------------------------------------------------------------------------- sinks
def test_streamed_run_writes_the_summary_of_an_in_memory_run(lanthic, tmp_path):
    plan = _plan(lanthic, workers=2, chunk_size=1000)
    memory = run_plan(lanthic, plan, study=False)
    streamed = run_plan(lanthic, plan, sinks=(StreamSink(_writer(tmp_path / "run", lanthic, plan)),), study=False)
    # streaming keeps no log: no estimates, and says why
    assert streamed.simulation is None and streamed.per_patient is None
    assert streamed.survival is None and streamed.occupancy is None and "estimates" in streamed.skipped
    on_disk = pd.read_csv(tmp_path / "run" / "summary.csv", float_precision="round_trip")
    for got in (streamed.outcomes, on_disk):
        assert list(got["strategy"]) == list(memory.outcomes["strategy"])
        assert list(got["outcome"]) == list(memory.outcomes["outcome"])
        assert (got["n"] == memory.outcomes["n"]).all()
        np.testing.assert_array_equal(got["exact"], memory.outcomes["exact"])
        # accumulated moments (shifted sums over chunks) agree with the whole sample up to rounding
        np.testing.assert_allclose(got["mean"], memory.outcomes["mean"], rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(got["mcse"], memory.outcomes["mcse"], rtol=1e-9)
    # ... and with numpy on the per-patient outcomes of the kept log
    per = memory.per_patient
    for (strategy, outcome), row in streamed.outcomes.set_index(["strategy", "outcome"]).iterrows():
        x = per.loc[per["strategy"] == strategy, outcome].to_numpy()
        assert row["mean"] == pytest.approx(np.mean(x), rel=1e-12, abs=1e-12)
        assert row["mcse"] == pytest.approx(np.std(x, ddof=1) / np.sqrt(x.size), rel=1e-9, abs=1e-15)
    inc = pd.read_csv(tmp_path / "run" / "increments.csv", float_precision="round_trip")
    np.testing.assert_allclose(inc["value"], memory.increments["value"], rtol=1e-10)
    # the streamed event log holds the same rows, chunk by chunk
    events = pd.read_csv(tmp_path / "run" / "events.csv", float_precision="round_trip")
    assert len(events) == len(memory.simulation.events) == streamed.n_events
    order = events["strategy"].map({s: i for i, s in enumerate(lanthic.model.strategy_names)})
    events = events.iloc[np.argsort(order.to_numpy(), kind="stable")].reset_index(drop=True)
    np.testing.assert_array_equal(events["time"], memory.simulation.events["time"])
    np.testing.assert_array_equal(events["patient"], memory.simulation.events["patient"])


def test_memory_and_stream_sinks_together_give_the_memory_results_on_disk(lanthic, tmp_path):
    plan = _plan(lanthic, workers=2, chunk_size=1000)
    memory = run_plan(lanthic, plan, study=False)
    both = run_plan(lanthic, plan, study=False, sinks=(
        MemorySink(), StreamSink(_writer(tmp_path / "run", lanthic, plan, fmt="parquet"), accumulate=False)))
    pd.testing.assert_frame_equal(both.outcomes, memory.outcomes, check_exact=True)
    pd.testing.assert_frame_equal(both.survival, memory.survival, check_exact=True)
    on_disk = pd.read_csv(tmp_path / "run" / "summary.csv", float_precision="round_trip")
    np.testing.assert_array_equal(on_disk["mean"], memory.outcomes["mean"])
    assert {"survival.csv", "occupancy.csv", "events.parquet"} <= {p.name for p in (tmp_path / "run").iterdir()}


def test_a_run_needs_a_sink_that_keeps_the_log_or_the_outcomes(lanthic, tmp_path):
    with pytest.raises(ValueError, match="no sink"):
        run_plan(lanthic, _plan(lanthic, patients=100), study=False,
                 sinks=(StreamSink(_writer(tmp_path / "run", lanthic, _plan(lanthic, patients=100)),
                                   accumulate=False),))
    assert not (tmp_path / "run").exists()  # aborted: nothing left behind


# ----------------------------------------------------------------------------- cancel
def test_cancel_between_stages_stops_the_run_and_leaves_no_output(lanthic, tmp_path):
    plan = _plan(lanthic)
    cancel = threading.Event()
    seen: list[str] = []

    def progress(stage: str, done: int, total: int) -> None:
        seen.append(stage)
        if stage == "outcomes":
            cancel.set()  # honoured before the next stage

    with pytest.raises(SimulationCancelled):
        run_plan(lanthic, plan, sinks=(StreamSink(_writer(tmp_path / "run", lanthic, plan)),), progress=progress,
                 cancel=cancel)
    assert "outcomes" in seen and "exact solution" not in seen
    assert not (tmp_path / "run").exists() and list(tmp_path.iterdir()) == []


def test_cancel_between_chunks_stops_the_simulation(lanthic, monkeypatch):
    calls = []
    original = chunks_module.simulate_range

    def counting(*args, **kwargs):
        calls.append(args[2])
        return original(*args, **kwargs)

    monkeypatch.setattr(chunks_module, "simulate_range", counting)
    cancel = threading.Event()

    def progress(stage: str, done: int, total: int) -> None:
        if stage == "simulating" and done > 0:
            cancel.set()

    with pytest.raises(SimulationCancelled):
        run_plan(lanthic, _plan(lanthic, chunk_size=100), progress=progress, cancel=cancel)
    assert len(calls) == 1  # 30 chunks; the serial executor stopped after the first


# ----------------------------------------------------------------------------- the study's reference
def test_semi_markov_study_uses_the_runs_simulation(ferrovian, monkeypatch):
    """The error study of a semi-Markov model takes the run's own simulation as its reference: no
    second simulation (the study's simulate is never called; the chunks are simulated once), and the
    same table as the study simulating the same patients with the same seed itself."""
    n, seed, cycles = 2000, 11, (0.5, 1.0)  # short of the scenario's grid, to keep the test quick
    before = discretization_study(ferrovian.model, cycle_lengths=cycles,
                                  tolerance=ferrovian.run.tolerance, n_patients=n, seed=seed)
    assert before.reference_kind == f"simulation ({n:,} patients, seed {seed})"

    def no_second_simulation(*args, **kwargs):
        raise AssertionError("the study simulated the histories again")

    monkeypatch.setattr(study_module, "simulate", no_second_simulation)
    chunk_calls = []
    original = chunks_module.simulate_range
    monkeypatch.setattr(chunks_module, "simulate_range",
                        lambda *a, **k: chunk_calls.append(a[2:4]) or original(*a, **k))
    plan = dataclasses.replace(_plan(ferrovian, patients=n, seed=seed, workers=2, chunk_size=500), cycle_lengths=cycles)
    res = run_plan(ferrovian, plan)
    assert chunk_calls == [(0, 500), (500, 1000), (1000, 1500), (1500, 2000)]
    assert res.study.reference_kind == before.reference_kind
    for name in ("table", "reference", "orders", "largest_cycle", "decisions", "jump_over"):
        pd.testing.assert_frame_equal(getattr(res.study, name), getattr(before, name), check_exact=True)
    # the reference is the run's own summary
    ref = res.study.reference.set_index(["strategy", "outcome"])["value"]
    mean = res.outcomes.set_index(["strategy", "outcome"])["mean"]
    np.testing.assert_array_equal(ref.loc[mean.index].to_numpy(), mean.to_numpy())


class _ProcessExecutor:
    """The Executor protocol on a process pool (what a process or cluster executor does next): the
    chunk function and its jobs cross process boundaries, and the log stays bit-identical."""

    workers = 2

    def map(self, fn, items):
        from concurrent.futures import ProcessPoolExecutor
        import multiprocessing

        with ProcessPoolExecutor(max_workers=self.workers, mp_context=multiprocessing.get_context("spawn")) as pool:
            yield from pool.map(fn, items)


def test_a_process_pool_executor_gives_the_same_log(lanthic):
    plan = _plan(lanthic, patients=1200, workers=2, chunk_size=400)
    res = run_plan(lanthic, plan, executor=_ProcessExecutor(), study=False)
    ref = simulate(lanthic.model, 1200, plan.seed)
    pd.testing.assert_frame_equal(res.simulation.events, ref.events, check_exact=True)
    pd.testing.assert_frame_equal(res.simulation.patients, ref.patients, check_exact=True)


def test_run_plan_checks_its_settings(lanthic):
    plan = _plan(lanthic)
    for key, bad in (("patients", 0), ("workers", -1), ("chunk_size", 2.5), ("seed", -3)):
        with pytest.raises(ValidationError) as err:
            dataclasses.replace(plan, **{key: bad})
        assert err.value.problem.path == (key,) and err.value.problem.value == bad
    assert type(dataclasses.replace(plan, patients=np.int64(7)).patients) is int
