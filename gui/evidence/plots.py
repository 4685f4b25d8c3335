"""The three plots of the evidence window, each a :class:`gui.results.plot_panel.PlotPanel` (white
background, legend below, PNG/SVG save bar):

- :class:`SurvivalPlot`: Kaplan-Meier per arm with its 95% band (log(-log) interval,
  :func:`sim.evidence.kaplan_meier`), the digitised points of a
  reconstruction, the fitted survival curves extrapolated to the horizon, and the numbers at risk
  in a row under the axes;
- :class:`HazardPlot`: the fitted hazards, the background hazard at attained age and the stretches
  where the chosen fit falls below it (shaded);
- :class:`DiagnosticPlot`: log cumulative hazard against log time (Kaplan-Meier and fits; straight
  parallel lines suggest a Weibull with proportional hazards, common practice, no source).

Curves are created once per slot and updated with ``setData``; a slot not needed is emptied.
No estimation here: the arrays come from ``sim`` (:func:`sim.evidence.kaplan_meier_by_arm`,
:func:`sim.evidence.numbers_at_risk`, :meth:`sim.evidence.Fit.arm_hazards`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np
import pyqtgraph as pg
from numpy.typing import NDArray
from PySide6.QtCore import Qt
from PySide6.QtGui import QColor, QPen

from gui.palette import OKABE_ITO
from gui.results.plot_panel import PlotPanel
from sim.evidence import KaplanMeier


__all__ = ["SurvivalPlot", "HazardPlot", "DiagnosticPlot", "KM_COLOURS", "FIT_COLOURS", "nice_ticks", "fit_pen"]

KM_COLOURS = ("#000000", "#777777")
_TEXT = "#000000"


#: Fit colours: the Okabe-Ito palette without black (the Kaplan-Meier curves) and yellow (faint on white).
FIT_COLOURS = tuple(OKABE_ITO[n] for n in ("blue", "vermillion", "bluish green", "reddish purple", "orange",
                                           "sky blue"))


def fit_pen(i: int, arm: int, width: float = 2.0) -> QPen:
    """Fit ``i``'s colour; the reference arm solid (dotted from the seventh fit on, when the colours
    repeat), the compared arm dashed (dash-dot)."""
    p = QPen(QColor(FIT_COLOURS[i % len(FIT_COLOURS)]))
    p.setWidthF(width)
    p.setCosmetic(True)
    second = i >= len(FIT_COLOURS)
    p.setStyle((Qt.PenStyle.DotLine if second else Qt.PenStyle.SolidLine) if arm == 0 else
               (Qt.PenStyle.DashDotLine if second else Qt.PenStyle.DashLine))
    return p


def _km_pen(arm: int) -> QPen:
    p = QPen(QColor(KM_COLOURS[arm % 2]))
    p.setWidthF(1.6)
    p.setCosmetic(True)
    return p


def nice_ticks(end: float, count: int = 6) -> NDArray[np.float64]:
    """Round times 0, step, 2 step, ... up to ``end`` (about ``count`` of them)."""
    if not end > 0:
        return np.array([0.0])
    raw = end / max(count - 1, 1)
    mag = 10.0 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw)
    return np.arange(0.0, end + 1e-9 * step, step)


def _steps(t: NDArray[np.float64], s: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """A right-continuous step function as line vertices."""
    return np.repeat(t, 2)[1:], np.repeat(s, 2)[:-1]


class _Slots:
    """Curves created on first use and reused (``setData``) afterwards."""

    def __init__(self, plot: pg.PlotItem, make) -> None:
        self._plot, self._make, self.items = plot, make, []

    def get(self, i: int):
        while len(self.items) <= i:
            item = self._make(len(self.items))
            self._plot.addItem(item)
            self.items.append(item)
        return self.items[i]

    def clear_from(self, n: int) -> None:
        for item in self.items[n:]:
            item.setData([], [])


class SurvivalPlot(PlotPanel):
    """Kaplan-Meier, band, digitised points, fitted curves and the numbers-at-risk row."""

    def __init__(self, parent=None) -> None:
        super().__init__("survival_fits", "time", "survival", legend_columns=3, parent=parent)
        self.plot.setYRange(0.0, 1.0, padding=0.02)
        self.km = _Slots(self.plot, lambda i: pg.PlotDataItem(pen=_km_pen(i)))
        self.lower = _Slots(self.plot, lambda i: pg.PlotCurveItem(pen=pg.mkPen(None)))
        self.upper = _Slots(self.plot, lambda i: pg.PlotCurveItem(pen=pg.mkPen(None)))
        self.bands: list[pg.FillBetweenItem] = []
        self.points = _Slots(self.plot, lambda i: pg.ScatterPlotItem(
            symbol="x" if i == 0 else "+", size=7, pen=pg.mkPen(OKABE_ITO["orange"] if i == 0 else OKABE_ITO["sky blue"],
                                                              width=1.5), brush=None))
        self.fits = _Slots(self.plot, lambda i: pg.PlotDataItem(connect="finite"))
        # numbers at risk: a row of text under the axes, on the same time axis
        self.graphics.removeItem(self.legend)
        self.risk: pg.PlotItem = self.graphics.addPlot(row=1, col=0)
        self.risk.setXLink(self.plot)
        self.risk.setMenuEnabled(False)
        self.risk.setMouseEnabled(x=False, y=False)
        self.risk.hideButtons()
        self.risk.getAxis("bottom").hide()
        left = self.risk.getAxis("left")
        left.setPen(pg.mkPen(None))
        left.setTextPen(pg.mkPen(_TEXT))
        self.risk.setTitle("number at risk", color=_TEXT, size="9pt")
        self.risk_texts: list[pg.TextItem] = []
        self.graphics.addItem(self.legend, row=2, col=0)
        self.graphics.ci.layout.setRowStretchFactor(1, 0)
        self.graphics.ci.layout.setRowStretchFactor(2, 0)
        for axis in (left, self.plot.getAxis("left")):  # the same width: the two rows share the time axis
            axis.setWidth(60)

    def show_km(self, kms: Sequence[KaplanMeier]) -> None:
        for i, km in enumerate(kms):
            x, y = _steps(km.time, km.survival)
            self.km.get(i).setData(x, y)
            xl, yl = _steps(km.time, km.lower)
            xh, yh = _steps(km.time, km.upper)
            self.lower.get(i).setData(xl, yl)
            self.upper.get(i).setData(xh, yh)
            while len(self.bands) <= i:
                c = QColor(KM_COLOURS[len(self.bands) % 2])
                c.setAlpha(45)
                band = pg.FillBetweenItem(self.lower.get(len(self.bands)), self.upper.get(len(self.bands)), brush=c)
                self.plot.addItem(band)
                self.bands.append(band)
        for slots in (self.km, self.lower, self.upper):
            slots.clear_from(len(kms))

    def show_points(self, points: Sequence[tuple[NDArray[np.float64], NDArray[np.float64]]]) -> None:
        for i, (t, s) in enumerate(points):
            self.points.get(i).setData(t, s)
        self.points.clear_from(len(points))

    def show_fits(self, curves: Sequence[tuple[int, int, NDArray[np.float64], NDArray[np.float64], float]]) -> None:
        """``curves``: (fit index, arm index, t, S, width)."""
        for j, (i, arm, t, s, width) in enumerate(curves):
            item = self.fits.get(j)
            item.setPen(fit_pen(i, arm, width))
            item.setData(t, s)
        self.fits.clear_from(len(curves))

    def show_at_risk(self, ticks: NDArray[np.float64], counts: dict[str, NDArray[np.int64]]) -> None:
        for item in self.risk_texts:
            self.risk.removeItem(item)
        self.risk_texts = []
        labels = list(counts)
        for row, label in enumerate(labels):
            y = len(labels) - 1 - row
            for t, n in zip(ticks, counts[label]):
                text = pg.TextItem(f"{int(n)}", color=KM_COLOURS[row % 2], anchor=(0.0 if t == 0 else 0.5, 0.5))
                text.setPos(float(t), y)
                self.risk.addItem(text)
                self.risk_texts.append(text)
        self.risk.getAxis("left").setTicks([[(len(labels) - 1 - r, lab) for r, lab in enumerate(labels)]])
        self.risk.setYRange(-0.6, len(labels) - 0.4, padding=0)
        self.risk.setFixedHeight(34 + 22 * len(labels))


class HazardPlot(PlotPanel):
    """Fitted hazards, the background hazard and where the chosen fit is below it."""

    def __init__(self, parent=None) -> None:
        super().__init__("hazard_fits", "time", "hazard per time unit", legend_columns=3, parent=parent)
        self.fits = _Slots(self.plot, lambda i: pg.PlotDataItem(connect="finite"))
        self.background = _Slots(self.plot, lambda i: pg.PlotDataItem(
            pen=pg.mkPen(OKABE_ITO["black"], width=2, style=Qt.PenStyle.DotLine, cosmetic=True)))
        self.regions: list[pg.LinearRegionItem] = []
        self.note = ""

    def show_fits(self, curves: Sequence[tuple[int, int, NDArray[np.float64], NDArray[np.float64], float]]) -> None:
        for j, (i, arm, t, h, width) in enumerate(curves):
            item = self.fits.get(j)
            item.setPen(fit_pen(i, arm, width))
            item.setData(t, h)
        self.fits.clear_from(len(curves))

    def show_background(self, curves: Sequence[tuple[NDArray[np.float64], NDArray[np.float64]]],
                        below: Sequence[tuple[float, float]], note: str = "") -> None:
        for i, (t, h) in enumerate(curves):
            self.background.get(i).setData(t, h)
        self.background.clear_from(len(curves))
        for region in self.regions:
            self.plot.removeItem(region)
        self.regions = []
        for a, b in below:
            region = pg.LinearRegionItem((a, b), movable=False, brush=pg.mkBrush(213, 94, 0, 40),
                                         pen=pg.mkPen(OKABE_ITO["vermillion"], width=1))
            region.setZValue(-10)
            self.plot.addItem(region)
            self.regions.append(region)
        self.note = note


class DiagnosticPlot(PlotPanel):
    """log cumulative hazard against log time."""

    def __init__(self, parent=None) -> None:
        super().__init__("log_cumulative_hazard", "log time", "log cumulative hazard", legend_columns=3, parent=parent)
        self.km = _Slots(self.plot, lambda i: pg.PlotDataItem(pen=_km_pen(i), symbol="o", symbolSize=4,
                                                              symbolPen=None, symbolBrush=KM_COLOURS[i % 2]))
        self.fits = _Slots(self.plot, lambda i: pg.PlotDataItem(connect="finite"))

    def show_km(self, kms: Sequence[KaplanMeier]) -> None:
        for i, km in enumerate(kms):
            t, s = km.time, km.survival
            keep = (t > 0) & (s > 0) & (s < 1)
            with np.errstate(divide="ignore"):
                self.km.get(i).setData(np.log(t[keep]), np.log(-np.log(s[keep])))
        self.km.clear_from(len(kms))

    def show_fits(self, curves: Sequence[tuple[int, int, NDArray[np.float64], NDArray[np.float64], float]]) -> None:
        for j, (i, arm, t, cum, width) in enumerate(curves):
            keep = (t > 0) & (cum > 0) & np.isfinite(cum)
            item = self.fits.get(j)
            item.setPen(fit_pen(i, arm, width))
            item.setData(np.log(t[keep]), np.log(cum[keep]))
        self.fits.clear_from(len(curves))
