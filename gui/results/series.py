"""Plot-ready series from the run's tables: pure numpy/pandas, no Qt, tested on their own.

This module only reshapes numbers that ``sim`` computed (selection, clipping to the plotted time
range, step coordinates, thinning to screen resolution and the 95% band ``estimate ± 1.96 SE``);
every estimate itself comes from ``sim``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from sim.reference.cohort import cohort_trace
from sim.model.multistate import Model
from sim.pipeline.run import RunResults
from sim.reference.study import MAX_TUNNEL_STATES

__all__ = ["Z95", "Series", "StrategyCurves", "TraceCurves", "cycle_label", "steps", "thin_steps",
           "simulated_curves", "trace_curves", "compute_traces", "same_curves", "survival_from_occupancy"]

Z95 = 1.959963984540054  # standard normal 97.5% quantile (scipy.stats.norm.ppf(0.975))
MAX_STEP_POINTS = 4000  # a step curve with more jumps is drawn on this many evenly spaced times


@dataclass(frozen=True)
class Series:
    """x/y of one curve; ``lower``/``upper`` bound its 95% band (or are None)."""

    x: np.ndarray
    y: np.ndarray
    lower: np.ndarray | None = None
    upper: np.ndarray | None = None

    def __len__(self) -> int:
        return int(self.x.size)


@dataclass(frozen=True)
class StrategyCurves:
    """Simulated and exact curves of one strategy (exact ones are None without an exact solution)."""

    survival: Series
    occupancy: dict[str, Series]
    exact_survival: Series | None = None
    exact_occupancy: dict[str, Series] | None = None


@dataclass(frozen=True)
class TraceCurves:
    """A cycle-based cohort trace as survival and occupancy curves at the cycle boundaries."""

    strategy: str
    method: str
    cycle_length: float
    survival: Series | None
    occupancy: dict[str, Series] = field(default_factory=dict)
    note: str = ""


def cycle_label(h: float) -> str:
    """A cycle length in words: ``1 week``, ``3 months``, ``1 year``, else ``0.3 years``."""
    for per_year, unit in ((1.0, "year"), (12.0, "month"), (365.25 / 7, "week"), (52.0, "week"),
                           (365.25, "day")):
        n = h * per_year
        k = round(n)
        if k >= 1 and math.isclose(n, k, rel_tol=1e-6):
            return f"{k} {unit}{'s' if k != 1 else ''}"
    return f"{h:.3g} years"


def steps(t: np.ndarray, y: np.ndarray, t_end: float) -> tuple[np.ndarray, np.ndarray]:
    """Coordinates of a right-continuous step function with value ``y[i]`` on [t[i], t[i+1]),
    drawn up to ``t_end``: x = t0, t1, t1, t2, ..., t_end."""
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    if t.size == 0:
        return t, y
    x = np.empty(2 * t.size)
    x[0::2] = t
    x[1:-1:2] = t[1:]
    x[-1] = max(t_end, t[-1])
    return x, np.repeat(y, 2)


def thin_steps(t: np.ndarray, values: list[np.ndarray], t_end: float, max_points: int = MAX_STEP_POINTS
               ) -> tuple[np.ndarray, list[np.ndarray]]:
    """The step functions ``values`` (sharing the jump times ``t``) evaluated on ``max_points`` even
    times from t[0] to ``t_end`` when they have more jumps than that (screen resolution), else as is."""
    t = np.asarray(t, dtype=float)
    if t.size <= max_points:
        return t, [np.asarray(v, dtype=float) for v in values]
    grid = np.linspace(t[0], t_end, max_points)
    idx = np.searchsorted(t, grid, side="right") - 1
    return grid, [np.asarray(v, dtype=float)[idx] for v in values]


def _band(y: np.ndarray, se: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    se = np.nan_to_num(np.asarray(se, dtype=float))
    return np.clip(y - Z95 * se, 0.0, 1.0), np.clip(y + Z95 * se, 0.0, 1.0)


def survival_from_occupancy(table: pd.DataFrame, model: Model) -> pd.DataFrame:
    """Probability alive = 1 - probability in the absorbing states, per time (columns time, survival)."""
    absorbing = [s.name for s in model.states if s.absorbing]
    dead = table[table["state"].isin(absorbing)].groupby("time", sort=True)["probability"].sum()
    return pd.DataFrame({"time": dead.index.to_numpy(dtype=float), "survival": 1.0 - dead.to_numpy()})


def _by_strategy(df: pd.DataFrame) -> dict[str, pd.DataFrame]:
    return {str(k): g for k, g in df.groupby("strategy", sort=False, observed=True)}


def _state_series(df: pd.DataFrame, states: tuple[str, ...], band: bool) -> dict[str, Series]:
    out = {}
    for state, g in df.groupby("state", sort=False, observed=True):
        if str(state) not in states:
            continue
        g = g.sort_values("time")
        x, y = g["time"].to_numpy(float), g["probability"].to_numpy(float)
        lo, hi = _band(y, g["std_error"].to_numpy(float)) if band else (None, None)
        out[str(state)] = Series(x, y, lo, hi)
    return out


def simulated_curves(results: RunResults, max_points: int = MAX_STEP_POINTS) -> dict[str, StrategyCurves]:
    """Per strategy: Kaplan-Meier survival as steps with its 95% band, Aalen-Johansen occupancy on
    the grid with bands, and the exact curves where the run has them. Everything is clipped to the
    grid's end (the earliest horizon, which every patient reaches), so curves are comparable."""
    model = results.scenario.model
    t_end = float(results.grid[-1])
    states = model.state_names
    surv = _by_strategy(results.survival)
    occ = _by_strategy(results.occupancy)
    exact = _by_strategy(results.exact_occupancy) if results.exact_occupancy is not None else {}
    out: dict[str, StrategyCurves] = {}
    for name in model.strategy_names:
        if name not in surv:
            continue
        km = surv[name].sort_values("time", kind="stable")
        km = km[km["time"] <= t_end]
        t, (s, lo, hi) = thin_steps(km["time"].to_numpy(float),
                                    [km["survival"].to_numpy(float), *_band(km["survival"].to_numpy(float),
                                                                             km["std_error"].to_numpy(float))],
                                    t_end, max_points)
        x, y = steps(t, s, t_end)
        survival = Series(x, y, steps(t, lo, t_end)[1], steps(t, hi, t_end)[1])
        ex_surv = ex_occ = None
        if name in exact:
            e = exact[name]
            e_surv = survival_from_occupancy(e, model)
            ex_surv = Series(e_surv["time"].to_numpy(), e_surv["survival"].to_numpy())
            ex_occ = _state_series(e, states, band=False)
        occupancy = _state_series(occ[name], states, band=True) if name in occ else {}
        out[name] = StrategyCurves(survival, occupancy, ex_surv, ex_occ)
    return out


