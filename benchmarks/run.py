"""HazardTrace benchmark suite: speed and memory figures with their targets, run by hand.

    .venv/bin/python benchmarks/run.py            # full (several minutes); writes benchmarks/RESULTS.md
    .venv/bin/python benchmarks/run.py --quick    # a few seconds: small sizes, one round; writes nothing

Every speed figure is a ratio or a rate measured in this process (GUI and streaming figures in child
processes started by it), as the median over rounds in which the variants alternate order, so that
load from other processes falls on all variants alike. The share of the CPU that other processes
used during each section is printed with it. Quick mode only proves that the suite still runs: its
sizes are too small for the targets to apply, so its "met" column says "quick".

The suite is not part of the test suite's pass/fail (tests/test_benchmarks_quick.py only checks that
``--quick`` still runs). Sections can be chosen with ``--only`` (names: engine, threads, batches, memory,
stream, scaling, study, trace, gui).
"""

from __future__ import annotations

import argparse
import gc
import json
import math
import os
import resource
import subprocess
import sys
import tempfile
import time
import tracemalloc
from dataclasses import dataclass
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import numpy as np  # noqa: E402

from baselines import cycle_microsim, python_loop, simpy_des  # noqa: E402
from harness import Load, Row, alternate, fmt_rate, fmt_time, machine, median, wait_quiet  # noqa: E402
from workloads import (SURVIVAL_TIMES, chain_model, engine_death_times, latent_draws,  # noqa: E402
                       reference_model, survival_of)

from sim.engine import buffers, simulate, simulate_chunks, simulate_draws  # noqa: E402

SECTIONS = ("engine", "threads", "batches", "memory", "stream", "scaling", "study", "trace", "gui")
RESULTS = HERE / "RESULTS.md"
NOTES_MARKER = "<!-- Everything below this line is written by hand and kept by run.py. -->"
QUIET = 0.25  # a round counts as quiet when other processes used less than this share of the CPU
Z = 4.0  # "no detectable difference" threshold, in standard errors (the project's test convention)


# ----------------------------------------------------------------------------- the floor (issue 16)
def floor_generator(seed: int = 12345) -> np.random.Generator:
    """The floor's generator: numpy ``Generator(PCG64)``."""
    return np.random.Generator(np.random.PCG64(seed))


def floor_draws(gen: np.random.Generator, n: int) -> np.ndarray:
    """The floor, defined once (issue 16) and used by every figure against it: ``n`` standard
    exponentials into a fresh array, then ``np.log`` and ``np.exp`` into fresh arrays; ``n`` is the
    engine's number of exponential draws for the same run (:func:`workloads.latent_draws`)."""
    e = gen.standard_exponential(n)
    x = np.log(e)
    return np.exp(x)


def floor_draws_in_place(gen: np.random.Generator, buf: np.ndarray) -> None:
    """The same arithmetic in a preallocated buffer (no page faults of fresh arrays); printed for
    context only, the target is against :func:`floor_draws`."""
    gen.standard_exponential(out=buf)
    np.log(buf, out=buf)
    np.exp(buf, out=buf)


FLOOR_TARGET = 2.0  # engine / floor_draws


@dataclass(frozen=True)
class Config:
    quick: bool
    rounds: int
    n_engine: int
    n_loop: int
    n_simpy: int
    n_monthly: int
    n_yearly: int
    batch_calls: int
    n_memory: int
    n_stream: int | None
    scaling: tuple[int, ...]
    trace_cycles: int
    gui: bool

    @classmethod
    def make(cls, quick: bool, rounds: int | None) -> "Config":
        if quick:
            return cls(True, rounds or 1, n_engine=20_000, n_loop=2_000, n_simpy=500, n_monthly=2_000,
                       n_yearly=20_000, batch_calls=20, n_memory=20_000, n_stream=None,
                       scaling=(10_000, 100_000), trace_cycles=100, gui=False)
        return cls(False, rounds or 5, n_engine=1_000_000, n_loop=100_000, n_simpy=10_000, n_monthly=200_000,
                   n_yearly=1_000_000, batch_calls=1_000, n_memory=1_000_000, n_stream=10_000_000,
                   scaling=(100_000, 1_000_000, 10_000_000), trace_cycles=1_000, gui=True)


