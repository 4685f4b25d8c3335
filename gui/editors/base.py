"""Common frame of the editor panels: a problem banner, bound fields, rebuild on change."""

from __future__ import annotations

from typing import Sequence

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QLabel, QVBoxLayout, QWidget

from gui.document import FieldError, KeyPath, ScenarioDocument
from gui.editors.fields import HINT_COLOUR, INVALID_COLOUR, FieldSet

__all__ = ["EditorPanel"]


class EditorPanel(QWidget):
    """One section of the scenario.

    Subclasses set ``title`` and ``sections`` (the top-level keys they edit), build their widgets in
    :meth:`_build` and update them in :meth:`_refresh`; problems in their sections are listed in the
    banner at the top and marked on the widgets bound to the keys concerned.
    """

    title = ""
    sections: tuple[str, ...] = ()
    fill = False  # True: the body takes all the height (text editors)

    def __init__(self, document: ScenarioDocument, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.document = document
        self.fields = FieldSet(document)
        self._errors: list[FieldError] = []
        outer = QVBoxLayout(self)
        self.banner = QLabel()
        self.banner.setObjectName("problems")
        self.banner.setWordWrap(True)
        self.banner.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        self.banner.setStyleSheet(f"QLabel {{ border: 1px solid {INVALID_COLOUR}; padding: 4px; }}")
        self.banner.hide()
        outer.addWidget(self.banner)
        self.body = QWidget()
        outer.addWidget(self.body, 1 if self.fill else 0)
        if not self.fill:
            outer.addStretch(1)
        self._build(self.body)
        document.changed.connect(self._on_document_changed)
        document.validated.connect(self._on_validated)
        self._on_document_changed()
        self._on_validated(document.scenario, document.errors)

    # ------------------------------------------------------------------ for subclasses
    def _build(self, body: QWidget) -> None:
        raise NotImplementedError

    def _refresh(self) -> None:
        """Show the document's current values (default: refill the bound fields)."""
        for fs in self.field_sets():
            fs.refresh()

    def _show_validation(self, scenario: object, errors: Sequence[FieldError]) -> None:
        """Extra display after validation (conversion notes, list markers)."""

    def field_sets(self) -> list[FieldSet]:
        return [self.fields]

    # ------------------------------------------------------------------ slots
    def _on_document_changed(self) -> None:
        readable = self.document.data is not None
        self.body.setEnabled(readable)
        if readable:
            self._refresh()

    def _on_validated(self, scenario: object, errors: list) -> None:
        self._errors = [e for e in errors if e.key and e.key[0] in self.sections]
        self.banner.setText("\n".join(e.text for e in self._errors))
        self.banner.setVisible(bool(self._errors))
        hint = bool(self._errors) and all(e.incomplete for e in self._errors)
        self.banner.setStyleSheet(f"QLabel {{ border: 1px solid {HINT_COLOUR if hint else INVALID_COLOUR}; "
                                  f"padding: 4px; }}")
        for fs in self.field_sets():
            fs.apply_errors(self._errors)
        self._show_validation(scenario, self._errors)

    # ------------------------------------------------------------------ navigation
    @property
    def errors(self) -> list[FieldError]:
        return list(self._errors)

    def focus_key(self, key: KeyPath) -> bool:
        """Bring the widget for ``key`` into view and focus (subclasses select list items first)."""
        key = tuple(key)
        for n in range(len(key), 0, -1):
            for fs in self.field_sets():
                w = fs.widget_at(key[:n])
                if w is not None:
                    w.setFocus(Qt.FocusReason.OtherFocusReason)
                    return True
        return False
