"""Outcomes table: life expectancy, time in state, QALYs and costs per strategy, then the increments
(costs, QALYs, ICER, NMB) against the comparator, each with its Monte Carlo standard error and the
exact value where the model has one. Ctrl+C copies the selection for a spreadsheet."""

from __future__ import annotations

import html

import numpy as np
import pandas as pd
from PySide6.QtWidgets import QLabel, QVBoxLayout, QWidget

from sim.pipeline.run import RunResults

from .labels import outcome_label, outcome_unit, quantity_label
from .layout import column, two_panes
from .table_view import TableView

__all__ = ["OutcomesView", "outcomes_frame", "increments_frame"]


def _exact(df: pd.DataFrame) -> np.ndarray:
    return df["exact"].to_numpy(float) if "exact" in df.columns else np.full(len(df), np.nan)


def outcomes_frame(results: RunResults) -> pd.DataFrame:
    """The outcomes table as shown: one row per strategy and outcome (no "exact" column when the model
    has no exact solution)."""
    o = results.outcomes
    currency = results.scenario.model.valuation.currency
    frame = pd.DataFrame({
        "strategy": o["strategy"].astype(str).to_numpy(),
        "outcome": [outcome_label(x) for x in o["outcome"]],
        "unit": [outcome_unit(x, currency) for x in o["outcome"]],
        "simulated mean": o["mean"].to_numpy(float),
        "MCSE": o["mcse"].to_numpy(float),
        "exact": _exact(o),
        "patients": o["n"].to_numpy(),
    })
    return frame if frame["exact"].notna().any() else frame.drop(columns="exact")


def increments_frame(results: RunResults) -> pd.DataFrame:
    """The increments table as shown: one row per strategy and quantity against the comparator."""
    inc = results.increments
    val = results.scenario.model.valuation
    if inc is None or inc.empty:
        return pd.DataFrame(columns=["strategy", "comparator", "quantity", "simulated", "MCSE (paired)",
                                     "MCSE (unpaired)", "exact"])
    frame = pd.DataFrame({
        "strategy": inc["strategy"].astype(str).to_numpy(),
        "comparator": inc["comparator"].astype(str).to_numpy(),
        "quantity": [quantity_label(q, val.currency, val.willingness_to_pay) for q in inc["quantity"]],
        "simulated": inc["value"].to_numpy(float),
        "MCSE (paired)": inc["mcse"].to_numpy(float),
        "MCSE (unpaired)": inc["mcse_unpaired"].to_numpy(float),
        "exact": _exact(inc),
    })
    return frame if frame["exact"].notna().any() else frame.drop(columns="exact")


class OutcomesView(QWidget):
    """Two copyable tables (outcomes, increments) with a short explanation."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.outcomes = TableView("outcomes")
        self.increments = TableView("increments")
        self.note = QLabel()
        self.note.setWordWrap(True)
        top = column(QLabel("<b>Outcomes per strategy</b> (to the horizon)"), self.outcomes, stretch=self.outcomes)
        self.increments_title = QLabel("<b>Increments against the comparator</b>")
        bottom = column(self.increments_title, self.increments, stretch=self.increments)
        split = two_panes(top, bottom)
        layout = QVBoxLayout(self)
        layout.addWidget(split, 1)
        layout.addWidget(self.note)

    def show_results(self, results: RunResults) -> None:
        model = results.scenario.model
        val = model.valuation
        several = len(model.strategy_names) > 1
        self.outcomes.set_frame(outcomes_frame(results))
        self.increments.set_frame(increments_frame(results))
        self.increments.setVisible(several)
        self.increments_title.setText(
            f"<b>Increments against the comparator, “{html.escape(model.strategy_names[0])}”</b> "
            "(discounted costs and QALYs)"
            if several else "<b>Increments</b>: none, the scenario has a single strategy")
        parts = ["MCSE: Monte Carlo standard error of the simulated mean."]
        if several:
            parts.append("Increments use paired patients (the same patients in every strategy); the unpaired "
                         "MCSE is shown for comparison.")
        parts.append(f"Discount rates: costs {val.discount_costs * 100:.3g}% and effects "
                     f"{val.discount_effects * 100:.3g}% per year. Select cells and press Ctrl+C to copy them "
                     "into a spreadsheet (right-click for more).")
        if results.exact_note:
            note = results.exact_note
            parts.append("No exact values. " + note[:1].upper() + note[1:] + ("" if note.endswith(".") else "."))
        self.note.setText(" ".join(parts))
