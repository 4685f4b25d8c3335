"""A hazard that is at least another one: :math:`h(t) = \\max(h_{fit}(t), h_{floor}(t))` on one clock,
e.g. a fitted disease-death hazard kept at or above the background mortality at the attained age
(docs/methods.md, 'The larger of a fit and the background hazard'); and :class:`ShiftedClock`, a
hazard read ``offset`` years further on its clock (the background hazard on the attained-age clock
seen from time since entry, for patients who all enter at one age).

The clock is cut where the two hazards cross (found on a grid and refined by bisection to
:data:`CROSSING_TOL`); on each piece one of the two is the larger, so the cumulative hazard and the
conditional event time come piece by piece from that hazard's own closed forms (or its own stable
inverse): sampling is exact for the piecewise hazard, and the exact solver and the cohort traces read
the same hazard.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np

from ._numerics import FloatArray
from .base import Hazard, _invalid, _param
from .waning import rough_points

__all__ = ["CROSSING_TOL", "GRID_CELLS", "AtLeastHazard", "ShiftedClock", "Crossing"]

CROSSING_TOL = 1e-10
"""Crossings are located to ``CROSSING_TOL * max(1, clock)`` years by bisection."""

GRID_CELLS = 4096
"""The search grid: ``GRID_CELLS`` equal cells over ``[0, until]`` plus both hazards' jumps and kinks
(:func:`~sim.hazards.waning.rough_points`). Two crossings closer together than one cell (0.03 years
over 130 years) may be missed; on that stretch the hazard is then the fit's or the floor's, not the
larger of the two."""


@dataclass(frozen=True)
class Crossing:
    """Where the fit crosses the floor: at clock value ``at`` the fit goes ``"below"`` or
    ``"above"`` the floor."""

    at: float
    direction: str


@dataclass(frozen=True)
class ShiftedClock(Hazard):
    """``base`` read ``offset`` years further on: :math:`h(t) = h_b(t + a)`,
    :math:`H(t) = H_b(t + a) - H_b(a)`, conditional time from ``x`` = the base's from ``x + a``."""

    base: Hazard
    offset: float
    family: ClassVar[str] = "shifted_clock"
    _h_offset: float = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        if not isinstance(self.base, Hazard):
            raise _invalid(self.family, ("base",), "must be a Hazard", self.base)
        object.__setattr__(self, "offset", _param(self.family, "offset", self.offset, "nonnegative"))
        with np.errstate(over="ignore", under="ignore", divide="ignore"):
            object.__setattr__(self, "_h_offset", float(self.base._cumhazard(np.array(self.offset))))

    @property
    def cumhazard_limit(self) -> float:
        limit = self.base.cumhazard_limit
        return math.inf if limit == math.inf else max(limit - self._h_offset, 0.0)

    def params(self) -> dict[str, Any]:
        out: dict[str, Any] = {"offset": self.offset, "base.family": self.base.family}
        out.update({f"base.{k}": v for k, v in self.base.params().items()})
        return out

    def _rough_points(self) -> tuple[float, ...]:
        return tuple(p - self.offset for p in rough_points(self.base) if p > self.offset)

    def _hazard(self, t: FloatArray) -> FloatArray:
        return self.base._hazard(t + self.offset)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        with np.errstate(invalid="ignore"):
            out = self.base._cumhazard(t + self.offset) - self._h_offset
        return np.where(np.isnan(out), np.inf, np.maximum(out, 0.0))

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self.base._conditional_time(np.full(np.shape(y), self.offset), y)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return self.base._conditional_time(x + self.offset, e)


