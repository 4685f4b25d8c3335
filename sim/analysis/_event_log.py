"""The event log as the estimators receive it: the input contract, checked once per call, and the
validated arrays (:class:`_Log`, :class:`_Cohort`) that :mod:`.kaplan_meier`,
:mod:`.aalen_johansen`, :mod:`.time_in_state`, :mod:`.crude` and :mod:`.outcomes` compute on.

Input contract (produced by :mod:`sim.engine`)
------------------------------------------------
``events``: one row per transition that happened, with columns ``strategy``, ``patient`` (int),
``time`` (years since entry), ``from_state``, ``to_state``, ``transition``. Other columns (e.g.
``age``) are ignored. Row order does not matter: rows are sorted here by patient and time (ties kept
in row order).

``patients``: one row per patient per strategy, with columns ``strategy``, ``patient``,
``initial_state``, ``exit_time`` (time since entry of absorption, or of censoring at the patient's
horizon), ``final_state`` and ``exit_reason`` (``"absorbed"`` or ``"censored"``). Other columns are
ignored.

Every estimator takes ``strategy``: the strategy to analyse, or ``None`` when the tables hold exactly
one. The log is checked once per call: a move must leave the state the patient is in, the final
state must be where the moves lead, event times lie in ``[0, exit_time]``, and an absorbed patient's
last move is at ``exit_time``.

Everything is vectorised over patients and events (sorting, ``np.searchsorted``, ``np.bincount``,
cumulative sums).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from .columns import label_codes, patient_ids, time_column

__all__ = ["ABSORBED", "CENSORED"]

ABSORBED = "absorbed"
CENSORED = "censored"

_PATIENT_COLUMNS = ("strategy", "patient", "initial_state", "exit_time", "final_state", "exit_reason")
_EVENT_COLUMNS = ("strategy", "patient", "time", "from_state", "to_state", "transition")


# --------------------------------------------------------------------------- validated inputs
@dataclass(frozen=True)
class _Cohort:
    """Patients of one strategy, sorted by patient id."""

    strategy: str
    patient: NDArray[np.int64]
    exit_time: NDArray[np.float64]
    censored: NDArray[np.bool_]

    @property
    def n(self) -> int:
        return int(self.patient.size)


@dataclass(frozen=True)
class _Log:
    """Validated event log of one strategy. Events sorted by patient, then time.

    State codes index ``states``; a transition is the triple (name, from, to), since one name (e.g.
    background death) may leave several states; ``ev_kind`` indexes ``kinds``.
    """

    cohort: _Cohort
    states: tuple[str, ...]
    initial: NDArray[np.intp]
    final: NDArray[np.intp]
    ev_patient: NDArray[np.intp]
    ev_time: NDArray[np.float64]
    ev_from: NDArray[np.intp]
    ev_to: NDArray[np.intp]
    ev_transition: NDArray[np.intp]  # index into ``transitions``
    transitions: tuple[str, ...]
    ev_kind: NDArray[np.intp]
    kinds: pd.DataFrame  # columns transition, from_state, to_state (codes), one row per kind

    @property
    def n(self) -> int:
        return self.cohort.n

    def moves_of(self, transition: str) -> NDArray[np.bool_]:
        """Mask of the events that are moves through ``transition`` (by name)."""
        if transition not in self.transitions:
            return np.zeros(self.ev_time.size, dtype=bool)
        return self.ev_transition == self.transitions.index(transition)


def _require_columns(df: pd.DataFrame, name: str, columns: Sequence[str]) -> None:
    if not isinstance(df, pd.DataFrame):
        raise TypeError(f"{name}: expected a pandas DataFrame, got {type(df).__name__}")
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise ValueError(f"{name}: missing column(s) {missing}; the event-log contract requires {list(columns)}")


def _strategies_in(df: pd.DataFrame) -> set[str]:
    return {str(s) for s in df["strategy"].dropna().unique()}


def _select(strategy: str | None, tables: dict[str, pd.DataFrame]) -> tuple[str, dict[str, pd.DataFrame]]:
    """Resolve ``strategy`` over all tables and return each table's rows for it."""
    found = set().union(*(_strategies_in(df) for df in tables.values()))
    if strategy is None:
        if len(found) > 1:
            raise ValueError(
                f"strategy: got None but the tables hold {len(found)} strategies {sorted(found)}; "
                "pass strategy=<one of them>")
        if not found:
            raise ValueError("patients: no rows; an estimate needs at least one patient")
        strategy = found.pop()
    elif strategy not in found:
        raise ValueError(f"strategy: {strategy!r} is not in the tables; strategies present: {sorted(found)}")
    out = {}
    for name, df in tables.items():
        mask = label_codes(df["strategy"], (strategy,)) == 0
        out[name] = df if mask.all() else df.loc[mask]
    if len(out["patients"]) == 0:
        raise ValueError(f"patients: no rows for strategy {strategy!r}; an estimate needs at least one patient")
    return strategy, out


