"""Per-lane parameters for every family (issue 14 item 2), run by hand; results go in the notes of
benchmarks/RESULTS.md.

Workload: an invented 3-state model whose progression hazard is a Weibull (entry clock) and whose
death after progression is a log-normal (time in state), both with parameters drawn per draw, a
strategy with a hazard ratio drawn per draw on the progression, and a Gompertz background on age.
1,000 draws x 1,000 patients x 2 strategies through :func:`sim.engine.simulate_draws` in blocks of
draws as the analysis runs them (``sim.psa.block_draws_for``: 40 draws per block); then the same
draws in one block of 1,000 (up to 1,000 distinct hazards per exit and round), and 1,000 draws x 100
patients in the analysis' blocks (400 draws of 100 patients: small groups).

Variants, in alternating rounds in one process (this VM's speed drifts; wall time, process CPU
time and thread CPU time are all printed):

- ``per-lane``: the engine as it is (one kernel call per exit and round, each lane with its draw's
  numbers: ``sim.hazards.LaneHazards``);
- ``grouped``: the same engine with ``LaneHazards.of`` refusing every family, i.e. the grouping it
  replaced (one kernel call per distinct hazard among the lanes of a round);
- ``old`` (with ``--old DIR``): a copy of an earlier ``sim/`` as package ``sim_old`` in ``DIR``
  (``git archive <commit> sim | tar -x -C DIR && mv DIR/sim DIR/sim_old``), its own models built
  from its own classes.

Before timing, one pass per variant counts the kernel calls (Weibull and log-normal conditional
times) and the engine rounds that evaluate those exits, and checks that the variants' event tables
are identical (bit for bit).

``--gompertz``: the progression hazard is a Gompertz-Makeham on the entry clock whose rate, slope
(of either sign: a normal around 0.02 with SD 0.04) and constant are drawn per draw, and the
background a Gompertz on age whose rate and slope are drawn per draw (the kernel calls counted are
the Gompertz and Gompertz-Makeham conditional times, the rounds those of the progression and
background exits).

Usage: .venv/bin/python benchmarks/psa_families.py [--quick] [--rounds N] [--old DIR] [--gompertz]
"""

from __future__ import annotations

import argparse
import contextlib
import gc
import importlib
import math
import sys
import time
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import sim.engine.draws as draws_module  # noqa: E402
import sim.hazards.gompertz as gompertz_module  # noqa: E402
import sim.hazards.lanes as lanes_module  # noqa: E402
import sim.hazards.lognormal as lognormal_module  # noqa: E402
import sim.hazards.shape_scale as shape_scale_module  # noqa: E402
from sim.psa import block_draws_for  # noqa: E402


def parameter_draws(n: int, seed: int = 14) -> dict[str, np.ndarray]:
    """Invented draws: Weibull shape and scale, log-normal mu and sigma, the hazard ratio."""
    rng = np.random.default_rng(seed)
    return {"shape": rng.lognormal(math.log(1.3), 0.08, n), "scale": rng.gamma(100.0, 8.0 / 100.0, n),
            "mu": rng.normal(math.log(6.0), 0.1, n), "sigma": rng.gamma(100.0, 0.7 / 100.0, n),
            "hr": rng.lognormal(math.log(0.6), 0.15, n),
            # --gompertz: Gompertz-Makeham progression (rate, slope of either sign, constant) and
            # the background Gompertz's rate and slope
            "gm_rate": rng.lognormal(math.log(0.05), 0.1, n), "gm_slope": rng.normal(0.02, 0.04, n),
            "gm_constant": rng.gamma(25.0, 0.01 / 25.0, n),
            "bg_rate": rng.lognormal(math.log(3e-5), 0.1, n), "bg_slope": rng.normal(0.09, 0.005, n)}


GOMPERTZ = False  # set by --gompertz: the Gompertz(-Makeham) workload


