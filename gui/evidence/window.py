"""The "Fit from data" window: survival evidence in (patient-level data or a published curve), fits
by maximum likelihood off the GUI thread, the plots and the AIC/BIC table, and one action that puts
the chosen fit into a transition of the open scenario (undoable, comments kept) and, for two arms,
optionally the other arm's hazard ratio into a strategy with the joint covariance group.

The window composes :class:`~gui.evidence.source_panel.SourcePanel`, the fit controls, the table,
:class:`~gui.evidence.apply_panel.ApplyPanel` and the plots (:mod:`gui.evidence.plots`); everything
it shows comes from ``sim.evidence`` (:func:`~sim.evidence.fit_family`,
:func:`~sim.evidence.fit_table`, :func:`~sim.evidence.below_background`,
:func:`~sim.evidence.background_on_fit_clock`, :func:`~sim.evidence.follow_up_years`,
:func:`~sim.evidence.compared_arm`) and ``sim.analysis`` (Kaplan-Meier).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from PySide6.QtCore import QSortFilterProxyModel, Qt, Signal
from PySide6.QtGui import QKeySequence
from PySide6.QtWidgets import (QAbstractItemView, QComboBox, QDoubleSpinBox, QGroupBox, QHBoxLayout, QLabel,
                               QMainWindow, QProgressBar, QPushButton, QScrollArea, QSplitter, QTableView, QTabWidget,
                               QVBoxLayout, QWidget)

from gui.document import ScenarioDocument
from gui.palette import OKABE_ITO
from gui.results.table_model import RAW_ROLE, DataFrameModel
from gui.worker import Job
from sim.evidence import (Fit, KaplanMeier, background_on_fit_clock, below_background, fit_table, follow_up_years,
                          kaplan_meier_by_arm, numbers_at_risk)
from sim.hazards import from_years, to_years
from sim.problems import ValidationError

from .apply_panel import ApplyPanel
from .families_panel import FamiliesPanel
from .fit_worker import FitOutcome, FitRequest, FitWorker
from .plots import DiagnosticPlot, HazardPlot, SurvivalPlot, nice_ticks
from .scenario_edit import FitChoice, fit_edit, waning_note
from .source_panel import Evidence, SourcePanel
from .words import error_words

__all__ = ["EvidenceWindow", "TABLE_COLUMNS"]

#: Columns of the fit table in the order shown (those of :func:`sim.evidence.fit_table`).
TABLE_COLUMNS = ("family", "AIC", "dAIC", "BIC", "dBIC", "loglik", "k", "effect", "converged", "parameters")
_GRID = 301


class EvidenceWindow(QMainWindow):
    """Fit survival curves to evidence and put a fit into the open scenario.

    Signals
    -------
    fits_shown()
        A fit run ended (finished or cancelled) and its table and curves are drawn.
    applied(str)
        A fit was put into the scenario; the undo label.
    """

    fits_shown = Signal()
    applied = Signal(str)

    def __init__(self, document: ScenarioDocument, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Fit from data \u2014 HazardTrace")
        self.document = document
        self.evidence: Evidence | None = None
        self._kms: list[KaplanMeier] = []
        self._generation = 0  # which data set the fits shown belong to
        self.fits: list[Fit] = []
        self._job: Job | None = None
        self._build()
        self.source.loaded.connect(self._on_loaded)
        document.validated.connect(self._on_scenario)
        document.loaded.connect(self._on_document_loaded)
        self._on_scenario(document.scenario, document.errors)
        self.resize(1500, 950)

    # ------------------------------------------------------------------ layout
    def _build(self) -> None:
        self.source = SourcePanel()
        data_box = QGroupBox("1. Evidence")
        QVBoxLayout(data_box).addWidget(self.source)

        fam_box = QGroupBox("2. Families")
        self.families = FamiliesPanel()
        self.family_checks, self.breaks, self.knots = self.families.checks, self.families.breaks, self.families.knots
        grid, row = self.families.grid, self.families.next_row
        QVBoxLayout(fam_box).addWidget(self.families)
        self.fit_button = QPushButton("Fit")
        self.fit_button.setEnabled(False)
        self.fit_button.clicked.connect(self.start_fits)
        self.cancel_button = QPushButton("Cancel")
        self.cancel_button.setEnabled(False)
        self.cancel_button.setToolTip("Stop after the family being fitted (the fits done are kept)")
        self.cancel_button.clicked.connect(self.cancel_fits)
        self.progress = QProgressBar()
        self.progress.setTextVisible(True)
        self.progress.setFormat("")
        buttons = QHBoxLayout()
        buttons.addWidget(self.fit_button)
        buttons.addWidget(self.cancel_button)
        buttons.addWidget(self.progress, 1)
        grid.addLayout(buttons, row, 0, 1, 3)

        table_box = QGroupBox("3. Fits (click a column to sort; the selected fit is drawn bold)")
        self.table_model = DataFrameModel()
        self.proxy = QSortFilterProxyModel(self)
        self.proxy.setSourceModel(self.table_model)
        self.proxy.setSortRole(RAW_ROLE)
        self.table = QTableView()
        self.table.setObjectName("fit_table")
        self.table.setModel(self.proxy)
        self.table.setSortingEnabled(True)
        self.table.setSelectionBehavior(QAbstractItemView.SelectionBehavior.SelectRows)
        self.table.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.table.setEditTriggers(QAbstractItemView.EditTrigger.NoEditTriggers)
        self.table.verticalHeader().hide()
        self.table.selectionModel().selectionChanged.connect(self._on_selection)
        self.table.setMinimumHeight(170)
        QVBoxLayout(table_box).addWidget(self.table)

        apply_box = self.apply_panel = ApplyPanel(self.document)
        (self.transition, self.arm, self.covariance, self.ratio, self.strategy, self.ratio_note, self.floor,
         self.floor_note, self.entry_age, self.apply_button, self.apply_message) = (
            apply_box.transition, apply_box.arm, apply_box.covariance, apply_box.ratio, apply_box.strategy,
            apply_box.ratio_note, apply_box.floor, apply_box.floor_note, apply_box.entry_age, apply_box.apply_button,
            apply_box.apply_message)
        self.transition.currentIndexChanged.connect(self._on_transition)
        self.arm.currentIndexChanged.connect(lambda _i: self._on_arm())
        for box in (self.covariance, self.ratio):
            box.toggled.connect(lambda _on: self._on_arm())
        self.strategy.currentIndexChanged.connect(lambda _i: self._on_arm())
        self.entry_age.valueChanged.connect(lambda _v: self._redraw())
        self.apply_button.clicked.connect(self.apply_fit)

        left = QWidget()
        lv = QVBoxLayout(left)
        for w in (data_box, fam_box, table_box, apply_box):
            lv.addWidget(w)
        lv.addStretch(1)
        scroll = QScrollArea()
        scroll.setWidgetResizable(True)
        scroll.setWidget(left)
        scroll.setMinimumWidth(520)

        self.horizon = QDoubleSpinBox()
        self.horizon.setRange(0.01, 1e6)
        self.horizon.setDecimals(2)
        self.horizon.setToolTip("The fitted curves are extrapolated to this time (the model's horizon when a "
                                "scenario is open), in the data's unit")
        self.horizon.valueChanged.connect(lambda _v: self._redraw())
        self.horizon_unit = QLabel()
        self.data_note = QLabel()
        self.data_note.setObjectName("data_note")
        self.data_note.setWordWrap(True)
        self.data_note.setStyleSheet(f"color: {OKABE_ITO['vermillion']};")
        top = QHBoxLayout()
        top.addWidget(QLabel("Show and extrapolate to"))
        top.addWidget(self.horizon)
        top.addWidget(self.horizon_unit)
        self.view = QComboBox()
        self.view.addItems(["follow-up", "whole horizon"])
        self.view.setToolTip("What the plots show first (drag or scroll in a plot to move and zoom)")
        self.view.currentIndexChanged.connect(lambda _i: self._redraw())
        top.addWidget(QLabel("View"))
        top.addWidget(self.view)
        top.addWidget(self.data_note, 1)
        self.survival_plot, self.hazard_plot, self.diagnostic_plot = SurvivalPlot(), HazardPlot(), DiagnosticPlot()
        self.plot_tabs = QTabWidget()
        self.plot_tabs.addTab(self.survival_plot, "Survival")
        self.plot_tabs.addTab(self.hazard_plot, "Hazard")
        self.plot_tabs.addTab(self.diagnostic_plot, "log cumulative hazard")
        right = QWidget()
        rv = QVBoxLayout(right)
        rv.addLayout(top)
        rv.addWidget(self.plot_tabs, 1)

        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(scroll)
        split.addWidget(right)
        split.setStretchFactor(1, 1)
        split.setSizes([560, 940])
        self.setCentralWidget(split)
        self.statusBar()
        edit = self.menuBar().addMenu("&Edit")  # the scenario's own undo history (one stack with the main window)
        self.undo_action = self.document.undo_stack.createUndoAction(self, "&Undo")
        self.undo_action.setShortcuts(QKeySequence.StandardKey.Undo)
        self.redo_action = self.document.undo_stack.createRedoAction(self, "&Redo")
        self.redo_action.setShortcuts(QKeySequence.StandardKey.Redo)
        edit.addAction(self.undo_action)
        edit.addAction(self.redo_action)

    def closeEvent(self, event) -> None:  # noqa: N802 - Qt API
        """Closing the window stops a fit run after the family being fitted."""
        self.cancel_fits()
        super().closeEvent(event)

    # ------------------------------------------------------------------ evidence
    def _on_loaded(self, evidence: Evidence) -> None:
        self.cancel_fits()  # a run on the previous data is stopped and its fits are not shown
        self._generation += 1
        self.evidence = evidence
        self._kms = kaplan_meier_by_arm(evidence.data)
        self.fits = []
        self.table_model.set_frame(_empty_table())
        data = evidence.data
        self.fit_button.setEnabled(True)
        self.horizon_unit.setText(data.unit)
        self.data_note.setText("Delayed entry: the Kaplan-Meier risk sets and the fits count each patient from "
                               "entry to exit." if data.delayed else "")
        self.arm.blockSignals(True)
        self.arm.clear()
        if len(data.groups) == 2:
            self.arm.addItem(f"reference arm {data.groups[0]!r}", "reference")
            self.arm.addItem(f"compared arm {data.groups[1]!r}", "compared")
        else:
            self.arm.addItem("the data's only arm" if data.group is None else "(fit arms one by one)", "reference")
        self.arm.blockSignals(False)
        self.apply_panel.fill_strategies(self.evidence.data if self.evidence is not None else None)
        self._set_horizon()
        self._redraw()

    def _set_horizon(self) -> None:
        """The scenario's horizon in the data's unit, else three times the longest follow-up."""
        if self.evidence is None:
            return
        data = self.evidence.data
        years = self._horizon_years()
        value = float(from_years(years, data.unit)) if years and years > 0 else 3.0 * float(np.max(data.time))
        self.horizon.blockSignals(True)
        self.horizon.setValue(value)
        self.horizon.blockSignals(False)

    def _horizon_years(self) -> float | None:
        scenario = self.document.scenario
        if scenario is None:
            return None
        return follow_up_years(scenario.model.horizon, self.entry_age.value())

    # ------------------------------------------------------------------ fitting
    def request(self) -> FitRequest:
        """The families, breaks and knots chosen (:meth:`FamiliesPanel.request`)."""
        return self.families.request()

    def start_fits(self) -> None:
        if self.evidence is None or self._job is not None:
            return
        try:
            request = self.request()
        except ValidationError as err:
            self._message(error_words(err), error=True)
            return
        worker = FitWorker(self.evidence.data, request)
        worker.progress.connect(self._on_progress)
        job = Job(worker)
        generation = self._generation
        job.finished.connect(lambda outcome: self._on_fitted(outcome) if generation == self._generation else None)
        job.failed.connect(lambda text: self._on_fit_failed(text) if generation == self._generation else None)
        job.done.connect(self._on_job_done)
        self._job = job
        self.fit_button.setEnabled(False)
        self.cancel_button.setEnabled(True)
        self.progress.setRange(0, len(request.steps()))
        self.progress.setValue(0)
        self._message("Fitting…")
        job.start()

    def cancel_fits(self) -> None:
        if self._job is not None:
            self._job.worker.cancel()
            self.cancel_button.setEnabled(False)
            self.progress.setFormat("cancelling after the family being fitted…")

    def is_fitting(self) -> bool:
        return self._job is not None

    def _on_progress(self, family: str, done: int, total: int) -> None:
        self.progress.setRange(0, total)
        self.progress.setValue(done)
        self.progress.setFormat(f"fitting {family} ({done + 1} of {total})" if family else f"{total} fitted")

    def _on_fitted(self, outcome: FitOutcome) -> None:
        self.fits = list(outcome.fits)
        frame = fit_table(self.fits) if self.fits else _empty_table()
        self.table_model.set_frame(frame[[c for c in TABLE_COLUMNS if c in frame.columns]])
        self.table.resizeColumnsToContents()
        self.table.sortByColumn(-1, Qt.SortOrder.AscendingOrder)  # fit_table's order: by AIC
        failed = [f.label for f in self.fits if not f.converged]
        text = (f"Cancelled: {len(self.fits)} of {outcome.total} families fitted." if outcome.cancelled
                else f"{len(self.fits)} families fitted.")
        if failed:
            text += f" Not converged: {', '.join(failed)} (see the table)."
        self.progress.setFormat("cancelled" if outcome.cancelled else "done")
        self._message(text, error=bool(failed))
        best = next((r for r in range(self.proxy.rowCount()) if self._fit_at(r) is not None
                     and self._fit_at(r).converged), None)
        if best is not None:
            self.table.selectRow(best)
        self._redraw()
        self.fits_shown.emit()

    def _on_fit_failed(self, message: str) -> None:
        self.progress.setFormat("failed")
        self._message(f"The fits failed: {message}", error=True)
        self.fits_shown.emit()

    def _on_job_done(self) -> None:
        self._job = None
        if self.progress.format().startswith("cancelling"):  # a run whose outcome was not shown
            self.progress.setFormat("cancelled")
        self.fit_button.setEnabled(self.evidence is not None)
        self.cancel_button.setEnabled(False)

    # ------------------------------------------------------------------ the table
    def _fit_at(self, proxy_row: int) -> Fit | None:
        col = TABLE_COLUMNS.index("family")
        label = self.proxy.index(proxy_row, col).data(RAW_ROLE)
        return next((f for f in self.fits if f.label == label), None)

    def selected_fit(self) -> Fit | None:
        rows = self.table.selectionModel().selectedRows()
        return self._fit_at(rows[0].row()) if rows else None

    def select_fit(self, label: str) -> None:
        """Select the table row of the fit ``label`` (as a click on it does)."""
        for r in range(self.proxy.rowCount()):
            fit = self._fit_at(r)
            if fit is not None and fit.label == label:
                self.table.selectRow(r)
                return
        raise KeyError(label)

    def _on_selection(self, *_args) -> None:
        fit = self.selected_fit()
        usable = fit is not None and fit.converged and fit.scenario
        self.apply_button.setEnabled(usable and self.transition.count() > 0)
        if fit is not None and not fit.scenario:
            self.apply_button.setToolTip(f"{fit.label} is not a scenario hazard family: compare it, apply another")
        elif fit is not None and not fit.converged:
            self.apply_button.setToolTip(f"{fit.label} did not converge: {fit.message}")
        else:
            self.apply_button.setToolTip("")
        self._on_arm()
        self._redraw()

    def _on_arm(self) -> None:
        self.apply_panel.update_for(self.selected_fit())
        self._redraw()

    # ------------------------------------------------------------------ the scenario
    def _on_scenario(self, scenario: object, _errors: list) -> None:
        current = self.transition.currentText()
        self.transition.blockSignals(True)
        self.transition.clear()
        for i, table in enumerate(self.document.tables("transitions")):  # the index is the edit's address
            name = table.get("name")
            self.transition.addItem(name if isinstance(name, str) and name else f"transitions[{i}]", i)
        found = self.transition.findText(current)
        if found >= 0:
            self.transition.setCurrentIndex(found)
        self.transition.blockSignals(False)
        if scenario is not None:
            age = getattr(scenario.model.population.entry_age, "mean", None)
            if age is not None and self.entry_age.value() == 0.0:
                self.entry_age.blockSignals(True)
                self.entry_age.setValue(float(age))
                self.entry_age.blockSignals(False)
        has_bg = scenario is not None and scenario.model.background is not None
        self.floor.setEnabled(has_bg)
        self.apply_panel.fill_strategies(self.evidence.data if self.evidence is not None else None)
        self._on_transition()

    def _on_document_loaded(self) -> None:
        """Another scenario was opened: its entry age and horizon replace the previous one's."""
        self.entry_age.setValue(0.0)
        self._on_scenario(self.document.scenario, self.document.errors)
        self._set_horizon()
        self._redraw()

    def _on_transition(self, *_args) -> None:
        i = self.transition.currentData()
        self.floor.setChecked(i is not None and bool(self.document.get(("transitions", i, "at_least_background"),
                                                                       False)))
        if self.fits:
            self._on_selection()
        else:
            self._redraw()

    def apply_fit(self) -> bool:
        """Put the selected fit into the chosen transition as one undoable edit."""
        fit = self.selected_fit()
        i = self.transition.currentData()
        if fit is None or i is None:
            self._message("Choose a fit in the table and a transition first.", error=True)
            return False
        strategy, new_strategy = self.apply_panel.strategy_choice()
        choice = FitChoice(i, self.arm.currentData() or "reference",
                           self.covariance.isChecked() and self.covariance.isEnabled(),
                           self.floor.isChecked() and self.floor.isEnabled(), strategy, new_strategy)
        try:
            change, label = fit_edit(fit, choice, self.transition.currentText())
            label += waning_note(self.document.table(("transitions", i)), fit)
            done = self.document.edit(label, change)
        except (ValueError, KeyError) as err:
            self._message(f"Not applied: {error_words(err)}", error=True)
            return False
        if not done:
            self._message("Not applied: the scenario text is not valid TOML, or it already holds this fit.",
                          error=True)
            return False
        self._message(f"{label} (Edit > Undo takes it back).")
        self.applied.emit(label)
        return True

    # ------------------------------------------------------------------ drawing
    def _message(self, text: str, error: bool = False) -> None:
        self.apply_message.setStyleSheet(f"color: {OKABE_ITO['vermillion']};" if error else "")
        self.apply_message.setText(text)
        self.statusBar().showMessage(text.splitlines()[0] if text else "", 10000)

    def _redraw(self) -> None:
        ev = self.evidence
        if ev is None:
            return
        data = ev.data
        kms = self._kms
        self.survival_plot.show_km(kms)
        self.diagnostic_plot.show_km(kms)
        self.survival_plot.show_points([ev.points[a] for a in sorted(ev.points)])
        follow = float(np.max(data.time))
        end = max(self.horizon.value(), follow)
        view_end = end if self.view.currentIndex() == 1 else min(end, 1.2 * follow)
        ticks = nice_ticks(view_end)
        ticks = ticks[ticks <= follow]
        self.survival_plot.show_at_risk(ticks, numbers_at_risk(data, ticks))
        for plot in (self.survival_plot, self.hazard_plot):
            plot.plot.setLabel("bottom", data.unit, color="#000000")
        self.hazard_plot.plot.setLabel("left", f"hazard per {data.unit.rstrip('s')}", color="#000000")
        t = np.unique(np.concatenate([np.linspace(0.0, view_end, _GRID), np.linspace(view_end, end, _GRID // 2)]))
        t_pos = t[1:]
        chosen = self.selected_fit()
        surv, haz, cum, legend_fits = [], [], [], []
        for i, fit in enumerate(self.fits):
            if not fit.converged:
                continue
            width = 3.5 if fit is chosen else 1.6
            with np.errstate(all="ignore"):
                for arm, hz in enumerate(fit.arm_hazards().values()):
                    surv.append((i, arm, t, np.asarray(hz.sf(t)), width))
                    haz.append((i, arm, t_pos, np.asarray(hz.hazard(t_pos)), width))
                    cum.append((i, arm, t_pos, np.asarray(hz.cumhazard(t_pos)), width))
            legend_fits.append((len(surv) - len(fit.arm_hazards()), fit))
        self._draw_background(chosen, t_pos)
        self.survival_plot.show_fits(surv)
        self.hazard_plot.show_fits(haz)
        self.diagnostic_plot.show_fits(cum)
        self.diagnostic_plot.plot.enableAutoRange()
        self.survival_plot.plot.setXRange(0.0, view_end, padding=0.02)
        self.hazard_plot.plot.setXRange(0.0, view_end, padding=0.02)
        seen = [h[np.isfinite(h) & (tt > view_end / 50) & (tt <= view_end)] for _i, _a, tt, h, _w in haz]
        finite = np.concatenate(seen) if seen else np.array([])
        if finite.size:
            self.hazard_plot.plot.setYRange(0.0, 1.2 * float(np.percentile(finite, 98)), padding=0)
        self._legends(kms, legend_fits, bool(ev.points))

    def _legends(self, kms: list[KaplanMeier], legend_fits: list[tuple[int, Fit]], points: bool) -> None:
        arms = [k.arm for k in kms]
        several = len(arms) > 1
        km_entries = [(self.survival_plot.km.items[i], f"Kaplan-Meier {a}" if several else "Kaplan-Meier")
                      for i, a in enumerate(arms)]
        if points:
            km_entries += [(self.survival_plot.points.items[i], f"digitised {a}" if several else "digitised points")
                           for i, a in enumerate(arms) if i < len(self.survival_plot.points.items)]
        diag = [(self.diagnostic_plot.km.items[i], f"Kaplan-Meier {a}" if several else "Kaplan-Meier")
                for i, a in enumerate(arms)]
        title = (f"fits: solid {arms[0]}, dashed {arms[1]}" if len(arms) == 2 and legend_fits else "")
        for plot, extra in ((self.survival_plot, km_entries), (self.hazard_plot, []), (self.diagnostic_plot, diag)):
            entries = list(extra) + [(plot.fits.items[j], fit.label) for j, fit in legend_fits]
            if plot is self.hazard_plot and self.hazard_plot.background.items:
                x, _y = self.hazard_plot.background.items[0].getData()
                if x is not None and len(x):
                    entries.append((self.hazard_plot.background.items[0], "background (attained age)"))
            plot.set_legend(entries)
            note = self.hazard_plot.note if plot is self.hazard_plot else ""
            plot.set_title("; ".join(filter(None, (title, note))))

    def _draw_background(self, chosen: Fit | None, t_pos) -> None:
        """The background hazard per data unit at attained age, and where the chosen fit is below it."""
        scenario = self.document.scenario
        ev = self.evidence
        if scenario is None or scenario.model.background is None or ev is None:
            self.hazard_plot.show_background([], [], "")
            self.floor_note.setText("The open scenario has no [background] mortality." if scenario is not None
                                    else "Open a valid scenario to compare with its background mortality.")
            return
        bg = scenario.model.background
        age = self.entry_age.value()
        with np.errstate(all="ignore"):  # per sex, times the multiplier (SMR), on the fit's clock
            curves = [(t_pos, on_fit.hazard(t_pos)) for on_fit in background_on_fit_clock(bg, unit=ev.data.unit,
                                                                                          entry_age=age)]
        below, note = [], ""
        if chosen is not None and chosen.converged:
            hazards = chosen.arm_hazards()
            arm = 1 if self.arm.currentData() == "compared" and len(hazards) == 2 else 0
            fitted = list(hazards.values())[arm]
            found = below_background(fitted, bg, entry_age=age, horizon=float(to_years(float(t_pos[-1]), ev.data.unit)),
                                     unit=ev.data.unit)
            for f in found:
                below += list(f.intervals_in(ev.data.unit))
            falls = [f for f in found if f.intervals]
            note = "; ".join(f.describe() for f in falls)
            self.floor_note.setText((f"{chosen.label}: " + note + ". Tick the option above to use the larger of the two "
                                     "hazards.") if falls else f"{chosen.label}: the fitted hazard stays above the "
                                    "background hazard over the horizon.")
            self.floor_note.setStyleSheet(f"color: {OKABE_ITO['vermillion']};" if falls else "")
            note = f"shaded: {chosen.label} below the background hazard" if falls else ""
        self.hazard_plot.show_background(curves, below, note)


def _empty_table() -> pd.DataFrame:
    return pd.DataFrame({c: [] for c in TABLE_COLUMNS})
