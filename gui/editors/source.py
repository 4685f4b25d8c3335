"""The scenario file as text, for anything the forms do not cover (and for broken TOML).

Typing is applied after a short pause (or when the editor loses focus) as one undoable edit; the
line of the current problem is highlighted.
"""

from __future__ import annotations

from PySide6.QtCore import QTimer
from PySide6.QtGui import QColor, QFocusEvent, QFontDatabase, QTextCursor, QTextFormat
from PySide6.QtWidgets import QLabel, QPlainTextEdit, QTextEdit, QVBoxLayout, QWidget

from gui.editors.base import EditorPanel
from gui.palette import OKABE_ITO

__all__ = ["SourceEditor"]


class _TextEdit(QPlainTextEdit):
    """Plain text edit that reports losing focus."""

    def __init__(self, on_focus_out) -> None:
        super().__init__()
        self._on_focus_out = on_focus_out

    def focusOutEvent(self, event: QFocusEvent) -> None:  # noqa: N802 - Qt API
        self._on_focus_out()
        super().focusOutEvent(event)


class SourceEditor(EditorPanel):
    """The whole TOML text."""

    title = "Scenario file"
    sections = ()  # shows every problem: see _on_validated
    fill = True

    def _build(self, body: QWidget) -> None:
        layout = QVBoxLayout(body)
        layout.setContentsMargins(0, 0, 0, 0)
        hint = QLabel("The scenario file as saved, comments included. Edits here are applied after a short "
                      "pause and can be undone.")
        hint.setWordWrap(True)
        layout.addWidget(hint)
        self.editor = _TextEdit(self.commit)
        self.editor.setObjectName("source")
        self.editor.setFont(QFontDatabase.systemFont(QFontDatabase.SystemFont.FixedFont))
        self.editor.setLineWrapMode(QPlainTextEdit.LineWrapMode.NoWrap)
        self.editor.setMinimumHeight(420)
        layout.addWidget(self.editor, 1)
        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(800)
        self._timer.timeout.connect(self.commit)
        self.editor.textChanged.connect(self._on_typed)
        self._loading = False

    def _on_document_changed(self) -> None:
        self.body.setEnabled(True)  # the text is always editable, valid TOML or not
        self._refresh()

    def _refresh(self) -> None:
        text = self.document.text
        if self.editor.toPlainText() == text:
            return
        cursor = self.editor.textCursor().position()
        scroll = self.editor.verticalScrollBar().value()
        self._loading = True
        self.editor.setPlainText(text)
        self._loading = False
        c = self.editor.textCursor()
        c.setPosition(min(cursor, len(text)))
        self.editor.setTextCursor(c)
        self.editor.verticalScrollBar().setValue(scroll)

    def _on_typed(self) -> None:
        if not self._loading:
            self._timer.start()

    def commit(self) -> None:
        """Apply the typed text now."""
        self._timer.stop()
        text = self.editor.toPlainText()
        if text != self.document.text:
            self.document.set_text(text, "Edit scenario text", merge=True)

    def _on_validated(self, scenario: object, errors: list) -> None:
        self._errors = list(errors)
        self.banner.setText("\n".join(e.message for e in errors))
        self.banner.setVisible(bool(errors))
        selections = []
        for e in errors:
            if e.line is None:
                continue
            sel = QTextEdit.ExtraSelection()
            colour = QColor(OKABE_ITO["vermillion"])
            colour.setAlpha(60)
            sel.format.setBackground(colour)
            sel.format.setProperty(QTextFormat.Property.FullWidthSelection, True)
            block = self.editor.document().findBlockByNumber(e.line - 1)
            sel.cursor = QTextCursor(block)
            selections.append(sel)
        self.editor.setExtraSelections(selections)

    def focus_key(self, key: tuple) -> bool:
        self.editor.setFocus()
        return True

    def go_to_line(self, line: int) -> None:
        """Put the cursor at the start of ``line`` (1-based)."""
        block = self.editor.document().findBlockByNumber(max(line - 1, 0))
        self.editor.setTextCursor(QTextCursor(block))
        self.editor.centerCursor()
        self.editor.setFocus()