def _cohort(patients: pd.DataFrame, strategy: str) -> _Cohort:
    ids = patient_ids(patients, "patients")
    exit_time = time_column(patients, "patients", "exit_time")
    reason = label_codes(patients["exit_reason"], (ABSORBED, CENSORED))
    censored = reason == 1
    bad = reason < 0
    if bad.any():
        value = patients["exit_reason"].iloc[int(np.argmax(bad))]
        raise ValueError(f"patients['exit_reason']: value {value!r} is invalid; must be {ABSORBED!r} or {CENSORED!r}")
    order = np.argsort(ids, kind="stable")
    ids = ids[order]
    dup = ids[1:] == ids[:-1]
    if dup.any():
        raise ValueError(f"patients['patient']: id {int(ids[1:][dup][0])} appears twice in strategy "
                         f"{strategy!r}; ids must be unique within a strategy")
    return _Cohort(strategy, ids, exit_time[order], censored[order])


def _prepare_cohort(patients: pd.DataFrame, strategy: str | None) -> _Cohort:
    _require_columns(patients, "patients", ("strategy", "patient", "exit_time", "exit_reason"))
    name, t = _select(strategy, {"patients": patients})
    return _cohort(t["patients"], name)


def _check_states(states: Sequence[str]) -> tuple[str, ...]:
    try:
        if isinstance(states, str):
            raise TypeError
        out = tuple(str(s) for s in states)
    except TypeError:
        raise TypeError(f"states: expected a sequence of state names, got {states!r}") from None
    if not out:
        raise ValueError("states: got an empty sequence; list every state of the model")
    if len(set(out)) != len(out):
        raise ValueError(f"states: {list(out)} has duplicates; state names must be unique")
    return out


def _state_codes(values: pd.Series, states: tuple[str, ...], where: str) -> NDArray[np.intp]:
    codes = label_codes(values, states)
    bad = codes < 0
    if bad.any():
        raise ValueError(f"{where}: state {values.iloc[int(np.argmax(bad))]!r} is not in states={list(states)}; "
                         "states must list every state in the log")
    return codes


