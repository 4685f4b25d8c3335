"""The editing side of the window as a modeller meets it (issue 12 items 2, 3, 5, 8, 9, 15, 16, 17 and
the friction list; issue 13 item 8): recovery files, shortcuts in fields, help, stale results, the
section list, Save as to another folder, every problem of an item, messages in the user's words."""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from PySide6.QtCore import QCoreApplication, QEvent, QPointF, QSettings, Qt
from PySide6.QtGui import QMouseEvent
from PySide6.QtTest import QTest
from PySide6.QtWidgets import QApplication, QFileDialog, QMessageBox

import sim.io.atomic
from gui import launcher
from gui.document import BLANK_TEXT, ScenarioDocument, default_recovery_dir
from gui.editors import BackgroundEditor, HorizonEditor, SourceEditor, StatesEditor, TransitionsEditor
from gui.editors.fields import TYPING_PAUSE_MS, is_marked
from gui.main_window import MainWindow
from sim.io.demo import demo_path
from sim.io.scenario import parse_scenario
from sim.pipeline.run import run_scenario

LANTHIC = demo_path("lanthic").read_text(encoding="utf-8")
FERROVIAN = demo_path("ferrovian")
Button = QMessageBox.StandardButton


def make_document(tmp_path: Path) -> ScenarioDocument:
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
    return ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)


@pytest.fixture
def window(qtbot, tmp_path: Path) -> MainWindow:
    w = MainWindow(make_document(tmp_path))
    w.start(None)
    yield w
    w.document.undo_stack.setClean()
    w.close()
    w.deleteLater()


def shown(qtbot, w: MainWindow) -> MainWindow:
    w.show()
    qtbot.waitExposed(w)
    w.activateWindow()
    qtbot.waitUntil(lambda: QApplication.activeWindow() is w, timeout=3000)
    return w


def answer(monkeypatch, button: Button) -> list:
    asked: list = []

    def fake(parent, title, text, *args, **kwargs):
        asked.append((title, text))
        return button
    monkeypatch.setattr(QMessageBox, "question", fake)
    return asked


def focus_field(qtbot, widget) -> None:
    widget.setFocus(Qt.FocusReason.MouseFocusReason)
    qtbot.waitUntil(widget.hasFocus, timeout=3000)


def rate_field(window: MainWindow, index: int = 1):
    editor = window.editor(TransitionsEditor)
    window.show_editor(editor)
    editor.select(index)
    return editor.detail_fields.widget_at(("transitions", index, "rate"))


# ----------------------------------------------------------------------------- item 2, issue 13 item 8: recovery
def test_undo_back_to_saved_removes_the_recovery_file(window: MainWindow, tmp_path: Path) -> None:
    path = tmp_path / "model.toml"
    path.write_text(LANTHIC, encoding="utf-8")
    window.open_path(path)
    doc = window.document
    doc.set_value(("horizon", "value"), 90)
    assert doc.autosave_now() == doc.recovery_path() and doc.recovery_path().exists()
    doc.undo_stack.undo()  # the text equals what is saved again
    assert not doc.dirty and not doc.recovery_path().exists()
    assert doc.find_recovery(path) is None  # reopening offers nothing


def test_clean_quit_leaves_no_recovery_file(qtbot, tmp_path: Path, monkeypatch) -> None:
    w = MainWindow(make_document(tmp_path))
    w.start(None)
    doc = w.document
    doc.set_value(("horizon", "value"), 90)
    doc.autosave_now()
    recovery = doc.recovery_path()
    doc.set_value(("horizon", "value"), 100)  # edited back by hand: the text equals the demo's, still "dirty"
    asked = answer(monkeypatch, Button.Discard)
    assert w.close() and asked
    assert not recovery.exists()
    w.deleteLater()


def test_recovery_question_waits_for_the_window(qtbot, tmp_path: Path, monkeypatch) -> None:
    doc = make_document(tmp_path)
    recovery = doc.recovery_dir / "untitled-demo-lanthic.toml"
    recovery.parent.mkdir(parents=True)
    recovery.write_text(LANTHIC.replace("value = 100", "value = 80"), encoding="utf-8")
    asked = answer(monkeypatch, Button.Yes)
    w = MainWindow(doc)
    w.start(None)  # as the application starts: before the window is shown
    assert asked == []  # never over an empty screen
    w.show()
    qtbot.waitUntil(lambda: bool(asked), timeout=3000)
    assert asked[0][0] == "Recover unsaved changes" and doc.scenario.model.horizon.value == 80
    doc.undo_stack.setClean()
    w.close()
    w.deleteLater()


