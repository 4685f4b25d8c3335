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

__all__ = ["CROSSING_TOL", "GRID_CELLS", "STRIP_CELLS", "MAX_STRIPS", "AtLeastHazard", "ShiftedClock", "Crossing",
           "EntryAgeFloor", "entry_age_times", "by_entry_age"]

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


STRIP_CELLS = 8
"""Entry-age strips of :class:`EntryAgeFloor` are about ``STRIP_CELLS`` search-grid cells wide."""

MAX_STRIPS = 512
"""At most ``MAX_STRIPS`` entry-age strips (the side table holds ``(MAX_STRIPS + 1) x (GRID_CELLS + 1)``
cells)."""


@dataclass(frozen=True)
class _SideTable:
    """Which hazard is the larger on the (entry age, time since entry) grid, and per entry-age strip
    the time cells where the side may change for some entry age in the strip."""

    t: FloatArray  # time-since-entry grid nodes
    width: float  # strip width (years of entry age)
    cells: np.ndarray  # (strips, K) candidate cell indices per strip, ascending, -1 padded
    count: np.ndarray  # (strips,) candidates per strip
    jumps: FloatArray  # the background's jumps and kinks (ages), sorted


@dataclass(frozen=True)
class EntryAgeFloor(Hazard):
    """On the time-since-entry clock ``t``, for a patient who entered at age ``a``, the larger of a
    fitted hazard and a background hazard on attained age: :math:`h_a(t) = \\max(h_{fit}(t),
    h_{bg}(a + t))` (docs/methods.md, 'The larger of a fit and the background hazard').

    Parameters
    ----------
    fit : Hazard
        The hazard as fitted, on time since entry.
    background : Hazard
        The floor, on attained age.
    until : float
        The longest follow-up (years, ``> 0``): the range of ``t`` searched for crossings.
    low, high : float
        The youngest and oldest entry ages (``0 <= low <= high``).
    ages : tuple of float
        The population's entry ages when they are few and discrete (e.g. an empirical distribution):
        patients are then grouped by entry age and each group reads :meth:`at` (the hazard of one
        entry age, exactly what a fixed entry age gives). Empty for a continuous distribution: each
        patient's pieces are found from a side table (see Notes).

    Notes
    -----
    :meth:`at` ``(a)`` is :class:`AtLeastHazard` ``(fit, ShiftedClock(background, a), until)``:
    crossings on a grid of :data:`GRID_CELLS` cells in ``t``, refined by bisection. For a continuous
    entry-age distribution the patient-level kernel :meth:`_conditional_time_at_entry` finds each
    patient's own crossings, vectorised over patients: the sides ``h_fit(t) > h_bg(a + t)`` are
    tabulated once on the same ``t`` grid times a grid of entry ages (strips about
    :data:`STRIP_CELLS` cells wide, at most :data:`MAX_STRIPS`); a patient in a strip is evaluated only
    in the time cells where the side differs between corners of the strip's cells, each sign change
    located by bisection to :data:`CROSSING_TOL` (patient by patient, so that a patient's time does not
    depend on the other patients of the call). The pieces between the patient's crossings are sampled
    piece by piece as in :class:`AtLeastHazard` (inverse cumulative hazard sampling, Bender, Augustin &
    Blettner 2005). The background's jumps (a life table's band edges) cut the patients' cells as they
    are nodes of :meth:`at`'s grid, and the cells they cross are candidates wherever the jump may change
    the side (:meth:`_mark_jumps`), so that a sliver where the background jumps above the fit and the
    fit overtakes it again within one cell is found. Two crossings within one cell in ``t``, or a side
    change inside a cell whose four corners agree away from a jump, may be missed (the grid assumption
    of :class:`AtLeastHazard`, on two axes). Event times agree with :meth:`at`'s to rounding where both
    find the same crossings, each crossing being located to :data:`CROSSING_TOL` from its own bracket.

    Read without an entry age (the plain :class:`Hazard` methods, e.g. in range checks) it is the
    hazard of a patient entering at the oldest age, ``at(high)``.
    """

    fit: Hazard
    background: Hazard
    until: float
    low: float
    high: float
    ages: tuple[float, ...] = ()
    family: ClassVar[str] = "at_least_from_entry_age"
    reads_entry_age: ClassVar[bool] = True
    _memo: dict = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        for name in ("fit", "background"):
            if not isinstance(getattr(self, name), Hazard):
                raise _invalid(self.family, (name,), "must be a Hazard", getattr(self, name))
        object.__setattr__(self, "until", _param(self.family, "until", self.until, "positive"))
        low = _param(self.family, "low", self.low, "nonnegative")
        high = _param(self.family, "high", self.high, "nonnegative")
        if not high >= low:
            raise _invalid(self.family, ("high",), f"must be >= low ({low!r})", high)
        ages = tuple(_param(self.family, ("ages", i), a, "nonnegative") for i, a in enumerate(self.ages))
        for name, value in (("low", low), ("high", high), ("ages", ages), ("_memo", {})):
            object.__setattr__(self, name, value)

    def at(self, age: float) -> AtLeastHazard:
        """The hazard of a patient who entered at ``age`` (built once per age)."""
        key = float(age)
        h = self._memo.get(key)
        if h is None:
            h = self._memo.setdefault(key, AtLeastHazard(self.fit, ShiftedClock(self.background, key), self.until))
        return h

    # ---- the Hazard interface: a patient entering at the oldest age ----------------------------
    @property
    def cumhazard_limit(self) -> float:
        return self.at(self.high).cumhazard_limit

    def params(self) -> dict[str, Any]:
        out: dict[str, Any] = {"until": self.until, "low": self.low, "high": self.high,
                               "fit.family": self.fit.family, "background.family": self.background.family}
        out.update({f"fit.{k}": v for k, v in self.fit.params().items()})
        out.update({f"background.{k}": v for k, v in self.background.params().items()})
        return out

    def _rough_points(self) -> tuple[float, ...]:
        return self.at(self.high)._rough_points()

    def _hazard(self, t: FloatArray) -> FloatArray:
        return self.at(self.high)._hazard(t)

    def _cumhazard(self, t: FloatArray) -> FloatArray:
        return self.at(self.high)._cumhazard(t)

    def _inv_cumhazard(self, y: FloatArray) -> FloatArray:
        return self.at(self.high)._inv_cumhazard(y)

    def _conditional_time(self, x: FloatArray, e: FloatArray) -> FloatArray:
        return self.at(self.high)._conditional_time(x, e)

    # ---- per patient ---------------------------------------------------------------------------
    def _floor_larger(self, t: FloatArray, age: FloatArray) -> np.ndarray:
        return ~(self.fit._hazard(t) > self.background._hazard(t + age))  # ties: the floor, as AtLeastHazard

    def _hazard_at_entry(self, t: FloatArray, age: FloatArray) -> FloatArray:
        """:math:`\\max(h_{fit}(t), h_{bg}(age + t))` per row (arrays of one shape): the hazard itself,
        for solvers that integrate it (the forward equations)."""
        f, g = self.fit._hazard(t), self.background._hazard(t + age)
        return np.where(f > g, f, g)

    def _table(self) -> _SideTable:
        table = self._memo.get("table")
        if table is not None:
            return table
        with np.errstate(over="ignore", under="ignore", divide="ignore", invalid="ignore"):
            grid = set(np.linspace(0.0, self.until, GRID_CELLS + 1).tolist())
            grid.update(p for p in rough_points(self.fit) if 0.0 < p < self.until)
            t = np.array(sorted(grid))
            cell = self.until / GRID_CELLS
            strips = int(min(MAX_STRIPS, max(1, math.ceil((self.high - self.low) / (STRIP_CELLS * cell)))))
            a = np.linspace(self.low, self.high, strips + 1)
            side = self._floor_larger(t[None, :], a[:, None])
        c = side[:-1, :-1]
        mixed = (side[:-1, 1:] != c) | (side[1:, :-1] != c) | (side[1:, 1:] != c)
        jumps = np.array(sorted(p for p in rough_points(self.background) if self.low < p < self.high + self.until))
        if jumps.size:
            with np.errstate(over="ignore", under="ignore", divide="ignore", invalid="ignore"):
                self._mark_jumps(mixed, t, a, jumps)
        count = mixed.sum(axis=1)
        k = max(int(count.max(initial=0)), 1)
        cells = np.argsort(~mixed, axis=1, kind="stable")[:, :k]  # the mixed cells first, ascending
        cells = np.where(np.arange(k)[None, :] < count[:, None], cells, -1)
        for arr in (t, cells, count, jumps):
            arr.setflags(write=False)
        table = _SideTable(t, (self.high - self.low) / strips, cells, count, jumps)
        return self._memo.setdefault("table", table)

    def _mark_jumps(self, mixed: np.ndarray, t: FloatArray, a: FloatArray, jumps: FloatArray) -> None:
        """Mark as candidates the cells a jump of the background at age ``r`` crosses in a strip
        (``t`` from ``r - a_{j+1}`` to ``r - a_j``) when it may change the side there: when the fit,
        sampled at those cells' nodes and the range's ends, reaches the span of the background's
        values on the two sides of the jump. Their four corners may agree although the side changes
        between them (a sliver where the background jumps above the fit and the fit overtakes it
        again); the patients' cells are then cut at the jump, as :meth:`at`'s grid is."""
        n_cells = t.size - 1
        below = self.background._hazard(np.nextafter(jumps, -np.inf))
        above = self.background._hazard(jumps)
        g_lo, g_hi = np.minimum(below, above), np.maximum(below, above)
        strip, k = (v.ravel() for v in np.meshgrid(np.arange(a.size - 1), np.arange(jumps.size), indexing="ij"))
        t0 = np.clip(jumps[k] - a[strip + 1], 0.0, self.until)
        t1 = np.clip(jumps[k] - a[strip], 0.0, self.until)
        i0 = np.clip(np.searchsorted(t, t0, side="right") - 1, 0, n_cells - 1)
        i1 = np.clip(np.searchsorted(t, t1, side="left") - 1, i0, n_cells - 1)
        f0, f1, f_nodes = self.fit._hazard(t0), self.fit._hazard(t1), self.fit._hazard(t)
        f_min, f_max = np.fmin(f0, f1), np.fmax(f0, f1)
        width = int((i1 - i0).max(initial=0))
        for step in range(1, width + 1):  # the nodes strictly inside the range
            node = np.minimum(i0 + step, i1)
            f_min, f_max = np.fmin(f_min, f_nodes[node]), np.fmax(f_max, f_nodes[node])
        flag = (t1 > t0) & (f_max >= g_lo[k]) & (f_min <= g_hi[k])
        for step in range(width + 1):
            sel = flag & (i0 + step <= i1)
            mixed[strip[sel], (i0 + step)[sel]] = True

    def _side_time(self, use_floor: np.ndarray, x: FloatArray, e: FloatArray, age: FloatArray) -> FloatArray:
        out = np.empty(x.shape)
        f = use_floor
        if np.any(~f):
            out[~f] = self.fit._conditional_time(x[~f], e[~f])
        if np.any(f):
            out[f] = self.background._conditional_time(x[f] + age[f], e[f])
        return out

    def _side_cum(self, use_floor: np.ndarray, lo: FloatArray, hi: FloatArray, age: FloatArray) -> FloatArray:
        out = np.empty(lo.shape)
        f = use_floor
        with np.errstate(invalid="ignore"):
            if np.any(~f):
                out[~f] = self.fit._cumhazard(hi[~f]) - self.fit._cumhazard(lo[~f])
            if np.any(f):
                out[f] = self.background._cumhazard(hi[f] + age[f]) - self.background._cumhazard(lo[f] + age[f])
        return np.where(np.isnan(out), np.inf, np.maximum(out, 0.0))

    def _lane_pieces(self, age: FloatArray) -> tuple[FloatArray, np.ndarray, FloatArray]:
        """Per patient (rows): piece starts (0 first, ``inf`` padded), whether the floor is the larger
        on each piece, and the cumulative hazard at each piece's start (``inf`` padded)."""
        tab = self._table()
        n = age.size
        strip = (np.floor((age - self.low) / tab.width) if tab.width > 0 else np.zeros(n))
        strip = np.clip(strip, 0, tab.count.size - 1).astype(np.intp)
        count = tab.count[strip]  # candidate cells per patient, listed flat (lane-major, ascending)
        lane = np.repeat(np.arange(n), count)
        col = np.arange(lane.size) - np.repeat(np.cumsum(count) - count, count)
        c = tab.cells[strip[lane], col]
        a = age[lane]
        lo, hi = tab.t[c], tab.t[c + 1]
        if tab.jumps.size:  # cells cut at the background's jumps inside them (as at(a)'s grid holds them)
            j0 = np.searchsorted(tab.jumps, a + lo, side="right")
            cuts = np.maximum(np.searchsorted(tab.jumps, a + hi, side="left") - j0, 0)
            if np.any(cuts):
                pick = np.repeat(np.arange(lane.size), cuts + 1)
                r = np.arange(pick.size) - np.repeat(np.cumsum(cuts + 1) - (cuts + 1), cuts + 1)
                last_jump = tab.jumps.size - 1
                ap = a[pick]
                lo = np.where(r == 0, lo[pick], tab.jumps[np.minimum(j0[pick] + r - 1, last_jump)] - ap)
                hi = np.where(r == cuts[pick], hi[pick], tab.jumps[np.minimum(j0[pick] + r, last_jump)] - ap)
                lane, a = lane[pick], ap
        s_lo = self._floor_larger(lo, a)
        flip = s_lo != self._floor_larger(hi, a)
        lane, a, s_lo, lo, hi = lane[flip], a[flip], s_lo[flip], lo[flip], hi[flip]
        for _ in range(200):  # bisection, each crossing on its own: [lo, hi) holds the change of side
            wide = hi - lo > CROSSING_TOL * np.maximum(1.0, hi)
            if wide.all():  # the usual case for most steps: every interval still halves (no gathers)
                mid = 0.5 * (lo + hi)
                same = self._floor_larger(mid, a) == s_lo
                lo, hi = np.where(same, mid, lo), np.where(same, hi, mid)
                continue
            act = np.flatnonzero(wide)
            if act.size == 0:
                break
            mid = 0.5 * (lo[act] + hi[act])
            same = self._floor_larger(mid, a[act]) == s_lo[act]
            lo[act] = np.where(same, mid, lo[act])
            hi[act] = np.where(same, hi[act], mid)
        per_lane = np.bincount(lane, minlength=n)
        rank = np.arange(lane.size) - (np.cumsum(per_lane) - per_lane)[lane]
        starts = np.full((n, int(per_lane.max(initial=0)) + 1), np.inf)
        starts[:, 0] = 0.0
        starts[lane, 1 + rank] = hi
        with np.errstate(invalid="ignore"):  # inf - inf between padded entries
            dup = np.concatenate((np.zeros((n, 1), dtype=bool), np.diff(starts, axis=1) <= 0.0), axis=1)
        if np.any(dup & np.isfinite(starts)):
            starts = np.sort(np.where(dup, np.inf, starts), axis=1)
        valid = np.isfinite(starts)
        nxt = np.concatenate((starts[:, 1:], np.full((n, 1), np.inf)), axis=1)
        ends = np.where(np.isfinite(nxt), nxt, np.maximum(self.until, starts))
        ages = np.broadcast_to(age[:, None], starts.shape)
        with np.errstate(invalid="ignore"):
            probe = np.where(valid & (ends > starts), 0.5 * (starts + ends), np.where(valid, starts, 0.0))
        use_floor = self._floor_larger(probe, ages)
        inner = np.isfinite(nxt)  # pieces with a successor: their increments
        inc = np.zeros(starts.shape)
        inc[inner] = self._side_cum(use_floor[inner], starts[inner], nxt[inner], ages[inner])
        cum = np.concatenate((np.zeros((n, 1)), np.cumsum(inc[:, :-1], axis=1)), axis=1)
        return starts, use_floor, np.where(valid, cum, np.inf)

    def _conditional_time_at_entry(self, x: FloatArray, e: FloatArray, age: FloatArray) -> FloatArray:
        """Conditional event time from time since entry ``x`` with draw ``e`` for patients who entered
        at ``age`` (the kernel: valid arguments, no checks)."""
        x, e, age = (np.asarray(v, dtype=np.float64) for v in np.broadcast_arrays(x, e, age))
        shape = x.shape
        x, e, age = x.ravel(), e.ravel(), age.ravel()
        if self.ages:  # a few discrete entry ages: each group reads its own AtLeastHazard
            out = np.empty(x.shape)
            values, which = np.unique(age, return_inverse=True)
            for k, a in enumerate(values.tolist()):
                m = which == k
                out[m] = self.at(a)._conditional_time(x[m], e[m])
            return out.reshape(shape)
        starts, use_floor, cum = self._lane_pieces(age)
        rows = np.arange(x.size)
        last = np.isfinite(starts).sum(axis=1) - 1
        i = (starts <= x[:, None]).sum(axis=1) - 1
        t = self._side_time(use_floor[rows, i], x, e, age)
        end = np.where(i < last, starts[rows, np.minimum(i + 1, last)], np.inf)
        beyond = (x + t > end) & (i < last)
        if np.any(beyond):
            b = np.flatnonzero(beyond)
            ib, xb, eb, ab = i[b], x[b], e[b], age[b]
            u = self._side_cum(use_floor[b, ib], xb, end[b], ab)
            y = cum[b, ib + 1] + np.maximum(eb - u, 0.0)
            jb = np.clip((cum[b] <= y[:, None]).sum(axis=1) - 1, ib + 1, last[b])
            start = starts[b, jb]
            with np.errstate(invalid="ignore"):
                rest = np.maximum(y - cum[b, jb], 0.0)
            rest = np.where(np.isnan(rest), np.inf, rest)
            t[b] = (start - xb) + self._side_time(use_floor[b, jb], start, rest, ab)
        return t.reshape(shape)