def _judge(cfg: Config, ok: bool) -> dict:
    """The "met" column: quick mode's sizes are not the targets' sizes, so it does not judge."""
    return {"met": None, "status": "quick"} if cfg.quick else {"met": bool(ok)}


# ----------------------------------------------------------------------------- engine and baselines
def engine_section(cfg: Config) -> list[Row]:
    """Engine at n_engine patients against the floor, the baselines and two threads; survival bias."""
    model = reference_model()
    n = cfg.n_engine
    horizon = model.horizon.value
    ref = simulate(model, n, seed=1)  # also the warm-up, the draw count and the survival reference
    n_draws = latent_draws(model, ref.events, n)
    engine_deaths = engine_death_times(ref.patients)
    deaths: dict[str, list[np.ndarray]] = {"loop": [], "simpy": [], "monthly": [], "yearly": []}
    two_thread_runs: list = []
    gen = floor_generator()

    faults: list[tuple[float, int]] = []  # (system CPU seconds, minor page faults) per 1-thread run

    cpu: dict[str, list[float]] = {"engine1": [], "floor": [], "engine2": []}  # CPU time per round (thread;
    # the process's for two threads)

    def engine1(r: int) -> None:
        r0 = resource.getrusage(resource.RUSAGE_SELF)
        c0 = time.thread_time()
        simulate(model, n, seed=1, workers=1)
        cpu["engine1"].append(time.thread_time() - c0)
        r1 = resource.getrusage(resource.RUSAGE_SELF)
        faults.append((r1.ru_stime - r0.ru_stime, r1.ru_minflt - r0.ru_minflt))

    def engine2(r: int) -> None:
        c0 = time.process_time()
        run = simulate(model, n, seed=1, workers=2)
        cpu["engine2"].append(time.process_time() - c0)
        if r == 0:  # compared with the 1-thread run after the timings
            two_thread_runs.append(run)

    buf = np.empty(n_draws)

    def floor(r: int) -> None:
        c0 = time.thread_time()
        floor_draws(gen, n_draws)
        cpu["floor"].append(time.thread_time() - c0)

    def floor_in_place(r: int) -> None:
        floor_draws_in_place(gen, buf)

    def loop(r: int) -> None:
        d, _ = python_loop(cfg.n_loop, seed=100 + r)
        deaths["loop"].append(np.asarray(d))

    def des(r: int) -> None:
        d, _ = simpy_des(cfg.n_simpy, seed=200 + r)
        deaths["simpy"].append(np.asarray(d))

    def monthly(r: int) -> None:
        deaths["monthly"].append(cycle_microsim(cfg.n_monthly, 1 / 12, seed=300 + r)[0])

    def yearly(r: int) -> None:
        deaths["yearly"].append(cycle_microsim(cfg.n_yearly, 1.0, seed=400 + r)[0])

    variants = {"engine1": engine1, "engine2": engine2, "floor": floor, "floor_in_place": floor_in_place,
                "loop": loop, "simpy": des, "monthly": monthly, "yearly": yearly}
    sizes = {"engine1": n, "engine2": n, "floor": n, "floor_in_place": n, "loop": cfg.n_loop, "simpy": cfg.n_simpy,
             "monthly": cfg.n_monthly, "yearly": cfg.n_yearly}
    with Load() as load:
        times = alternate(variants, cfg.rounds)
    per = {k: [t / sizes[k] for t in v] for k, v in times.items()}  # seconds per patient, per round

    def ratio(a: str, b: str) -> float:
        """Median over rounds of (per-patient time of a) / (per-patient time of b)."""
        return median([x / y for x, y in zip(per[a], per[b])])

    t1 = median(times["engine1"])
    rows = [Row(f"Engine, reference workload, {n:,} patients, 1 thread", f"{fmt_time(t1)} ({fmt_rate(n / t1)} "
                f"patients; {len(ref.events):,} events, {n_draws:,} exponential draws)",
                how=f"median of {cfg.rounds} rounds; {load.text}; per run {median([f[1] for f in faults]):,.0f} "
                    f"minor page faults and {median([f[0] for f in faults]) * 1e3:.0f} ms of system CPU time")]
    r = ratio("engine1", "floor")
    rows.append(Row("Engine / floor (Generator(PCG64).standard_exponential(n), np.log, np.exp, each into a fresh "
                    "array; n = the engine's exponential draws)",
                    f"{r:.2f}x (floor {fmt_time(median(times['floor']))})", f"<= {FLOOR_TARGET:g}x",
                    **_judge(cfg, r <= FLOOR_TARGET),
                    how=f"ratio per round, median; per round: "
                        + ", ".join(f"{a / b:.2f}x" for a, b in zip(times["engine1"], times["floor"]))
                        + " (other processes' CPU share: " + ", ".join(f"{x:.0%}" for x in times.load)
                        + f"); in CPU time of the thread (what waiting for a busy CPU does not inflate): "
                          f"{median([a / b for a, b in zip(cpu['engine1'], cpu['floor'])]):.2f}x"
                        + f"; the same arithmetic in a preallocated buffer: "
                          f"{fmt_time(median(times['floor_in_place']))}, engine / that = "
                          f"{ratio('engine1', 'floor_in_place'):.2f}x"))
    for key, label, target in (("loop", f"per-patient Python loop ({cfg.n_loop:,} patients, scaled)", 15),
                               ("monthly", f"cycle-based microsimulation, monthly cycles ({cfg.n_monthly:,} patients, "
                                           "scaled)", 15),
                               ("yearly", f"cycle-based microsimulation, yearly cycles ({cfg.n_yearly:,} patients, "
                                          "scaled)", None),
                               ("simpy", f"simpy process-based DES ({cfg.n_simpy:,} patients, scaled)", 100)):
        r = ratio(key, "engine1")
        us = median(per[key]) * 1e6
        rows.append(Row(f"Engine speed-up vs {label}", f"{r:.1f}x ({us:.2f} µs/patient vs "
                        f"{median(per['engine1']) * 1e6:.3f})",
                        f">= {target}x" if target else "—",
                        **(_judge(cfg, r >= target) if target else {}), how="per-patient times, ratio per round"))
    r = ratio("engine1", "engine2")
    same = all(run.patients.equals(ref.patients) and run.events.equals(ref.events) for run in two_thread_runs)
    two_thread_runs.clear()
    quiet = times.quiet_rounds(QUIET)
    quiet_text = (f"; in the {len(quiet)} of {cfg.rounds} rounds where other processes used < {QUIET:.0%} of the "
                  f"CPU: {median([per['engine1'][i] / per['engine2'][i] for i in quiet]):.2f}x" if quiet else
                  f"; no round had other processes below {QUIET:.0%} of the CPU")
    rows.append(Row("Two threads vs one (engine, same run)", f"{r:.2f}x" + ("" if same else " (OUTPUTS DIFFER)"),
                    ">= 1.6x", **_judge(cfg, r >= 1.6 and same),
                    how=f"{fmt_time(median(times['engine2']))} with 2 threads; outputs bit-identical: {same}"
                        f"{quiet_text}; CPU time of both threads over that of one: "
                        f"{median([b / a for a, b in zip(cpu['engine1'], cpu['engine2'])]):.2f} (the extra work a "
                        f"second thread costs: GIL hand-overs, shared caches); other processes' CPU share per round: "
                        + ", ".join(f"{x:.0%}" for x in times.load)))

    # survival: the engine against the exact solution, the same-law baselines and the cycle-based ones
    eng = survival_of(engine_deaths, horizon)
    rows.append(_exact_row(cfg, model, eng))
    for key, label in (("loop", "per-patient Python loop"), ("simpy", "simpy DES"),
                       ("monthly", "cycle-based, monthly"), ("yearly", "cycle-based, yearly")):
        other = survival_of(np.concatenate(deaths[key]), horizon)
        rows.append(_bias_row(cfg, label, key in ("loop", "simpy"), eng, other))
    return rows


