"""The ``hazardtrace`` command line (headless; ``hazardtrace gui`` is dispatched by ``gui.launcher``).

Verbs::

    hazardtrace run SCENARIO      simulate; write event log, patient table, summary to a folder
    hazardtrace compare SCENARIO  the discretization-error study: table on stdout and CSV files
    hazardtrace check SCENARIO    validate and describe the model in words
    hazardtrace demo              'run' on the bundled invented demo scenario

Exit codes: 0 ok, 2 bad input or output that cannot be written (one line naming the file, key or
folder), 1 internal error (one line and a hint to report it; the traceback with
``HAZARDTRACE_DEBUG=1``) or a stage after the simulation that failed (``<stage> failed: ...``; the
simulation's output is still written; exit 2 instead, in one line, when the user's input caused it),
130 interrupted (Ctrl-C; no half-written output is left).
"""

from __future__ import annotations

import argparse
import os
import sys
import traceback
from pathlib import Path
from typing import TextIO

import pandas as pd

from .. import __version__
from ..io import Scenario, ScenarioError, demo_path, load_scenario
from ..io.export import ExportError, RunWriter, metadata_for, write_tidy_csv
from ..engine import SimulationError
from ..pipeline import RunPlan, StreamSink, failure_text, run_plan
from ..problems import ValidationError
from ..reference import TUNNEL_ENTRY_WORDS, discretization_study, orders_of
from ..report import CAUTION  # one caution text for the command line, the report and the window
from . import fit, psa, report, rerun
from .describe import describe
from .progress import ProgressBar, StageProgress

__all__ = ["main", "describe"]

# Verbs that live in modules of their own. Each module has ``register(sub)`` which adds its parser
# with ``set_defaults(func=...)``; with ``needs_scenario=False`` the function is called as
# ``func(args, out)`` (else ``func(scenario, args, out)`` with the scenario loaded and validated).
# Errors follow ``main``'s exit codes.
VERB_MODULES = (fit.register,     # hazardtrace fit DATA: survival fits from trial evidence
                psa.register,     # hazardtrace psa SCENARIO: the probabilistic analysis
                report.register,  # hazardtrace report RUN_DIR|PSA_DIR|SCENARIO: HTML or PDF
                rerun.register)   # hazardtrace rerun RUN_DIR: reproduce a run, compare hashes

SHOWN = ("life_years", "qalys_discounted", "costs_discounted")
DEBUG_VARIABLE = "HAZARDTRACE_DEBUG"


def _flipping_corrections(decisions: pd.DataFrame) -> pd.Series:
    """Per (method, cycle_length): the within-cycle corrections whose decision differs from the
    reference's (for any strategy against the comparator), named in the study's order, or "none"."""
    order = list(dict.fromkeys(decisions["correction"]))
    flipped = decisions[decisions["changes_decision"].astype(bool)]
    named = flipped.groupby(["method", "cycle_length"])["correction"].agg(
        lambda c: ", ".join(k for k in order if k in set(c)))
    keys = decisions[["method", "cycle_length"]].drop_duplicates()
    index = pd.MultiIndex.from_frame(keys)
    return named.reindex(index).fillna("none")


def _study_summary(study) -> pd.DataFrame:
    """Per conversion and cycle length, with the half-cycle correction: relative errors of life years,
    discounted QALYs and costs (first strategy; outcomes that are all zero are left out) and the
    within-cycle corrections, if any, with which the decision differs from the reference's (so a
    flip under another correction than the half-cycle rows shown is named, not hidden in a "yes")."""
    t = study.table
    first = t["strategy"].iloc[0]
    sel = t[(t["correction"] == "half-cycle") & (t["strategy"] == first)]
    wide = sel.pivot_table(index=["method", "cycle_length"], columns="outcome", values="relative_error",
                           dropna=False).reindex(columns=["life_years", "qalys_discounted", "costs_discounted"])
    out = pd.DataFrame({"life-year error %": 100 * wide["life_years"],
                        "QALY error %": 100 * wide["qalys_discounted"],
                        "cost error %": 100 * wide["costs_discounted"]}).dropna(axis=1, how="all")
    if len(study.decisions):
        out["decision changes with"] = _flipping_corrections(study.decisions).reindex(out.index)
    out = out.reset_index()
    out["cycle (years)"] = out["cycle_length"].map(lambda h: f"{h:.4g}")
    return out[["method", "cycle (years)"] + [c for c in out.columns
                                              if c not in ("method", "cycle (years)", "cycle_length")]]


