"""The cycle-length error study: absolute error against cycle length on log-log axes per conversion
(colour) and within-cycle correction (line style and marker; both from :mod:`gui.palette`, as in the
curves view), with boxes to pick which of them to show and the curve under the pointer highlighted;
the table behind the plot, the largest safe cycle length for a tolerance the user sets, and the
combinations that change the decision."""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal, Slot
from PySide6.QtGui import QValidator
from PySide6.QtWidgets import QCheckBox, QComboBox, QDoubleSpinBox, QHBoxLayout, QLabel, QTabWidget, QVBoxLayout, QWidget

from sim.reference.cohort import Conversion, Correction
from sim.pipeline.run import RunResults
from sim.reference.study import StudyResult, orders_of

from .. import palette
from .labels import outcome_label, outcome_unit
from .layout import column, two_panes
from .plot_panel import PlotPanel
from .series import cycle_label
from .study_data import (abs_error_curves, coinciding, decision_changes, errors_table, largest_safe_cycle,
                         reference_noise, safe_cycle_grid, tolerance_in_units)
from .table_view import TableView

__all__ = ["ErrorStudyView", "PositiveSpinBox", "study_order"]


def study_order(orders, outcome: str, strategy: str, key: tuple[str, str]) -> float:
    """The study's observed order p (error ~ h^p) of one (conversion, correction) curve, or NaN."""
    found = orders_of(orders, outcome, strategy, key[1]).get(key[0])
    return math.nan if found is None else found

class PositiveSpinBox(QDoubleSpinBox):
    """A spin box for a positive number that says when typed text is not used.

    A plain spin box drops the characters it cannot take as they are typed ("-1" becomes 1) or
    quietly puts back the previous value. Here any text may be typed; when editing finishes (Enter,
    focus leaving, an arrow) with text that is not a number in the box's range, the previous value
    is kept and ``rejected`` carries the text and why; ``accepted`` follows a value that was used.
    """

    rejected = Signal(str, str)  # the text typed, why it was not used
    accepted = Signal()

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._refused = False
        self.editingFinished.connect(self._on_editing_finished)

    def validate(self, text: str, pos: int) -> object:  # noqa: D102 - Qt API
        state, text, pos = super().validate(text, pos)
        if state == QValidator.State.Invalid:  # keep what the user typed; judged when editing ends
            state = QValidator.State.Intermediate
        return state, text, pos

    def fixup(self, text: str) -> str:  # noqa: D102 - Qt API: called with text that cannot be used
        self._refused = True
        self.rejected.emit(text.strip(), self.why_not(text))
        return text  # unchanged: the spin box then keeps its previous value

    def why_not(self, text: str) -> str:
        """Why ``text`` cannot be this box's value, in the user's words."""
        number, ok = self.locale().toDouble(text.strip())
        if not ok:
            try:
                number = float(text.strip())
            except ValueError:
                return "not a number"
        if not math.isfinite(number):
            return "not a finite number"
        if number <= 0:
            return "must be positive"
        if number < self.minimum():
            return f"must be at least {self.minimum():g}"
        if number > self.maximum():
            return f"must be at most {self.maximum():g}"
        return f"at most {self.decimals()} decimals"

    def _on_editing_finished(self) -> None:
        refused, self._refused = self._refused, False
        if not refused:
            self.accepted.emit()


METHODS = [c.value for c in Conversion]
CORRECTIONS = [c.value for c in Correction]
RELATIVE, ABSOLUTE = "relative (share of the reference)", "absolute (in the outcome's unit)"


