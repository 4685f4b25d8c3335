"""Speed of the probabilistic analysis (issue 14), run by hand; results go in the notes of
benchmarks/RESULTS.md.

1. Inner loop: 1,000 draws x 1,000 patients x 2 strategies of the demo scenarios/quorrel_psa.toml
   (17 uncertain parameters), as blocks of draws through one engine call each (the runner's path),
   against the engine's single call on the same 10^6 patients at the point values: (a) the engine
   alone, (b) the engine plus the same per-patient valuation (what a run of 10^6 patients also
   needs). Rounds alternate in one process (this VM's speed drifts). The per-draw path (one engine
   call per draw) is timed on a sample of draws.
2. A Dask LocalCluster of 2 worker processes against 1, started before timing (the cluster's
   start-up is reported apart), on the simulated analysis of the demo.
3. The exact analysis of 1,000 draws of a 5-state time-homogeneous Markov model (batched matrix
   exponentials), and, for comparison, of the demo (Gompertz background: the forward equations draw by
   draw) on a sample of draws.

Usage: .venv/bin/python benchmarks/psa.py [--quick]
"""

from __future__ import annotations

import argparse
import dataclasses
import logging
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from sim.engine import simulate_range  # noqa: E402
from sim.hazards import Exponential  # noqa: E402
from sim.io import load_scenario  # noqa: E402
from sim.model import (Clock, FixedAge, Horizon, Model, Population, State, Strategy, Transition,  # noqa: E402
                       Valuation)
from sim.distributed import run_jobs  # noqa: E402
from sim.psa import (block_draws_for, exact_per_draw, model_for_draw, models_for_draws, psa_jobs,  # noqa: E402
                     simulated_per_draw, simulated_vectorised, uncertain_parameters)
from sim.psa.patient_values import Valuations, block_outcomes  # noqa: E402
from sim.uncertainty import draw_table  # noqa: E402

DEMO = ROOT / "scenarios" / "quorrel_psa.toml"


def best_of(fn, rounds):
    times = []
    for _ in range(rounds):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def inner_loop(draws: int, patients: int, rounds: int) -> None:
    scenario = load_scenario(DEMO)
    values = draw_table(uncertain_parameters(scenario), draws, scenario.run.seed)
    models = models_for_draws(scenario, values, model_for_draw)
    model = scenario.model
    total = draws * patients
    block = block_draws_for(patients, draws, 1)

    def engine():
        simulate_range(model, 1, 0, total)

    def engine_valued():
        ev, pt = simulate_range(model, 1, 0, total)
        for s in model.strategy_names:
            block_outcomes(model, s, ev, pt, 0, total, Valuations.of([model], s))

    def vectorised():
        for a in range(0, draws, block):
            simulated_vectorised(models[a:a + block], values.index[a:a + block], patients, 1)

    sample = max(1, draws // 20)

    def per_draw():
        simulated_per_draw(models[:sample], values.index[:sample], patients, 1)

    timings = {"engine": [], "engine + valuation": [], "PSA vectorised": [], "PSA per draw (sample)": []}
    for _ in range(rounds):  # alternating rounds
        for name, fn in zip(timings, (engine, engine_valued, vectorised, per_draw)):
            timings[name].append(best_of(fn, 1))
    t = {k: min(v) for k, v in timings.items()}
    t["PSA per draw (sample)"] *= draws / sample
    print(f"\n1. Inner loop: {draws:,} draws x {patients:,} patients x {len(model.strategy_names)} strategies "
          f"({total:,} patients per strategy), blocks of {block} draws, best of {rounds} alternating rounds")
    for k, v in t.items():
        print(f"   {k:<24} {v:7.2f} s   {total * len(model.strategy_names) / v / 1e6:6.2f} M patient-histories/s")
    print(f"   PSA vectorised / engine alone:           {t['engine'] / t['PSA vectorised']:.0%} of its throughput")
    print(f"   PSA vectorised / engine with valuation:  {t['engine + valuation'] / t['PSA vectorised']:.0%}")
    print(f"   per-draw path / vectorised path:         {t['PSA per draw (sample)'] / t['PSA vectorised']:.1f}x slower")


def cluster_scaling(draws: int, patients: int, rounds: int) -> None:
    from dask.distributed import LocalCluster

    scenario = load_scenario(DEMO)
    values = draw_table(uncertain_parameters(scenario), draws, scenario.run.seed)
    jobs = psa_jobs(scenario, values, model_for_draw, patients, scenario.run.seed,
                    block_draws=block_draws_for(patients, draws, 2), exact=False)
    print(f"\n2. Dask LocalCluster: {draws:,} draws x {patients:,} patients (simulated rows), "
          f"{len(jobs)} blocks")
    times = {}
    for n, processes in ((1, True), (2, True), (2, False)):
        t0 = time.perf_counter()
        where = {"host": "127.0.0.1"} if processes else {}
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=processes, dashboard_address=None,
                               worker_dashboard_address=None, silence_logs=logging.ERROR, **where)
        start = time.perf_counter() - t0
        try:
            times[n, processes] = best_of(lambda: run_jobs(jobs, scheduler=cluster.scheduler_address), rounds)
        finally:
            cluster.close()
        kind = "processes" if processes else "threads"
        print(f"   {n} worker {kind}: {times[n, processes]:6.2f} s (cluster start-up {start:.1f} s, not included)")
    times[1], times[2] = times[1, True], times[2, True]
    print(f"   2 worker threads vs 1 worker process: {times[1] / times[2, False]:.2f}x")
    print(f"   speed-up 2 vs 1: {times[1] / times[2]:.2f}x")