def _tunnel_line(study) -> str:
    """For a semi-Markov model's study: the tunnel-entry rule and the observed order of each
    conversion's life-year error with the half-cycle correction (first strategy)."""
    first = study.table["strategy"].iloc[0]
    found = orders_of(study.orders, "life_years", first, "half-cycle")
    orders = ", ".join(f"{m} {o:.2g}" if o == o else f"{m} -" for m, o in found.items())
    return (f"Tunnel states: {TUNNEL_ENTRY_WORDS[study.tunnel_entry]} (run.tunnel_entry = \"{study.tunnel_entry}\"). "
            f"Observed order of the life-year error (error ~ h^p): {orders}.")


def _print_table(df: pd.DataFrame, out: TextIO) -> None:
    with pd.option_context("display.float_format", "{:,.4f}".format, "display.width", 160,
                           "display.max_rows", 500, "display.max_columns", 20):
        out.write(df.to_string(index=False) + "\n")


def _run(scenario: Scenario, args: argparse.Namespace, out: TextIO) -> int:
    """Simulate through the run pipeline, streaming every chunk to the output folder (memory bounded
    by the chunks in flight), then print the summary, increments and error-study tables."""
    model = scenario.model
    if getattr(args, "workers", None) is not None and args.workers < 1:
        raise ValidationError(("--workers",), "must be a positive integer", args.workers)
    on_dask = getattr(args, "scheduler", None) is not None or (getattr(args, "workers", None) or 1) > 1
    plan = RunPlan.from_scenario(scenario, patients=args.patients, seed=args.seed,
                                 workers=args.workers if on_dask else args.threads)
    n, seed, workers = plan.patients, plan.seed, plan.workers
    folder = Path(args.output) if args.output else Path("out") / (scenario.path.stem if scenario.path else "run")
    comparator = model.strategy_names[0]
    meta = metadata_for(scenario.text, seed, n, extra={
        "scenario_file": str(scenario.path) if scenario.path else None, "threads": workers,
        "chunk_size": plan.chunk_size, "format": args.format, "conversions": list(scenario.conversions),
        "command": "run"})
    try:
        if on_dask:  # chunks as Dask tasks, each written by its worker as a Parquet partition
            results = _run_on_dask(scenario, plan, folder, args, meta)
        else:
            writer = RunWriter(folder, fmt=args.format, force=args.force, metadata=meta,
                               long_format_model=model if args.long_format else None)
            results = run_plan(scenario, plan, sinks=(StreamSink(writer),), study=not args.no_study,
                               progress=StageProgress())
    except OSError as err:  # read-only folder, full disk, ...: the writer removed its temporary folder
        raise _output_error(folder, err) from None
    summary, increments, exact_note, study = results.outcomes, results.increments, results.exact_note, results.study
    events, seconds = results.n_events, results.seconds["simulation"]
    out.write(f"{model.name}: {n:,} simulated patients per strategy (seed {seed}, {workers} "
              f"{'Dask workers' if on_dask else 'threads'}), {events:,} events in {seconds:.1f} s\n"
              f"Output: {folder}/ ({'partitioned parquet' if on_dask else args.format})\n")
    v = model.valuation
    out.write(f"Horizon: {model.horizon.value:g} {'years' if model.horizon.scale == 'time' else '(attained age)'}. "
              f"Discounting {100 * v.discount_costs:g}% costs, {100 * v.discount_effects:g}% effects. "
              f"Willingness to pay {v.willingness_to_pay:,.0f} {v.currency} per QALY.\n\n")
    shown = summary[summary["outcome"].isin(SHOWN) | summary["outcome"].str.startswith("years in")]
    out.write("Simulated (mean, Monte Carlo standard error)" + (" vs exact (Kolmogorov forward equations):\n"
                                                               if not exact_note else f":\n({exact_note})\n"))
    _print_table(shown.drop(columns=["n"]), out)
    if len(increments):
        out.write(f"\nIncremental analysis vs {comparator!r} (mcse from paired differences, common random numbers):\n")
        _print_table(increments, out)
    if study is not None:
        out.write(f"\nCycle-based approximations vs the {study.reference_kind} reference (half-cycle correction; "
                  f"full table in {folder}/error_study.csv):\n")
        _print_table(_study_summary(study), out)
        if study.tunnel_entry is not None:
            out.write(_tunnel_line(study) + "\n")
    out.write(f"\n{CAUTION}\n")
    if results.failed_by_input:  # input the user can fix: one line naming the cause, exit 2
        sys.stderr.write(f"hazardtrace: error: {'; '.join(results.failure_lines())} (the simulation and the "
                         f"other results are in {folder}/)\n")
        return 2
    for line in results.failure_lines():  # the output folder holds everything computed before
        sys.stderr.write(f"hazardtrace: {line}\n")
    if not results.complete:
        sys.stderr.write(f"hazardtrace: the simulation and the other results are in {folder}/; this is a bug, "
                         f"please report it with the scenario file\n")
        return 1
    return 0


