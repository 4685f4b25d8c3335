"""Cycle-based cohort approximations of a model: the Markov trace x_{k+1} = x_k P_k.

Per cycle [t_k, t_k + h] and per competing exit, a rate is taken from the model's hazard at the
cohort's clock values, either from the cumulative-hazard increment r = (H(x + h) - H(x)) / h
(``"cumulative"``) or at the cycle midpoint r = h(x + h/2) (``"midpoint"``). Rates become the cycle's
transition matrix P_k by one of three conversions (docs/methods.md, 'Cycle-based cohort traces'):

``per-transition``
    each rate on its own, p = 1 - exp(-r h), and "stay" as the remainder (common practice; wrong
    with competing exits: Gidwani & Russell 2020, PharmacoEconomics 38:1153-1164);
``competing-exit``
    p_k = (r_k / sum r)(1 - exp(-h sum r)) per state (Miller & Homan 1994; Fleurence & Hollenbeak
    2007);
``matrix-exponential``
    P_k = expm(h Q_k) of the generator of all the cycle's rates, which captures several moves within
    one cycle (Jones, Epstein & Garcia-Mochon 2017, Med Decis Making 37(7):779-789; Graves et al.
    2021, Med Decis Making 41(4):453-464).

Entry ages: one trace at the mean entry age (``"mean-age"``, common practice, biased when hazards
depend on age) or traces over entry-age strata weighted by the distribution (``"strata"``, the same
Gauss-Legendre nodes as the exact solution). Every trace is per sex of the sex mix. Each stratum
stops at its own horizon: its last cycle may be shorter than h.

Time-in-state clocks with non-constant hazards are expanded into tunnel states ``s [k]`` (k whole
cycles since entry into s, the last one absorbing the rest) up to ``tunnel_cycles``; without that
number such a model is refused with a message naming the transitions. ``tunnel_entry`` says how long
the patients who entered s during a cycle have been in s at the next boundary (docs/methods.md,
'Tunnel states and entry within a cycle'): ``"boundary"`` takes them to have entered at that boundary
(time in state k h in copy k: an O(h) bias of the clock), ``"half-cycle"`` credits them half a cycle
(k h + h/2, as if entries were spread evenly over the cycle: common practice, no source; O(h^2) for a
smooth hazard). Patients who start in s at time 0 keep time in state k h exactly (their own chain
of copies ``s [k, start]`` when the two differ).

The trace's outcomes with a within-cycle correction are computed by :func:`trace_outcomes`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from enum import Enum

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from .exact import population_pairs
from ..hazards import KERNEL_ERRSTATE, by_entry_age
from .matrix_exp import expm_batched, expm_rows
from ..model.multistate import Clock, Model, ResolvedExit
from ..analysis.outcomes import combine_outcomes

__all__ = ["Conversion", "RateRule", "Correction", "EntryAges", "TunnelEntry", "CohortError", "CohortTrace",
           "cohort_trace", "trace_outcomes", "quadrature_weights"]


class CohortError(ValueError):
    """The cohort approximation cannot be built as asked; the message says why and what to change."""


class Conversion(str, Enum):
    PER_TRANSITION = "per-transition"
    COMPETING = "competing-exit"
    EXPM = "matrix-exponential"


class RateRule(str, Enum):
    CUMULATIVE = "cumulative"
    MIDPOINT = "midpoint"


class Correction(str, Enum):
    """Within-cycle correction for accumulating time, QALYs and costs (Elbasha & Chhatwal 2016, Med
    Decis Making 36(1):115-131): state membership counted at the start of each cycle, at its end,
    averaged (half-cycle / trapezoid), or by Simpson's 1/3 rule."""

    START = "start"
    END = "end"
    HALF_CYCLE = "half-cycle"
    SIMPSON = "simpson"


class EntryAges(str, Enum):
    MEAN = "mean-age"
    STRATA = "strata"


class TunnelEntry(str, Enum):
    """Time in state credited, at the next cycle boundary, to patients who entered a tunnelled state
    during a cycle: none (``boundary``, entry taken at the boundary) or half a cycle (``half-cycle``)."""

    BOUNDARY = "boundary"
    HALF_CYCLE = "half-cycle"


