"""Continuous-time simulation of individual patient histories, vectorised over patients.

Algorithm (per chunk of patients, per strategy):

1. Draw entry age, sex and (for a mix of initial states) the initial state from the patient's
   attribute stream, common to every strategy.
2. In rounds, for every patient still at risk, group by current state ``s``. For each competing exit
   ``k`` of ``s`` draw E_k ~ Exp(1) from the patient's word ``k`` in stream ``1 + s`` at its
   occurrence (the stream layout of :mod:`sim.engine.rng`: consecutive patients' words are
   consecutive words of one Philox counter sequence, every word used) and turn it into a latent
   time by conditional inverse cumulative hazard sampling, T_k = H_k^-1(H_k(x_k) + E_k) - x_k,
   where x_k is the exit's clock at entry into ``s`` (attained
   age, time since entry, or 0 for the time-in-state clock) (Bender, Augustin & Blettner 2005, Stat
   Med 24:1713-1723). The earliest latent time wins: for cause-specific hazards the minimum of
   independent latent times has the correct joint law of (time, cause) (Beyersmann et al. 2009,
   Stat Med 28:956-971).
3. A move past the patient's horizon is censored at the horizon; absorbing states end the history.

Because each latent draw is a pure function of (seed, patient, state, occurrence, exit slot), the
histories are identical for every chunking and worker count, and strategies share common random
numbers: a strategy that only changes the hazard of one transition changes only the latent times
that transition produces.

Where the work runs: the round loop is one compiled kernel (:func:`sim.engine.kernels.run_rounds`,
numba, without the GIL, so worker threads overlap): grouping by state, the Philox words of exactly
the patients in a state, ``-log u``, the conditional times of exits with block forms (exponential,
Weibull, Gompertz: :mod:`sim.hazards.blocks`, calling numpy's own ``exp``/``log`` loops), the
competing minimum with moves, censoring and records. It returns to Python for a state whose exits
have no block form, which takes the hazards' numpy code (:mod:`sim.hazards`; the same values the
blocks give). Placing a chunk's events is a kernel too. Scratch arrays live in per-chunk
workspaces kept between runs, and the result columns come from :mod:`sim.engine.buffers`.
"""

from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Callable, Iterator, Protocol

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ..hazards import KERNEL_ERRSTATE, entry_age_times
from ..hazards.numpy_loops import loops as numpy_loops
from ..hazards.blocks import block_form
from ..model.multistate import Clock, Model, ResolvedExit
from .rng import ATTRIBUTE_STREAM, STREAM_LAYOUT, key_from_seed
from . import buffers, kernels
from .tables import EventRecords, OutputTables, code_dtype, placement_scratch

__all__ = ["simulate", "simulate_chunks", "simulate_range", "SimulationResult", "SimulationCancelled", "SimulationError", "CancelToken",
           "cancel_requested", "chunk_size_for"]

ProgressCallback = Callable[[int, int], None]


class CancelToken(Protocol):
    def is_set(self) -> bool: ...


class SimulationCancelled(RuntimeError):
    """Raised when a cancel request was honoured between chunks."""


class SimulationError(RuntimeError):
    """The simulation cannot proceed (e.g. a runaway loop between states)."""


@dataclass(frozen=True)
class SimulationResult:
    """Event log and patient table of a run, with the seed that reproduces it.

    events : one row per transition: strategy, patient, time (years since entry), age (attained),
        from_state, to_state, transition.
    patients : one row per patient per strategy: strategy, patient, entry_age, sex, initial_state,
        exit_time, exit_age, final_state, exit_reason ("absorbed" or "censored").
    """

    model: Model
    seed: int
    n_patients: int
    events: pd.DataFrame
    patients: pd.DataFrame
    chunk_size: int
    workers: int
    metadata: dict = field(default_factory=dict)

    def strategy(self, name: str) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Events and patients of one strategy."""
        self.model.strategy(name)
        return (self.events[self.events["strategy"] == name].reset_index(drop=True),
                self.patients[self.patients["strategy"] == name].reset_index(drop=True))


# --------------------------------------------------------------------------- chunk kernel
_code_dtype = code_dtype
_PatientTable = OutputTables  # the run's result columns, written in place by the chunks (sim.engine.tables)


@dataclass
class _ChunkOut:
    """One chunk (patients ``start .. stop - 1``), once its rows of the patient table and of the event
    log are written into the run's :class:`~sim.engine.tables.OutputTables`."""

    start: int
    stop: int


