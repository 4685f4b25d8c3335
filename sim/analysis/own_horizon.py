"""Population curves on the time-since-entry scale to the last horizon, each patient followed to their
own horizon (docs/methods.md, 'Curves to the last horizon').

With a horizon in attained age and different entry ages, patients leave follow-up at different times
since entry, at an administrative end known in advance (their own horizon: non-informative by
construction, but dependent on entry age). Kaplan-Meier and Aalen-Johansen then estimate the curves
of the younger entrants only, and what the older entrants would have done past their horizon (beyond
the attained age the model covers) is never observed, so it cannot be estimated. These functions
estimate what is identified: the population-averaged state at ``min(t, own horizon)``,

    P_j(t) = (1/n) sum_i 1{X_i(min(t, tau_i)) = j},

each patient past their horizon counting in the state they occupied when their follow-up ended (for
an absorbing state, where they would be anyway). Every patient contributes at every t, so it is a
plain mean of independent indicators: unbiased, with the binomial standard error
sqrt(P (1 - P) / n). It equals the Kaplan-Meier and Aalen-Johansen estimates up to the earliest
horizon (nobody censored yet), and it is the quantity the exact solution and the cycle-based traces
report past each stratum's horizon (:func:`sim.reference.exact_outcomes_and_occupancy`,
``CohortTrace.table``).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from ._event_log import _check_times, _prepare_cohort, _prepare_log, _sorted_by_state

__all__ = ["occupancy_to_own_horizon", "survival_to_own_horizon"]


def occupancy_to_own_horizon(events: pd.DataFrame, patients: pd.DataFrame, states: Sequence[str],
                             times: ArrayLike, strategy: str | None = None) -> pd.DataFrame:
    """Share of patients in each state at ``min(t, own horizon)``, with binomial standard errors.

    Parameters
    ----------
    events, patients : pandas.DataFrame
        Event log and patient table (the contract in :mod:`sim.analysis._event_log`).
    states : sequence of str
        Every state of the model, in reporting order.
    times : array_like
        Times since entry (>= 0; any, including past every horizon). Output follows their order.
    strategy : str or None
        Strategy to analyse; ``None`` when the tables hold one strategy.

    Returns
    -------
    pandas.DataFrame
        Long format as :func:`sim.analysis.state_occupancy`: ``time``, ``state`` (Categorical in
        ``states`` order), ``probability``, ``std_error``.

    Notes
    -----
    P_j(t) = (n_j(0) + #entries into j at or before t - #exits from j at or before t) / n: the
    simulation stops each history at its horizon, so no move is counted after it and the patient
    stays in their last state. std_error = sqrt(P_j (1 - P_j) / n), exact for independent patients.
    """
    log = _prepare_log(events, patients, states, strategy)
    t = _check_times(times)
    S, n = len(log.states), log.n
    entries = _sorted_by_state(log.ev_time, log.ev_to, S)
    exits = _sorted_by_state(log.ev_time, log.ev_from, S)
    n0 = np.bincount(log.initial, minlength=S)
    p = np.empty((t.size, S))
    for j in range(S):
        p[:, j] = (n0[j] + np.searchsorted(entries[j], t, side="right") - np.searchsorted(exits[j], t, side="right")) / n
    se = np.sqrt(p * (1.0 - p) / n)
    return pd.DataFrame({
        "time": np.repeat(t, S),
        "state": pd.Categorical.from_codes(np.tile(np.arange(S), t.size), categories=list(log.states)),
        "probability": p.ravel(),
        "std_error": se.ravel(),
    })


def survival_to_own_horizon(patients: pd.DataFrame, strategy: str | None = None) -> pd.DataFrame:
    """Probability of not being absorbed by ``min(t, own horizon)``, at each absorption time.

    Parameters
    ----------
    patients : pandas.DataFrame
        Patient table (columns ``strategy``, ``patient``, ``exit_time``, ``exit_reason``).
    strategy : str or None
        Strategy to analyse; ``None`` when the table holds one strategy.

    Returns
    -------
    pandas.DataFrame
        Columns ``time`` (0, then each distinct absorption time), ``events`` (absorptions at time),
        ``survival`` = 1 - (absorptions at or before time) / n, ``std_error`` =
        sqrt(survival (1 - survival) / n): a right-continuous step function, the same columns as
        :func:`sim.analysis.kaplan_meier` but ``at_risk``. Up to the earliest horizon it equals
        Kaplan-Meier (to rounding).
    """
    c = _prepare_cohort(patients, strategy)
    absorbed = np.sort(c.exit_time[~c.censored])
    times, events = np.unique(absorbed, return_counts=True)
    if times.size == 0 or times[0] > 0.0:
        times = np.concatenate(([0.0], times))
        events = np.concatenate(([0], events))
    survival = 1.0 - np.cumsum(events) / c.n
    survival = np.clip(survival, 0.0, 1.0)
    return pd.DataFrame({"time": times, "events": events.astype(np.int64), "survival": survival,
                         "std_error": np.sqrt(survival * (1.0 - survival) / c.n)})