def _enum(cls, value, field_name: str):
    try:
        return cls(value)
    except ValueError:
        raise CohortError(f"{field_name} must be one of {[c.value for c in cls]}, got {value!r}") from None


@dataclass(frozen=True)
class CohortTrace:
    """A cohort trace per (entry age, sex) stratum.

    times : (m, K + 1) cycle boundaries per stratum (clipped at the stratum's horizon).
    occupancy : (m, K + 1, n_states) state membership at the boundaries (tunnels summed back).
    moves : (m, K, n_exits) expected moves through each exit within each cycle (exits numbered as
        the model's ``exit_names``).
    jump_over : (m, K) share of the stratum that made two or more moves within the cycle under the
        matrix exponential (zero for the other conversions, which cannot represent it).
    negative_stay : number of (stratum, cycle, state) cells where per-transition conversion left a
        negative "stay" probability; it is kept (rows still sum to 1, as in a hand-built model) and
        reported, since such a trace is not a probability model.
    """

    model: Model
    strategy: str
    cycle_length: float
    conversion: Conversion
    rate_rule: RateRule
    entry_ages: EntryAges
    weights: NDArray[np.float64]
    entry_age: NDArray[np.float64]
    sex: NDArray[np.int64]
    times: NDArray[np.float64]
    occupancy: NDArray[np.float64]
    moves: NDArray[np.float64]
    jump_over: NDArray[np.float64]
    negative_stay: int
    tunnel_cycles: int | None
    tunnel_entry: TunnelEntry = TunnelEntry.HALF_CYCLE

    def table(self) -> pd.DataFrame:
        """Population-weighted trace as a tidy table: cycle, time, state, probability (strata whose
        horizon has passed keep their final membership)."""
        occ = np.einsum("m,mkn->kn", self.weights, self.occupancy)
        k = np.arange(occ.shape[0])
        t = k * self.cycle_length
        names = self.model.state_names
        return pd.DataFrame({"cycle": np.repeat(k, len(names)), "time": np.repeat(t, len(names)),
                             "state": np.tile(names, k.size), "probability": occ.ravel()})

    @property
    def jump_over_share(self) -> float:
        """Expected number of cycles, per patient, in which two or more moves happened (population
        weighted sum over cycles): the mass per-transition conversion silently drops."""
        return float(self.weights @ self.jump_over.sum(axis=1))


# ----------------------------------------------------------------------------- building blocks
@dataclass(frozen=True)
class _Space:
    """Expanded state space: tunnel copies for states with semi-Markov exits."""

    labels: tuple[str, ...]
    model_state: NDArray[np.int64]  # model state of each expanded state
    copy: NDArray[np.int64]  # whole cycles since entry (0 for untunnelled states)
    first: NDArray[np.int64]  # expanded index of each model state's first copy (the initial mass's)
    next_copy: NDArray[np.int64]  # where "stay" mass goes after one cycle
    entry: NDArray[np.int64]  # expanded index where moves into each model state land
    offset: NDArray[np.float64]  # cycles in state credited at copy 0 (0, or 0.5 under half-cycle entry)
    blocks: tuple[tuple[int, int], ...]  # (first, last) expanded index of each chain of tunnel copies


def _initial_names(model: Model) -> set[str]:
    """States some patients start in: a state name, or the states with a positive share in a table
    ``state = share`` or ``sex = {state = share}``."""
    init = model.population.initial_state
    if isinstance(init, str):
        return {init}
    names: set[str] = set()
    for key, value in init.items():
        if isinstance(value, Mapping):
            names |= {name for name, share in value.items() if share > 0}
        elif value > 0:
            names.add(key)
    return names


