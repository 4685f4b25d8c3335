"""Integration of the stacked Kolmogorov forward equations in segments, with a bounded amount of work.

The forward equations of m rows (entry age, sex, strategy) are one ODE system. Its rows run on a
shared axis u, row r starting at s_r: either time since entry (s_r = 0) or attained age (s_r = the
row's entry age), whichever has fewer break points. A break point is where some hazard jumps (a band
edge of a piecewise-constant hazard such as a life table, mapped to the axis row by row) or where a
row starts. The ODE solver is restarted at every break point, so that no adaptive step straddles a
jump (such a step is rejected again and again, and what is accepted loses accuracy). Within a segment
a piecewise-constant hazard is constant: it is evaluated once, at the segment's middle, and only the
smooth hazards are evaluated in the right-hand side. On the age axis the bands of a life table on the
age clock are shared by every row: about (number of bands crossed + number of entry ages) segments,
instead of one jump per band per entry age on the time axis.

Method per segment: explicit DOP853 unless the segment is stiff, then the implicit BDF method (orders 1
to 5, Shampine & Reichelt 1997, SIAM J Sci Comput 18(1):1-22, as in ``scipy.integrate.BDF``) with the
exact sparse Jacobian of the linear system, at the tighter tolerances :data:`STIFF_RTOL` and
:data:`STIFF_ATOL` (its error estimate is less sharp than DOP853's; scipy's Radau would be more
accurate but spends most of its time in a slow mixed real/complex product on systems this size). Stiff
means that the largest total exit rate of a state, integrated over the segment, exceeds
:data:`STIFF_RATE_INTEGRAL`: an explicit method would need about that many steps divided by its
stability bound (about 6 for DOP853) just to stay stable. An explicit attempt that still takes more
than :data:`EXPLICIT_EVALUATIONS` right-hand-side evaluations is abandoned and the segment redone with
BDF. All attempts together may use at most :data:`MAX_EVALUATIONS` evaluations; beyond that, or when
the solver fails or a rate is not finite, :class:`NoExactSolution` says why, so that a run keeps its
simulation and reports "no exact solution".

A cancel request (an object with ``is_set()`` or a callable) is checked at every segment start and
every :data:`CANCEL_EVERY` right-hand-side or Jacobian evaluations, raising
:class:`sim.engine.SimulationCancelled`.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray
from scipy import sparse
from scipy.integrate import BDF, DOP853, OdeSolver

from ..engine import CancelToken, SimulationCancelled, cancel_requested
from ..hazards import KERNEL_ERRSTATE, Hazard, PiecewiseConstant, ProportionalHazards

__all__ = ["NoExactSolution", "ExitRates", "integrate_segments", "RTOL", "ATOL", "STIFF_RATE_INTEGRAL",
           "EXPLICIT_EVALUATIONS", "MAX_EVALUATIONS", "CANCEL_EVERY", "START_PHASE", "STIFF_RTOL", "STIFF_ATOL"]

RTOL = 1e-10
ATOL = 1e-12
STIFF_RATE_INTEGRAL = 2000.0
EXPLICIT_EVALUATIONS = 30_000
MAX_EVALUATIONS = 150_000
CANCEL_EVERY = 8
START_PHASE = 0.5
STIFF_RTOL = 1e-11
STIFF_ATOL = 1e-13


class NoExactSolution(ValueError):
    """The model has no exact Kolmogorov reference (it is semi-Markov), or the solver cannot reach it
    within its bounded work (the message says which)."""


class ExitRates(NamedTuple):
    """One exit of the stacked system: source and target state, the hazards with the rows that use each,
    the clock reading at entry per row and whether the clock advances with time (a clock that does not
    advance carries a constant hazard)."""

    source: int
    target: int
    groups: tuple[tuple[Hazard, NDArray[np.int64]], ...]
    offset: NDArray[np.float64]
    moving: bool


class _Overrun(Exception):
    """An explicit attempt used its evaluations (internal: the segment is redone with the stiff method)."""


def band_edges(h: Hazard) -> NDArray[np.float64] | None:
    """Clock values where a piecewise-constant hazard jumps (empty if constant), or None for any other
    hazard (continuous for clock > 0)."""
    if isinstance(h, ProportionalHazards):
        return np.empty(0) if h.hr == 0.0 else band_edges(h.base)
    if isinstance(h, PiecewiseConstant):
        return np.asarray(h.breaks[1:], dtype=float)
    return None


@dataclass
class _Work:
    """Counts right-hand-side evaluations, checks for cancel at a bounded rate, enforces the budget."""

    cancel: CancelToken | Callable[[], bool] | None
    used: int = 0
    attempt_limit: int = MAX_EVALUATIONS
    first_step: float | None = None  # the largest step of the last segment solved
    tolerance_scale: float = 1.0  # times the solvers' rtol and atol

    def check_cancel(self) -> None:
        if cancel_requested(self.cancel):
            raise SimulationCancelled("exact solution cancelled")

    def tick(self) -> None:
        self.used += 1
        if self.used % CANCEL_EVERY == 0:
            self.check_cancel()
        if self.used > self.attempt_limit:
            raise _Overrun


class _Segment:
    """The forward equations of the rows active on [lo, hi]: right-hand side, Jacobian and stiffness."""

    def __init__(self, lo: float, hi: float, active: NDArray[np.int64], system: "_Stacked") -> None:
        self.lo, self.hi, self.active = lo, hi, active
        self.n, self.deltas, self.src, self.dst = system.n, system.deltas, system.src, system.dst
        a, k_ex = active.size, system.src.size
        local = np.full(system.m, -1)
        local[active] = np.arange(a)
        self.start = system.start[active]
        # each row's piecewise-constant hazards at the middle of its part of the segment, [lo, min(hi,
        # its end)]: a row whose end (a jump of its own) falls inside the segment keeps its last band's
        # value beyond it, where its values are not read
        mid = 0.5 * (lo + np.clip(system.end, lo, hi))
        self.fixed = system.fixed[:, active].copy()
        # (exit, hazard, rows, clock offsets, entry ages for a hazard that reads them else None)
        self.smooth: list[tuple[int, Hazard, NDArray[np.int64], NDArray[np.float64], NDArray | None]] = []
        self.copies: list[tuple[int, int]] = []
        with np.errstate(**KERNEL_ERRSTATE):
            for k, ex in enumerate(system.exits):
                if not ex.moving:
                    continue
                if system.first_of[k] != k:
                    self.copies.append((k, system.first_of[k]))
                    continue
                for h, rows in ex.groups:
                    pos = local[rows]
                    keep = pos >= 0
                    if not keep.any():
                        continue
                    rows, pos = rows[keep], pos[keep]
                    c = ex.offset[rows] - system.start[rows]  # clock = c + u
                    if band_edges(h) is not None:  # constant within the segment
                        self.fixed[k, pos] = h._hazard(np.maximum(c + mid[rows], 0.0))
                    else:
                        entry = system.entry_age[rows] if getattr(h, "reads_entry_age", False) else None
                        self.smooth.append((k, h, pos, c, entry))
        for k, first in self.copies:
            self.fixed[k] = self.fixed[first]
        self.size_p = a * self.n
        self.size_i = self.deltas.size * a * self.n

    def rates(self, u: float) -> NDArray[np.float64]:
        """(exits, active rows) hazards at axis value u."""
        if not self.smooth:
            return self.fixed
        out = self.fixed.copy()
        with np.errstate(**KERNEL_ERRSTATE):
            for k, h, pos, c, entry in self.smooth:
                clock = np.maximum(c + u, 0.0)
                out[k, pos] = h._hazard(clock) if entry is None else h._hazard_at_entry(clock, entry)
        for k, first in self.copies:
            out[k] = out[first]
        return out

    def discount(self, u: float) -> NDArray[np.float64]:
        """(rates, active rows) discount factors exp(-delta (u - s_r))."""
        return np.exp(-self.deltas[:, None] * (u - self.start)[None, :])

    def rhs(self, u: float, y: NDArray[np.float64]) -> NDArray[np.float64]:
        a, n = self.active.size, self.n
        p = y[:self.size_p].reshape(a, n)
        flow = p[:, self.src] * self.rates(u).T  # (a, exits)
        dp = np.zeros((n, a))  # transposed: one contiguous row per state
        flow_t = flow.T
        for k, j in enumerate(self.src):  # out of each exit's source, then into its target, in exit
            dp[j] -= flow_t[k]            # order (the sums of np.add.at, to the bit, but faster)
        for k, j in enumerate(self.dst):
            dp[j] += flow_t[k]
        dp = dp.T
        disc = self.discount(u)[:, :, None]
        return np.concatenate([dp.ravel(), (disc * p).ravel(), (disc * flow).ravel()])

    def jacobian(self, u: float) -> sparse.csc_matrix:
        """The exact Jacobian of the (linear) right-hand side: the generator blocks for p, the discount
        factors for the time-in-state integrals, discounted rates for the flows."""
        a, n, k_ex, r_n = self.active.size, self.n, self.src.size, self.deltas.size
        rates = self.rates(u)  # (k, a)
        disc = self.discount(u)  # (R, a)
        rows_a = np.arange(a)
        col_src = (rows_a[None, :] * n + self.src[:, None])  # (k, a)
        eq_dst = rows_a[None, :] * n + self.dst[:, None]
        q_idx = np.arange(r_n)[:, None, None]
        eq_i = self.size_p + ((q_idx * a + rows_a[None, :, None]) * n + np.arange(n)[None, None, :])
        col_i = np.broadcast_to(rows_a[None, :, None] * n + np.arange(n)[None, None, :], eq_i.shape)
        eq_f = (self.size_p + self.size_i + (q_idx * a + rows_a[None, :, None]) * k_ex
                + np.arange(k_ex)[None, None, :])
        col_f = np.broadcast_to(col_src.T[None], eq_f.shape)
        val_f = disc[:, :, None] * rates.T[None]
        rows = np.concatenate([col_src.ravel(), eq_dst.ravel(), eq_i.ravel(), eq_f.ravel()])
        cols = np.concatenate([col_src.ravel(), col_src.ravel(), col_i.ravel(), col_f.ravel()])
        vals = np.concatenate([-rates.ravel(), rates.ravel(), np.broadcast_to(disc[:, :, None], eq_i.shape).ravel(),
                               val_f.ravel()])
        size = self.size_i + self.size_p + r_n * a * k_ex
        return sparse.csc_matrix((vals, (rows, cols)), shape=(size, size))

    def rate_integral(self, samples: int = 4) -> float:
        """Largest total exit rate of a state, integrated over the segment (midpoint rule)."""
        width = (self.hi - self.lo) / samples
        total = 0.0
        for j in range(samples):
            rates = self.rates(self.lo + (j + 0.5) * width)
            out = np.zeros((self.n, rates.shape[1]))
            np.add.at(out, self.src, rates)
            if not np.all(np.isfinite(out)):
                return np.inf
            total += float(out.max(initial=0.0)) * width
        return total


@dataclass
class _Stacked:
    n: int
    m: int
    exits: Sequence[ExitRates]
    src: NDArray[np.int64]
    dst: NDArray[np.int64]
    deltas: NDArray[np.float64]
    start: NDArray[np.float64]  # per row, the axis value at time since entry 0
    fixed: NDArray[np.float64]
    first_of: list[int]
    end: NDArray[np.float64]  # per row, the axis value where the current sweep stops reading it
    entry_age: NDArray[np.float64] | None = None  # per row, for hazards that read it (EntryAgeFloor)


def _own_edges(exits: Sequence[ExitRates], origin: NDArray[np.float64]
               ) -> list[tuple[NDArray[np.int64], NDArray[np.float64]]]:
    """Each row's hazard jumps on the axis: (rows, (rows, edges) axis values) per piecewise-constant
    hazard on a moving clock."""
    out = []
    for ex in exits:
        if not ex.moving:
            continue
        for h, rows in ex.groups:
            edges = band_edges(h)
            if edges is not None and edges.size:
                out.append((rows, edges[None, :] + (origin[rows] - ex.offset[rows])[:, None]))
    return out


def _axis_breaks(exits: Sequence[ExitRates], origin: NDArray[np.float64], begin: NDArray[np.float64],
                 end: NDArray[np.float64]) -> NDArray[np.float64]:
    """Sorted break points from min(begin) to max(end) over the rows that take part (finite begin): row
    starts and each row's own hazard jumps in (begin_r, end_r). A row's end is not a break point: in the
    segment holding it the row keeps its last band's rates beyond it (see :class:`_Segment`)."""
    live = np.isfinite(begin)
    lo, hi = float(begin[live].min()), float(end[live].max())
    pts = [begin[live]]
    for rows, at in _own_edges(exits, origin):
        inside = live[rows, None] & (at > begin[rows, None]) & (at < end[rows, None])
        pts.append(at[inside])
    u = np.unique(np.concatenate(pts))
    u = u[(u > lo) & (u < hi)]
    if u.size:  # merge points closer than rounding (the same band edge seen from different rows)
        tol = 1e-12 * max(1.0, abs(hi))
        u = u[np.concatenate(([True], np.diff(u) > tol))]
    return np.concatenate(([lo], u, [hi]))


