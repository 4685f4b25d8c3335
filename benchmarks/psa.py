"""Speed of the probabilistic analysis (issue 14), run by hand; results go in the notes of
benchmarks/RESULTS.md.

1. Inner loop: 1,000 draws x 1,000 patients x 2 strategies of the demo scenarios/quorrel_psa.toml
   (17 uncertain parameters), as blocks of draws through one engine call each (the runner's path),
   against the engine's single call on the same 10^6 patients at the point values: (a) the engine
   alone, (b) the engine plus the same per-patient valuation (what a run of 10^6 patients also
   needs). Rounds alternate in one process (this VM's speed drifts); wall-clock and thread CPU time
   are both printed, the ratios per round. The per-draw path (one engine call per draw) is timed on a
   sample of draws.
2. A Dask LocalCluster of 2 worker processes against 1 (and 2 worker threads), started before timing
   (the cluster's start-up is reported apart) the way `hazardtrace psa` starts it, on the simulated
   analysis of the demo at the issue's size (1,000 draws x 1,000 patients), rounds alternating
   between the clusters, with the CPU time the workers used (the machine is shared: wall-clock
   speed-ups under load say little, the CPU time says whether splitting added work).
3. The exact analysis of 1,000 draws of a 5-state time-homogeneous Markov model (batched matrix
   exponentials), and, for comparison, of the demo (Gompertz background: the forward equations draw by
   draw) on a sample of draws.

Usage: .venv/bin/python benchmarks/psa.py [--quick] [--sections 123]
"""

from __future__ import annotations

import argparse
import dataclasses
import logging
import os
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
from sim.distributed.cluster import local_cluster  # noqa: E402
from sim.psa import (block_draws_for, exact_per_draw, model_for_draw, models_for_draws, psa_jobs,  # noqa: E402
                     simulated_per_draw, simulated_vectorised, uncertain_parameters)
from sim.psa.patient_values import Valuations, Workspace, block_outcomes  # noqa: E402
from sim.uncertainty import draw_table  # noqa: E402

DEMO = ROOT / "scenarios" / "quorrel_psa.toml"


