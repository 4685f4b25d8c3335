"""A small plot of one distribution's density with its mean and 95% interval marked.

The density, mean, quantiles and interval are the distribution's own (:class:`sim.uncertainty.Univariate`:
``pdf``, ``ppf``, ``mean``, ``interval``); this widget only evaluates them on a grid and draws them.
"""

from __future__ import annotations

import math

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QLabel, QVBoxLayout, QWidget

from gui.palette import OKABE_ITO, brush, pen
from sim.uncertainty import Univariate

__all__ = ["DensityPreview", "number_text", "GRID_POINTS"]

GRID_POINTS = 201
_TAIL = 0.0005  # the plot spans the 0.05% to 99.95% quantiles


def number_text(x: float) -> str:
    """A number with 4 significant figures (thousands separated)."""
    if not math.isfinite(x):
        return str(x)
    return f"{x:,.0f}" if 1e4 <= abs(x) < 1e9 else f"{x:.4g}"


class DensityPreview(QWidget):
    """``show(distribution)`` draws it; ``show(None, reason)`` clears the plot and says why."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.plot = pg.PlotWidget(background="w")
        self.plot.setMinimumSize(300, 160)
        self.plot.setMenuEnabled(False)
        self.plot.setMouseEnabled(False, False)
        self.plot.hideButtons()
        item = self.plot.getPlotItem()
        item.getAxis("left").setStyle(showValues=False)
        item.getAxis("bottom").enableAutoSIPrefix(False)
        item.setLabel("left", "density")
        self.band = pg.LinearRegionItem(movable=False, brush=brush(0, 40), pen=pg.mkPen(None))
        self.curve = pg.PlotDataItem(pen=pen(0))
        self.mean_line = pg.InfiniteLine(angle=90, movable=False, pen=pen(1, width=1.5, style_index=1))
        for it in (self.band, self.curve, self.mean_line):
            self.plot.addItem(it)
        self.summary = QLabel()
        self.summary.setObjectName("summary")
        self.summary.setWordWrap(True)
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 0, 0, 0)
        layout.addWidget(self.plot, 1)
        layout.addWidget(self.summary)
        self.distribution: Univariate | None = None
        self.mean = math.nan
        self.interval = (math.nan, math.nan)
        self.show_distribution(None, "")

    def show_distribution(self, distribution: Univariate | None, reason: str = "") -> None:
        self.distribution = distribution
        visible = distribution is not None
        for it in (self.band, self.curve, self.mean_line):
            it.setVisible(visible)
        if distribution is None:
            self.curve.setData([], [])
            self.mean, self.interval = math.nan, (math.nan, math.nan)
            self.summary.setText(reason)
            return
        lo, hi = (float(v) for v in distribution.ppf(np.array([_TAIL, 1.0 - _TAIL])))
        s_lo, s_hi = distribution.support
        lo, hi = max(lo, s_lo), min(hi, s_hi)
        if not hi > lo:  # a degenerate spread: a small window around the value
            hi = lo + max(abs(lo), 1.0) * 1e-6
        x = np.linspace(lo, hi, GRID_POINTS)
        y = np.asarray(distribution.pdf(x), dtype=float)
        self.curve.setData(x, np.where(np.isfinite(y), y, np.nan), connect="finite")
        self.mean = float(distribution.mean)
        self.interval = distribution.interval(0.95)
        self.mean_line.setValue(self.mean)
        self.band.setRegion(self.interval)
        self.plot.getPlotItem().setXRange(lo, hi, padding=0.02)
        self.summary.setText(f"Mean {number_text(self.mean)} · 95% interval {number_text(self.interval[0])} "
                             f"to {number_text(self.interval[1])}  (shaded; the dashed line is the mean)")
        self.summary.setStyleSheet(f"color: {OKABE_ITO['black']};")
