"""Horizon-restricted means from a simulated cohort: restricted mean survival and (discounted)
time in each state, per patient and on average, with Monte Carlo standard errors.

The horizon is part of these estimands (each patient's exit time is min(absorption, horizon)), so
they need no assumption about censoring, unlike the Kaplan-Meier and Aalen-Johansen estimates.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ._event_log import _Log, _prepare_cohort, _prepare_log

__all__ = ["restricted_mean_survival", "per_patient_time_in_states", "time_in_states"]


def _mean_se(x: NDArray[np.float64]) -> tuple[float, float]:
    """Sample mean and its Monte Carlo standard error s / sqrt(N) (docs/methods.md, 'Estimators')."""
    n = x.shape[0]
    mean = x.mean(axis=0)
    if n < 2:
        return mean, np.full_like(mean, np.nan)
    s = np.sqrt(((x - mean) ** 2).sum(axis=0) / (n - 1))
    return mean, s / np.sqrt(n)


def restricted_mean_survival(patients: pd.DataFrame, strategy: str | None = None) -> dict[str, float | int]:
    """Mean time alive to the horizon (life expectancy restricted to each patient's horizon).

    Parameters
    ----------
    patients : pandas.DataFrame
        Patient table (columns ``strategy``, ``patient``, ``exit_time``, ``exit_reason``).
    strategy : str or None
        Strategy to analyse; ``None`` when the table holds one strategy.

    Returns
    -------
    dict
        ``mean`` = (1/N) sum_i exit_time_i, ``std_error`` = s / sqrt(N) (Monte Carlo standard error,
        docs/methods.md, 'Estimators'; NaN for N = 1), ``n`` = N.

    Notes
    -----
    exit_time is min(T_i, h_i) with T_i the absorption time and h_i the patient's horizon, so the
    mean estimates E min(T, h): the horizon is part of the estimand, and no assumption about
    censoring is needed. For a fixed horizon h it is the restricted mean survival time
    integral_0^h S(t) dt.
    """
    c = _prepare_cohort(patients, strategy)
    mean, se = _mean_se(c.exit_time)
    return {"mean": float(mean), "std_error": float(se), "n": c.n}


def _sojourns(log: _Log) -> tuple[NDArray[np.intp], NDArray[np.intp], NDArray[np.float64], NDArray[np.float64]]:
    """(patient index, state, start, end) of every sojourn: entry or move to the next move or exit."""
    n = log.n
    patient = np.concatenate((np.arange(n), log.ev_patient))
    start = np.concatenate((np.zeros(n), log.ev_time))
    state = np.concatenate((log.initial, log.ev_to))
    o = np.argsort(patient, kind="stable")  # entry row first, then the (time-sorted) moves
    patient, start, state = patient[o], start[o], state[o]
    end = np.empty_like(start)
    end[:-1] = start[1:]
    last = np.ones(start.size, dtype=bool)
    last[:-1] = patient[1:] != patient[:-1]
    end[last] = log.cohort.exit_time[patient[last]]
    return patient, state, start, end


def _check_rate(discount_rate: float) -> float:
    try:
        d = float(discount_rate)
    except (TypeError, ValueError):
        raise ValueError(f"discount_rate: {discount_rate!r} is invalid; expected an annual rate such as 0.035") from None
    if not np.isfinite(d) or d < 0:
        raise ValueError(f"discount_rate: {d!r} is invalid; must be finite and >= 0 (annual rate)")
    return d


def _discounted_length(start: NDArray[np.float64], end: NDArray[np.float64], discount_rate: float
                       ) -> NDArray[np.float64]:
    """integral_start^end exp(-delta t) dt = exp(-delta t0) (1 - exp(-delta (t1 - t0))) / delta."""
    if discount_rate == 0.0:
        return end - start
    delta = np.log1p(discount_rate)
    return np.exp(-delta * start) * -np.expm1(-delta * (end - start)) / delta


def per_patient_time_in_states(events: pd.DataFrame, patients: pd.DataFrame, states: Sequence[str],
                               strategy: str | None = None, discount_rate: float = 0.0) -> pd.DataFrame:
    """Time each patient spends in each state up to exit_time, optionally discounted.

    Parameters
    ----------
    events, patients : pandas.DataFrame
        Event log and patient table (the contract in :mod:`sim.analysis._event_log`).
    states : sequence of str
        Every state of the model; the column order of the result.
    strategy : str or None
        Strategy to analyse; ``None`` when the tables hold one strategy.
    discount_rate : float
        Annual discount rate d >= 0 (e.g. 0.035); 0 for undiscounted years.

    Returns
    -------
    pandas.DataFrame
        Index ``patient`` (sorted ids), one float column per state (columns named ``state``).
        Multiply by a per-state vector of yearly costs or utilities for per-patient costs or QALYs.

    Notes
    -----
    Each sojourn runs from entry (t = 0) or a move to the patient's next move or exit_time, exactly
    as logged. Undiscounted it contributes t1 - t0; with continuous discounting at
    delta = ln(1 + d) it contributes (docs/methods.md, 'Outcomes and increments')

        integral_{t0}^{t1} exp(-delta t) dt = (exp(-delta t0) - exp(-delta t1)) / delta,

    evaluated as exp(-delta t0) (-expm1(-delta (t1 - t0))) / delta to keep precision for short
    sojourns. Undiscounted rows sum to exit_time.
    """
    log = _prepare_log(events, patients, states, strategy)
    return _per_patient(log, _check_rate(discount_rate))


def _per_patient(log: _Log, discount_rate: float) -> pd.DataFrame:
    S = len(log.states)
    patient, state, start, end = _sojourns(log)
    length = _discounted_length(start, end, discount_rate)
    table = np.bincount(patient * S + state, weights=length, minlength=log.n * S).reshape(log.n, S)
    return pd.DataFrame(table, index=pd.Index(log.cohort.patient, name="patient"),
                        columns=pd.Index(list(log.states), name="state"))


def time_in_states(events: pd.DataFrame, patients: pd.DataFrame, states: Sequence[str],
                   strategy: str | None = None, discount_rate: float = 0.0) -> pd.DataFrame:
    """Mean (optionally discounted) time in each state per patient, with Monte Carlo standard errors.

    Parameters
    ----------
    events, patients, states, strategy, discount_rate
        As :func:`per_patient_time_in_states`.

    Returns
    -------
    pandas.DataFrame
        Columns ``state`` (Categorical in ``states`` order), ``mean``, ``std_error`` = s / sqrt(N)
        (docs/methods.md, 'Estimators'; NaN for N = 1).

    Notes
    -----
    The column means of :func:`per_patient_time_in_states`. Like :func:`restricted_mean_survival`,
    the horizon is part of the estimand; no censoring assumption is needed.
    """
    log = _prepare_log(events, patients, states, strategy)
    table = _per_patient(log, _check_rate(discount_rate)).to_numpy()
    mean, se = _mean_se(table)
    return pd.DataFrame({"state": pd.Categorical(list(log.states), categories=list(log.states)),
                         "mean": mean, "std_error": se})
