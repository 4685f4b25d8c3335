"""The views of a finished probabilistic analysis: the cost-effectiveness plane, the acceptability
curves with the frontier, the EVPI over the willingness to pay, the convergence of the incremental
net benefit, and the tables. Each draws the summary tables of :func:`sim.psa.psa_summaries`
(computed in the worker thread) as they are; nothing is computed here but the plotting positions.

Colours: one per method wherever methods appear (:mod:`gui.palette`): simulated blue, exact
vermillion, each cycle-based conversion its own colour with the correction's line style.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal
from PySide6.QtGui import QColor, QPen
from PySide6.QtWidgets import (QComboBox, QDoubleSpinBox, QHBoxLayout, QLabel, QPushButton, QSpinBox, QVBoxLayout,
                               QWidget)

from gui.palette import EXACT as EXACT_SERIES
from gui.palette import SIMULATED as SIMULATED_SERIES
from gui.palette import brush, colour, method_colour, method_pen, pen
from gui.results.plot_panel import PlotPanel
from gui.results.table_view import TableView
from sim.psa import EXACT, SIMULATED, CycleMethod, reference_method
from sim.report import cycle_words
from sim.uncertainty import differing_wtp_ranges, population_evpi

from .density import number_text
from .worker import PsaOutcome

__all__ = ["method_words", "method_colour_of", "CePlaneView", "AcceptabilityView", "EvpiView", "ConvergenceView",
           "PsaTablesView", "STRATEGY_SYMBOLS", "Z95"]

STRATEGY_SYMBOLS = ["o", "s", "t", "d", "x", "+"]
Z95 = 1.959963984540054  # the standard normal's 97.5% quantile (scipy.stats.norm.ppf(0.975))


def _cycle(outcome: PsaOutcome) -> dict[str, CycleMethod]:
    return {m.label: m for m in outcome.request.cycle_methods}


def method_words(label: str, outcome: PsaOutcome) -> str:
    """A method as the legend says it."""
    if label == SIMULATED:
        return f"simulated ({outcome.request.patients:,} patients per draw)"
    if label == EXACT:
        return "exact (Kolmogorov)"
    m = _cycle(outcome).get(label)
    return f"{m.conversion}, {cycle_words(m.cycle_length)} cycles, {m.correction}" if m else label


def method_colour_of(label: str, outcome: PsaOutcome) -> str:
    if label == SIMULATED:
        return colour(SIMULATED_SERIES)
    if label == EXACT:
        return colour(EXACT_SERIES)
    m = _cycle(outcome).get(label)
    return method_colour(m.conversion if m else label)


def method_line(label: str, outcome: PsaOutcome, width: float = 2.0) -> QPen:
    if label == SIMULATED:
        return pen(SIMULATED_SERIES, width, style_index=0)
    if label == EXACT:
        return pen(EXACT_SERIES, width, style_index=1)
    m = _cycle(outcome).get(label)
    return method_pen(m.conversion if m else label, width, m.correction if m else None)


def _translucent(hex_colour: str, alpha: int) -> QColor:
    c = QColor(hex_colour)
    c.setAlpha(alpha)
    return c


class _View(QWidget):
    """A plot panel with an optional row of controls above it."""

    def __init__(self, name: str, x: str, y: str, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.panel = PlotPanel(name, x, y)
        self.controls = QHBoxLayout()
        self.note = QLabel()
        self.note.setWordWrap(True)
        self.note.setTextFormat(Qt.TextFormat.PlainText)
        layout = QVBoxLayout(self)
        layout.addLayout(self.controls)
        layout.addWidget(self.panel, 1)
        layout.addWidget(self.note)
        self.outcome: PsaOutcome | None = None

    def _clear(self) -> None:
        self.panel.plot.clear()
        self.panel.set_legend([])


class CePlaneView(_View):
    """Every draw's incremental costs against incremental QALYs, per strategy, for one method, with
    the mean of the draws marked and the line of the scenario's willingness to pay."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__("ce_plane", "Incremental QALYs (discounted)", "Incremental costs (discounted)", parent)
        self.method = QComboBox()
        self.method.setObjectName("ce_method")
        self.controls.addWidget(QLabel("Method"))
        self.controls.addWidget(self.method, 1)
        self.method.activated.connect(lambda _i: self._draw())
        self.scatters: dict[str, pg.ScatterPlotItem] = {}
        self.means: dict[str, pg.ScatterPlotItem] = {}

    def show_outcome(self, outcome: PsaOutcome) -> None:
        self.outcome = outcome
        self.method.clear()
        for m in outcome.methods:
            self.method.addItem(method_words(m, outcome), m)
        self.method.setCurrentIndex(max(0, self.method.findData(reference_method(outcome.result.table))))
        self._draw()

    def _draw(self) -> None:
        self._clear()
        self.scatters, self.means = {}, {}
        o = self.outcome
        if o is None or "ce_plane" not in o.summaries:
            return
        method = self.method.currentData()
        frame = o.summaries["ce_plane"]
        frame = frame[frame["method"] == method]
        c = method_colour_of(method, o)
        entries = []
        for k, (strategy, g) in enumerate(frame.groupby("strategy", sort=False)):
            draws, mean = g[g["point"] == "draw"], g[g["point"] == "mean"]
            symbol = STRATEGY_SYMBOLS[k % len(STRATEGY_SYMBOLS)]
            s = pg.ScatterPlotItem(draws["delta_effects"].to_numpy(), draws["delta_costs"].to_numpy(), size=6,
                                   symbol=symbol, pen=pg.mkPen(None), brush=pg.mkBrush(_translucent(c, 110)))
            m = pg.ScatterPlotItem(mean["delta_effects"].to_numpy(), mean["delta_costs"].to_numpy(), size=18,
                                   symbol="star", pen=pg.mkPen("#000000", width=1.5), brush=pg.mkBrush(c))
            self.panel.plot.addItem(s)
            self.panel.plot.addItem(m)
            self.scatters[strategy], self.means[strategy] = s, m
            comparator = g["comparator"].iloc[0]
            entries += [(s, f"{strategy} vs {comparator}: each draw"), (m, f"{strategy}: mean of the draws")]
        wtp = o.scenario.model.valuation.willingness_to_pay
        x = frame["delta_effects"].to_numpy()
        if len(x) and wtp > 0:
            lo, hi = min(float(x.min()), 0.0), max(float(x.max()), 0.0)
            line = pg.PlotDataItem([lo, hi], [wtp * lo, wtp * hi], pen=pg.mkPen("#555555", width=1.5,
                                                                             style=Qt.PenStyle.DashLine))
            self.panel.plot.addItem(line)
            entries.append((line, f"willingness to pay {number_text(wtp)} per QALY"))
        self.panel.plot.addLine(x=0, pen=pg.mkPen("#999999"))
        self.panel.plot.addLine(y=0, pen=pg.mkPen("#999999"))
        self.panel.set_legend(entries)
        self.panel.set_title(f"Cost-effectiveness plane — {method_words(method, o)}")


