"""Engine speed and memory on the 1,000,000-patient illness-death workload (run by hand).

    .venv/bin/python benchmarks/bench_engine.py [--patients N]

Prints wall time, patients per second, two threads vs one, the ratio to a floor measured in the same
process (drawing as many standard exponentials as the engine used with numpy's default generator,
plus one log and one exp each), and peak traced memory per patient.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np

from sim.engine import simulate
from sim.hazards import Exponential, Gompertz, Weibull
from sim.model import BackgroundMortality, Clock, Horizon, Model, State, Strategy, Transition
from sim.population import Population, UniformAge


def workload() -> Model:
    """Illness-death: entry age U(40, 70); Gompertz background on attained age (slope 0.09/year,
    0.001/year at 40); Weibull onset on time since entry (shape 1.3, scale 25); constant disease death
    0.15/year and recovery 0.05/year on time in state; 60-year horizon. Invented numbers."""
    b = 0.001 * np.exp(-0.09 * 40)
    return Model(
        states=(State("healthy"), State("sick"), State("dead", absorbing=True)),
        transitions=(Transition("onset", "healthy", "sick", Weibull(1.3, 25.0), Clock.ENTRY),
                     Transition("recovery", "sick", "healthy", Exponential(0.05), Clock.STATE),
                     Transition("disease death", "sick", "dead", Exponential(0.15), Clock.STATE)),
        background=BackgroundMortality("dead", {"all": Gompertz(b, 0.09)}, Clock.AGE),
        population=Population(UniformAge(40, 70), "healthy"),
        horizon=Horizon(60.0),
        strategies=(Strategy("base"),),
    )


def _time(fn, repeats: int = 3) -> float:
    best = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best.append(time.perf_counter() - t0)
    return float(np.median(best))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--patients", type=int, default=1_000_000)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    model, n = workload(), args.patients
    run = simulate(model, n, seed=1)
    # latent draws used: 2 attribute draws per patient, plus one per competing exit at every state
    # visit (the initial visit and every move into a living state).
    exits = {name: len(model.exits_of(name)) for name in model.state_names}
    moves_in = run.events.loc[run.events["to_state"] != "dead", "to_state"].astype(str)
    n_draws = 2 * n + exits["healthy"] * n + int(moves_in.map(exits).sum())
    g = np.random.default_rng(1)

    def floor() -> None:
        e = g.standard_exponential(n_draws)
        np.exp(np.log(e))

    t_floor = _time(floor, args.repeats)
    t1 = _time(lambda: simulate(model, n, seed=1, workers=1), args.repeats)
    t2 = _time(lambda: simulate(model, n, seed=1, workers=2), args.repeats)
    tracemalloc.start()
    simulate(model, n, seed=1, workers=1)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"patients {n:,}; events {len(run.events):,}; latent draws {n_draws:,}")
    print(f"engine, 1 thread : {t1:7.3f} s  ({n / t1:,.0f} patients/s)")
    print(f"engine, 2 threads: {t2:7.3f} s  (speed-up {t1 / t2:.2f}x)")
    print(f"floor (draws + log + exp): {t_floor:.3f} s  -> engine / floor = {t1 / t_floor:.1f}x")
    print(f"peak traced memory: {peak / 1e6:,.0f} MB ({peak / n:,.0f} bytes per patient, event log kept)")


if __name__ == "__main__":
    main()
