"""A read-only Qt table model over a pandas DataFrame, columnar and fast for millions of rows.

The model keeps each column as one numpy array (Categorical columns as their integer codes plus the
category labels) and formats a cell only when the view asks for it, i.e. for the visible cells.
Loading a table does no per-row Python work; filtering takes a boolean numpy mask and keeps the
selected row positions as an index array.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
from PySide6.QtCore import QAbstractTableModel, QModelIndex, QPersistentModelIndex, Qt

from sim.analysis.display import column_decimals, decimals_from_mcse, format_fixed

__all__ = ["DataFrameModel", "format_number", "tsv", "RAW_ROLE"]

_Index = QModelIndex | QPersistentModelIndex
RAW_ROLE = Qt.ItemDataRole.UserRole  # the unformatted value (float, int or str)


def format_number(v: float) -> str:
    """About six significant digits with thousands separators; scientific for tiny or huge values."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    if isinstance(v, (int, np.integer)):
        return f"{int(v):,}"
    v = float(v)
    if math.isinf(v):
        return "∞" if v > 0 else "−∞"
    a = abs(v)
    if a == 0:
        return "0"
    if a < 1e-4 or a >= 1e15:
        return f"{v:.4e}"
    decimals = min(6, max(0, 5 - int(math.floor(math.log10(a)))))
    return f"{v:,.{decimals}f}"


class _Column:
    """One column as numpy data: values, or codes into labels for categoricals."""

    __slots__ = ("name", "values", "labels", "numeric", "decimals")

    def __init__(self, name: str, s: pd.Series, row_decimals: np.ndarray | None = None) -> None:
        self.name = name
        self.labels: np.ndarray | None = None
        self.decimals: int | np.ndarray | None = None  # per column, or per row (from the MCSE)
        if isinstance(s.dtype, pd.CategoricalDtype):
            self.values = s.cat.codes.to_numpy()
            self.labels = np.asarray(s.cat.categories.astype(str))
            self.numeric = False
        elif pd.api.types.is_bool_dtype(s.dtype):
            self.values = s.to_numpy(dtype=bool)
            self.numeric = False
        elif pd.api.types.is_numeric_dtype(s.dtype):
            self.values = s.to_numpy()
            self.numeric = True
            self.decimals = column_decimals(self.values)
            if row_decimals is not None and self.values.dtype.kind == "f":
                # rows with a usable MCSE show its precision; the others keep the column's decimals
                self.decimals = np.where(row_decimals >= 0, row_decimals,
                                         np.broadcast_to(self.decimals, row_decimals.shape))
        else:
            self.values = s.to_numpy(dtype=object)
            self.numeric = False

    def raw(self, i: int) -> Any:
        v = self.values[i]
        if self.labels is not None:
            return "" if v < 0 else str(self.labels[v])
        if isinstance(v, np.generic):
            return v.item()
        return v

    def text(self, i: int) -> str:
        v = self.raw(i)
        if self.numeric:
            if self.decimals is None:
                return format_number(v)
            d = self.decimals if isinstance(self.decimals, int) else int(self.decimals[i])  # type: ignore[index]
            return format_fixed(v, d)
        if isinstance(v, bool):
            return "yes" if v else "no"
        return "" if v is None or (isinstance(v, float) and math.isnan(v)) else str(v)

    def codes_equal(self, label: str) -> np.ndarray:
        """Boolean mask of rows equal to ``label`` (vectorised; categoricals compare codes)."""
        if self.labels is not None:
            hit = np.flatnonzero(self.labels == label)
            return self.values == hit[0] if hit.size else np.zeros(self.values.shape, dtype=bool)
        return self.values == label


#: columns shown to the precision of the row's Monte Carlo standard error (column ``mcse``)
MCSE_GOVERNED = ("mean", "mcse", "mcse_unpaired", "exact", "value")