def _space(model: Model, tunnel_cycles: int | None, tunnel_entry: TunnelEntry = TunnelEntry.BOUNDARY) -> _Space:
    semi = model.semi_markov_transitions()
    tunnelled = {t.source for t in model.transitions if t.name in semi}
    if semi and tunnel_cycles is None:
        raise CohortError(
            f"transitions {semi} run on the time-in-state clock with non-constant hazards; a cycle-based "
            f"trace needs tunnel states for {sorted(tunnelled)}: give tunnel_cycles (how many cycles since "
            f"entry to track; the last tunnel state keeps the hazard at that duration)")
    if tunnel_cycles is not None and (not isinstance(tunnel_cycles, (int, np.integer)) or tunnel_cycles < 1):
        raise CohortError(f"tunnel_cycles must be a positive integer, got {tunnel_cycles!r}")
    half = tunnel_entry is TunnelEntry.HALF_CYCLE
    initial = _initial_names(model)
    labels, mstate, copy, first, next_copy, entry, offset, blocks = [], [], [], [], [], [], [], []
    for j, s in enumerate(model.states):
        first.append(len(labels))
        copies = tunnel_cycles if s.name in tunnelled else 1
        # chains of copies by the time in state credited at copy 0: entrants get half a cycle under
        # the half-cycle rule; patients there from time 0 keep their own chain with none
        chains = [0.0]
        if half and s.name in tunnelled:
            chains = [0.0, 0.5] if s.name in initial else [0.5]
        for credit in chains:
            if credit == chains[-1]:
                entry.append(len(labels))
            start = len(labels)
            for c in range(copies):
                tag = f"{c}" if credit == chains[-1] else f"{c}, start"
                labels.append(f"{s.name} [{tag}]" if copies > 1 or len(chains) > 1 else s.name)
                mstate.append(j)
                copy.append(c)
                offset.append(credit)
                next_copy.append(len(labels) if c < copies - 1 else len(labels) - 1)
            if copies > 1:
                blocks.append((start, len(labels) - 1))
    return _Space(tuple(labels), np.array(mstate), np.array(copy), np.array(first), np.array(next_copy),
                  np.array(entry), np.array(offset, dtype=float), tuple(blocks))


def _rates(ex: ResolvedExit, sex: NDArray[np.int64], start: NDArray[np.float64], t: NDArray[np.float64],
           dt: NDArray[np.float64], rule: RateRule, age: NDArray[np.float64]) -> NDArray[np.float64]:
    """Rate of one exit over cycles [t, t + dt] for clock readings ``start + t``; arrays of any
    shape whose first axis is the stratum (matching ``sex`` and the strata's entry ``age``; a hazard
    that reads the entry age is read at each stratum's own)."""
    start, t, dt = np.broadcast_arrays(start, t, dt)
    x = start + t
    out = np.zeros(x.shape)
    live = dt > 0
    with np.errstate(**KERNEL_ERRSTATE):  # the hazards' unchecked kernels: clocks here are >= 0
        for h, strata in (g for code, h_sex in enumerate(ex.hazards)
                          for g in by_entry_age(h_sex, age, np.flatnonzero(sex == code))):
            rows = np.zeros(sex.size, dtype=bool)
            rows[strata] = True
            rows = rows.reshape((-1,) + (1,) * (x.ndim - 1)) & live
            if not rows.any():
                continue
            if rule is RateRule.MIDPOINT:
                out[rows] = h._hazard(x[rows] + 0.5 * dt[rows])
            else:
                out[rows] = (h._cumhazard(x[rows] + dt[rows]) - h._cumhazard(x[rows])) / dt[rows]
    return out


def _times(a: NDArray[np.float64], matrix: NDArray[np.float64]) -> NDArray[np.float64]:
    """``a @ matrix`` for a stack ``a`` (..., k) and one sparse (k, j) matrix (here 0/1 maps of exits
    or tunnel copies onto states), summed over its non-zero entries: a few vector operations instead
    of numpy's loop over the stack's small matrices (3-4x faster for weekly traces, and no BLAS
    threads competing with the study's own)."""
    out = np.zeros(a.shape[:-1] + (matrix.shape[1],))
    for i, j in zip(*np.nonzero(matrix)):
        w = matrix[i, j]
        out[..., j] += a[..., i] if w == 1.0 else w * a[..., i]
    return out


