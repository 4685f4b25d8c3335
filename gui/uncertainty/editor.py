"""The compact editor of one parameter's distribution (opened from the "±" button of its field).

The user picks a family and how it is given (its own parameters, or a mean and standard error fitted
by the method of moments); the draft is written into a copy of the scenario text and read by the
scenario reader after each pause in typing (:func:`gui.uncertainty.entry.check_draft`), which
marks wrong values at their keys, in the user's words, and gives the distribution whose density,
mean and 95% interval are previewed (and its fitted parameters shown). "Apply" writes the entry into
the scenario as one undoable edit; "Remove distribution" takes it out (also undoable).
"""

from __future__ import annotations

from typing import Any

from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtWidgets import (QComboBox, QDialog, QDialogButtonBox, QFormLayout, QLabel, QLineEdit, QPushButton,
                               QVBoxLayout, QWidget)

from gui.document import FieldError, KeyPath, ScenarioDocument
from gui.editors.fields import INVALID_COLOUR, TYPING_PAUSE_MS, mark_invalid, parse_typed
from gui.toml_edit import to_plain
from sim.io.scenario.uncertain import SHARE_TABLES

from .density import DensityPreview, number_text
from .groups import GroupEditor
from .entry import (FAMILIES, FAMILY_LABELS, FORM_LABELS, KEY_LABELS, OPTIONAL_KEYS, EntryCheck, check_draft,
                    draft_text, find_entry, forms_of, parameter_name, removed_text)

__all__ = ["DistributionEditor"]

_CHOOSE = "choose a family…"


