"""Valuation: utilities and costs per state, one-off transition costs, discount rates and the
willingness to pay per QALY."""

from __future__ import annotations

from typing import Any

from PySide6.QtWidgets import QFormLayout, QGridLayout, QGroupBox, QLabel, QVBoxLayout, QWidget

from gui.editors.base import EditorPanel
from gui.editors.fields import FieldSet
from sim.model.multistate import BACKGROUND

__all__ = ["ValuationEditor"]


class ValuationEditor(EditorPanel):
    """The ``[valuation]`` table."""

    title = "Valuation"
    sections = ("valuation",)

    def _build(self, body: QWidget) -> None:
        self.rows = FieldSet(self.document)
        self._sig: Any = None
        layout = QVBoxLayout(body)
        self.states_box = QGroupBox("Per state (per year spent in it)")
        self.states_host = QVBoxLayout(self.states_box)
        layout.addWidget(self.states_box)
        self.moves_box = QGroupBox("Per transition (once, at the move)")
        self.moves_host = QVBoxLayout(self.moves_box)
        layout.addWidget(self.moves_box)
        general = QGroupBox("Discounting and decision")
        form = QFormLayout(general)
        v = ("valuation",)
        form.addRow("Discount rate, costs (per year)", self.fields.line(
            (*v, "discount_costs"), help="Annual rate in [0, 1), e.g. 0.035; applied continuously."))
        form.addRow("Discount rate, effects (per year)", self.fields.line(
            (*v, "discount_effects"), help="Annual rate in [0, 1) for life years and QALYs."))
        form.addRow("Willingness to pay per QALY", self.fields.line(
            (*v, "willingness_to_pay"), help="For net monetary benefit and the decision."))
        form.addRow("Currency", self.fields.line((*v, "currency"), kind="text", help="Label for reports."))
        layout.addWidget(general)
        self.fields.group((*v, "utilities"), self.states_box)
        self.fields.group((*v, "state_costs"), self.states_box)
        self.fields.group((*v, "transition_costs"), self.moves_box)
        self._widgets: list[QWidget] = []

    def field_sets(self) -> list[FieldSet]:
        return [self.fields, self.rows]

    def _names(self, array: str) -> list[str]:
        return self.document.names(array)

    def _refresh(self) -> None:
        exits = self._names("transitions") + ([BACKGROUND] if self.document.has(("background",)) else [])
        sig = (tuple(self._names("states")), tuple(exits))
        if sig != self._sig:
            self._rebuild(list(sig[0]), exits)
            self._sig = sig
        super()._refresh()

    def _rebuild(self, states: list[str], exits: list[str]) -> None:
        self.rows.clear()
        for w in self._widgets:
            w.hide()
            w.deleteLater()
        v = ("valuation",)
        top = QWidget()
        grid = QGridLayout(top)
        grid.setContentsMargins(0, 0, 0, 0)
        grid.addWidget(QLabel("<b>State</b>"), 0, 0)
        grid.addWidget(QLabel("<b>Utility</b>"), 0, 1)
        grid.addWidget(QLabel("<b>Cost per year</b>"), 0, 2)
        for i, s in enumerate(states, start=1):
            grid.addWidget(QLabel(s), i, 0)
            grid.addWidget(self.rows.line((*v, "utilities", s), help=f"QALY weight per year in {s!r} (at most 1; "
                                          "0 for death)."), i, 1)
            grid.addWidget(self.rows.line((*v, "state_costs", s), help=f"Cost per year in {s!r}."), i, 2)
        bottom = QWidget()
        grid2 = QGridLayout(bottom)
        grid2.setContentsMargins(0, 0, 0, 0)
        grid2.addWidget(QLabel("<b>Transition</b>"), 0, 0)
        grid2.addWidget(QLabel("<b>One-off cost</b>"), 0, 1)
        for i, t in enumerate(exits, start=1):
            grid2.addWidget(QLabel(t), i, 0)
            grid2.addWidget(self.rows.line((*v, "transition_costs", t), help=f"Cost each time {t!r} happens."), i, 1)
        self.states_host.addWidget(top)
        self.moves_host.addWidget(bottom)
        top.show()
        bottom.show()
        self._widgets = [top, bottom]
        self.rows.apply_errors(self._errors)
