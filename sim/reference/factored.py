"""The forward equations with a life-table background factored out of the ODE.

When background mortality is one hazard mu(t) per row (entry age, sex, strategy), the same from every
living state, into the model's only absorbing state d, the living states' occupancy factorises:

    p_i(t) = p~_i(t) S(t),   S(t) = exp(-(Lambda(c + t) - Lambda(c + t0))),   i living,

where p~ solves the forward equations without the background exits and Lambda is the background's
cumulative hazard at clock reading c + t (differentiate: p_i' = p~_i' S - mu p~_i S, the forward
equation with mu added to every living state's exits). For a piecewise-constant background (a life
table) the reduced system has none of its jumps, so the ODE solver needs no restart at its band edges
(docs/methods.md, 'Exact solution'); S is exact, piecewise exponential. The dead state follows from
the conservation of probability, p_d = sum(p0) - sum of the living p_i.

The time-in-state integrals and flows of the full model are Stieltjes integrals over S of the reduced
system's accumulated quantities X (its discounted time-in-state integrals I~ and flows F~, which the
ODE carries): on a piece [lo, hi] of constant mu (integration by parts, S' = -mu S),

    integral of S dX over [lo, hi] = S(hi) (X(hi) - X(lo)) + mu * integral of S(s) (X(s) - X(lo)) ds,

and the background flow from living state i is mu times the piece's integral of S dI~_i. The last
integral is a Gauss-Legendre rule (:data:`NODES` nodes) on the solver's dense output; its integrand
is smooth on each piece (pieces end at band edges, at the reduced system's own jumps and at the
horizon, and are graded geometrically towards the start, where hazards on time since entry may be
singular, e.g. a Weibull hazard of shape 1.3).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np
from numpy.typing import NDArray

from ..engine import CancelToken
from ..hazards import KERNEL_ERRSTATE, AtLeastHazard
from .forward import ExitRates, _own_edges, band_edges, integrate_segments

__all__ = ["background_target", "integrate_factored", "NODES", "GRADING", "TOLERANCE_SCALE"]

NODES = 6  # Gauss-Legendre nodes per piece (exact for polynomials of degree 11)
GRADING = 10  # pieces graded towards the start, each 1/4 of the next: the first spans 4^-10 of the first year
TOLERANCE_SCALE = 0.01  # the reduced system's steps are not cut at band edges: tighter tolerances keep
                       # its accuracy at least that of the restarted full system (1e-11 and better)


def background_target(exits: Sequence[ExitRates], background: Sequence[bool],
                      absorbing: NDArray[np.bool_]) -> int | None:
    """The background's target d when the background can be factored out of the forward equations,
    else None: background exits leave every living state (one each) into d, the model's only absorbing
    state, all with the same piecewise-constant hazard per row on the same advancing clock, and no
    other exit's hazard is floored at the background (``at_least_background``: it would jump with it)."""
    bg = [k for k, b in enumerate(background) if b]
    if not bg or int(absorbing.sum()) != 1:
        return None
    first = exits[bg[0]]
    d = first.target
    if not absorbing[d] or sorted(exits[k].source for k in bg) != sorted(np.flatnonzero(~absorbing).tolist()):
        return None
    key = [(id(h), rows.tobytes()) for h, rows in first.groups]
    for k in bg:
        ex = exits[k]
        if (ex.target != d or not ex.moving or not np.array_equal(ex.offset, first.offset)
                or [(id(h), rows.tobytes()) for h, rows in ex.groups] != key):
            return None
    if any(band_edges(h) is None for h, _ in first.groups):
        return None  # a smooth background (e.g. Gompertz) has no jumps to remove
    if any(isinstance(h, AtLeastHazard) or isinstance(getattr(h, "base", None), AtLeastHazard)
           or getattr(h, "reads_entry_age", False)
           for k, ex in enumerate(exits) if not background[k] for h, _ in ex.groups):
        return None  # a transition floored at the background jumps with it: restart at the band edges
    return d


def _pieces(exits: Sequence[ExitRates], bg_exit: ExitRates, t0: float, horizon: NDArray[np.float64]
            ) -> tuple[NDArray[np.int64], NDArray[np.float64], NDArray[np.float64]]:
    """Pieces (row, lo, hi) covering [t0, horizon_r] of each row with horizon_r > t0, sorted by row
    and time: between the background's band edges, the reduced system's own jumps and graded points
    near t0."""
    m = horizon.size
    zero = np.zeros(m)
    rows_all = [np.arange(m), np.arange(m)]
    pts = [np.full(m, t0), horizon.astype(float)]
    for rows, at in _own_edges([*exits, bg_exit], zero):
        rows_all.append(np.repeat(rows, at.shape[1]))
        pts.append(at.ravel())
    row = np.concatenate(rows_all)
    u = np.concatenate(pts)
    # graded points towards t0: t0 + g 4^-j, g the first piece's width (at most 1 year)
    first = np.full(m, np.inf)
    np.minimum.at(first, row, np.where(u > t0, u, np.inf))
    width = np.minimum(first - t0, 1.0)
    grade = t0 + width[:, None] * 4.0 ** -np.arange(1, GRADING + 1)[None, :]
    row = np.concatenate([row, np.repeat(np.arange(m), GRADING)])
    u = np.concatenate([u, grade.ravel()])
    keep = (u >= t0) & (u <= horizon[row])
    row, u = row[keep], u[keep]
    order = np.lexsort((u, row))
    row, u = row[order], u[order]
    distinct = np.concatenate(([True], (np.diff(row) != 0) | (np.diff(u) > 1e-12 * np.maximum(1.0, np.abs(u[1:])))))
    row, u = row[distinct], u[distinct]
    same = np.flatnonzero((row[1:] == row[:-1]) & (horizon[row[:-1]] > t0))
    return row[same], u[same], u[same + 1]