class AcceptabilityView(_View):
    """The probability that a strategy is cost-effective over the willingness to pay, one curve per
    method (simulated, exact, each cycle-based approximation on the same draws), with the
    acceptability frontier of the reference method, and the ranges where an approximation changes
    the probability by more than a chosen amount (:func:`sim.uncertainty.differing_wtp_ranges`)."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__("acceptability", "Willingness to pay per QALY", "Probability cost-effective", parent)
        self.strategy = QComboBox()
        self.strategy.setObjectName("ceac_strategy")
        self.threshold = QDoubleSpinBox()
        self.threshold.setObjectName("ceac_threshold")
        self.threshold.setRange(0.01, 0.5)
        self.threshold.setSingleStep(0.01)
        self.threshold.setValue(0.05)
        self.threshold.setToolTip("Report willingness-to-pay ranges where a method's probability differs from the "
                                  "reference's by more than this")
        self.controls.addWidget(QLabel("Strategy"))
        self.controls.addWidget(self.strategy, 1)
        self.controls.addWidget(QLabel("Differences above"))
        self.controls.addWidget(self.threshold)
        self.strategy.activated.connect(lambda _i: self._draw())
        self.threshold.valueChanged.connect(lambda _v: self._describe())
        self.curves: dict[str, pg.PlotDataItem] = {}
        self.frontier: pg.PlotDataItem | None = None
        self.ranges = pd.DataFrame()

    def show_outcome(self, outcome: PsaOutcome) -> None:
        self.outcome = outcome
        names = list(outcome.scenario.model.strategy_names)
        self.strategy.clear()
        for s in names:
            self.strategy.addItem(s, s)
        self.strategy.setCurrentIndex(1 if len(names) > 1 else 0)
        self.panel.plot.setYRange(0, 1, padding=0.02)
        self._draw()

    def _draw(self) -> None:
        self._clear()
        self.curves, self.frontier = {}, None
        o = self.outcome
        if o is None or "ceac" not in o.summaries:
            return
        strategy = self.strategy.currentData()
        ceac = o.summaries["ceac"]
        reference = reference_method(o.result.table)
        entries = []
        front = o.summaries.get("acceptability_frontier")
        if front is not None:
            f = front[front["method"] == reference]
            self.frontier = pg.PlotDataItem(f["wtp"].to_numpy(), f["probability"].to_numpy(),
                                            pen=pg.mkPen(QColor(0, 0, 0, 90), width=7))
            self.panel.plot.addItem(self.frontier)
            entries.append((self.frontier, f"acceptability frontier ({method_words(reference, o)})"))
        for method in o.methods:
            g = ceac[(ceac["method"] == method) & (ceac["strategy"] == strategy)]
            item = pg.PlotDataItem(g["wtp"].to_numpy(), g["probability"].to_numpy(), pen=method_line(method, o))
            self.panel.plot.addItem(item)
            self.curves[method] = item
            entries.append((item, method_words(method, o)))
        wtp = o.scenario.model.valuation.willingness_to_pay
        self.panel.plot.addLine(x=wtp, pen=pg.mkPen("#777777", style=Qt.PenStyle.DotLine))
        self.panel.set_legend(entries)
        self.panel.set_title(f"Probability that {strategy!r} is cost-effective")
        self._describe()

    def _describe(self) -> None:
        o = self.outcome
        comparison = o.summaries.get("acceptability_by_method") if o is not None else None
        if comparison is None:
            self.ranges = pd.DataFrame()
            self.note.setText("")
            return
        reference = reference_method(o.result.table)
        self.ranges = differing_wtp_ranges(comparison, self.threshold.value())
        rows = self.ranges[(self.ranges["strategy"] == self.strategy.currentData())
                           & (self.ranges["method"] != reference)] if len(self.ranges) else self.ranges
        t = self.threshold.value()
        if not len(rows):
            self.note.setText(f"No method changes the probability of {self.strategy.currentData()!r} being "
                              f"cost-effective by more than {t:g} anywhere on the grid (against "
                              f"{method_words(reference, o)}).")
            return
        lines = [f"Where a method changes the probability by more than {t:g} against "
                 f"{method_words(reference, o)} (grid points; the dotted line is the scenario's willingness to pay):"]
        for r in rows.itertuples():
            where = (f"at {number_text(r.wtp_from)}" if r.wtp_from == r.wtp_to else
                     f"from {number_text(r.wtp_from)} to {number_text(r.wtp_to)}")
            lines.append(f"  {method_words(r.method, o)}: willingness to pay {where} (largest "
                         f"{r.largest_difference:+.3f} at {number_text(r.at_wtp)})")
        self.note.setText("\n".join(lines))


class EvpiView(_View):
    """The expected value of perfect information over the willingness to pay, one curve per method:
    per patient, or for a population (patients a year over a number of years, discounted at the
    scenario's cost discount rate: :func:`sim.uncertainty.population_evpi`)."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__("evpi", "Willingness to pay per QALY", "EVPI per patient", parent)
        self.population = QSpinBox()
        self.population.setObjectName("evpi_population")
        self.population.setRange(0, 1_000_000_000)
        self.population.setGroupSeparatorShown(True)
        self.population.setSpecialValueText("per patient")
        self.population.setToolTip("Patients a year the decision affects (per patient: 0)")
        self.years = QSpinBox()
        self.years.setObjectName("evpi_years")
        self.years.setRange(1, 200)
        self.years.setValue(10)
        self.years.setToolTip("Years the decision holds (its time horizon)")
        self.controls.addWidget(QLabel("Population a year"))
        self.controls.addWidget(self.population, 1)
        self.controls.addWidget(QLabel("over years"))
        self.controls.addWidget(self.years)
        self.population.valueChanged.connect(lambda _v: self._draw())
        self.years.valueChanged.connect(lambda _v: self._draw())
        self.curves: dict[str, pg.PlotDataItem] = {}
        self.frames: dict[str, pd.DataFrame] = {}

    def show_outcome(self, outcome: PsaOutcome) -> None:
        self.outcome = outcome
        self._draw()

    def _draw(self) -> None:
        self._clear()
        self.curves, self.frames = {}, {}
        o = self.outcome
        if o is None or "evpi" not in o.summaries:
            return
        frame = o.summaries["evpi"]
        v = o.scenario.model.valuation
        people, years = self.population.value(), self.years.value()
        column = "population_evpi" if people else "evpi"
        entries = []
        for method in o.methods:
            g = frame[frame["method"] == method]
            if people:
                g = population_evpi(g, people, years, v.discount_costs)
            item = pg.PlotDataItem(g["wtp"].to_numpy(), g[column].to_numpy(), pen=method_line(method, o))
            self.panel.plot.addItem(item)
            self.curves[method], self.frames[method] = item, g
            entries.append((item, method_words(method, o)))
        self.panel.plot.addLine(x=v.willingness_to_pay, pen=pg.mkPen("#777777", style=Qt.PenStyle.DotLine))
        self.panel.set_legend(entries)
        if people:
            self.panel.plot.setLabel("left", "Population EVPI", color="#000000")
            self.panel.set_title(f"Population EVPI ({v.currency}): {people:,} patients a year for {years} years")
            factor = float(next(iter(self.frames.values()))["population_factor"].iloc[0]) if self.frames else 0.0
            self.note.setText(f"{people:,} patients a year over {years} years, discounted at {v.discount_costs:g} a "
                              f"year (the scenario's cost discount rate; first year in full): {factor:,.0f} "
                              "discounted patients.")
        else:
            self.panel.plot.setLabel("left", "EVPI per patient", color="#000000")
            self.panel.set_title(f"Expected value of perfect information per patient ({v.currency})")
            self.note.setText("")


class ConvergenceView(_View):
    """The running mean of each strategy's incremental net benefit (simulated rows, at the scenario's
    willingness to pay) as draws accumulate, with a band of ±1.96 MCSE."""

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__("convergence", "Parameter draws", "Incremental net benefit (running mean)", parent)
        self.curves: dict[str, pg.PlotDataItem] = {}
        self.bands: dict[str, tuple[pg.PlotDataItem, pg.PlotDataItem]] = {}

    def show_outcome(self, outcome: PsaOutcome) -> None:
        self.outcome = outcome
        self._clear()
        self.curves, self.bands = {}, {}
        frame = outcome.summaries.get("convergence")
        if frame is None:
            self.note.setText("No convergence: it is computed on the simulated rows (run with patients per draw).")
            return
        entries = []
        for k, (strategy, g) in enumerate(frame.groupby("strategy", sort=False)):
            c = colour(k)
            x, mean, mcse = (g[c_].to_numpy(dtype=float) for c_ in ("draws", "mean", "mcse"))
            ok = np.isfinite(mcse)
            lo = pg.PlotDataItem(x[ok], mean[ok] - Z95 * mcse[ok], pen=pg.mkPen(None))
            hi = pg.PlotDataItem(x[ok], mean[ok] + Z95 * mcse[ok], pen=pg.mkPen(None))
            band = pg.FillBetweenItem(lo, hi, brush=brush(k, 60))
            line = pg.PlotDataItem(x, mean, pen=pen(k))
            for it in (lo, hi, band, line):
                self.panel.plot.addItem(it)
            self.curves[strategy], self.bands[strategy] = line, (lo, hi)
            sample = pg.PlotDataItem([], [], pen=pg.mkPen(None), fillLevel=0, fillBrush=brush(k, 60))  # legend only
            entries += [(line, f"{strategy} vs {g['comparator'].iloc[0]}"), (sample, "±1.96 MCSE")]
        wtp = float(frame["wtp"].iloc[0])
        self.panel.plot.addLine(y=0, pen=pg.mkPen("#999999"))
        self.panel.set_legend(entries)
        self.panel.set_title(f"Convergence of the incremental net benefit at {number_text(wtp)} per QALY")
        self.note.setText("")


class PsaTablesView(QWidget):
    """Any table of the analysis (summaries, per-draw results, parameter draws), saved as CSV from the
    button or the table's context menu (``save_requested``)."""

    save_requested = Signal(object, str)

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.choice = QComboBox()
        self.choice.setObjectName("psa_table")
        self.table = TableView("psa")
        self.save = QPushButton("Save table as CSV…")
        row = QHBoxLayout()
        row.addWidget(QLabel("Table"))
        row.addWidget(self.choice, 1)
        row.addWidget(self.save)
        layout = QVBoxLayout(self)
        layout.addLayout(row)
        layout.addWidget(self.table, 1)
        self.frames: dict[str, pd.DataFrame] = {}
        self.choice.activated.connect(lambda _i: self._show())
        self.table.save_requested.connect(self.save_requested)
        self.save.clicked.connect(lambda: self.save_requested.emit(self.table.model().frame(), self.table.name))

    def show_outcome(self, outcome: PsaOutcome) -> None:
        r = outcome.result
        self.frames = {**{f"psa_{k}": v for k, v in outcome.summaries.items()},
                       "psa_per_draw": r.table, "psa_parameter_draws": r.values.reset_index()}
        self.choice.clear()
        for name in self.frames:
            self.choice.addItem(name.removeprefix("psa_").replace("_", " "), name)
        self._show()

    def _show(self) -> None:
        name = self.choice.currentData()
        if name is None:
            return
        self.table.name = name
        self.table.set_frame(self.frames[name])