def test_untitled_documents_have_recovery_files_of_their_own(tmp_path: Path) -> None:
    first = make_document(tmp_path)
    first.new_from_demo("lanthic")
    first.set_value(("horizon", "value"), 90)
    kept = first.autosave_now()
    second = make_document(tmp_path)  # a new session on another demo
    second.new_from_demo("ferrovian")
    assert second.recovery_path() != kept and second.find_recovery() is None
    third = make_document(tmp_path)  # a new session on the same demo is offered its edits
    third.new_from_demo("lanthic")
    assert third.find_recovery() == kept
    blank = make_document(tmp_path)
    blank.new_blank()
    assert blank.recovery_path() not in (kept, second.recovery_path())


def test_recovery_folder_name_is_not_doubled(qapp) -> None:
    old = (QCoreApplication.organizationName(), QCoreApplication.applicationName())
    QCoreApplication.setOrganizationName("HazardTrace")
    QCoreApplication.setApplicationName("HazardTrace")
    try:
        folder = default_recovery_dir()
    finally:
        QCoreApplication.setOrganizationName(old[0])
        QCoreApplication.setApplicationName(old[1])
    assert folder.name == "recovery" and folder.parent.name == "HazardTrace"
    assert folder.parts.count("HazardTrace") == 1


def test_save_syncs_the_file_before_the_rename(window: MainWindow, tmp_path: Path, monkeypatch) -> None:
    calls: list[str] = []
    real_fsync, real_replace = os.fsync, os.replace
    monkeypatch.setattr(sim.io.atomic.os, "fsync", lambda fd: (calls.append("fsync"), real_fsync(fd))[1])
    monkeypatch.setattr(sim.io.atomic.os, "replace", lambda a, b: (calls.append("replace"), real_replace(a, b))[1])
    window.document.save_as(tmp_path / "synced.toml")
    assert "fsync" in calls and "replace" in calls and calls.index("fsync") < calls.index("replace")
    assert (tmp_path / "synced.toml").read_text(encoding="utf-8") == window.document.text


# ----------------------------------------------------------------------------- item 3: shortcuts in a field
def test_undo_and_redo_keys_work_with_the_cursor_in_a_field(qtbot, window: MainWindow) -> None:
    shown(qtbot, window)
    doc = window.document
    doc.set_value(("horizon", "value"), 90)
    rate = rate_field(window)
    focus_field(qtbot, rate)
    QTest.keyClick(rate, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)
    assert doc.text == LANTHIC  # the document's edit was undone, not the field's text
    QTest.keyClick(rate, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier | Qt.KeyboardModifier.ShiftModifier)
    assert doc.scenario.model.horizon.value == 90
    # typed but not yet applied: Ctrl+Z applies then undoes it, the field shows the value again
    rate.selectAll()
    QTest.keyClicks(rate, "0.3")
    QTest.keyClick(rate, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)
    assert doc.get(("transitions", 1, "rate")) == 0.15 and rate.text() == "0.15"
    assert doc.scenario.model.horizon.value == 90


def test_open_save_new_keys_act_on_the_file_not_the_field(qtbot, window: MainWindow, tmp_path: Path,
                                                          monkeypatch) -> None:
    shown(qtbot, window)
    target = tmp_path / "typed.toml"
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(target), ""))
    rate = rate_field(window)
    focus_field(qtbot, rate)
    rate.selectAll()
    QTest.keyClicks(rate, "0.25")
    QTest.keyClick(rate, Qt.Key.Key_S, Qt.KeyboardModifier.ControlModifier)
    assert target.exists() and "rate = 0.25" in target.read_text(encoding="utf-8")  # what was typed is saved
    assert rate.text() == "0.25" and not window.document.dirty
    opened: list = []
    monkeypatch.setattr(QFileDialog, "getOpenFileName", lambda *a, **k: (opened.append(a[2]), ("", ""))[1])
    QTest.keyClick(rate, Qt.Key.Key_O, Qt.KeyboardModifier.ControlModifier)
    assert opened == [str(tmp_path)] and rate.text() == "0.25"  # the dialog starts where the scenario is
    QTest.keyClick(rate, Qt.Key.Key_N, Qt.KeyboardModifier.ControlModifier)
    assert window.document.text == BLANK_TEXT and window.document.display_name == "Untitled (new model)"


