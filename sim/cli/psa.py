"""``hazardtrace psa SCENARIO``: the probabilistic analysis of a scenario.

Draws the scenario's ``[[uncertainty]]`` inputs (reproducibly from ``run.seed``), runs every draw
(simulated patients with their inner-loop MCSE, the exact result for Markov models, cycle-based
approximations) on this machine or on a Dask cluster (``--scheduler tcp://host:port``), and writes
the per-draw table, the parameter draws, the uncertain inputs (``inputs.csv``), the summary tables
(incremental results, CE plane, acceptability curve and frontier, EVPI, noise share, convergence,
approximations against the reference; with ``--population`` and ``--years`` the population EVPI,
with ``--evppi`` the EVPPI of parameter groups) and ``metadata.json`` into one folder, atomically,
and prints the main tables with the report's number format (:mod:`sim.report.psa_tables`). Exit
codes as ``hazardtrace run``: 0 ok, 2 bad input (a key, value or scheduler address the user can fix;
nothing written), 1 internal error, 130 Ctrl-C (nothing written).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import TextIO

import pandas as pd

from ..engine import SimulationCancelled
from ..io import Scenario
from ..io.export import metadata_for
from ..problems import ValidationError
from ..distributed import run_psa
from ..psa import CycleMethod, psa_summaries, reference_method, wtp_grid_for, write_psa
from ..psa.apply import inputs_table, uncertain_parameters
from ..psa.summaries import check_population, evppi_table, population_evpi_table, wtp_points
from ..report.psa_tables import (ceac_shown, evpi_shown, evppi_shown, incremental_shown, means_shown,
                                 noise_shown)

__all__ = ["register", "psa_command", "parameter_group"]

DEFAULT_DRAWS = 1000
DEFAULT_PATIENTS = 1000
CONVERSIONS = ("per-transition", "competing-exit", "matrix-exponential")


class EtaProgress:
    """``progress(done, total, seconds_left)`` as a line on stderr, redrawn on a terminal."""

    def __init__(self, stream: TextIO | None = None) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.last = -1

    def __call__(self, done: int, total: int, left: float | None) -> None:
        pct = int(100 * done / total) if total else 100
        if not self.tty and pct // 10 == self.last // 10 and done < total:
            return
        eta = "" if left is None else f", about {left:,.0f} s left"
        start = "\r" if self.tty else ""
        end = "" if self.tty and done < total else "\n"
        self.stream.write(f"{start}psa: {pct:3d}% ({done:,}/{total:,} draws{eta}){end}")
        self.stream.flush()
        self.last = pct


def _cycle_methods(scenario: Scenario, spec: str | None) -> tuple[CycleMethod, ...]:
    """``--cycles``: "none", or comma-separated "conversion|cycle length in years|correction"; default:
    every conversion at the scenario's longest cycle length with the half-cycle correction (Markov
    models only)."""
    if spec is not None and spec.strip().lower() == "none":
        return ()
    if spec is None:
        if not scenario.model.is_markov:
            return ()
        h = max(scenario.run.cycle_lengths)
        return tuple(CycleMethod(c, h, "half-cycle") for c in CONVERSIONS)
    out = []
    for item in spec.split(","):
        parts = [p.strip() for p in item.split("|")]
        if len(parts) != 3:
            raise ValidationError(("--cycles",), "must be 'none' or items 'conversion|cycle length in years|correction' "
                                  "separated by commas", item)
        try:
            length = float(parts[1])
        except ValueError:
            raise ValidationError(("--cycles", "cycle_length"), "must be a number of years", parts[1]) from None
        out.append(CycleMethod(parts[0], length, parts[2]))
    return tuple(out)


def _positive(key: str, value: int | None, default: int) -> int:
    v = default if value is None else value
    if v < 1:
        raise ValidationError((key,), "must be a positive integer", v)
    return v


def parameter_group(text: str) -> list[str]:
    """``--evppi "key, key"``: a parameter group, keys separated by commas."""
    return [k.strip() for k in text.split(",") if k.strip()]


def _evppi_groups(scenario: Scenario, specs: list[str] | None) -> list[list[str]]:
    """The ``--evppi`` groups, each key one of the scenario's uncertain parameters (checked before
    any work)."""
    known = {k for u in uncertain_parameters(scenario) for k in u.keys}
    groups = [parameter_group(g) for g in specs or ()]
    for spec, group in zip(specs or (), groups):
        if not group:
            raise ValidationError(("--evppi",), "must name parameter keys separated by commas", spec)
        for key in group:
            if key not in known:
                raise ValidationError(("--evppi",), "must name uncertain parameters of the scenario's "
                                      "[[uncertainty]] inputs (" + ", ".join(sorted(known)) + ")", key)
    return groups


def _population(args: argparse.Namespace) -> tuple[float | None, int | None]:
    check_population(args.population, args.years)
    if args.population is not None and not args.population > 0:
        raise ValidationError(("--population",), "must be a number of patients per year > 0", args.population)
    if args.years is not None and args.years < 1:
        raise ValidationError(("--years",), "must be a positive integer", args.years)
    return args.population, args.years


def psa_command(scenario: Scenario, args: argparse.Namespace, out: TextIO) -> int:
    """Run the analysis, write the folder, print a short summary."""
    model = scenario.model
    draws = _positive("--draws", args.draws, DEFAULT_DRAWS)
    patients = _positive("--patients", args.patients, DEFAULT_PATIENTS)
    workers = _positive("--workers", args.workers, scenario.run.workers)
    folder = Path(args.output) if args.output else Path("out") / f"{scenario.path.stem if scenario.path else 'scenario'}-psa"
    if (folder.exists() or folder.is_symlink()) and not args.force:  # before any work
        raise ValidationError(("--output",), "exists; pass --force to overwrite", str(folder))
    methods = _cycle_methods(scenario, args.cycles)
    groups = _evppi_groups(scenario, args.evppi)
    population, years = _population(args)
    t0 = time.perf_counter()
    try:
        result = run_psa(scenario, draws, patients, workers=workers, scheduler=args.scheduler,
                         progress=EtaProgress(), cycle_methods=methods, exact=not args.no_exact)
    except SimulationCancelled:
        raise KeyboardInterrupt from None
    summaries = psa_summaries(result.table, model)
    if population is not None and "evpi" in summaries:
        summaries["population_evpi"] = population_evpi_table(summaries["evpi"], reference_method(result.table), model,
                                                             population, years)
    if groups and "evpi" in summaries:
        summaries["evppi"] = evppi_table(result.table, result.values, model, groups)
    meta = metadata_for(scenario.text, result.settings["seed"], patients, extra={
        "command": "psa", "scenario_file": str(scenario.path) if scenario.path else None,
        "draws": draws, "workers": workers, "scheduler": args.scheduler, "block_draws": result.settings["block_draws"],
        "cycle_methods": result.settings["cycle_methods"], "parameters": result.settings["parameters"],
        "notes": list(result.notes), "seconds": round(result.seconds, 3),
        "population": population, "years": years, "evppi_groups": groups})
    write_psa(folder, result.table, result.values, meta, summaries, force=args.force, inputs=inputs_table(scenario))
    _print_summary(out, scenario, result, summaries, folder, time.perf_counter() - t0)
    return 0


def _print_summary(out: TextIO, scenario: Scenario, result, summaries: dict[str, pd.DataFrame], folder: Path,
                   seconds: float) -> None:
    model, s = scenario.model, result.settings
    v = model.valuation
    out.write(f"{model.name}: {s['draws']:,} parameter draws of {len(s['parameters'])} uncertain parameters, "
              f"{s['patients']:,} patients per draw and strategy (seed {s['seed']}, {s['workers']} workers"
              f"{', scheduler ' + s['scheduler'] if s['scheduler'] else ''}) in {seconds:.1f} s\nOutput: {folder}/\n")
    if not s["parameters"]:
        out.write("Note: the scenario declares no [[uncertainty]] inputs: every draw has the point values (the draws "
                  "differ only by their patients)\n")
    for note in result.notes:
        out.write(f"Note: {note}\n")
    cur = v.currency
    out.write("\nMean over draws (discounted; MCSE over the draws):\n" + _text(means_shown(result.table, cur)) + "\n")
    if "incremental" in summaries:
        inc = incremental_shown(summaries["incremental"], s["draws"], cur)
        out.write(f"\nIncremental vs {model.strategy_names[0]!r}:\n" + _text(inc) + "\n")
    if "ceac" in summaries:
        grid = wtp_grid_for(model)
        at = grid[abs(grid - v.willingness_to_pay).argmin()]
        ref = reference_method(result.table)
        ceac = summaries["ceac"]
        rows = ceac[ceac["method"] == ref]
        front = summaries["acceptability_frontier"]
        out.write(f"\nAt {at:,.0f} {cur} per QALY ({ref}):\n"
                  + _text(ceac_shown(rows, front[front["method"] == ref], at)) + "\n")
        points = wtp_points(grid, v.willingness_to_pay)
        out.write("\nEVPI" + (" (per patient and for the population)" if "population_evpi" in summaries else
                                " per patient") + f" ({ref}):\n"
                  + _text(evpi_shown(summaries["evpi"], ref, points, cur, summaries.get("population_evpi"))) + "\n")
    if "evppi" in summaries:
        out.write("\nEVPPI per patient (regression on the group's draws, Strong, Oakley & Brennan 2014):\n"
                  + _text(evppi_shown(summaries["evppi"], cur)) + "\n")
    if "noise_share" in summaries:
        out.write("\nShare of the simulated PSA variance that is patient-level noise:\n"
                  + _text(noise_shown(summaries["noise_share"])) + "\n")


def _text(frame: pd.DataFrame) -> str:
    """Shown text cells as a plain-text table."""
    return frame.to_string(index=False)


def register(sub) -> None:
    """Add the ``psa`` verb to the command line's sub-parsers."""
    p = sub.add_parser("psa", help="probabilistic analysis: parameter draws, per-draw results, acceptability "
                                   "and value of information (on this machine or a Dask cluster)")
    p.add_argument("scenario", help="scenario file (.toml) with [[uncertainty]] inputs")
    p.add_argument("--draws", type=int, help=f"parameter draws (default {DEFAULT_DRAWS})")
    p.add_argument("--patients", type=int, help=f"simulated patients per draw and strategy (default {DEFAULT_PATIENTS})")
    p.add_argument("--workers", type=int, help="Dask workers on this machine (default: the scenario's run.workers; "
                                               "1 runs without a cluster)")
    p.add_argument("--scheduler", help="address of an existing Dask scheduler, e.g. tcp://host:8786")
    p.add_argument("--cycles", help="cycle-based approximations per draw: 'none' or 'conversion|years|correction,...' "
                                    "(default: each conversion at the longest run.cycle_lengths, half-cycle)")
    p.add_argument("--no-exact", action="store_true",
                   help="skip the exact (Kolmogorov) result per draw (Markov models; time-varying hazards solve the "
                        "forward equations draw by draw, tens of milliseconds each)")
    p.add_argument("--output", help="output folder (default out/<scenario name>-psa)")
    p.add_argument("--force", action="store_true", help="replace an existing output folder")
    p.add_argument("--population", type=float, metavar="N",
                   help="patients per year who benefit from the decision (population EVPI, population_evpi.csv; with "
                        "--years)")
    p.add_argument("--years", type=int, metavar="T",
                   help="years the decision holds (population EVPI, discounted at the scenario's cost discount rate; "
                        "first year undiscounted)")
    p.add_argument("--evppi", action="append", metavar="KEYS",
                   help="EVPPI of a parameter group (evppi.csv), its keys separated by commas, e.g. "
                        "'valuation.utilities.well, valuation.utilities.mild' (repeatable)")
    p.set_defaults(func=psa_command)
