"""Edit widgets bound to key paths of the scenario document, and how invalid input is marked.

A :class:`FieldSet` creates the widgets, fills them from the document (:meth:`FieldSet.refresh`),
writes the user's input back as undoable edits (a line edit after a short pause in typing, or when
it loses focus), and marks the widgets the loader complained about with a red border (blue for a
model not finished yet) and every problem of the field, in the user's words, as tooltip.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any, Callable, Iterable, Sequence

from PySide6.QtCore import Qt, QTimer
from PySide6.QtWidgets import QCheckBox, QComboBox, QLineEdit, QWidget

from gui.document import FieldError, KeyPath, ScenarioDocument, format_key
from gui.palette import OKABE_ITO
from gui.uncertainty.button import DistributionButton

__all__ = ["FieldSet", "Binding", "mark_invalid", "parse_typed", "INVALID_COLOUR", "HINT_COLOUR", "TYPING_PAUSE_MS"]

INVALID_COLOUR = OKABE_ITO["vermillion"]
HINT_COLOUR = OKABE_ITO["blue"]
#: A line edit's text is applied (and validated) this long after the last key typed.
TYPING_PAUSE_MS = 400
_INT = re.compile(r"^[+-]?\d+$")


def parse_typed(text: str) -> Any:
    """What the user typed as a TOML value: an int or float when it reads as one, else the text
    itself (kept, so that the loader reports it), ``None`` for an empty field."""
    text = text.strip()
    if not text:
        return None
    if _INT.match(text):
        return int(text)
    if text.lower() in ("true", "false"):
        return text.lower() == "true"
    try:
        return float(text)
    except ValueError:
        return text


def parse_list(text: str) -> list[Any] | None:
    """Comma-separated values (numbers where they read as numbers)."""
    parts = [p for p in (x.strip() for x in text.split(",")) if p]
    return [parse_typed(p) for p in parts] or None


def mark_invalid(widget: QWidget, messages: Sequence[str], hint: bool = False) -> None:
    """Red border (blue for a ``hint``: not finished yet) and the messages as tooltip; no messages
    restores the widget's help text."""
    if messages:
        widget.setProperty("invalid", True)
        widget.setAttribute(Qt.WidgetAttribute.WA_StyledBackground, True)
        selector = widget.metaObject().className()  # the widget's own class: children keep their look
        widget.setStyleSheet(f"{selector} {{ border: 2px solid {HINT_COLOUR if hint else INVALID_COLOUR}; }}")
        widget.setToolTip("\n".join(messages))
    elif widget.property("invalid"):
        widget.setProperty("invalid", False)
        widget.setStyleSheet("")
        widget.setToolTip(widget.property("help") or "")


def is_marked(widget: QWidget) -> bool:
    return bool(widget.property("invalid"))


@dataclass
class Binding:
    """A widget bound to a key path; ``commit`` overrides how a new value is written."""

    key: KeyPath
    widget: QWidget
    kind: str
    commit: Callable[[Any], None] | None = None
    default: Any = None
    alive: bool = True
    choices: list[str] = field(default_factory=list)