def threads_section(cfg: Config) -> list[Row]:
    """What two threads buy on this machine for plain numpy work (context for the engine's figure):
    a compute-bound kernel (log then exp in place) and a memory-bound one (add in place over arrays far
    larger than the caches), each on two arrays, one after the other in one thread vs one per thread."""
    import threading

    n_compute = 200_000 if cfg.quick else 2_000_000
    n_memory = 1_000_000 if cfg.quick else 20_000_000
    comp = [np.random.default_rng(i).random(n_compute) for i in range(2)]
    mem = [np.random.default_rng(i).random(n_memory) for i in range(2)]

    def compute(i: int) -> None:
        for _ in range(10):
            np.log(comp[i], out=comp[i])
            np.exp(comp[i], out=comp[i])

    def memory(i: int) -> None:
        for _ in range(5):
            np.add(mem[i], 1.0, out=mem[i])

    def serial(kernel):
        return lambda r: (kernel(0), kernel(1))

    def parallel(kernel):
        def go(r: int) -> None:
            threads = [threading.Thread(target=kernel, args=(i,)) for i in range(2)]
            for t in threads:
                t.start()
            for t in threads:
                t.join()
        return go

    times = alternate({"compute1": serial(compute), "compute2": parallel(compute),
                       "memory1": serial(memory), "memory2": parallel(memory)}, cfg.rounds)
    speed = {k: median([a / b for a, b in zip(times[f"{k}1"], times[f"{k}2"])]) for k in ("compute", "memory")}
    return [Row("Machine: plain numpy work, two threads vs one (context for the engine's figure)",
                f"compute-bound {speed['compute']:.2f}x; memory-bound {speed['memory']:.2f}x", "—",
                how=f"log + exp in place over {n_compute:,} doubles x 10 (compute) and add in place over "
                    f"{n_memory * 8 / 2**20:.0f} MiB x 5 (memory), two arrays, one thread each vs both in one; "
                    f"ratio per round, median; other processes' CPU share per round: "
                    + ", ".join(f"{x:.0%}" for x in times.load))]


