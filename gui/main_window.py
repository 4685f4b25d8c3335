"""The main window: composes the editor panels, the model diagram, the hazard preview, the run
panel and the results panel, with the File / Edit / Help menus. No modelling logic here."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import QEvent, QObject, QSize, Qt, QTimer, Signal
from PySide6.QtGui import QCloseEvent, QColor, QDragEnterEvent, QDropEvent, QKeySequence
from PySide6.QtWidgets import (QFileDialog, QHBoxLayout, QLabel, QListWidget, QMainWindow, QMessageBox,
                               QPushButton, QScrollArea, QSplitter, QStackedWidget, QTabWidget, QVBoxLayout,
                               QWidget)

from gui.about import AboutDialog
from gui.diagram import ModelDiagram
from gui.document import DocumentError, FieldError, ScenarioDocument
from gui.editors import PANELS, BackgroundEditor, EditorPanel, SourceEditor, TransitionsEditor
from gui.export_plot import ask_save_path
from gui.palette import OKABE_ITO
from gui.preview import HazardPreview
from gui.results import ResultsPanel
from gui.run_panel import RunPanel
from gui.shortcuts import FieldShortcuts
from gui.uncertainty.page import PsaPage
from sim.io.demo import DEMOS

__all__ = ["MainWindow"]

APP = "HazardTrace"
HINT_COLOUR = OKABE_ITO["blue"]


class MainWindow(QMainWindow):
    """Sections and the run panel on the left; two tabs: "Model" (the editor of the chosen section,
    the diagram and the hazard preview) and "Results".

    Signals
    -------
    results_shown()
        Re-emitted from the results panel once every view has drawn a run's results.
    """

    results_shown = Signal()

    def __init__(self, document: ScenarioDocument | None = None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.document = document if document is not None else ScenarioDocument(self)
        self._pending_recovery = False
        self._run_generation = -1  # which loaded scenario the results shown belong to
        self._generation = 0
        self._run_text = ""
        self._last_run_text = ""
        self._run_pending = False
        self.setAcceptDrops(True)
        self.resize(QSize(1600, 1000))
        self._build_panels()
        self._build_menus()
        self._connect()
        self._on_validated(self.document.scenario, self.document.errors)
        self._update_title()

    # ------------------------------------------------------------------ layout
    def _build_panels(self) -> None:
        doc = self.document
        self.editors: list[EditorPanel] = [P(doc) for P in PANELS]
        self.sections = QListWidget()
        self.sections.setObjectName("sections")
        self.stack = QStackedWidget()
        for ed in self.editors:
            self.sections.addItem(ed.title)
            scroll = QScrollArea()
            scroll.setWidgetResizable(True)
            scroll.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
            scroll.setWidget(ed)
            self.stack.addWidget(scroll)
        self.sections.currentRowChanged.connect(self._on_section_changed)
        self.sections.itemClicked.connect(self._on_section_clicked)
        self.sections.viewport().installEventFilter(self)
        self.sections.setCurrentRow(0)
        self.sections.setMaximumHeight(8 + self.sections.sizeHintForRow(0) * (len(self.editors) + 1))
        self.run_panel = RunPanel()
        left = QWidget()
        lv = QVBoxLayout(left)
        lv.setContentsMargins(4, 4, 4, 4)
        lv.addWidget(QLabel("<b>Scenario</b>"))
        lv.addWidget(self.sections)
        lv.addWidget(QLabel("<b>Run</b>"))
        lv.addWidget(self.run_panel, 1)
        left.setMinimumWidth(390)
        left.setMaximumWidth(420)

        self.problem = QLabel()
        self.problem.setObjectName("problem")
        self.problem.setWordWrap(True)
        self.problem.setStyleSheet(f"color: {OKABE_ITO['vermillion']};")
        self.go_button = QPushButton("Show")
        self.go_button.setToolTip("Go to the field with the problem (with several, each click shows the next)")
        self._problem_keys: list[str] = []
        self._problem_index = -1
        self.go_button.clicked.connect(self.go_to_problem)
        bar = QWidget()
        bl = QHBoxLayout(bar)
        bl.setContentsMargins(4, 0, 4, 0)
        bl.addWidget(self.problem, 1)
        bl.addWidget(self.go_button)
        self.problem_bar = bar
        middle = QWidget()
        mv = QVBoxLayout(middle)
        mv.setContentsMargins(0, 0, 0, 0)
        mv.addWidget(bar)
        mv.addWidget(self.stack, 1)

        self.diagram = ModelDiagram(doc)
        self.preview = HazardPreview(doc)
        model_view = QSplitter(Qt.Orientation.Vertical)
        model_view.addWidget(self.diagram)
        model_view.addWidget(self.preview)
        model_view.setSizes([380, 520])
        self.model_page = QSplitter(Qt.Orientation.Horizontal)
        self.model_page.addWidget(middle)
        self.model_page.addWidget(model_view)
        self.model_page.setStretchFactor(0, 2)
        self.model_page.setStretchFactor(1, 3)
        self.results_panel = ResultsPanel()
        self.results_banner = QLabel()
        self.results_banner.setObjectName("results_banner")
        self.results_banner.setWordWrap(True)
        self.results_banner.setStyleSheet(f"QLabel {{ border: 1px solid {OKABE_ITO['orange']}; padding: 4px; "
                                          f"background: #FFF4E0; }}")
        self.results_banner.hide()
        self.results_page = QWidget()
        rv = QVBoxLayout(self.results_page)
        rv.setContentsMargins(0, 0, 0, 0)
        rv.addWidget(self.results_banner)
        rv.addWidget(self.results_panel, 1)
        self.tabs = QTabWidget()
        self.tabs.addTab(self.model_page, "Model")
        self.tabs.addTab(self.results_page, "Results")
        self.psa_page = PsaPage(doc)
        self.tabs.addTab(self.psa_page, "Probabilistic analysis")

        split = QSplitter(Qt.Orientation.Horizontal)
        split.addWidget(left)
        split.addWidget(self.tabs)
        split.setStretchFactor(1, 1)
        self.setCentralWidget(split)
        self.statusBar()

    def editor(self, cls: type) -> EditorPanel:
        """The editor panel of class ``cls``."""
        return next(e for e in self.editors if isinstance(e, cls))

    def show_editor(self, editor: EditorPanel) -> None:
        self.sections.setCurrentRow(self.editors.index(editor))
        self.tabs.setCurrentWidget(self.model_page)

    def _build_menus(self) -> None:
        doc = self.document
        file_menu = self.menuBar().addMenu("&File")
        self.new_action = file_menu.addAction("&New", QKeySequence.StandardKey.New, self.new_blank)
        self.new_action.setToolTip("A blank model: two states, alive and dead")
        demos = file_menu.addMenu("New from demo")
        for name, filename in DEMOS.items():
            act = demos.addAction(f"{name} ({filename})")
            act.triggered.connect(lambda _c=False, n=name: self.new_from_demo(n))
        self.open_action = file_menu.addAction("&Open…", QKeySequence.StandardKey.Open, self.open_dialog)
        self.recent_menu = file_menu.addMenu("Open &recent")
        self.recent_menu.aboutToShow.connect(self._fill_recent)
        self._fill_recent()
        file_menu.addSeparator()
        self.save_action = file_menu.addAction("&Save", QKeySequence.StandardKey.Save, self.save)
        self.save_as_action = file_menu.addAction("Save &as…", QKeySequence.StandardKey.SaveAs, self.save_as)
        file_menu.addSeparator()
        self.report_action = file_menu.addAction("Write &report…", self.write_report)
        self.report_action.setToolTip("An HTML or PDF report of what is on screen: the run's results, or the "
                                      "probabilistic analysis on its tab")
        self.report_action.setEnabled(False)
        file_menu.addSeparator()
        self.quit_action = file_menu.addAction("&Quit", QKeySequence.StandardKey.Quit, self.close)
        edit_menu = self.menuBar().addMenu("&Edit")
        self.undo_action = doc.undo_stack.createUndoAction(self, "&Undo")
        self.undo_action.setShortcuts(QKeySequence.StandardKey.Undo)  # every binding of the platform
        self.redo_action = doc.undo_stack.createRedoAction(self, "&Redo")
        self.redo_action.setShortcuts(QKeySequence.StandardKey.Redo)  # Ctrl+Y and Ctrl+Shift+Z
        edit_menu.addAction(self.undo_action)
        edit_menu.addAction(self.redo_action)
        evidence_menu = self.menuBar().addMenu("E&vidence")
        self.fit_data_action = evidence_menu.addAction("&Fit from data\u2026", self.show_fit_from_data)
        self.fit_data_action.setToolTip("Fit survival curves to patient data or published curves and put a fit "
                                        "into a transition")
        help_menu = self.menuBar().addMenu("&Help")
        self.about_action = help_menu.addAction("&About HazardTrace", self.show_about)
        self.field_shortcuts = FieldShortcuts(self, [self.undo_action, self.redo_action, self.new_action,
                                                     self.open_action, self.save_action, self.save_as_action,
                                                     self.quit_action])

    def _fill_recent(self) -> None:
        self.recent_menu.clear()
        paths = self.document.recent_files()
        for p in paths:
            act = self.recent_menu.addAction(str(p))
            act.triggered.connect(lambda _c=False, p=p: self.open_path(p))
        if not paths:
            self.recent_menu.addAction("(none)").setEnabled(False)
        else:
            self.recent_menu.addSeparator()
            self.recent_menu.addAction("Clear list", self.document.clear_recent)

    def _connect(self) -> None:
        doc = self.document
        doc.validated.connect(self._on_validated)
        doc.dirty_changed.connect(self._on_dirty_changed)
        doc.path_changed.connect(self._on_path_changed)
        doc.loaded.connect(self._on_loaded)
        doc.notice.connect(lambda text: self.statusBar().showMessage(text, 15000))
        doc.changed.connect(self._update_results_state)
        transitions = self.editor(TransitionsEditor)
        transitions.selected.connect(self._on_transition_selected)
        self.diagram.transition_clicked.connect(self._on_diagram_clicked)
        self.run_panel.run_started.connect(self._on_run_started)
        self.run_panel.results_ready.connect(self._on_results_ready)
        self.results_panel.results_shown.connect(self.results_shown)
        self.results_panel.report_written.connect(lambda p: self.statusBar().showMessage(f"Report written: {p}", 15000))
        self.psa_page.written.connect(lambda p: self.statusBar().showMessage(f"Written: {p}", 15000))
        self.psa_page.results_shown.connect(self._update_report_action)
        self.results_panel.results_shown.connect(self.run_panel.mark_shown)  # time from Run to results shown

    # ------------------------------------------------------------------ slots
    def _on_validated(self, scenario: object, errors: list[FieldError]) -> None:
        reason = errors[0].text if errors else ""
        if len(errors) > 1:
            reason += f" (and {len(errors) - 1} more problem{'s' if len(errors) > 2 else ''})"
        self._problem_keys, self._problem_index = [], -1
        self.go_button.setText("Show" if len(errors) < 2 else "Show next")
        self.run_panel.set_scenario(scenario, reason)
        hint = bool(errors) and all(e.incomplete for e in errors)
        self.problem.setText(reason if hint else f"Problem: {reason}" if errors else "")
        self.problem.setStyleSheet(f"color: {HINT_COLOUR if hint else OKABE_ITO['vermillion']};")
        self._update_problem_bar()
        for i, ed in enumerate(self.editors):
            item = self.sections.item(i)
            # the text view lists every problem; mark it only for those no form can show (broken TOML)
            bad = any(not e.key for e in errors) if isinstance(ed, SourceEditor) else bool(ed.errors)
            unfinished = bad and all(e.incomplete for e in (errors if isinstance(ed, SourceEditor) else ed.errors))
            colour = HINT_COLOUR if unfinished else OKABE_ITO["vermillion"]
            item.setData(Qt.ItemDataRole.ForegroundRole, QColor(colour) if bad else None)
            item.setText(ed.title + ((" (to finish)" if unfinished else " (problem)") if bad else ""))
        n = len(errors)
        self.statusBar().showMessage("Scenario valid" if scenario is not None else
                                     "Model not finished yet" if hint else
                                     "Scenario has a problem" if n <= 1 else f"Scenario has {n} problems")

    def _on_section_changed(self, row: int) -> None:
        self.stack.setCurrentIndex(row)
        if not hasattr(self, "preview"):
            return
        if isinstance(self.editors[row], BackgroundEditor):  # the preview shows what is edited
            self.preview.show_background()
        elif isinstance(self.editors[row], TransitionsEditor):
            self._on_transition_selected(self.editors[row].current_index)
        if hasattr(self, "tabs"):
            self.tabs.setCurrentWidget(self.model_page)
        self._update_problem_bar()

    def _on_section_clicked(self, _item: object) -> None:
        self.tabs.setCurrentWidget(self.model_page)

    def eventFilter(self, obj: QObject, event: QEvent) -> bool:  # noqa: N802 - Qt API
        """The section under a released left button is shown even when its press went to
        committing a field's edit (the first click after typing was lost otherwise)."""
        if (obj is self.sections.viewport() and event.type() == QEvent.Type.MouseButtonRelease
                and event.button() == Qt.MouseButton.LeftButton):
            row = self.sections.indexAt(event.position().toPoint()).row()
            if row >= 0 and row != self.sections.currentRow():
                self.sections.setCurrentRow(row)
        return super().eventFilter(obj, event)

    def _update_problem_bar(self) -> None:
        """The window-wide problem line shows unless the open section already lists the problem."""
        if not hasattr(self, "problem_bar"):
            return
        current = self.editors[self.stack.currentIndex()]
        shown_here = bool(current.errors) or isinstance(current, SourceEditor)
        self.problem_bar.setVisible(bool(self.document.errors) and not shown_here)

    def _on_dirty_changed(self, _dirty: bool) -> None:
        self._update_title()

    def _on_path_changed(self, _path: object) -> None:
        self._update_title()

    def _update_title(self) -> None:
        self.setWindowTitle(f"{self.document.display_name}{' *' if self.document.dirty else ''} \u2014 {APP}")

    def _on_transition_selected(self, index: int) -> None:
        name = self.editor(TransitionsEditor).selected_name()
        if name:
            self.preview.select_exit(name)
            self.diagram.select_transition(name)

    def _on_diagram_clicked(self, name: str) -> None:
        self.preview.select_exit(name)
        transitions = self.editor(TransitionsEditor)
        names = [t.get("name") for t in transitions.items()]
        if name in names:
            self.show_editor(transitions)
            transitions.select(names.index(name))

    def _on_run_started(self) -> None:
        self._run_generation, self._run_text = self._generation, self.document.text
        self._run_pending = True

    def _on_results_ready(self, results: object) -> None:
        scenario = getattr(results, "scenario", None)
        if not self._run_pending:  # results that did not come through Run
            self._run_generation = self._generation
            self._run_text = getattr(scenario, "text", self.document.text)
        self._run_pending = False
        self._last_run_text = self.run_panel.last_run.text()
        self.results_panel.show_results(results)
        self._update_report_action()
        self.tabs.setCurrentWidget(self.results_page)
        self._update_results_state()

    def _on_loaded(self) -> None:
        self._generation += 1
        self._update_results_state()

    def results_state(self) -> str:
        """``"none"`` (no run yet), ``"current"``, ``"edited"`` (the model changed since the run) or
        ``"previous"`` (the run belongs to the scenario open before)."""
        if self.results_panel.results is None or self._run_generation < 0:
            return "none"
        if self._run_generation != self._generation:
            return "previous"
        return "current" if self.document.text == self._run_text else "edited"

    def _update_results_state(self) -> None:
        """Label results that no longer match what is being edited: the tab, a banner above them
        and the run panel's "Last run" line."""
        state = self.results_state()
        banner = {
            "previous": "These results belong to the previous scenario, not to "
                        f"{self.document.display_name}. Run to see this scenario's results.",
            "edited": "These results are from an earlier version of the model: it has been edited since "
                      "the run. Run again to update them.",
        }.get(state, "")
        self.results_banner.setText(banner)
        self.results_banner.setVisible(bool(banner))
        suffix = {"previous": " (previous scenario)", "edited": " (out of date)"}.get(state, "")
        self.tabs.setTabText(self.tabs.indexOf(self.results_page), "Results" + suffix)
        if self._last_run_text:
            prefix = {"previous": "Previous scenario's run. ", "edited": "Before the last edits. "}.get(state, "")
            self.run_panel.last_run.setText(prefix + self._last_run_text)

    def go_to_problem(self) -> None:
        """Show the section and field of a problem: the first, then the next one on each call while
        the problems stay the same."""
        errors = self.document.errors
        if not errors:
            return
        keys = [e.message for e in errors]
        if keys != self._problem_keys:
            self._problem_keys, self._problem_index = keys, 0
        else:
            self._problem_index = (self._problem_index + 1) % len(errors)
        err = errors[self._problem_index]
        self.statusBar().showMessage(err.text, 8000)
        target = next((ed for ed in self.editors if err.key and err.key[0] in ed.sections), None)
        if target is None:
            source = self.editor(SourceEditor)
            self.show_editor(source)
            if err.line:
                source.go_to_line(err.line)
            return
        self.show_editor(target)
        target.focus_key(err.key)

    # ------------------------------------------------------------------ files
    def start(self, path: str | Path | None = None) -> bool:
        """Open ``path``, or an untitled copy of the first demo (offering unsaved recovered work once
        the window is shown). A file that cannot be read is reported and a blank model starts
        instead (never an empty, disabled window); returns False then."""
        if path is not None:
            if self.open_path(path, ask_save=False):
                return True
            self.document.new_blank()
            self.statusBar().showMessage(f"Could not open {path}; started a new model instead.")
            return False
        self.document.new_from_demo(next(iter(DEMOS)))
        self._offer_recovery()
        return True

    def new_blank(self) -> None:
        """File -> New: a blank model with two states (alive, dead)."""
        if not self.maybe_save():
            return
        self.document.new_blank()
        self._offer_recovery()

    def new_from_demo(self, name: str) -> None:
        if not self.maybe_save():
            return
        try:
            self.document.new_from_demo(name)
        except DocumentError as err:
            QMessageBox.warning(self, APP, str(err))
            return
        self._offer_recovery()

    def open_dialog(self) -> None:
        if not self.maybe_save():
            return
        path, _ = QFileDialog.getOpenFileName(self, "Open scenario", self.document.dialog_folder(),
                                              "Scenario files (*.toml);;All files (*)")
        if path:
            self.document.remember_folder(Path(path).parent)
            self.open_path(path, ask_save=False)

    def open_path(self, path: str | Path, ask_save: bool = True) -> bool:
        """Open a scenario file (after the unsaved-changes question); invalid files open too."""
        if ask_save and not self.maybe_save():
            return False
        try:
            self.document.open(path)
        except DocumentError as err:
            QMessageBox.warning(self, APP, str(err))
            return False
        self._offer_recovery()
        return True

    def _offer_recovery(self) -> None:
        """Offer edits kept from an earlier session; asked once the window is on screen (at
        start-up the question waits for the window instead of showing over an empty screen)."""
        if not self.isVisible():
            self._pending_recovery = True
            return
        self._pending_recovery = False
        recovery = self.document.find_recovery()
        if recovery is None:
            return
        answer = QMessageBox.question(
            self, "Recover unsaved changes",
            f"Unsaved changes to {self.document.display_name} were kept from an earlier session "
            f"({recovery}). Restore them?",
            QMessageBox.StandardButton.Yes | QMessageBox.StandardButton.No, QMessageBox.StandardButton.Yes)
        if answer == QMessageBox.StandardButton.Yes:
            self.document.restore_recovery(recovery)
        else:
            self.document.discard_recovery()

    def save(self) -> bool:
        if self.document.path is None:
            return self.save_as()
        try:
            self.document.save()
        except DocumentError as err:
            QMessageBox.warning(self, APP, str(err))
            return False
        self.statusBar().showMessage(f"Saved {self.document.path}", 4000)
        return True

    def save_as(self) -> bool:
        start = str(Path(self.document.dialog_folder()) / self.document.suggested_name)
        path, _ = QFileDialog.getSaveFileName(self, "Save scenario as", start, "Scenario files (*.toml)")
        if not path:
            return False
        target = Path(path) if Path(path).suffix else Path(path).with_suffix(".toml")
        try:
            self.document.save_as(target)
        except DocumentError as err:
            QMessageBox.warning(self, APP, str(err))
            return False
        self.document.remember_folder(target.parent)
        moved = "; ".join(f"{old} \u2192 {new}" for _key, old, new in self.document.relocated)
        self.statusBar().showMessage(f"Saved {target}" + (f" (file paths rewritten for the new folder: {moved})"
                                                          if moved else ""), 8000)
        return True

    def maybe_save(self) -> bool:
        """Ask about unsaved changes: Save, Discard or Cancel. True when it is safe to go on."""
        if not self.document.dirty:
            return True
        answer = QMessageBox.question(
            self, "Unsaved changes", f"Save the changes to {self.document.display_name}?",
            QMessageBox.StandardButton.Save | QMessageBox.StandardButton.Discard | QMessageBox.StandardButton.Cancel,
            QMessageBox.StandardButton.Save)
        if answer == QMessageBox.StandardButton.Save:
            return self.save()
        if answer == QMessageBox.StandardButton.Discard:
            self.document.discard_recovery()
            return True
        return False

    def show_fit_from_data(self) -> QMainWindow:
        """Evidence > Fit from data: the window of :mod:`gui.evidence` on this scenario (one, reused)."""
        from gui.evidence import EvidenceWindow  # loaded on first use

        if getattr(self, "evidence_window", None) is None:
            self.evidence_window = EvidenceWindow(self.document, self)
        self.evidence_window.show()
        self.evidence_window.raise_()
        return self.evidence_window

    def write_report(self) -> bool:
        """File -> Write report: the report of what is on screen (sim.report): the probabilistic
        analysis when its tab is shown and it has one, else the run's results; written off the GUI
        thread."""
        psa = self.tabs.currentWidget() is self.psa_page and self.psa_page.outcome is not None
        results = self.results_panel.results
        if not psa and results is None:
            return False
        scenario = self.psa_page.outcome.scenario if psa else results.scenario
        stem = (scenario.path.stem if scenario.path else "hazardtrace") + ("_psa" if psa else "")
        answer = ask_save_path(self, "Write report", str(Path(self.document.dialog_folder()) / f"{stem}_report.html"),
                               {"html": "HTML report (*.html)", "pdf": "PDF report (*.pdf)"})
        if answer is None:
            return False
        self.document.remember_folder(answer[0].parent)
        if psa:
            return self.psa_page.write_report(str(answer[0]))
        return self.results_panel.write_report(str(answer[0]))

    def _update_report_action(self) -> None:
        self.report_action.setEnabled(self.results_panel.results is not None or self.psa_page.outcome is not None)

    def show_about(self) -> AboutDialog:
        dialog = AboutDialog(self)
        dialog.open()  # window-modal, does not block
        return dialog

    # ------------------------------------------------------------------ events
    def showEvent(self, event) -> None:  # noqa: N802 - Qt API
        super().showEvent(event)
        if not getattr(self, "_sized", False):  # first show: editor about 40 % of the model page
            self._sized = True
            width = self.model_page.width()
            self.model_page.setSizes([int(width * 0.4), width - int(width * 0.4)])
        if self._pending_recovery:
            QTimer.singleShot(0, self._offer_pending_recovery)

    def _offer_pending_recovery(self) -> None:
        if self._pending_recovery and self.isVisible():
            self._offer_recovery()

    def closeEvent(self, event: QCloseEvent) -> None:  # noqa: N802 - Qt API
        if self.maybe_save():
            if not self.document.dirty:  # a clean quit leaves nothing to recover
                self.document.discard_recovery()
            self.run_panel.shutdown()
            self.results_panel.shutdown()
            self.psa_page.shutdown()
            event.accept()
        else:
            event.ignore()

    @staticmethod
    def _toml_files(event: QDragEnterEvent | QDropEvent) -> list[Path]:
        mime = event.mimeData()
        if not mime.hasUrls():
            return []
        return [Path(u.toLocalFile()) for u in mime.urls() if u.isLocalFile() and u.toLocalFile().lower().endswith(".toml")]

    def dragEnterEvent(self, event: QDragEnterEvent) -> None:  # noqa: N802 - Qt API
        if self._toml_files(event):
            event.acceptProposedAction()
        else:
            event.ignore()

    def dragMoveEvent(self, event) -> None:  # noqa: N802 - Qt API
        if self._toml_files(event):
            event.acceptProposedAction()

    def dropEvent(self, event: QDropEvent) -> None:  # noqa: N802 - Qt API
        files = self._toml_files(event)
        if not files:
            event.ignore()
            return
        event.acceptProposedAction()
        self.open_path(files[0])