def _joins(exits: Sequence[ExitRates], age: NDArray[np.float64], t1: float,
           span: NDArray[np.float64]) -> NDArray[np.float64]:
    """Where each row moves from the time-since-entry axis to the age axis (an attained age): its first
    own hazard jump at or after age + t1 and before age + span (a band edge the age axis breaks at
    anyway), else age + t1; age + span for a row whose span ends before t1 (it stays on time since
    entry)."""
    first = np.full(age.size, np.inf)
    for rows, at in _own_edges(exits, age):
        later = np.where((at >= (age + t1)[rows, None]) & (at < (age + span)[rows, None]), at, np.inf)
        first[rows] = np.minimum(first[rows], later.min(axis=1, initial=np.inf))
    join = np.where(np.isfinite(first), first, age + t1)
    return np.where(span <= t1, age + span, join)


class _Solved(NamedTuple):
    end: NDArray[np.float64]  # the state at the segment's end
    at: NDArray[np.float64]  # (queries, block) each query's row block at the query's axis value
    largest_step: float


def _row_blocks(a: int, n: int, r_n: int, k_ex: int, rows: NDArray[np.int64]) -> NDArray[np.int64]:
    """Indices into the stacked state of each row's block: its occupancy (n), then its integrals
    (r_n x n) and flows (r_n x k_ex), in the layout [p (a, n) | integrals (r_n, a, n) | flows (r_n, a, k)]."""
    r = np.arange(r_n)[:, None]
    occ = np.arange(n)
    integ = (a * n + (r * a) * n + np.arange(n)).ravel()  # row 0's integral indices, per rate
    flow = (a * n * (1 + r_n) + (r * a) * k_ex + np.arange(k_ex)).ravel()
    step = np.concatenate([np.full(n, n), np.full(r_n * n, n), np.full(r_n * k_ex, k_ex)])
    return np.concatenate([occ, integ, flow])[None, :] + rows[:, None] * step[None, :]