def _clock_value(ex: ResolvedExit, t: NDArray[np.float64], age: NDArray[np.float64]) -> NDArray[np.float64]:
    if ex.clock is Clock.AGE:
        return age
    if ex.clock is Clock.ENTRY:
        return t
    return np.zeros_like(t)


def _latent_times(ex: ResolvedExit, x: NDArray[np.float64], e: NDArray[np.float64],
                  sex: NDArray[np.int8], draw: NDArray[np.int64] | None = None,
                  entry: NDArray[np.float64] | None = None) -> NDArray[np.float64]:
    # An exit whose hazard differs between parameter draws (sim.engine.draws.DrawExit) evaluates
    # each lane with its draw's hazard. ``entry``: the lanes' entry ages, given for an exit whose
    # hazards read them (``reads_entry_age``, e.g. sim.hazards.EntryAgeFloor).
    # The engine's clocks are finite and >= 0 and its draws are >= 0 by construction, so the
    # arguments need not be re-validated on every call: evaluate the family's conditional time
    # directly (the caller sets the floating-point error state of Hazard.conditional_time; the
    # values are the same; only a -0.0 could differ, and t + (-0.0) == t + 0.0 for the engine's
    # t >= +0.0).
    first = ex.hazards[0]
    if entry is not None:
        by_draw = draw is not None and hasattr(ex, "unique")
        codes = ex.code[draw, 0 if sex is None else sex] if by_draw else sex
        out = entry_age_times(ex.unique if by_draw else ex.hazards, codes, x, e, entry)
    elif draw is not None and hasattr(ex, "latent"):
        out = ex.latent(x, e, sex, draw)
    elif all(h is first for h in ex.hazards):
        out = first._conditional_time(x, e)
    else:
        out = np.empty_like(x)
        for code, h in enumerate(ex.hazards):
            m = sex == code
            if m.any():
                out[m] = h._conditional_time(x[m], e[m])
    return out


_CLOCK_CODES = {Clock.STATE: 0, Clock.ENTRY: 1, Clock.AGE: 2}


def _block_plan(exits: list[ResolvedExit]) -> tuple[NDArray[np.int64], NDArray[np.float64], NDArray[np.int64]] | None:
    """The exits' families, numbers and clock codes for :func:`kernels.state_round` when every exit
    is a plain one (not per-draw, one hazard for both sexes, not reading entry ages) with a block
    form (:func:`sim.hazards.blocks.block_form`); else None (the numpy path)."""
    forms = []
    for ex in exits:
        first = ex.hazards[0]
        if type(ex) is not ResolvedExit or any(h is not first for h in ex.hazards) \
                or getattr(first, "reads_entry_age", False):
            return None
        form = block_form(first)
        if form is None:
            return None
        forms.append(form)
    return (np.array([f[0] for f in forms], dtype=np.int64), np.array([f[1:] for f in forms], dtype=np.float64),
            np.array([_CLOCK_CODES[ex.clock] for ex in exits], dtype=np.int64))


@dataclass(frozen=True)
class _RoundTables:
    """Per state (rows) and exit (columns, padded to the most exits of a state), what
    :func:`kernels.run_rounds` reads: whether the state has block forms, its number of exits, their
    families, numbers and clock codes (:func:`_block_plan`), targets and exit codes; ``fns`` numpy's
    loops (:func:`sim.hazards.numpy_loops.loops`; zeros, unused, when they are not available)."""

    fns: NDArray[np.int64]
    planned: NDArray[np.bool_]
    n_exits: NDArray[np.int64]
    families: NDArray[np.int64]
    params: NDArray[np.float64]
    clocks: NDArray[np.int64]
    targets: NDArray
    exits: NDArray


def _round_tables(resolved: list[list[ResolvedExit]], state_code: np.dtype, exit_code: np.dtype,
                  k_max: int) -> _RoundTables:
    fns = numpy_loops()
    n_states = len(resolved)
    t = _RoundTables(np.zeros(8, dtype=np.int64) if fns is None else fns, np.zeros(n_states, dtype=np.bool_),
                     np.array([len(ex) for ex in resolved], dtype=np.int64), np.zeros((n_states, k_max), np.int64),
                     np.zeros((n_states, k_max, 3)), np.zeros((n_states, k_max), np.int64),
                     np.zeros((n_states, k_max), state_code), np.zeros((n_states, k_max), exit_code))
    for s, ex in enumerate(resolved):
        k = len(ex)
        t.targets[s, :k] = [e.target for e in ex]
        t.exits[s, :k] = [e.index for e in ex]
        plan = None if fns is None or k == 0 else _block_plan(ex)
        if plan is not None:
            t.planned[s] = True
            t.families[s, :k], t.params[s, :k], t.clocks[s, :k] = plan
    return t