class DistributionEditor(QDialog):
    """Edits the ``[[uncertainty]]`` entry of the parameter at ``key``.

    Signals
    -------
    checked()
        The draft was read again (the preview and the marks are up to date).
    """

    checked = Signal()

    def __init__(self, document: ScenarioDocument, key: KeyPath, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.document = document
        self.key = tuple(key)
        self.name = parameter_name(self.key)
        self.check: EntryCheck = EntryCheck()
        self.index: int | None = None
        self.setWindowTitle(f"Distribution of {self.name}")
        self.setObjectName("distribution_editor")

        point = document.display(self.key)
        head = QLabel(f"<b>{self.name}</b> — " + (f"point value {point}" if point else
                                                  "no point value in the file: the distribution's mean is used"))
        parent = document.table(self.key[:-2] if isinstance(self.key[-1], int) else self.key[:-1])  # a list's table
        if "family" in parent:  # a hazard parameter: drawn in its table's unit, as the file writes it
            head.setText(head.text() + f" (values in the hazard table's unit: {parent.get('unit', 'years')})")
        head.setWordWrap(True)
        self.family = QComboBox()
        self.family.setObjectName("family")
        self.family.addItem(_CHOOSE, "")
        for f in FAMILIES:
            self.family.addItem(FAMILY_LABELS[f], f)
        self.form = QComboBox()
        self.form.setObjectName("form")
        top = QFormLayout()
        top.addRow("Family", self.family)
        top.addRow("Given by", self.form)
        self.fields_host = QWidget()
        self.fields_form = QFormLayout(self.fields_host)
        self.fields_form.setContentsMargins(0, 0, 0, 0)
        self.inputs: dict[str, QLineEdit] = {}
        self.fitted = QLabel()
        self.fitted.setObjectName("fitted")
        self.fitted.setWordWrap(True)
        self.message = QLabel()
        self.message.setObjectName("message")
        self.message.setWordWrap(True)
        self.message.setStyleSheet(f"color: {INVALID_COLOUR};")
        self.preview = DensityPreview()
        self.group_note = QLabel()
        self.group_note.setWordWrap(True)

        self.buttons = QDialogButtonBox()
        self.apply_button = self.buttons.addButton("Apply", QDialogButtonBox.ButtonRole.AcceptRole)
        self.apply_button.setObjectName("apply")
        self.buttons.addButton(QDialogButtonBox.StandardButton.Cancel)
        self.remove_button = QPushButton("Remove distribution")
        self.remove_button.setObjectName("remove")
        self.buttons.addButton(self.remove_button, QDialogButtonBox.ButtonRole.DestructiveRole)
        self.buttons.accepted.connect(self.apply)
        self.buttons.rejected.connect(self.reject)
        self.remove_button.clicked.connect(self.remove)
        self.group_button = QPushButton("Part of a correlated group…")
        self.group_button.setObjectName("to_group")
        self.group_button.setToolTip("Draw this parameter together with others: a correlated group (multivariate "
                                     "normal) or, for a share, the shares of its table (Dirichlet)")
        self.buttons.addButton(self.group_button, QDialogButtonBox.ButtonRole.ActionRole)
        self.group_button.clicked.connect(self.open_group)
        self.group_editor = None

        layout = QVBoxLayout(self)
        layout.addWidget(head)
        layout.addWidget(self.group_note)
        layout.addLayout(top)
        layout.addWidget(self.fields_host)
        layout.addWidget(self.fitted)
        layout.addWidget(self.preview, 1)
        layout.addWidget(self.message)
        layout.addWidget(self.buttons)

        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(TYPING_PAUSE_MS)
        self._timer.timeout.connect(self.recheck)
        self.family.activated.connect(self._on_family)
        self.form.activated.connect(self._on_form)
        self._load()

    # ------------------------------------------------------------------ filling
    def _load(self) -> None:
        """Start from the parameter's entry in the file, if it has one."""
        index, group = find_entry(self.document.data, self.key)
        entry = to_plain(self.document.get(("uncertainty", index))) if index is not None else None
        self.group_note.setVisible(group)
        if group:
            self.group_note.setText(f"{self.name} is drawn together with other parameters in uncertainty[{index}] "
                                    f"(a {entry.get('distribution')} distribution): edit the group with "
                                    "“Edit the group…”.")
            self.group_button.setText("Edit the group…")
            for w in (self.family, self.form, self.apply_button, self.remove_button):
                w.setEnabled(False)
            self.preview.show_distribution(None, "")
            return
        self.remove_button.setEnabled(index is not None)
        if any(self.key[:len(t)] == t for t in SHARE_TABLES):
            self.group_button.setText("Drawn with the other shares…")
        values = entry if isinstance(entry, dict) else {}
        family = values.get("distribution")
        if family in FAMILIES:
            self.family.setCurrentIndex(self.family.findData(family))
            forms = forms_of(family)
            form = next((f for f in forms if all(k in values for k in f)), forms[0])
            self._fill_forms(family, form)
            self._build_inputs(family, form, {k: v for k, v in values.items() if k not in ("parameter", "description")})
            self.recheck()
        else:
            self._fill_forms("", None)
            self._build_inputs("", None, {})
            self.preview.show_distribution(None, "Choose a family to see its density.")
            self.apply_button.setEnabled(False)

    def _fill_forms(self, family: str, chosen: tuple[str, ...] | None) -> None:
        self.form.clear()
        for f in forms_of(family):
            self.form.addItem(FORM_LABELS[f], f)
        if chosen is not None and self.form.findData(chosen) >= 0:
            self.form.setCurrentIndex(self.form.findData(chosen))
        self.form.setEnabled(self.form.count() > 1)

    def _build_inputs(self, family: str, form: tuple[str, ...] | None, values: dict[str, Any]) -> None:
        while self.fields_form.rowCount():
            self.fields_form.removeRow(0)
        self.inputs = {}
        keys = list(form or ()) + [k for k in OPTIONAL_KEYS.get(family, ()) if k not in (form or ())]
        for k in keys:
            w = QLineEdit()
            w.setObjectName(k)
            value = values.get(k)
            w.setText("" if value is None else str(value))
            optional = k not in (form or ())
            if optional:
                w.setPlaceholderText("none (not truncated)")
            w.textEdited.connect(self._timer.start)
            w.editingFinished.connect(self._finished_typing)
            self.inputs[k] = w
            self.fields_form.addRow(KEY_LABELS.get(k, k) + (" (optional)" if optional else ""), w)

    def values(self) -> dict[str, Any]:
        """The draft: ``distribution`` and the typed keys (empty fields left out)."""
        family = self.family.currentData()
        out: dict[str, Any] = {"distribution": family}
        for k, w in self.inputs.items():
            v = parse_typed(w.text())
            if v is not None:
                out[k] = v
        return out

    # ------------------------------------------------------------------ slots
    def _on_family(self, _index: int) -> None:
        family = self.family.currentData()
        if not family:
            return
        old = {k: parse_typed(w.text()) for k, w in self.inputs.items()}
        if not any(v is not None for v in old.values()):
            point = self.document.get(self.key)  # a start the user edits: the point value as the mean
            old = {"mean": point} if isinstance(point, (int, float)) and not isinstance(point, bool) else {}
        forms = forms_of(family)
        form = next((f for f in forms if "se" in f), forms[0])  # mean and SE where the family takes it
        self._fill_forms(family, form)
        self._build_inputs(family, form, old)
        self.recheck()
        first_empty = next((w for w in self.inputs.values() if not w.text()), None)
        (first_empty or next(iter(self.inputs.values()))).setFocus()

    def _on_form(self, _index: int) -> None:
        old = {k: parse_typed(w.text()) for k, w in self.inputs.items()}
        self._build_inputs(self.family.currentData(), self.form.currentData(), old)
        self.recheck()

    def _finished_typing(self) -> None:
        self._timer.stop()
        self.recheck()

    def recheck(self) -> None:
        """Read the draft with the scenario reader; mark problems; preview the distribution."""
        self._timer.stop()
        if not self.family.currentData():
            return
        text, self.index = draft_text(self.document.text, self.key, self.values())
        self.check = check_draft(text, self.index, self.key, self.document.path)
        by_key: dict[str, list[str]] = {}
        general: list[str] = []
        for p in self.check.problems:
            words = FieldError.from_problem(p, lambda path: self.document.get((*path, "name"))).text
            inner = tuple(p.path[2:])
            if inner and inner[0] in self.inputs:
                by_key.setdefault(inner[0], []).append(words)
            else:
                general.append(words)
        for k, w in self.inputs.items():
            mark_invalid(w, by_key.get(k, []))
        shown = [*general, *(m for ms in by_key.values() for m in ms)]
        if not shown and self.check.other_problems:
            shown.append(f"The rest of the scenario has {self.check.other_problems} problem"
                         f"{'s' if self.check.other_problems > 1 else ''}: fix them to see the preview.")
        self.message.setText("\n".join(shown))
        self.message.setVisible(bool(shown))
        d = self.check.distribution
        self.preview.show_distribution(d, "" if d is not None else "No preview while the values have problems.")
        spec = self.check.spec
        if spec is not None and spec.fitted_from:
            given = ", ".join(f"{k} {number_text(v)}" for k, v in spec.fitted_from.items())
            fitted = ", ".join(f"{k} = {number_text(float(v))}" for k, v in spec.distribution.parameters().items())
            self.fitted.setText(f"Fitted by the method of moments from {given}: {fitted}")
        elif spec is not None:
            self.fitted.setText("")
        self.fitted.setVisible(bool(self.fitted.text()) and spec is not None)
        self.apply_button.setEnabled(not self.check.problems)
        self.checked.emit()

    def apply(self) -> None:
        """Write the entry into the scenario (one undoable edit) and close."""
        self.recheck()
        if self.check.problems or not self.family.currentData():
            return
        text, _ = draft_text(self.document.text, self.key, self.values())
        self.document.set_text(text, f"Distribution of {self.name}")
        self.accept()

    def remove(self) -> None:
        """Remove the parameter's entry (one undoable edit) and close."""
        text = removed_text(self.document.text, self.key)
        if text != self.document.text:
            self.document.set_text(text, f"Remove the distribution of {self.name}")
        self.accept()

    def open_group(self) -> None:
        """Open the group editor on the parameter's group, or on a new group starting with it (for a
        share: with every share of its table, which a Dirichlet draws together); this editor closes."""
        index, group = find_entry(self.document.data, self.key)
        family, start = "multivariate_normal", [self.name]
        if not group and any(self.key[:len(t)] == t for t in SHARE_TABLES):
            table = self.document.table(self.key[:-1])
            family = "dirichlet"
            start = [parameter_name((*self.key[:-1], k)) for k, v in table.items()
                     if isinstance(v, (int, float)) and not isinstance(v, bool)]
        self.group_editor = GroupEditor(self.document, index if group else None, family, start, self.parentWidget())
        self.group_editor.open()
        self.reject()

    def keyPressEvent(self, event) -> None:  # noqa: N802 - Qt API
        """Enter in a field applies only when the draft is valid (checked first)."""
        if event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self.apply()
            return
        super().keyPressEvent(event)
