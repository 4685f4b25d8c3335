"""The multi-state long format of Putter, Fiocco & Geskus (2007).

:func:`long_format` turns an event log into the data layout of Putter, Fiocco & Geskus (2007) and of
the ``mstate`` package (de Wreede, Fiocco & Putter 2011): every sojourn of a patient in a
non-absorbing state ``s``, from entry into ``s`` (time 0 or a move) to the next move or the end of
follow-up, gives one row per exit ``k`` of ``s`` (the model's transitions out of ``s``, plus
background death when the model has background mortality), with ``start``, ``stop`` and
``status = 1`` if exit ``k`` happened at ``stop``, else 0. At most one row per sojourn has status 1,
so the status-1 rows are exactly the logged transitions, and the rows of any one exit of ``s`` cover
the time spent in ``s`` exactly once. This is the counting-process input of cause-specific hazard
models (e.g. a Cox model stratified by transition, Andersen-Gill style ``(start, stop]`` intervals)
on the time-since-entry ("clock forward") scale.

References
----------
Putter H, Fiocco M, Geskus RB (2007). Tutorial in biostatistics: competing risks and multi-state
models. Stat Med 26(11):2389-2430.
de Wreede LC, Fiocco M, Putter H (2011). mstate: an R package for the analysis of competing risks and
multi-state models. J Stat Softw 38(7):1-30.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ...analysis.columns import label_codes, patient_ids, time_column
from ...model.multistate import Model
from .errors import ExportError

__all__ = ["LONG_FORMAT_COLUMNS", "long_format"]

LONG_FORMAT_COLUMNS: tuple[str, ...] = (
    "strategy", "patient", "from_state", "to_state", "transition", "start", "stop", "status")


def _codes(df: pd.DataFrame, table: str, column: str, labels: list[str], what: str,
           plural: str) -> NDArray[np.intp]:
    """``label_codes`` of ``df[column]``; a value outside ``labels`` is an ExportError naming it."""
    values = df[column]
    codes = label_codes(values, labels)
    bad = codes < 0
    if bad.any():
        value = values.iloc[int(np.argmax(bad))]
        raise ExportError(f"{table}['{column}']: {what} {value!r} is not one of the model's {plural} {labels}",
                          key=(table, column), value=value, rule=f"must be one of the model's {plural} {labels}")
    return codes


def _strategy_codes(df: pd.DataFrame, table: str, categories: list[str]) -> NDArray[np.intp]:
    return _codes(df, table, "strategy", categories, "strategy", "strategies")


def _state_codes(df: pd.DataFrame, table: str, column: str, states: list[str]) -> NDArray[np.intp]:
    return _codes(df, table, column, states, "state", "states")


def _require(df: pd.DataFrame, name: str, columns: tuple[str, ...]) -> None:
    if not isinstance(df, pd.DataFrame):
        raise TypeError(f"{name}: expected a pandas DataFrame, got {type(df).__name__}")
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise ExportError(f"{name}: missing column(s) {missing}; long_format needs {list(columns)}",
                          key=(name,), value=missing, rule=f"must have the columns {list(columns)}; these are missing")


def _exit_tables(model: Model) -> tuple[NDArray[np.intp], NDArray[np.intp], NDArray[np.intp], NDArray[np.intp]]:
    """Per state: number of exits, and per (state, slot) the exit's name code (index into
    ``model.exit_names``) and target state; per (state, name code) the slot, or -1.

    The exit structure (names, slots, targets) is the same under every strategy; strategies change
    hazards only, so the first strategy's resolution is used.
    """
    resolved = model.resolve(model.strategy_names[0])
    n_states = len(model.states)
    n_exits = np.array([len(ex) for ex in resolved], dtype=np.intp)
    width = max(int(n_exits.max()), 1)
    exit_name = np.full((n_states, width), -1, dtype=np.intp)
    exit_target = np.full((n_states, width), -1, dtype=np.intp)
    slot_of = np.full((n_states, len(model.exit_names)), -1, dtype=np.intp)
    for s, exits in enumerate(resolved):  # loop over states and their exits only
        for e in exits:
            exit_name[s, e.slot] = e.index
            exit_target[s, e.slot] = e.target
            slot_of[s, e.index] = e.slot
    return n_exits, exit_name, exit_target, slot_of


def long_format(events: pd.DataFrame, patients: pd.DataFrame, model: Model,
                strategy: str | None = None) -> pd.DataFrame:
    """Multi-state long format: one row per patient per sojourn per exit at risk.

    Parameters
    ----------
    events : pandas.DataFrame
        Event log with columns ``strategy``, ``patient`` (int), ``time`` (years since entry),
        ``from_state``, ``to_state``, ``transition`` (as produced by :mod:`sim.engine`). Row order does
        not matter.
    patients : pandas.DataFrame
        Patient table with columns ``strategy``, ``patient``, ``initial_state``, ``exit_time``; the
        columns ``exit_reason`` and ``final_state`` are checked against the log when present.
    model : Model
        The model that produced the log; it fixes the exits of each state and their targets.
    strategy : str or None
        Keep only this strategy; ``None`` keeps every strategy in the tables.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`LONG_FORMAT_COLUMNS`: ``strategy`` (Categorical: the input's categories when
        ``patients['strategy']`` is Categorical, else the model's strategy names), ``patient``
        (int64), ``from_state`` and ``to_state`` (Categorical over the model's states),
        ``transition`` (Categorical over ``model.exit_names``), ``start`` and ``stop`` (float64,
        years since entry) and ``status`` (int8: 1 if this exit happened at ``stop``, else 0). Rows
        are ordered by strategy (category order), patient, start, then the exit's position among the
        state's exits (``model.resolve``: transitions in model order, then background death).

    Raises
    ------
    ExportError
        Missing columns; a state, strategy or transition unknown to the model; an event of a patient
        absent from ``patients``; duplicate patients; an event that does not leave the state the
        patient is in or is not an exit of that state to its ``to_state``; event times not strictly
        increasing from entry (time 0), or after ``exit_time``; ``exit_reason``/``final_state`` that
        contradict the log.

    Notes
    -----
    A patient's sojourns are (0, t_1], (t_1, t_2], ..., (t_m, exit_time] with t_1 < ... < t_m the
    logged move times, spent in the initial state and then each move's ``to_state``. A sojourn in a
    non-absorbing state ``s`` gives ``len(model.exits_of(s))`` rows (Putter, Fiocco & Geskus 2007,
    section 4; the ``msprep`` layout of de Wreede, Fiocco & Putter 2011). Hence

    - number of rows with ``status == 1`` = number of logged events;
    - for any exit ``k`` of ``s``, sum over its rows of (stop - start) = total time spent in ``s``.

    A sojourn of zero length that ends without a move (a patient whose follow-up ends at entry, or a
    move exactly at the end of follow-up) gives no rows: nobody is at risk over an empty interval.
    Background death is one exit name shared by every state, so a transition is identified by
    (``from_state``, ``transition``); stratify hazard models on both.

    Vectorised: sorting, ``np.searchsorted``, ``np.repeat`` and table look-ups; the only Python
    loops run over states and exits.

    References
    ----------
    Putter, Fiocco & Geskus 2007, Stat Med 26(11):2389-2430; de Wreede, Fiocco & Putter 2011,
    J Stat Softw 38(7).
    """
    if not isinstance(model, Model):
        raise TypeError(f"model: expected a sim.model.Model, got {type(model).__name__}")
    _require(patients, "patients", ("strategy", "patient", "initial_state", "exit_time"))
    _require(events, "events", ("strategy", "patient", "time", "from_state", "to_state", "transition"))
    states = list(model.state_names)
    absorbing = np.array([s.absorbing for s in model.states], dtype=bool)
    sdtype = patients["strategy"].dtype
    strategies = (list(sdtype.categories) if isinstance(sdtype, pd.CategoricalDtype)
                  else list(model.strategy_names))
    unknown = sorted(set(map(str, strategies)) - set(model.strategy_names))
    if unknown:
        raise ExportError(f"patients['strategy']: {unknown} are not strategies of the model "
                          f"{list(model.strategy_names)}", key=("patients", "strategy"), value=unknown,
                          rule=f"categories must be strategies of the model {list(model.strategy_names)}")
    if strategy is not None:
        model.strategy(strategy)  # raises ModelError naming the valid strategies
        pmask = (patients["strategy"] == strategy).to_numpy(dtype=bool)
        if not pmask.any():
            present = sorted(map(str, patients["strategy"].dropna().unique()))
            raise ExportError(f"strategy: {strategy!r} has no rows in patients; strategies present: {present}",
                              key=("strategy",), value=strategy,
                              rule=f"must have rows in patients; strategies present: {present}")
        patients = patients.loc[pmask]
        events = events.loc[(events["strategy"] == strategy).to_numpy(dtype=bool)]

    # ---- patients, sorted by (strategy code, id)
    p_strat = _strategy_codes(patients, "patients", strategies)
    p_id = patient_ids(patients, "patients", ExportError)
    e_strat = _strategy_codes(events, "events", strategies)
    e_id = patient_ids(events, "events", ExportError)
    n, n_ev = p_id.size, e_id.size
    lo = int(min(p_id.min(initial=0), e_id.min(initial=0)))
    span = int(max(p_id.max(initial=0), e_id.max(initial=0))) - lo + 1
    if span * max(len(strategies), 1) >= 2**62:
        rule = f"ids span {span}, too wide to key with {len(strategies)} strategies; renumber the patients"
        raise ExportError(f"patients['patient']: {rule}", key=("patients", "patient"), rule=rule)
    p_key = p_strat.astype(np.int64) * span + (p_id - lo)
    p_order = np.argsort(p_key, kind="stable")
    p_key = p_key[p_order]
    dup = p_key[1:] == p_key[:-1]
    if dup.any():
        i = p_order[1:][dup][0]
        raise ExportError(f"patients['patient']: id {int(p_id[i])} appears twice in strategy "
                          f"{strategies[p_strat[i]]!r}; ids must be unique within a strategy",
                          key=("patients", "patient"), value=int(p_id[i]),
                          rule=f"ids must be unique within a strategy (strategy {strategies[p_strat[i]]!r})")
    p_strat, p_id = p_strat[p_order], p_id[p_order]
    initial = _state_codes(patients, "patients", "initial_state", states)[p_order]
    exit_time = time_column(patients, "patients", "exit_time", ExportError)[p_order]

    # ---- events, mapped to patients and sorted by (patient, time, row)
    e_key = e_strat.astype(np.int64) * span + (e_id - lo)
    pidx = np.searchsorted(p_key, e_key)
    known = (pidx < n) & (p_key[np.minimum(pidx, max(n - 1, 0))] == e_key) if n else np.zeros(n_ev, bool)
    if not known.all():
        i = int(np.flatnonzero(~known)[0])
        raise ExportError(f"events['patient']: id {int(e_id[i])} (strategy {strategies[e_strat[i]]!r}) has no "
                          "row in patients; every event must belong to a listed patient",
                          key=("events", "patient"), value=int(e_id[i]),
                          rule=f"every event must belong to a patient listed in patients (strategy "
                               f"{strategies[e_strat[i]]!r})")
    time = time_column(events, "events", "time", ExportError)
    ev_from = _state_codes(events, "events", "from_state", states)
    ev_to = _state_codes(events, "events", "to_state", states)
    names = list(model.exit_names)
    ev_name = label_codes(events["transition"], names)
    if (ev_name < 0).any():
        bad = events["transition"].iloc[int(np.argmax(ev_name < 0))]
        raise ExportError(f"events['transition']: {bad!r} is not one of the model's exits {names}",
                          key=("events", "transition"), value=bad, rule=f"must be one of the model's exits {names}")
    o = np.lexsort((time, pidx))  # stable: ties keep row order (and are rejected below)
    pidx, time, ev_from, ev_to, ev_name = pidx[o], time[o], ev_from[o], ev_to[o], ev_name[o]

    # ---- sojourns: patient i owns positions entry[i] .. entry[i] + count[i]
    count = np.bincount(pidx, minlength=n)
    entry = np.arange(n) + np.searchsorted(pidx, np.arange(n), side="left")
    ev_pos = np.arange(n_ev) + pidx + 1  # the sojourn each event starts
    n_soj = n + n_ev
    soj_state = np.empty(n_soj, dtype=np.intp)
    soj_start = np.empty(n_soj, dtype=np.float64)
    soj_state[entry], soj_start[entry] = initial, 0.0
    soj_state[ev_pos], soj_start[ev_pos] = ev_to, time
    soj_patient = np.repeat(np.arange(n), count + 1)
    soj_stop = np.empty(n_soj, dtype=np.float64)
    soj_stop[:-1] = soj_start[1:]
    last = entry + count
    soj_stop[last] = exit_time

    def fail(j: int, rule: str, column: str, value: Any) -> ExportError:
        move = (f"patient {int(p_id[pidx[j]])} (strategy {strategies[p_strat[pidx[j]]]!r}), "
                f"move {names[ev_name[j]]!r} at time {float(time[j])!r}")
        return ExportError(f"events: {move}: {rule}", key=("events", column), value=value, rule=f"{move}: {rule}")

    prev_start = soj_start[ev_pos - 1]
    not_after = time <= prev_start
    if not_after.any():
        j = int(np.flatnonzero(not_after)[0])
        raise fail(j, f"must come strictly after the previous move or entry (time {float(prev_start[j])!r}); "
                      "a sojourn of zero length has nobody at risk", "time", float(time[j]))
    late = time > exit_time[pidx]
    if late.any():
        j = int(np.flatnonzero(late)[0])
        raise fail(j, f"is after the patient's exit_time {float(exit_time[pidx[j]])!r}", "time", float(time[j]))
    here = soj_state[ev_pos - 1]
    wrong_from = ev_from != here
    if wrong_from.any():
        j = int(np.flatnonzero(wrong_from)[0])
        raise fail(j, f"from_state {states[ev_from[j]]!r} is not the state the patient is in ({states[here[j]]!r})",
                   "from_state", states[ev_from[j]])
    n_exits, exit_name, exit_target, slot_of = _exit_tables(model)
    slot = slot_of[ev_from, ev_name]
    if (slot < 0).any():
        j = int(np.flatnonzero(slot < 0)[0])
        raise fail(j, f"is not an exit of state {states[ev_from[j]]!r}; its exits are "
                      f"{model.exits_of(states[ev_from[j]])}", "transition", names[ev_name[j]])
    wrong_to = exit_target[ev_from, slot] != ev_to
    if wrong_to.any():
        j = int(np.flatnonzero(wrong_to)[0])
        raise fail(j, f"to_state {states[ev_to[j]]!r} is not the target of this exit "
                      f"({states[exit_target[ev_from[j], slot[j]]]!r})", "to_state", states[ev_to[j]])
    end_state = soj_state[last]
    if "final_state" in patients.columns:
        final = _state_codes(patients, "patients", "final_state", states)[p_order]
        bad = final != end_state
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            rule = f"must agree with the log, whose moves for patient {int(p_id[i])} end in {states[end_state[i]]!r}"
            raise ExportError(f"patients['final_state']: {states[final[i]]!r} for patient {int(p_id[i])} "
                              f"contradicts the log, whose moves end in {states[end_state[i]]!r}",
                              key=("patients", "final_state"), value=states[final[i]], rule=rule)
    if "exit_reason" in patients.columns:
        code = label_codes(patients["exit_reason"], ("absorbed", "censored"))[p_order]
        absorbed = absorbing[end_state]
        bad = ((code == 0) != absorbed) | ((code == 0) & (soj_start[last] != exit_time))
        bad |= code < 0
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            reason = patients["exit_reason"].to_numpy()[p_order]
            log = (f"last state {states[end_state[i]]!r} from time {float(soj_start[last[i]])!r}, "
                   f"exit_time {float(exit_time[i])!r}")
            meaning = ("'absorbed' means a move into an absorbing state at exit_time, 'censored' means follow-up "
                       "ended in a non-absorbing state")
            raise ExportError(f"patients['exit_reason']: {reason[i]!r} for patient {int(p_id[i])} contradicts the "
                              f"log ({log}); {meaning}", key=("patients", "exit_reason"), value=reason[i],
                              rule=f"must agree with the log of patient {int(p_id[i])} ({log}); {meaning}")

    # ---- expand: one row per kept sojourn per exit of its state
    end_slot = np.full(n_soj, -1, dtype=np.intp)
    end_slot[ev_pos - 1] = slot
    keep = ~absorbing[soj_state] & ((soj_stop > soj_start) | (end_slot >= 0))
    ks = np.flatnonzero(keep)
    width = n_exits[soj_state[ks]]
    rows = np.repeat(ks, width)
    first = np.cumsum(width) - width
    row_slot = np.arange(rows.size) - np.repeat(first, width)
    row_state = soj_state[rows]
    row_patient = soj_patient[rows]
    return pd.DataFrame({
        "strategy": pd.Categorical.from_codes(p_strat[row_patient], categories=strategies),
        "patient": p_id[row_patient],
        "from_state": pd.Categorical.from_codes(row_state, categories=states),
        "to_state": pd.Categorical.from_codes(exit_target[row_state, row_slot], categories=states),
        "transition": pd.Categorical.from_codes(exit_name[row_state, row_slot], categories=names),
        "start": soj_start[rows],
        "stop": soj_stop[rows],
        "status": (end_slot[rows] == row_slot).astype(np.int8),
    }, copy=False)