def _no_event_time(exits: list[ResolvedExit], latent: list[NDArray[np.float64]], ts: NDArray[np.float64],
                   age: NDArray[np.float64] | None, e: NDArray[np.float64]) -> SimulationError:
    """The error for a NaN latent time (:func:`kernels.settle` found one): a NaN would compare as
    "no event" and censor the patient silently, so it is an internal error instead."""
    for j, ex in enumerate(exits):
        bad = np.flatnonzero(np.isnan(latent[j]))
        if bad.size:
            b = int(bad[0])
            return SimulationError(
                f"internal error: the hazard of transition {ex.name!r} gave no event time (NaN) for clock "
                f"{float(_clock_value(ex, ts, age)[b])!r} and draw {float(e[b, j])!r}; please report this "
                f"with the scenario")
    return SimulationError("internal error: a latent time was NaN; please report this with the scenario")


class _Workspace:
    """Scratch arrays of a chunk, reused from chunk to chunk, round to round and run to run (kept
    idle between runs by :func:`_workspace`): a page of fresh memory costs a page fault on first
    touch, which on this project's VM made the engine's temporaries cost more than their arithmetic,
    and allocating them for every run cost ~5% of a run of 10^6 patients (issue 16). Not
    thread-safe: one chunk at a time."""

    def __init__(self) -> None:
        self._arrays: dict[str, NDArray] = {}
        self._records: dict[int, EventRecords] = {}

    def array(self, name: str, size: int, dtype=np.float64) -> NDArray:
        """A buffer of at least ``size`` items (contents undefined), its first ``size`` returned."""
        buf = self._arrays.get(name)
        if buf is None or buf.size < size or buf.dtype != dtype:
            buf = self._arrays[name] = np.empty(max(int(size), 1), dtype=dtype)
        return buf[:size]

    @property
    def nbytes(self) -> int:
        return (sum(a.nbytes for a in self._arrays.values())
                + sum(c.nbytes for r in self._records.values() for c in (r.idx, r.time, r.from_, r.to, r.exit, r.round)))

    def records(self, k: int, capacity: int, state_code: np.dtype, exit_code: np.dtype) -> EventRecords:
        """Strategy ``k``'s event records of the chunk, emptied (kept until the chunk's events are placed)."""
        rec = self._records.get(k)
        if rec is None or rec.from_.dtype != state_code or rec.exit.dtype != exit_code:
            rec = self._records[k] = EventRecords(capacity, state_code, exit_code)
        rec.count = 0
        return rec


_IDLE: list[_Workspace] = []  # workspaces of finished chunks, for the next chunks of any run
_IDLE_LOCK = threading.Lock()
_MAX_IDLE = max(2, os.cpu_count() or 2)


@contextmanager
def _workspace() -> Iterator[_Workspace]:
    """A workspace for one chunk: an idle one if there is one, else a new one; kept idle afterwards
    (at most one per processor; :func:`sim.engine.buffers.release` drops them)."""
    with _IDLE_LOCK:
        ws = _IDLE.pop() if _IDLE else _Workspace()
    try:
        yield ws
    finally:
        with _IDLE_LOCK:
            if len(_IDLE) < _MAX_IDLE:
                _IDLE.append(ws)


def _drop_idle_workspaces() -> int:
    with _IDLE_LOCK:
        dropped = sum(ws.nbytes for ws in _IDLE)
        _IDLE.clear()
    return dropped


buffers.on_release(_drop_idle_workspaces)