def _dense_at(dense, u: NDArray[np.float64], index: NDArray[np.int64]) -> NDArray[np.float64]:
    """The dense output at axis values ``u`` (queries), only the components ``index`` (queries, c) of
    each: an explicit Runge-Kutta interpolant is evaluated on those components alone (the cost is
    queries x c, not queries x the whole system); other interpolants are evaluated whole, then read."""
    f, y_old, h = getattr(dense, "F", None), getattr(dense, "y_old", None), getattr(dense, "h", None)
    if f is None or y_old is None or h is None:  # e.g. BDF's interpolant
        return np.take_along_axis(np.asarray(dense(u)).T, index, axis=1)
    x = ((u - dense.t_old) / h)[:, None]
    out = np.zeros(index.shape)
    for i, coef in enumerate(reversed(f)):  # DOP853's interpolant (scipy.integrate._ivp.rk), by component
        out += coef[index]
        out *= x if i % 2 == 0 else 1 - x
    return out + y_old[index]


def _run(method: type[OdeSolver], fun: Callable, seg: _Segment, y: NDArray[np.float64],
         u: NDArray[np.float64], index: NDArray[np.int64], **options) -> _Solved:
    """Step ``method`` over the segment; at each query axis value ``u`` (sorted) read the components
    ``index`` (queries, c) of the solution from the step's dense output."""
    rtol, atol = (RTOL, ATOL) if method is DOP853 else (STIFF_RTOL, STIFF_ATOL)
    scale = options.pop("tolerance_scale", 1.0)
    solver = method(fun, seg.lo, y, seg.hi, rtol=rtol * scale, atol=atol * scale, **options)
    at = np.empty(index.shape)
    done, largest = 0, 0.0
    while solver.status == "running":
        message = solver.step()
        if solver.status == "failed":
            raise NoExactSolution(f"no exact solution: the ODE solver failed between axis values {seg.lo:g} and "
                                  f"{seg.hi:g} ({message})")
        largest = max(largest, solver.t - solver.t_old)
        upto = int(np.searchsorted(u, solver.t, side="right"))
        if upto > done:
            at[done:upto] = _dense_at(solver.dense_output(), u[done:upto], index[done:upto])
            done = upto
    at[done:] = solver.y[index[done:]]  # queries at the end, beyond it by rounding
    if not np.all(np.isfinite(solver.y)):
        raise NoExactSolution(f"no exact solution: the ODE solver's values stopped being finite between axis "
                              f"values {seg.lo:g} and {seg.hi:g}")
    return _Solved(solver.y, at, largest)