def models(pkg: str, values: dict[str, np.ndarray]) -> list:
    """One model per draw, built from package ``pkg`` (``sim`` or an older copy)."""
    hz = importlib.import_module(f"{pkg}.hazards")
    md = importlib.import_module(f"{pkg}.model")
    out = []
    for i in range(values["shape"].size):
        progression = hz.Weibull(float(values["shape"][i]), float(values["scale"][i]))
        background = hz.Gompertz(3e-5, 0.09)
        if GOMPERTZ:
            progression = hz.GompertzMakeham(*(float(values[k][i]) for k in ("gm_rate", "gm_slope", "gm_constant")))
            background = hz.Gompertz(float(values["bg_rate"][i]), float(values["bg_slope"][i]))
        transitions = (
            md.Transition("progression", "healthy", "sick", progression, md.Clock.ENTRY),
            md.Transition("death_sick", "sick", "dead", hz.LogNormal(float(values["mu"][i]), float(values["sigma"][i])),
                          md.Clock.STATE))
        out.append(md.Model(
            states=(md.State("healthy"), md.State("sick"), md.State("dead", absorbing=True)), transitions=transitions,
            population=md.Population(md.UniformAge(55.0, 70.0), "healthy"), horizon=md.Horizon(30.0),
            background=md.BackgroundMortality("dead", {"all": background}),
            strategies=(md.Strategy("usual"), md.Strategy("new", hazard_ratios={"progression": float(values["hr"][i])})),
            name="per-lane families benchmark (invented)"))
    return out


def run_blocks(pkg: str, block_models: list, patients: int, block: int) -> list[pd.DataFrame]:
    engine = importlib.import_module(f"{pkg}.engine")
    out = []
    for a in range(0, len(block_models), block):
        out.append(engine.simulate_draws(block_models[a:a + block], 1, patients, first_draw=a)[0])
    return out


@contextlib.contextmanager
def grouped():
    """``LaneHazards.of`` refusing every family: the engine groups lanes by hazard, as before."""
    real = lanes_module.LaneHazards.of
    lanes_module.LaneHazards.of = classmethod(lambda cls, hazards: None)
    try:
        yield
    finally:
        lanes_module.LaneHazards.of = real


@contextlib.contextmanager
def counting(calls: Counter):
    """Count kernel calls (Weibull, log-normal, Gompertz and Gompertz-Makeham conditional times) and
    engine rounds per exit."""
    saved = [(shape_scale_module, "weibull_times"), (lanes_module, "weibull_times"),
             (lognormal_module.LogNormalLanes, "conditional_time"), (draws_module.DrawExit, "latent"),
             (gompertz_module, "gompertz_times"), (lanes_module, "gompertz_times"),
             (gompertz_module.MakehamLanes, "conditional_time")]
    originals = [getattr(obj, name) for obj, name in saved]

    def wrap(key, fn):
        def inner(*args, **kwargs):
            calls[key] += 1
            return fn(*args, **kwargs)
        return inner

    def latent(self, *args, **kwargs):
        calls[f"rounds {self.name}"] += 1
        return originals[3](self, *args, **kwargs)

    shape_scale_module.weibull_times = wrap("weibull kernel", originals[0])
    lanes_module.weibull_times = wrap("weibull kernel", originals[1])
    lognormal_module.LogNormalLanes.conditional_time = wrap("lognormal kernel", originals[2])
    draws_module.DrawExit.latent = latent
    gompertz_module.gompertz_times = wrap("gompertz kernel", originals[4])
    lanes_module.gompertz_times = wrap("gompertz kernel", originals[5])
    gompertz_module.MakehamLanes.conditional_time = wrap("makeham kernel", originals[6])
    try:
        yield
    finally:
        for (obj, name), fn in zip(saved, originals):
            setattr(obj, name, fn)


