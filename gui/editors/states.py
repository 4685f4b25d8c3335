"""The model's name and description, and its states (add, remove, rename, absorbing)."""

from __future__ import annotations

from typing import Any

from PySide6.QtWidgets import QFormLayout, QGridLayout, QGroupBox, QLabel, QPushButton, QVBoxLayout, QWidget

from gui.editors.base import EditorPanel
from gui.editors.fields import FieldSet

__all__ = ["StatesEditor"]


class StatesEditor(EditorPanel):
    """Name, description and the list of states. Renaming a state renames its references."""

    title = "Model and states"
    sections = ("format_version", "name", "description", "states")

    def _build(self, body: QWidget) -> None:
        self.rows = FieldSet(self.document)
        self._count = -1
        layout = QVBoxLayout(body)
        model = QGroupBox("Model")
        form = QFormLayout(model)
        form.addRow("Name", self.fields.line(("name",), kind="text", help="Label used in reports."))
        form.addRow("Description", self.fields.line(("description",), kind="text", help="Optional."))
        layout.addWidget(model)
        self.states_box = QGroupBox("States")
        box = QVBoxLayout(self.states_box)
        self.grid_host = QVBoxLayout()
        box.addLayout(self.grid_host)
        self.grid_widget: QWidget | None = None
        self.add_button = QPushButton("Add state")
        self.add_button.clicked.connect(self._on_add)
        box.addWidget(self.add_button)
        hint = QLabel("An absorbing state (e.g. death) has no exits. Renaming a state also renames it in "
                      "transitions, background mortality, population, utilities and costs.")
        hint.setWordWrap(True)
        box.addWidget(hint)
        layout.addWidget(self.states_box)

    def field_sets(self) -> list[FieldSet]:
        return [self.fields, self.rows]

    def states(self) -> list[dict]:
        return self.document.tables("states")

    def _refresh(self) -> None:
        n = len(self.states())
        if n != self._count:
            self._rebuild_rows(n)
        super()._refresh()

    def _rebuild_rows(self, n: int) -> None:
        self.rows.clear()
        if self.grid_widget is not None:
            self.grid_widget.hide()
            self.grid_widget.deleteLater()
        self.grid_widget = QWidget()
        grid = QGridLayout(self.grid_widget)
        grid.setContentsMargins(0, 0, 0, 0)
        grid.addWidget(QLabel("Name"), 0, 0)
        grid.addWidget(QLabel("Absorbing"), 0, 1)
        self.remove_buttons: list[QPushButton] = []
        for i in range(n):
            name = self.rows.line(("states", i, "name"), kind="text", help="Unique state name.",
                                  commit=lambda v, i=i: self._rename(i, v))
            self.rows.group(("states", i), name)
            grid.addWidget(name, i + 1, 0)
            grid.addWidget(self.rows.check(("states", i, "absorbing"), "", help="No exits (e.g. death)."), i + 1, 1)
            remove = QPushButton("Remove")
            remove.setObjectName(f"remove_state_{i}")
            remove.clicked.connect(lambda _c=False, i=i: self.document.remove_table("states", i))
            grid.addWidget(remove, i + 1, 2)
            self.remove_buttons.append(remove)
        self.grid_host.addWidget(self.grid_widget)
        self.grid_widget.show()
        self._count = n
        self.rows.apply_errors(self._errors)

    def _rename(self, index: int, value: Any) -> None:
        self.document.rename_state(index, "" if value is None else str(value))

    def _on_add(self) -> None:
        names = {s.get("name") for s in self.states()}
        n = len(names) + 1
        while f"state {n}" in names:
            n += 1
        self.document.append_table("states", {"name": f"state {n}"}, "Add state")