def _run_strategy(model: Model, resolved: list[list[ResolvedExit]], key: tuple[np.uint64, np.uint64], start: int,
                  entry_age: NDArray[np.float64], sex: NDArray[np.int8], initial: NDArray,
                  limit: NDArray[np.float64], max_transitions: int, t: NDArray[np.float64], cur: NDArray,
                  reason: NDArray[np.int8], draw_of: NDArray[np.int64] | None = None,
                  work: _Workspace | None = None, code: int = 0) -> EventRecords:
    """Histories of one chunk under one strategy. ``t``, ``cur`` and ``reason`` are the chunk's rows
    of the patient table (exit time, final state, exit reason), used as the working state.
    ``draw_of`` gives each patient's parameter draw when the exits are per-draw (``DrawExit``);
    ``work`` holds the worker's scratch arrays, ``code`` the strategy's index in the run, ``key``
    the run's Philox key as two unsigned words.

    Per round and occupied state: the state's patients' uniforms (:func:`kernels.visit_units`, each
    at its own occurrence), their exponentials, each exit's conditional times, then the competing
    minimum, moves, censoring and records (:func:`kernels.settle`): all in :func:`kernels.run_rounds`
    for states whose exits have block forms, else with the hazards' numpy code here."""
    n = entry_age.size
    n_states = len(model.states)
    state_code = _code_dtype(n_states)
    exit_code = _code_dtype(len(model.exit_names))
    absorbing = np.array([s.absorbing for s in model.states])
    k0, k1 = key
    work = work if work is not None else _Workspace()
    active, absorbed = work.array("active", n, np.bool_), work.array("absorbed", n, np.bool_)
    idx = work.array("active ids", n, np.int64)  # the active patients, increasing
    m = kernels.start_histories(initial, limit, t, cur, active, absorbed, idx)
    # per state: whether any exit reads attained age / has sex-specific hazards (exit codes and
    # targets are rows of ``tables``)
    uses_age = [any(e.clock is Clock.AGE for e in ex) for ex in resolved]
    reads_entry = [[any(getattr(h, "reads_entry_age", False) for h in e.hazards) for e in ex] for ex in resolved]
    by_sex = [any(getattr(e, "sex_specific", None) or any(h is not e.hazards[0] for h in e.hazards) for e in ex)
              for ex in resolved]
    rec = work.records(code, 2 * n, state_code, exit_code)
    k_max = max(len(ex) for ex in resolved)
    tables = _round_tables(resolved, state_code, exit_code, k_max)
    bounds = np.empty(n_states + 1, dtype=np.int64)
    order, clock, attained = work.array("order", n, np.int64), work.array("clock", n), work.array("attained", n)
    visits = work.array("visits", n_states * n, np.int64).reshape(n_states, n)  # entries into each state
    seen = np.zeros(n_states, dtype=np.bool_)  # states whose row of ``visits`` is zeroed
    draws_buf, latents = work.array("draws", n * k_max), work.array("latents", n * k_max)
    tmp = work.array("block scratch", 3 * kernels.STATE_BLOCK).reshape(3, kernels.STATE_BLOCK)
    rnd, s_from = 0, -1
    # the hazards' numpy kernels run under Hazard.conditional_time's floating-point error state,
    # set once for the whole loop rather than per call
    with np.errstate(**KERNEL_ERRSTATE):
        while True:
            # every round, and every state of a round with block forms, in compiled code; it returns
            # here for a state the numpy code must handle, for room for records, or at the end. Each
            # round's states and their patients are fixed (``order``, ``bounds``) before any of them
            # moves: a patient moved into a state handled later in the round does not move twice
            status, s, failed, rec.count, rnd, m = kernels.run_rounds(
                idx, m, active, cur, t, entry_age, bounds, order, clock, attained, rnd, s_from, max_transitions,
                start, visits, seen, k0, k1, tables.fns, tables.planned, tables.n_exits, tables.families,
                tables.params, tables.clocks, tables.targets, tables.exits, draws_buf, latents, tmp, limit, absorbing,
                absorbed, rec.idx, rec.time, rec.from_, rec.to, rec.exit, rec.round, rec.count)
            if status == kernels.DONE:
                break
            if status == kernels.TOO_MANY:
                raise SimulationError(
                    f"some patients made more than {max_transitions} transitions before the horizon "
                    f"(states now occupied: {sorted({model.state_names[s] for s in np.unique(cur[idx[:m]])})}); "
                    f"check for very large hazards on a loop between states, or raise max_transitions")
            part = slice(int(bounds[s]), int(bounds[s + 1]))
            sel, ts, age = order[part], clock[part], attained[part]
            exits, k = resolved[s], len(resolved[s])
            e = draws_buf[:sel.size * k].reshape(sel.size, k)
            lat = latents[:k * sel.size].reshape(k, sel.size)
            if status == kernels.NEEDS_ROOM:
                rec.reserve(sel.size)
                s_from = s
                continue
            s_from = s + 1
            if status == kernels.NO_TIME:
                raise _no_event_time(exits, list(lat), ts, age, e)
            if not failed:  # no block form: the state's whole round in numpy
                kernels.visit_units(sel, start, visits[s], k, 1 + s, k0, k1, e)
                np.log(e, out=e)
                np.negative(e, out=e)
                sx = sex[sel] if by_sex[s] else None
                dr = None if draw_of is None else draw_of[sel]
                a0 = entry_age[sel] if any(reads_entry[s]) else None
                failed = (1 << k) - 1
            else:  # the block forms of some exits reported the numpy code's general form
                sx = dr = a0 = None
            for j, ex in enumerate(exits):
                if failed >> j & 1:
                    lat[j] = _latent_times(ex, _clock_value(ex, ts, age if uses_age[s] else None), e[:, j], sx, dr,
                                           a0 if reads_entry[s][j] else None)
            rec.reserve(sel.size)
            got = kernels.settle(sel, k, lat[0], lat[min(1, k - 1)], lat[min(2, k - 1)], lat[min(3, k - 1)], lat[4:],
                                 rnd > 1, s, rnd, limit, tables.targets[s], tables.exits[s], absorbing, t, cur, active,
                                 absorbed, rec.idx, rec.time, rec.from_, rec.to, rec.exit, rec.round, rec.count)
            if got < 0:
                raise _no_event_time(exits, list(lat), ts, age, e)
            rec.count = got
    np.logical_not(absorbed, out=reason.view(np.bool_))  # 0 "absorbed", 1 "censored"
    return rec