class DataFrameModel(QAbstractTableModel):
    """Read-only table model over ``frame``; see the module docstring.

    Numbers follow :mod:`sim.analysis.display`: a table with an ``mcse`` column shows ``mean``,
    ``mcse``, ``exact`` (and ``value``) of each row to the precision of that row's MCSE; every other
    numeric column has one number of decimals for all its rows, with thousands separators.
    ``UserRole`` gives the unformatted value of a cell (used when copying to a spreadsheet).
    """

    def __init__(self, frame: pd.DataFrame | None = None, parent=None) -> None:
        super().__init__(parent)
        self._frame = pd.DataFrame()
        self._cols: list[_Column] = []
        self._rows: np.ndarray | None = None  # selected row positions, None = all
        self._n = 0
        if frame is not None:
            self.set_frame(frame)

    # ------------------------------------------------------------------ data
    def set_frame(self, frame: pd.DataFrame) -> None:
        """Show ``frame`` (all rows, no filter)."""
        self.beginResetModel()
        self._frame = frame
        by_mcse = None
        if "mcse" in frame.columns and pd.api.types.is_numeric_dtype(frame["mcse"].dtype):
            by_mcse = decimals_from_mcse(frame["mcse"].to_numpy(dtype=float))
        self._cols = [_Column(str(c), frame[c], by_mcse if str(c) in MCSE_GOVERNED else None)
                      for c in frame.columns]
        self._rows = None
        self._n = len(frame)
        self.endResetModel()

    def set_mask(self, mask: np.ndarray | None) -> None:
        """Show only the rows where ``mask`` is True (None shows all)."""
        self.beginResetModel()
        if mask is None:
            self._rows, self._n = None, len(self._frame)
        else:
            mask = np.asarray(mask, dtype=bool)
            if mask.shape != (len(self._frame),):
                raise ValueError(f"mask must have {len(self._frame)} booleans, got shape {mask.shape}")
            self._rows = np.flatnonzero(mask)
            self._n = int(self._rows.size)
        self.endResetModel()

    def column_equals(self, column: str, value: Any) -> np.ndarray:
        """Mask of rows whose ``column`` equals ``value`` (for building filters)."""
        col = self._cols[self.column_names().index(column)]
        return col.codes_equal(str(value)) if col.labels is not None else col.values == value

    def column_names(self) -> list[str]:
        return [c.name for c in self._cols]

    def source_frame(self) -> pd.DataFrame:
        return self._frame

    def frame(self) -> pd.DataFrame:
        """The shown rows as a DataFrame (for exports)."""
        if self._rows is None:
            return self._frame
        return self._frame.iloc[self._rows].reset_index(drop=True)

    def subframe(self, rows: np.ndarray, columns: list[int]) -> pd.DataFrame:
        """Shown rows ``rows`` (view positions) and columns ``columns`` as a DataFrame."""
        rows = np.asarray(rows, dtype=np.intp)
        pos = self._rows[rows] if self._rows is not None else rows
        return self._frame.iloc[pos, columns].reset_index(drop=True)

    def _row(self, r: int) -> int:
        return int(self._rows[r]) if self._rows is not None else r

    def raw_value(self, row: int, column: int) -> Any:
        return self._cols[column].raw(self._row(row))

    def cell_text(self, row: int, column: int) -> str:
        return self._cols[column].text(self._row(row))

    # ------------------------------------------------------------------ Qt interface
    def rowCount(self, parent: _Index = QModelIndex()) -> int:  # noqa: N802, B008
        return 0 if parent.isValid() else self._n

    def columnCount(self, parent: _Index = QModelIndex()) -> int:  # noqa: N802, B008
        return 0 if parent.isValid() else len(self._cols)

    def data(self, index: _Index, role: int = Qt.ItemDataRole.DisplayRole) -> Any:
        if not index.isValid():
            return None
        col = self._cols[index.column()]
        if role == Qt.ItemDataRole.DisplayRole:
            return col.text(self._row(index.row()))
        if role == RAW_ROLE:
            return col.raw(self._row(index.row()))
        if role == Qt.ItemDataRole.TextAlignmentRole:
            align = Qt.AlignmentFlag.AlignRight if col.numeric else Qt.AlignmentFlag.AlignLeft
            return int(align | Qt.AlignmentFlag.AlignVCenter)
        return None

    def headerData(self, section: int, orientation: Qt.Orientation,  # noqa: N802
                   role: int = Qt.ItemDataRole.DisplayRole) -> Any:
        if role != Qt.ItemDataRole.DisplayRole:
            return None
        if orientation == Qt.Orientation.Horizontal:
            return self._cols[section].name if 0 <= section < len(self._cols) else None
        return f"{section + 1:,}"


def tsv(frame: pd.DataFrame, headers: bool = False) -> str:
    """Tab-separated text of ``frame``, one line per row (what spreadsheets paste as a block). Floats
    keep full precision without thousands separators, so spreadsheets read them as numbers; a cell
    holding a tab or a line break is quoted, as spreadsheets expect."""
    return frame.to_csv(sep="\t", header=headers, index=False, lineterminator="\n")
