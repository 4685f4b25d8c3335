"""The main window: panels wired to the document, run panel and results panel; files, prompts,
drag and drop, undo/redo, About; and a screenshot for a human look."""

from __future__ import annotations

import gc

from pathlib import Path

import pytest
from PySide6.QtCore import QEvent, QMimeData, QPointF, QSettings, Qt, QUrl
from PySide6.QtGui import QDragEnterEvent, QDropEvent, QKeySequence
from PySide6.QtWidgets import QFileDialog, QMessageBox

from gui.about import CAUTIONS, AboutDialog, about_text
from gui.document import ScenarioDocument
from gui.editors import HorizonEditor, TransitionsEditor
from gui.main_window import MainWindow
from sim import __version__
from sim.io.demo import demo_path
from sim.pipeline.run import run_scenario

DEMO_TEXT = demo_path("lanthic").read_text(encoding="utf-8")
Button = QMessageBox.StandardButton




@pytest.fixture
def window(qtbot, tmp_path: Path) -> MainWindow:
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
    doc = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    w = MainWindow(doc)  # closed here rather than by qtbot: a dirty window would ask before closing
    w.start(None)
    yield w
    w.document.undo_stack.setClean()
    w.close()
    w.deleteLater()


def answer(monkeypatch, button: Button) -> list:
    """Make QMessageBox.question return ``button``; returns the list of questions asked."""
    asked: list = []

    def fake(parent, title, text, *args, **kwargs):
        asked.append((title, text))
        return button
    monkeypatch.setattr(QMessageBox, "question", fake)
    return asked


def scenario_file(tmp_path: Path, name: str = "model.toml") -> Path:
    path = tmp_path / name
    path.write_text(DEMO_TEXT, encoding="utf-8")
    return path


def test_title_shows_file_name_and_dirty_marker(window: MainWindow, tmp_path: Path) -> None:
    assert window.windowTitle() == "Untitled (demo lanthic) \u2014 HazardTrace"
    path = scenario_file(tmp_path)
    assert window.open_path(path)
    assert window.windowTitle() == "model.toml \u2014 HazardTrace"
    window.document.set_value(("horizon", "value"), 90)
    assert window.windowTitle() == "model.toml * \u2014 HazardTrace"
    window.undo_action.trigger()
    assert window.windowTitle() == "model.toml \u2014 HazardTrace"


def test_invalid_input_disables_run_with_the_loaders_message(window: MainWindow, monkeypatch) -> None:
    calls = []
    original = window.run_panel.set_scenario
    monkeypatch.setattr(window.run_panel, "set_scenario", lambda s, r="": (calls.append((s, r)), original(s, r)))
    assert window.run_panel.run_button.isEnabled()
    editor = window.editor(TransitionsEditor)
    editor.select(1)
    rate = editor.detail_fields.widget_at(("transitions", 1, "rate"))
    rate.setText("-0.5")
    rate.editingFinished.emit()
    (err,) = window.document.errors
    assert calls[-1] == (None, err.text)
    assert not window.run_panel.run_button.isEnabled()
    assert window.run_panel.reason.text() == err.text == "Transition 'recovery': rate must not be negative (got \u22120.5)"
    assert rate.toolTip() == err.text and err.text in window.problem.text()
    window.go_to_problem()
    assert window.stack.currentWidget().widget() is editor
    window.document.set_value(("horizon", "value"), 500)  # a second problem, elsewhere
    assert len(window.document.errors) == 2
    assert window.run_panel.reason.text() == f"{err.text} (and 1 more problem)"
    assert window.go_button.text() == "Show next"
    assert window.statusBar().currentMessage() == "Scenario has 2 problems"
    window.go_to_problem()  # the first problem, then the next, then the first again
    assert window.stack.currentWidget().widget() is editor
    window.go_to_problem()
    assert window.stack.currentWidget().widget() is window.editor(HorizonEditor)
    window.go_to_problem()
    assert window.stack.currentWidget().widget() is editor
    window.undo_action.trigger()
    window.undo_action.trigger()
    assert calls[-1][0] is window.document.scenario and window.run_panel.run_button.isEnabled()