# ----------------------------------------------------------------------------- item 5: help
def test_help_lists_gui_and_gui_help_opens_no_window(capsys, qapp) -> None:
    with pytest.raises(SystemExit) as stop:
        launcher.main(["--help"])
    assert stop.value.code == 0 and "gui" in capsys.readouterr().out
    before = len(QApplication.topLevelWidgets())
    assert launcher.main(["gui", "--help"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("usage: hazardtrace gui") and "scenario" in out
    assert not any(isinstance(w, MainWindow) and w.isVisible() for w in QApplication.topLevelWidgets())
    assert len(QApplication.topLevelWidgets()) == before


def test_missing_file_on_the_command_line_is_an_error_not_a_dead_window(capsys, tmp_path: Path) -> None:
    assert launcher.main(["gui", str(tmp_path / "missing.toml")]) == 2
    assert "missing.toml: no such scenario file" in capsys.readouterr().err


def test_unreadable_file_starts_a_blank_model(qtbot, tmp_path: Path, monkeypatch) -> None:
    warned: list = []
    monkeypatch.setattr(QMessageBox, "warning", lambda *a, **k: warned.append(a[2]))
    w = MainWindow(make_document(tmp_path))
    assert not w.start(tmp_path)  # a folder: cannot be read as a scenario
    assert warned and str(tmp_path) in warned[0]
    editor = w.editor(StatesEditor)
    assert w.document.text == BLANK_TEXT and editor.body.isEnabled()  # not a greyed-out window
    w.close()
    w.deleteLater()


# ----------------------------------------------------------------------------- items 8 and 16: stale results
def test_results_are_labelled_after_edits_and_after_another_scenario(qtbot, window: MainWindow) -> None:
    results = run_scenario(window.document.scenario, patients=500, workers=1, study=False)
    window.run_panel.last_run.setText("Last run: 500 patients")
    with qtbot.waitSignal(window.results_shown, timeout=20000):
        window.run_panel.results_ready.emit(results)
    tab = window.tabs.indexOf(window.results_page)
    assert window.results_state() == "current" and window.tabs.tabText(tab) == "Results"
    assert not window.results_banner.isVisibleTo(window)
    window.document.set_value(("horizon", "value"), 90)  # the model changes: the run is out of date
    assert window.results_state() == "edited" and window.tabs.tabText(tab) == "Results (out of date)"
    assert window.results_banner.isVisibleTo(window) and "earlier version" in window.results_banner.text()
    assert window.run_panel.last_run.text().startswith("Before the last edits.")
    window.document.undo_stack.undo()  # back to the model that was run
    assert window.results_state() == "current" and not window.results_banner.isVisibleTo(window)
    assert window.run_panel.last_run.text() == "Last run: 500 patients"
    window.new_from_demo("ferrovian")
    assert window.results_state() == "previous" and window.tabs.tabText(tab) == "Results (previous scenario)"
    assert "previous scenario" in window.results_banner.text()
    assert window.run_panel.last_run.text().startswith("Previous scenario's run.")


# ----------------------------------------------------------------------------- item 9: the section list
def test_a_release_on_a_section_shows_it_even_if_the_press_was_taken(qtbot, window: MainWindow) -> None:
    shown(qtbot, window)
    rate = rate_field(window)
    focus_field(qtbot, rate)
    rate.selectAll()
    QTest.keyClicks(rate, "-0.5")
    row = window.editors.index(window.editor(HorizonEditor))
    centre = QPointF(window.sections.visualItemRect(window.sections.item(row)).center())
    # the press committed the field's edit and did not reach the list: only the release arrives
    release = QMouseEvent(QEvent.Type.MouseButtonRelease, centre, centre, Qt.MouseButton.LeftButton,
                          Qt.MouseButton.NoButton, Qt.KeyboardModifier.NoModifier)
    QApplication.sendEvent(window.sections.viewport(), release)
    assert window.stack.currentIndex() == row
    # and a plain click after typing changes section at once (the edit is committed too)
    focus_field(qtbot, rate)
    rate.selectAll()
    QTest.keyClicks(rate, "0.2")
    other = window.editors.index(window.editor(StatesEditor))
    QTest.mouseClick(window.sections.viewport(), Qt.MouseButton.LeftButton, Qt.KeyboardModifier.NoModifier,
                     window.sections.visualItemRect(window.sections.item(other)).center())
    assert window.stack.currentIndex() == other and window.document.get(("transitions", 1, "rate")) == 0.2


# ----------------------------------------------------------------------------- item 15: Save as elsewhere
def test_save_as_into_another_folder_rewrites_relative_life_table_paths(window: MainWindow, tmp_path: Path,
                                                                        monkeypatch) -> None:
    project = tmp_path / "project"
    (project / "tables").mkdir(parents=True)
    (project / "tables" / "life.csv").write_bytes((FERROVIAN.parent / "tables" / "synthetic_life_table.csv").read_bytes())
    source = project / "model.toml"
    source.write_text(FERROVIAN.read_text(encoding="utf-8").replace("tables/synthetic_life_table.csv",
                                                                   "tables/life.csv"), encoding="utf-8")
    window.open_path(source)
    assert window.document.scenario is not None
    target = tmp_path / "elsewhere" / "deeper" / "copy.toml"
    target.parent.mkdir(parents=True)
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(target), ""))
    assert window.save_as()
    saved = target.read_text(encoding="utf-8")
    assert 'file = "../../project/tables/life.csv"' in saved
    assert "# probability of dying within each age band" in saved  # comments kept
    assert parse_scenario(saved, target).model.background is not None  # valid at once, from its new folder
    assert "file paths rewritten" in window.statusBar().currentMessage()
    assert source.read_text(encoding="utf-8").count('file = "tables/life.csv"') == 1  # the original untouched
    window.document.undo_stack.undo()  # the rewrite is an edit that can be undone
    assert window.document.get(("background", "life_table", "file")) == "tables/life.csv"


