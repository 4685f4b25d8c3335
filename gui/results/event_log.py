"""Event log and patient table, filterable by strategy and patient id with numpy masks.

The table model reads the run's columns directly (no widget or Python object per row), so a log of
millions of events opens and scrolls at once.
"""

from __future__ import annotations

import numpy as np
from PySide6.QtCore import QRegularExpression, Signal, Slot
from PySide6.QtGui import QRegularExpressionValidator
from PySide6.QtWidgets import QComboBox, QHBoxLayout, QLabel, QLineEdit, QPushButton, QVBoxLayout, QWidget

from sim.pipeline.run import RunResults

from .table_view import TableView

__all__ = ["EventLogView"]

ALL = "all strategies"
TABLES = {"events": "event log (one row per transition)", "patients": "patient table (one row per patient)"}


class EventLogView(QWidget):
    """Pick the table (events or patients) and filter it; ``export_requested(kind)`` asks the panel
    to save a whole table ("events", "patients" or "long")."""

    export_requested = Signal(str)
    filtered = Signal(int)  # rows shown

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._results: RunResults | None = None
        self.table_choice = QComboBox()
        for key, label in TABLES.items():
            self.table_choice.addItem(label, key)
        self.strategy = QComboBox()
        self.patient = QLineEdit()
        self.patient.setPlaceholderText("all patients")
        self.patient.setValidator(QRegularExpressionValidator(QRegularExpression(r"\d{0,12}")))
        self.patient.setClearButtonEnabled(True)
        self.patient.setToolTip("Patient id (the same patient appears under every strategy)")
        self.count = QLabel()
        filters = QHBoxLayout()
        for label, w in (("Table", self.table_choice), ("Strategy", self.strategy), ("Patient id", self.patient)):
            filters.addWidget(QLabel(label))
            filters.addWidget(w)
        filters.addStretch(1)
        filters.addWidget(self.count)

        self.table = TableView("events", row_numbers=True)
        saves = QHBoxLayout()
        saves.addWidget(QLabel("Save the whole table (Parquet or CSV):"))
        for kind, text in (("events", "Event log…"), ("patients", "Patient table…"),
                           ("long", "Long format (one row per patient, sojourn and exit)…")):
            b = QPushButton(text)
            b.setAutoDefault(False)
            b.clicked.connect(lambda _=False, k=kind: self.export_requested.emit(k))
            saves.addWidget(b)
        saves.addStretch(1)

        layout = QVBoxLayout(self)
        layout.addLayout(filters)
        layout.addWidget(self.table, 1)
        layout.addLayout(saves)

        self.table_choice.currentIndexChanged.connect(self._on_table_changed)
        self.strategy.currentIndexChanged.connect(self._on_filter_changed)
        self.patient.textChanged.connect(self._on_filter_changed)

    def show_results(self, results: RunResults) -> None:
        self._results = results
        names = list(results.scenario.model.strategy_names)
        self.strategy.blockSignals(True)
        current = self.strategy.currentText()
        self.strategy.clear()
        self.strategy.addItems([ALL, *names])
        self.strategy.setCurrentText(current if current in names else ALL)
        self.strategy.blockSignals(False)
        self._on_table_changed()

    def set_filter(self, strategy: str | None = None, patient: int | None = None) -> None:
        """Filter as the user would: ``None`` means all."""
        self.strategy.blockSignals(True)
        self.strategy.setCurrentText(strategy or ALL)
        self.strategy.blockSignals(False)
        self.patient.setText("" if patient is None else str(int(patient)))
        self._on_filter_changed()

    @Slot()
    def _on_table_changed(self, *_: object) -> None:
        if self._results is None:
            return
        kind = self.table_choice.currentData()
        sim = self._results.simulation
        frame = sim.events if kind == "events" else sim.patients
        self.table.name = kind
        self.table.set_frame(frame, fit_columns=True)
        self._on_filter_changed()

    @Slot()
    def _on_filter_changed(self, *_: object) -> None:
        model = self.table.model()
        total = model.source_frame().shape[0]
        mask: np.ndarray | None = None
        strategy = self.strategy.currentText()
        if strategy and strategy != ALL:
            mask = model.column_equals("strategy", strategy)
        text = self.patient.text().strip()
        if text:
            hit = model.column_equals("patient", int(text))
            mask = hit if mask is None else mask & hit
        model.set_mask(mask)
        shown = model.rowCount()
        what = "events" if self.table_choice.currentData() == "events" else "patient rows"
        self.count.setText(f"{shown:,} of {total:,} {what}")
        self.filtered.emit(shown)