def _z_text(diff: float, se_engine: float, se_both: float, digits: int) -> tuple[str, float]:
    return f"{diff:+.{digits}f} ({diff / se_engine:+.1f})", diff / se_both


def _bias_row(cfg: Config, label: str, same_law: bool, eng, other) -> Row:
    parts, zs = [], []
    txt, z = _z_text(other.rmst - eng.rmst, eng.rmst_se, math.hypot(eng.rmst_se, other.rmst_se), 3)
    parts.append(f"RMST {txt.replace(' (', ' y (', 1)}")
    zs.append(z)
    for t, s_o, se_o, s_e, se_e in zip(SURVIVAL_TIMES, other.s, other.s_se, eng.s, eng.s_se):
        txt, z = _z_text(s_o - s_e, se_e, math.hypot(se_e, se_o), 4)
        parts.append(f"S({t:g}) {txt}")
        zs.append(z)
    worst = max(abs(z) for z in zs)
    if same_law:
        return Row(f"Check: {label} samples the engine's law ({other.n:,} patients)", "; ".join(parts),
                   f"all |z| <= {Z:g}", **_judge(cfg, worst <= Z),
                   how=f"difference (in engine MCSE); largest |z| with both MCSEs: {worst:.1f}")
    verdict = "biased" if worst > Z else "no detectable bias"
    return Row(f"Survival bias of the {label} microsimulation vs engine ({other.n:,} patients)", "; ".join(parts),
               "report", met=None, status=verdict,
               how=f"difference (in units of the engine's MCSE at {eng.n:,} patients); largest |z| with both "
                   f"MCSEs: {worst:.1f}")


