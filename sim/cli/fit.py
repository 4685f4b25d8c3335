"""``hazardtrace fit``: parametric survival fits to patient-level data or to published Kaplan-Meier
curves (reconstructed by the algorithm of Guyot et al. 2012), printed as an AIC/BIC table and written
as a scenario fragment (docs/methods.md, 'Survival fits from trial evidence'). With two arms the
fragment also holds the compared arm's entry for its strategy (the hazard ratio, or for an
accelerated-failure-time family the compared arm's own hazard as a replacement) and the compared-arm
covariance group (:func:`sim.evidence.compared_arm`, :func:`sim.evidence.compared_arm_group`).

Examples::

    hazardtrace fit trial.csv --time months --event death --group arm --unit months --output fits.toml
    hazardtrace fit trial.csv --arm-column arm --reference control --transition "disease death" \
        --transition-index 0 --strategy-index 1 --unit months --output fits.toml
    hazardtrace fit --curves km.csv --at-risk risk.csv --unit months --total-events control=120
"""

from __future__ import annotations

import argparse
from typing import TextIO

import pandas as pd

from ..hazards import UNIT_IN_YEARS
from ..io.atomic import write_text_atomic
from ..problems import ValidationError
from ..io import load_scenario
from ..evidence import (FAMILY_NAMES, below_background, choose_fit, compared_arm, fit_families, fit_table,
                        follow_up_years, parse_total_events, read_at_risk, read_curves, read_survival_data, reconstruct,
                        reference_first, write_fragment)

__all__ = ["register"]

DEFAULT_FAMILIES = ("exponential", "weibull", "gompertz", "loglogistic", "lognormal", "gamma", "gengamma")


def _sheet(sheet: str | None) -> str | int:
    """An .xlsx worksheet by name, or by position when given as a whole number (default the first)."""
    if sheet is None:
        return 0
    return int(sheet) if sheet.isdigit() else sheet


def _index(text: str) -> int:
    """A position in an array of tables: a whole number >= 0."""
    if not text.strip().isdigit():
        raise argparse.ArgumentTypeError(f"must be a whole number >= 0 (a position from 0), not {text!r}")
    return int(text)


def _fit(args: argparse.Namespace, out: TextIO) -> int:
    families = list(args.families)
    if args.knots:
        for k in args.knots:
            if k not in (1, 2, 3):
                raise ValidationError(("--knots",), "must be 1, 2 or 3 interior knots", k)
        if "spline" not in families:
            families.append("spline")
    if args.breaks and "piecewise" not in families:
        families.append("piecewise")
    if "piecewise" in families and not args.breaks:
        raise ValidationError(("--breaks",), "are required for the piecewise family (band starts, e.g. 0 6 12)")
    if args.curves or args.at_risk:
        if not (args.curves and args.at_risk):
            raise ValidationError(("--at-risk" if args.curves else "--curves",),
                                  "--curves and --at-risk go together (digitised points and numbers at risk)")
        if args.data:
            raise ValidationError(("DATA",), "give either patient-level DATA or --curves/--at-risk, not both",
                                  args.data)
        rec = reconstruct(read_curves(args.curves), read_at_risk(args.at_risk),
                          total_events=parse_total_events(args.total_events or [], ("--total-events",)),
                          unit=args.unit, source=args.curves)
        for arm, notes in rec.notes.items():
            for note in notes:
                out.write(f"{args.curves} [{arm}]: {note}\n")
        data, source = rec.data, args.curves
        out.write(f"Reconstructed {data.n} patients, {data.n_events} events (Guyot et al. 2012).\n")
        if args.write_patients:
            table = pd.DataFrame({"time": data.time, "event": data.event.astype(int)})
            if data.group is not None:
                table.insert(0, "arm", data.group)
            write_text_atomic(args.write_patients, table.to_csv(index=False), force=args.force)
            out.write(f"Reconstructed patients written to {args.write_patients}\n")
    elif args.data:
        if args.write_patients:
            raise ValidationError(("--write-patients",), "writes reconstructed patients: it needs --curves and "
                                  "--at-risk", args.write_patients)
        data = read_survival_data(args.data, time=args.time, event=args.event, entry=args.entry, group=args.group,
                                  unit=args.unit, sheet=_sheet(args.sheet))
        source = args.data
    else:
        raise ValidationError(("DATA",), "give a patient-level data file or --curves and --at-risk")
    data = reference_first(data, args.reference, key="--reference")
    arms = (f", arm {data.groups[1]!r} against the reference arm {data.groups[0]!r}" if len(data.groups) == 2
            else "")
    out.write(f"{source}: {data.n} patients, {data.n_events} events, time in {data.unit}"
              f"{', delayed entry' if data.delayed else ''}{arms}\n\n")
    fits = fit_families(data, families, breaks=args.breaks, knots=args.knots or ())
    table = fit_table(fits)
    with pd.option_context("display.width", 200, "display.max_columns", 20, "display.max_colwidth", 80,
                           "display.float_format", "{:,.3f}".format):
        out.write(table.to_string(index=False) + "\n")
    failed = [f.family for f in fits if not f.converged]
    if failed:
        out.write(f"Not converged (not written): {', '.join(failed)}\n")
    chosen = choose_fit(fits, args.criterion)
    if chosen is not None:
        out.write(f"\nLowest {args.criterion.upper()} among scenario families: {chosen.family} "
                  f"({', '.join(f'{k} = {v}' for k, v in chosen.parameters.items())}; unit {chosen.unit})\n")
    if chosen is not None and chosen.effect is not None:
        arm = compared_arm(chosen, transition=args.transition, strategy=args.strategy_index)
        out.write(f"Compared arm: {arm.note}.\n")
    if args.background:
        _background_report(fits, args, out)
    if args.output:
        if chosen is None:
            raise ValidationError(("--families",), f"no fit of a scenario hazard family converged; nothing was "
                                  f"written to {args.output}", families)
        write_fragment(args.output, fits, source=source, criterion=args.criterion, force=args.force,
                       transition=args.transition_index, transition_name=args.transition, strategy=args.strategy_index)
        out.write(f"Scenario fragment written to {args.output}\n")
    return 0


