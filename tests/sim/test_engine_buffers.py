"""Kept buffers for large result columns (sim.engine.buffers): a buffer is handed out again only when
no array uses it, results never share memory with a later run, and runs are bit-identical with and
without kept buffers."""

import numpy as np
import pytest

from sim.engine import buffers, simulate

from .conftest import illness_death

BIG = buffers.MIN_BYTES // 8 * 2  # float64 items: two MiB


@pytest.fixture(autouse=True)
def fresh_buffers():
    old = buffers.limit()
    buffers.release()
    yield
    buffers.set_limit(old)
    buffers.release()


def _address(a: np.ndarray) -> int:
    return a.__array_interface__["data"][0]


def test_a_buffer_is_reused_only_after_every_view_of_it_is_gone():
    a = buffers.empty(BIG)
    view = a[10:20]
    del a
    b = buffers.empty(BIG)
    assert not np.shares_memory(b, view)  # the view still holds the first buffer
    addr = _address(view) - 10 * 8
    del view
    c = buffers.empty(BIG)
    assert _address(c) == addr  # now free: the same memory again
    assert c.shape == (BIG,) and c.dtype == np.float64
    del b, c
    assert buffers.kept_bytes() == (0, 2 * BIG * 8)
    assert buffers.release() == 2 * BIG * 8
    assert buffers.kept_bytes() == (0, 0)


def test_small_columns_and_a_zero_limit_bypass_the_kept_buffers():
    small = buffers.empty(16, np.int8)
    assert small.shape == (16,) and small.dtype == np.int8
    buffers.set_limit(0)
    big = buffers.empty(BIG, np.int64)
    assert big.shape == (BIG,) and big.dtype == np.int64
    assert buffers.kept_bytes() == (0, 0)


def test_kept_buffers_stay_within_the_limit_and_reuse_needs_a_close_size():
    buffers.set_limit(3 * BIG * 8)
    held = [buffers.empty(BIG) for _ in range(4)]  # the fourth does not fit: a plain array
    assert buffers.kept_bytes() == (3 * BIG * 8, 0)
    del held
    quarter = buffers.empty(BIG // 4)  # a kept buffer more than twice its size is not used
    assert sum(buffers.kept_bytes()) == 3 * BIG * 8 and buffers.kept_bytes()[0] == 0
    assert buffers.kept_bytes() == (0, 3 * BIG * 8)  # the quarter was not kept: no room left
    del quarter
    with pytest.raises(ValueError, match=r"buffer limit: -1 bytes; must be >= 0"):
        buffers.set_limit(-1)


def test_a_later_run_never_writes_into_the_tables_of_an_earlier_one_still_held():
    model = illness_death()
    first = simulate(model, 150_000, seed=1)
    assert buffers.kept_bytes()[0] > 0  # its large columns are in kept buffers
    events, patients = first.events.copy(deep=True), first.patients.copy(deep=True)
    for seed in (2, 3):
        simulate(model, 150_000, seed=seed)  # its tables are dropped at once: their buffers become free
    assert buffers.kept_bytes()[1] > 0
    assert first.events.equals(events) and first.patients.equals(patients)
    time_column = first.events["time"].to_numpy()
    del first
    again = simulate(model, 150_000, seed=4)
    assert not np.shares_memory(again.events["time"].to_numpy(), time_column)


def test_runs_are_bit_identical_with_and_without_kept_buffers():
    model = illness_death()
    kept = simulate(model, 150_000, seed=5, chunk_size=17_000, workers=2)
    assert buffers.kept_bytes()[0] > 0  # its large columns are in kept buffers
    buffers.set_limit(0)
    buffers.release()
    plain = simulate(model, 150_000, seed=5, chunk_size=17_000, workers=2)
    assert plain.events.equals(kept.events) and plain.patients.equals(kept.patients)


def test_chunk_workspaces_are_kept_between_runs_and_dropped_by_release():
    from sim.engine import histories

    model = illness_death()
    simulate(model, 5_000, seed=1, chunk_size=1_000, workers=2)
    idle = list(histories._IDLE)
    assert 1 <= len(idle) <= 2  # one per worker that ran chunks
    simulate(model, 5_000, seed=2, chunk_size=1_000)
    assert any(ws is idle[0] or ws is idle[-1] for ws in histories._IDLE)  # the same workspaces again
    kept = sum(ws.nbytes for ws in histories._IDLE)
    assert kept > 0 and buffers.release() >= kept
    assert histories._IDLE == []