def _jump_over(q: NDArray[np.float64], dt: NDArray[np.float64]) -> NDArray[np.float64]:
    """Probability of two or more moves within dt from each state of a constant generator ``q``
    (..., N, N): 1 - exp(q_ii dt) - sum_j q_ij (exp(q_ii dt) - exp(q_jj dt)) / (q_ii - q_jj), the
    second term being exactly one move i -> j (derived from the first-jump decomposition; with
    q_ii = q_jj it is q_ij dt exp(q_ii dt))."""
    d = np.diagonal(q, axis1=-2, axis2=-1) * dt[..., None]  # q_ii dt
    stay = np.exp(d)
    diff = d[..., :, None] - d[..., None, :]
    same = np.abs(diff) < 1e-12
    # (e^{di} - e^{dj}) / (di - dj) = e^{dj} expm1(di - dj) / (di - dj), stable for small differences,
    # and e^{dj} (to 1e-12 relative) where di = dj
    with np.errstate(over="ignore", invalid="ignore"):  # overflow only where big (replaced below)
        ratio = np.expm1(diff)
        np.divide(ratio, diff, out=ratio, where=~same)
        ratio[same] = 1.0
        ratio *= stay[..., None, :]
    big = diff > 700.0  # expm1 would overflow: the same ratio as e^{di} (1 - e^{-(di - dj)}) / (di - dj)
    if big.any():
        ratio[big] = np.broadcast_to(stay[..., :, None], ratio.shape)[big] * -np.expm1(-diff[big]) / diff[big]
    off = q * dt[..., None, None]
    idx = np.arange(q.shape[-1])
    off[..., idx, idx] = 0.0
    one = np.einsum("...ij,...ij->...i", off, ratio)
    return np.clip(1.0 - stay - one, 0.0, 1.0)