def _exact_row(cfg: Config, model, eng) -> Row:
    from sim.reference.exact import solve_exact

    sol = solve_exact(model, list(SURVIVAL_TIMES))
    occ = sol.occupancy
    dead = occ[occ["state"] == "dead"].set_index("time")["probability"]
    parts, zs = [], []
    rmst = float(sol.life_expectancy["years"].iloc[0])
    parts.append(f"RMST {eng.rmst - rmst:+.3f} y ({(eng.rmst - rmst) / eng.rmst_se:+.1f})")
    zs.append((eng.rmst - rmst) / eng.rmst_se)
    for t, s, se in zip(SURVIVAL_TIMES, eng.s, eng.s_se):
        d = s - (1 - float(dead.loc[t]))
        parts.append(f"S({t:g}) {d:+.4f} ({d / se:+.1f})")
        zs.append(d / se)
    worst = max(abs(z) for z in zs)
    return Row("Check: engine vs exact Kolmogorov solution (sim.reference.exact)", "; ".join(parts), f"all |z| <= {Z:g}",
               **_judge(cfg, worst <= Z), how="difference (in engine MCSE)")


# ----------------------------------------------------------------------------- batches
def batches_section(cfg: Config) -> list[Row]:
    model = reference_model()
    calls = cfg.batch_calls
    for i in range(20):
        simulate(model, 1000, seed=10_000 + i)  # warm-up

    def many_calls(r: int) -> None:
        for i in range(calls):
            simulate(model, 1000, seed=i)

    def one_call(r: int) -> None:
        for _ in simulate_chunks(model, calls * 1000, seed=1, chunk_size=1000):
            pass

    block = [model] * calls

    def draws_call(r: int) -> None:
        simulate_draws(block, 1, 1000)

    with Load() as load:
        times = alternate({"calls": many_calls, "chunks": one_call, "draws": draws_call}, cfg.rounds)
    rate = calls * 1000 / median(times["calls"])
    chunk_rate = calls * 1000 / median(times["chunks"])
    draws_rate = calls * 1000 / median(times["draws"])
    return [
        Row(f"Batches: {calls:,} calls of simulate(1,000 patients)", f"{fmt_rate(rate)} patients "
            f"({median(times['calls']) / calls * 1e3:.2f} ms per call)", ">= 1 M/s", **_judge(cfg, rate >= 1e6),
            how=f"median of {cfg.rounds} rounds; {load.text}"),
        Row(f"Batches: one simulate_chunks call, {calls:,} chunks of 1,000", f"{fmt_rate(chunk_rate)} patients",
            how="same patients count; tables built per chunk"),
        Row(f"Batches, vectorised entry point: one simulate_draws call, {calls:,} draws x 1,000 patients",
            f"{fmt_rate(draws_rate)} patients", ">= 1 M/s", **_judge(cfg, draws_rate >= 1e6),
            how="sim.engine.simulate_draws (what the probabilistic analysis calls): each draw's rows equal "
                "simulate_range of its own model, bit for bit"),
    ]


# ----------------------------------------------------------------------------- memory
def memory_section(cfg: Config) -> list[Row]:
    model = reference_model()
    n = cfg.n_memory
    simulate(model, min(n, 100_000), seed=1)  # warm-up outside the trace
    rows = []
    for workers in (1, 2):
        gc.collect()
        buffers.release()  # the run's columns come from new memory, which tracemalloc sees
        tracemalloc.start()
        run = simulate(model, n, seed=1, workers=workers)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        tables = int(run.events.memory_usage(deep=True).sum() + run.patients.memory_usage(deep=True).sum())
        del run
        per = peak / n
        if workers == 1:
            rows.append(Row(f"Peak memory per patient, {n:,} patients, event log kept (1 thread)",
                            f"{per:.0f} B/patient (returned tables {tables / n:.0f} B/patient)", "<= 160 B",
                            **_judge(cfg, per <= 160), how="tracemalloc peak during simulate() / patients"))
        else:
            rows.append(Row(f"Peak memory per patient, {n:,} patients, event log kept (2 threads)",
                            f"{per:.0f} B/patient", how="tracemalloc; up to 4 chunks in flight"))
    return rows


