"""Exact solve of the lanthic demo with its Gompertz background vs the bundled synthetic life table
(issue 12 item 13: target, the life-table solve within 2x of the Gompertz one).

    .venv/bin/python benchmarks/exact_life_table.py [--rounds 5] [--old DIR]

Times ``sim.reference.exact_outcomes_and_occupancy`` (the run's exact stage: every strategy, the
population's 48 entry ages x 2 sexes, occupancy on the run's curve grid) on both scenarios, in
alternating rounds, and prints the medians and the median of the per-round ratios. With ``--old DIR``
(a folder holding a copy of an earlier ``sim/`` package renamed ``sim_old``; its imports are
relative) the earlier code is timed in the same rounds and its results compared with the current
ones.
"""

from __future__ import annotations

import argparse
import importlib
import statistics
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from harness import alternate  # noqa: E402

from sim.pipeline import time_grid  # noqa: E402

SCENARIO = ROOT / "scenarios" / "lanthic_syndrome.toml"
TABLE = ROOT / "scenarios" / "tables" / "synthetic_life_table.csv"
LIFE_TABLE = f"""[background.life_table]
file = "{TABLE.as_posix()}"
kind = "q"
columns = {{ female = "q_female", male = "q_male" }}
"""


def scenario_texts() -> dict[str, str]:
    """The demo as shipped (Gompertz background) and with the life table in place of the laws."""
    text = SCENARIO.read_text(encoding="utf-8")
    head, rest = text.split("[background.female]", 1)
    tail = rest.split("[population]", 1)[1]
    return {"gompertz": text, "life table": head + LIFE_TABLE + "\n[population]" + tail}


def scenarios(package: str) -> dict[str, object]:
    reader = importlib.import_module(f"{package}.io.scenario.reader")
    return {k: reader.parse_scenario(t, base_dir=SCENARIO.parent) for k, t in scenario_texts().items()}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--old", type=Path, default=None, help="folder holding an earlier sim/ copied as sim_old")
    args = ap.parse_args()
    packages = ["sim"]
    if args.old is not None:
        sys.path.insert(0, str(args.old))
        packages.append("sim_old")
    solve = {p: importlib.import_module(f"{p}.reference").exact_outcomes_and_occupancy for p in packages}
    parsed = scenarios("sim")
    times = time_grid(parsed["gompertz"])  # the run's curve grid (the same for both backgrounds)
    built = {p: {k: s.model for k, s in (parsed if p == "sim" else scenarios(p)).items()} for p in packages}
    variants = {f"{p}:{k}": (lambda r, p=p, k=k: solve[p](built[p][k], times))
                for p in packages for k in ("gompertz", "life table")}
    results = {name: f(0) for name, f in variants.items()}  # warm up (imports, caches), and the values
    timings = alternate(variants, args.rounds)
    for name, ts in timings.items():
        print(f"{name:22s} median {statistics.median(ts):.3f} s  ({', '.join(f'{t:.3f}' for t in ts)})")
    for p in packages:
        ratio = [lt / g for lt, g in zip(timings[f"{p}:life table"], timings[f"{p}:gompertz"])]
        print(f"{p}: life table / Gompertz, median of per-round ratios {statistics.median(ratio):.2f}")
    if args.old is not None:
        for k in ("gompertz", "life table"):
            new_o, new_occ = results[f"sim:{k}"]
            old_o, old_occ = results[f"sim_old:{k}"]
            dv = np.max(np.abs(new_o["value"].to_numpy() - old_o["value"].to_numpy())
                        / np.maximum(1.0, np.abs(old_o["value"].to_numpy())))
            dp = np.max(np.abs(new_occ["probability"].to_numpy() - old_occ["probability"].to_numpy()))
            print(f"{k}: new vs old, outcomes max relative difference {dv:.2e}, occupancy max difference {dp:.2e}")
            ratio = [n / o for n, o in zip(timings[f"sim:{k}"], timings[f"sim_old:{k}"])]
            print(f"{k}: new / old time, median of per-round ratios {statistics.median(ratio):.2f}")


if __name__ == "__main__":
    main()
