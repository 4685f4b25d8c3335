"""Curves per strategy: survival and state occupancy, simulated (with 95% bands), exact, and the
cycle-based cohort traces the user ticks, on the same axes.

Curve items are created once and updated with ``setData``. The plot-ready series and the cohort
traces are computed by ``sim`` (through :mod:`gui.results.series`) in a worker thread; the view only
shows them. ``drawn`` is emitted each time the plots show everything currently asked for.
"""

from __future__ import annotations

import math

import pyqtgraph as pg
from PySide6.QtCore import Qt, Signal, Slot
from PySide6.QtGui import QColor, QPen
from PySide6.QtWidgets import (QCheckBox, QComboBox, QGridLayout, QGroupBox, QHBoxLayout, QLabel, QSplitter,
                               QVBoxLayout, QWidget)

from sim.reference.cohort import Conversion
from sim.pipeline import horizon_range
from sim.pipeline.run import RunResults

from .. import palette
from ..worker import FunctionWorker, Job
from .plot_panel import PlotPanel
from .series import Series, StrategyCurves, TraceCurves, compute_traces, cycle_label, same_curves, simulated_curves

__all__ = ["CurvesView"]

TraceKey = tuple[str, str, float]  # strategy, method, cycle length
SYMBOLS = ["o", "s", "t", "d", "+", "x"]
MAX_SYMBOL_POINTS = 80


def _compute(results: RunResults, with_simulated: bool, requests: list[TraceKey]
             ) -> tuple[dict[str, StrategyCurves] | None, dict[TraceKey, TraceCurves]]:
    sim = simulated_curves(results) if with_simulated else None
    traces = compute_traces(results.scenario.model, requests, float(results.grid[-1]),
                            results.scenario.run.tunnel_entry)
    return sim, traces


class _Layer:
    """The items of one plot: simulated curve with band, exact curve, cohort curves by key."""

    def __init__(self, panel: PlotPanel) -> None:
        self.panel = panel
        plot = panel.plot
        edge = QPen(QColor(palette.colour(0)))
        edge.setCosmetic(True)
        edge.setWidthF(0.8)
        edge.setColor(QColor(palette.colour(0)).lighter(160))
        self.lower = pg.PlotCurveItem(pen=edge)
        self.upper = pg.PlotCurveItem(pen=edge)
        self.band = pg.FillBetweenItem(self.lower, self.upper, brush=palette.brush(0, 60))
        self.simulated = pg.PlotDataItem(pen=palette.pen(0, 2.2), antialias=True)
        self.exact = pg.PlotDataItem(pen=palette.pen(palette.EXACT, 2.4), antialias=True)
        for z, item in enumerate((self.band, self.lower, self.upper, self.simulated, self.exact)):
            item.setZValue(z if item is not self.exact else 20)  # exact on top of the cohort curves
            plot.addItem(item)
        # the earliest horizon, when the curves go on to a later one (attained-age horizon)
        horizon_pen = pg.mkPen("#777777", width=1.2, style=Qt.PenStyle.DashLine)
        self.horizon = pg.InfiniteLine(angle=90, movable=False, pen=horizon_pen)
        self.horizon_sample = pg.PlotDataItem(pen=horizon_pen)  # empty: stands for the line in the legend
        for item in (self.horizon, self.horizon_sample):
            item.setVisible(False)
            plot.addItem(item)
        self.cohort: dict[tuple[str, float], pg.PlotDataItem] = {}

    def ensure_cohort(self, keys: list[tuple[str, float]]) -> None:
        """Create (once) a curve item per cohort option; drop items of options no longer offered."""
        for key in list(self.cohort):
            if key not in keys:
                self.panel.plot.removeItem(self.cohort.pop(key))
        for key in keys:
            if key not in self.cohort:
                item = pg.PlotDataItem(antialias=True)
                item.setZValue(10)
                item.setVisible(False)
                self.panel.plot.addItem(item)
                self.cohort[key] = item

    def show_simulated(self, s: Series | None) -> None:
        if s is None or len(s) == 0:
            for item in (self.simulated, self.lower, self.upper):
                item.setData([], [])
            return
        self.simulated.setData(s.x, s.y)
        self.lower.setData(s.x, s.lower if s.lower is not None else s.y)
        self.upper.setData(s.x, s.upper if s.upper is not None else s.y)

    def show_exact(self, s: Series | None) -> None:
        self.exact.setVisible(s is not None)
        if s is None:
            self.exact.setData([], [])
        else:
            self.exact.setData(s.x, s.y)