def stream_section(cfg: Config) -> list[Row]:
    if cfg.n_stream is None:
        return [Row("Peak RSS, 10,000,000 patients streamed to Parquet (RunWriter)", "—", "<= 2 GiB",
                    status="full mode only")]
    n = cfg.n_stream
    with tempfile.TemporaryDirectory(prefix="hazardtrace-bench-") as tmp, Load() as load:
        proc = subprocess.run([sys.executable, str(HERE / "stream_memory.py"), str(n), str(Path(tmp) / "run"),
                               "100000", "2"], capture_output=True, text=True, timeout=3600)
    if proc.returncode != 0:
        return [Row(f"Peak RSS, {n:,} patients streamed to Parquet", "failed", "<= 2 GiB", met=False,
                    how=proc.stderr.strip().splitlines()[-1] if proc.stderr.strip() else "")]
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    peak = out["peak_rss_bytes"]
    return [Row(f"Peak RSS, {n:,} patients streamed to Parquet (RunWriter, chunks of 100,000, 2 threads)",
                f"{peak / 2**30:.2f} GiB ({peak / n:.0f} B/patient; {out['seconds']:.1f} s, "
                f"{out['events']:,} events, {out['bytes_on_disk'] / 2**20:.0f} MiB on disk)", "<= 2 GiB",
                **_judge(cfg, peak <= 2 * 2**30),
                how=f"VmHWM of a child process (includes the interpreter and libraries: "
                    f"{out['rss_before_bytes'] / 2**20:.0f} MiB before the run); {load.text}")]


