"""A table view for result tables: Ctrl+C copies the selection as tab-separated text (pastes into a
spreadsheet as a block), and a context menu copies with headers, copies everything, or saves the
table as CSV (``save_requested`` carries the shown rows as a DataFrame)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from PySide6.QtCore import QPoint, Qt, Signal
from PySide6.QtGui import QGuiApplication, QKeyEvent, QKeySequence
from PySide6.QtWidgets import QAbstractItemView, QHeaderView, QMenu, QStyle, QTableView, QWidget

from .table_model import DataFrameModel, tsv

__all__ = ["TableView"]

SAMPLE_ROWS = 200


class TableView(QTableView):
    """Read-only table over a :class:`DataFrameModel`; ``name`` suggests the CSV file name."""

    save_requested = Signal(object, str)  # (DataFrame, suggested name)

    def __init__(self, name: str, model: DataFrameModel | None = None, row_numbers: bool = False,
                 parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.name = name
        self.setModel(model or DataFrameModel())
        self.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.setSelectionMode(QAbstractItemView.SelectionMode.ExtendedSelection)
        self.setAlternatingRowColors(True)
        self.setWordWrap(False)
        self.setCornerButtonEnabled(True)
        vh = self.verticalHeader()
        vh.setSectionResizeMode(QHeaderView.ResizeMode.Fixed)  # uniform rows: fast for millions of rows
        vh.setDefaultSectionSize(self.fontMetrics().height() + 6)
        vh.setVisible(row_numbers)
        self.horizontalHeader().setStretchLastSection(False)
        # fitting columns samples this many rows (Qt's default 1000 formats 1000 x columns cells on
        # the GUI thread; result columns are uniform, so a shorter sample gives the same widths)
        for header in (self.horizontalHeader(), vh):
            header.setResizeContentsPrecision(SAMPLE_ROWS)
        self.setContextMenuPolicy(Qt.ContextMenuPolicy.CustomContextMenu)
        self.customContextMenuRequested.connect(self._menu)

    def model(self) -> DataFrameModel:  # narrow the type
        return super().model()  # type: ignore[return-value]

    def sizeHintForColumn(self, column: int) -> int:  # noqa: N802 (Qt name)
        """Width of the widest of the first ``SAMPLE_ROWS`` cells, measured on their text directly
        (Qt's default asks the model for several roles of every sampled cell through Python, which
        took ~50 ms for the event log on the GUI thread after a large run)."""
        model = self.model()
        if not isinstance(model, DataFrameModel) or not (0 <= column < model.columnCount()):
            return super().sizeHintForColumn(column)
        metrics = self.fontMetrics()
        n = min(model.rowCount(), SAMPLE_ROWS)
        widest = max((metrics.horizontalAdvance(model.cell_text(r, column)) for r in range(n)), default=0)
        margin = 2 * (self.style().pixelMetric(QStyle.PixelMetric.PM_FocusFrameHMargin, None, self) + 1)
        return widest + margin + 1 + (1 if self.showGrid() else 0)  # never narrower than Qt's own hint

    def set_frame(self, frame: pd.DataFrame, fit_columns: bool = True) -> None:
        """Show ``frame`` and size the columns to their contents (Qt samples the first rows only)."""
        self.model().set_frame(frame)
        if fit_columns:
            self.resizeColumnsToContents()

    # ------------------------------------------------------------------ copying
    def selection_frame(self) -> pd.DataFrame:
        """The rows and columns touched by the selection (read from selection ranges, not from one
        index per cell, so selecting millions of rows stays cheap)."""
        ranges = self.selectionModel().selection()
        if ranges.isEmpty():
            return pd.DataFrame()
        rows = np.unique(np.concatenate([np.arange(r.top(), r.bottom() + 1) for r in ranges]))
        cols = sorted({c for r in ranges for c in range(r.left(), r.right() + 1)})
        return self.model().subframe(rows, cols)

    def copy_selection(self, headers: bool = False) -> str:
        """Copy the selection to the clipboard as tab-separated text; returns the text."""
        frame = self.selection_frame()
        text = tsv(frame, headers) if len(frame.columns) else ""
        if text:
            QGuiApplication.clipboard().setText(text)
        return text

    def copy_all(self) -> str:
        text = tsv(self.model().frame(), headers=True)
        QGuiApplication.clipboard().setText(text)
        return text

    def keyPressEvent(self, event: QKeyEvent) -> None:  # noqa: N802 (Qt name)
        if event.matches(QKeySequence.StandardKey.Copy):
            self.copy_selection(headers=False)
            event.accept()
            return
        super().keyPressEvent(event)

    def _menu(self, pos: QPoint) -> None:
        menu = QMenu(self)
        menu.addAction("Copy", lambda: self.copy_selection(headers=False))
        menu.addAction("Copy with column names", lambda: self.copy_selection(headers=True))
        menu.addAction("Copy the whole table", self.copy_all)
        menu.addSeparator()
        menu.addAction("Save table as CSV…", lambda: self.save_requested.emit(self.model().frame(), self.name))
        menu.popup(self.viewport().mapToGlobal(pos))