def test_undo_redo_actions_and_shortcuts(window: MainWindow) -> None:
    window.document.set_value(("valuation", "willingness_to_pay"), 50000.0)
    edited = window.document.text
    assert window.undo_action.shortcut() == QKeySequence(QKeySequence.StandardKey.Undo)
    assert window.redo_action.shortcut() == QKeySequence(QKeySequence.StandardKey.Redo)
    window.undo_action.trigger()
    assert window.document.text == DEMO_TEXT
    window.redo_action.trigger()
    assert window.document.text == edited


def test_save_as_then_reopen_is_equal(window: MainWindow, tmp_path: Path, monkeypatch) -> None:
    target = tmp_path / "saved"
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(target), "Scenario files (*.toml)"))
    window.document.set_value(("transitions", 0, "scale"), 28.0)
    text = window.document.text
    assert window.save()
    saved = target.with_suffix(".toml")
    assert saved.read_text(encoding="utf-8") == text and not window.document.dirty
    monkeypatch.setattr(QFileDialog, "getOpenFileName", lambda *a, **k: (str(saved), ""))
    window.document.load_text("format_version = 1\n")  # something else, then open the saved file
    window.open_dialog()
    assert window.document.text == text and window.document.scenario.model.transitions[0].hazard.scale == 28.0
    window._fill_recent()
    assert str(saved) in [a.text() for a in window.recent_menu.actions()]


@pytest.mark.parametrize("choice", [Button.Cancel, Button.Discard, Button.Save])
def test_unsaved_changes_prompt_on_close(qtbot, window: MainWindow, tmp_path: Path, monkeypatch, choice) -> None:
    path = scenario_file(tmp_path)
    window.open_path(path)
    window.document.set_value(("horizon", "value"), 88)
    window.document.autosave_now()
    asked = answer(monkeypatch, choice)
    window.show()
    closed = window.close()
    assert asked and asked[0][0] == "Unsaved changes"
    assert closed == (choice != Button.Cancel)
    saved = path.read_text(encoding="utf-8")
    if choice == Button.Save:
        assert "value = 88" in saved and not window.document.dirty
    else:
        assert saved == DEMO_TEXT
    if choice == Button.Cancel:
        assert window.isVisible() and window.document.dirty
        assert window.document.recovery_path().exists()  # nothing typed is lost
    else:
        assert not window.document.recovery_path().exists()


def test_no_prompt_when_clean(window: MainWindow, monkeypatch) -> None:
    asked = answer(monkeypatch, Button.Cancel)
    assert window.close() and asked == []


def test_drag_and_drop_opens_a_toml_file(window: MainWindow, tmp_path: Path) -> None:
    path = scenario_file(tmp_path, "dropped.toml")
    mime = QMimeData()
    mime.setUrls([QUrl.fromLocalFile(str(path))])
    enter = QDragEnterEvent(window.rect().center(), Qt.DropAction.CopyAction, mime, Qt.MouseButton.LeftButton,
                            Qt.KeyboardModifier.NoModifier)
    window.dragEnterEvent(enter)
    assert enter.isAccepted()
    drop = QDropEvent(QPointF(window.rect().center()), Qt.DropAction.CopyAction, mime, Qt.MouseButton.LeftButton,
                      Qt.KeyboardModifier.NoModifier)
    window.dropEvent(drop)
    assert drop.isAccepted()
    assert window.document.path == path.resolve() and "dropped.toml" in window.windowTitle()
    other = QMimeData()
    other.setUrls([QUrl.fromLocalFile(str(tmp_path / "table.csv"))])
    refused = QDragEnterEvent(window.rect().center(), Qt.DropAction.CopyAction, other, Qt.MouseButton.LeftButton,
                              Qt.KeyboardModifier.NoModifier)
    window.dragEnterEvent(refused)
    assert not refused.isAccepted()


