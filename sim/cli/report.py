"""``hazardtrace report RUN_DIR|PSA_DIR|SCENARIO [--output FILE.html|.pdf]``: the report a reviewer reads.

The folder's kind comes from its ``metadata.json``: a probabilistic analysis's folder (written by
``hazardtrace psa``) gives the scenario in words with its uncertain inputs and the uncertainty
section (the folder's tables as recorded; with ``--population`` and ``--years`` the population EVPI,
with ``--evppi`` the EVPPI of parameter groups, computed from the recorded draws by the functions
``hazardtrace psa`` uses, :mod:`sim.psa.summaries`). From a run folder (written by ``hazardtrace run``)
the report shows the recorded tables and re-estimates the curves from the recorded event log. From a
scenario file the scenario is first run in memory at its own settings (``--patients`` and ``--seed``
override them), with nothing written but the report.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import TextIO

from ..io import load_scenario
from ..io.export import ExportError
from ..pipeline import run_scenario
from ..report import (TraceRequest, folder_kind, inputs_from_results, load_psa_folder, load_run_folder,
                      metadata_path, write_report)
from .progress import StageProgress
from .psa import parameter_group

__all__ = ["register"]

METHODS = ("per-transition", "competing-exit", "matrix-exponential")


def _trace(text: str) -> TraceRequest:
    """``METHOD:YEARS``, e.g. ``matrix-exponential:0.5``."""
    method, _, years = text.partition(":")
    try:
        h = float(years)
    except ValueError:
        h = float("nan")
    if method not in METHODS or not (h > 0 and h < 1e6):
        raise argparse.ArgumentTypeError(f"{text!r}: give METHOD:YEARS with METHOD one of {', '.join(METHODS)} and "
                                         f"a cycle length in years > 0, e.g. matrix-exponential:0.5")
    return TraceRequest(method, h)


def _report(args: argparse.Namespace, out: TextIO) -> int:
    source = Path(args.source)
    is_run = source.is_dir() or source.name == "metadata.json"
    tables = None
    psa_only = (args.population is not None or args.years is not None or args.evppi)
    if is_run and folder_kind(source) == "psa":
        inputs, tables = load_psa_folder(source, population=args.population, years=args.years,
                                         evppi_groups=[parameter_group(g) for g in args.evppi or ()])
        default = metadata_path(source).parent / "report.html"
        what = f"the probabilistic analysis {metadata_path(source).parent}"
    elif psa_only:
        raise ExportError(f"{source}: --population, --years and --evppi apply to a probabilistic analysis's folder "
                          f"(hazardtrace psa)", file=source, key=("--population" if args.population is not None else
                                                                  "--years" if args.years is not None else "--evppi",),
                          rule="only with a folder written by 'hazardtrace psa'")
    elif is_run:
        inputs = load_run_folder(source)
        default = metadata_path(source).parent / "report.html"
        what = f"the run folder {metadata_path(source).parent}"
    elif source.suffix.lower() == ".toml" or source.is_file():
        scenario = load_scenario(source)
        n = args.patients or scenario.run.patients
        seed = scenario.run.seed if args.seed is None else args.seed
        out.write(f"Running {source} in memory at its settings ({n:,} patients per strategy, seed {seed}) for the "
                  f"report; nothing else is written (use 'hazardtrace run' for the event log and tables).\n")
        results = run_scenario(scenario, patients=args.patients, seed=args.seed, progress=StageProgress())
        for line in results.failure_lines():
            sys.stderr.write(f"hazardtrace: {line}\n")
        inputs = inputs_from_results(results, source=f"a run of {source} in memory")
        default = Path(f"{source.stem}_report.html")
        what = f"a run of {source} in memory"
    else:
        raise ExportError(f"{source}: no such run folder or scenario file", file=source,
                          rule="must be a run folder (hazardtrace run), its metadata.json or a scenario file")
    target = Path(args.output) if args.output else default
    written = write_report(inputs, target, force=args.force, traces=args.trace or None, psa_tables=tables)
    out.write(f"Report of {what}: {written}\n")
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``report`` verb to the command line's sub-parsers."""
    p = sub.add_parser("report", help="write a self-contained HTML (or PDF) report of a run folder, a probabilistic "
                                      "analysis or a scenario",
                       description="Write one self-contained HTML file (plots as inline SVG, no network needed) or "
                                   "a PDF of the same report. RUN_DIR: a folder written by 'hazardtrace run' (its "
                                   "tables as recorded, curves re-estimated from its event log). PSA_DIR: a folder "
                                   "written by 'hazardtrace psa' (its uncertain inputs and uncertainty results). "
                                   "SCENARIO: the "
                                   "scenario is run in memory at its settings first; only the report is written.")
    p.add_argument("source", metavar="RUN_DIR|PSA_DIR|SCENARIO",
                   help="run folder (or its metadata.json), probabilistic analysis folder, or scenario file")
    p.add_argument("--output", help="report file, .html or .pdf (default RUN_DIR/report.html, or "
                                    "<scenario name>_report.html here)")
    p.add_argument("--force", action="store_true", help="replace an existing report file")
    p.add_argument("--trace", action="append", type=_trace, metavar="METHOD:YEARS",
                   help="a cycle-based trace to draw beside the curves (repeatable; default per-transition and "
                        "matrix-exponential at 1 year, or the longest cycle length of the scenario)")
    p.add_argument("--patients", type=int, help="SCENARIO only: patients per strategy (default run.patients)")
    p.add_argument("--seed", type=int, help="SCENARIO only: random seed (default run.seed)")
    p.add_argument("--population", type=float, metavar="N",
                   help="PSA_DIR only: patients per year who benefit from the decision (population EVPI; with --years)")
    p.add_argument("--years", type=int, metavar="T",
                   help="PSA_DIR only: years the decision holds (population EVPI, discounted at the scenario's cost "
                        "discount rate; first year undiscounted)")
    p.add_argument("--evppi", action="append", metavar="KEYS",
                   help="PSA_DIR only: EVPPI of a parameter group, its keys separated by commas, e.g. "
                        "'valuation.utilities.well, valuation.utilities.mild' (repeatable)")
    p.set_defaults(func=_report, needs_scenario=False)
