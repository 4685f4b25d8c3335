"""The report's tables as pandas frames with their display text (no HTML here): outcomes and
increments with units, and the discretization-error study's errors, safe cycle lengths and decision
changes."""

from __future__ import annotations

import pandas as pd

from ..analysis import format_fixed
from ..io import Scenario
from ..reference import StudyResult
from .numbers import formatted_frame, significant
from .plots import cycle_words

__all__ = ["outcome_unit", "outcome_table", "increment_table", "study_error_table", "safe_cycle_table",
           "decision_change_table", "KEY_OUTCOMES"]

KEY_OUTCOMES = ("life_years", "qalys_discounted", "costs_discounted")
QUANTITY_WORDS = {"delta_costs": "incremental costs", "delta_effects": "incremental QALYs",
                  "icer": "ICER", "nmb": "net monetary benefit"}


def outcome_unit(outcome: str, currency: str) -> str:
    """The unit of an outcome of :func:`sim.analysis.outcome_names` (costs in the scenario's currency)."""
    if outcome.startswith("costs"):
        return currency
    if outcome.startswith("qalys"):
        return "QALYs"
    return "years"


def outcome_table(outcomes: pd.DataFrame, scenario: Scenario) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The outcome table as numbers and as shown text: strategy, outcome, unit, mean, mcse, exact, z,
    n (rows in the run's order; columns that are all empty are left out)."""
    cur = scenario.model.valuation.currency
    df = outcomes.copy()
    df.insert(2, "unit", [outcome_unit(o, cur) for o in df["outcome"]])
    cols = [c for c in ("strategy", "outcome", "unit", "mean", "mcse", "exact", "z", "n") if c in df.columns]
    df = df[cols]
    df = df[[c for c in df.columns if not (df[c].dtype.kind == "f" and df[c].isna().all())]]
    shown = formatted_frame(df)
    if "z" in df.columns:  # a standardised difference: two decimals say all it can
        shown["z"] = [format_fixed(v, 2) for v in df["z"].tolist()]
    return df, shown


def increment_table(increments: pd.DataFrame, scenario: Scenario) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The increments as numbers and shown text, with the unit of each quantity."""
    cur = scenario.model.valuation.currency
    units = {"delta_costs": cur, "delta_effects": "QALYs", "icer": f"{cur} per QALY", "nmb": cur}
    df = increments.copy()
    df.insert(3, "unit", [units.get(q, "") for q in df["quantity"]])
    df["quantity"] = [QUANTITY_WORDS.get(q, q) for q in df["quantity"]]
    df = df[[c for c in df.columns if not (df[c].dtype.kind == "f" and df[c].isna().all())]]
    return df, formatted_frame(df)


def study_error_table(study: StudyResult, correction: str = "half-cycle") -> pd.DataFrame:
    """Shown text: per conversion and cycle length, the relative error (%) of life years, discounted
    QALYs and discounted costs of the first strategy with ``correction``, to three significant
    figures (outcomes that are all zero are left out)."""
    t = study.table
    first = t["strategy"].iloc[0]
    sel = t[(t["correction"] == correction) & (t["strategy"] == first) & t["outcome"].isin(KEY_OUTCOMES)]
    wide = sel.pivot_table(index=["method", "cycle_length"], columns="outcome", values="relative_error", dropna=False)
    words = {"life_years": "life-year error %", "qalys_discounted": "QALY error % (discounted)",
             "costs_discounted": "cost error % (discounted)"}
    rows = []
    for (method, h), r in wide.iterrows():
        row = {"conversion": method, "cycle": cycle_words(float(h))}
        for o in KEY_OUTCOMES:
            if o in wide.columns and not pd.isna(r[o]):
                row[words[o]] = significant(100 * float(r[o]), 3)
        rows.append(row)
    return pd.DataFrame(rows).fillna("")


def safe_cycle_table(study: StudyResult, strategy: str | None = None) -> pd.DataFrame:
    """Shown text: the largest cycle length within the tolerance per conversion and correction for
    the key outcomes (first strategy unless named); "none" where no cycle length tried is within."""
    lc = study.largest_cycle
    strategy = strategy or str(study.table["strategy"].iloc[0])
    sel = lc[(lc["strategy"] == strategy) & lc["outcome"].isin(KEY_OUTCOMES)]
    rows = []
    for (method, corr), g in sel.groupby(["method", "correction"], sort=False):
        row = {"conversion": method, "correction": corr}
        for _, r in g.iterrows():
            h = r["largest_cycle_length"]
            row[str(r["outcome"])] = "none" if pd.isna(h) else cycle_words(float(h))
        rows.append(row)
    return pd.DataFrame(rows).fillna("")


def decision_change_table(study: StudyResult) -> pd.DataFrame:
    """Shown text: every (conversion, cycle length, correction) whose decision (sign of the net
    monetary benefit against the comparator) differs from the reference's, with both values."""
    d = study.decisions
    if d is None or not len(d) or "changes_decision" not in d:
        return pd.DataFrame()
    flipped = d[d["changes_decision"].astype(bool)]
    rows = [{"conversion": r["method"], "cycle": cycle_words(float(r["cycle_length"])), "correction": r["correction"],
             "strategy": r["strategy"], "net monetary benefit": significant(float(r["nmb"]), 3),
             "reference": significant(float(r["reference_nmb"]), 3)} for _, r in flipped.iterrows()]
    return pd.DataFrame(rows)