# ----------------------------------------------------------------------------- item 17: every problem shown
def test_every_problem_of_one_transition_is_marked(qtbot, window: MainWindow) -> None:
    editor = window.editor(TransitionsEditor)
    window.show_editor(editor)
    editor.select(1)
    window.document.set_values([(("transitions", 1, "name"), ""), (("transitions", 1, "rate"), -0.5)], "two problems")
    name = editor.detail_fields.widget_at(("transitions", 1, "name"))
    rate = editor.detail_fields.widget_at(("transitions", 1, "rate"))
    assert is_marked(name) and is_marked(rate)
    assert rate.toolTip() == "Transition 2: rate must not be negative (got \u22120.5)"
    assert name.toolTip() == "Transition 2: name must not be empty"
    lines = window.document.text.splitlines()
    for err in window.document.errors:  # each line is the key's own line, not the table header
        assert lines[err.line - 1].lstrip().startswith(err.key[-1] + " ="), err


def test_a_missing_life_table_column_marks_the_column_field(qtbot, tmp_path: Path) -> None:
    doc = make_document(tmp_path)
    doc.open(FERROVIAN)
    editor = BackgroundEditor(doc)
    qtbot.addWidget(editor)
    doc.set_value(("background", "life_table", "columns", "female"), "q_femal")
    (err,) = doc.errors
    assert err.key == ("background", "life_table", "columns", "female") and err.value == "q_femal"
    column = editor.detail_fields.widget_at(err.key)
    assert is_marked(column) and not is_marked(editor.file_field)
    assert err.text.startswith("Life table: column for female cannot use the life table")
    assert doc.text.splitlines()[err.line - 1].startswith("columns = {")
    doc.undo_stack.undo()
    doc.set_value(("background", "life_table", "age_column"), "agex")
    assert [e.key for e in doc.errors] == [("background", "life_table", "age_column")]


