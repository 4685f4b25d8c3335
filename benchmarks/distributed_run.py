"""A plain run of 10^7 patients on Dask (sim.distributed.run_distributed, issue 14 item 5), run by
hand; results go in the notes of benchmarks/RESULTS.md.

The demo scenario scenarios/lanthic_syndrome.toml (2 strategies) on a LocalCluster of 2 worker
processes on the loopback interface (started before timing), without the error study. Prints the
wall time, patients per second, the partitions written and the peak resident memory of the client
process and of each worker: with the scenario's chunk size these stay at about one chunk's tables
whatever the number of patients (the client holds only per-chunk moments; each worker one chunk).

Usage: .venv/bin/python benchmarks/distributed_run.py [--patients N] [--workers 2] [--output DIR]

Measured on this 2-core VM (shared with other jobs), 2026-12-05:

    10,000,000 patients x 2 strategies, chunk 100,000, 2 worker processes: 91.8 s (108,952 patients/s),
    39,974,584 events in 100 partitions (1,322 MiB); peak RSS client 230 MiB (before the run 199),
    workers 381, 399 MiB
    1,000,000 patients (chunk 50,000, 20 partitions): 5.8 s; peak RSS client 228 MiB, workers 321, 321 MiB

Memory stays bounded: ten times the patients leave the client's peak where it was (+31 MiB over the
idle client either way) and raise the workers' only with the chunk size (50,000 -> 100,000).
"""

from __future__ import annotations

import argparse
import logging
import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from dask.distributed import Client, LocalCluster  # noqa: E402

from sim.distributed import run_distributed  # noqa: E402
from sim.io import load_scenario  # noqa: E402
from sim.pipeline import RunPlan  # noqa: E402


def peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # Linux: KiB


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--patients", type=int, default=10_000_000)
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--output", help="output folder (default: a temporary folder, removed afterwards)")
    args = parser.parse_args()
    scenario = load_scenario(ROOT / "scenarios" / "lanthic_syndrome.toml")
    plan = RunPlan.from_scenario(scenario, patients=args.patients, workers=args.workers)
    scratch = Path(tempfile.mkdtemp(prefix="hazardtrace-bench-"))
    out = Path(args.output) if args.output else scratch / "run"
    with LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None, silence_logs=logging.ERROR) as cluster, Client(cluster) as client:
        before = peak_mib()
        t0 = time.perf_counter()
        results = run_distributed(scenario, plan, out, scheduler=cluster.scheduler_address, study=False, force=True)
        seconds = time.perf_counter() - t0
        workers = client.run(peak_mib)
    parts = len(list((out / "events").glob("*.parquet")))
    size = sum(p.stat().st_size for p in out.rglob("*.parquet")) / 2**20
    print(f"{args.patients:,} patients x {len(plan.strategies)} strategies, chunk {plan.chunk_size:,}, "
          f"{args.workers} worker processes: {seconds:.1f} s ({args.patients / seconds:,.0f} patients/s), "
          f"{results.n_events:,} events in {parts} partitions ({size:,.0f} MiB); peak RSS client "
          f"{peak_mib():,.0f} MiB (before the run {before:,.0f}), workers "
          + ", ".join(f"{m:,.0f}" for m in workers.values()) + " MiB")
    shutil.rmtree(scratch, ignore_errors=True)


if __name__ == "__main__":
    main()
