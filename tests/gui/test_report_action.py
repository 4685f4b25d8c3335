"""File > Write report… (issue 17 item 3, in the window): the report of the results on screen, written
by sim.report off the GUI thread, with the probabilistic analysis' tables when the analysis shown is
of the same scenario."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
from PySide6.QtCore import QSettings, Qt
from PySide6.QtWidgets import QFileDialog

from gui.document import ScenarioDocument
from gui.main_window import MainWindow
from sim.report import inputs_from_results, report_html

ROOT = Path(__file__).resolve().parents[2]
QUORREL = ROOT / "scenarios" / "quorrel_psa.toml"


@pytest.fixture
def window(qtbot, tmp_path: Path) -> MainWindow:
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
    doc = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    w = MainWindow(doc)
    w.start(QUORREL)
    w.show()
    qtbot.waitExposed(w)
    yield w
    w.psa_page.shutdown()
    w.document.undo_stack.setClean()
    w.close()
    w.deleteLater()


def set_spin(qtbot, spin, value: int) -> None:
    spin.setFocus()
    spin.selectAll()
    qtbot.keyClicks(spin, str(value))
    qtbot.keyClick(spin, Qt.Key.Key_Tab)
    assert spin.value() == value


def write_report_to(qtbot, window: MainWindow, monkeypatch, path: Path) -> str:
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(path), "HTML report (*.html)"))
    with qtbot.waitSignal(window.results_panel.report_written, timeout=60000) as blocker:
        window.report_action.trigger()
    assert blocker.args == [str(path)]
    return path.read_text(encoding="utf-8")


def test_write_report_of_the_run_on_screen_and_of_its_psa(qtbot, window: MainWindow, tmp_path: Path,
                                                          monkeypatch) -> None:
    assert not window.report_action.isEnabled()  # nothing on screen yet
    assert "Write &report…" in [a.text() for a in window.menuBar().actions()[0].menu().actions()]
    run = window.run_panel
    set_spin(qtbot, run.patients, 400)
    run.study.setChecked(False)
    with qtbot.waitSignal(window.results_shown, timeout=60000):
        qtbot.mouseClick(run.run_button, Qt.MouseButton.LeftButton)
    assert window.report_action.isEnabled()

    results = window.results_panel.results
    text = write_report_to(qtbot, window, monkeypatch, tmp_path / "run.html")
    assert window.statusBar().currentMessage() == f"Report written: {tmp_path / 'run.html'}"
    assert results.scenario.model.name in text and 'id="uncertainty"' not in text  # no analysis shown

    page = window.psa_page
    window.tabs.setCurrentWidget(page)
    set_spin(qtbot, page.controls.draws, 20)
    set_spin(qtbot, page.controls.patients, 100)
    set_spin(qtbot, page.controls.workers, 1)
    with qtbot.waitSignal(page.results_shown, timeout=60000):
        qtbot.mouseClick(page.controls.run_button, Qt.MouseButton.LeftButton)
    text = write_report_to(qtbot, window, monkeypatch, tmp_path / "run_psa.html")
    assert 'id="uncertainty"' in text
    tables = page.report_tables(results.scenario)
    assert tables is not None and tables.keys() == page.outcome.summaries.keys()
    assert all(tables[k] is page.outcome.summaries[k] for k in tables)  # the tables on screen, as they are
    # what sim.report writes for the run in memory and these tables, nothing else (matplotlib's SVG ids aside)
    expected = report_html(inputs_from_results(results), psa_tables=tables)
    ids = re.compile(r'(id|href|clip-path)="[^"]*"|url\(#[^)]*\)')
    assert ids.sub("", text) == ids.sub("", expected)

    # an analysis of another scenario text is not mixed into the report of this run
    assert not page.stale.isVisible()
    window.document.set_value(("valuation", "discount_costs"), 0.04)
    assert page.report_tables(results.scenario) is not None  # the analysis is of the run's text still
    assert page.stale.isVisible() and "changed since this analysis" in page.stale.text()
    page.controls.start()
    qtbot.waitUntil(lambda: not page.controls.is_running(), timeout=60000)
    assert page.report_tables(results.scenario) is None
    assert not page.stale.isVisible()