# ----------------------------------------------------------------------------- the trace
def cohort_trace(model: Model, strategy: str, cycle_length: float, conversion: str | Conversion = "matrix-exponential",
                 rate_rule: str | RateRule = "cumulative", entry_ages: str | EntryAges = "strata",
                 n_nodes: int = 48, tunnel_cycles: int | None = None, block_cells: int = 2_000_000,
                 tunnel_entry: str | TunnelEntry = "half-cycle") -> CohortTrace:
    """Build the cycle-based cohort trace of ``strategy`` with the given cycle length (years).

    Parameters
    ----------
    conversion : "per-transition", "competing-exit" or "matrix-exponential".
    rate_rule : "cumulative" (H increment over the cycle / h) or "midpoint" (hazard at mid-cycle).
    entry_ages : "strata" (Gauss-Legendre strata of the entry-age distribution) or "mean-age".
    tunnel_cycles : number of tunnel states for time-in-state clocks (required if any).
    block_cells : bound on matrix cells built at once (memory).
    tunnel_entry : "half-cycle" (default: entrants of a cycle are credited half a cycle in the state
        at the next boundary) or "boundary" (none, the rule before issue 11); see the module docstring.
    """
    conversion = _enum(Conversion, conversion, "conversion")
    tunnel_entry = _enum(TunnelEntry, tunnel_entry, "tunnel_entry")
    rate_rule = _enum(RateRule, rate_rule, "rate_rule")
    entry_ages = _enum(EntryAges, entry_ages, "entry_ages")
    h = float(cycle_length)
    if not (math.isfinite(h) and h > 0):
        raise CohortError(f"cycle_length must be a positive number of years, got {cycle_length!r}")
    model.strategy(strategy)
    space = _space(model, tunnel_cycles, tunnel_entry)
    if entry_ages is EntryAges.STRATA:
        age, sex, w = population_pairs(model, n_nodes)
    else:
        sex_w = np.array(list(model.population.sex_mix.values()), dtype=float)
        keep = sex_w > 0
        sex = np.arange(sex_w.size)[keep]
        age = np.full(sex.size, model.population.entry_age.mean)
        w = sex_w[keep]
    horizon = model.horizon.time_limit(age)
    n_cycles = max(1, int(math.ceil(float(horizon.max()) / h - 1e-9)))
    m = age.size
    times = np.minimum(np.arange(n_cycles + 1)[None, :] * h, horizon[:, None])  # (m, K+1)
    dt_all = np.diff(times, axis=1)

    resolved = model.resolve(strategy)
    n_exp, n_states = len(space.labels), len(model.states)
    n_exits = len(model.exit_names)
    x = np.zeros((m, n_exp))
    # each stratum starts in its sex's initial distribution, in the entry copy of each state
    # (prevalent patients start their time-in-state clock at 0, as in the simulation)
    x[:, space.first] = model.population.initial_matrix(model.state_names)[sex]
    occupancy = np.zeros((m, n_cycles + 1, n_states))
    moves = np.zeros((m, n_cycles, n_exits))
    jump = np.zeros((m, n_cycles))
    negative = 0

    exit_target = np.zeros((n_exits, n_states))  # each exit's model target state
    for per in resolved:
        for ex in per:
            exit_target[ex.index, ex.target] = 1.0
    to_model = np.zeros((n_exp, n_states))
    to_model[np.arange(n_exp), space.model_state] = 1.0
    tunnel = np.array([space.next_copy[i] != i or space.copy[i] > 0 for i in range(n_exp)])
    # contiguous tunnel blocks (first copy, last copy): mass that made no move advances one copy
    tunnel_blocks = space.blocks
    # Matrix exponential: one model-space generator per "variant": variant 0 uses every state's entry
    # copy; any other copy (c >= 1, or a chain of patients there from the start) of state s uses its
    # own rates for s (re-entry within the same cycle would restart at the entry copy: a second-order
    # effect, neglected). Source i reads row s_i of its variant.
    variant = np.zeros(n_exp, dtype=int)
    variant_rows: list[NDArray[np.int64]] = [space.entry.copy()]
    for i in range(n_exp):
        if i != space.entry[space.model_state[i]]:
            rows = space.entry.copy()
            rows[space.model_state[i]] = i
            variant[i] = len(variant_rows)
            variant_rows.append(rows)
    variant_rows_arr = np.array(variant_rows)  # (V, n_states): expanded source used for each model row
    n_var = len(variant_rows)

    def collapse(v: NDArray[np.float64]) -> NDArray[np.float64]:
        return _times(v, to_model)

    occupancy[:, 0] = collapse(x)
    per_cycle = m * (n_exp * (n_states + n_exits) + (n_var * n_states * n_states * 4 if conversion is Conversion.EXPM else 0))
    block = max(1, block_cells // max(1, per_cycle))
    for k0 in range(0, n_cycles, block):
        k1 = min(n_cycles, k0 + block)
        nb = k1 - k0
        t = times[:, k0:k1].T  # (B, m)
        dt = dt_all[:, k0:k1].T
        # R: rate of each model exit from each expanded source over the cycle, (B, m, N, E)
        R = np.zeros((nb, m, n_exp, n_exits))
        tm, dtm = t.T, dt.T  # (m, B)
        for j in range(n_states):
            src = np.flatnonzero(space.model_state == j)  # expanded copies of state j
            for ex in resolved[j]:
                if ex.clock is Clock.STATE:  # copy c: c whole cycles in the state (+ the entry credit)
                    c = ((space.copy[src] + space.offset[src]) * h)[None, None, :]
                    r = _rates(ex, sex, c, np.zeros((m, 1, 1)), dtm[:, :, None], rate_rule, age)  # (m, B, L)
                    R[:, :, src, ex.index] += np.moveaxis(r, 0, 1)
                else:
                    start = age[:, None] if ex.clock is Clock.AGE else np.zeros((m, 1))
                    r = _rates(ex, sex, start, tm, dtm, rate_rule, age)  # (m, B)
                    R[:, :, src, ex.index] += r.T[:, :, None]
        total = R.sum(axis=-1)  # (B, m, N) total exit rate per source
        stay_through = np.where(tunnel, np.exp(-total * dt[:, :, None]), 0.0)  # no move at all
        if conversion is Conversion.EXPM:
            to_rate = _times(R, exit_target)  # (B, m, N, n): rate from each source into each model state
            Q = to_rate[:, :, variant_rows_arr, :]  # (B, m, V, n, n)
            idx = np.arange(n_states)
            Q[..., idx, idx] -= total[:, :, variant_rows_arr]
            Qdt = Q * dt[:, :, None, None, None]
            rows = np.empty((nb, m, n_exp, n_states))
            base = expm_batched(Qdt[:, :, 0])  # variant 0: every row is used
            plain = variant == 0
            rows[:, :, plain] = base[:, :, space.model_state[plain]]
            if n_var > 1:  # tunnel copies c >= 1 need one row each
                tun = np.flatnonzero(~plain)
                rows[:, :, tun] = expm_rows(Qdt[:, :, variant[tun]], space.model_state[tun])
            jo = _jump_over(Q, dt[:, :, None])[:, :, variant, space.model_state]  # (B, m, N)
            # a tunnel copy's mass that made no move advances to the next copy, not the entry copy
            rows[:, :, np.arange(n_exp), space.model_state] -= stay_through
        else:
            if conversion is Conversion.PER_TRANSITION:
                exit_prob = -np.expm1(-R * dt[:, :, None, None])  # each exit on its own
            else:
                scale = np.divide(-np.expm1(-total * dt[:, :, None]), total,
                                  out=np.zeros_like(total), where=total > 0)
                exit_prob = R * scale[..., None]
            rows = _times(exit_prob, exit_target)  # exits into their target states
            stay = 1.0 - exit_prob.sum(axis=-1)
            negative += int((stay < -1e-15).sum())
            stay_through = np.where(tunnel, stay, 0.0)
            own = np.where(tunnel, 0.0, stay)
            rows[:, :, np.arange(n_exp), space.model_state] += own
        xs = np.empty((nb + 1, m, n_exp))
        xs[0] = x
        if n_exp == n_states:  # expanded space == model space: x_{k+1} = x_k P_k directly
            xv = xs[:, :, None, :]  # (nb + 1, m, 1, N): row vectors, one view for the whole loop
            for b_ in range(nb):
                np.matmul(xv[b_], rows[b_], out=xv[b_ + 1])
        for b_ in range(nb if n_exp != n_states else 0):  # the only sequential step: x_{k+1} = x_k P_k
            y = np.matmul(xs[b_][:, None, :], rows[b_])[:, 0, :]  # into model states (entry copies)
            nxt = np.zeros((m, n_exp))
            nxt[:, space.entry] = y
            moved = xs[b_] * stay_through[b_]
            for f, last in tunnel_blocks:  # copies f..last of one state: c -> c + 1, last stays
                nxt[:, f + 1:last + 1] += moved[:, f:last]
                nxt[:, last] += moved[:, last]
            xs[b_ + 1] = nxt
        x = xs[nb]
        occupancy[:, k0 + 1:k1 + 1] = np.moveaxis(collapse(xs[1:]), 0, 1)
        if conversion is Conversion.EXPM:
            jump[:, k0:k1] = (xs[:-1] * jo).sum(axis=-1).T
            # expected moves: rate x time in the source over the cycle, the latter by the trapezoid
            # of the cycle's boundary values (O(h^3) per cycle)
            occ_time = 0.5 * (xs[:-1] + xs[1:]) * dt[:, :, None]
            moves[:, k0:k1] = np.swapaxes(np.einsum("bmn,bmne->bme", occ_time, R), 0, 1)
        else:
            moves[:, k0:k1] = np.swapaxes(np.einsum("bmn,bmne->bme", xs[:-1], exit_prob), 0, 1)
    return CohortTrace(model=model, strategy=strategy, cycle_length=h, conversion=conversion,
                       rate_rule=rate_rule, entry_ages=entry_ages, weights=w, entry_age=age, sex=sex,
                       times=times, occupancy=occupancy, moves=moves, jump_over=jump,
                       negative_stay=negative, tunnel_cycles=tunnel_cycles, tunnel_entry=tunnel_entry)


# ----------------------------------------------------------------------------- outcomes
def quadrature_weights(times: NDArray[np.float64], cycle_length: float, correction: str | Correction
                       ) -> NDArray[np.float64]:
    """Weights q_k with integral f ~ sum_k q_k f(t_k) over each row's grid ``times`` (m, K + 1).

    start: sum dt_k f(t_k); end: sum dt_k f(t_{k+1}); half-cycle: sum dt_k (f_k + f_{k+1}) / 2;
    simpson: composite Simpson 1/3 over pairs of whole cycles, Simpson 3/8 on the last three whole
    cycles when their number is odd (trapezoid if only one), and the trapezoid on a final partial
    cycle (Elbasha & Chhatwal 2016, Med Decis Making 36(1):115-131).
    """
    correction = _enum(Correction, correction, "correction")
    dt = np.diff(times, axis=1)
    q = np.zeros_like(times)
    if correction is Correction.START:
        q[:, :-1] = dt
    elif correction is Correction.END:
        q[:, 1:] = dt
    elif correction is Correction.HALF_CYCLE:
        q[:, :-1] += dt / 2
        q[:, 1:] += dt / 2
    else:
        h = float(cycle_length)
        full = np.isclose(dt, h, rtol=1e-9, atol=0.0)
        n_full = full.sum(axis=1, keepdims=True)  # whole cycles come first on every row
        k = np.arange(times.shape[1])[None, :]
        # Simpson 1/3 on [0, 2P]: h/3 (1, 4, 2, 4, ..., 2, 4, 1); P pairs, leaving 3 cycles for the
        # 3/8 rule when the number of whole cycles is odd (and >= 3)
        odd = n_full % 2 == 1
        pairs = np.where(odd, np.maximum(n_full - 3, 0) // 2, n_full // 2)
        end = 2 * pairs
        inner = (k > 0) & (k < end)
        w13 = np.where(inner, np.where(k % 2 == 1, 4.0, 2.0), 0.0)
        w13 = w13 + ((k == 0) & (end > 0)) + ((k == end) & (end > 0))
        q = w13 * h / 3
        three = odd & (n_full >= 3)  # Simpson 3/8 on [end, end + 3]
        pattern = np.select([k == end, k == end + 1, k == end + 2, k == end + 3], [1.0, 3.0, 3.0, 1.0], 0.0)
        q = q + np.where(three, pattern * 3 * h / 8, 0.0)
        one = n_full == 1  # a single whole cycle: trapezoid
        q = q + np.where(one & (k <= 1), h / 2, 0.0)
        # partial cycles (the last one before a stratum's horizon): trapezoid
        part = ~full & (dt > 0)
        q[:, :-1] += np.where(part, dt / 2, 0.0)
        q[:, 1:] += np.where(part, dt / 2, 0.0)
    return q


def trace_outcomes(trace: CohortTrace, correction: str | Correction) -> dict[str, float]:
    """Outcomes of a trace with a within-cycle correction, with the definitions of
    :mod:`sim.outcomes`. One-off transition costs are the cycle's expected moves discounted at the
    cycle's start (``start``), end (``end``) or midpoint (``half-cycle``, ``simpson``)."""
    correction = _enum(Correction, correction, "correction")
    model, val = trace.model, trace.model.valuation
    q = quadrature_weights(trace.times, trace.cycle_length, correction)
    t = trace.times

    wq = trace.weights[:, None] * q

    def integrate(rate: float) -> NDArray[np.float64]:
        coef = wq * np.exp(-math.log1p(rate) * t) if rate else wq
        return np.tensordot(coef, trace.occupancy, axes=([0, 1], [0, 1]))

    if correction is Correction.START:
        t_cost = t[:, :-1]
    elif correction is Correction.END:
        t_cost = t[:, 1:]
    else:
        t_cost = 0.5 * (t[:, :-1] + t[:, 1:])
    c_exit = model.exit_costs(trace.strategy)
    per_cycle = trace.moves @ c_exit  # (m, K)
    undisc = float(trace.weights @ per_cycle.sum(axis=1))
    disc = float(np.einsum("m,mk->", trace.weights, per_cycle * np.exp(-math.log1p(val.discount_costs) * t_cost)))
    values = combine_outcomes(model, trace.strategy, integrate(0.0), integrate(val.discount_effects),
                      integrate(val.discount_costs), (undisc, disc))
    return {k: float(v) for k, v in values.items()}