def entry_age_times(hazards: tuple[Hazard, ...], codes: np.ndarray | None, x: FloatArray, e: FloatArray,
                    age: FloatArray) -> FloatArray:
    """Conditional event times of patients (lanes) whose hazard is ``hazards[codes]`` (``codes`` None:
    the first), each read at the patient's entry ``age`` when it depends on it (:class:`EntryAgeFloor`)
    and as a plain hazard otherwise; the engine's kernel call (valid arguments)."""
    def one(h: Hazard, m: np.ndarray | slice) -> FloatArray:
        if getattr(h, "reads_entry_age", False):
            return h._conditional_time_at_entry(x[m], e[m], age[m])
        return h._conditional_time(x[m], e[m])

    if codes is None or len(hazards) == 1:
        return one(hazards[0], slice(None))
    out = np.empty(np.shape(x))
    for c, h in enumerate(hazards):
        m = codes == c
        if np.any(m):
            out[m] = one(h, m)
    return out


def by_entry_age(h: Hazard, ages: FloatArray, rows: np.ndarray) -> list[tuple[Hazard, np.ndarray]]:
    """``rows`` (indices into ``ages``, the rows' entry ages) grouped by the hazard each reads: ``h``
    for all of them, or for an :class:`EntryAgeFloor` the hazard of each distinct entry age
    (:meth:`EntryAgeFloor.at`); for solvers that integrate per (entry age, sex) row."""
    if not getattr(h, "reads_entry_age", False) or rows.size == 0:
        return [(h, rows)]
    values, which = np.unique(np.asarray(ages, dtype=np.float64)[rows], return_inverse=True)
    return [(h.at(a), rows[which == k]) for k, a in enumerate(values.tolist())]
