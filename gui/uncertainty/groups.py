"""Parameters drawn together, edited in the window: a correlated group (multivariate normal: the
parameters, each one's scale, the means and a covariance matrix or standard errors and a correlation
matrix, in small tables) or shares that sum to 1 (Dirichlet: the shares and their counts, or mean
shares and a sample size).

:class:`GroupEditor` is opened from the list of groups on the "Probabilistic analysis" page
(:class:`gui.uncertainty.group_list.GroupList`) or from a parameter's "±" distribution editor ("Part of a correlated group…").
As in that editor, the draft is written into a copy of the scenario text and read by the scenario
reader after each pause in typing (:func:`gui.uncertainty.group_entry.check_group`): its problems are
marked at the cell they concern with the reader's own words (a matrix that is not positive
semi-definite, shares that do not belong together, a name that is no parameter), and the validated
group gives each value's mean and 95% interval. "Apply" writes the entry as one undoable edit.
"""

from __future__ import annotations

from typing import Any

import shiboken6
from PySide6.QtCore import Qt, QTimer, Signal
from PySide6.QtWidgets import (QAbstractItemView, QComboBox, QDialog, QDialogButtonBox, QFormLayout, QHBoxLayout,
                               QHeaderView, QLabel, QLineEdit, QPushButton, QTableWidget, QToolButton, QVBoxLayout,
                               QWidget)

from gui.document import FieldError, ScenarioDocument
from gui.editors.fields import INVALID_COLOUR, TYPING_PAUSE_MS, mark_invalid, parse_typed
from gui.toml_edit import to_plain
from sim.io.scenario.uncertain import parse_key

from .density import number_text
from .group_entry import (GROUP_FAMILIES, GROUP_FORM_LABELS, GROUP_LABELS, SCALE_LABELS, GroupCheck,
                          candidate_parameters, check_group, group_forms, group_text, removed_group_text,
                          replaced_entries)

__all__ = ["GroupEditor", "find_data"]

_MATRICES = ("covariance", "correlation")


def find_data(combo: QComboBox, value: Any) -> int:
    """The index of the item whose data equals ``value`` (-1 if none): ``QComboBox.findData`` compares
    Python objects such as tuples by identity."""
    return next((i for i in range(combo.count()) if combo.itemData(i) == value), -1)


def _row(name: str = "", **values: str) -> dict[str, str]:
    return {"name": name, "scale": "identity", "mean": "", "se": "", "alpha": "", **values}


