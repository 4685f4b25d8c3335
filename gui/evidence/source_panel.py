"""Where the evidence comes from: a patient-level file (CSV, Parquet or .xlsx; the time, event,
entry and arm columns and the time unit) or a published curve (digitised Kaplan-Meier points and
numbers at risk, reconstructed by :func:`sim.evidence.reconstruct`). Reading and checking are
``sim.evidence``'s; problems are shown in words with their file, line and column.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from numpy.typing import NDArray
from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import (QComboBox, QFileDialog, QFormLayout, QHBoxLayout, QLabel, QLineEdit, QPushButton,
                               QTabWidget, QVBoxLayout, QWidget)

from gui.palette import OKABE_ITO
from sim.evidence import (SurvivalData, file_columns, file_sheets, parse_total_events, read_at_risk, read_curves,
                          read_survival_data, reconstruct)
from sim.hazards import UNIT_IN_YEARS
from sim.problems import ValidationError

from .words import error_words

__all__ = ["Evidence", "SourcePanel", "NONE"]

NONE = "(none)"


@dataclass(frozen=True, eq=False)
class Evidence:
    """Data read and checked, with what to draw over it: the digitised points per arm (published
    curves) and the cleaning and reconstruction notes."""

    data: SurvivalData
    source: str
    points: dict[str, tuple[NDArray[np.float64], NDArray[np.float64]]] = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    @property
    def reconstructed(self) -> bool:
        return bool(self.points)


def _path_row(edit: QLineEdit, button: QPushButton) -> QWidget:
    row = QWidget()
    lay = QHBoxLayout(row)
    lay.setContentsMargins(0, 0, 0, 0)
    lay.addWidget(edit, 1)
    lay.addWidget(button)
    return row


def _unit_box() -> QComboBox:
    box = QComboBox()
    box.addItems(list(UNIT_IN_YEARS))
    box.setCurrentText("months")
    box.setToolTip("Time unit of the times in the file(s): the fitted parameters are in this unit")
    return box


class SourcePanel(QWidget):
    """Two tabs, "Patient data" and "Published curve", each with a Read button.

    Signals
    -------
    loaded(Evidence)
        Data read and checked.
    failed(str)
        The problems in words (also shown in :attr:`message`).
    """

    loaded = Signal(object)
    failed = Signal(str)

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.tabs = QTabWidget()
        # patient-level data
        self.data_path = QLineEdit()
        self.data_path.setPlaceholderText("trial.csv, .parquet or .xlsx: one row per patient")
        self.data_path.editingFinished.connect(self._fill_columns)
        self.data_browse = QPushButton("Browse…")
        self.data_browse.clicked.connect(self._browse_data)
        self.sheet = QComboBox()
        self.sheet.setToolTip("Worksheet of an .xlsx file (the columns offered are its header's)")
        self.sheet.setEnabled(False)
        self.sheet.currentTextChanged.connect(self._on_sheet_changed)
        self.time_col, self.event_col, self.entry_col, self.group_col = (QComboBox() for _ in range(4))
        for box in (self.time_col, self.event_col, self.entry_col, self.group_col):
            box.setEditable(True)
        self.time_col.setToolTip("Exit time: event or censoring")
        self.event_col.setToolTip("1 where the exit is the event, 0 where censored")
        self.entry_col.setToolTip("Delayed entry (left truncation): at risk from this time; optional")
        self.group_col.setToolTip("Arm of each patient; two arms give a hazard ratio or acceleration factor")
        self.data_unit = _unit_box()
        self.read_data_button = QPushButton("Read data")
        self.read_data_button.clicked.connect(self.read_data)
        page = QWidget()
        form = QFormLayout(page)
        form.addRow("File", _path_row(self.data_path, self.data_browse))
        form.addRow("Worksheet", self.sheet)
        form.addRow("Time column", self.time_col)
        form.addRow("Event column", self.event_col)
        form.addRow("Entry column", self.entry_col)
        form.addRow("Arm column", self.group_col)
        form.addRow("Time unit", self.data_unit)
        form.addRow(self.read_data_button)
        self.tabs.addTab(page, "Patient data")
        # published curves
        self.km_path, self.risk_path = QLineEdit(), QLineEdit()
        self.km_path.setPlaceholderText("digitised points: time, survival[, arm]")
        self.risk_path.setPlaceholderText("numbers at risk: time, at_risk[, arm]")
        self.km_browse, self.risk_browse = QPushButton("Browse…"), QPushButton("Browse…")
        self.km_browse.clicked.connect(lambda: self._browse(self.km_path, "Digitised Kaplan-Meier points"))
        self.risk_browse.clicked.connect(lambda: self._browse(self.risk_path, "Numbers at risk"))
        self.total_events = QLineEdit()
        self.total_events.setPlaceholderText("optional, e.g. control=120, treated=95")
        self.total_events.setToolTip("Reported total events per arm (ARM=N; N alone for one arm)")
        self.curve_unit = _unit_box()
        self.read_curves_button = QPushButton("Reconstruct patients")
        self.read_curves_button.setToolTip("Guyot, Ades, Ouwens & Welton 2012 (BMC Med Res Methodol 12:9)")
        self.read_curves_button.clicked.connect(self.read_curves)
        page = QWidget()
        form = QFormLayout(page)
        form.addRow("Curve points", _path_row(self.km_path, self.km_browse))
        form.addRow("At risk", _path_row(self.risk_path, self.risk_browse))
        form.addRow("Total events", self.total_events)
        form.addRow("Time unit", self.curve_unit)
        form.addRow(self.read_curves_button)
        self.tabs.addTab(page, "Published curve")
        self.message = QLabel()
        self.message.setObjectName("source_message")
        self.message.setWordWrap(True)
        self.message.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.tabs)
        layout.addWidget(self.message)
        self._set_columns([])

    # ------------------------------------------------------------------ files
    def _browse(self, edit: QLineEdit, title: str, filters: str = "CSV files (*.csv);;All files (*)") -> None:
        path, _ = QFileDialog.getOpenFileName(self, title, str(Path(edit.text()).parent if edit.text() else ""),
                                              filters)
        if path:
            edit.setText(path)
            edit.editingFinished.emit()

    def _browse_data(self) -> None:
        self._browse(self.data_path, "Patient-level survival data",
                     "Data files (*.csv *.parquet *.pq *.xlsx);;All files (*)")

    def set_data_file(self, path: str | Path) -> None:
        """Choose the patient-level file and offer its columns (guessing time, event, entry, arm)."""
        self.data_path.setText(str(path))
        self._fill_columns()

    def _fill_columns(self) -> None:
        """Offer the file's worksheets (an .xlsx file) and its columns (``sim.evidence``); none when
        the file cannot be read yet (the Read button then says why)."""
        path = self.data_path.text().strip()
        try:
            sheets = file_sheets(path) if path else []
        except ValidationError:
            sheets = []
        self.sheet.blockSignals(True)
        self.sheet.clear()
        self.sheet.addItems(sheets)
        self.sheet.setEnabled(bool(sheets))
        self.sheet.blockSignals(False)
        self._on_sheet_changed()

    def _chosen_sheet(self) -> str | None:
        return self.sheet.currentText() if self.sheet.count() else None

    def _on_sheet_changed(self, _text: str = "") -> None:
        path = self.data_path.text().strip()
        try:
            columns = file_columns(path, self._chosen_sheet()) if path else []
        except ValidationError:
            columns = []
        self._set_columns(columns)

    def _set_columns(self, columns: list[str]) -> None:
        lower = {c.lower(): c for c in columns}

        def guess(*names: str, default: str = "") -> str:
            return next((lower[n] for n in names if n in lower), default)

        for box, names, optional in ((self.time_col, ("time", "exit", "futime", "months", "years"), False),
                                     (self.event_col, ("event", "status", "death", "dead"), False),
                                     (self.entry_col, ("entry", "start", "enter"), True),
                                     (self.group_col, ("arm", "group", "treatment", "trt"), True)):
            box.clear()
            if optional:
                box.addItem(NONE)
            box.addItems(columns)
            box.setCurrentText(guess(*names, default=NONE if optional else (names[0] if not columns else columns[0])))

    # ------------------------------------------------------------------ reading
    def _show_problem(self, err: BaseException) -> None:
        text = error_words(err)
        self.message.setStyleSheet(f"color: {OKABE_ITO['vermillion']};")
        self.message.setText(text)
        self.failed.emit(text)

    def _show_note(self, text: str) -> None:
        self.message.setStyleSheet("")
        self.message.setText(text)

    def read_data(self) -> Evidence | None:
        """Read the patient-level file with the chosen columns (``sim.evidence.read_survival_data``)."""
        path = self.data_path.text().strip()
        if not path:
            self._show_problem(ValidationError(("file",), "choose a patient-level data file first"))
            return None
        optional = {box: (None if box.currentText() in (NONE, "") else box.currentText())
                    for box in (self.entry_col, self.group_col)}
        try:
            data = read_survival_data(path, time=self.time_col.currentText(), event=self.event_col.currentText(),
                                      entry=optional[self.entry_col], group=optional[self.group_col],
                                      unit=self.data_unit.currentText(), sheet=self._chosen_sheet() or 0)
        except ValidationError as err:
            self._show_problem(err)
            return None
        arms = f", arms {', '.join(data.groups)}" if data.group is not None else ""
        self._show_note(f"{Path(path).name}: {data.n} patients, {data.n_events} events, time in {data.unit}"
                        f"{', delayed entry' if data.delayed else ''}{arms}")
        evidence = Evidence(data, str(path))
        self.loaded.emit(evidence)
        return evidence

    def read_curves(self) -> Evidence | None:
        """Read, clean and reconstruct the published curve (Guyot et al. 2012)."""
        km, risk = self.km_path.text().strip(), self.risk_path.text().strip()
        try:
            if not (km and risk):
                raise ValidationError(("file",), "choose both the digitised points and the numbers at risk")
            curves = read_curves(km)
            totals = parse_total_events(self.total_events.text(), ("total events",))
            rec = reconstruct(curves, read_at_risk(risk), total_events=totals,
                              unit=self.curve_unit.currentText(), source=km)
        except ValidationError as err:
            self._show_problem(err)
            return None
        notes = tuple(f"[{arm}] {note}" for arm, arm_notes in rec.notes.items() for note in arm_notes)
        data = rec.data
        self._show_note(f"Reconstructed {data.n} patients, {data.n_events} events (Guyot et al. 2012)"
                        + ("; " + "; ".join(notes) if notes else ""))
        points = {arm: (c.time, c.survival) for arm, c in rec.curves.items()}
        evidence = Evidence(data, km, points, notes)
        self.loaded.emit(evidence)
        return evidence