def trace_curves(model: Model, strategy: str, method: str, cycle_length: float, t_end: float,
                 tunnel_entry: str = "half-cycle") -> TraceCurves:
    """Cycle-based cohort trace (``sim.reference.cohort.cohort_trace(...).table()``) clipped to ``t_end``.

    Models with time-in-state clocks get enough tunnel states to track the plotted range
    (``ceil(t_end / h)``), entered by the scenario's ``run.tunnel_entry`` rule; beyond
    ``sim.reference.study.MAX_TUNNEL_STATES`` the trace is skipped with a note.
    """
    tunnels = None
    if not model.is_markov:
        tunnels = max(1, int(math.ceil(t_end / cycle_length - 1e-9)))
        if tunnels > MAX_TUNNEL_STATES:
            return TraceCurves(strategy, method, cycle_length, None,
                               note=f"{method}, {cycle_label(cycle_length)}: skipped, it needs {tunnels} tunnel "
                                    f"states (more than {MAX_TUNNEL_STATES})")
    table = cohort_trace(model, strategy, cycle_length, method, tunnel_cycles=tunnels,
                         tunnel_entry=tunnel_entry).table()
    table = table[table["time"] <= t_end * (1 + 1e-9)]
    surv = survival_from_occupancy(table, model)
    occ = {}
    for state, g in table.groupby("state", sort=False):
        occ[str(state)] = Series(g["time"].to_numpy(float), g["probability"].to_numpy(float))
    return TraceCurves(strategy, method, cycle_length, Series(surv["time"].to_numpy(), surv["survival"].to_numpy()),
                       occ)


def same_curves(named: dict[str, Series]) -> list[list[str]]:
    """Groups (two or more) of curves with the same points, which a plot draws on top of each other."""
    groups: list[list[str]] = []
    for name, s in named.items():
        for g in groups:
            first = named[g[0]]
            if first.x.shape == s.x.shape and np.allclose(first.x, s.x) and np.allclose(first.y, s.y, rtol=1e-9,
                                                                                         atol=1e-12):
                g.append(name)
                break
        else:
            groups.append([name])
    return [g for g in groups if len(g) > 1]


def compute_traces(model: Model, requests: list[tuple[str, str, float]], t_end: float,
                   tunnel_entry: str = "half-cycle") -> dict[tuple[str, str, float], TraceCurves]:
    """:func:`trace_curves` for each (strategy, method, cycle length); a trace that sim refuses to
    build (``CohortError``, a ``ValueError``) comes back as a note, not an exception."""
    out = {}
    for strategy, method, h in requests:
        try:
            out[(strategy, method, h)] = trace_curves(model, strategy, method, h, t_end, tunnel_entry)
        except ValueError as err:
            out[(strategy, method, h)] = TraceCurves(strategy, method, h, None,
                                                     note=f"{method}, {cycle_label(h)}: {err}")
    return out
