"""The ``hazardtrace`` command line.

``hazardtrace demo`` runs the main job on the bundled invented demo model: simulate patient
histories in continuous time under both strategies, solve the model exactly, compare, and run the
cycle-based approximations side by side to show how much the cycle length, the rate conversion and
the within-cycle correction change the answer and the decision.
"""

from __future__ import annotations

import argparse
import sys
import time

import numpy as np
import pandas as pd

from .demo import demo_model
from .engine import simulate
from .outcomes import exact_outcomes, incremental, increments_from_values, patient_outcomes, summarise
from .study import discretization_study

__all__ = ["main", "demo_report"]

SHOWN = ("life_years", "qalys_discounted", "costs_discounted")


def demo_report(n_patients: int = 100_000, seed: int = 2026, workers: int = 2, progress=None) -> dict:
    """Everything the demo prints, as tables: simulated vs exact outcomes, increments, error study."""
    model = demo_model()
    t0 = time.perf_counter()
    run = simulate(model, n_patients, seed, workers=workers, progress=progress)
    t_sim = time.perf_counter() - t0
    per = patient_outcomes(run)
    sim = summarise(per)
    exact = exact_outcomes(model)
    both = sim.merge(exact, on=["strategy", "outcome"])
    both["z"] = (both["mean"] - both["value"]) / both["mcse"]
    both = both.rename(columns={"mean": "simulated", "value": "exact"})[
        ["strategy", "outcome", "simulated", "mcse", "exact", "z"]]
    wtp = model.valuation.willingness_to_pay
    comparator = model.strategy_names[0]
    inc_sim = incremental(per, comparator, wtp)
    inc_exact = increments_from_values(exact, comparator, wtp).melt(
        id_vars=["strategy", "comparator"], var_name="quantity", value_name="exact")
    inc = inc_sim.merge(inc_exact, on=["strategy", "comparator", "quantity"])
    t1 = time.perf_counter()
    study = discretization_study(model)
    t_study = time.perf_counter() - t1
    return {"model": model, "run": run, "outcomes": both, "increments": inc, "study": study,
            "seconds_simulation": t_sim, "seconds_study": t_study}


def _progress_printer(stream=sys.stderr):
    def report(done: int, total: int) -> None:
        stream.write(f"\rsimulating: {done:,}/{total:,} patients ({100 * done / total:.0f}%)")
        if done == total:
            stream.write("\n")
        stream.flush()
    return report


def _study_summary(study) -> pd.DataFrame:
    """Per conversion and cycle length, with the half-cycle correction: relative error of discounted
    QALYs and costs (first strategy) and whether any correction changes the decision."""
    t = study.table
    comp = t["strategy"].iloc[0]
    sel = t[(t["correction"] == "half-cycle") & (t["strategy"] == comp)]
    wide = sel.pivot_table(index=["method", "cycle_length"], columns="outcome", values="relative_error")
    out = pd.DataFrame({"QALY error %": 100 * wide["qalys_discounted"], "cost error %": 100 * wide["costs_discounted"]})
    if len(study.decisions):
        flips = study.decisions.groupby(["method", "cycle_length"])["changes_decision"].any()
        out["decision changes"] = flips.reindex(out.index).map({True: "yes", False: "no"})
    out = out.reset_index()
    out["cycle"] = out["cycle_length"].map(lambda h: {1 / 52: "week", 1 / 12: "month", 0.25: "quarter",
                                                      0.5: "half year", 1.0: "year", 2.0: "2 years"}.get(h, f"{h:g} y"))
    return out[["method", "cycle"] + [c for c in out.columns if c not in ("method", "cycle", "cycle_length")]]


def _cmd_demo(args: argparse.Namespace) -> int:
    rep = demo_report(args.patients, args.seed, args.workers, _progress_printer())
    model, val = rep["model"], rep["model"].valuation
    print(f"{model.name}: {args.patients:,} simulated patients per strategy (seed {args.seed}), "
          f"{len(rep['run'].events):,} events in {rep['seconds_simulation']:.1f} s")
    print(f"Horizon: attained age {model.horizon.value:g}. Discounting {100 * val.discount_costs:g}% costs, "
          f"{100 * val.discount_effects:g}% effects. Willingness to pay {val.willingness_to_pay:,.0f} per QALY.\n")
    fmt = {"display.float_format": "{:,.4f}".format, "display.width": 140, "display.max_rows": 200}
    with pd.option_context(*[x for kv in fmt.items() for x in kv]):
        print("Simulated (mean, Monte Carlo standard error) vs exact (Kolmogorov forward equations):")
        shown = rep["outcomes"][rep["outcomes"]["outcome"].isin(SHOWN + tuple(
            o for o in rep["outcomes"]["outcome"].unique() if o.startswith("years in")))]
        print(shown.to_string(index=False))
        print("\nIncremental analysis vs the first strategy (mcse from paired differences, common random numbers):")
        print(rep["increments"].to_string(index=False))
        print(f"\nCycle-based approximations vs exact (half-cycle correction; full table of "
              f"{len(rep['study'].table):,} rows computed in {rep['seconds_study']:.2f} s):")
        print(_study_summary(rep["study"]).to_string(index=False))
    print("\nThis model and its numbers are invented for demonstration. HazardTrace is a modelling aid, "
          "not for clinical decisions about individual patients; follow local HTA guidance.")
    ok = np.isfinite(rep["outcomes"][["simulated", "exact"]].to_numpy()).all()
    return 0 if ok else 1


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="hazardtrace", description=__doc__.splitlines()[0])
    sub = parser.add_subparsers(dest="command", required=True)
    demo = sub.add_parser("demo", help="simulate the bundled invented demo model, solve it exactly and "
                                       "compare the cycle-based approximations")
    demo.add_argument("--patients", type=int, default=100_000, help="patients per strategy (default 100000)")
    demo.add_argument("--seed", type=int, default=2026, help="random seed (default 2026)")
    demo.add_argument("--workers", type=int, default=2, help="worker threads (default 2)")
    demo.set_defaults(func=_cmd_demo)
    args = parser.parse_args(argv)
    return args.func(args)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