def best_of(fn, rounds):
    times = []
    for _ in range(rounds):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def timed(fn) -> tuple[float, float]:
    """(wall-clock, thread CPU) seconds of one call."""
    t0, c0 = time.perf_counter(), time.thread_time()
    fn()
    return time.perf_counter() - t0, time.thread_time() - c0


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

    def vectorised():  # as sim.psa.run_inline: one workspace for the run's blocks
        ws = Workspace()
        for a in range(0, draws, block):
            simulated_vectorised(models[a:a + block], values.index[a:a + block], patients, 1, workspace=ws)

    sample = max(1, draws // 20)

    def per_draw():
        simulated_per_draw(models[:sample], values.index[:sample], patients, 1)

    names = ("engine", "engine + valuation", "PSA vectorised", "PSA per draw (sample)")
    wall: dict[str, list[float]] = {k: [] for k in names}
    cpu: dict[str, list[float]] = {k: [] for k in names}
    load = []
    for _ in range(rounds):  # alternating rounds
        load.append(os.getloadavg()[0])
        for name, fn in zip(names, (engine, engine_valued, vectorised, per_draw)):
            w, c = timed(fn)
            wall[name].append(w)
            cpu[name].append(c)
    t = {k: min(v) for k, v in wall.items()}
    c = {k: min(v) for k, v in cpu.items()}
    t["PSA per draw (sample)"] *= draws / sample
    c["PSA per draw (sample)"] *= draws / sample
    histories = total * len(model.strategy_names)
    print(f"\n1. Inner loop: {draws:,} draws x {patients:,} patients x {len(model.strategy_names)} strategies "
          f"({total:,} patients per strategy), blocks of {block} draws, best of {rounds} alternating rounds "
          f"(load average {min(load):.1f}-{max(load):.1f})")
    for k in names:
        print(f"   {k:<24} {t[k]:7.2f} s   {histories / t[k] / 1e6:6.2f} M patient-histories/s   "
              f"thread CPU {c[k]:6.2f} s")

    def ratio(a: str, b: str, times: dict[str, list[float]]) -> str:
        per_round = [x / y for x, y in zip(times[a], times[b])]
        return f"{min(times[a]) / min(times[b]):.0%} (per round {', '.join(f'{r:.0%}' for r in per_round)})"

    print(f"   PSA vectorised / engine alone:           {ratio('engine', 'PSA vectorised', wall)} of its throughput; "
          f"in thread CPU time {ratio('engine', 'PSA vectorised', cpu)}")
    print(f"   PSA vectorised / engine with valuation:  {ratio('engine + valuation', 'PSA vectorised', wall)}; "
          f"in thread CPU time {ratio('engine + valuation', 'PSA vectorised', cpu)}")
    print(f"   per-draw path / vectorised path:         {t['PSA per draw (sample)'] / t['PSA vectorised']:.1f}x slower")


def _machine_busy() -> float:
    """CPU seconds the whole machine has been busy (all cores, /proc/stat; 0 where unavailable)."""
    try:
        with open("/proc/stat", encoding="ascii") as f:
            ticks = [int(x) for x in f.readline().split()[1:]]
    except OSError:
        return 0.0
    return (sum(ticks) - ticks[3] - ticks[4]) / os.sysconf("SC_CLK_TCK")  # less idle and iowait


def _worker_cpu(client) -> float:
    """CPU seconds used so far by the cluster's worker processes (or this process, for threads)."""
    return sum(client.run(time.process_time).values())


def _time_clusters(jobs, kinds, rounds, wall, cpu, others, start, load) -> None:
    """Start the clusters ``kinds`` ((workers, processes) pairs), time ``rounds`` alternating runs of
    ``jobs`` on each after a warm-up round, close them; figures go into the dicts by kind."""
    from dask.distributed import Client

    clusters, clients = {}, {}
    for n, processes in kinds:
        t0 = time.perf_counter()
        clusters[n, processes] = local_cluster(n, processes)
        start[n, processes] = time.perf_counter() - t0
        clients[n, processes] = Client(clusters[n, processes])
    for key in kinds:
        wall[key], cpu[key], others[key] = [], [], []
    cores = os.cpu_count() or 1
    try:
        for r in range(rounds + 1):  # round 0 warms the workers up (imports), not counted
            order = kinds if r % 2 == 0 else kinds[::-1]
            for key in order:
                load.append(os.getloadavg()[0])
                c0 = _worker_cpu(clients[key]) if key[1] else 0.0
                p0, b0, t0 = time.process_time(), _machine_busy(), time.perf_counter()
                run_jobs(jobs, scheduler=clusters[key].scheduler_address)
                w = time.perf_counter() - t0
                busy, mine = _machine_busy() - b0, time.process_time() - p0
                used = (_worker_cpu(clients[key]) - c0) if key[1] else mine
                if r:
                    wall[key].append(w)
                    cpu[key].append(used)
                    others[key].append(max(0.0, busy - used - (mine if key[1] else 0.0)) / (w * cores))
    finally:
        for key in kinds:
            clients[key].close()
            clusters[key].close()


def cluster_scaling(draws: int, patients: int, rounds: int) -> None:
    logging.getLogger("distributed").setLevel(logging.ERROR)  # keep the clusters' closing quiet
    scenario = load_scenario(DEMO)
    values = draw_table(uncertain_parameters(scenario), draws, scenario.run.seed)
    jobs = psa_jobs(scenario, values, model_for_draw, patients, scenario.run.seed,
                    block_draws=block_draws_for(patients, draws, 2), exact=False)
    print(f"\n2. Dask LocalCluster (sim.distributed.cluster.local_cluster, as `hazardtrace psa`): {draws:,} draws x "
          f"{patients:,} patients (simulated rows, parameter draws applied in the tasks), {len(jobs)} blocks of "
          f"{len(jobs[0].values)} draws; rounds alternate between the 1- and 2-process clusters, both started before timing and alone; the thread cluster after them")
    wall: dict[tuple, list[float]] = {}
    cpu: dict[tuple, list[float]] = {}
    others: dict[tuple, list[float]] = {}  # share of the machine other processes used
    start: dict[tuple, float] = {}
    load: list[float] = []
    # The process clusters alternate with only each other alive; the thread cluster (workers inside
    # this process, whose threads would share the client's interpreter) is timed after they close.
    for phase in (((1, True), (2, True)), ((2, False),)):
        _time_clusters(jobs, phase, rounds, wall, cpu, others, start, load)
    kinds = ((1, True), (2, True), (2, False))
    for n, processes in kinds:
        kind = "processes" if processes else "threads"
        print(f"   {n} worker {kind}: {min(wall[n, processes]):6.2f} s, CPU in the workers {min(cpu[n, processes]):6.2f} s "
              f"(cluster start-up {start[n, processes]:.1f} s, not included)")
    one, two = wall[1, True], wall[2, True]
    print(f"   2 worker threads vs 1 worker process: {min(one) / min(wall[2, False]):.2f}x")
    share = [max(a, b) for a, b in zip(others[1, True], others[2, True])]
    print(f"   speed-up 2 vs 1: {min(one) / min(two):.2f}x (per round {', '.join(f'{a / b:.2f}' for a, b in zip(one, two))}; "
          f"load average {min(load):.1f}-{max(load):.1f})")
    print(f"   other processes' share of the machine during the round's two runs (the larger): "
          f"{', '.join(f'{x:.0%}' for x in share)}")
    quiet = [a / b for a, b, x in zip(one, two, share) if x < 0.10]
    print(f"   speed-up 2 vs 1 in the rounds where others used < 10%: "
          f"{', '.join(f'{q:.2f}x' for q in quiet) if quiet else 'none (the machine was never quiet enough)'}")
    print(f"   CPU time in the workers, 2 vs 1: {min(cpu[2, True]) / min(cpu[1, True]):.2f}x (1.00: no work added by "
          f"splitting; the speed-up a quiet machine would give is about 2 / this figure, less the last block's wait)")


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
    parser.add_argument("--sections", default="123", help="which sections to run, e.g. 2 (default: 123)")
    parser.add_argument("--rounds", type=int, default=None, help="rounds of every section run (default: its own)")
    args = parser.parse_args()
    runs = {"1": (inner_loop, (40, 100, 1), (1000, 1000, 3)), "2": (cluster_scaling, (16, 100, 1), (1000, 1000, 3)),
            "3": (exact_analysis, (50, 1), (1000, 3))}
    for key, (fn, quick, full) in runs.items():
        if key in args.sections:
            sizes = quick if args.quick else full
            fn(*(sizes[:-1] + ((args.rounds,) if args.rounds else sizes[-1:])))


if __name__ == "__main__":
    main()