def _solve_segment(seg: _Segment, y: NDArray[np.float64], u: NDArray[np.float64], index: NDArray[np.int64],
                   work: _Work, first_step: float | None) -> _Solved:
    """One segment: explicit unless stiff; an explicit overrun is redone with the stiff method; bounded work."""
    stiffness = seg.rate_integral()
    if not np.isfinite(stiffness):
        raise NoExactSolution(f"no exact solution: a transition rate is not finite between axis values "
                              f"{seg.lo:g} and {seg.hi:g} (hazards overflow)")

    def fun(u: float, z: NDArray[np.float64]) -> NDArray[np.float64]:
        work.tick()
        return seg.rhs(u, z)

    if stiffness <= STIFF_RATE_INTEGRAL:
        work.attempt_limit = min(work.used + EXPLICIT_EVALUATIONS, MAX_EVALUATIONS)
        options = {} if first_step is None else {"first_step": min(first_step, seg.hi - seg.lo)}
        try:
            return _run(DOP853, fun, seg, y, u, index, tolerance_scale=work.tolerance_scale, **options)
        except _Overrun:
            if work.used >= MAX_EVALUATIONS:
                raise _too_much(seg, stiffness) from None
    work.attempt_limit = MAX_EVALUATIONS

    def jac(u: float, z: NDArray[np.float64]) -> sparse.csc_matrix:
        work.tick()
        return seg.jacobian(u)

    try:
        return _run(BDF, fun, seg, y, u, index, jac=jac, tolerance_scale=work.tolerance_scale)
    except _Overrun:
        raise _too_much(seg, stiffness) from None