def _run_on_dask(scenario: Scenario, plan: RunPlan, folder: Path, args: argparse.Namespace, meta: dict):
    """``run --workers N`` / ``--scheduler ADDRESS``: :func:`sim.distributed.run_distributed`."""
    from ..distributed import PARTITIONED_FORMAT, run_distributed

    for flag, given in (("--format", args.format != "parquet"), ("--long-format", args.long_format)):
        if given:
            raise ValidationError((flag,), "is not available with --workers/--scheduler (the output is partitioned "
                                  "Parquet)", True)
    meta = {**meta, "format": PARTITIONED_FORMAT, "workers": plan.workers, "scheduler": args.scheduler}
    return run_distributed(scenario, plan, folder, scheduler=args.scheduler, force=args.force,
                           study=not args.no_study, metadata=meta, progress=StageProgress())


def _compare(scenario: Scenario, args: argparse.Namespace, out: TextIO) -> int:
    settings = scenario.run
    study = discretization_study(scenario.model, cycle_lengths=settings.cycle_lengths,
                                 tolerance=args.tolerance or settings.tolerance, relative=not args.absolute,
                                 n_patients=args.patients or min(settings.patients, 200_000), seed=settings.seed,
                                 tunnel_entry=settings.tunnel_entry, progress=ProgressBar("error study"))
    csv = Path(args.csv) if args.csv else Path(f"{scenario.path.stem if scenario.path else 'scenario'}_error_study.csv")
    write_tidy_csv(study.table, csv, force=args.force)
    out.write(f"{scenario.model.name}: reference {study.reference_kind}; {len(study.table):,} rows written to {csv}\n\n")
    _print_table(_study_summary(study), out)
    largest = study.largest_cycle
    first = scenario.model.strategy_names[0]
    sel = largest[(largest["strategy"] == first) & largest["outcome"].isin(SHOWN)]
    out.write(f"\nLargest cycle length within {sel['tolerance'].iloc[0]:g} ({sel['tolerance_kind'].iloc[0]}), "
              f"{first!r}:\n")
    _print_table(sel.pivot_table(index=["method", "correction"], columns="outcome",
                                 values="largest_cycle_length").reset_index(), out)
    for note in study.notes:
        out.write(f"Note: {note}\n")
    return 0


