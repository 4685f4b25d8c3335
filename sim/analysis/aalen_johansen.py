"""Aalen-Johansen estimates on a simulated event log: state occupation probabilities and the
expected number of occurrences of each transition (cumulative incidence), with approximate
standard errors from the effective sample size of the censoring weights.

Censoring happens only at each patient's horizon. Aalen-Johansen (Aalen & Johansen 1978) is
unbiased for the whole cohort only when the horizon is independent of the process: a common time
horizon is (nobody is censored before it, and the estimates then equal plain proportions); a
horizon in attained age with different entry ages is not when hazards depend on age. The only loops
are over states, transitions, requested times, and blocks of :data:`BLOCK` event times in the
product integral.

References
----------
Aalen OO, Johansen S (1978). An empirical transition matrix for non-homogeneous Markov chains based on
censored observations. Scand J Stat 5:141-150.
Datta S, Satten GA (2001). Validity of the Aalen-Johansen estimators of stage occupation probabilities
and Nelson-Aalen estimators of integrated transition hazards for non-Markov models. Stat Probab Lett
55:403-411.
Putter H, Fiocco M, Geskus RB (2007). Tutorial in biostatistics: competing risks and multi-state
models. Stat Med 26(11):2389-2430.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from ._event_log import _check_times, _Cohort, _Log, _prepare_log, _sorted_by_state
from .kaplan_meier import _censoring_survival_before

__all__ = ["BLOCK", "state_occupancy", "cumulative_incidence"]

BLOCK = 4096
"""Event times per block in the Aalen-Johansen product integral (bounds memory to
``BLOCK * d**2`` floats, d = number of states plus counted transitions)."""


def _ordered_product(mats: NDArray[np.float64]) -> NDArray[np.float64]:
    """M_0 @ M_1 @ ... @ M_{L-1} by pairwise (tree) reduction: log2(L) vectorised rounds."""
    while mats.shape[0] > 1:
        odd = mats.shape[0] % 2
        head = mats[:-1] if odd else mats
        prod = head[0::2] @ head[1::2]
        mats = np.concatenate((prod, mats[-1:])) if odd else prod
    return mats[0]


def _aalen_johansen(log: _Log, times: NDArray[np.float64], counts: bool) -> NDArray[np.float64]:
    """Rows x(t) = [p_1..p_S, (c_1..c_K)] at sorted unique ``times`` (p occupancy, c expected counts).

    Before the first censoring time c0 the at-risk sets are complete and AJ is the empirical mean:
    p_j(t) = #(in j at t) / n, c_k(t) = #(moves k by t) / n. After it, x is propagated through the
    product integral x(t) = x(c0) prod_{c0 < s <= t} (I + dA(s)), augmented so that
    c_k(s) = c_k(s-) + p_j(s-) dN_k(s) / Y_j(s) for kind k leaving j.
    """
    S, K = len(log.states), (len(log.kinds) if counts else 0)
    n = log.n
    entries = _sorted_by_state(log.ev_time, log.ev_to, S)
    exits = _sorted_by_state(log.ev_time, log.ev_from, S)
    kind_times = _sorted_by_state(log.ev_time, log.ev_kind, K)
    n0 = np.bincount(log.initial, minlength=S)

    def empirical(t: NDArray[np.float64]) -> NDArray[np.float64]:
        x = np.empty((t.size, S + K))
        for j in range(S):
            x[:, j] = (n0[j] + np.searchsorted(entries[j], t, side="right")
                       - np.searchsorted(exits[j], t, side="right")) / n
        for k in range(K):
            x[:, S + k] = np.searchsorted(kind_times[k], t, side="right") / n
        return x

    cens = log.cohort.censored
    c0 = log.cohort.exit_time[cens].min() if cens.any() else np.inf
    early = times <= c0
    out = np.empty((times.size, S + K))
    out[early] = empirical(times[early])
    late = times[~early]
    if late.size == 0:
        return out

    # events in (c0, max(late)], in time order, with Y_j(s) just before each event time s
    sel = np.flatnonzero((log.ev_time > c0) & (log.ev_time <= late[-1]))
    sel = sel[np.argsort(log.ev_time[sel], kind="stable")]
    s, j_from, j_to = log.ev_time[sel], log.ev_from[sel], log.ev_to[sel]
    censored_at = _sorted_by_state(log.cohort.exit_time[cens], log.final[cens], S)
    y = np.empty(s.size)
    for j in range(S):
        m = j_from == j
        y[m] = (n0[j] + np.searchsorted(entries[j], s[m], side="left") - np.searchsorted(exits[j], s[m], side="left")
                - np.searchsorted(censored_at[j], s[m], side="left"))
    h = 1.0 / y  # Y >= 1: the moving patient is at risk (move times strictly increase per patient)
    u, loc = np.unique(s, return_inverse=True)
    start_of = np.searchsorted(loc, np.arange(u.size + 1))  # events of u[i]: start_of[i]:start_of[i+1]
    d = S + K
    cols = [j_to, j_from] + ([S + log.ev_kind[sel]] if counts else [])
    signs = [1.0, -1.0] + ([1.0] if counts else [])

    x = empirical(np.array([c0]))[0]
    pos = 0
    for qi, b in zip(np.flatnonzero(~early), np.searchsorted(u, late, side="right")):
        while pos < b:
            stop = min(pos + BLOCK, b)
            e0, e1 = start_of[pos], start_of[stop]
            row = ((loc[e0:e1] - pos) * d + j_from[e0:e1]) * d
            flat = np.concatenate([row + c[e0:e1] for c in cols])
            w = np.concatenate([sg * h[e0:e1] for sg in signs])
            mats = np.bincount(flat, weights=w, minlength=(stop - pos) * d * d).reshape(stop - pos, d, d)
            mats[:, np.arange(d), np.arange(d)] += 1.0
            x = x @ _ordered_product(mats)
            pos = stop
        out[qi] = x
    return out


def _effective_size(c: _Cohort, t: NDArray[np.float64], k_before: NDArray[np.float64]) -> NDArray[np.float64]:
    """Kish effective sample size (sum_i w_i)^2 / sum_i w_i^2 of the censoring weights at each t.

    A patient whose state at t is observed gets w_i = 1 / K(min(t, E_i)-) (E_i its exit time):
    1 / K(t-) if still followed at t (E_i >= t), 1 / K(E_i-) if absorbed before t; w_i = 0 if
    censored before t (Datta & Satten 2001 weighting). Equals n when nobody is censored before t.
    """
    absorbed_at = np.sort(c.exit_time[~c.censored])
    w = 1.0 / _censoring_survival_before(c, absorbed_at)
    before = np.searchsorted(absorbed_at, t, side="left")
    followed = c.n - np.searchsorted(np.sort(c.exit_time), t, side="left")
    s1 = np.concatenate(([0.0], np.cumsum(w)))[before] + followed / k_before
    s2 = np.concatenate(([0.0], np.cumsum(w**2)))[before] + followed / k_before**2
    return s1**2 / s2


def _unique_times(times: NDArray[np.float64], log: _Log) -> tuple[NDArray[np.float64], NDArray[np.intp],
                                                                  NDArray[np.float64]]:
    """Sorted unique times, the inverse map, and the effective sample size at each (_effective_size).

    Raises if a time lies beyond the end of follow-up (K(t-) = 0: every patient still in a transient
    state had been censored), where the estimators are not identified.
    """
    u, inv = np.unique(times, return_inverse=True)
    k_before = _censoring_survival_before(log.cohort, u)
    if (k_before <= 0.0).any():
        end = log.cohort.exit_time[log.cohort.censored].max()
        raise ValueError(f"times: {float(u[k_before <= 0][0])!r} is beyond the end of follow-up ({float(end)!r}, when the "
                         "last patient not absorbed was censored); times must be <= the end of follow-up")
    return u, inv.ravel(), _effective_size(log.cohort, u, k_before)


def state_occupancy(events: pd.DataFrame, patients: pd.DataFrame, states: Sequence[str], times: ArrayLike,
                    strategy: str | None = None) -> pd.DataFrame:
    """Aalen-Johansen state occupation probabilities p_j(t) with approximate standard errors.

    Parameters
    ----------
    events, patients : pandas.DataFrame
        Event log and patient table (the contract in :mod:`sim.analysis._event_log`).
    states : sequence of str
        Every state of the model, in reporting order.
    times : array_like
        Times since entry (>= 0, not beyond the end of follow-up). Output follows their order.
    strategy : str or None
        Strategy to analyse; ``None`` when the tables hold one strategy.

    Returns
    -------
    pandas.DataFrame
        Long format: ``time``, ``state`` (Categorical in ``states`` order), ``probability``,
        ``std_error``; one row per time and state.

    Raises
    ------
    ValueError
        Bad tables, a state missing from ``states``, bad times or times past the end of follow-up.

    Notes
    -----
    The estimator is the product integral (Aalen & Johansen 1978)

        p(t) = p(0) prod_{s <= t} (I + dA(s)),   dA_jk(s) = dN_jk(s) / Y_j(s),

    with dN_jk(s) the moves j -> k at s and Y_j(s) the patients in j under observation just before
    s. With no censoring before t it equals the proportion of patients in each state at t; it is
    computed as exactly that proportion there (count / n).

    It is *not* algebraically equal to the inverse-probability-of-censoring-weighted proportion
    (1/n) sum_i 1{X_i(t) = j, C_i > t} / K(t-) when censoring falls unevenly on several transient
    states (both are consistent under independent censoring, Datta & Satten 2001); equality holds for
    a single transient state (survival and competing risks).

    ``std_error`` = sqrt(p (1 - p) / n_eff): the binomial standard error with n_eff the Kish
    effective sample size (sum w)^2 / sum w^2 (Kish 1965, Survey Sampling, from memory) of the
    censoring weights w_i = 1 / K(min(t, E_i)-) of the patients whose state at t is observed (still
    followed at t, or absorbed before t), K the Kaplan-Meier estimate of the censoring distribution
    and E_i the exit time. Exact (n_eff = n) when nobody is censored before t. Otherwise it is an
    approximation, not the Greenwood-type variance of the product integral; it ignores the partial
    histories of patients censored before t, so it tends to be conservative (in a check with
    horizons uniform on 2-12 years, 300 replicates of 400 patients, it was 1.0-1.5 times the
    empirical standard deviation, the larger ratios where only ~10% were still followed).

    References
    ----------
    Aalen & Johansen 1978, Scand J Stat 5:141-150; Datta & Satten 2001, Stat Probab Lett 55:403-411.
    """
    log = _prepare_log(events, patients, states, strategy)
    t = _check_times(times)
    u, inv, n_eff = _unique_times(t, log)
    p = _aalen_johansen(log, u, counts=False)
    p = np.clip(p, 0.0, 1.0)  # round-off only: products of stochastic matrices stay in [0, 1]
    se = np.sqrt(p * (1.0 - p) / n_eff[:, None])
    S = len(log.states)
    return pd.DataFrame({
        "time": np.repeat(t, S),
        "state": pd.Categorical.from_codes(np.tile(np.arange(S), t.size), categories=list(log.states)),
        "probability": p[inv].ravel(),
        "std_error": se[inv].ravel(),
    })


def cumulative_incidence(events: pd.DataFrame, patients: pd.DataFrame, states: Sequence[str], times: ArrayLike,
                         strategy: str | None = None) -> pd.DataFrame:
    """Aalen-Johansen expected number of occurrences of each transition per patient by time t.

    Parameters
    ----------
    events, patients : pandas.DataFrame
        Event log and patient table (the contract in :mod:`sim.analysis._event_log`).
    states : sequence of str
        Every state of the model.
    times : array_like
        Times since entry (>= 0, not beyond the end of follow-up). Output follows their order.
    strategy : str or None
        Strategy to analyse; ``None`` when the tables hold one strategy.

    Returns
    -------
    pandas.DataFrame
        Long format: ``time``, ``transition``, ``from_state``, ``to_state``, ``value``,
        ``std_error``. One row per time and per (transition, from_state, to_state) seen in the log
        (a name that leaves several states, e.g. background death, gets one row per source state;
        add them for the total). Transitions that never happen in the log have no row.

    Raises
    ------
    ValueError
        As :func:`state_occupancy`.

    Notes
    -----
    For a move k from state j (Aalen & Johansen 1978):

        E N_k(t) = integral_0^t p_j(s-) dA_k(s) = sum_{s <= t} p_j(s-) dN_k(s) / Y_j(s),

    with p the Aalen-Johansen occupancy. When k can happen at most once per patient this is the
    cumulative incidence P(k has happened by t), e.g. the cause-specific cumulative incidence of a
    competing-risks exit. With no censoring before t it is the mean count per patient, computed
    exactly as count / n.

    ``std_error`` = sqrt(v / n_eff), n_eff the effective sample size of :func:`state_occupancy`, with
    v = value * r - value^2 an estimate of Var N_k(t) whose ratio r = E N^2 / E N is estimated by
    weighting each move of a patient's r-th occurrence by (2 r - 1) / K(s-) (N^2 jumps by 2r - 1).
    r = 1 for at-most-once moves, so v is then the binomial p (1 - p). Exact (population variance
    over patients / n) when nobody is censored before t; an approximation otherwise, conservative
    in the check described in :func:`state_occupancy` (up to ~1.8 times the empirical standard
    deviation for a recurrent move where only ~10% were still followed).

    References
    ----------
    Aalen & Johansen 1978, Scand J Stat 5:141-150; Putter, Fiocco & Geskus 2007, Stat Med
    26:2389-2430.
    """
    log = _prepare_log(events, patients, states, strategy)
    t = _check_times(times)
    u, inv, n_eff = _unique_times(t, log)
    S, K = len(log.states), len(log.kinds)
    value = _aalen_johansen(log, u, counts=True)[:, S:]

    # ratio r = E N^2 / E N from inverse-probability-of-censoring weighted moves
    k_at = _censoring_survival_before(log.cohort, log.ev_time)
    key = log.ev_patient * max(K, 1) + log.ev_kind  # events sorted by patient then time
    o = np.argsort(key, kind="stable")
    starts = np.flatnonzero(np.concatenate(([True], key[o][1:] != key[o][:-1])))
    occurrence = np.empty(key.size)
    occurrence[o] = np.arange(key.size) - np.repeat(starts, np.diff(np.append(starts, key.size))) + 1
    ratio = np.ones((u.size, K))
    for k in range(K):
        m = np.flatnonzero(log.ev_kind == k)
        m = m[np.argsort(log.ev_time[m], kind="stable")]
        idx = np.searchsorted(log.ev_time[m], u, side="right")
        m1 = np.concatenate(([0.0], np.cumsum(1.0 / k_at[m])))[idx]
        m2 = np.concatenate(([0.0], np.cumsum((2.0 * occurrence[m] - 1.0) / k_at[m])))[idx]
        np.divide(m2, m1, out=ratio[:, k], where=m1 > 0)
    var = np.clip(value * ratio - value**2, 0.0, None)
    se = np.sqrt(var / n_eff[:, None])

    names = log.kinds["transition"].to_numpy()
    st = np.array(log.states, dtype=object)
    return pd.DataFrame({
        "time": np.repeat(t, K),
        "transition": pd.Categorical(np.tile(names, t.size), categories=list(dict.fromkeys(names))),
        "from_state": pd.Categorical(np.tile(st[log.kinds["from_state"].to_numpy()], t.size),
                                     categories=list(log.states)),
        "to_state": pd.Categorical(np.tile(st[log.kinds["to_state"].to_numpy()], t.size),
                                   categories=list(log.states)),
        "value": value[inv].ravel(),
        "std_error": se[inv].ravel(),
    })
