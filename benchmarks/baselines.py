"""Baselines for the reference workload (benchmarks/workloads.py), written for the benchmark only.

(a) :func:`python_loop` — the engine's algorithm (competing latent times by inverse cumulative hazard
    sampling, earliest wins, censoring at the horizon) one patient at a time with scalar ``math``
    and Python's ``random``; it keeps an event log as a list of tuples.
(b) :func:`cycle_microsim` — a cycle-based microsimulation vectorised over patients with numpy: per
    cycle of length h, per patient, a rate per competing exit from the cumulative-hazard increment
    r = (H(x + h) - H(x)) / h, the competing-exit conversion p_k = (r_k / sum r)(1 - exp(-h sum r))
    (Miller & Homan 1994; Fleurence & Hollenbeak 2007; METHODS.md section 1), one uniform per patient
    per cycle, at most one move per cycle, recorded at the cycle's end. It keeps the same event log
    columns as numpy arrays.
(c) :func:`simpy_des` — a process-based discrete-event simulation with simpy (one process per
    patient, event times by the same scalar sampling as (a)).

(a) and (c) sample the same distribution as the engine, so their survival must agree with it within
Monte Carlo error (the suite reports it, as a check that the baselines do the same work); (b) is a
different, approximate method whose bias the suite reports.
"""

from __future__ import annotations

import math
import random

import numpy as np

from sim.hazards import Gompertz, Weibull

from workloads import REFERENCE

__all__ = ["python_loop", "cycle_microsim", "simpy_des"]

HEALTHY, SICK, DEAD = 0, 1, 2


def _parameters() -> tuple[float, ...]:
    p = REFERENCE
    g = p["gompertz_slope"]
    b = p["gompertz_hazard_at_40"] * math.exp(-g * 40.0)
    k, lam = p["onset_weibull"]
    lo, hi = p["entry_age"]
    return lo, hi, g, b, k, lam, p["disease_death"], p["recovery"], p["horizon"]


def python_loop(n: int, seed: int) -> tuple[list[float], list[tuple]]:
    """Per-patient loop. Returns death times (inf if alive at the horizon) and the event log
    (patient, time, age, from, to)."""
    lo, hi, g, b, k, lam, mu_d, mu_r, horizon = _parameters()
    rnd = random.Random(seed)
    uniform, expo = rnd.random, rnd.expovariate
    log, log1p, exp = math.log, math.log1p, math.exp
    inv_k = 1.0 / k
    events: list[tuple] = []
    death: list[float] = []
    for i in range(n):
        a0 = lo + (hi - lo) * uniform()
        t = 0.0
        state = HEALTHY
        while True:
            # background death on attained age: T = log1p(g E / (b exp(g a))) / g
            t_bg = log1p(g * expo(1.0) / (b * exp(g * (a0 + t)))) / g
            if state == HEALTHY:
                # onset, Weibull on time since entry, left-truncated at t: lam (H(t) + E)^(1/k) - t
                t_on = lam * ((t / lam) ** k + expo(1.0)) ** inv_k - t
                if t_on < t_bg:
                    dt, to = t_on, SICK
                else:
                    dt, to = t_bg, DEAD
            else:
                t_rec = expo(1.0) / mu_r
                t_dd = expo(1.0) / mu_d
                dt, to = (t_rec, HEALTHY) if t_rec < t_dd else (t_dd, DEAD)
                if t_bg < dt:
                    dt, to = t_bg, DEAD
            if t + dt >= horizon:
                death.append(math.inf)
                break
            t += dt
            events.append((i, t, a0 + t, state, to))
            state = to
            if state == DEAD:
                death.append(t)
                break
    return death, events


def cycle_microsim(n: int, cycle: float, seed: int) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Cycle-based microsimulation with cycle length ``cycle`` (years). Returns death times (end of
    the cycle of death; inf if alive at the horizon) and the event log as arrays."""
    lo, hi, g, b, k, lam, mu_d, mu_r, horizon = _parameters()
    rng = np.random.default_rng(seed)
    background, onset = Gompertz(b, g), Weibull(k, lam)
    n_cycles = int(round(horizon / cycle))
    pid = np.arange(n)
    age0 = lo + (hi - lo) * rng.random(n)
    state = np.zeros(n, dtype=np.int8)
    death = np.full(n, np.inf)
    ev_pid, ev_time, ev_from, ev_to = [], [], [], []
    for c in range(n_cycles):
        t0 = c * cycle
        a = age0 + t0
        r_bg = (background.cumhazard(a + cycle) - background.cumhazard(a)) / cycle
        r_on = float(onset.cumhazard(t0 + cycle) - onset.cumhazard(t0)) / cycle  # same for everyone
        sick = state == SICK
        # rate into sick (healthy) or healthy (sick), and rate into death, per patient
        r_move = np.where(sick, mu_r, r_on)
        r_die = r_bg + np.where(sick, mu_d, 0.0)
        total = r_move + r_die
        p_exit = -np.expm1(-cycle * total)
        u = rng.random(state.size)
        p_move = r_move / total * p_exit
        moves = u < p_move
        dies = ~moves & (u < p_exit)
        if moves.any() or dies.any():
            changed = moves | dies
            new_state = np.where(moves, np.where(sick, HEALTHY, SICK), DEAD).astype(np.int8)
            ev_pid.append(pid[changed])
            ev_time.append(np.full(int(changed.sum()), t0 + cycle))
            ev_from.append(state[changed])
            ev_to.append(new_state[changed])
            state = np.where(changed, new_state, state)
            if dies.any():
                death[pid[dies]] = t0 + cycle
                keep = ~dies
                pid, age0, state = pid[keep], age0[keep], state[keep]
        if pid.size == 0:
            break
    log = {"patient": np.concatenate(ev_pid), "time": np.concatenate(ev_time),
           "from": np.concatenate(ev_from), "to": np.concatenate(ev_to)}
    return death, log


def simpy_des(n: int, seed: int) -> tuple[list[float], list[tuple]]:
    """Process-based discrete-event simulation with simpy: one process per patient, all entering at
    time 0 (simulation clock = time since entry). Returns death times and the event log."""
    import simpy

    lo, hi, g, b, k, lam, mu_d, mu_r, horizon = _parameters()
    rnd = random.Random(seed)
    uniform, expo = rnd.random, rnd.expovariate
    log1p, exp = math.log1p, math.exp
    inv_k = 1.0 / k
    env = simpy.Environment()
    events: list[tuple] = []
    death = [math.inf] * n

    def patient(i: int):
        a0 = lo + (hi - lo) * uniform()
        state = HEALTHY
        while True:
            t = env.now
            t_bg = log1p(g * expo(1.0) / (b * exp(g * (a0 + t)))) / g
            if state == HEALTHY:
                t_on = lam * ((t / lam) ** k + expo(1.0)) ** inv_k - t
                dt, to = (t_on, SICK) if t_on < t_bg else (t_bg, DEAD)
            else:
                t_rec = expo(1.0) / mu_r
                t_dd = expo(1.0) / mu_d
                dt, to = (t_rec, HEALTHY) if t_rec < t_dd else (t_dd, DEAD)
                if t_bg < dt:
                    dt, to = t_bg, DEAD
            if t + dt >= horizon:
                yield env.timeout(horizon - t)
                return
            yield env.timeout(dt)
            events.append((i, env.now, a0 + env.now, state, to))
            state = to
            if state == DEAD:
                death[i] = env.now
                return

    for i in range(n):
        env.process(patient(i))
    env.run()
    return death, events
