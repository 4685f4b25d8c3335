"""Time of the full discretization-error study on the demo model (run by hand).

    .venv/bin/python benchmarks/bench_study.py

Target (issue 3): one call returns the whole table (6 cycle lengths x 3 conversions x 4
corrections x 2 strategies, plus the exact reference) in under a second. Prints the median of
repeated calls and, as a same-process baseline, the time of the exact reference alone.
"""

from __future__ import annotations

import time

import numpy as np

from sim.demo import demo_model
from sim.outcomes import exact_outcomes
from sim.study import discretization_study


def median_time(fn, repeats: int = 5) -> float:
    out = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t0)
    return float(np.median(out))


def main() -> None:
    model = demo_model()
    discretization_study(model)  # warm-up
    t_study = median_time(lambda: discretization_study(model))
    t_exact = median_time(lambda: exact_outcomes(model, n_nodes=16))
    rows = len(discretization_study(model).table)
    print(f"error study: {t_study:.3f} s for {rows} rows (target < 1 s: {'met' if t_study < 1 else 'NOT met'})")
    print(f"exact reference alone: {t_exact:.3f} s ({t_study / t_exact:.1f}x of the study)")


if __name__ == "__main__":
    main()
