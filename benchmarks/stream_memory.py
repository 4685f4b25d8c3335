"""Child process of the suite: stream N patients of the reference workload to Parquet with
:class:`sim.io.export.RunWriter` and print one JSON line with the wall time and the peak resident set
size (VmHWM, which includes the interpreter and imported libraries).

    .venv/bin/python benchmarks/stream_memory.py N OUT_DIR [CHUNK] [WORKERS]
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))


def _status_kib(key: str) -> int:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(key + ":"):
                return int(line.split()[1])
    return -1


def main() -> None:
    n, out = int(sys.argv[1]), Path(sys.argv[2])
    chunk = int(sys.argv[3]) if len(sys.argv) > 3 else 100_000
    workers = int(sys.argv[4]) if len(sys.argv) > 4 else 2

    from sim.engine.histories import simulate_chunks
    from sim.io.export import RunWriter, metadata_for
    from workloads import reference_model

    model = reference_model()
    rss_before = _status_kib("VmRSS")
    meta = metadata_for("benchmark reference workload, built in code (benchmarks/workloads.py)", 1, n,
                        extra={"chunk_size": chunk, "workers": workers})
    t0 = time.perf_counter()
    events = 0
    with RunWriter(out, metadata=meta) as writer:
        for ev, pt in simulate_chunks(model, n, 1, chunk_size=chunk, workers=workers):
            events += len(ev)
            writer.write_chunk(ev, pt)
    seconds = time.perf_counter() - t0
    on_disk = sum(p.stat().st_size for p in out.iterdir() if p.is_file())
    print(json.dumps({"patients": n, "events": events, "seconds": seconds, "chunk_size": chunk,
                      "workers": workers, "peak_rss_bytes": _status_kib("VmHWM") * 1024,
                      "rss_before_bytes": rss_before * 1024, "bytes_on_disk": on_disk}))


if __name__ == "__main__":
    main()