def _too_much(seg: _Segment, stiffness: float) -> NoExactSolution:
    return NoExactSolution(
        f"no exact solution: the forward equations need more than {MAX_EVALUATIONS:,} evaluations (the "
        f"solver's work limit) between axis values {seg.lo:g} and {seg.hi:g}, where the largest exit rate "
        f"integrates to {stiffness:.3g} (a stiff system: rates far apart, e.g. an extreme hazard ratio or "
        f"a very steep background hazard); the simulation's results stand without an exact reference")


def integrate_segments(exits: Sequence[ExitRates], n_states: int, entry_age: NDArray[np.float64],
                       p0: NDArray[np.float64], f0: NDArray[np.float64], t0: float, times: NDArray[np.float64],
                       horizon: NDArray[np.float64], deltas: NDArray[np.float64],
                       cancel: CancelToken | Callable[[], bool] | None = None, to_horizon: bool = False,
                       blocks: tuple[NDArray[np.int64], NDArray[np.float64]] | None = None,
                       tolerance_scale: float = 1.0) -> tuple[NDArray[np.float64], ...]:
    """Integrate the stacked forward equations from time since entry t0 (state p0 (m, n), flows f0
    (R, m, exits)) in segments between break points.

    On the time-since-entry axis every row starts at once. When attained age has fewer break points,
    the first :data:`START_PHASE` years are still integrated on time since entry (a hazard singular at
    entry, such as a Weibull hazard of shape 1.3 whose derivative is infinite there, needs small steps
    near the start: taken once for all rows rather than at each row's start), and the rest on age. Each
    row moves to the age axis at its first band edge after START_PHASE (:func:`_joins`), so that row
    starts add no break points to the age axis: on time since entry it is read there from the step's
    dense output, its rates held over the rest of that segment.

    ``to_horizon``: occupancy is wanted only at times up to each row's horizon (entries past it are
    NaN), and each row is integrated only to its horizon. ``blocks``: (rows, times) of further
    queries, each reading its row's whole state (occupancy, integrals, flows) at a time in [t0, the
    row's horizon]. ``tolerance_scale`` multiplies the solvers' tolerances.

    Returns
    -------
    occupancy : (m, len(times), n), p at max(times, t0).
    integrals : (R, m, n), integral of exp(-delta_r t) p(t) over [t0, horizon_m] (0 if horizon_m <= t0).
    flows : (R, m, exits), f0 plus the discounted flows over [t0, horizon_m].
    blocks : only if ``blocks`` is given: (queries, n + R n + R exits), each query's row state, in the
        layout of :func:`_row_blocks` (occupancy, then integrals and flows rate by rate).

    Raises
    ------
    NoExactSolution : the work limit is reached, the solver fails or a rate is not finite.
    sim.engine.SimulationCancelled : on a cancel request.
    """
    m, k_ex, r_n = entry_age.size, len(exits), deltas.size
    src = np.array([e.source for e in exits], dtype=int)
    dst = np.array([e.target for e in exits], dtype=int)
    fixed = np.zeros((k_ex, m))  # constant hazards (time-in-state clock) evaluated once
    for k, ex in enumerate(exits):
        if not ex.moving:
            for h, rows in ex.groups:
                fixed[k, rows] = h.hazard(ex.offset[rows])
    # exits sharing a hazard and clock (background death from every living state) share one evaluation
    shared: dict[tuple, int] = {}
    first_of = [shared.setdefault((tuple(id(h) for h, _ in ex.groups), ex.moving, ex.offset.tobytes()), k)
                for k, ex in enumerate(exits)]
    system = _Stacked(n_states, m, exits, src, dst, deltas, np.zeros(m), fixed, first_of, np.full(m, np.inf),
                      np.asarray(entry_age, dtype=float))
    span = np.maximum(horizon, t0) if to_horizon else np.maximum(horizon, float(times.max(initial=t0)))
    span = np.maximum(span, t0)
    queries = _Queries(times, t0, horizon, span, blocks)
    state = (p0.copy(), np.zeros((r_n, m, n_states)), f0.copy())
    out = (np.full((m, times.size, n_states), np.nan), np.zeros((r_n, m, n_states)), f0.copy(),
           np.full((queries.bq_row.size, n_states * (1 + r_n) + r_n * k_ex), np.nan))
    if blocks is None:
        out = out[:3]
    work = _Work(cancel, tolerance_scale=tolerance_scale)
    zero, age = np.zeros(m), np.asarray(entry_age, dtype=float)
    begin = np.full(m, t0)
    if not np.any(span > t0):
        _answer_at_start(queries, state, out)
        return out
    on_time = _axis_breaks(exits, zero, begin, span)
    on_age = _axis_breaks(exits, age, age + begin, age + span)
    t1 = t0 + START_PHASE
    if on_age.size >= on_time.size or t1 >= float(span.max()):
        _sweep(system, zero, begin, span, on_time, queries, state, out, work)
        return out
    join = _joins(exits, age, t1, span)
    to_age = join < age + span
    _sweep(system, zero, begin, join - age, _axis_breaks(exits, zero, begin, join - age), queries, state, out, work)
    if np.any(to_age):
        begin_age = np.where(to_age, join, np.inf)
        _sweep(system, age, begin_age, age + span, _axis_breaks(exits, age, begin_age, age + span),
               queries, state, out, work)
    return out


