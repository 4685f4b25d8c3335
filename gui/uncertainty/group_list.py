"""The list of the scenario's groups of parameters drawn together (on the "Probabilistic analysis"
page), with buttons to start a correlated group or a group of shares, and to edit or remove the group
chosen (:class:`gui.uncertainty.groups.GroupEditor`). Follows the document after every change."""

from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtGui import QColor
from PySide6.QtWidgets import QGroupBox, QHBoxLayout, QListWidget, QListWidgetItem, QPushButton, QVBoxLayout, QWidget

from gui.document import ScenarioDocument
from gui.editors.fields import INVALID_COLOUR

from .group_entry import group_summary, groups, removed_group_text
from .groups import GroupEditor

__all__ = ["GroupList"]


class GroupList(QGroupBox):
    """The scenario's groups of parameters drawn together, with New, Edit and Remove."""

    def __init__(self, document: ScenarioDocument, parent: QWidget | None = None) -> None:
        super().__init__("Parameters drawn together", parent)
        self.document = document
        self.editor: GroupEditor | None = None
        self.list = QListWidget()
        self.list.setObjectName("group_list")
        self.list.setMaximumHeight(130)
        self.list.setWordWrap(True)
        self.list.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.list.itemDoubleClicked.connect(lambda _item: self.edit_selected())
        self.list.currentRowChanged.connect(lambda _r: self._update_enabled())
        self.new_correlated = QPushButton("New correlated group…")
        self.new_correlated.setObjectName("new_correlated_group")
        self.new_correlated.setToolTip("Parameters estimated together (e.g. a fitted hazard's parameters) drawn "
                                       "from a multivariate normal on their estimation scales")
        self.new_correlated.clicked.connect(lambda: self.open_editor(None, "multivariate_normal"))
        self.new_shares = QPushButton("New shares group…")
        self.new_shares.setObjectName("new_shares_group")
        self.new_shares.setToolTip("Shares that sum to 1 (the sex mix, the initial states) drawn from a Dirichlet")
        self.new_shares.clicked.connect(lambda: self.open_editor(None, "dirichlet"))
        self.edit_button = QPushButton("Edit…")
        self.edit_button.setObjectName("edit_group")
        self.edit_button.clicked.connect(self.edit_selected)
        self.remove_button = QPushButton("Remove")
        self.remove_button.setObjectName("remove_group")
        self.remove_button.clicked.connect(self.remove_selected)
        top = QHBoxLayout()
        top.addWidget(self.new_correlated)
        top.addWidget(self.new_shares)
        bottom = QHBoxLayout()
        bottom.addWidget(self.edit_button)
        bottom.addWidget(self.remove_button)
        bottom.addStretch(1)
        layout = QVBoxLayout(self)
        layout.addWidget(self.list)
        layout.addLayout(top)
        layout.addLayout(bottom)
        document.validated.connect(self.refresh)
        self.refresh()

    def refresh(self, *_args: object) -> None:
        """List the groups of the text (after every change), those with problems in vermillion."""
        row = self.list.currentRow()
        self.list.clear()
        for i, entry in groups(self.document.data):
            item = QListWidgetItem(f"uncertainty[{i}] — {group_summary(entry)}".replace(": ", ":\n    ", 1))
            item.setData(Qt.ItemDataRole.UserRole, i)
            problems = [e.text for e in self.document.errors if e.concerns(("uncertainty", i))]
            item.setToolTip("\n".join(problems) or group_summary(entry))
            if problems:
                item.setForeground(QColor(INVALID_COLOUR))
            self.list.addItem(item)
        self.list.setCurrentRow(min(row, self.list.count() - 1) if row >= 0 else -1)
        self.new_correlated.setEnabled(self.document.data is not None)
        self.new_shares.setEnabled(self.document.data is not None)
        self._update_enabled()

    def _update_enabled(self) -> None:
        chosen = self.list.currentItem() is not None
        self.edit_button.setEnabled(chosen)
        self.remove_button.setEnabled(chosen)

    def selected_index(self) -> int | None:
        item = self.list.currentItem()
        return None if item is None else int(item.data(Qt.ItemDataRole.UserRole))

    def open_editor(self, index: int | None, family: str = "multivariate_normal",
                    start: list[str] | tuple[str, ...] = ()) -> GroupEditor:
        """Open the group editor (window-modal, does not block)."""
        if self.editor is not None:
            self.editor.close()
            self.editor.deleteLater()
        self.editor = GroupEditor(self.document, index, family, start, self.window())
        self.editor.open()
        return self.editor

    def edit_selected(self) -> None:
        index = self.selected_index()
        if index is not None:
            self.open_editor(index)

    def remove_selected(self) -> None:
        index = self.selected_index()
        if index is not None:
            self.document.set_text(removed_group_text(self.document.text, index),
                                   f"Remove the group uncertainty[{index}]")