def _simulate_chunk(model: Model, plans: list[list[list[ResolvedExit]]], key: tuple[int, int],
                    start: int, stop: int, max_transitions: int, table: _PatientTable,
                    draws=None, work: _Workspace | None = None) -> _ChunkOut:
    """One chunk. ``draws`` (a ``sim.engine.draws.DrawSet``) gives patients of different parameter
    draws their own population and horizon (``draws.segments``) and each patient's draw index;
    ``work``: the chunk's scratch arrays (an idle workspace, or a new one, if None)."""
    if work is None:
        with _workspace() as ws:
            return _chunk_in(model, plans, key, start, stop, max_transitions, table, draws, ws)
    return _chunk_in(model, plans, key, start, stop, max_transitions, table, draws, work)


def _chunk_in(model: Model, plans: list[list[list[ResolvedExit]]], key: tuple[int, int], start: int, stop: int,
              max_transitions: int, table: _PatientTable, draws, work: _Workspace) -> _ChunkOut:
    """:func:`_simulate_chunk` in the workspace ``work``."""
    segments = [(start, stop, model)] if draws is None else draws.segments(start, stop)
    single = all(m.population.single_initial_state for _, _, m in segments)
    # attribute words: entry age and sex (occurrence 0); the initial state of a mix from occurrence 1,
    # drawn only when some segment has a mix, so that entry ages and sexes never depend on it
    k0, k1 = np.uint64(key[0]), np.uint64(key[1])
    u = work.array("attributes", 2 * (stop - start)).reshape(stop - start, 2)
    kernels.range_units(start, stop - start, 2, ATTRIBUTE_STREAM, 0, k0, k1, u)
    u_initial = None
    if not single:
        u_initial = work.array("initial", stop - start).reshape(stop - start, 1)
        kernels.range_units(start, stop - start, 1, ATTRIBUTE_STREAM, 1, k0, k1, u_initial)
        u_initial = u_initial[:, 0]
    rows = table.rows(0, start, stop)
    entry_age, sex, initial = table.entry_age[rows], table.sex[rows], table.initial[rows]
    limit = np.empty(stop - start)
    for a, b, m in segments:  # one segment unless the draws' populations or horizons differ
        pop, part = m.population, slice(a - start, b - start)
        entry_age[part] = pop.entry_age.ppf(u[part, 0])
        # with a single sex every patient has code 0 (what sex_codes returns for any u in (0, 1])
        sex[part] = 0 if len(pop.sexes) == 1 else pop.sex_codes(u[part, 1])
        one = pop.single_initial_state
        initial[part] = m.state_index(one) if one else pop.initial_codes(u_initial[part], sex[part], m.state_names)
        limit[part] = m.horizon.time_limit(entry_age[part])
    del u, u_initial
    draw_of = None if draws is None else draws.draw_of(start, stop)
    per = []
    for k, plan in enumerate(plans):
        rows = table.rows(k, start, stop)
        per.append(_run_strategy(model, plan, (k0, k1), start, entry_age, sex, initial, limit, max_transitions,
                                 table.exit_time[rows], table.final_state[rows], table.exit_reason[rows], draw_of,
                                 work, k))
    table.finish_patients(start, stop)
    table.place_events(start, stop, per, entry_age, _code_dtype(len(model.exit_names)),
                       work.array("slots", placement_scratch(stop - start, per), np.int64))
    return _ChunkOut(start, stop)


