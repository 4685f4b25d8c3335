"""Strategies: hazard ratios on transitions and the costs a strategy adds (per year in a state, or
once at a transition). The first strategy is the comparator of the incremental results."""

from __future__ import annotations

from PySide6.QtWidgets import QFormLayout, QGridLayout, QGroupBox, QLabel, QVBoxLayout, QWidget

from gui.editors.listing import ListDetailPanel
from sim.model import BACKGROUND

__all__ = ["StrategiesEditor"]


class StrategiesEditor(ListDetailPanel):
    """List of strategies; the selected one's hazard ratios and added costs."""

    title = "Strategies"
    sections = ("strategies",)
    array = "strategies"

    def _names(self, array: str) -> list[str]:
        return self.document.names(array)

    def _item_text(self, index: int, item: dict) -> str:
        text = str(item.get("name", "?"))
        return f"{text} (comparator)" if index == 0 else text

    def _new_item(self) -> dict:
        return {"name": self.unique_name("strategy")}

    def _detail_signature(self, index: int) -> tuple:
        repl = self.document.table((self.array, index, "replacements"))
        return (tuple(self._names("transitions")), tuple(self._names("states")),
                self.document.has(("background",)), tuple(repl))

    def _build_detail(self, index: int) -> QWidget:
        f = self.detail_fields
        base = (self.array, index)
        box = QWidget()
        outer = QVBoxLayout(box)
        outer.setContentsMargins(0, 0, 0, 0)
        form = QFormLayout()
        form.addRow("Name", f.line((*base, "name"), kind="text", help="Unique strategy name."))
        form.addRow("Description", f.line((*base, "description"), kind="text", help="Optional."))
        outer.addLayout(form)
        transitions = self._names("transitions")
        hr_box = QGroupBox("Hazard ratios (empty = 1, no change)")
        grid = QGridLayout(hr_box)
        for row, t in enumerate(transitions):
            grid.addWidget(QLabel(t), row, 0)
            grid.addWidget(f.line((*base, "hazard_ratios", t), help=f"Multiplies the hazard of {t!r} (>= 0)."), row, 1)
        f.group((*base, "hazard_ratios"), hr_box)
        outer.addWidget(hr_box)
        repl = self.document.table((*base, "replacements"))
        if repl:
            note = QLabel("This strategy also replaces the hazard of " + ", ".join(repr(k) for k in repl)
                          + " (edit it in the Scenario file section).")
            note.setWordWrap(True)
            outer.addWidget(note)
        cost_box = QGroupBox("Costs this strategy adds")
        grid = QGridLayout(cost_box)
        grid.addWidget(QLabel("<i>per year in state</i>"), 0, 0, 1, 2)
        row = 1
        for s in self._names("states"):
            grid.addWidget(QLabel(s), row, 0)
            grid.addWidget(f.line((*base, "state_costs", s), help=f"Added cost per year while in {s!r}."), row, 1)
            row += 1
        grid.addWidget(QLabel("<i>once, at the transition</i>"), row, 0, 1, 2)
        row += 1
        exits = transitions + ([BACKGROUND] if self.document.has(("background",)) else [])
        for t in exits:
            grid.addWidget(QLabel(t), row, 0)
            grid.addWidget(f.line((*base, "transition_costs", t), help=f"Added one-off cost at {t!r}."), row, 1)
            row += 1
        f.group((*base, "state_costs"), cost_box)
        f.group((*base, "transition_costs"), cost_box)
        outer.addWidget(cost_box)
        return box