class FieldSet:
    """The bound widgets of one editor panel."""

    def __init__(self, document: ScenarioDocument) -> None:
        self.document = document
        self.bindings: list[Binding] = []
        self.groups: list[tuple[KeyPath, QWidget]] = []
        self.distribution_buttons: list[DistributionButton] = []

    # ------------------------------------------------------------------ widgets
    def line(self, key: KeyPath, kind: str = "value", help: str = "", placeholder: str = "",
             commit: Callable[[Any], None] | None = None) -> QLineEdit:
        """A line edit for a number or text (``kind`` "value", "text", "list", or "item": one number of
        a list, which an emptied field keeps in place as an empty text for the loader to report)."""
        w = QLineEdit()
        w.setObjectName(format_key(key))
        w.setPlaceholderText(placeholder)
        self._help(w, help)
        b = Binding(tuple(key), w, kind, commit)
        self.bindings.append(b)
        w.editingFinished.connect(lambda b=b: self._line_finished(b))
        if commit is None:  # not for renames: a half-typed name must not rename the references
            timer = QTimer(w)
            timer.setSingleShot(True)
            timer.setInterval(TYPING_PAUSE_MS)
            timer.timeout.connect(lambda b=b: self._line_finished(b))
            w.textEdited.connect(timer.start)
            w.editingFinished.connect(timer.stop)
        if kind in ("value", "item") and commit is None:  # a model parameter gets its "±" distribution button
            button = DistributionButton.attach(self.document, w, tuple(key))
            if button is not None:
                self.distribution_buttons.append(button)
        self._fill(b)
        return w

    def combo(self, key: KeyPath, choices: Iterable[str | tuple[str, str]], default: str | None = None,
              help: str = "", commit: Callable[[Any], None] | None = None) -> QComboBox:
        """A combo box of ``choices`` (values, or ``(value, label)`` pairs); ``default`` is what the
        loader assumes when the key is missing."""
        w = QComboBox()
        w.setObjectName(format_key(key))
        w.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
        w.setMinimumContentsLength(10)  # long labels must not widen the panel
        self._help(w, help)
        b = Binding(tuple(key), w, "choice", commit, default)
        for c in choices:
            value, label = (c, c) if isinstance(c, str) else c
            w.addItem(label, value)
            b.choices.append(value)
        self.bindings.append(b)
        w.activated.connect(lambda _i, b=b: self._combo_activated(b))
        self._fill(b)
        return w

    def check(self, key: KeyPath, text: str, help: str = "") -> QCheckBox:
        """A check box for a true/false key (unchecked removes the key: false is the default)."""
        w = QCheckBox(text)
        w.setObjectName(format_key(key))
        self._help(w, help)
        b = Binding(tuple(key), w, "bool")
        self.bindings.append(b)
        w.clicked.connect(lambda checked, b=b: self._write(b, True if checked else None))
        self._fill(b)
        return w

    def group(self, key: KeyPath, widget: QWidget) -> QWidget:
        """A widget marked for problems reported exactly at ``key`` (e.g. a whole hazard)."""
        self.groups.append((tuple(key), widget))
        return widget

    @staticmethod
    def _help(w: QWidget, text: str) -> None:
        w.setProperty("help", text)
        w.setToolTip(text)

    # ------------------------------------------------------------------ model -> widgets
    def refresh(self) -> None:
        for b in self.bindings:
            self._fill(b)

    def _fill(self, b: Binding) -> None:
        w = b.widget
        w.blockSignals(True)
        try:
            if isinstance(w, QLineEdit):
                text = self.document.display(b.key)
                if w.hasFocus() and w.text() != text and self._typed_value(b, w.text()) == self.document.get(b.key):
                    pass  # being typed and applied already ("1." stays "1." rather than becoming "1.0")
                elif w.text() != text:
                    w.setText(text)
                    w.setCursorPosition(0)
            elif isinstance(w, QComboBox):
                value = self.document.get(b.key, b.default)
                shown = "" if value is None else str(value)
                idx = w.findData(shown)
                if idx < 0:  # a value the list does not offer: keep it visible (the loader marks it)
                    w.addItem(f"{shown} (not a valid choice)" if shown else "", shown)
                    idx = w.count() - 1
                w.setCurrentIndex(idx)
            elif isinstance(w, QCheckBox):
                w.setChecked(self.document.get(b.key) is True)
        finally:
            w.blockSignals(False)

    # ------------------------------------------------------------------ widgets -> model
    @staticmethod
    def _typed_value(b: Binding, text: str) -> Any:
        if b.kind == "text":
            return text if text.strip() else None
        if b.kind == "list":
            return parse_list(text)
        if b.kind == "item":
            value = parse_typed(text)
            return "" if value is None else value
        return parse_typed(text)

    def _line_finished(self, b: Binding) -> None:
        text = b.widget.text()
        if not b.alive or text == self.document.display(b.key):
            return
        value = self._typed_value(b, text)
        if b.commit is None and value == self.document.get(b.key) and type(value) is type(self.document.get(b.key)):
            return  # the same value spelled otherwise ("1." for 1.0): nothing to change
        self._write(b, value)

    def _combo_activated(self, b: Binding) -> None:
        value = b.widget.currentData()
        if b.alive and value != self.document.get(b.key, b.default):
            self._write(b, value)

    def _write(self, b: Binding, value: Any) -> None:
        if not b.alive:
            return
        if b.commit is not None:
            b.commit(value)
        else:
            self.document.set_value(b.key, value)

    # ------------------------------------------------------------------ problems
    def apply_errors(self, errors: Sequence[FieldError]) -> list[QWidget]:
        """Mark widgets whose key has a problem; returns the marked widgets."""
        found: dict[int, tuple[QWidget, list[str], list[bool]]] = {}
        for key, w in [(b.key, b.widget) for b in self.bindings] + self.groups:
            entry = found.setdefault(id(w), (w, [], []))
            for e in errors:
                if e.key == key and e.text not in entry[1]:
                    entry[1].append(e.text)
                    entry[2].append(e.incomplete)
        for w, msgs, hints in found.values():
            mark_invalid(w, msgs, hint=bool(hints) and all(hints))
        return [w for w, msgs, _ in found.values() if msgs]

    def widget_at(self, key: KeyPath) -> QWidget | None:
        """The widget bound (or grouped) exactly at ``key``."""
        key = tuple(key)
        for b in self.bindings:
            if b.key == key:
                return b.widget
        return next((w for k, w in self.groups if k == key), None)

    def clear(self) -> None:
        """Forget all bindings (before their widgets are deleted): late signals write nothing."""
        for b in self.bindings:
            b.alive = False
        self.bindings.clear()
        self.groups.clear()
        self.distribution_buttons.clear()
