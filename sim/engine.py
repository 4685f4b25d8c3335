"""Continuous-time simulation of individual patient histories, vectorised over patients.

Algorithm (per chunk of patients, per strategy):

1. Draw entry age and sex from the patient's attribute stream.
2. In rounds, for every patient still at risk, group by current state ``s``. For each competing exit
   ``k`` of ``s`` draw E_k ~ Exp(1) from the counter ``(patient, 1 + s, occurrence, block)`` and turn
   it into a latent time by conditional inverse cumulative hazard sampling,
   T_k = H_k^-1(H_k(x_k) + E_k) - x_k, where x_k is the exit's clock at entry into ``s`` (attained
   age, time since entry, or 0 for the time-in-state clock) (Bender, Augustin & Blettner 2005, Stat
   Med 24:1713-1723). The earliest latent time wins: for cause-specific hazards the minimum of
   independent latent times has the correct joint law of (time, cause) (Beyersmann et al. 2009,
   Stat Med 28:956-971).
3. A move past the patient's horizon is censored at the horizon; absorbing states end the history.

Because each latent draw is a pure function of (seed, patient, state, occurrence, exit slot), the
histories are identical for every chunking and worker count, and strategies share common random
numbers: a strategy that only changes the hazard of one transition changes only the latent times
that transition produces.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Callable, Iterator, Protocol

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from .model import Clock, Model, ResolvedExit
from .rng import ATTRIBUTE_STREAM, exponentials, key_from_seed, uniforms

__all__ = ["simulate", "simulate_chunks", "SimulationResult", "SimulationCancelled", "SimulationError"]

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
@dataclass
class _ChunkOut:
    patient: NDArray[np.int64]
    entry_age: NDArray[np.float64]
    sex: NDArray[np.int8]
    per_strategy: list[dict[str, NDArray]]


def _clock_value(ex: ResolvedExit, t: NDArray[np.float64], age: NDArray[np.float64]) -> NDArray[np.float64]:
    if ex.clock is Clock.AGE:
        return age
    if ex.clock is Clock.ENTRY:
        return t
    return np.zeros_like(t)


def _latent_times(ex: ResolvedExit, x: NDArray[np.float64], e: NDArray[np.float64],
                  sex: NDArray[np.int8]) -> NDArray[np.float64]:
    first = ex.hazards[0]
    if all(h is first for h in ex.hazards):
        return first.conditional_time(x, e)
    out = np.empty_like(x)
    for code, h in enumerate(ex.hazards):
        m = sex == code
        if m.any():
            out[m] = h.conditional_time(x[m], e[m])
    return out


def _run_strategy(model: Model, resolved: list[list[ResolvedExit]], key: tuple[int, int],
                  ids: NDArray[np.int64], entry_age: NDArray[np.float64], sex: NDArray[np.int8],
                  limit: NDArray[np.float64], max_transitions: int) -> dict[str, NDArray]:
    n = ids.size
    n_states = len(model.states)
    absorbing = np.array([s.absorbing for s in model.states])
    cur = np.full(n, model.state_index(model.population.initial_state), dtype=np.int16)
    t = np.zeros(n)
    active = limit > 0.0
    absorbed = np.zeros(n, dtype=bool)
    visits = np.zeros((n, n_states), dtype=np.int64)
    rec_idx: list[NDArray[np.int64]] = []
    rec_time: list[NDArray[np.float64]] = []
    rec_from: list[NDArray[np.int16]] = []
    rec_to: list[NDArray[np.int16]] = []
    rec_exit: list[NDArray[np.int16]] = []
    exit_index = [np.array([e.index for e in ex], dtype=np.int16) for ex in resolved]
    targets = [np.array([e.target for e in ex], dtype=np.int16) for ex in resolved]
    rounds = 0
    while True:
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        rounds += 1
        if rounds > max_transitions:
            raise SimulationError(
                f"some patients made more than {max_transitions} transitions before the horizon "
                f"(states now occupied: {sorted({model.state_names[s] for s in np.unique(cur[idx])})}); "
                f"check for very large hazards on a loop between states, or raise max_transitions")
        cur_round = cur[idx]
        for s in np.unique(cur_round):
            sel = idx[cur_round == s]
            exits = resolved[s]
            occ = visits[sel, s]
            visits[sel, s] += 1
            e = np.empty((sel.size, len(exits)))
            for o in np.unique(occ):  # usually one value per round
                m = occ == o
                e[m] = exponentials(key, ids[sel[m]], 1 + int(s), int(o), len(exits))
            ts = t[sel]
            age = entry_age[sel] + ts
            sx = sex[sel]
            dt = np.empty((sel.size, len(exits)))
            for j, ex in enumerate(exits):
                dt[:, j] = _latent_times(ex, _clock_value(ex, ts, age), e[:, j], sx)
            win = np.argmin(dt, axis=1)
            t_new = ts + dt[np.arange(sel.size), win]
            cens = t_new >= limit[sel]
            # censored at the horizon
            c_idx = sel[cens]
            t[c_idx] = limit[c_idx]
            active[c_idx] = False
            # transitions that happened
            moved = ~cens
            m_idx = sel[moved]
            to = targets[s][win[moved]]
            rec_idx.append(m_idx)
            rec_time.append(t_new[moved])
            rec_from.append(np.full(m_idx.size, s, dtype=np.int16))
            rec_to.append(to)
            rec_exit.append(exit_index[s][win[moved]])
            t[m_idx] = t_new[moved]
            cur[m_idx] = to
            done = absorbing[to]
            absorbed[m_idx[done]] = True
            active[m_idx[done]] = False
    ev_idx = np.concatenate(rec_idx) if rec_idx else np.zeros(0, dtype=np.int64)
    order = np.argsort(ev_idx, kind="stable")  # recording order is time order within a patient
    ev_idx = ev_idx[order]
    return {
        "ev_patient": ids[ev_idx],
        "ev_time": np.concatenate(rec_time)[order] if rec_time else np.zeros(0),
        "ev_age": entry_age[ev_idx] + (np.concatenate(rec_time)[order] if rec_time else np.zeros(0)),
        "ev_from": np.concatenate(rec_from)[order] if rec_from else np.zeros(0, np.int16),
        "ev_to": np.concatenate(rec_to)[order] if rec_to else np.zeros(0, np.int16),
        "ev_exit": np.concatenate(rec_exit)[order] if rec_exit else np.zeros(0, np.int16),
        "exit_time": t,
        "final_state": cur,
        "absorbed": absorbed,
    }


def _simulate_chunk(model: Model, plans: list[list[list[ResolvedExit]]], key: tuple[int, int],
                    start: int, stop: int, max_transitions: int) -> _ChunkOut:
    ids = np.arange(start, stop, dtype=np.int64)
    u = uniforms(key, ids, ATTRIBUTE_STREAM, 0, 2)
    entry_age = model.population.entry_age.ppf(u[:, 0]).astype(np.float64)
    sex = model.population.sex_codes(u[:, 1])
    limit = model.horizon.time_limit(entry_age)
    per = [_run_strategy(model, plan, key, ids, entry_age, sex, limit, max_transitions) for plan in plans]
    return _ChunkOut(ids, entry_age, sex, per)


# --------------------------------------------------------------------------- assembly
def _cat(codes: NDArray, labels: tuple[str, ...]) -> pd.Categorical:
    return pd.Categorical.from_codes(np.asarray(codes, dtype=np.int64), categories=list(labels))


def _assemble(model: Model, strategies: tuple[str, ...], chunks: list[_ChunkOut]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Concatenate chunk outputs (in chunk order, so patients stay sorted) into the two tables."""
    states = model.state_names
    n_st = len(strategies)

    def col(field_name: str) -> NDArray:
        return np.concatenate([c.per_strategy[k][field_name] for k in range(n_st) for c in chunks])

    ids = np.concatenate([c.patient for c in chunks])
    entry_age = np.concatenate([c.entry_age for c in chunks])
    sex = np.concatenate([c.sex for c in chunks])
    n_ev = [sum(c.per_strategy[k]["ev_patient"].size for c in chunks) for k in range(n_st)]
    events = pd.DataFrame({
        "strategy": _cat(np.repeat(np.arange(n_st), n_ev), strategies),
        "patient": col("ev_patient"),
        "time": col("ev_time"),
        "age": col("ev_age"),
        "from_state": _cat(col("ev_from"), states),
        "to_state": _cat(col("ev_to"), states),
        "transition": _cat(col("ev_exit"), model.exit_names),
    }, copy=False)
    exit_time = col("exit_time")
    entry_all = np.tile(entry_age, n_st)
    patients = pd.DataFrame({
        "strategy": _cat(np.repeat(np.arange(n_st), ids.size), strategies),
        "patient": np.tile(ids, n_st),
        "entry_age": entry_all,
        "sex": _cat(np.tile(sex, n_st), model.population.sexes),
        "initial_state": _cat(np.full(ids.size * n_st, model.state_index(model.population.initial_state)), states),
        "exit_time": exit_time,
        "exit_age": entry_all + exit_time,
        "final_state": _cat(col("final_state"), states),
        "exit_reason": _cat(np.where(col("absorbed"), 0, 1), ("absorbed", "censored")),
    }, copy=False)
    return events, patients