def test_recovery_is_offered_when_opening(window: MainWindow, tmp_path: Path, monkeypatch) -> None:
    path = scenario_file(tmp_path)
    recovery = window.document.recovery_path(path)
    recovery.parent.mkdir(parents=True, exist_ok=True)
    recovered = DEMO_TEXT.replace("value = 100", "value = 77")
    recovery.write_text(recovered, encoding="utf-8")
    asked = answer(monkeypatch, Button.Yes)
    window.show()
    window.open_path(path)
    assert asked and asked[0][0] == "Recover unsaved changes"
    assert window.document.text == recovered and window.document.dirty
    assert window.document.scenario.model.horizon.value == 77


def test_new_from_demo_menu(window: MainWindow, monkeypatch) -> None:
    window.document.set_value(("horizon", "value"), 90)
    answer(monkeypatch, Button.Discard)
    demo_menu = next(a.menu() for a in window.menuBar().actions()[0].menu().actions() if a.text() == "New from demo")
    demo_menu.actions()[0].trigger()
    assert window.document.text == DEMO_TEXT and not window.document.dirty


def test_diagram_click_selects_transition_editor_and_preview(window: MainWindow) -> None:
    window._on_diagram_clicked("disease death")
    editor = window.editor(TransitionsEditor)
    assert editor.current_index == 2 and window.stack.currentWidget().widget() is editor
    assert window.preview.exit_combo.currentText() == "disease death"
    editor.select(1)
    assert window.preview.exit_combo.currentText() == "recovery"


def test_about_contains_the_cautions_and_version(window: MainWindow) -> None:
    text = about_text()
    for caution in CAUTIONS:
        assert caution in text
    assert "not for clinical decisions about individual patients" in text
    assert "reviewed by qualified people" in text and "local HTA guidance" in text
    assert __version__ in text
    dialog = window.show_about()
    assert isinstance(dialog, AboutDialog) and dialog.label.text() == text
    dialog.close()


def test_results_flow_to_the_results_panel(qtbot, window: MainWindow) -> None:
    results = run_scenario(window.document.scenario, patients=2000, workers=1, study=False)
    with qtbot.waitSignal(window.results_shown, timeout=20000):
        window.run_panel.results_ready.emit(results)
    assert window.tabs.currentWidget() is window.results_page


def test_screenshot_of_the_main_window(qtbot, window: MainWindow) -> None:
    window.show()
    qtbot.waitExposed(window)
    editor = window.editor(TransitionsEditor)
    window.show_editor(editor)
    editor.select(1)
    assert window.preview.exit_combo.currentText() == "recovery"
    assert editor.detail.isVisible() and editor.form.param_fields["rate"].isVisible()
    qtbot.wait(100)  # let the plots lay out their axes
    image = window.grab()
    assert image.width() >= 1200 and image.save("/tmp/hazardtrace_main.png")


def test_app_main_opens_the_scenario_given(qtbot, tmp_path: Path, monkeypatch) -> None:
    from PySide6.QtWidgets import QApplication

    from gui import app as app_module

    path = scenario_file(tmp_path, "given.toml")
    seen = {}

    def fake_exec(self=None) -> int:  # instead of the event loop: look at the window, then return
        window = next(w for w in QApplication.topLevelWidgets() if isinstance(w, MainWindow) and w.isVisible())
        seen["path"] = window.document.path
        seen["title"] = window.windowTitle()
        window.document.undo_stack.setClean()
        window.close()
        window.deleteLater()
        return 0
    monkeypatch.setattr(QApplication, "exec", fake_exec)
    monkeypatch.setattr(ScenarioDocument, "__init__", _test_document_init(tmp_path))
    assert app_module.main([str(path)]) == 0
    assert seen["path"] == path.resolve() and seen["title"].startswith("given.toml")


def _test_document_init(tmp_path: Path):
    """ScenarioDocument.__init__ with the test's settings file and recovery folder (not the user's)."""
    original = ScenarioDocument.__init__

    def init(self, parent=None, **kwargs):
        original(self, parent, recovery_dir=tmp_path / "recovery",
                 settings=QSettings(str(tmp_path / "app.ini"), QSettings.Format.IniFormat), autosave_ms=0)
    return init