class _Queries:
    """What to read from the solution: occupancy of each row at max(times, t0) (up to the row's span)
    and its integrals and flows at its horizon (if after t0); each answered once, by the sweep that
    reaches it."""

    def __init__(self, times: NDArray[np.float64], t0: float, horizon: NDArray[np.float64],
                 span: NDArray[np.float64], blocks: tuple[NDArray[np.int64], NDArray[np.float64]] | None) -> None:
        m = horizon.size
        self.n_times = times.size
        self.occ_row = np.repeat(np.arange(m), times.size)
        self.occ_t = np.tile(np.maximum(times, t0), m)
        self.occ_done = self.occ_t > span[self.occ_row]  # not wanted: left NaN
        self.hz_row = np.flatnonzero(horizon > t0)
        self.hz_t = horizon[self.hz_row]
        self.hz_done = np.zeros(self.hz_row.size, dtype=bool)
        self.bq_row, self.bq_t = ((np.zeros(0, dtype=np.int64), np.zeros(0)) if blocks is None
                                  else (np.asarray(blocks[0]), np.maximum(np.asarray(blocks[1], dtype=float), t0)))
        self.bq_done = np.zeros(self.bq_row.size, dtype=bool)


def _answer_at_start(queries: _Queries, state: tuple, out: tuple) -> None:
    """Every row ends at t0: the occupancy queries read the state there."""
    take = ~queries.occ_done
    out[0].reshape(-1, out[0].shape[2])[take] = state[0][queries.occ_row[take]]