def _background_report(fits: list, args: argparse.Namespace, out: TextIO) -> None:
    """Where each converged fit falls below the background mortality of ``--background SCENARIO`` at
    attained age ``--entry-age`` + t, over ``--horizon`` years (default: the scenario's horizon)."""
    if args.entry_age is None:
        raise ValidationError(("--entry-age",), "is required with --background (attained age at time 0, years)")
    scenario = load_scenario(args.background)
    model = scenario.model
    if model.background is None:
        raise ValidationError(("--background",), "the scenario has no [background] mortality", args.background)
    horizon = args.horizon
    if horizon is None:
        horizon = follow_up_years(model.horizon, args.entry_age)
    if not horizon > 0:
        raise ValidationError(("--horizon",), "must be > 0 years (give --horizon, or an entry age below the "
                              "scenario's horizon age)", horizon)
    out.write(f"\nFitted hazards against the background mortality of {args.background} (entry age "
              f"{args.entry_age:g}, {horizon:g} years):\n")
    for fit in fits:
        if not fit.converged:
            continue
        for found in below_background(fit.hazard(), model.background, entry_age=args.entry_age, horizon=horizon,
                                      unit=fit.unit):
            out.write(f"  {fit.label}: {found.describe()}\n")


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``fit`` verb to the ``hazardtrace`` parser."""
    p = sub.add_parser("fit", help="fit survival curves to patient data or published curves; AIC/BIC table and a "
                                   "scenario fragment")
    p.add_argument("data", nargs="?", metavar="DATA", help="patient-level data (.csv, .parquet, .xlsx), one row per "
                                                             "patient")
    p.add_argument("--time", default="time", help="exit time column (default 'time')")
    p.add_argument("--event", default="event", help="event indicator column, 1 event / 0 censored (default 'event')")
    p.add_argument("--entry", help="delayed-entry time column (left truncation)")
    p.add_argument("--group", "--arm-column", dest="group", metavar="COLUMN",
                   help="arm column (two arms: a hazard ratio or acceleration factor)")
    p.add_argument("--reference", metavar="ARM", help="the reference arm of two (default: the first in sorted "
                   "order): its hazard is fitted, the other arm's effect is against it")
    p.add_argument("--sheet", help="worksheet of an .xlsx file (name, or position from 0; default the first)")
    p.add_argument("--unit", default="years", choices=tuple(UNIT_IN_YEARS), help="time unit of the data")
    p.add_argument("--families", nargs="+", default=list(DEFAULT_FAMILIES), choices=FAMILY_NAMES, metavar="FAMILY",
                   help=f"families to fit (default: {' '.join(DEFAULT_FAMILIES)}; also piecewise, spline)")
    p.add_argument("--breaks", nargs="+", type=float, metavar="T", help="piecewise band starts (data unit)")
    p.add_argument("--knots", nargs="+", type=int, metavar="M", help="Royston-Parmar splines with M interior knots")
    p.add_argument("--curves", metavar="KM.csv", help="digitised Kaplan-Meier points: time, survival[, arm]")
    p.add_argument("--at-risk", metavar="RISK.csv", help="numbers at risk: time, at_risk[, arm]")
    p.add_argument("--write-patients", metavar="PATIENTS.csv", help="also write the reconstructed patients")
    p.add_argument("--total-events", nargs="+", metavar="ARM=N", help="reported total events per arm")
    p.add_argument("--background", metavar="SCENARIO.toml", help="show where each fit falls below this scenario's "
                   "background mortality at attained age (needs --entry-age)")
    p.add_argument("--entry-age", type=float, metavar="AGE", help="attained age (years) at time 0, for --background")
    p.add_argument("--horizon", type=float, metavar="YEARS", help="years examined with --background (default: the "
                   "scenario's horizon)")
    p.add_argument("--criterion", choices=("aic", "bic"), default="aic", help="how [chosen] is chosen")
    p.add_argument("--output", metavar="FRAGMENT.toml", help="write the fits as a scenario fragment")
    p.add_argument("--transition", default="death", metavar="NAME", help="two arms: the transition the fit goes "
                   "into, as named in the fragment's strategy keys and covariance group (default 'death')")
    p.add_argument("--transition-index", type=_index, default=0, metavar="I", help="two arms: its position among "
                   "the scenario's [[transitions]], from 0 (default 0)")
    p.add_argument("--strategy-index", type=_index, default=1, metavar="K", help="two arms: the position of the "
                   "compared arm's [[strategies]] table, from 0 (default 1, the first after the comparator)")
    p.add_argument("--force", action="store_true", help="replace an existing fragment file")
    p.set_defaults(func=_fit, needs_scenario=False)