# ----------------------------------------------------------------------------- scaling
def scaling_section(cfg: Config) -> list[Row]:
    model = reference_model()
    simulate(model, 10_000, seed=1)
    buffers.release()  # the first round of each size starts from memory the process does not hold
    sizes = cfg.scaling
    # small sizes are repeated within a round so that each timing spans at least ~0.2 s
    repeats = {n: max(1, int((20_000 if cfg.quick else 200_000) // n)) for n in sizes}
    rounds = {n: (min(cfg.rounds, 3) if n >= 10_000_000 else cfg.rounds) for n in sizes}

    def make(n: int):
        def go(r: int) -> None:
            if r < rounds[n]:
                for _ in range(repeats[n]):
                    simulate(model, n, seed=1)
        return go

    with Load() as load:
        times = alternate({n: make(n) for n in sizes}, cfg.rounds)
    per = {n: median(v[:rounds[n]]) / (repeats[n] * n) for n, v in times.items()}
    first = {n: v[0] / (repeats[n] * n) for n, v in times.items()}
    spread = max(per.values()) / min(per.values())
    value = "; ".join(f"10^{round(math.log10(n))}: {per[n] * 1e9:.0f} ns" for n in sizes)
    return [Row("Scaling: time per patient at " + ", ".join(f"10^{round(math.log10(n))}" for n in sizes),
                f"{value} (max/min {spread:.2f})", "flat: max/min <= 1.3", **_judge(cfg, spread <= 1.3),
                how=f"median over rounds ({', '.join(str(rounds[n]) for n in sizes)}); the first round, whose "
                    f"result columns take memory the process does not yet hold (sim.engine.buffers): "
                    + ", ".join(f"{first[n] * 1e9:.0f} ns" for n in sizes) + f"; {load.text}")]


# ----------------------------------------------------------------------------- study and trace
def study_section(cfg: Config) -> list[Row]:
    from sim.io.demo import demo_model
    from sim.reference.study import DEFAULT_CYCLE_LENGTHS, discretization_study

    model = demo_model()
    cycles = (1.0, 2.0) if cfg.quick else DEFAULT_CYCLE_LENGTHS
    result = [] if cfg.quick else [discretization_study(model, cycle_lengths=cycles)]  # warm-up
    with Load() as load:
        times = alternate({"study": lambda r: result.append(discretization_study(model, cycle_lengths=cycles))},
                          cfg.rounds)
    t = median(times["study"])
    rows = len(result[-1].table)
    return [Row(f"Discretization-error study on the demo model ({rows} rows"
                + (", quick: 2 cycle lengths)" if cfg.quick else ")"),
                fmt_time(t), "< 1 s", **_judge(cfg, t < 1.0), how=f"median of {cfg.rounds} calls; {load.text}")]


def trace_section(cfg: Config) -> list[Row]:
    from sim.reference.cohort import cohort_trace

    horizon = 50.0
    model = chain_model(10, horizon)
    h = horizon / cfg.trace_cycles
    cohort_trace(model, "base", h, entry_ages="mean-age")  # warm-up

    variants = {"mean": lambda r: cohort_trace(model, "base", h, "matrix-exponential", entry_ages="mean-age"),
                "strata": lambda r: cohort_trace(model, "base", h, "matrix-exponential", entry_ages="strata")}
    with Load() as load:
        times = alternate(variants, cfg.rounds)
    t, ts = median(times["mean"]), median(times["strata"])
    k = cfg.trace_cycles
    return [Row(f"Cohort trace, {k:,} cycles x 10 states (matrix exponential, one stratum)",
                f"{fmt_time(t)} ({t / k * 1e6:.0f} µs per cycle)", how=f"median of {cfg.rounds}; {load.text}"),
            Row(f"Cohort trace, {k:,} cycles x 10 states, 48 entry-age strata (the default)",
                f"{fmt_time(ts)}", how=f"median of {cfg.rounds}")]


# ----------------------------------------------------------------------------- GUI
def gui_section(cfg: Config) -> list[Row]:
    names = ("Longest GUI event-loop gap while a 1,000,000-patient run goes on in the worker",
             "Time from Run to all plots shown, 100,000 patients")
    if not cfg.gui:
        return [Row(names[0], "—", "< 100 ms", status="full mode only"),
                Row(names[1], "—", "< 1 s", status="full mode only")]
    missing = [p for p in ("gui/run_panel.py", "gui/results/__init__.py") if not (HERE.parent / p).exists()]
    if missing:
        return [Row(nm, "—", tgt, status=f"not measured: {', '.join(missing)} missing")
                for nm, tgt in zip(names, ("< 100 ms", "< 1 s"))]
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen")
    with Load() as load:
        proc = subprocess.run([sys.executable, str(HERE / "gui_figures.py"), "1000000", "100000", str(cfg.rounds)],
                              capture_output=True, text=True, timeout=3600, env=env, cwd=str(HERE.parent))
    if proc.returncode != 0:
        why = (proc.stderr.strip().splitlines() or ["no output"])[-1]
        return [Row(nm, "—", tgt, status=f"not measured: {why}") for nm, tgt in zip(names, ("< 100 ms", "< 1 s"))]
    out = json.loads(proc.stdout.strip().splitlines()[-1])
    big = out["big"]
    gap = big["max_gap_running"]
    stages = ", ".join(f"{k} {v:.2f} s" for k, v in out.get("stages_small", {}).items())
    shown = out["run_to_shown_median"]
    return [
        Row(names[0], f"{gap * 1e3:.0f} ms (run took {big['run_to_ready']:.1f} s; drawing the results afterwards "
            f"blocked up to {big['max_gap_drawing'] * 1e3:.0f} ms)", "< 100 ms", met=gap < 0.1,
            how=f"10 ms QTimer on the GUI thread, offscreen, 2 threads, error study on; {load.text}"),
        Row(names[1], f"{shown:.2f} s (worker done after {out['run_to_ready_median']:.2f} s)", "< 1 s",
            met=shown < 1.0, how=f"RunPanel.start_run to ResultsPanel.results_shown, median of {cfg.rounds}; "
                                 f"worker stages (sim.pipeline.run): {stages}"),
    ]


# ----------------------------------------------------------------------------- report
def table(rows: list[Row]) -> str:
    def cell(text: str) -> str:
        return text.replace("|", "\\|")  # a literal | inside a Markdown table cell

    lines = ["| Figure | Value | Target | Met | How measured |", "|---|---|---|---|---|"]
    for r in rows:
        lines.append("| " + " | ".join(cell(x) for x in (r.figure, r.value, r.target, r.met_text, r.how)) + " |")
    return "\n".join(lines)


def report(cfg: Config, rows: list[Row], info: dict[str, str], seconds: float, argv: list[str]) -> str:
    head = [
        "# HazardTrace benchmark results",
        "",
        f"Written by `benchmarks/run.py` ({'quick' if cfg.quick else 'full'} mode, {cfg.rounds} rounds; "
        f"command `{' '.join(['python', 'benchmarks/run.py', *argv])}`; {seconds:.0f} s). "
        "The reference workload and the baselines are described in `benchmarks/workloads.py` and "
        "`benchmarks/baselines.py` (invented numbers).",
        "",
        "| Machine | |",
        "|---|---|",
        *[f"| {k} | {v} |" for k, v in info.items()],
        "",
        table(rows),
        "",
        "Survival rows: each difference is followed, in parentheses, by the same difference in units of the "
        "engine's Monte Carlo standard error (MCSE); RMST is the mean time alive over the 60-year horizon, "
        "S(t) the share alive t years after entry. z uses the MCSEs of both sides.",
        "",
    ]
    return "\n".join(head)


def write_results(text: str, path: Path) -> None:
    notes = ""
    if path.exists():
        old = path.read_text(encoding="utf-8")
        if NOTES_MARKER in old:
            notes = old.split(NOTES_MARKER, 1)[1]
    path.write_text(text + "\n" + NOTES_MARKER + (notes if notes else "\n"), encoding="utf-8")


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes, one round; writes nothing by default")
    ap.add_argument("--rounds", type=int, help="rounds per figure (default: 5 full, 1 quick)")
    ap.add_argument("--only", nargs="+", choices=SECTIONS, help="run only these sections")
    ap.add_argument("--wait-quiet", type=float, default=0.0, metavar="SECONDS",
                    help="before each section, wait up to SECONDS for other processes to use < 10%% of the CPU "
                         "(the machine may be shared); the load is reported either way")
    ap.add_argument("--output", type=Path, help="where to write the results (default: benchmarks/RESULTS.md in "
                                                "full mode, nowhere in quick mode)")
    args = ap.parse_args(argv)
    cfg = Config.make(args.quick, args.rounds)
    chosen = args.only or SECTIONS
    info = machine()
    print(f"HazardTrace benchmarks ({'quick' if cfg.quick else 'full'} mode): {info['cores']} cores, {info['CPU']}, "
          f"numpy {info['numpy']}", flush=True)
    t0 = time.perf_counter()
    rows: list[Row] = []
    for name in SECTIONS:
        if name not in chosen:
            continue
        if args.wait_quiet > 0:
            share = wait_quiet(args.wait_quiet)
            print(f"  (waited for a quiet machine: other processes at {share:.0%} of the CPU)", flush=True)
        ts = time.perf_counter()
        new = globals()[f"{name}_section"](cfg)
        rows += new
        print(f"  {name}: {time.perf_counter() - ts:.1f} s", flush=True)
        for r in new:
            print(f"    {r.figure}: {r.value} [{r.met_text}]", flush=True)
    seconds = time.perf_counter() - t0
    text = report(cfg, rows, info, seconds, argv)
    print()
    print(table(rows))
    out = args.output or (None if cfg.quick else RESULTS)
    if out is not None:
        write_results(text, out)
        print(f"\nwritten to {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
