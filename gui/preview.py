"""Live preview of one transition's hazard: h, survival, and the per-cycle probability for a chosen
cycle length, with the small-rate approximation ``p ~ r h`` and its error.

The numbers come from :mod:`sim` (``Hazard.cumhazard``, ``Hazard.never_probability``,
``sim.hazards.units.risk_from_rate``) through :func:`preview_curves` and :func:`cycle_point`, which hold no
Qt; the widget only plots them. The per-cycle probability at clock value ``t`` is the conditional
``p = 1 - S(t + h) / S(t) = 1 - exp(-(H(t + h) - H(t)))``; for an attained-age clock ``t`` is the age.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import (QComboBox, QDoubleSpinBox, QGridLayout, QHBoxLayout, QLabel, QVBoxLayout,
                               QWidget)

from gui.document import ScenarioDocument
from gui.palette import OKABE_ITO
from sim.hazards import Hazard
from sim.model.multistate import BACKGROUND, Clock, Model
from sim.io.scenario import Scenario, parse_duration
from sim.hazards.units import risk_from_rate

__all__ = ["HazardPreview", "PreviewCurves", "CyclePoint", "preview_curves", "cycle_point", "clock_range",
           "make_plot", "CYCLE_CHOICES"]

CYCLE_CHOICES = ("1 week", "1 month", "3 months", "6 months", "1 year", "2 years")
_TEXT = OKABE_ITO["black"]


# ----------------------------------------------------------------------------- numbers (no Qt)
@dataclass(frozen=True)
class PreviewCurves:
    """Curves on the clock grid ``t`` (years or ages), from ``t[0]`` on.

    survival : ``S(t) / S(t0)`` for this cause alone; p_cycle : ``1 - S(t + cycle) / S(t)``;
    p_small : the small-rate approximation ``r h`` with ``r`` the cycle-average hazard
    ``(H(t + h) - H(t)) / h``; never : probability the event never happens from ``t0``, or ``None``
    when the hazard is proper.
    """

    t: np.ndarray
    hazard: np.ndarray
    survival: np.ndarray
    p_cycle: np.ndarray
    p_small: np.ndarray
    cycle: float
    never: float | None


@dataclass(frozen=True)
class CyclePoint:
    """The conversion at one clock value: cycle-average rate, exact probability, ``r h`` and error."""

    t: float
    cycle: float
    rate: float
    probability: float
    small: float
    error: float

    @property
    def relative_error(self) -> float:
        return self.error / self.probability if self.probability > 0 else math.nan


def clock_range(model: Model, clock: Clock | str) -> tuple[float, float]:
    """Clock values worth plotting: entry ages to the horizon for the age clock, else 0 to the
    longest follow-up."""
    pop, hz = model.population.entry_age, model.horizon
    if Clock(clock) == Clock.AGE:
        end = hz.value if hz.scale == "age" else pop.high + hz.value
        return float(pop.low), float(max(end, pop.low + 1.0))
    longest = float(hz.time_limit(np.array([pop.low]))[0])
    return 0.0, max(longest, 1.0)


def preview_curves(hazard: Hazard, t0: float, t1: float, cycle: float, points: int = 301) -> PreviewCurves:
    """Hazard, survival from ``t0`` and per-cycle probabilities on ``points`` clock values."""
    t = np.linspace(t0, t1, points)
    h = hazard.hazard(t)
    H = hazard.cumhazard(t)
    dH = hazard.cumhazard(t + cycle) - H
    with np.errstate(invalid="ignore"):
        surv = np.exp(-(H - H[0]))
    never = None
    if math.isfinite(hazard.cumhazard_limit):
        never = float(np.exp(-(hazard.cumhazard_limit - H[0])))
    return PreviewCurves(t=t, hazard=np.where(np.isfinite(h), h, np.nan), survival=surv,
                         p_cycle=-np.expm1(-dH), p_small=dH, cycle=cycle, never=never)


def cycle_point(hazard: Hazard, t: float, cycle: float) -> CyclePoint:
    """The rate-to-probability conversion over the cycle starting at clock value ``t``: the
    cycle-average rate ``r``, ``p = 1 - exp(-r h)`` (``sim.hazards.units.risk_from_rate``, equal to
    ``1 - S(t + h) / S(t)``), the approximation ``r h`` and its error ``r h - p``."""
    dH = float(hazard.cumhazard(t + cycle) - hazard.cumhazard(t))
    rate = dH / cycle
    p = risk_from_rate(rate, cycle, "years")
    return CyclePoint(t=t, cycle=cycle, rate=rate, probability=p, small=dH, error=dH - p)


# ----------------------------------------------------------------------------- plots
def make_plot(title: str, x_label: str, y_label: str) -> pg.PlotWidget:
    """A white pyqtgraph plot with black axes and labels."""
    w = pg.PlotWidget(background="w")
    w.setMinimumSize(150, 160)
    item = w.getPlotItem()
    item.showGrid(x=True, y=True, alpha=0.25)
    item.setMenuEnabled(False)
    item.layout.setContentsMargins(4, 4, 14, 4)  # room for the last tick label on the right
    for side in ("left", "bottom"):
        axis = item.getAxis(side)
        axis.setPen(pg.mkPen(_TEXT))
        axis.setTextPen(pg.mkPen(_TEXT))
        axis.enableAutoSIPrefix(False)  # plain numbers: a modeller reads 0.08, not 80 (x0.001)
    item.setTitle(title, color=_TEXT, size="10pt")
    item.setLabel("bottom", x_label, color=_TEXT)
    item.setLabel("left", y_label, color=_TEXT)
    return w


def _pen(name: str, style: Qt.PenStyle = Qt.PenStyle.SolidLine) -> object:
    return pg.mkPen(OKABE_ITO[name], width=2, style=style)


# ----------------------------------------------------------------------------- the widget
class HazardPreview(QWidget):
    """Plots of the selected transition (or background death) under a strategy, for one sex."""

    def __init__(self, document: ScenarioDocument, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.document = document
        self._model: Model | None = None
        self._exit = ""
        self.curves: PreviewCurves | None = None
        self.point: CyclePoint | None = None
        self._build()
        document.validated.connect(self._on_validated)
        document.loaded.connect(self._on_loaded)
        self._on_validated(document.scenario, document.errors)

    def _build(self) -> None:
        self.exit_combo = QComboBox()
        self.exit_combo.setToolTip("Transition to preview")
        self.strategy_combo = QComboBox()
        self.strategy_combo.setToolTip("Strategy whose hazard ratio or replacement applies")
        self.sex_combo = QComboBox()
        self.sex_combo.setToolTip("Sex (background mortality differs by sex)")
        self.cycle_combo = QComboBox()
        self.cycle_combo.setEditable(True)
        self.cycle_combo.addItems(CYCLE_CHOICES)
        self.cycle_combo.setCurrentText("1 year")
        self.cycle_combo.setToolTip("Cycle length of a cohort model, e.g. '1 month' or '0.5' (years)")
        self.reference = QDoubleSpinBox()
        self.reference.setDecimals(2)
        self.reference.setRange(0.0, 200.0)
        self.reference.setToolTip("Clock value (age or years) at which the conversion numbers are shown")
        controls = QGridLayout()
        cells = (("Transition", self.exit_combo), ("Strategy", self.strategy_combo), ("Sex", self.sex_combo),
                 ("Cycle length", self.cycle_combo), ("Numbers at clock value", self.reference))
        for k, (label, w) in enumerate(cells):
            if isinstance(w, QComboBox):
                w.setSizeAdjustPolicy(QComboBox.SizeAdjustPolicy.AdjustToMinimumContentsLengthWithIcon)
                w.setMinimumContentsLength(8)
            row, col = divmod(k, 3)
            controls.addWidget(QLabel(label), row, 2 * col)
            controls.addWidget(w, row, 2 * col + 1)
        for col in (1, 3, 5):
            controls.setColumnStretch(col, 1)
        self.hazard_plot = make_plot("Hazard h", "", "per year")
        self.survival_plot = make_plot("Survival S", "", "this cause alone")
        self.cycle_plot = make_plot("p per cycle", "", "")
        self.hazard_curve = self.hazard_plot.plot(pen=_pen("blue"), connect="finite")
        self.survival_curve = self.survival_plot.plot(pen=_pen("blue"), connect="finite")
        self.never_line = pg.InfiniteLine(angle=0, pen=_pen("vermillion", Qt.PenStyle.DashLine))
        self.survival_plot.addItem(self.never_line)
        self.p_curve = self.cycle_plot.plot(pen=_pen("blue"))
        self.p_small_curve = self.cycle_plot.plot(pen=_pen("vermillion", Qt.PenStyle.DashLine))
        self.survival_plot.getPlotItem().setYRange(0.0, 1.02, padding=0)
        self.survival_plot.getPlotItem().enableAutoRange(y=False)
        self.ref_lines = []
        for plot in (self.hazard_plot, self.survival_plot, self.cycle_plot):
            line = pg.InfiniteLine(angle=90, pen=pg.mkPen(OKABE_ITO["bluish green"], style=Qt.PenStyle.DotLine))
            plot.addItem(line)
            self.ref_lines.append(line)
        plots = QHBoxLayout()
        for p in (self.hazard_plot, self.survival_plot):
            plots.addWidget(p)
        cycle_column = QVBoxLayout()
        cycle_column.addWidget(self.cycle_plot, 1)
        key = QLabel(f'<span style="color:{OKABE_ITO["blue"]}">\u2014\u2014</span> 1 \u2212 S(t+h)/S(t) &nbsp; '
                     f'<span style="color:{OKABE_ITO["vermillion"]}">- - -</span> r\u00b7h (small-rate approximation)')
        key.setWordWrap(True)
        cycle_column.addWidget(key)
        plots.addLayout(cycle_column)
        self.info = QLabel()
        self.info.setObjectName("preview_info")
        self.info.setWordWrap(True)
        self.info.setTextInteractionFlags(Qt.TextInteractionFlag.TextSelectableByMouse)
        layout = QVBoxLayout(self)
        layout.addLayout(controls)
        layout.addLayout(plots, 1)
        layout.addWidget(self.info)
        self.exit_combo.currentTextChanged.connect(self._on_selection_changed)
        self.strategy_combo.currentTextChanged.connect(self._on_selection_changed)
        self.sex_combo.currentTextChanged.connect(self._on_selection_changed)
        self.cycle_combo.currentTextChanged.connect(self._on_selection_changed)
        self.reference.valueChanged.connect(self._on_reference_changed)

    # ------------------------------------------------------------------ public
    def select_exit(self, name: str) -> None:
        """Preview transition ``name`` (or ``"background death"``)."""
        self._exit = name
        idx = self.exit_combo.findText(name)
        if idx >= 0:
            self.exit_combo.setCurrentIndex(idx)

    def cycle_length(self) -> float | None:
        """The chosen cycle length in years (``sim.io.scenario.parse_duration``), or None if unreadable."""
        text = self.cycle_combo.currentText().strip()
        try:
            return parse_duration(float(text) if _is_number(text) else text)
        except ValueError:
            return None

    def selected_hazard(self) -> tuple[Hazard, Clock] | None:
        """Hazard and clock of the selected exit under the selected strategy and sex."""
        model = self._model
        if model is None or not self.exit_combo.currentText():
            return None
        strategy = self.strategy_combo.currentText() or model.strategy_names[0]
        sexes = model.population.sexes
        sex = self.sex_combo.currentText()
        k = sexes.index(sex) if sex in sexes else 0
        for exits in model.resolve(strategy):
            for ex in exits:
                if ex.name == self.exit_combo.currentText():
                    return ex.hazards[k], ex.clock
        return None

    # ------------------------------------------------------------------ slots
    def _on_validated(self, scenario: Scenario | None, errors: list) -> None:
        if scenario is None:
            self.setToolTip("The preview shows the last valid version of the scenario.")
            if self._model is not None:
                self.info.setText("<i>Showing the last valid version: the scenario has a problem "
                                  "(marked in the editor).</i><br>" + self._info_text())
            return
        self.setToolTip("")
        old_clock_range = self._current_range()
        self._model = scenario.model
        exits = list(self._model.exit_names)
        keep = self._exit or self.exit_combo.currentText()
        self._set_items(self.exit_combo, exits, keep)
        self._set_items(self.strategy_combo, list(self._model.strategy_names), self.strategy_combo.currentText())
        self._set_items(self.sex_combo, list(self._model.population.sexes), self.sex_combo.currentText())
        if self._current_range() != old_clock_range:
            self._reset_reference()
        self._update()

    def _on_loaded(self) -> None:
        """Another scenario: nothing of the previous one stays on screen (until this one is valid)."""
        if self.document.scenario is not None:
            return  # already shown by _on_validated
        self._model, self.curves, self.point = None, None, None
        for combo in (self.exit_combo, self.strategy_combo, self.sex_combo):
            self._set_items(combo, [], "")
        for curve in (self.hazard_curve, self.survival_curve, self.p_curve, self.p_small_curve):
            curve.setData([], [])
        self.never_line.setVisible(False)
        self.info.setText("The preview appears once the scenario is valid.")

    def show_background(self) -> None:
        """Preview background death (what the background-mortality section edits), by sex."""
        self.select_exit(BACKGROUND)

    def _on_selection_changed(self, _text: str = "") -> None:
        if self.sender() is self.exit_combo and self.exit_combo.currentText():
            self._exit = self.exit_combo.currentText()
            self._reset_reference()
        self._update()

    def _on_reference_changed(self, _value: float) -> None:
        self._update()

    # ------------------------------------------------------------------ display
    @staticmethod
    def _set_items(combo: QComboBox, items: list[str], keep: str) -> None:
        combo.blockSignals(True)
        combo.clear()
        combo.addItems(items)
        if keep in items:
            combo.setCurrentText(keep)
        combo.blockSignals(False)

    def _current_range(self) -> tuple[float, float] | None:
        sel = self.selected_hazard()
        return clock_range(self._model, sel[1]) if sel and self._model is not None else None

    def _reset_reference(self) -> None:
        rng = self._current_range()
        if rng is None:
            return
        self.reference.blockSignals(True)
        self.reference.setRange(rng[0], rng[1])
        start = self._model.population.entry_age.mean if self.selected_hazard()[1] == Clock.AGE else rng[0]
        self.reference.setValue(round(float(start)))
        self.reference.blockSignals(False)

    def _update(self) -> None:
        sel = self.selected_hazard()
        cycle = self.cycle_length()
        self.sex_combo.setEnabled(self.exit_combo.currentText() == BACKGROUND)
        if sel is None or cycle is None or self._model is None:
            self.info.setText("Choose a transition and a cycle length (e.g. '1 month')." if self._model
                              else "The preview appears once the scenario is valid.")
            return
        hazard, clock = sel
        t0, t1 = clock_range(self._model, clock)
        self.curves = preview_curves(hazard, t0, t1, cycle)
        self.point = cycle_point(hazard, float(self.reference.value()), cycle)
        x_label = "attained age (years)" if clock == Clock.AGE else (
            "time since entry (years)" if clock == Clock.ENTRY else "time in state (years)")
        c = self.curves
        self.hazard_curve.setData(c.t, c.hazard)
        top = float(np.nanmax(c.hazard)) if np.any(np.isfinite(c.hazard)) else 0.0
        self.hazard_plot.getPlotItem().setYRange(0.0, top * 1.1 if top > 0 else 1.0, padding=0)
        self.survival_curve.setData(c.t, c.survival)
        self.p_curve.setData(c.t, c.p_cycle)
        self.p_small_curve.setData(c.t, c.p_small)
        both = np.concatenate([np.asarray(c.p_cycle, float), np.asarray(c.p_small, float)])
        p_top = float(np.nanmax(both[np.isfinite(both)])) if np.any(np.isfinite(both)) else 0.0
        # from 0, so that flat lines (constant hazards) keep readable tick labels
        self.cycle_plot.getPlotItem().setYRange(0.0, p_top * 1.1 if p_top > 0 else 1.0, padding=0)
        self.never_line.setVisible(c.never is not None)
        if c.never is not None:
            self.never_line.setValue(c.never)
        for line in self.ref_lines:
            line.setValue(self.point.t)
        for plot in (self.hazard_plot, self.survival_plot, self.cycle_plot):
            plot.getPlotItem().setLabel("bottom", x_label, color=_TEXT)
        self.survival_plot.getPlotItem().setTitle(
            f"Survival from {'age ' if clock == Clock.AGE else 't = '}{t0:g}", color=_TEXT, size="10pt")
        self.cycle_plot.getPlotItem().setTitle(f"p per cycle of {self.cycle_combo.currentText()}",
                                               color=_TEXT, size="10pt")
        self.info.setText(self._info_text())

    def _info_text(self) -> str:
        p, c = self.point, self.curves
        if p is None or c is None:
            return ""
        where = f"age {p.t:g}" if self.selected_hazard() and self.selected_hazard()[1] == Clock.AGE else f"t = {p.t:g}"
        rel = p.relative_error
        text = (f"Cycle of {self.cycle_combo.currentText()} starting at {where}: cycle-average rate "
                f"r = {p.rate:.6g} per year; probability p = 1 \u2212 S(t+h)/S(t) = {p.probability:.6g}; "
                f"small-rate approximation r\u00b7h = {p.small:.6g}, error {p.error:+.3g}"
                + (f" ({rel:+.2%} of p)." if math.isfinite(rel) else "."))
        if c.never is not None:
            text += (f"<br>The event may never happen: probability {c.never:.4g} from "
                     f"{'age ' if where.startswith('age') else 't = '}{c.t[0]:g} (dashed line in the survival plot).")
        return text


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True
