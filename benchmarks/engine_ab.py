"""The engine against an earlier copy of itself and against the floor, in one process (issue 16).

    .venv/bin/python benchmarks/engine_ab.py --old DIR [--patients 1000000] [--rounds 9] [--workers 1]

``DIR`` holds a copy of an earlier ``sim/`` package renamed ``sim_old`` (its imports are relative),
e.g. ``mkdir -p /tmp/old && git archive HEAD sim | tar -x -C /tmp/old && mv /tmp/old/sim /tmp/old/sim_old``.
The reference workload (``workloads.reference_model(package)``, built from each package's own classes) is
simulated by both engines and the floor of ``run.py`` (:func:`run.floor_draws`, for the current
engine's number of exponential draws) runs in the same rounds, in alternating order; the medians of
the per-round ratios are printed in wall time and in CPU time (the calling thread's with one worker,
the process's with several: what waiting for a busy CPU does not inflate), with the event counts of
both (a change of stream layout changes the exact histories, not their law). ``--no-floor`` leaves
the floor out (e.g. for 10^7 patients).
"""

from __future__ import annotations

import argparse
import gc
import importlib
import os
import statistics
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

import run  # noqa: E402
import workloads  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--old", type=Path, required=True, help="folder holding an earlier sim/ copied as sim_old")
    ap.add_argument("--patients", type=int, default=1_000_000)
    ap.add_argument("--rounds", type=int, default=9)
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--no-floor", action="store_true", help="time only the two engines")
    args = ap.parse_args()
    sys.path.insert(0, str(args.old))
    engines = {p: importlib.import_module(f"{p}.engine") for p in ("sim", "sim_old")}
    models = {p: workloads.reference_model(p) for p in engines}
    n, w = args.patients, args.workers
    first = {p: engines[p].simulate(models[p], n, seed=1, workers=w) for p in engines}  # warm-up
    n_draws = workloads.latent_draws(models["sim"], first["sim"].events, n)
    gen = run.floor_generator()
    variants = {"new": lambda: engines["sim"].simulate(models["sim"], n, seed=1, workers=w),
                "old": lambda: engines["sim_old"].simulate(models["sim_old"], n, seed=1, workers=w)}
    if not args.no_floor:
        variants["floor"] = lambda: run.floor_draws(gen, n_draws)
    del first
    clock = time.thread_time if w == 1 else time.process_time
    times: dict[str, list[float]] = {k: [] for k in variants}
    cpu: dict[str, list[float]] = {k: [] for k in variants}
    for r in range(args.rounds):
        for k in (list(variants) if r % 2 == 0 else list(variants)[::-1]):
            gc.collect()
            c0, t0 = clock(), time.perf_counter()
            variants[k]()
            times[k].append(time.perf_counter() - t0)
            cpu[k].append(clock() - c0)
    med = statistics.median

    def ratio(a: str, b: str, of: dict[str, list[float]] = times) -> float:
        return med([x / y for x, y in zip(of[a], of[b])])

    print(f"{n:,} patients, {w} thread(s), {args.rounds} rounds; floor n = {n_draws:,}; load average "
          f"{' '.join(f'{x:.1f}' for x in os.getloadavg())} at the end")
    for k, v in times.items():
        print(f"  {k:6s} median {med(v) * 1e3:7.1f} ms wall ({', '.join(f'{x * 1e3:.0f}' for x in v)}); "
              f"CPU {med(cpu[k]) * 1e3:7.1f} ms ({', '.join(f'{x * 1e3:.0f}' for x in cpu[k])})")
    print(f"  new/old {ratio('new', 'old'):.3f} wall, {ratio('new', 'old', cpu):.3f} CPU")
    if "floor" in variants:
        print(f"  new/floor {ratio('new', 'floor'):.2f} wall, {ratio('new', 'floor', cpu):.2f} CPU; "
              f"old/floor {ratio('old', 'floor'):.2f} wall, {ratio('old', 'floor', cpu):.2f} CPU")


if __name__ == "__main__":
    main()