def _sweep(system: _Stacked, origin: NDArray[np.float64], begin: NDArray[np.float64], end: NDArray[np.float64],
           breaks: NDArray[np.float64], queries: _Queries, state: tuple, out: tuple, work: _Work) -> None:
    """Integrate every row r whose ``begin`` is finite from axis value begin_r (origin_r is the axis value
    at time since entry 0) to end_r, restarting the solver at each break point. The row is active in the
    segments from the one starting at begin_r to the one holding end_r; the queries it reaches by end_r
    are answered (``out``) and ``state`` (p, integrals, flows) is set to its value at end_r."""
    m, n, r_n, k_ex = system.m, system.n, system.deltas.size, system.src.size
    system.start, system.end = origin, end
    p, acc_i, acc_f = state
    occ, integrals, flows = out[:3]
    n_seg = breaks.size - 1
    live = np.isfinite(begin)
    first_seg = np.where(live, np.clip(np.searchsorted(breaks, np.where(live, begin, 0.0), side="right") - 1,
                                       0, n_seg - 1), n_seg)
    last_seg = np.clip(np.searchsorted(breaks, end, side="left") - 1, 0, n_seg - 1)

    def assign(rows: NDArray[np.int64], t: NDArray[np.float64], done: NDArray[np.bool_]):
        u = origin[rows] + t
        take = ~done & live[rows] & (u <= end[rows])
        done |= take
        seg = np.clip(np.searchsorted(breaks, u, side="right") - 1, first_seg[rows], last_seg[rows])
        return np.where(take, seg, -1), u

    occ_seg, occ_u = assign(queries.occ_row, queries.occ_t, queries.occ_done)
    hz_seg, hz_u = assign(queries.hz_row, queries.hz_t, queries.hz_done)
    bq_seg, bq_u = assign(queries.bq_row, queries.bq_t, queries.bq_done)
    join_row = np.flatnonzero(live)  # each row's state at its end, for the next sweep
    join_seg, join_u = last_seg[join_row], end[join_row]
    for i in range(n_seg):
        work.check_cancel()
        active = np.flatnonzero((first_seg <= i) & (last_seg >= i))
        if not active.size:
            continue
        seg = _Segment(float(breaks[i]), float(breaks[i + 1]), active, system)
        y = np.concatenate([p[active].ravel(), acc_i[:, active].ravel(), acc_f[:, active].ravel()])
        q_occ, q_hz, q_join = np.flatnonzero(occ_seg == i), np.flatnonzero(hz_seg == i), np.flatnonzero(join_seg == i)
        q_bq = np.flatnonzero(bq_seg == i)
        a = active.size
        local = np.full(m, -1)
        local[active] = np.arange(a)
        # this segment's queries, (axis value, row) pairs: each reads its own row's block only
        q_u = np.concatenate([occ_u[q_occ], hz_u[q_hz], join_u[q_join], bq_u[q_bq]])
        order = np.argsort(q_u, kind="stable")
        q_rows = local[np.concatenate([queries.occ_row[q_occ], queries.hz_row[q_hz], join_row[q_join],
                                       queries.bq_row[q_bq]])][order]
        solved = _solve_segment(seg, y, q_u[order], _row_blocks(a, n, r_n, k_ex, q_rows), work, work.first_step)
        work.first_step = solved.largest_step  # the next segment starts there (the last step is cut short)
        block = np.empty_like(solved.at)
        block[order] = solved.at
        p[active] = solved.end[:a * n].reshape(a, n)
        acc_i[:, active] = solved.end[a * n:a * n * (1 + r_n)].reshape(r_n, a, n)
        acc_f[:, active] = solved.end[a * n * (1 + r_n):].reshape(r_n, a, k_ex)
        if q_occ.size:
            occ.reshape(-1, n)[q_occ] = block[:q_occ.size, :n]
        if q_hz.size:
            hz = block[q_occ.size:q_occ.size + q_hz.size]
            rows = queries.hz_row[q_hz]
            integrals[:, rows] = np.moveaxis(hz[:, n:n * (1 + r_n)].reshape(-1, r_n, n), 0, 1)
            flows[:, rows] = np.moveaxis(hz[:, n * (1 + r_n):].reshape(-1, r_n, k_ex), 0, 1)
        if q_bq.size:
            out[3][q_bq] = block[q_occ.size + q_hz.size + q_join.size:]
        if q_join.size:  # rows whose end falls inside the segment: their state there, not at its end
            jb = block[q_occ.size + q_hz.size:q_occ.size + q_hz.size + q_join.size]
            rows = join_row[q_join]
            p[rows] = jb[:, :n]
            acc_i[:, rows] = np.moveaxis(jb[:, n:n * (1 + r_n)].reshape(-1, r_n, n), 0, 1)
            acc_f[:, rows] = np.moveaxis(jb[:, n * (1 + r_n):].reshape(-1, r_n, k_ex), 0, 1)