def integrate_factored(exits: Sequence[ExitRates], background: Sequence[bool], d: int, n_states: int,
                       entry_age: NDArray[np.float64], p0: NDArray[np.float64], f0: NDArray[np.float64], t0: float,
                       times: NDArray[np.float64], horizon: NDArray[np.float64], deltas: NDArray[np.float64],
                       cancel: CancelToken | Callable[[], bool] | None = None, to_horizon: bool = False
                       ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """:func:`sim.reference.forward.integrate_segments` for a model whose background can be factored
    out (:func:`background_target` gave ``d``): the same outputs, the ODE holding only the other exits."""
    m, r_n = entry_age.size, deltas.size
    bg = [k for k, b in enumerate(background) if b]
    kept = [k for k, b in enumerate(background) if not b]
    bg_exit = exits[bg[0]]
    reduced = [exits[k] for k in kept]
    k_red = len(reduced)
    living = np.array([s for s in range(n_states) if s != d])
    piece_row, lo, hi = _pieces(reduced, bg_exit, t0, horizon)
    n_p = lo.size
    x, w = np.polynomial.legendre.leggauss(NODES)
    nodes = 0.5 * (lo + hi)[:, None] + 0.5 * (hi - lo)[:, None] * x[None, :]
    # queries: each row's start, the pieces' ends (a piece starts where the row's previous one ends),
    # and the nodes
    starts = np.flatnonzero(np.concatenate(([True], piece_row[1:] != piece_row[:-1]))) if n_p else np.zeros(0, int)
    q_rows = np.concatenate([piece_row[starts], piece_row, np.repeat(piece_row, NODES)])
    q_t = np.concatenate([lo[starts], hi, nodes.ravel()])
    occ, _, _, blk = integrate_segments(reduced, n_states, entry_age, p0, np.zeros((r_n, m, k_red)), t0, times,
                                        horizon, deltas, cancel, to_horizon, (q_rows, q_t), TOLERANCE_SCALE)
    n_s = starts.size
    acc = slice(n_states, None)
    x_hi = blk[n_s:n_s + n_p, acc]
    x_lo = np.empty_like(x_hi)
    if n_p:
        x_lo[1:] = x_hi[:-1]
        x_lo[starts] = blk[:n_s, acc]
    x_nodes = blk[n_s + n_p:, acc].reshape(n_p, NODES, -1)
    # the background on each piece (constant), and S at the pieces' ends by a running sum per row
    mu = np.zeros(n_p)
    offset = bg_exit.offset
    with np.errstate(**KERNEL_ERRSTATE):
        for h, rows in bg_exit.groups:
            on = np.isin(piece_row, rows)
            mu[on] = h._hazard(np.maximum(offset[piece_row[on]] + 0.5 * (lo[on] + hi[on]), 0.0))
    step = mu * (hi - lo)
    cum = np.cumsum(step)
    before = np.repeat(cum[starts] - step[starts], np.diff(np.append(starts, n_p)))
    log_s_lo = -(cum - step - before)
    s_lo, s_hi = np.exp(log_s_lo), np.exp(log_s_lo - step)
    s_nodes = s_lo[:, None] * np.exp(-mu[:, None] * (nodes - lo[:, None]))
    # accumulated quantities X = (I~ for every rate and state, F~ for every rate and kept exit)
    inner = np.einsum("k,pk,pkc->pc", w, s_nodes, x_nodes - x_lo[:, None, :]) * (0.5 * (hi - lo))[:, None]
    piece = s_hi[:, None] * (x_hi - x_lo) + mu[:, None] * inner  # integral of S dX per piece
    total = np.zeros((m, piece.shape[1]))
    np.add.at(total, piece_row, piece)
    bg_total = np.zeros((m, piece.shape[1]))
    np.add.at(bg_total, piece_row, mu[:, None] * piece)
    integ = total[:, :r_n * n_states].reshape(m, r_n, n_states).transpose(1, 0, 2)
    integ_bg = bg_total[:, :r_n * n_states].reshape(m, r_n, n_states).transpose(1, 0, 2)
    integrals = np.zeros((r_n, m, n_states))
    integrals[:, :, living] = integ[:, :, living]
    mass = p0.sum(axis=1)
    span = np.maximum(horizon - t0, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        disc = np.where(deltas[:, None] > 0, np.exp(-deltas[:, None] * t0) * -np.expm1(-deltas[:, None] * span[None, :])
                        / np.where(deltas > 0, deltas, 1.0)[:, None], span[None, :])
    integrals[:, :, d] = mass[None, :] * disc - integrals[:, :, living].sum(axis=2)
    flows = f0.copy()
    flows[:, :, kept] += total[:, r_n * n_states:].reshape(m, r_n, k_red).transpose(1, 0, 2)
    for k in bg:
        flows[:, :, k] += integ_bg[:, :, exits[k].source]
    # occupancy: the living states scaled by S at each time, the dead state by conservation
    surv = np.ones((m, times.size))
    clock = offset[:, None] + np.maximum(times, t0)[None, :]
    with np.errstate(**KERNEL_ERRSTATE):
        for h, rows in bg_exit.groups:
            base = h._cumhazard(np.full(rows.size, 0.0) + offset[rows] + t0)
            surv[rows] = np.exp(-(h._cumhazard(clock[rows].ravel()).reshape(rows.size, -1) - base[:, None]))
    out = np.empty_like(occ)
    out[:, :, living] = occ[:, :, living] * surv[:, :, None]
    out[:, :, d] = mass[:, None] - out[:, :, living].sum(axis=2)
    return out, integrals, flows