class GroupEditor(QDialog):
    """Edits ``[[uncertainty]]`` entry ``index`` (a group), or a new group of ``family`` starting
    with the parameters ``start``.

    Signals
    -------
    checked()
        The draft was read again (marks and previews are up to date).
    """

    checked = Signal()

    def __init__(self, document: ScenarioDocument, index: int | None = None, family: str = "multivariate_normal",
                 start: list[str] | tuple[str, ...] = (), parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.document = document
        self.index = index
        self.draft_index: int | None = None
        self.check = GroupCheck()
        self.cells: dict[tuple, QWidget] = {}
        self.built: tuple[str, tuple[str, ...]] = (family, ())
        self.results: list[QLabel] = []
        self.setObjectName("group_editor")
        self.setWindowTitle("Parameters drawn together" + (f" (uncertainty[{index}])" if index is not None else ""))
        self.candidates = candidate_parameters(document.data)

        self.head = QLabel()
        self.head.setWordWrap(True)
        self.family = QComboBox()
        self.family.setObjectName("group_family")
        for f in GROUP_FAMILIES:
            self.family.addItem(GROUP_LABELS[f], f)
        self.form = QComboBox()
        self.form.setObjectName("group_form")
        self.sample_size = QLineEdit()
        self.sample_size.setObjectName("sample_size")
        self.sample_size.textEdited.connect(self._typed)
        self.sample_size.editingFinished.connect(self._finished_typing)
        top = QFormLayout()
        top.addRow("Drawn as", self.family)
        top.addRow("Given by", self.form)
        top.addRow("Sample size", self.sample_size)
        self._top = top

        self.params = QTableWidget()
        self.params.setObjectName("group_parameters")
        self.params.setSelectionMode(QAbstractItemView.SelectionMode.NoSelection)
        self.params.verticalHeader().setSectionResizeMode(QHeaderView.ResizeMode.ResizeToContents)
        self.add_button = QPushButton("Add parameter")
        self.add_button.setObjectName("add_parameter")
        self.add_button.clicked.connect(self.add_row)
        self.matrix_label = QLabel()
        self.matrix_label.setWordWrap(True)
        self.matrix = QTableWidget()
        self.matrix.setObjectName("group_matrix")
        self.matrix.setSelectionMode(QAbstractItemView.SelectionMode.NoSelection)
        self.note = QLabel()
        self.note.setObjectName("group_note")
        self.note.setWordWrap(True)
        self.message = QLabel()
        self.message.setObjectName("message")
        self.message.setWordWrap(True)
        self.message.setStyleSheet(f"color: {INVALID_COLOUR};")
        self.message.hide()

        self.buttons = QDialogButtonBox()
        self.apply_button = self.buttons.addButton("Apply", QDialogButtonBox.ButtonRole.AcceptRole)
        self.apply_button.setObjectName("apply")
        self.buttons.addButton(QDialogButtonBox.StandardButton.Cancel)
        self.remove_button = QPushButton("Remove group")
        self.remove_button.setObjectName("remove")
        self.remove_button.setEnabled(index is not None)
        self.buttons.addButton(self.remove_button, QDialogButtonBox.ButtonRole.DestructiveRole)
        self.buttons.accepted.connect(self.apply)
        self.buttons.rejected.connect(self.reject)
        self.remove_button.clicked.connect(self.remove)

        layout = QVBoxLayout(self)
        layout.addWidget(self.head)
        layout.addLayout(top)
        layout.addWidget(self.params, 1)
        row = QHBoxLayout()
        row.addWidget(self.add_button)
        row.addStretch(1)
        layout.addLayout(row)
        layout.addWidget(self.matrix_label)
        layout.addWidget(self.matrix, 1)
        layout.addWidget(self.note)
        layout.addWidget(self.message)
        layout.addWidget(self.buttons)
        self.resize(920, 540)

        self._timer = QTimer(self)
        self._timer.setSingleShot(True)
        self._timer.setInterval(TYPING_PAUSE_MS)
        self._timer.timeout.connect(self.recheck)
        self.family.activated.connect(self._on_family)
        self.form.activated.connect(self._on_form)
        self._build(self._state_from_file(family, list(start)))
        self.recheck()

    # ------------------------------------------------------------------ state <-> widgets
    def _text(self, path: tuple) -> str:
        return self.document.display(("uncertainty", self.index, *path)) if self.index is not None else ""

    def _point(self, name: str) -> str:
        """The parameter's point value as the file writes it ("" when it has none)."""
        key = parse_key(name)
        return self.document.display(key) if key is not None else ""

    def _state_from_file(self, family: str, start: list[str]) -> dict[str, Any]:
        """The entry of the file (or a new group of ``start``) as the texts of the editor's cells."""
        entry = to_plain(self.document.get(("uncertainty", self.index))) if self.index is not None else None
        entry = entry if isinstance(entry, dict) else {}
        family = entry.get("distribution") if entry.get("distribution") in GROUP_FAMILIES else family
        forms = group_forms(family)
        form = next((f for f in forms if all(k in entry for k in f)), forms[0])
        names = entry.get("parameters") if isinstance(entry.get("parameters"), list) else start
        scales = entry.get("transform") if isinstance(entry.get("transform"), list) else []
        rows = []
        for j, name in enumerate(names):
            r = _row(str(name), scale=str(scales[j]) if j < len(scales) else "identity")
            for k in ("mean", "se", "alpha"):
                r[k] = self._text((k, j))
            if not entry and (family == "multivariate_normal" or form == ("mean", "sample_size")):
                r["mean"] = self._point(str(name))  # a start the user edits: the point value
            rows.append(r)
        n = len(rows)
        key = next((k for k in _MATRICES if k in form), None)
        matrix = [[self._text((key, i, j)) if key in entry else self._blank(key, i, j) for j in range(n)]
                  for i in range(n)] if key else []
        return {"family": family, "form": form, "rows": rows, "matrix": matrix,
                "sample_size": self._text(("sample_size",))}

    @staticmethod
    def _blank(key: str | None, i: int, j: int) -> str:
        """A new matrix cell: 0 off the diagonal, 1 on a correlation's diagonal, empty for a variance."""
        return "0" if i != j else ("1" if key == "correlation" else "")

    def _state(self) -> dict[str, Any]:
        """What the cells hold now (built for ``self.built``: the kind and form before a change)."""
        family, form = self.built
        rows = []
        for j in range(self.params.rowCount()):
            r = _row(self.cells[("parameters", j)].currentText().strip())
            if ("transform", j) in self.cells:
                r["scale"] = self.cells[("transform", j)].currentData()
            for k in ("mean", "se", "alpha"):
                if (k, j) in self.cells:
                    r[k] = self.cells[(k, j)].text()
            rows.append(r)
        key = self.matrix_key
        n = self.matrix.rowCount() if key else 0
        matrix = [[self.cells[(key, i, j)].text() for j in range(n)] for i in range(n)]
        return {"family": family, "form": form, "rows": rows, "matrix": matrix, "sample_size": self.sample_size.text()}

    @property
    def matrix_key(self) -> str | None:
        """``"covariance"`` or ``"correlation"`` for a multivariate normal, else None."""
        form = self.built[1]
        return next((k for k in _MATRICES if k in form), None)

    def _columns(self, family: str, form: tuple[str, ...]) -> list[tuple[str, str]]:
        if family == "multivariate_normal":
            cols = [("parameters", "Parameter"), ("transform", "Scale"), ("mean", "Mean (on its scale)")]
            if "se" in form:
                cols.append(("se", "SE (on its scale)"))
            return cols + [("result", "Value drawn: mean (95% interval)"), ("remove", "")]
        value = ("alpha", "Count (alpha)") if form == ("alpha",) else ("mean", "Mean share")
        return [("parameters", "Share"), value, ("result", "Share drawn: mean (95% interval)"), ("remove", "")]

    def _build(self, state: dict[str, Any]) -> None:
        """Make the cells for ``state`` (after a parameter was added or removed, or the kind changed)."""
        family, form = state["family"], tuple(state["form"])
        self.built = (family, form)
        self.family.setCurrentIndex(self.family.findData(family))
        self.form.clear()
        for f in group_forms(family):
            self.form.addItem(GROUP_FORM_LABELS[f], f)
        self.form.setCurrentIndex(find_data(self.form, form))
        self.cells, self.results = {}, []
        names = [r["name"] for r in state["rows"]]
        self.head.setText(("<b>A new group</b>" if self.index is None else f"<b>uncertainty[{self.index}]</b>") +
                          " — parameters drawn together. Choose them from the model's parameters (or type a name "
                          "as `hazardtrace check` lists it).")
        cols = self._columns(family, form)
        self.add_button.setText("Add parameter" if family == "multivariate_normal" else "Add share")
        self.params.clear()
        self.params.setColumnCount(len(cols))
        self.params.setRowCount(len(names))
        self.params.setHorizontalHeaderLabels([c[1] for c in cols])
        header = self.params.horizontalHeader()
        for c, (key, _) in enumerate(cols):
            mode = QHeaderView.ResizeMode.Stretch if key == "parameters" else QHeaderView.ResizeMode.ResizeToContents
            header.setSectionResizeMode(c, mode)
        for j, r in enumerate(state["rows"]):
            for c, (key, _) in enumerate(cols):
                self.params.setCellWidget(j, c, self._cell(key, j, r))
        self._top.setRowVisible(self.sample_size, form == ("mean", "sample_size"))
        self.sample_size.setText(state["sample_size"])
        self.cells[("sample_size",)] = self.sample_size
        key = next((k for k in _MATRICES if k in form), None)
        self.matrix.setVisible(key is not None)
        self.matrix_label.setVisible(key is not None)
        self.matrix.clear()
        n = len(names) if key else 0
        self.matrix.setRowCount(n)
        self.matrix.setColumnCount(n)
        labels = [str(j + 1) for j in range(n)]
        self.matrix.setHorizontalHeaderLabels(labels)
        self.matrix.setVerticalHeaderLabels(labels)
        self.matrix.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeMode.Stretch)
        if key:
            self.matrix_label.setText(f"<b>{key.capitalize()} matrix</b> of parameters 1–{n}, on their scales "
                                      "(symmetric: a value typed above the diagonal is copied below it)")
        for i in range(n):
            for j in range(n):
                text = state["matrix"][i][j] if i < len(state["matrix"]) and j < len(state["matrix"][i]) else \
                    self._blank(key, i, j)
                w = QLineEdit(text)
                w.setObjectName(f"{key}[{i}][{j}]")
                w.setFrame(False)
                w.textEdited.connect(lambda t, i=i, j=j: self._matrix_typed(i, j, t))
                w.editingFinished.connect(self._finished_typing)
                self.cells[(key, i, j)] = w
                self.matrix.setCellWidget(i, j, w)
        self.matrix.setMinimumHeight(min(40 + 30 * n, 220) if n else 0)

    def _cell(self, key: str, j: int, r: dict[str, str]) -> QWidget:
        if key == "parameters":
            w = QComboBox()
            w.setEditable(True)
            w.setInsertPolicy(QComboBox.InsertPolicy.NoInsert)
            w.addItems(self.candidates)
            w.setCurrentText(r["name"])
            w.setObjectName(f"parameters[{j}]")
            w.activated.connect(lambda _i, j=j: self._on_name(j))
            w.lineEdit().textEdited.connect(lambda text, j=j: self._name_typed(j, text))
        elif key == "transform":
            w = QComboBox()
            for t, label in SCALE_LABELS.items():
                w.addItem(label, t)
            if w.findData(r["scale"]) < 0:
                w.addItem(r["scale"], r["scale"])  # as written; the reader marks it
            w.setCurrentIndex(w.findData(r["scale"]))
            w.setObjectName(f"transform[{j}]")
            w.activated.connect(lambda _i: self.recheck())
        elif key == "result":
            w = QLabel()
            w.setMinimumWidth(200)
            w.setObjectName(f"result[{j}]")
            self.results.append(w)
            return w
        elif key == "remove":
            w = QToolButton()
            w.setText("✕")
            w.setToolTip("Take this parameter out of the group")
            w.setObjectName(f"remove[{j}]")
            w.clicked.connect(lambda _c=False, j=j: self.remove_row(j))
            return w
        else:
            w = QLineEdit(r[key])
            w.setObjectName(f"{key}[{j}]")
            w.setFrame(False)
            w.textEdited.connect(self._typed)
            w.editingFinished.connect(self._finished_typing)
        self.cells[(key, j)] = w
        return w

    def values(self) -> dict[str, Any]:
        """The draft entry: ``parameters``, ``distribution`` and the form's keys (an empty cell is
        written as an empty text, which the reader reports at its key)."""
        s = self._state()

        def num(text: str) -> Any:
            v = parse_typed(text)
            return "" if v is None else v
        rows = s["rows"]
        out: dict[str, Any] = {"parameters": [r["name"] for r in rows], "distribution": s["family"]}
        form = tuple(s["form"])
        for k in form:
            if k in ("mean", "se", "alpha"):
                out[k] = [num(r[k]) for r in rows]
            elif k in _MATRICES:
                out[k] = [[num(x) for x in row] for row in s["matrix"]]
            elif k == "sample_size":
                out[k] = num(s["sample_size"])
        if s["family"] == "multivariate_normal" and any(r["scale"] != "identity" for r in rows):
            out["transform"] = [r["scale"] for r in rows]
        return out

    # ------------------------------------------------------------------ structure
    def add_row(self) -> None:
        """A new parameter (its name chosen next); the matrix grows by a row and a column."""
        s = self._state()
        s["rows"].append(_row())
        key = self.matrix_key
        n = len(s["rows"])
        if key:
            s["matrix"] = [row + [self._blank(key, i, n - 1)] for i, row in enumerate(s["matrix"])]
            s["matrix"].append([self._blank(key, n - 1, j) for j in range(n)])
        self._build(s)
        self.recheck()
        self.cells[("parameters", n - 1)].setFocus()

    def remove_row(self, j: int) -> None:
        """Take parameter ``j`` out (with its matrix row and column)."""
        s = self._state()
        del s["rows"][j]
        s["matrix"] = [[x for c, x in enumerate(row) if c != j] for r, row in enumerate(s["matrix"]) if r != j]
        self._build(s)
        self.recheck()

    def _on_family(self, _index: int) -> None:
        s = self._state()
        family = self.family.currentData()
        form = group_forms(family)[0]
        n = len(s["rows"])
        rows = [_row(r["name"], mean=r["mean"] if family == "multivariate_normal" else "") for r in s["rows"]]
        key = next((k for k in _MATRICES if k in form), None)
        self._build({**s, "family": family, "form": form, "rows": rows,
                     "matrix": [[self._blank(key, i, j) for j in range(n)] for i in range(n)]})
        self.recheck()

    def _on_form(self, _index: int) -> None:
        s = self._state()
        form = self.form.currentData()
        key = next((k for k in _MATRICES if k in form), None)
        n = len(s["rows"])
        matrix = s["matrix"] if key and key in s["form"] else \
            [[self._blank(key, i, j) for j in range(n)] for i in range(n)]
        self._build({**s, "form": form, "matrix": matrix})
        self.recheck()

    def _name_typed(self, j: int, text: str) -> None:
        if text.strip() in self.candidates:  # a whole name: as if chosen from the list
            self._prefill(j)
        self._typed()

    def _on_name(self, j: int) -> None:
        """A parameter was chosen from the list."""
        self._prefill(j)
        self._finished_typing()

    def _prefill(self, j: int) -> None:
        """Start parameter ``j``'s mean at its point value (when the mean is empty and on the natural
        scale: the user edits it next)."""
        name = self.cells[("parameters", j)].currentText().strip()
        mean = self.cells.get(("mean", j))
        natural = self.cells.get(("transform", j)) is None or self.cells[("transform", j)].currentData() == "identity"
        if isinstance(mean, QLineEdit) and not mean.text() and natural:
            mean.setText(self._point(name))

    def _matrix_typed(self, i: int, j: int, text: str) -> None:
        if i != j:
            self.cells[(self.matrix_key, j, i)].setText(text)
        self._typed()

    def _typed(self, *_args: object) -> None:
        self._timer.start()

    def _finished_typing(self) -> None:
        self._timer.stop()
        self.recheck()

    # ------------------------------------------------------------------ checking
    def _widget_for(self, inner: tuple) -> QWidget | None:
        if inner in self.cells:
            return self.cells[inner]
        if inner and inner[0] in _MATRICES:
            return self.matrix
        if inner and inner[0] in ("parameters", "mean", "se", "alpha", "transform"):
            return self.params
        return None

    def recheck(self) -> None:
        """Read the draft with the scenario reader; mark its problems at their cells; show the values."""
        self._timer.stop()
        if not shiboken6.isValid(self.apply_button):  # a cell left while the dialog is being destroyed
            return
        values = self.values()
        text, self.draft_index = group_text(self.document.text, self.index, values)
        self.check = check_group(text, self.draft_index, self.document.path)
        marks: dict[int, tuple[QWidget, list[str]]] = {id(w): (w, []) for w in
                                                       [*self.cells.values(), self.params, self.matrix]}
        general: list[str] = []
        for p in self.check.problems:
            words = FieldError.from_problem(p, lambda path: self.document.get((*path, "name"))).text
            w = self._widget_for(tuple(p.path[2:]))
            (marks[id(w)][1] if w is not None and id(w) in marks else general).append(words)
        for w, msgs in marks.values():
            mark_invalid(w, msgs)
        shown = [*general, *(m for _, msgs in marks.values() for m in msgs)]
        if not shown and self.check.other_problems:
            shown.append(f"The rest of the scenario has {self.check.other_problems} problem"
                         f"{'s' if self.check.other_problems > 1 else ''}: fix them to see the values drawn.")
        self.message.setText("\n".join(dict.fromkeys(shown)))
        self.message.setVisible(bool(shown))
        spec = self.check.spec
        means, intervals = (spec.distribution.means(), spec.distribution.intervals(0.95)) if spec else ([], [])
        for j, label in enumerate(self.results):
            label.setText(f"{number_text(float(means[j]))} ({number_text(float(intervals[j][0]))} to "
                          f"{number_text(float(intervals[j][1]))})" if j < len(means) else "")
        replaced = replaced_entries(self.document.data, values["parameters"], self.index)
        self.note.setText("".join(f"{name} has its own distribution (uncertainty[{i}]): the group replaces it. "
                                  for i, name in replaced))
        self.note.setVisible(bool(replaced))
        self.apply_button.setEnabled(not self.check.problems)
        self.checked.emit()

    # ------------------------------------------------------------------ writing
    def apply(self) -> None:
        """Write the group into the scenario (one undoable edit) and close."""
        self.recheck()
        if self.check.problems:
            return
        values = self.values()
        text, _ = group_text(self.document.text, self.index, values)
        n = len(values["parameters"])
        self.document.set_text(text, f"Draw {n} parameters together ({values['distribution'].replace('_', ' ')})")
        self.accept()

    def remove(self) -> None:
        """Remove the group (one undoable edit) and close."""
        if self.index is not None:
            self.document.set_text(removed_group_text(self.document.text, self.index),
                                   f"Remove the group uncertainty[{self.index}]")
        self.accept()

    def keyPressEvent(self, event) -> None:  # noqa: N802 - Qt API
        """Enter checks the cell just typed rather than closing the dialog."""
        if event.key() in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self._finished_typing()
            return
        super().keyPressEvent(event)
