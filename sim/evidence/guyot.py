"""Patient-level data from a published Kaplan-Meier curve: the algorithm of Guyot, Ades, Ouwens &
Welton (2012, BMC Med Res Methodol 12:9), on cleaned digitised points
(docs/methods.md, 'Survival fits from trial evidence').

Between consecutive times at which the number at risk is published, censorings are spread evenly
and their number is adjusted until the number at risk at the next published time is matched; at
each digitised point the events are ``round(n_hat (1 - S / KM_hat))``, so the reconstructed
Kaplan-Meier estimate follows the digitised survival. In the last interval the censoring rate of the
earlier intervals is assumed, or the censorings are adjusted to match a reported total of events.
Events are placed at the digitised times and censorings at the midpoints between digitised points;
the patients still at risk at the end are censored at the last digitised time.

It follows the published algorithm step by step (the authors' R code in the paper's supplement),
with guards the original lacks: no division by an empty risk set, events never negative nor above
the risk set, and a bound on the adjustment loops (:data:`MAX_ADJUSTMENTS`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

__all__ = ["GuyotResult", "guyot_reconstruct", "MAX_ADJUSTMENTS"]

MAX_ADJUSTMENTS = 10_000
"""Bound on the iterations that adjust the censorings of one interval."""


@dataclass(frozen=True, eq=False)  # holds arrays: compared by identity
class GuyotResult:
    """Reconstructed patients of one arm and the per-point bookkeeping.

    Attributes
    ----------
    time, event : the patients' exit times and event indicators.
    events, censored : per digitised point, the events at it and the censorings after it.
    n_at_risk : per digitised point, the reconstructed number at risk just before it.
    notes : what the algorithm had to adjust (in words).
    """

    time: NDArray[np.float64]
    event: NDArray[np.bool_]
    events: NDArray[np.int64]
    censored: NDArray[np.int64]
    n_at_risk: NDArray[np.int64]
    notes: tuple[str, ...]


def _spread(nc: int, t_lo: float, t_hi: float, breaks: NDArray[np.float64]) -> NDArray[np.int64]:
    """``nc`` censorings evenly inside (t_lo, t_hi), counted per bin (b_j, b_{j+1}] of ``breaks``
    (R's ``hist(..., right = TRUE)`` counts)."""
    nbins = breaks.size - 1
    if nc <= 0 or nbins <= 0:
        return np.zeros(max(nbins, 0), dtype=np.int64)
    times = t_lo + np.arange(1, nc + 1) * (t_hi - t_lo) / (nc + 1)
    j = np.clip(np.searchsorted(breaks, times, side="left") - 1, 0, nbins - 1)
    return np.bincount(j, minlength=nbins).astype(np.int64)


def _events(n_hat: float, s: float, km_last: float) -> int:
    if n_hat <= 0 or km_last <= 0:
        return 0
    return int(min(max(np.round(n_hat * (1.0 - s / km_last)), 0), n_hat))


def guyot_reconstruct(t: NDArray[np.float64], s: NDArray[np.float64], t_risk: NDArray[np.float64],
                      n_risk: NDArray[np.int64], total_events: int | None = None) -> GuyotResult:
    """Reconstruct one arm's patients (Guyot et al. 2012).

    Parameters
    ----------
    t, s : ndarray
        Cleaned digitised points: times strictly increasing from ``t[0] = 0`` with ``s[0] = 1``,
        survival non-increasing in [0, 1]; every ``t_risk`` is one of the ``t``.
    t_risk, n_risk : ndarray
        Times (strictly increasing, ``t_risk[0] = 0``, none after ``t[-1]``) and numbers at risk
        (non-increasing; ``n_risk[0]`` is the arm's size).
    total_events : int, optional
        Reported total number of events in the arm.

    Returns
    -------
    GuyotResult
    """
    n_t, n_int = t.size, t_risk.size
    n_risk = np.asarray(n_risk, dtype=np.int64).copy()
    lower = np.searchsorted(t, t_risk, side="left")
    upper = np.append(lower[1:] - 1, n_t - 1)
    cen = np.zeros(n_t, dtype=np.int64)
    d = np.zeros(n_t, dtype=np.int64)
    n_hat = np.full(n_t + 1, n_risk[0] + 1, dtype=np.int64)
    km = np.ones(n_t)
    last_i = np.zeros(n_int, dtype=np.int64)
    n_censor = np.zeros(n_int, dtype=np.int64)
    notes: list[str] = []

    def walk(i: int, first: bool, stop_at_upper: bool) -> int:
        """Events and numbers at risk through interval i; returns the last point with events."""
        n_hat[lower[i]] = n_risk[i]
        last = int(last_i[i])
        for k in range(lower[i], upper[i] + 1):
            if first and k == lower[i]:
                d[k], km[k] = 0, 1.0
            else:
                d[k] = _events(n_hat[k], s[k], km[last])
                km[k] = km[last] * (1.0 - d[k] / n_hat[k]) if n_hat[k] > 0 else km[last]
            if not (stop_at_upper and k == upper[i]):
                n_hat[k + 1] = n_hat[k] - d[k] - cen[k]
                if n_hat[k + 1] < 0:  # the number at risk cannot be negative
                    n_hat[k + 1] = 0
                    cen[k] = n_hat[k] - d[k]
            if d[k] != 0:
                last = k
        return last

    last = 0
    for i in range(n_int - 1):
        lo, nxt = lower[i], lower[i + 1]
        n_censor[i] = int(np.round(n_risk[i] * s[nxt] / s[lo] - n_risk[i + 1])) if s[lo] > 0 else 0
        rounds = 0
        while n_hat[nxt] > n_risk[i + 1] or (n_hat[nxt] < n_risk[i + 1] and n_censor[i] > 0):
            if n_censor[i] <= 0:
                cen[lo:upper[i] + 1] = 0
                n_censor[i] = 0
            else:
                cen[lo:upper[i] + 1] = _spread(int(n_censor[i]), t[lo], t[nxt], t[lo:nxt + 1])
            last = walk(i, i == 0, False)
            n_censor[i] += n_hat[nxt] - n_risk[i + 1]
            rounds += 1
            if rounds >= MAX_ADJUSTMENTS:
                notes.append(f"interval from {t_risk[i]:g}: censorings not settled after {MAX_ADJUSTMENTS} rounds")
                break
        if n_hat[nxt] < n_risk[i + 1]:
            notes.append(f"at {t_risk[i + 1]:g}: the curve implies {n_hat[nxt]} at risk, fewer than the published "
                         f"{n_risk[i + 1]}; {n_hat[nxt]} used from there")
            n_risk[i + 1] = n_hat[nxt]
        last_i[i + 1] = last

    j = n_int - 1
    lo, up = lower[j], upper[j]

    def last_interval(nc: int, adjusting: bool = False) -> int:
        if nc <= 0:
            cen[lo:up] = 0
            nc = 0
        else:
            cen[lo:up] = _spread(nc, t[lo], t[up], t[lo:up + 1])
        walk(j, n_int == 1, adjusting)  # when adjusting to the total, the published code stops at the last point
        return nc

    if n_int > 1:
        span = t[upper[j - 1]] - t[lower[0]]
        share = (t[up] - t[lo]) / span if span > 0 else 0.0
        n_censor[j] = min(int(np.round(n_censor[:j].sum() * share)), int(n_risk[j]))
    n_censor[j] = last_interval(int(n_censor[j]))

    if total_events is not None:
        sum_before = int(d[:upper[j - 1] + 1].sum()) if n_int > 1 else 0
        if n_int > 1 and sum_before >= total_events:
            d[lo:up + 1] = 0
            cen[lo:up + 1] = 0
            n_hat[lo + 1:up + 2] = n_risk[j]
            notes.append(f"the reported total of {total_events} events is reached before the last interval; "
                         f"no events after {t_risk[j]:g}")
        else:
            total = int(d[:up + 1].sum())
            rounds = 0
            while total > total_events or (total < total_events and n_censor[j] > 0):
                n_censor[j] = last_interval(int(n_censor[j] + (total - total_events)), adjusting=True)
                total = int(d[:up + 1].sum())
                rounds += 1
                if rounds >= MAX_ADJUSTMENTS:
                    break
            if total != total_events:
                notes.append(f"{total} events reconstructed, the reported total is {total_events}")

    n0 = int(n_risk[0]) if n_int else 0
    n_ev = int(d.sum())
    n_cen = int(cen[:-1].sum())
    if n_ev + n_cen > n0:  # cannot happen with the guards above; kept as a check on the bookkeeping
        raise ArithmeticError(f"reconstruction used {n_ev} events and {n_cen} censorings for {n0} patients")
    time = np.concatenate([np.repeat(t, d), np.repeat(0.5 * (t[:-1] + t[1:]), cen[:-1]),
                           np.full(n0 - n_ev - n_cen, t[-1])])
    event = np.concatenate([np.ones(n_ev, dtype=bool), np.zeros(n0 - n_ev, dtype=bool)])
    return GuyotResult(time, event, d.copy(), cen.copy(), n_hat[:-1].copy(), tuple(notes))