# ----------------------------------------------------------------------------- friction
def test_fields_validate_after_a_pause_in_typing(qtbot, window: MainWindow) -> None:
    shown(qtbot, window)
    rate = rate_field(window)
    focus_field(qtbot, rate)
    rate.selectAll()
    QTest.keyClicks(rate, "-1")
    assert window.document.get(("transitions", 1, "rate")) == 0.15  # not while typing
    qtbot.waitUntil(lambda: is_marked(rate), timeout=TYPING_PAUSE_MS * 5)
    assert rate.hasFocus() and rate.text() == "-1"
    QTest.keyClicks(rate, ".")  # "-1." is the same value: the field keeps what was typed
    qtbot.wait(TYPING_PAUSE_MS * 2)
    assert rate.text() == "-1." and window.document.get(("transitions", 1, "rate")) == -1


def test_new_blank_model_and_unfinished_parts_are_hints(qtbot, window: MainWindow) -> None:
    window.new_blank()
    doc = window.document
    assert doc.names("states") == ["alive", "dead"] and not doc.has(("transitions",))
    assert doc.errors and all(e.incomplete for e in doc.errors)
    assert not window.run_panel.run_button.isEnabled()  # nothing to run yet
    assert window.statusBar().currentMessage() == "Model not finished yet"
    assert window.problem.text() == "Not finished yet: add a transition (Transitions section): the model has none"
    window.go_to_problem()  # "Show" goes where transitions are added
    assert window.stack.currentWidget().widget() is window.editor(TransitionsEditor)
    window.editor(TransitionsEditor).add_button.click()
    assert doc.scenario is not None and doc.scenario.model.transitions[0].source == "alive"
    assert window.run_panel.run_button.isEnabled()
    doc.set_value(("transitions", 0, "rate"), -1)  # a real error is not a hint
    assert not doc.errors[0].incomplete and window.problem.text().startswith("Problem:")


def test_screenshot_of_the_editing_window(qtbot, window: MainWindow, monkeypatch) -> None:
    answer(monkeypatch, Button.Discard)
    shown(qtbot, window)
    editor = window.editor(TransitionsEditor)
    window.show_editor(editor)
    editor.select(1)
    window.document.set_values([(("transitions", 1, "name"), ""), (("transitions", 1, "rate"), -0.5)], "two problems")
    qtbot.wait(100)
    assert window.grab().save("/tmp/hazardtrace_editing_problems.png")
    window.new_blank()
    window.show_editor(window.editor(StatesEditor))
    qtbot.wait(100)
    assert window.grab().save("/tmp/hazardtrace_new_model.png")
    window.show_editor(window.editor(SourceEditor))


def test_preview_shows_what_is_edited_and_nothing_of_the_previous_model(qtbot, window: MainWindow, monkeypatch) -> None:
    preview = window.preview
    window.show_editor(window.editor(BackgroundEditor))
    assert preview.exit_combo.currentText() == "background death" and preview.sex_combo.isEnabled()
    preview.sex_combo.setCurrentText("male")
    hazard, _clock = preview.selected_hazard()
    male = window.document.scenario.model.background.hazards["male"]
    assert hazard.hazard(60.0) == male.hazard(60.0)  # the male Gompertz law being edited
    window.show_editor(window.editor(TransitionsEditor))
    window.editor(TransitionsEditor).select(0)
    assert preview.exit_combo.currentText() == "onset"
    window.new_blank()  # invalid until a transition is added: no curve of the demo stays
    assert preview.curves is None and preview.exit_combo.count() == 0
    assert preview.hazard_curve.getData()[0] is None or len(preview.hazard_curve.getData()[0]) == 0


def test_a_run_finishing_after_another_scenario_was_opened_is_labelled_previous(qtbot, window: MainWindow,
                                                                                monkeypatch) -> None:
    results = run_scenario(window.document.scenario, patients=300, workers=1, study=False)
    window.run_panel.run_started.emit()  # Run pressed on the demo...
    window.new_blank()  # ...and another model opened while it runs
    with qtbot.waitSignal(window.results_shown, timeout=20000):
        window.run_panel.results_ready.emit(results)
    assert window.results_state() == "previous" and window.results_banner.isVisibleTo(window)
