"""Survival and state occupancy to each patient's own horizon, on fixed time grids, from counts that
add up across parts of an event log (the partitions of a distributed run): no part needs another,
and 10^8 patients are never in memory at once.

The curves of :mod:`sim.analysis.own_horizon` (docs/methods.md, 'Curves to the last horizon') are
plain means over patients, so on a grid they follow from counts:

    P_j(t) = (n_j(0) + #entries into j at or before t - #exits from j at or before t) / n,
    S(t) = 1 - #absorbed at or before t / n,

with binomial standard errors sqrt(P (1 - P) / n). Each part contributes its integer counts at every
grid time and its number of patients; the parts' counts are added (exactly, in any order) and the
curves computed once at the end. They equal :func:`sim.analysis.occupancy_to_own_horizon` on the
grid and :func:`sim.analysis.survival_to_own_horizon` read at the grid times, on the whole log, bit
for bit. (Kaplan-Meier and Aalen-Johansen, which differ past the earliest horizon, need the order of
every event over the whole log and are not computed this way.)
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from ._event_log import _check_states, _check_times, _prepare_log, _sorted_by_state, _strategies_in

__all__ = ["CurveCounts", "curve_counts"]


@dataclass
class CurveCounts:
    """Counts of patients per strategy: in each state at ``times`` (``occupied``, shape times x states)
    and absorbed by each of ``survival_times`` (``absorbed``); ``n`` patients. Merge with :meth:`merge`."""

    states: tuple[str, ...]
    times: NDArray[np.float64]
    survival_times: NDArray[np.float64]
    n: dict[str, int] = field(default_factory=dict)
    occupied: dict[str, NDArray[np.int64]] = field(default_factory=dict)
    absorbed: dict[str, NDArray[np.int64]] = field(default_factory=dict)

    def merge(self, other: "CurveCounts") -> "CurveCounts":
        """Add ``other``'s counts (same states and grids); strategies keep their order of first appearance.
        Returns self."""
        if (other.states != self.states or not np.array_equal(other.times, self.times)
                or not np.array_equal(other.survival_times, self.survival_times)):
            raise ValueError("curve counts to merge must have the same states and time grids")
        for s, n in other.n.items():
            if s in self.n:
                self.n[s] += n
                self.occupied[s] = self.occupied[s] + other.occupied[s]
                self.absorbed[s] = self.absorbed[s] + other.absorbed[s]
            else:
                self.n[s], self.occupied[s], self.absorbed[s] = n, other.occupied[s].copy(), other.absorbed[s].copy()
        return self

    def occupancy(self) -> pd.DataFrame:
        """time, state (Categorical in ``states`` order), probability, std_error, strategy: per strategy
        the table of :func:`sim.analysis.occupancy_to_own_horizon` with a ``strategy`` column."""
        S = len(self.states)
        frames = []
        for s, n in self.n.items():
            p = self.occupied[s] / n
            frames.append(pd.DataFrame({
                "time": np.repeat(self.times, S),
                "state": pd.Categorical.from_codes(np.tile(np.arange(S), self.times.size), categories=list(self.states)),
                "probability": p.ravel(),
                "std_error": np.sqrt(p * (1.0 - p) / n).ravel(),
            }).assign(strategy=s))
        return pd.concat(frames, ignore_index=True)

    def survival(self) -> pd.DataFrame:
        """time, events (absorbed since the previous time; at the first, at or before it), survival,
        std_error, strategy: :func:`sim.analysis.survival_to_own_horizon` read at ``survival_times``."""
        frames = []
        for s, n in self.n.items():
            absorbed = self.absorbed[s]
            survival = np.clip(1.0 - absorbed / n, 0.0, 1.0)
            frames.append(pd.DataFrame({
                "time": self.survival_times, "events": np.diff(absorbed, prepend=0).astype(np.int64),
                "survival": survival, "std_error": np.sqrt(survival * (1.0 - survival) / n),
            }).assign(strategy=s))
        return pd.concat(frames, ignore_index=True)


def curve_counts(events: pd.DataFrame, patients: pd.DataFrame, states: Sequence[str], times: ArrayLike,
                 survival_times: ArrayLike | None = None, strategies: Sequence[str] | None = None) -> CurveCounts:
    """The counts of one part of an event log (its patients complete: every event of a patient
    in the same part).

    Parameters
    ----------
    events, patients : pandas.DataFrame
        Event log and patient table of the part (the contract in :mod:`sim.analysis._event_log`).
    states : sequence of str
        Every state of the model, in reporting order.
    times : array_like
        Times since entry (>= 0) of the occupancy curves.
    survival_times : array_like or None
        Times of the survival curve (default ``times``).
    strategies : sequence of str or None
        The strategies to count, in order (default: those in ``patients``, in order of appearance).
    """
    states_t = _check_states(states)
    t = _check_times(times)
    ts = t if survival_times is None else _check_times(survival_times)
    out = CurveCounts(states_t, t, ts)
    names = (list(strategies) if strategies is not None
             else [s for s in dict.fromkeys(patients["strategy"].astype(str)) if s in _strategies_in(patients)])
    S = len(states_t)
    for name in names:
        log = _prepare_log(events, patients, states_t, name)
        entries = _sorted_by_state(log.ev_time, log.ev_to, S)
        exits = _sorted_by_state(log.ev_time, log.ev_from, S)
        n0 = np.bincount(log.initial, minlength=S)
        occupied = np.empty((t.size, S), dtype=np.int64)
        for j in range(S):
            occupied[:, j] = n0[j] + np.searchsorted(entries[j], t, side="right") - np.searchsorted(exits[j], t, side="right")
        absorbed = np.sort(log.cohort.exit_time[~log.cohort.censored])
        out.n[name] = log.n
        out.occupied[name] = occupied
        out.absorbed[name] = np.searchsorted(absorbed, ts, side="right").astype(np.int64)
    return out
