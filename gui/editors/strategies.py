"""Strategies: hazard ratios on transitions, or a different hazard for a transition (a replacement),
and the costs a strategy adds (per year in a state, or once at a transition). The first strategy is
the comparator of the incremental results."""

from __future__ import annotations

from typing import Any

from PySide6.QtWidgets import QGridLayout, QGroupBox, QLabel, QPushButton, QVBoxLayout, QWidget

from gui.document import set_value
from gui.editors.hazard_form import ALL_HAZARD_KEYS, HazardForm
from gui.editors.listing import ListDetailPanel
from sim.model.multistate import BACKGROUND

__all__ = ["StrategiesEditor"]


class StrategiesEditor(ListDetailPanel):
    """List of strategies; the selected one's hazard ratios or replacement hazards, and added costs."""

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
        base = (self.array, index, "replacements")
        repl = self.document.table(base)
        return (tuple(self._names("transitions")), tuple(self._names("states")),
                self.document.has(("background",)),
                tuple((t, HazardForm.signature(self.document, (*base, t))) for t in repl))

    # ------------------------------------------------------------------ replacements
    def replace_hazard(self, index: int, transition: str) -> bool:
        """Give strategy ``index`` its own hazard for ``transition``, starting from the model's hazard
        of that transition (its hazard ratio, if any, is dropped: a strategy gives one or the other)."""
        source = next((t for t in self.document.tables("transitions") if t.get("name") == transition), {})
        hazard = {k: v for k, v in source.items() if k in ALL_HAZARD_KEYS} or {"family": "exponential", "rate": 0.1}
        base = (self.array, index)

        def change(doc: Any) -> None:
            set_value(doc, (*base, "hazard_ratios", transition), None)
            for k, v in hazard.items():
                set_value(doc, (*base, "replacements", transition, k), v)
        return self.document.edit(f"Replace the hazard of {transition!r} in strategy {index}", change)

    def restore_hazard(self, index: int, transition: str) -> bool:
        """Drop strategy ``index``'s replacement for ``transition`` (the model's hazard applies again)."""
        return self.document.remove((self.array, index, "replacements", transition),
                                    f"Use the model's hazard of {transition!r} in strategy {index}")

    def _build_detail(self, index: int) -> QWidget:
        f = self.detail_fields
        base = (self.array, index)
        box, outer, form = self._detail_box()
        form.addRow("Name", f.line((*base, "name"), kind="text", help="Unique strategy name."))
        form.addRow("Description", f.line((*base, "description"), kind="text", help="Optional."))
        transitions = self._names("transitions")
        repl = self.document.table((*base, "replacements"))
        hr_box = QGroupBox("Hazard ratios (empty = 1, no change)")
        grid = QGridLayout(hr_box)
        self.replace_buttons: dict[str, QPushButton] = {}
        for row, t in enumerate(transitions):
            grid.addWidget(QLabel(t), row, 0)
            if t in repl:
                grid.addWidget(QLabel("<i>replaced: see below</i>"), row, 1)
                continue
            grid.addWidget(f.line((*base, "hazard_ratios", t), help=f"Multiplies the hazard of {t!r} (>= 0)."), row, 1)
            button = QPushButton("Replace…")
            button.setToolTip(f"Give this strategy a different hazard for {t!r} (starts as a copy of the "
                              f"model's; replaces the hazard ratio).")
            button.clicked.connect(lambda _=False, t=t: self.replace_hazard(index, t))
            grid.addWidget(button, row, 2)
            self.replace_buttons[t] = button
        f.group((*base, "hazard_ratios"), hr_box)
        outer.addWidget(hr_box)
        self.replacement_forms: dict[str, HazardForm] = {}
        self.restore_buttons: dict[str, QPushButton] = {}
        for t in repl:
            key = (*base, "replacements", t)
            group = QGroupBox(f"Hazard of {t!r} under this strategy")
            inner = QVBoxLayout(group)
            form = HazardForm(self.document, f, key)
            inner.addWidget(form)
            back = QPushButton("Use the model's hazard")
            back.setToolTip(f"Remove this strategy's own hazard for {t!r}.")
            back.clicked.connect(lambda _=False, t=t: self.restore_hazard(index, t))
            inner.addWidget(back)
            f.group(key, group)
            outer.addWidget(group)
            self.replacement_forms[t] = form
            self.restore_buttons[t] = back
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

    def _rebuild_detail(self) -> None:
        self.replacement_forms = {}
        super()._rebuild_detail()

    def _refresh_detail(self) -> None:
        for form in getattr(self, "replacement_forms", {}).values():
            form.refresh_conversion()

    def _show_validation(self, scenario: Any, errors: list) -> None:
        super()._show_validation(scenario, errors)
        strategies = scenario.model.strategies if scenario is not None else ()
        current = strategies[self._index] if 0 <= self._index < len(strategies) else None
        for t, form in getattr(self, "replacement_forms", {}).items():
            form.show_resolved(current.replacements.get(t) if current is not None else None)
