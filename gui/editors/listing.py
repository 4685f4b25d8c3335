"""A list of ``[[array]]`` tables (transitions, strategies) with Add / Remove and a detail form for
the selected one, rebuilt only when its layout changes so that typing is never interrupted."""

from __future__ import annotations

from typing import Any

from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QBrush, QColor
from PySide6.QtWidgets import QFormLayout, QHBoxLayout, QListWidget, QPushButton, QVBoxLayout, QWidget

from gui.document import FieldError, KeyPath
from gui.editors.base import EditorPanel
from gui.editors.fields import INVALID_COLOUR, FieldSet

__all__ = ["ListDetailPanel"]


class ListDetailPanel(EditorPanel):
    """Subclasses set ``array``, implement :meth:`_item_text`, :meth:`_new_item`,
    :meth:`_build_detail` and optionally extend :meth:`_detail_signature`."""

    array = ""
    selected = Signal(int)

    def _build(self, body: QWidget) -> None:
        self.detail_fields = FieldSet(self.document)
        self._signature: Any = None
        self._index = -1
        column = QVBoxLayout(body)
        column.setContentsMargins(0, 0, 0, 0)
        top = QHBoxLayout()
        self.list = QListWidget()
        self.list.setObjectName(f"{self.array}_list")
        self.list.setMaximumHeight(130)
        self.list.currentRowChanged.connect(self._on_row_changed)
        top.addWidget(self.list, 1)
        buttons = QVBoxLayout()
        self.add_button = QPushButton("Add")
        self.add_button.clicked.connect(self._on_add)
        self.remove_button = QPushButton("Remove")
        self.remove_button.clicked.connect(self._on_remove)
        buttons.addWidget(self.add_button)
        buttons.addWidget(self.remove_button)
        buttons.addStretch(1)
        top.addLayout(buttons)
        column.addLayout(top)
        self.detail_host = QVBoxLayout()
        column.addLayout(self.detail_host, 1)
        self.detail: QWidget | None = None

    def field_sets(self) -> list[FieldSet]:
        return [self.fields, self.detail_fields]

    # ------------------------------------------------------------------ for subclasses
    def _item_text(self, index: int, item: dict) -> str:
        raise NotImplementedError

    def _new_item(self) -> dict:
        raise NotImplementedError

    def _build_detail(self, index: int) -> QWidget:
        raise NotImplementedError

    def _detail_signature(self, index: int) -> tuple:
        return ()

    @staticmethod
    def _detail_box() -> tuple[QWidget, QVBoxLayout, QFormLayout]:
        """An empty detail: the widget, its column, and a form already placed at the top of it."""
        box = QWidget()
        outer = QVBoxLayout(box)
        outer.setContentsMargins(0, 0, 0, 0)
        form = QFormLayout()
        outer.addLayout(form)
        return box, outer, form

    def _refresh_detail(self) -> None:
        """Update the detail beyond its bound fields (labels computed from the values)."""

    # ------------------------------------------------------------------ model -> view
    def items(self) -> list[dict]:
        return self.document.tables(self.array)

    def _refresh(self) -> None:
        items = self.items()
        self.list.blockSignals(True)
        if self.list.count() != len(items):
            self.list.clear()
            self.list.addItems([self._item_text(i, it) for i, it in enumerate(items)])
        else:
            for i, it in enumerate(items):
                self.list.item(i).setText(self._item_text(i, it))
        if items:
            self._index = min(max(self._index, 0), len(items) - 1)
        else:
            self._index = -1
        self.list.setCurrentRow(self._index)
        self.list.blockSignals(False)
        self.remove_button.setEnabled(self._index >= 0)
        sig = (self._index, len(items), self._detail_signature(self._index))
        if sig != self._signature:
            self._rebuild_detail()
            self._signature = sig
        else:
            self.detail_fields.refresh()
        self._refresh_detail()
        self.fields.refresh()

    def _rebuild_detail(self) -> None:
        self.detail_fields.clear()
        if self.detail is not None:
            self.detail.hide()
            self.detail.deleteLater()
        self.detail = self._build_detail(self._index) if self._index >= 0 else QWidget()
        self.detail_host.addWidget(self.detail)
        self.detail.show()  # now, not on the next event-loop turn
        self.detail_fields.apply_errors(self._errors)

    def _show_validation(self, scenario: object, errors: list[FieldError]) -> None:
        for i in range(self.list.count()):
            item = self.list.item(i)
            msgs = [e.text for e in errors if e.concerns((self.array, i))]
            item.setData(Qt.ItemDataRole.ForegroundRole, QBrush(QColor(INVALID_COLOUR)) if msgs else None)
            item.setToolTip("\n".join(msgs))

    # ------------------------------------------------------------------ selection
    @property
    def current_index(self) -> int:
        return self._index

    def select(self, index: int) -> None:
        if 0 <= index < self.list.count():
            self.list.setCurrentRow(index)

    def _on_row_changed(self, row: int) -> None:
        if row < 0 or row == self._index:
            return
        self._index = row
        self._refresh()
        self._on_validated(self.document.scenario, self.document.errors)
        self.selected.emit(row)

    def focus_key(self, key: KeyPath) -> bool:
        if len(key) > 1 and key[0] == self.array and isinstance(key[1], int):
            self.select(key[1])
        return super().focus_key(key)

    # ------------------------------------------------------------------ edits
    def _on_add(self) -> None:
        self._index = len(self.items())
        if not self.document.append_table(self.array, self._new_item()):
            self._index = len(self.items()) - 1
        self.selected.emit(self._index)

    def _on_remove(self) -> None:
        if self._index >= 0:
            self.document.remove_table(self.array, self._index)

    def unique_name(self, stem: str) -> str:
        names = {it.get("name") for it in self.items()}
        n = len(names) + 1
        while f"{stem} {n}" in names:
            n += 1
        return f"{stem} {n}"