class CurvesView(QWidget):
    """See the module docstring. Call :meth:`show_results`; ``drawn`` follows once plotted."""

    drawn = Signal()

    def __init__(self, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self._results: RunResults | None = None
        self._sim: dict[str, StrategyCurves] | None = None
        self._traces: dict[TraceKey, TraceCurves] = {}
        self._generation = 0
        self._job: Job | None = None
        self._job_generation = -1
        self._options: list[tuple[str, float]] = []
        self._checks: dict[tuple[str, float], QCheckBox] = {}
        self._build()

    # ------------------------------------------------------------------ layout
    def _build(self) -> None:
        self.strategy = QComboBox()
        self.strategy.setToolTip("Strategy whose curves are shown")
        self.state = QComboBox()
        self.state.setToolTip("State whose occupancy is shown on the right")
        top = QHBoxLayout()
        top.addWidget(QLabel("Strategy"))
        top.addWidget(self.strategy)
        top.addSpacing(16)
        top.addWidget(QLabel("State (occupancy plot)"))
        top.addWidget(self.state)
        top.addStretch(1)
        self.status = QLabel()
        top.addWidget(self.status)

        self.options_box = QGroupBox("Cycle-based approximations to show (cohort traces: conversion × cycle length)")
        self.options_grid = QGridLayout(self.options_box)
        self.options_grid.setHorizontalSpacing(14)
        self.options_grid.setVerticalSpacing(2)

        self.note = QLabel()
        self.note.setWordWrap(True)
        self.note.setVisible(False)

        for combo in (self.strategy, self.state):
            combo.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToContents)
        self.survival_panel = PlotPanel("survival", "time since entry (years)", "probability alive",
                                        legend_columns=1)
        self.occupancy_panel = PlotPanel("occupancy", "time since entry (years)", "probability in state",
                                         legend_columns=1)
        self._survival = _Layer(self.survival_panel)
        self._occupancy = _Layer(self.occupancy_panel)
        self._show_waiting("Run the scenario to see its curves")
        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(self.survival_panel)
        split.addWidget(self.occupancy_panel)
        split.setChildrenCollapsible(False)

        layout = QVBoxLayout(self)
        layout.addLayout(top)
        layout.addWidget(self.options_box)
        layout.addWidget(self.note)
        layout.addWidget(split, 1)

        self.strategy.currentIndexChanged.connect(self._on_selection_changed)
        self.state.currentIndexChanged.connect(self._on_selection_changed)

    def _set_options(self, methods: list[str], cycle_lengths: list[float]) -> None:
        options = [(m, h) for m in methods for h in cycle_lengths]
        if options == self._options:
            return
        previous = {k: c.isChecked() for k, c in self._checks.items()}
        while self.options_grid.count():
            w = self.options_grid.takeAt(0).widget()
            if w is not None:
                w.deleteLater()
        self._checks = {}
        for j, h in enumerate(cycle_lengths):
            head = QLabel(cycle_label(h))
            head.setAlignment(Qt.AlignmentFlag.AlignCenter)
            self.options_grid.addWidget(head, 0, j + 1)
        near_year = min(cycle_lengths, key=lambda h: abs(math.log(h))) if cycle_lengths else None
        for i, m in enumerate(methods):
            self.options_grid.addWidget(QLabel(m), i + 1, 0)
            for j, h in enumerate(cycle_lengths):
                box = QCheckBox()
                box.setToolTip(f"cycle-based: {m}, {cycle_label(h)}")
                default = h == near_year and m in (Conversion.PER_TRANSITION.value, Conversion.EXPM.value)
                box.setChecked(previous.get((m, h), default) if previous else default)
                box.toggled.connect(self._on_selection_changed)
                self.options_grid.addWidget(box, i + 1, j + 1, Qt.AlignmentFlag.AlignCenter)
                self._checks[(m, h)] = box
        self.options_grid.setColumnStretch(len(cycle_lengths) + 1, 1)
        hint = QLabel("In the plots: scroll to zoom, drag to pan; the small “A” button in a plot's corner "
                      "shows everything again.")
        hint.setStyleSheet("color: #555555;")
        self.options_grid.addWidget(hint, len(methods) + 1, 0, 1, len(cycle_lengths) + 2)
        self._options = options
        self._survival.ensure_cohort(options)
        self._occupancy.ensure_cohort(options)

    # ------------------------------------------------------------------ public API
    def show_results(self, results: RunResults) -> None:
        """Show a new run; ``drawn`` is emitted once its curves are on screen."""
        self._results = results
        self._generation += 1
        self._sim = None
        self._traces = {}
        model = results.scenario.model
        for combo, items in ((self.strategy, list(model.strategy_names)), (self.state, list(model.state_names))):
            current = combo.currentText()
            combo.blockSignals(True)
            combo.clear()
            combo.addItems(items)
            if current in items:
                combo.setCurrentText(current)
            elif combo is self.state:
                initial = model.population.initial_states
                living = [s.name for s in model.states if not s.absorbing and s.name not in initial]
                combo.setCurrentText(living[0] if living else items[0])
            combo.blockSignals(False)
        self._set_options([c.value for c in Conversion], list(results.settings["cycle_lengths"]))
        self._show_waiting("Computing curves…")
        self._schedule()

    def _show_waiting(self, title: str) -> None:
        """Empty plots say why they are empty, on a probability axis [0, 1] (not pyqtgraph's empty
        −0.4…0.4 axes, which look broken)."""
        for layer in (self._survival, self._occupancy):
            layer.show_simulated(None)
            layer.show_exact(None)
            for item in layer.cohort.values():
                item.setVisible(False)
            layer.panel.set_legend([])
            layer.panel.set_title(title)
            layer.panel.plot.setYRange(0.0, 1.0, padding=0.02)
            if self._results is not None:
                layer.panel.plot.setXRange(0.0, float(self._results.grid[-1]), padding=0.01)

    def checked_options(self) -> list[tuple[str, float]]:
        return [k for k in self._options if self._checks[k].isChecked()]

    def set_option_checked(self, method: str, cycle_length: float, checked: bool = True) -> None:
        self._checks[(method, cycle_length)].setChecked(checked)

    def is_busy(self) -> bool:
        return self._job is not None

    def shutdown(self) -> None:
        if self._job is not None:
            self._job.stop()
            self._job = None

    # ------------------------------------------------------------------ computing
    def _missing(self) -> list[TraceKey]:
        strategy = self.strategy.currentText()
        return [(strategy, m, h) for m, h in self.checked_options() if (strategy, m, h) not in self._traces]

    def _schedule(self) -> None:
        """Start a background job for whatever is missing, or draw if nothing is."""
        if self._results is None or self._job is not None:
            return
        missing = self._missing()
        if self._sim is not None and not missing:
            self._draw()
            return
        self.status.setText("Computing curves…")
        job = Job(FunctionWorker(_compute, self._results, self._sim is None, missing))
        job.finished.connect(self._on_computed)
        job.failed.connect(self._on_failed)
        self._job, self._job_generation = job, self._generation
        job.start()

    @Slot(object)
    def _on_computed(self, value: object) -> None:
        current = self._job_generation == self._generation
        self._job = None
        if current:
            sim, traces = value
            if sim is not None:
                self._sim = sim
            self._traces.update(traces)
        self.status.setText("")
        self._schedule()

    @Slot(str)
    def _on_failed(self, message: str) -> None:
        current = self._job_generation == self._generation
        self._job = None
        self.status.setText("")
        if not current:  # a failure of an older run's job: compute the current run's curves
            self._schedule()
            return
        self.note.setText(f"The curves could not be computed: {message}")
        self.note.setVisible(True)
        self.drawn.emit()

    @Slot()
    def _on_selection_changed(self, *_: object) -> None:
        self._schedule()

    # ------------------------------------------------------------------ drawing
    def _draw(self) -> None:
        results, sim = self._results, self._sim
        if results is None or sim is None:
            return
        strategy, state = self.strategy.currentText(), self.state.currentText()
        curves = sim.get(strategy)
        if curves is None:
            return
        n = int(results.settings["patients"])
        t_end = float(results.grid[-1])
        notes = []
        if curves.exact_survival is None:
            note = results.exact_note or "the run has no exact solution"
            notes.append("No exact curve. " + note[:1].upper() + note[1:] + ("" if note.endswith(".") else "."))
        self._survival.show_simulated(curves.survival)
        self._survival.show_exact(curves.exact_survival)
        self._occupancy.show_simulated(curves.occupancy.get(state))
        self._occupancy.show_exact(curves.exact_occupancy.get(state) if curves.exact_occupancy else None)

        shown: list[tuple[tuple[str, float], str]] = []
        drawn_series: tuple[dict[str, Series], dict[str, Series]] = ({}, {})
        for key in self._options:
            trace = self._traces.get((strategy, *key)) if self._checks[key].isChecked() else None
            if trace is not None and trace.note:
                notes.append(trace.note)
            visible = trace is not None and trace.survival is not None
            for layer, series, seen in ((self._survival, trace.survival if visible else None, drawn_series[0]),
                                        (self._occupancy, trace.occupancy.get(state) if visible else None,
                                         drawn_series[1])):
                item = layer.cohort[key]
                item.setVisible(series is not None)
                if series is None:
                    item.setData([], [])
                    continue
                seen[f"{key[0]}, {cycle_label(key[1])}"] = series
                # colour: the method (as in the error study); marker: the cycle length, not the order shown
                k = list(dict.fromkeys(h for _, h in self._options)).index(key[1])
                symbol = SYMBOLS[k % len(SYMBOLS)] if len(series) <= MAX_SYMBOL_POINTS else None
                colour = palette.method_colour(key[0])
                item.setData(series.x, series.y, pen=palette.method_pen(key[0], 2.0), symbol=symbol, symbolSize=6,
                             symbolPen=pg.mkPen(colour), symbolBrush=colour)
            if visible:
                shown.append((key, f"cycle-based: {key[0]}, {cycle_label(key[1])}"))

        # past the earliest horizon every curve counts each patient at min(t, own horizon)
        # (docs/methods.md, 'Curves to the last horizon'); before it that is Kaplan-Meier / Aalen-Johansen
        first, last = horizon_range(results.scenario)
        extended = last > first * (1 + 1e-12)
        for layer, estimator in ((self._survival, "Kaplan–Meier"), (self._occupancy, "Aalen–Johansen")):
            if extended:
                estimator = "each patient at min(t, own horizon)"
            entries = [(layer.simulated, f"simulated (n = {n:,}), {estimator}; band: 95% CI")]
            if curves.exact_survival is not None:
                entries.append((layer.exact, "exact (Kolmogorov equations)"))
            entries += [(layer.cohort[key], label) for key, label in shown]
            layer.horizon.setVisible(extended)
            layer.horizon_sample.setVisible(extended)
            if extended:
                layer.horizon.setPos(first)
                entries.append((layer.horizon_sample, f"earliest horizon ({first:.4g} years): past it, each "
                                                      f"patient counts in their state at their own horizon"))
            layer.panel.set_legend(entries)
            layer.panel.plot.setXRange(0.0, t_end, padding=0.01)
        self.survival_panel.set_title(f"Survival — {strategy}")
        self.occupancy_panel.set_title(f"Probability in “{state}” — {strategy}")
        self.survival_panel.plot.setYRange(0.0, 1.0, padding=0.02)
        self.occupancy_panel.plot.enableAutoRange(axis="y")
        self.occupancy_panel.save_bar.name = f"occupancy_{state}_{strategy}".replace(" ", "_")
        self.survival_panel.save_bar.name = f"survival_{strategy}".replace(" ", "_")
        same_survival, same_state = same_curves(drawn_series[0]), same_curves(drawn_series[1])
        places = ([("both plots", same_survival)] if same_survival == same_state else
                  [("survival", same_survival), (f"“{state}”", same_state)])
        for where, same in places:
            if same:
                notes.append(f"Cycle-based curves on top of each other ({where}, same values): "
                             + "; ".join(" = ".join(g) for g in same) + ".")
        self.note.setText("\n".join(notes))
        self.note.setVisible(bool(notes))
        self.drawn.emit()

    def legend_labels(self) -> tuple[list[str], list[str]]:
        """Legend texts of the survival and occupancy plots."""
        return self.survival_panel.legend_labels(), self.occupancy_panel.legend_labels()

    def curve_points(self) -> dict[str, int]:
        """Number of points in each visible curve of the survival plot (for tests)."""
        def size(item: pg.PlotDataItem) -> int:
            return 0 if item.xData is None else len(item.xData)

        out = {"simulated": size(self._survival.simulated), "exact": size(self._survival.exact)}
        for (m, h), item in self._survival.cohort.items():
            if item.isVisible():
                out[f"{m}, {cycle_label(h)}"] = size(item)
        return out