class ErrorStudyView(QWidget):
    """Call :meth:`show_results`; ``safe_cycles_changed`` follows every recomputation of the
    largest safe cycle length (new results or a new tolerance)."""

    safe_cycles_changed = Signal()

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._study: StudyResult | None = None
        self._currency = ""
        self.largest = None  # the long table of largest safe cycle lengths for the current tolerance
        self._build()

    def _build(self) -> None:
        self.outcome = QComboBox()
        self.strategy = QComboBox()
        for combo in (self.outcome, self.strategy):
            combo.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToContents)
        self.tolerance = PositiveSpinBox()
        self.tolerance.setObjectName("tolerance")
        self.tolerance.setDecimals(6)
        self.tolerance.setRange(1e-6, 1e12)
        self.tolerance.setStepType(QDoubleSpinBox.StepType.AdaptiveDecimalStepType)
        self.tolerance.setKeyboardTracking(False)  # recompute when the user is done typing
        self.tolerance.setToolTip("Accuracy asked of each outcome; a cycle length is safe when it and every "
                                  "shorter one stay within it")
        self.tolerance_message = QLabel()
        self.tolerance_message.setObjectName("tolerance_message")
        self.tolerance_message.setStyleSheet(f"color: {palette.OKABE_ITO['vermillion']};")
        self.tolerance_message.setWordWrap(True)
        self.tolerance_message.hide()
        self.tolerance.rejected.connect(self._on_tolerance_rejected)
        self.tolerance.accepted.connect(self._clear_tolerance_message)
        self.kind = QComboBox()
        self.kind.addItems([RELATIVE, ABSOLUTE])
        top = QHBoxLayout()
        for label, w in (("Outcome", self.outcome), ("Strategy", self.strategy), ("Tolerance", self.tolerance),
                         ("", self.kind), ("", self.tolerance_message)):
            if label:
                top.addWidget(QLabel(label))
            top.addWidget(w)
        top.addStretch(1)
        self.reference = QLabel()
        self.reference.setWordWrap(True)

        self.overlap = QLabel()
        self.overlap.setWordWrap(True)
        self.panel = PlotPanel("error_vs_cycle_length", "cycle length (log scale)",
                               "absolute error |cycle-based − reference|", legend_columns=4)
        plot = self.panel.plot
        plot.setLogMode(x=True, y=True)
        self._curves: dict[tuple[str, str], pg.PlotDataItem] = {}
        for m in METHODS:
            for c in CORRECTIONS:
                item = pg.PlotDataItem(pen=palette.method_pen(m, 2.0, c), symbol=palette.CORRECTION_SYMBOLS[c],
                                       symbolSize=6, symbolPen=palette.method_pen(m, 1.0),
                                       symbolBrush=palette.method_colour(m), antialias=True)
                plot.addItem(item)
                self._curves[(m, c)] = item
        self.hovered: tuple[str, str] | None = None
        self.hover_label = QLabel()
        self.hover_label.setStyleSheet("color: #555555;")
        plot.scene().sigMouseMoved.connect(self._on_mouse_moved)
        self.show_methods = {m: QCheckBox(m) for m in METHODS}
        self.show_corrections = {c: QCheckBox(c) for c in CORRECTIONS}
        pick = QHBoxLayout()
        pick.addWidget(QLabel("Show conversions:"))
        for box in self.show_methods.values():
            pick.addWidget(box)
        pick.addSpacing(16)
        pick.addWidget(QLabel("corrections:"))
        for box in self.show_corrections.values():
            pick.addWidget(box)
        pick.addStretch(1)
        pick.addWidget(self.hover_label)
        for box in (*self.show_methods.values(), *self.show_corrections.values()):
            box.setChecked(True)
            box.setToolTip("Show or hide these curves (point at a curve to highlight it)")
            box.toggled.connect(self._on_selection_changed)
        self._tol_line = pg.InfiniteLine(angle=0, movable=False, pen=pg.mkPen("#000000", width=1.2,
                                                                              style=Qt.PenStyle.DashLine))
        plot.addItem(self._tol_line)
        self._tol_sample = pg.PlotDataItem(pen=pg.mkPen("#000000", width=1.2, style=Qt.PenStyle.DashLine))
        plot.addItem(self._tol_sample)  # empty: stands for the tolerance line in the legend
        noise_pen = pg.mkPen("#777777", width=1.2, style=Qt.PenStyle.DotLine)
        self._noise_line = pg.InfiniteLine(angle=0, movable=False, pen=noise_pen)
        plot.addItem(self._noise_line)
        self._noise_sample = pg.PlotDataItem(pen=noise_pen)
        plot.addItem(self._noise_sample)

        self.safe_table = TableView("largest_safe_cycle")
        self.errors = TableView("error_study")
        self.decisions = TableView("decision_changes")
        self.decisions_note = QLabel()
        self.decisions_note.setWordWrap(True)
        decisions_box = column(self.decisions_note, self.decisions, stretch=self.decisions)
        self.safe_note = QLabel()
        self.safe_note.setWordWrap(True)
        safe_box = column(self.safe_note, self.safe_table, stretch=self.safe_table)
        self.tabs = QTabWidget()
        self.tabs.addTab(safe_box, "Largest safe cycle length")
        self.tabs.addTab(self.errors, "Errors (table behind the plot)")
        self.tabs.addTab(decisions_box, "Decision changes")

        split = two_panes(column(self.panel, self.overlap, stretch=self.panel), self.tabs)
        self.empty = QLabel("This run did not include the cycle-length error study (tick it in the run settings).")
        self.empty.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.empty.setVisible(False)
        layout = QVBoxLayout(self)
        layout.addLayout(top)
        layout.addWidget(self.reference)
        layout.addLayout(pick)
        layout.addWidget(self.empty)
        layout.addWidget(split, 1)
        self._body = split

        self.outcome.currentIndexChanged.connect(self._on_selection_changed)
        self.strategy.currentIndexChanged.connect(self._on_selection_changed)
        self.tolerance.valueChanged.connect(self._on_tolerance_changed)
        self.kind.currentIndexChanged.connect(self._on_tolerance_changed)

    # ------------------------------------------------------------------ public API
    def show_results(self, results: RunResults) -> None:
        study = results.study
        self._study = study
        self._currency = results.scenario.model.valuation.currency
        self.empty.setVisible(study is None)
        self._body.setVisible(study is not None)
        for w in (self.outcome, self.strategy, self.tolerance, self.kind):
            w.setEnabled(study is not None)
        if study is None:
            self.reference.setText("")
            self.largest = None
            return
        outcomes = list(dict.fromkeys(study.table["outcome"]))
        strategies = list(dict.fromkeys(study.table["strategy"]))
        for combo, names, labels in ((self.outcome, outcomes, [outcome_label(o) for o in outcomes]),
                                     (self.strategy, strategies, strategies)):
            current = combo.currentData()
            combo.blockSignals(True)
            combo.clear()
            for name, label in zip(names, labels):
                combo.addItem(label, name)
            if current in names:
                combo.setCurrentIndex(names.index(current))
            combo.blockSignals(False)
        self._clear_tolerance_message()
        for w in (self.tolerance, self.kind):
            w.blockSignals(True)
        tol_kind = study.largest_cycle["tolerance_kind"].iloc[0] if len(study.largest_cycle) else "relative"
        self.kind.setCurrentText(RELATIVE if tol_kind == "relative" else ABSOLUTE)
        self.tolerance.setValue(float(results.settings["tolerance"]))
        for w in (self.tolerance, self.kind):
            w.blockSignals(False)
        notes = " ".join(n[:1].upper() + n[1:] + ("" if n.endswith(".") else ".") for n in study.notes)
        self.reference.setText(f"Reference: {study.reference_kind}. The plot shows absolute errors, "
                               "|cycle-based − reference|, in the outcome's unit; colour: conversion, "
                               "line style and marker: within-cycle correction." + (f" {notes}" if notes else ""))
        self._show_decisions(study)
        self._recompute_safe()
        self._draw()

    def set_tolerance(self, value: float, relative: bool) -> None:
        """Set the tolerance as the user would (updates the safe-cycle table)."""
        self.kind.blockSignals(True)
        self.kind.setCurrentText(RELATIVE if relative else ABSOLUTE)
        self.kind.blockSignals(False)
        self.tolerance.setValue(value)
        self._on_tolerance_changed()

    def relative(self) -> bool:
        return self.kind.currentText() == RELATIVE

    # ------------------------------------------------------------------ slots
    @Slot()
    def _on_selection_changed(self, *_: object) -> None:
        if self._study is not None:
            self._show_safe_grid()
            self._draw()

    @Slot(str, str)
    def _on_tolerance_rejected(self, text: str, why: str) -> None:
        """Typed text that is not a tolerance: say so beside the box (the previous value stays)."""
        self.tolerance_message.setText(f"Tolerance “{text}” not used: {why}; "
                                       f"kept {self.tolerance.value():g}.")
        self.tolerance_message.show()

    @Slot()
    def _clear_tolerance_message(self) -> None:
        self.tolerance_message.hide()
        self.tolerance_message.setText("")

    @Slot()
    def _on_tolerance_changed(self, *_: object) -> None:
        self._clear_tolerance_message()
        if self._study is not None:
            self._recompute_safe()
            self._draw()

    # ------------------------------------------------------------------ drawing
    def _recompute_safe(self) -> None:
        self.largest = largest_safe_cycle(self._study.table, self.tolerance.value(), self.relative())
        self._show_safe_grid()
        self.safe_cycles_changed.emit()

    def _show_safe_grid(self) -> None:
        outcome, strategy = self.outcome.currentData(), self.strategy.currentData()
        self.safe_table.set_frame(safe_cycle_grid(self.largest, outcome, strategy))
        self.safe_table.name = f"largest_safe_cycle_{outcome}_{strategy}".replace(" ", "_")
        tol = self.tolerance.value()
        within = f"{tol:.4g} of the reference ({tol * 100:.4g}%)" if self.relative() else \
            f"{tol:.4g} {outcome_unit(outcome, self._currency)}"
        self.safe_note.setText(f"Largest cycle length that keeps {outcome_label(outcome)} for “{strategy}” within "
                               f"{within}, together with every shorter cycle length studied. Rows: conversion; "
                               f"columns: within-cycle correction.")

    def _show_decisions(self, study: StudyResult) -> None:
        changes = decision_changes(study.decisions)
        self.decisions.set_frame(changes)
        total = int(len(study.decisions))
        self.decisions.setVisible(total > 0)
        if total == 0:
            self.decisions_note.setText("One strategy only: no decision to compare.")
        elif len(changes) == 0:
            self.decisions_note.setText(f"None of the {total} cycle-based combinations changes the decision "
                                        "reached with the reference.")
        else:
            wtp = float(study.decisions["willingness_to_pay"].iloc[0])
            self.decisions_note.setText(
                f"{len(changes)} of {total} cycle-based combinations reach a different decision from the reference "
                f"(net monetary benefit of the other sign, or ICER on the other side of {wtp:,.0f} "
                f"{self._currency} per QALY).")
        self.tabs.setTabText(2, f"Decision changes ({len(changes)})")

    def _draw(self) -> None:
        study = self._study
        outcome, strategy = self.outcome.currentData(), self.strategy.currentData()
        curves = abs_error_curves(study.table, outcome, strategy)
        entries = []
        for key, item in self._curves.items():
            h, e = curves.get(key, (np.empty(0), np.empty(0)))
            if not (self.show_methods[key[0]].isChecked() and self.show_corrections[key[1]].isChecked()):
                h, e = np.empty(0), np.empty(0)
            item.setData(h, e)
            item.setVisible(h.size > 0)
            if h.size:
                p = study_order(study.orders, outcome, strategy, key)  # error ~ h^p: how it converges
                entries.append((item, f"{key[0]}, {key[1]}" + (f" (order {p:.2g})" if math.isfinite(p) else "")))
        self.highlight(self.hovered if self.hovered in self.shown_curves() else None)
        unit = outcome_unit(outcome, self._currency)
        tol_abs = tolerance_in_units(study.table, outcome, strategy, self.tolerance.value(), self.relative())
        if math.isfinite(tol_abs) and tol_abs > 0:
            self._tol_line.setPos(math.log10(tol_abs))
            self._tol_line.setVisible(True)
            entries.append((self._tol_sample, f"tolerance ({tol_abs:.3g} {unit})"))
        else:
            self._tol_line.setVisible(False)
        noise = reference_noise(study.table, outcome, strategy)
        self._noise_line.setVisible(noise > 0)
        if noise > 0:
            self._noise_line.setPos(math.log10(noise))
            entries.append((self._noise_sample, f"reference's noise (2 × MCSE = {noise:.3g} {unit})"))
        self.panel.set_legend(entries)
        same = coinciding(curves)
        self.overlap.setText("Lines on top of each other (same values): " + "; ".join(same) + "." if same else "")
        self.overlap.setVisible(bool(same))
        hs = sorted(set(study.table["cycle_length"]))
        self.panel.plot.getAxis("bottom").setTicks([[(math.log10(h), cycle_label(h)) for h in hs]])
        self.panel.plot.setLabel("left", f"absolute error |cycle-based − reference| ({unit})")
        self.panel.set_title(f"{outcome_label(outcome)} — {strategy}: error against cycle length")
        self.panel.save_bar.name = f"error_{outcome}_{strategy}".replace(" ", "_")
        self.errors.set_frame(errors_table(study.table, outcome, strategy))
        self.errors.name = f"error_study_{outcome}_{strategy}".replace(" ", "_")
        self.panel.plot.enableAutoRange()

    # ------------------------------------------------------------------ picking and hovering
    def shown_curves(self) -> list[tuple[str, str]]:
        """(conversion, correction) of the curves drawn now."""
        return [k for k, item in self._curves.items() if item.isVisible()]

    def highlight(self, key: tuple[str, str] | None) -> None:
        """Draw curve ``key`` wider and name it (None: no highlight)."""
        self.hovered = key
        for k, item in self._curves.items():
            item.setPen(palette.method_pen(k[0], 4.5 if k == key else 2.0, k[1]))
            item.setZValue(5 if k == key else 0)
        self.hover_label.setText(f"{key[0]}, {key[1]}" if key else "")

    @Slot(object)
    def _on_mouse_moved(self, scene_pos: object) -> None:
        """Highlight the curve under the pointer (within a few pixels), if any."""
        hit = None
        for key, item in self._curves.items():
            if item.isVisible() and item.curve.mouseShape().contains(item.curve.mapFromScene(scene_pos)):
                hit = key
                break
        if hit != self.hovered:
            self.highlight(hit)
