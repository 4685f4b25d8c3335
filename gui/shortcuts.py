"""Window shortcuts that keep working while a field has the keyboard focus.

A line edit claims Ctrl+Z / Ctrl+Shift+Z (and, with some input methods, other Ctrl keys) for itself
through Qt's ``ShortcutOverride`` event, so the window's Undo, Redo, Open, Save and New would do
nothing, or edit the field, while the cursor is in it. :class:`FieldShortcuts` watches those events
for the window's line edits: for a key sequence of one of the window's actions it first commits
what was typed in the field (so that Save saves it and Undo undoes it), then lets the action have
the key.
"""

from __future__ import annotations

from PySide6.QtCore import QEvent, QObject
from PySide6.QtGui import QAction, QKeyEvent, QKeySequence
from PySide6.QtWidgets import QApplication, QLineEdit, QWidget

__all__ = ["FieldShortcuts"]


class FieldShortcuts(QObject):
    """Give ``actions``' shortcuts priority over line edits inside ``window``.

    Installed on the application (the object is a child of ``window``, so the filter goes away
    with it)."""

    def __init__(self, window: QWidget, actions: list[QAction]) -> None:
        super().__init__(window)
        self._window = window
        self._actions = actions
        app = QApplication.instance()
        if app is not None:
            app.installEventFilter(self)

    def _matches(self, event: QKeyEvent) -> bool:
        pressed = QKeySequence(event.keyCombination())
        return any(pressed.matches(s) == QKeySequence.SequenceMatch.ExactMatch
                   for a in self._actions for s in a.shortcuts())

    def eventFilter(self, obj: QObject, event: QEvent) -> bool:  # noqa: N802 - Qt API
        if event.type() != QEvent.Type.ShortcutOverride or not isinstance(obj, QLineEdit):
            return False
        if not self._window.isAncestorOf(obj) or not self._matches(event):
            return False
        obj.editingFinished.emit()  # commit what was typed (bound fields write only a change)
        event.ignore()  # not the field's: the shortcut goes to the window's action
        return True