# --------------------------------------------------------------------------- assembly
def _assemble(model: Model, strategies: tuple[str, ...], chunks: list[_ChunkOut],
              table: OutputTables) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The event log and patient table of ``chunks``, whose rows the chunks wrote into ``table``
    (in place: no copies of the columns)."""
    return table.frames(model.state_names, model.exit_names, model.population.sexes, tuple(strategies))


MIN_PROGRESS_CHUNK = 25_000


def chunk_size_for(n_patients: int, largest: int) -> int:
    """Chunk size for a run that reports progress: about 20 chunks, but no fewer than
    ``MIN_PROGRESS_CHUNK`` patients per chunk (chunks of 5,000 cost nearly twice as much per patient
    as chunks of 25,000, measured with the benchmark workload) and no more than ``largest``."""
    return max(1, min(int(largest), max(MIN_PROGRESS_CHUNK, int(n_patients) // 20)))


def cancel_requested(cancel: CancelToken | Callable[[], bool] | None) -> bool:
    """Whether a cancel token (``is_set()``, e.g. ``threading.Event``) or callable asks to stop."""
    if cancel is None:
        return False
    if hasattr(cancel, "is_set"):
        return bool(cancel.is_set())
    return bool(cancel())


def _validate_run(model: Model, n_patients: int, chunk_size: int, workers: int,
                  strategies: tuple[str, ...] | None) -> tuple[str, ...]:
    if not isinstance(n_patients, (int, np.integer)) or n_patients < 1:
        raise ValueError(f"n_patients must be a positive integer, got {n_patients!r}")
    if not isinstance(chunk_size, (int, np.integer)) or chunk_size < 1:
        raise ValueError(f"chunk_size must be a positive integer, got {chunk_size!r}")
    if not isinstance(workers, (int, np.integer)) or workers < 1:
        raise ValueError(f"workers must be a positive integer, got {workers!r}")
    names = tuple(strategies) if strategies is not None else model.strategy_names
    for nm in names:
        model.strategy(nm)
    return names


def _chunk_outputs(model: Model, n_patients: int, seed: int, names: tuple[str, ...], chunk_size: int,
                   workers: int, cancel, max_transitions: int,
                   table: _PatientTable | None = None) -> Iterator[tuple[_ChunkOut, _PatientTable]]:
    """Chunk results in patient order, each with the patient table holding its rows: ``table`` (for
    all patients) if given, else a table of its own (streaming). With several workers at most
    2 x workers chunks are in flight (bounded memory when the consumer streams them to disk)."""
    state_code = _code_dtype(len(model.state_names))
    key = key_from_seed(seed)
    plans = [model.resolve(nm) for nm in names]
    bounds = [(a, min(a + chunk_size, n_patients)) for a in range(0, n_patients, chunk_size)]

    def work(i: int) -> tuple[_ChunkOut, _PatientTable]:
        if cancel_requested(cancel):
            raise SimulationCancelled("simulation cancelled")
        a, b = bounds[i]
        rows = table if table is not None else _PatientTable(a, b - a, len(names), state_code)
        return _simulate_chunk(model, plans, key, a, b, max_transitions, rows), rows

    if workers == 1 or len(bounds) == 1:
        for i in range(len(bounds)):
            yield work(i)
    else:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            window = 2 * workers
            futures = {i: pool.submit(work, i) for i in range(min(window, len(bounds)))}
            try:
                for i in range(len(bounds)):
                    out = futures.pop(i).result()
                    nxt = i + window
                    if nxt < len(bounds):
                        futures[nxt] = pool.submit(work, nxt)
                    yield out
            finally:
                for f in futures.values():
                    f.cancel()
                if table is not None:  # a chunk waiting for its turn to place its events gives up
                    table.abort()
    if cancel_requested(cancel):
        raise SimulationCancelled("simulation cancelled")


def simulate_chunks(model: Model, n_patients: int, seed: int, *, strategies: tuple[str, ...] | None = None,
                    chunk_size: int = 100_000, workers: int = 1,
                    cancel: CancelToken | Callable[[], bool] | None = None,
                    max_transitions: int = 10_000) -> Iterator[tuple[pd.DataFrame, pd.DataFrame]]:
    """Like :func:`simulate`, but yield ``(events, patients)`` for one chunk of patients at a time,
    in patient order (within a chunk: by strategy, then patient), so that large runs can be streamed
    to disk with memory bounded by the chunk size. Concatenating all chunks gives the same rows as
    :func:`simulate` (ordered by chunk first)."""
    names = _validate_run(model, n_patients, chunk_size, workers, strategies)
    for out, table in _chunk_outputs(model, n_patients, seed, names, chunk_size, workers, cancel, max_transitions):
        yield _assemble(model, names, [out], table)


def simulate_range(model: Model, seed: int, start: int, stop: int, *, strategies: tuple[str, ...] | None = None,
                   max_transitions: int = 10_000) -> tuple[pd.DataFrame, pd.DataFrame]:
    """``(events, patients)`` of patients ``start .. stop - 1`` under each strategy: a pure function
    of its arguments, the unit of work an executor (threads, processes, a cluster) runs. The rows
    are those of one chunk of :func:`simulate_chunks` covering the same patients (by strategy, then
    patient), so any split of ``0 .. n`` into ranges gives the histories of :func:`simulate`."""
    if not all(isinstance(v, (int, np.integer)) for v in (start, stop)) or not 0 <= start < stop:
        raise ValueError(f"patients start .. stop must be integers with 0 <= start < stop, got {start!r} .. {stop!r}")
    names = _validate_run(model, int(stop - start), int(stop - start), 1, strategies)
    table = _PatientTable(int(start), int(stop - start), len(names), _code_dtype(len(model.state_names)))
    out = _simulate_chunk(model, [model.resolve(nm) for nm in names], key_from_seed(seed), int(start), int(stop),
                          max_transitions, table)
    return _assemble(model, names, [out], table)


def simulate(model: Model, n_patients: int, seed: int, *, strategies: tuple[str, ...] | None = None,
             chunk_size: int = 100_000, workers: int = 1,
             progress: ProgressCallback | None = None,
             cancel: CancelToken | Callable[[], bool] | None = None,
             max_transitions: int = 10_000) -> SimulationResult:
    """Simulate ``n_patients`` histories under each strategy with common random numbers.

    Parameters
    ----------
    model : the validated model.
    n_patients : number of patients per strategy (same patients in every strategy).
    seed : non-negative integer; with the model it fixes every draw (recorded in the result).
    strategies : names to run (default: all of the model's strategies).
    chunk_size : patients per chunk. Peak memory is about the returned tables (the chunks write their
        rows into them in place, :mod:`sim.engine.tables`) plus a working set per patient in a chunk
        of ~160 bytes and 8 per state (under 1 kB per patient up to ~100 states) for each worker's
        chunks in flight.
    workers : worker threads (the compiled round loop and numpy release the GIL); results are identical
        for any value.
    progress : called as ``progress(patients_done, n_patients)`` after each chunk.
    cancel : an object with ``is_set()`` (e.g. ``threading.Event``) or a callable; checked between
        chunks, raising :class:`SimulationCancelled`.
    max_transitions : guard against runaway loops between states.

    Returns
    -------
    SimulationResult
    """
    names = _validate_run(model, n_patients, chunk_size, workers, strategies)
    outs: list[_ChunkOut] = []
    done = 0
    table = _PatientTable(0, int(n_patients), len(names), _code_dtype(len(model.state_names)))
    for out, _ in _chunk_outputs(model, n_patients, seed, names, chunk_size, workers, cancel, max_transitions,
                                 table):
        outs.append(out)
        done += out.stop - out.start
        if progress is not None:
            progress(done, n_patients)
    events, patients = _assemble(model, names, outs, table)
    return SimulationResult(model=model, seed=int(seed), n_patients=int(n_patients), events=events,
                            patients=patients, chunk_size=int(chunk_size), workers=int(workers),
                            metadata={"strategies": names, "generator": "Philox4x64-10 counter-based",
                                      "stream_layout": STREAM_LAYOUT})
