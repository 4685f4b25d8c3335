"""A white-background pyqtgraph plot with its legend underneath and PNG/SVG save buttons.

The legend sits below the axes (not over the curves) and is part of the saved image, so an exported
plot still says which curve is which.
"""

from __future__ import annotations

import pyqtgraph as pg
from PySide6.QtWidgets import QVBoxLayout, QWidget

from ..export_plot import PlotSaveBar

__all__ = ["PlotPanel"]

_TEXT = "#000000"


class PlotPanel(QWidget):
    """``plot`` (a PlotItem), ``legend`` below it, ``graphics`` (the widget that is saved) and
    ``save_bar``. Legend entries are replaced with :meth:`set_legend`."""

    def __init__(self, name: str, x_label: str, y_label: str, legend_columns: int = 2,
                 parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.graphics = pg.GraphicsLayoutWidget()
        self.graphics.setBackground("w")
        self.graphics.setMinimumSize(360, 300)
        self.plot: pg.PlotItem = self.graphics.addPlot(row=0, col=0)
        self.plot.showGrid(x=True, y=True, alpha=0.25)
        self.plot.setMenuEnabled(False)  # its "Export…" entry uses pyqtgraph's SVG exporter: use the buttons
        for side in ("left", "bottom"):
            axis = self.plot.getAxis(side)
            axis.setPen(pg.mkPen(_TEXT))
            axis.setTextPen(pg.mkPen(_TEXT))
            axis.enableAutoSIPrefix(False)  # "(x0.001)" scale factors confuse: show plain numbers
        self.plot.setLabel("bottom", x_label, color=_TEXT)
        self.plot.setLabel("left", y_label, color=_TEXT)
        self.legend = pg.LegendItem(colCount=legend_columns, labelTextColor=_TEXT, labelTextSize="9pt",
                                    pen=pg.mkPen("#BBBBBB"), brush=pg.mkBrush(255, 255, 255, 230),
                                    horSpacing=20)
        self.graphics.addItem(self.legend, row=1, col=0)
        self.graphics.ci.layout.setRowStretchFactor(0, 10)
        self.graphics.ci.layout.setRowStretchFactor(1, 0)
        self.save_bar = PlotSaveBar(self.graphics, name)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.save_bar)
        layout.addWidget(self.graphics, 1)

    def set_title(self, text: str) -> None:
        self.plot.setTitle(text, color=_TEXT, size="11pt")

    def set_legend(self, entries: list[tuple[pg.GraphicsObject, str]]) -> None:
        """Replace the legend with ``entries`` (item, label), in order."""
        self.legend.clear()
        for item, label in entries:
            self.legend.addItem(item, label)

    def legend_labels(self) -> list[str]:
        """The legend's texts, in order (for tests and screen readers)."""
        return [label.text for _, label in self.legend.items]