def _prepare_log(events: pd.DataFrame, patients: pd.DataFrame, states: Sequence[str],
                 strategy: str | None) -> _Log:
    """Validate the tables for one strategy and return them as arrays."""
    states_t = _check_states(states)
    _require_columns(patients, "patients", _PATIENT_COLUMNS)
    _require_columns(events, "events", _EVENT_COLUMNS)
    name, t = _select(strategy, {"patients": patients, "events": events})
    pt, ev = t["patients"], t["events"]
    cohort = _cohort(pt, name)
    order = np.argsort(pt["patient"].to_numpy(), kind="stable")
    initial = _state_codes(pt["initial_state"], states_t, "patients['initial_state']")[order]
    final = _state_codes(pt["final_state"], states_t, "patients['final_state']")[order]

    ev_ids = patient_ids(ev, "events")
    pidx = np.searchsorted(cohort.patient, ev_ids)
    known = (pidx < cohort.n) & (cohort.patient[np.minimum(pidx, cohort.n - 1)] == ev_ids)
    if not known.all():
        raise ValueError(f"events['patient']: id {int(ev_ids[~known][0])} has no row in patients for strategy "
                         f"{name!r}; every event must belong to a listed patient")
    time = time_column(ev, "events", "time")
    ev_from = _state_codes(ev["from_state"], states_t, "events['from_state']")
    ev_to = _state_codes(ev["to_state"], states_t, "events['to_state']")
    # transition names in the order of the categories (the model's order), else sorted
    dtype = ev["transition"].dtype
    names = (tuple(str(c) for c in dtype.categories) if isinstance(dtype, pd.CategoricalDtype)
             else tuple(sorted({str(v) for v in ev["transition"].dropna().unique()})))
    ev_tr = label_codes(ev["transition"], names)
    if (ev_tr < 0).any():
        raise ValueError("events['transition']: a value is missing; every move needs a transition name")
    step = np.diff(pidx)
    if not np.all((step > 0) | ((step == 0) & (time[1:] >= time[:-1]))):  # engine logs come sorted already
        o = np.lexsort((np.arange(time.size), time, pidx))
        pidx, time, ev_from, ev_to, ev_tr = pidx[o], time[o], ev_from[o], ev_to[o], ev_tr[o]

    late = time > cohort.exit_time[pidx]
    if late.any():
        i = int(np.flatnonzero(late)[0])
        raise ValueError(f"events['time']: {float(time[i])!r} for patient {int(cohort.patient[pidx[i]])} is after its "
                         f"exit_time {float(cohort.exit_time[pidx[i]])!r}; events must lie in [0, exit_time]")
    first = np.ones(time.size, dtype=bool)
    first[1:] = pidx[1:] != pidx[:-1]
    same = ~first[1:] & (time[1:] == time[:-1])
    if same.any():
        i = int(np.flatnonzero(same)[0])
        raise ValueError(f"events['time']: patient {int(cohort.patient[pidx[i]])} has two moves at {float(time[i])!r}; "
                         "a patient's move times must be strictly increasing (a zero-length stay has no risk set)")
    previous = np.where(first, initial[pidx], np.roll(ev_to, 1))
    broken = ev_from != previous
    if broken.any():
        i = int(np.flatnonzero(broken)[0])
        raise ValueError(
            f"events['from_state']: {states_t[ev_from[i]]!r} at time {float(time[i])!r} for patient "
            f"{int(cohort.patient[pidx[i]])} is invalid; a move must leave the state the patient is in "
            f"({states_t[previous[i]]!r})")
    last = np.ones(time.size, dtype=bool)
    last[:-1] = pidx[1:] != pidx[:-1]
    end_state = initial.copy()
    end_state[pidx[last]] = ev_to[last]
    wrong = end_state != final
    if wrong.any():
        i = int(np.flatnonzero(wrong)[0])
        raise ValueError(f"patients['final_state']: {states_t[final[i]]!r} for patient {int(cohort.patient[i])} "
                         f"is invalid; the patient's moves end in {states_t[end_state[i]]!r}")
    last_time = np.full(cohort.n, np.nan)
    last_time[pidx[last]] = time[last]
    unmatched = ~cohort.censored & ~(last_time == cohort.exit_time)
    if unmatched.any():
        i = int(np.flatnonzero(unmatched)[0])
        raise ValueError(f"patients['exit_time']: {float(cohort.exit_time[i])!r} for absorbed patient "
                         f"{int(cohort.patient[i])} is invalid; it must equal the time of the patient's last "
                         f"move (found {float(last_time[i])!r})")

    # kinds = distinct (transition, from, to) triples, ordered by transition name order, then states
    n_st = len(states_t)
    key = (ev_tr * n_st + ev_from) * n_st + ev_to
    present = np.bincount(key, minlength=max(len(names), 1) * n_st * n_st) > 0
    ev_kind = (np.cumsum(present) - 1)[key].astype(np.intp)
    kind_key = np.flatnonzero(present)
    kinds = pd.DataFrame({"transition": [names[k] for k in kind_key // (n_st * n_st)],
                          "from_state": (kind_key // n_st) % n_st, "to_state": kind_key % n_st})
    return _Log(cohort, states_t, initial, final, pidx, time, ev_from, ev_to, ev_tr, names, ev_kind, kinds)


def _check_times(times: ArrayLike) -> NDArray[np.float64]:
    try:
        t = np.atleast_1d(np.asarray(times, dtype=np.float64))
    except (TypeError, ValueError):
        raise ValueError(f"times: {times!r} is invalid; expected a 1-D array of numbers") from None
    if t.ndim != 1 or t.size == 0:
        raise ValueError(f"times: shape {t.shape} is invalid; expected a non-empty 1-D array")
    bad = ~np.isfinite(t) | (t < 0)
    if bad.any():
        raise ValueError(f"times: value {float(t[bad][0])!r} is invalid; times must be finite and >= 0")
    return t


def _check_time(value: float, name: str) -> float:
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name}: {value!r} is invalid; expected a number") from None
    if not np.isfinite(x) or x < 0:
        raise ValueError(f"{name}: {x!r} is invalid; must be finite and >= 0")
    return x


def _sorted_by_state(values: NDArray[np.float64], codes: NDArray[np.intp], n_states: int
                     ) -> list[NDArray[np.float64]]:
    """For each code 0..n_states-1, the sorted ``values`` of the rows with that code."""
    return [np.sort(values[codes == j]) for j in range(n_states)]