def _is_cancelled(cancel: CancelToken | Callable[[], bool] | None) -> bool:
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
                   workers: int, cancel, max_transitions: int) -> Iterator[_ChunkOut]:
    """Chunk results in patient order; with several workers at most 2 x workers chunks are in flight
    (bounded memory when the consumer streams them to disk)."""
    key = key_from_seed(seed)
    plans = [model.resolve(nm) for nm in names]
    bounds = [(a, min(a + chunk_size, n_patients)) for a in range(0, n_patients, chunk_size)]

    def work(i: int) -> _ChunkOut:
        if _is_cancelled(cancel):
            raise SimulationCancelled("simulation cancelled")
        a, b = bounds[i]
        return _simulate_chunk(model, plans, key, a, b, max_transitions)

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
    if _is_cancelled(cancel):
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
    for out in _chunk_outputs(model, n_patients, seed, names, chunk_size, workers, cancel, max_transitions):
        yield _assemble(model, names, [out])


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
    chunk_size : patients per chunk. Peak memory is about twice the returned tables (chunk results
        are joined once at the end) plus a working set of under 1 kB per patient in a chunk.
    workers : worker threads (numpy releases the GIL); results are identical for any value.
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
    for out in _chunk_outputs(model, n_patients, seed, names, chunk_size, workers, cancel, max_transitions):
        outs.append(out)
        done += out.patient.size
        if progress is not None:
            progress(done, n_patients)
    events, patients = _assemble(model, names, outs)
    return SimulationResult(model=model, seed=int(seed), n_patients=int(n_patients), events=events,
                            patients=patients, chunk_size=int(chunk_size), workers=int(workers),
                            metadata={"strategies": names, "generator": "Philox4x64-10 counter-based"})
