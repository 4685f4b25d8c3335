"""Transitions: from / to / clock and the cause-specific hazard of each move between states."""

from __future__ import annotations

from typing import Any

from PySide6.QtWidgets import QGroupBox, QVBoxLayout, QWidget

from gui.editors.hazard_form import HazardForm
from gui.editors.listing import ListDetailPanel

__all__ = ["TransitionsEditor", "CLOCKS"]

CLOCKS = [("age", "attained age"), ("entry", "time since entry"), ("state", "time in the current state")]


class TransitionsEditor(ListDetailPanel):
    """List of transitions; the selected one's ends, clock and hazard."""

    title = "Transitions"
    sections = ("transitions",)
    array = "transitions"

    def _build(self, body: QWidget) -> None:
        self.form: HazardForm | None = None
        super()._build(body)

    def state_names(self) -> list[str]:
        return self.document.names("states")

    def _item_text(self, index: int, item: dict) -> str:
        return f"{item.get('name', '?')}: {item.get('from', '?')} \u2192 {item.get('to', '?')}"

    def _new_item(self) -> dict:
        states = self.document.tables("states")
        living = [s.get("name") for s in states if not s.get("absorbing")]
        dead = [s.get("name") for s in states if s.get("absorbing")]
        src = living[0] if living else ""
        dst = dead[0] if dead else (living[1] if len(living) > 1 else src)
        return {"name": self.unique_name("transition"), "from": src, "to": dst, "clock": "entry",
                "family": "exponential", "rate": 0.1}

    def _detail_signature(self, index: int) -> tuple:
        return (tuple(self.state_names()), HazardForm.signature(self.document, (self.array, index)))

    def _build_detail(self, index: int) -> QWidget:
        f = self.detail_fields
        base = (self.array, index)
        box, outer, form = self._detail_box()
        form.addRow("Name", f.line((*base, "name"), kind="text", help="Unique name of the transition.",
                                   commit=lambda v: self._rename(index, v)))
        states = self.state_names()
        form.addRow("From", f.combo((*base, "from"), states, help="State the patient leaves."))
        form.addRow("To", f.combo((*base, "to"), states, help="State the patient enters."))
        form.addRow("Clock", f.combo((*base, "clock"), CLOCKS, default="entry",
                                     help="Time scale of the hazard: attained age, time since entry into "
                                          "the model, or time since entering the current state."))
        form.addRow("Description", f.line((*base, "description"), kind="text", help="Optional note."))
        group = QGroupBox("Hazard")
        inner = QVBoxLayout(group)
        self.form = HazardForm(self.document, f, base)
        inner.addWidget(self.form)
        outer.addWidget(group)
        return box

    def _rebuild_detail(self) -> None:
        self.form = None
        super()._rebuild_detail()

    def _rename(self, index: int, value: Any) -> None:
        self.document.rename_transition(index, "" if value is None else str(value))

    def _refresh_detail(self) -> None:
        if self.form is not None and self._index >= 0:
            self.form.refresh_conversion()

    def _show_validation(self, scenario: Any, errors: list) -> None:
        super()._show_validation(scenario, errors)
        if self.form is None:
            return
        hazard = None
        if scenario is not None and 0 <= self._index < len(scenario.model.transitions):
            hazard = scenario.model.transitions[self._index].hazard
        self.form.show_resolved(hazard)

    def selected_name(self) -> str | None:
        items = self.items()
        return items[self._index].get("name") if 0 <= self._index < len(items) else None
