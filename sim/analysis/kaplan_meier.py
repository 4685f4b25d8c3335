"""Kaplan-Meier estimates on a simulated cohort: overall survival with Greenwood standard errors,
and the censoring distribution that weights the other estimators.

Censoring happens only at each patient's horizon. Kaplan-Meier (Kaplan & Meier 1958) is unbiased
for the whole cohort only when the horizon is independent of the process. A common time horizon is
(nobody is censored before it, and the estimate then equals plain proportions). A horizon in
attained age with different entry ages is not when hazards depend on age: past the earliest horizon
the risk set holds only the younger entrants.

References
----------
Kaplan EL, Meier P (1958). Nonparametric estimation from incomplete observations. JASA 53:457-481.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from ._event_log import _Cohort, _prepare_cohort

__all__ = ["kaplan_meier"]


def _exit_table(c: _Cohort) -> tuple[NDArray[np.float64], NDArray[np.int64], NDArray[np.int64],
                                      NDArray[np.int64]]:
    """Unique exit times with the number at risk just before, absorbed and censored at each."""
    times, inv = np.unique(c.exit_time, return_inverse=True)
    removed = np.bincount(inv, minlength=times.size)
    censored = np.bincount(inv, weights=c.censored, minlength=times.size).astype(np.int64)
    events = removed - censored
    at_risk = c.n - np.concatenate(([0], np.cumsum(removed)[:-1]))
    return times, at_risk, events, censored


def _censoring_survival_before(c: _Cohort, t: NDArray[np.float64]) -> NDArray[np.float64]:
    """Kaplan-Meier estimate of P(C >= t), the censoring distribution just before ``t``.

    Absorption censors the censoring time; at a tie, absorption comes first, so the risk set for
    censoring at s is R(s) - d(s). With this convention S_KM(t) K(t) = R(t+) / n exactly (Satten &
    Datta 2001, Am Stat 55:207-210, from memory).
    """
    times, at_risk, events, censored = _exit_table(c)
    risk_c = at_risk - events
    hazard = np.divide(censored, risk_c, out=np.zeros(times.size), where=censored > 0)
    k = np.concatenate(([1.0], np.cumprod(1.0 - hazard)))
    return k[np.searchsorted(times, t, side="left")]


def kaplan_meier(patients: pd.DataFrame, strategy: str | None = None) -> pd.DataFrame:
    """Kaplan-Meier estimate of overall survival (time to absorption) with Greenwood standard errors.

    Parameters
    ----------
    patients : pandas.DataFrame
        Patient table (columns ``strategy``, ``patient``, ``exit_time``, ``exit_reason``).
    strategy : str or None
        Strategy to analyse; ``None`` when the table holds one strategy.

    Returns
    -------
    pandas.DataFrame
        Columns ``time`` (0, then each distinct exit time), ``at_risk`` (patients with exit_time >=
        time), ``events`` (absorptions at time), ``survival``, ``std_error``.

    Raises
    ------
    ValueError
        Several strategies and ``strategy=None``; unknown strategy; bad exit times or reasons.

    Notes
    -----
    With d_i absorptions among Y_i at risk at the distinct times t_i (censoring at t_i counted at
    risk, i.e. events before censoring at ties):

        S(t) = prod_{t_i <= t} (1 - d_i / Y_i),
        Var S(t) = S(t)^2 sum_{t_i <= t} d_i / (Y_i (Y_i - d_i))      (Greenwood).

    Once S reaches 0 (all at risk absorbed) Greenwood's formula is 0 x inf; ``std_error`` is NaN
    there, as in ``scipy.stats.ecdf``. The first row is time 0 with survival 1 unless patients exit
    at time 0, in which case that row also holds their events.

    References
    ----------
    Kaplan & Meier 1958, JASA 53:457-481. Greenwood M (1926), Reports on Public Health and Medical
    Subjects 33 (from memory).
    """
    c = _prepare_cohort(patients, strategy)
    times, at_risk, events, _ = _exit_table(c)
    if times[0] > 0.0:
        times = np.concatenate(([0.0], times))
        at_risk = np.concatenate(([c.n], at_risk))
        events = np.concatenate(([0], events))
    survival = np.cumprod(1.0 - events / at_risk)
    alive = at_risk > events
    term = np.divide(events, at_risk * (at_risk - events), out=np.zeros(times.size), where=alive)
    dead_end = np.cumsum(~alive) > 0  # at or after the time all at risk were absorbed
    std_error = np.where(dead_end, np.nan, survival * np.sqrt(np.cumsum(term)))
    return pd.DataFrame({"time": times, "at_risk": at_risk.astype(np.int64), "events": events.astype(np.int64),
                         "survival": survival, "std_error": std_error})
