"""The run's result tables filled in place by the chunks (sim.engine.tables): rows moved over
themselves, columns that grow past the first chunk's estimate, chunks that wait for their turn while
another fails, and the same tables for any chunking and worker count."""

from __future__ import annotations

import threading

import numpy as np
import pandas as pd
import pytest

import sim.engine.histories as histories
import sim.engine.tables as tables
from sim.engine import simulate, simulate_range
from sim.engine.histories import SimulationError
from sim.model.multistate import Strategy

from .conftest import illness_death


@pytest.mark.parametrize("n, src, dst", [(10, 5, 0), (200_000, 100, 0), (200_000, 70_000, 3), (300_000, 7, 6),
                                         (1000, 1000, 0), (0, 5, 2), (50, 3, 3)])
def test_move_down_is_numpy_slice_assignment(n, src, dst):
    # numpy's own assignment of overlapping slices (it copies the source first) is the reference
    a = np.arange(src + n + 17, dtype=np.int64)
    expected = a.copy()
    expected[dst:dst + n] = expected[src:src + n].copy()
    tables.move_down(a, src, dst, n)
    np.testing.assert_array_equal(a, expected)


@pytest.fixture(scope="module")
def two_strategies():
    return illness_death(strategies=(Strategy("a"), Strategy("b", hazard_ratios={"onset": 0.5})))


@pytest.fixture(scope="module")
def whole_run(two_strategies):
    return simulate(two_strategies, 3000, seed=4, chunk_size=3000)


@pytest.mark.parametrize("chunk_size, workers", [(700, 1), (700, 2), (250, 3)])
def test_columns_that_outgrow_the_first_chunks_estimate(monkeypatch, two_strategies, whole_run, chunk_size,
                                                        workers):
    # An estimate far too small (40% of the first chunk's rate) makes later chunks grow the columns,
    # waiting for the chunks still writing; the tables stay those of one chunk.
    monkeypatch.setattr(tables, "_MARGIN", -0.6)
    monkeypatch.setattr(tables, "_SLACK", 0)
    grown = []
    allocate = tables._EventColumns._allocate

    def counting(self, cap):
        grown.append(sum(cap))
        return allocate(self, cap)

    monkeypatch.setattr(tables._EventColumns, "_allocate", counting)
    run = simulate(two_strategies, 3000, seed=4, chunk_size=chunk_size, workers=workers)
    assert len(grown) >= 2  # the first allocation and at least one growth
    pd.testing.assert_frame_equal(run.events, whole_run.events, check_exact=True)
    pd.testing.assert_frame_equal(run.patients, whole_run.patients, check_exact=True)


def test_tables_are_views_of_one_column_per_field(two_strategies):
    # strategy-major rows of both strategies in one array per column, no gaps between them
    run = simulate(two_strategies, 2500, seed=2, chunk_size=600, workers=2)
    ev = run.events
    n_a = int((ev["strategy"] == "a").sum())
    codes = ev["strategy"].cat.codes.to_numpy()
    assert (codes[:n_a] == 0).all() and (codes[n_a:] == 1).all()
    for k, name in enumerate(("a", "b")):
        part = simulate_range(two_strategies, 2, 0, 2500, strategies=(name,))[0]
        rows = ev.iloc[:n_a] if k == 0 else ev.iloc[n_a:]
        np.testing.assert_array_equal(rows["time"].to_numpy(), part["time"].to_numpy())
        np.testing.assert_array_equal(rows["patient"].to_numpy(), part["patient"].to_numpy())
    exit_age = run.patients["entry_age"].to_numpy() + run.patients["exit_time"].to_numpy()
    np.testing.assert_array_equal(run.patients["exit_age"].to_numpy(), exit_age)


def test_a_failing_chunk_releases_the_chunks_waiting_for_their_turn(monkeypatch, two_strategies):
    # Chunk 0 fails after the others have finished their histories: they wait for its turn to place
    # their events, and must give up when the run stops instead of holding the pool forever.
    real = histories._run_strategy
    later_done = threading.Event()

    def run_strategy(model, resolved, bulk, start, *args, **kw):
        if start == 0:
            later_done.wait(5.0)
            raise SimulationError("chunk 0 fails")
        out = real(model, resolved, bulk, start, *args, **kw)
        if start == 500:
            later_done.set()
        return out

    monkeypatch.setattr(histories, "_run_strategy", run_strategy)
    result: list[BaseException] = []

    def go():
        try:
            simulate(two_strategies, 1000, seed=1, chunk_size=500, workers=2)
        except BaseException as exc:  # noqa: BLE001 - handed to the test thread
            result.append(exc)

    t = threading.Thread(target=go, daemon=True)
    t.start()
    t.join(20.0)
    assert not t.is_alive(), "the run hung: a chunk kept waiting for its turn"
    assert len(result) == 1 and isinstance(result[0], SimulationError)