@dataclass(frozen=True)
class AtLeastHazard(Hazard):
    """The larger of a fitted hazard and a floor on the same clock.

    Parameters
    ----------
    fit : Hazard
        The hazard as fitted (e.g. disease death from trial data, extrapolated).
    floor : Hazard
        The hazard it must not fall below (e.g. the general-population hazard).
    until : float
        The end of the clock range searched for crossings (years, ``> 0`` and finite; the oldest
        age or longest follow-up of the model). Beyond it the hazard larger at ``until`` is kept.

    Notes
    -----
    With crossings :math:`0 = p_0 < p_1 < \\dots < p_m` and :math:`g_j` the larger hazard on
    :math:`[p_j, p_{j+1})`: :math:`H(t) = C_j + G_j(t) - G_j(p_j)` with
    :math:`C_j = \\sum_{i<j} (G_i(p_{i+1}) - G_i(p_i))`. The conditional time from ``x`` in piece
    :math:`i` with draw ``e`` is :math:`g_i`'s own when it ends inside the piece; otherwise the draw
    left at :math:`p_{i+1}` locates the piece :math:`j` of the event through the :math:`C_j`, and
    the event time is :math:`p_j` plus :math:`g_j`'s conditional time from :math:`p_j`
    (inverse cumulative hazard sampling piece by piece, Bender, Augustin & Blettner 2005).
    """

    fit: Hazard
    floor: Hazard
    until: float = 130.0
    family: ClassVar[str] = "at_least"
    _starts: FloatArray = field(init=False, repr=False, compare=False)  # p_0 .. p_m
    _use_floor: np.ndarray = field(init=False, repr=False, compare=False)  # per piece
    _cum: FloatArray = field(init=False, repr=False, compare=False)  # C_j
    crossings: tuple[Crossing, ...] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        for name in ("fit", "floor"):
            if not isinstance(getattr(self, name), Hazard):
                raise _invalid(self.family, (name,), "must be a Hazard", getattr(self, name))
        until = _param(self.family, "until", self.until, "positive")
        object.__setattr__(self, "until", until)
        with np.errstate(over="ignore", under="ignore", divide="ignore", invalid="ignore"):
            starts, use_floor = self._pieces()
            ends = np.append(starts[1:], np.inf)
            inc = np.empty(starts.size)
            for use, g in ((False, self.fit), (True, self.floor)):
                m = use_floor == use
                inc[m] = g._cumhazard(ends[m]) - g._cumhazard(starts[m])
        inc = np.where(np.isnan(inc), np.inf, np.maximum(inc, 0.0))
        cum = np.concatenate(([0.0], np.cumsum(inc[:-1])))
        crossings = tuple(Crossing(float(p), "above" if not f else "below")
                          for p, f in zip(starts[1:], use_floor[1:]))
        for name, value in (("_starts", starts), ("_use_floor", use_floor), ("_cum", cum), ("crossings", crossings)):
            if isinstance(value, np.ndarray):
                value.setflags(write=False)
            object.__setattr__(self, name, value)

    def _larger_is_floor(self, t: FloatArray) -> np.ndarray:
        return ~(self.fit._hazard(t) > self.floor._hazard(t))  # ties: the floor

    def _pieces(self) -> tuple[FloatArray, np.ndarray]:
        """Crossing points (with 0 first) and, per piece, whether the floor is the larger."""
        grid = set(np.linspace(0.0, self.until, GRID_CELLS + 1).tolist())
        grid.update(p for p in (*rough_points(self.fit), *rough_points(self.floor)) if 0.0 < p < self.until)
        g = np.array(sorted(grid))
        side = self._larger_is_floor(g)
        cells = np.flatnonzero(side[:-1] != side[1:])
        lo, hi = g[cells].copy(), g[cells + 1].copy()
        left = side[cells]
        for _ in range(200):  # bisection: [lo, hi) holds the change of side
            tol = CROSSING_TOL * np.maximum(1.0, hi)
            if not np.any(hi - lo > tol):
                break
            mid = 0.5 * (lo + hi)
            same = self._larger_is_floor(mid) == left
            lo = np.where(same, mid, lo)
            hi = np.where(same, hi, mid)
        points = np.concatenate(([0.0], hi))
        points = points[np.concatenate(([True], np.diff(points) > 0.0))]
        ends = np.append(points[1:], max(self.until, points[-1]))
        probe = np.where(ends > points, 0.5 * (points + ends), points)
        use_floor = self._larger_is_floor(probe)
        keep = np.concatenate(([True], use_floor[1:] != use_floor[:-1]))  # merge pieces on one side
        return points[keep], use_floor[keep]

    # ---- the Hazard interface --------------------------------------------------------------
    @property
    def cumhazard_limit(self) -> float:
        j = self._starts.size - 1
        g = self.floor if self._use_floor[j] else self.fit
        with np.errstate(divide="ignore", invalid="ignore", over="ignore", under="ignore"):
            tail = g.cumhazard_limit - float(g._cumhazard(np.array(self._starts[j])))
        return float(self._cum[j]) + (math.inf if math.isnan(tail) else max(tail, 0.0))  # NaN: inf - inf

    def params(self) -> dict[str, Any]:
        out: dict[str, Any] = {"until": self.until, "fit.family": self.fit.family, "floor.family": self.floor.family}
        out.update({f"fit.{k}": v for k, v in self.fit.params().items()})
        out.update({f"floor.{k}": v for k, v in self.floor.params().items()})
        return out

    def _rough_points(self) -> tuple[float, ...]:
        return (*self._starts[1:].tolist(), *rough_points(self.fit), *rough_points(self.floor))

    def _piece(self, t: FloatArray) -> np.ndarray:
        return np.searchsorted(self._starts, t, side="right") - 1

    def _hazard(self, t: FloatArray) -> FloatArray:
        use = self._use_floor[self._piece(t)]
        return np.where(use, self.floor._hazard(t), self.fit._hazard(t))

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        t = np.asarray(t, dtype=np.float64)
        j = self._piece(t)
        out = np.empty(t.shape)
        for use, g in ((False, self.fit), (True, self.floor)):
            m = self._use_floor[j] == use
            if np.any(m):
                jm = j[m]
                with np.errstate(invalid="ignore"):
                    inc = g._cumhazard(t[m]) - g._cumhazard(self._starts[jm])
                out[m] = self._cum[jm] + np.where(np.isnan(inc), np.inf, np.maximum(inc, 0.0))
        return out

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        y = np.asarray(y, dtype=np.float64)
        return self._conditional_time(np.zeros(y.shape), y)

    def _by_hazard(self, j: np.ndarray, fn) -> FloatArray:
        """``fn(g, mask)`` evaluated for the lanes of each of the two hazards, merged."""
        out = np.empty(j.shape)
        for use, g in ((False, self.fit), (True, self.floor)):
            m = self._use_floor[j] == use
            if np.any(m):
                out[m] = fn(g, m)
        return out

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        x, e = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(e, dtype=np.float64))
        shape = x.shape
        x, e = x.ravel(), e.ravel()
        last = self._starts.size - 1
        i = self._piece(x)
        t = self._by_hazard(i, lambda g, m: g._conditional_time(x[m], e[m]))
        nxt = np.minimum(i + 1, last)
        end = np.where(i < last, self._starts[nxt], np.inf)
        beyond = (x + t > end) & (i < last)
        if np.any(beyond):
            b = np.flatnonzero(beyond)
            ib, xb, eb = i[b], x[b], e[b]

            def used(g, m):
                with np.errstate(invalid="ignore"):
                    return g._cumhazard(end[b][m]) - g._cumhazard(xb[m])

            u = self._by_hazard(ib, used)
            y = self._cum[ib + 1] + np.maximum(eb - np.where(np.isnan(u), np.inf, u), 0.0)
            jb = np.clip(np.searchsorted(self._cum, y, side="right") - 1, ib + 1, last)
            start = self._starts[jb]
            with np.errstate(invalid="ignore"):
                rest = np.maximum(y - self._cum[jb], 0.0)
            rest = np.where(np.isnan(rest), np.inf, rest)
            tj = self._by_hazard(jb, lambda g, m: g._conditional_time(start[m], rest[m]))
            t = t.copy()
            t[b] = (start - xb) + tj
        return t.reshape(shape)