def _check(scenario: Scenario, args: argparse.Namespace, out: TextIO) -> int:
    out.write(describe(scenario) + "\n\nThe scenario is valid.\n")
    return 0


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="hazardtrace", description="Continuous-time patient-history simulation, "
                                     "exact solutions and cycle-based approximations for health decision models.")
    parser.add_argument("--version", action="version", version=f"HazardTrace {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)

    def common_run(p: argparse.ArgumentParser) -> None:
        p.add_argument("--patients", type=int, help="patients per strategy (default: the scenario's run.patients)")
        p.add_argument("--seed", type=int, help="random seed (default: the scenario's run.seed)")
        p.add_argument("--threads", type=int, help="worker threads (default: the scenario's run.workers)")
        p.add_argument("--format", choices=("parquet", "csv"), default="parquet", help="table format (default parquet)")
        p.add_argument("--output", help="output folder (default out/<scenario name>)")
        p.add_argument("--force", action="store_true", help="replace an existing output folder")
        p.add_argument("--long-format", action="store_true",
                       help="also write the multi-state long format (one row per patient per transition at risk)")
        p.add_argument("--no-study", action="store_true", help="skip the discretization-error study")
        p.add_argument("--workers", type=int, help="N > 1: run the chunks on a local Dask cluster of N worker "
                       "processes and write partitioned Parquet (events/part-NNNNN.parquet, patients/...)")
        p.add_argument("--scheduler", help="tcp://host:port of a Dask scheduler: run the chunks on its workers "
                       "(the output folder on a file system they share); partitioned Parquet as --workers")

    run = sub.add_parser("run", help="simulate a scenario and write the event log, patient table and summary")
    run.add_argument("scenario", help="scenario file (.toml)")
    common_run(run)
    run.set_defaults(func=_run)
    demo = sub.add_parser("demo", help="'run' on the bundled invented demo scenario (output in out/demo)")
    common_run(demo)
    demo.set_defaults(func=_run, scenario=None)
    cmp_ = sub.add_parser("compare", help="discretization-error study: table on stdout and a CSV")
    cmp_.add_argument("scenario", help="scenario file (.toml)")
    cmp_.add_argument("--csv", help="CSV file for the full table (default <scenario>_error_study.csv)")
    cmp_.add_argument("--tolerance", type=float, help="accuracy asked of each outcome (default: run.tolerance)")
    cmp_.add_argument("--absolute", action="store_true", help="tolerance in the outcome's unit, not relative")
    cmp_.add_argument("--patients", type=int, help="simulation size of the reference for semi-Markov models")
    cmp_.add_argument("--force", action="store_true", help="replace an existing CSV")
    cmp_.set_defaults(func=_compare)
    chk = sub.add_parser("check", help="validate a scenario and describe the model in words")
    chk.add_argument("scenario", help="scenario file (.toml)")
    chk.set_defaults(func=_check)
    for register in VERB_MODULES:  # verbs in modules of their own (sim/cli/<verb>.py)
        register(sub)
    # listed for --help only: 'hazardtrace gui' is dispatched by gui.launcher before this parser
    sub.add_parser("gui", help="open the desktop window (hazardtrace gui [SCENARIO]; see hazardtrace gui --help)")
    return parser


def _output_error(folder: Path, err: OSError) -> ExportError:
    """One line for output that cannot be written: the folder asked for, the system's reason and the
    file it concerned."""
    reason = err.strerror or str(err)
    detail = f" ({err.filename})" if err.filename and str(err.filename) != str(folder) else ""
    return ExportError(f"{folder}: cannot write the output: {reason}{detail}; no partial output was left behind",
                       file=folder, rule=f"cannot write the output: {reason}")


def _internal_error(err: BaseException) -> int:
    """Exit 1 with one line and a hint to report it; the traceback with ``HAZARDTRACE_DEBUG=1``."""
    sys.stderr.write(f"hazardtrace: internal error: {failure_text(err)}\n")
    if os.environ.get(DEBUG_VARIABLE, "") not in ("", "0"):
        sys.stderr.write(traceback.format_exc())
    else:
        sys.stderr.write(f"This is a bug; please report it with the scenario file (run again with "
                         f"{DEBUG_VARIABLE}=1 for the details).\n")
    return 1


def main(argv: list[str] | None = None, out: TextIO | None = None) -> int:
    out = out or sys.stdout
    args = _parser().parse_args(argv)
    if args.command == "gui":
        sys.stderr.write("hazardtrace: error: the window is opened by the 'hazardtrace' command (gui.launcher)\n")
        return 2
    try:
        if args.command == "demo":
            args.scenario = str(demo_path())
            args.output = args.output or str(Path("out") / "demo")
        if not getattr(args, "needs_scenario", True):  # e.g. 'fit DATA', 'rerun METADATA'
            return args.func(args, out)
        scenario = load_scenario(args.scenario)
        return args.func(scenario, args, out)
    except (ScenarioError, ExportError, ValueError) as err:
        sys.stderr.write(f"hazardtrace: error: {err}\n")
        return 2
    except SimulationError as err:  # the engine's stop for a runaway loop: input the user can change
        sys.stderr.write(f"hazardtrace: error: {err}\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write("\nhazardtrace: interrupted; no partial output was left behind\n")
        return 130
    except BrokenPipeError:  # e.g. piped into 'head'
        return 0
    except OSError as err:  # output that cannot be written (read-only folder, full disk): nothing was left
        where = err.filename or getattr(args, "output", None) or "the output"
        sys.stderr.write(f"hazardtrace: error: cannot write {where}: {err.strerror or err}; "
                         f"no partial output was left behind\n")
        return 2
    except Exception as err:  # a bug: one line and a hint, the traceback on request
        return _internal_error(err)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