def measure(variants: dict, values: dict[str, np.ndarray], patients: int, block: int, rounds: int) -> None:
    """Counts, bit-identity check and alternating timed rounds of one configuration."""
    n_draws = values["shape"].size
    built = {pkg: models(pkg, values) for pkg, _ in variants.values()}
    print(f"\n{n_draws} draws x {patients} patients x 2 strategies, blocks of {block} draws")
    reference = None
    for name, (pkg, context) in variants.items():
        calls: Counter = Counter()
        with context(), (counting(calls) if pkg == "sim" else contextlib.nullcontext()):
            events = pd.concat(run_blocks(pkg, built[pkg], patients, block), ignore_index=True)
        digest = pd.util.hash_pandas_object(events.astype({c: str for c in events.select_dtypes("category")}),
                                            index=False).sum()
        reference = digest if reference is None else reference
        same = "identical" if digest == reference else "DIFFERENT"
        if calls and GOMPERTZ:
            rounds_total = calls["rounds progression"] + calls["rounds background death"]
            kernels = calls["gompertz kernel"] + calls["makeham kernel"]
            print(f"  {name:9s} events {same}; Gompertz + Gompertz-Makeham kernel calls {kernels} over "
                  f"{rounds_total} rounds of those exits ({kernels / max(rounds_total, 1):.1f} per round)")
        elif calls:
            rounds_total = calls["rounds progression"] + calls["rounds death_sick"]
            kernels = calls["weibull kernel"] + calls["lognormal kernel"]
            print(f"  {name:9s} events {same}; Weibull + log-normal kernel calls {kernels} over {rounds_total} "
                  f"rounds of those exits ({kernels / max(rounds_total, 1):.1f} per round)")
        else:
            print(f"  {name:9s} events {same}")
    timing = {k: {"wall": [], "process": [], "thread": []} for k in variants}
    for r in range(rounds):
        order = list(variants) if r % 2 == 0 else list(variants)[::-1]
        for name in order:
            pkg, context = variants[name]
            gc.collect()
            w0, p0, t0 = time.perf_counter(), time.process_time(), time.thread_time()
            with context():
                run_blocks(pkg, built[pkg], patients, block)
            timing[name]["wall"].append(time.perf_counter() - w0)
            timing[name]["process"].append(time.process_time() - p0)
            timing[name]["thread"].append(time.thread_time() - t0)
    print(f"  best of {rounds} alternating rounds (s): wall / process CPU / thread CPU")
    base = timing["per-lane"]
    for name, t in timing.items():
        ratio = min(t["thread"]) / min(base["thread"])
        print(f"  {name:9s} {min(t['wall']):6.2f} / {min(t['process']):6.2f} / {min(t['thread']):6.2f}"
              f"   thread CPU {ratio:.2f}x per-lane; every round's wall: {', '.join(f'{v:.2f}' for v in t['wall'])}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="100 draws x 200 patients, one round")
    parser.add_argument("--rounds", type=int, default=None)
    parser.add_argument("--old", type=Path, default=None, help="folder holding an older sim/ as sim_old")
    parser.add_argument("--gompertz", action="store_true", help="Gompertz-Makeham progression and Gompertz "
                        "background with rates, slopes and constants drawn per draw")
    args = parser.parse_args()
    global GOMPERTZ
    GOMPERTZ = args.gompertz
    variants = {"per-lane": ("sim", contextlib.nullcontext), "grouped": ("sim", grouped)}
    if args.old is not None:
        sys.path.insert(0, str(args.old))
        variants["old"] = ("sim_old", contextlib.nullcontext)
    print("Gompertz-Makeham progression, Gompertz background" if GOMPERTZ else "Weibull progression",
          "(parameters drawn per draw), log-normal death after progression, a hazard ratio drawn per draw")
    if args.quick:
        measure(variants, parameter_draws(100), 200, block_draws_for(200, 100, 1), args.rounds or 1)
        return
    rounds = args.rounds or 3
    values = parameter_draws(1000)
    measure(variants, values, 1000, block_draws_for(1000, 1000, 1), rounds)  # the analysis' own blocks
    measure(variants, values, 1000, 1000, rounds)  # every draw in one call: up to 1,000 hazards per exit
    measure(variants, values, 100, block_draws_for(100, 1000, 1), rounds)  # few patients per draw


if __name__ == "__main__":
    main()
