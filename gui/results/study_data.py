"""Tables for the error-study view, reshaped from ``sim.reference.study.StudyResult`` (pandas only, no Qt).

:func:`largest_safe_cycle` is ``sim.reference.study.largest_cycle_within`` (the rule the study itself uses), so
the user can change the tolerance without re-running the study.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from sim.reference.study import largest_cycle_within as largest_safe_cycle  # the study's own rule

from .series import cycle_label

__all__ = ["KEYS", "largest_safe_cycle", "abs_error_curves", "coinciding", "tolerance_in_units", "reference_noise",
           "safe_cycle_grid", "decision_changes", "errors_table"]

KEYS = ["outcome", "strategy", "method", "correction"]


def abs_error_curves(table: pd.DataFrame, outcome: str,
                     strategy: str) -> dict[tuple[str, str], tuple[np.ndarray, np.ndarray]]:
    """(method, correction) -> (cycle lengths, |error|) for one outcome and strategy, sorted by cycle
    length, keeping only positive errors (a log axis cannot show zero)."""
    g = table[(table["outcome"] == outcome) & (table["strategy"] == strategy)]
    out = {}
    for (method, corr), gg in g.groupby(["method", "correction"], sort=False):
        gg = gg.sort_values("cycle_length")
        h, e = gg["cycle_length"].to_numpy(float), np.abs(gg["error"].to_numpy(float))
        keep = np.isfinite(e) & (e > 0)
        out[(str(method), str(corr))] = (h[keep], e[keep])
    return out


def coinciding(curves: dict[tuple[str, str], tuple[np.ndarray, np.ndarray]]) -> list[str]:
    """Conversions whose error curves are the same for a correction (their lines lie on top of each
    other, e.g. when every state has a single exit), as texts "a = b (correction)", or one text
    "a = b (every correction)" when the same ones coincide for every correction."""
    by_corr: dict[str, list[tuple[str, ...]]] = {}
    for corr in dict.fromkeys(c for _, c in curves):
        groups: list[list[str]] = []
        for (method, c), (h, e) in curves.items():
            if c != corr or h.size == 0:
                continue
            for g in groups:
                h0, e0 = curves[(g[0], corr)]
                if h0.shape == h.shape and np.allclose(h0, h) and np.allclose(e0, e, rtol=1e-9, atol=0):
                    g.append(method)
                    break
            else:
                groups.append([method])
        by_corr[corr] = [tuple(g) for g in groups if len(g) > 1]
    shared = {tuple(v) for v in by_corr.values()}
    if len(by_corr) > 1 and len(shared) == 1 and next(iter(shared)):
        return [f"{' = '.join(g)} (every correction)" for g in next(iter(shared))]
    return [f"{' = '.join(g)} ({corr})" for corr, gs in by_corr.items() for g in gs]


def tolerance_in_units(table: pd.DataFrame, outcome: str, strategy: str, tolerance: float, relative: bool) -> float:
    """The tolerance as an absolute error in the outcome's unit (relative x |reference|)."""
    if not relative:
        return float(tolerance)
    ref = table.loc[(table["outcome"] == outcome) & (table["strategy"] == strategy), "reference"]
    return float(tolerance * abs(ref.iloc[0])) if len(ref) else float("nan")


def reference_noise(table: pd.DataFrame, outcome: str, strategy: str) -> float:
    """Twice the reference's Monte Carlo standard error (0 for an exact reference): errors below it
    are within the reference's own noise (the floor ``sim.reference.study`` uses for convergence orders)."""
    mcse = table.loc[(table["outcome"] == outcome) & (table["strategy"] == strategy), "reference_mcse"]
    return float(2.0 * mcse.iloc[0]) if len(mcse) and np.isfinite(mcse.iloc[0]) else 0.0


def safe_cycle_grid(largest: pd.DataFrame, outcome: str, strategy: str) -> pd.DataFrame:
    """Method x correction grid of the largest safe cycle length in words for one outcome/strategy."""
    g = largest[(largest["outcome"] == outcome) & (largest["strategy"] == strategy)]
    words = g["largest_cycle_length"].map(lambda h: "none (shortest fails)" if pd.isna(h) else cycle_label(float(h)))
    wide = pd.DataFrame({"method": g["method"].to_numpy(), "correction": g["correction"].to_numpy(),
                         "largest": words.to_numpy()})
    grid = wide.pivot(index="method", columns="correction", values="largest")
    grid = grid.reindex(index=list(dict.fromkeys(g["method"])), columns=list(dict.fromkeys(g["correction"])))
    grid.columns.name = None
    grid.index.name = "conversion"
    return grid.reset_index()


def errors_table(table: pd.DataFrame, outcome: str, strategy: str) -> pd.DataFrame:
    """The rows of the study table behind the plot, with the cycle length in words."""
    g = table[(table["outcome"] == outcome) & (table["strategy"] == strategy)]
    g = g.sort_values(["method", "correction", "cycle_length"], kind="stable")
    return pd.DataFrame({
        "cycle length": g["cycle_length"].map(cycle_label).to_numpy(),
        "cycle length (years)": g["cycle_length"].to_numpy(),
        "conversion": g["method"].to_numpy(), "correction": g["correction"].to_numpy(),
        "value": g["value"].to_numpy(), "reference": g["reference"].to_numpy(),
        "error": g["error"].to_numpy(), "absolute error": g["error"].abs().to_numpy(),
        "relative error": g["relative_error"].to_numpy(),
    })


def decision_changes(decisions: pd.DataFrame) -> pd.DataFrame:
    """The combinations whose decision differs from the reference's, for display."""
    if decisions is None or decisions.empty:
        return pd.DataFrame(columns=["cycle length", "conversion", "correction", "strategy", "comparator"])
    d = decisions[decisions["changes_decision"].astype(bool)]
    return pd.DataFrame({
        "cycle length": d["cycle_length"].map(cycle_label).to_numpy(),
        "conversion": d["method"].to_numpy(), "correction": d["correction"].to_numpy(),
        "strategy": d["strategy"].to_numpy(), "comparator": d["comparator"].to_numpy(),
        "incremental costs": d["delta_costs"].to_numpy(), "incremental QALYs": d["delta_effects"].to_numpy(),
        "ICER": d["icer"].to_numpy(), "reference ICER": d["reference_icer"].to_numpy(),
        "NMB": d["nmb"].to_numpy(), "reference NMB": d["reference_nmb"].to_numpy(),
    })
