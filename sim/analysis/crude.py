"""Crude rates (events per person-year at risk) and crude risks (proportion with the event by a
time) from a simulated event log, with Poisson and binomial standard errors (docs/methods.md,
'Rates, risks and units')."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ._event_log import (_EVENT_COLUMNS, _PATIENT_COLUMNS, _check_time, _prepare_cohort, _prepare_log,
                         _require_columns, _state_codes)
from .time_in_state import _sojourns

__all__ = ["crude_rate", "crude_risk"]


def crude_rate(events: pd.DataFrame, patients: pd.DataFrame, transition: str, states: Sequence[str],
               strategy: str | None = None, from_state: str | Sequence[str] | None = None) -> dict[str, float | int]:
    """Events of one transition per person-year at risk in its source state(s).

    Parameters
    ----------
    events, patients : pandas.DataFrame
        Event log and patient table (the contract in :mod:`sim.analysis._event_log`).
    transition : str
        Transition name as in ``events['transition']``.
    states : sequence of str
        Every state of the model.
    strategy : str or None
        Strategy to analyse; ``None`` when the tables hold one strategy.
    from_state : str, sequence of str or None
        State(s) in which patients are at risk of ``transition``. ``None``: the source states of
        its moves in the log; required when the transition never happens in the log, and advised
        for a name (e.g. background death) that leaves a state where it may not have been seen.

    Returns
    -------
    dict
        ``events`` d, ``person_years`` PY (undiscounted time in the source states), ``rate`` = d / PY,
        ``std_error`` = sqrt(d) / PY (Poisson).

    Raises
    ------
    ValueError
        Unknown transition or state, no person-time at risk, plus the checks on the tables.

    Notes
    -----
    For a constant hazard r the ratio d / PY is its maximum likelihood estimate (docs/methods.md,
    'Rates, risks and units': rate = events / person-time at risk).
    """
    log = _prepare_log(events, patients, states, strategy)
    if not isinstance(transition, str):
        raise TypeError(f"transition: expected a transition name (str), got {transition!r}")
    moves = log.moves_of(transition)
    if from_state is None:
        if not moves.any():
            seen = sorted(set(log.kinds["transition"]))
            raise ValueError(f"transition: {transition!r} never happens in the log (transitions seen: {seen}); "
                             "pass from_state= to give the state(s) at risk")
        sources = np.unique(log.ev_from[moves])
    else:
        names = [from_state] if isinstance(from_state, str) else list(from_state)
        sources = np.unique(_state_codes(pd.Series(names, dtype=object), log.states, "from_state"))
        outside = moves & ~np.isin(log.ev_from, sources)
        if outside.any():
            raise ValueError(f"from_state: {names} is invalid; {transition!r} also leaves "
                             f"{log.states[log.ev_from[outside][0]]!r} in the log")
    patient, state, start, end = _sojourns(log)
    py = float((end - start)[np.isin(state, sources)].sum())
    if py <= 0.0:
        raise ValueError(f"transition: {transition!r} has no person-time at risk in "
                         f"{[log.states[j] for j in sources]}; a rate needs person-years > 0")
    d = int(moves.sum())
    return {"events": d, "person_years": py, "rate": d / py, "std_error": float(np.sqrt(d)) / py}


def crude_risk(patients: pd.DataFrame, by_time: float, events: pd.DataFrame | None = None,
               transition: str | None = None, strategy: str | None = None) -> dict[str, float | int]:
    """Proportion of all patients with the event by ``by_time``, with binomial standard error.

    Parameters
    ----------
    patients : pandas.DataFrame
        Patient table.
    by_time : float
        Time since entry (>= 0). Every patient must be followed to it: absorbed (at any time) or
        exit_time >= by_time.
    events : pandas.DataFrame or None
        Event log; required with ``transition``.
    transition : str or None
        ``None``: the event is absorption. Otherwise the first occurrence of this transition name.
    strategy : str or None
        Strategy to analyse; ``None`` when the tables hold one strategy.

    Returns
    -------
    dict
        ``events`` d, ``n`` N, ``risk`` = d / N, ``std_error`` = sqrt(risk (1 - risk) / N).

    Raises
    ------
    ValueError
        A patient censored before ``by_time`` (use :func:`kaplan_meier` or
        :func:`cumulative_incidence` then), bad ``by_time``, ``transition`` without ``events``.

    Notes
    -----
    docs/methods.md, 'Rates, risks and units': risk = events / people at risk over a stated period. A patient absorbed
    before ``by_time`` without the transition counts as a non-event (absorption is final).
    """
    t = _check_time(by_time, "by_time")
    if transition is None:
        c = _prepare_cohort(patients, strategy)
        first = np.where(c.censored, np.inf, c.exit_time)
    else:
        if events is None:
            raise ValueError(f"events: got None with transition={transition!r}; pass the event log")
        _require_columns(patients, "patients", _PATIENT_COLUMNS)
        _require_columns(events, "events", _EVENT_COLUMNS)
        states = list(dict.fromkeys(
            [str(s) for col in ("initial_state", "final_state") for s in patients[col].dropna().unique()]
            + [str(s) for col in ("from_state", "to_state") for s in events[col].dropna().unique()]))
        log = _prepare_log(events, patients, states, strategy)
        c = log.cohort
        moves = np.flatnonzero(log.moves_of(transition))  # sorted by patient, then time
        who, at = np.unique(log.ev_patient[moves], return_index=True)
        first = np.full(c.n, np.inf)
        first[who] = log.ev_time[moves[at]]
    lost = c.censored & (c.exit_time < t)
    if lost.any():
        raise ValueError(f"by_time: {t!r} is invalid; {int(lost.sum())} patient(s) were censored before it "
                         f"(earliest at {float(c.exit_time[lost].min())!r}) and crude_risk needs everyone followed to "
                         "by_time (use kaplan_meier or cumulative_incidence instead)")
    d = int((first <= t).sum())
    risk = d / c.n
    return {"events": d, "n": c.n, "risk": risk, "std_error": float(np.sqrt(risk * (1.0 - risk) / c.n))}