def five_state_model() -> Model:
    """An invented 5-state time-homogeneous Markov model with two strategies."""
    states = tuple(State(s) for s in ("well", "mild", "moderate", "severe")) + (State("dead", absorbing=True),)
    moves = [("well", "mild", 0.10), ("mild", "moderate", 0.15), ("moderate", "severe", 0.2), ("mild", "well", 0.05),
             ("severe", "dead", 0.3), ("well", "dead", 0.01), ("mild", "dead", 0.02), ("moderate", "dead", 0.05)]
    transitions = tuple(Transition(f"{a}->{b}", a, b, Exponential(r), Clock.ENTRY) for a, b, r in moves)
    return Model(states, transitions, Population(FixedAge(55.0), "well"), Horizon(40.0),
                 strategies=(Strategy("usual"), Strategy("new", hazard_ratios={"well->mild": 0.7, "mild->moderate": 0.8},
                                                         state_costs={"well": 800.0, "mild": 800.0})),
                 valuation=Valuation(utilities={"well": 0.9, "mild": 0.75, "moderate": 0.6, "severe": 0.4},
                                     state_costs={"moderate": 2000.0, "severe": 9000.0}))


def exact_analysis(draws: int, rounds: int) -> None:
    model = five_state_model()
    rng = np.random.default_rng(3)  # rates drawn by the benchmark itself (gamma around each point value)
    models = []
    for _ in range(draws):
        ts = tuple(dataclasses.replace(t, hazard=Exponential(rng.gamma(25.0, t.hazard.rate / 25.0)))
                   for t in model.transitions)
        models.append(dataclasses.replace(model, transitions=ts))
    t = best_of(lambda: exact_per_draw(models, range(draws)), rounds)
    print(f"\n3. Exact analysis, 5-state time-homogeneous Markov model, {draws:,} draws x 2 strategies: {t:.2f} s "
          f"(best of {rounds})")
    scenario = load_scenario(DEMO)
    sample = max(1, draws // 50)
    values = draw_table(uncertain_parameters(scenario), sample, scenario.run.seed)
    demo_models = models_for_draws(scenario, values, model_for_draw)
    t = best_of(lambda: exact_per_draw(demo_models, values.index), 1)
    print(f"   demo (Gompertz background, forward equations per draw): {t / sample * 1000:.0f} ms per draw, "
          f"{t / sample * draws:.0f} s for {draws:,} draws on one core")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small sizes: proves the script runs")
    args = parser.parse_args()
    if args.quick:
        inner_loop(40, 100, 1)
        cluster_scaling(16, 100, 1)
        exact_analysis(50, 1)
    else:
        inner_loop(1000, 1000, 3)
        cluster_scaling(200, 1000, 2)
        exact_analysis(1000, 3)


if __name__ == "__main__":
    main()
