"""File > Write report… (issue 17 item 3, in the window): the report of what is on screen, written by
sim.report off the GUI thread: the probabilistic analysis on its tab (with its own settings and the
population EVPI its view shows), or the run's results."""

from __future__ import annotations

import html
import subprocess
import re
from pathlib import Path

import pytest
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QFileDialog

from gui.main_window import MainWindow
from sim.report import inputs_from_results, report_html, significant
from sim.uncertainty import population_factor

ROOT = Path(__file__).resolve().parents[2]
QUORREL = ROOT / "scenarios" / "quorrel_psa.toml"


@pytest.fixture
def window(main_window) -> MainWindow:
    return main_window(QUORREL)


def write_report_to(qtbot, window: MainWindow, monkeypatch, path: Path, signal) -> str:
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(path), "HTML report (*.html)"))
    with qtbot.waitSignal(signal, timeout=60000) as blocker:
        window.report_action.trigger()
    assert blocker.args == [str(path)]
    return path.read_text(encoding="utf-8")


def test_write_report_of_what_is_on_screen(qtbot, window: MainWindow, tmp_path: Path, monkeypatch, set_spin) -> None:
    assert not window.report_action.isEnabled()  # nothing on screen yet
    assert "Write &report…" in [a.text() for a in window.menuBar().actions()[0].menu().actions()]

    # the analysis on its tab: its own report (as `hazardtrace report PSA_DIR` writes it)
    page = window.psa_page
    window.tabs.setCurrentWidget(page)
    set_spin(page.controls.draws, 20)
    set_spin(page.controls.patients, 100)
    set_spin(page.controls.workers, 1)
    with qtbot.waitSignal(page.results_shown, timeout=60000):
        qtbot.mouseClick(page.controls.run_button, Qt.MouseButton.LeftButton)
    assert window.report_action.isEnabled()
    set_spin(page.evpi.population, 1000)  # the EVPI view shows a population: so does the report
    set_spin(page.evpi.years, 5)
    text = write_report_to(qtbot, window, monkeypatch, tmp_path / "psa.html", page.written)
    assert window.statusBar().currentMessage() == f"Written: {tmp_path / 'psa.html'}"
    assert 'id="uncertainty"' in text
    # the analysis' own settings, not a run's: 20 draws of the 17 inputs, 100 patients per draw, its seed
    assert "20 parameter draws of 17 uncertain parameters, 100 simulated patients per draw" in text
    assert f"seed {page.outcome.result.settings['seed']}" in text
    factor = population_factor(1000, 5, page.outcome.scenario.model.valuation.discount_costs)
    assert f"per-patient EVPI times {significant(factor, 4)} discounted patients" in text
    for spec in page.outcome.scenario.uncertainty:  # the uncertain inputs are listed
        assert all(html.escape(k) in text for k in spec.keys)

    # an edit after the analysis: the page says its views show the earlier version
    assert not page.stale.isVisible()
    window.document.set_value(("valuation", "discount_costs"), 0.04)
    assert page.stale.isVisible() and "changed since this analysis" in page.stale.text()
    window.undo_action.trigger()
    assert not page.stale.isVisible()

    # the run's results on the Results tab: the run's report, without the analysis
    run = window.run_panel
    set_spin(run.patients, 400)
    run.study.setChecked(False)
    with qtbot.waitSignal(window.results_shown, timeout=60000):
        qtbot.mouseClick(run.run_button, Qt.MouseButton.LeftButton)
    assert window.tabs.currentWidget() is window.results_page
    results = window.results_panel.results
    text = write_report_to(qtbot, window, monkeypatch, tmp_path / "run.html", window.results_panel.report_written)
    assert window.statusBar().currentMessage() == f"Report written: {tmp_path / 'run.html'}"
    assert 'id="uncertainty"' not in text
    # what sim.report writes for the run in memory, nothing else (matplotlib's SVG ids aside)
    expected = report_html(inputs_from_results(results))
    ids = re.compile(r'(id|href|clip-path)="[^"]*"|url\(#[^)]*\)')
    assert ids.sub("", text) == ids.sub("", expected)

    # the same report as PDF (by the file's suffix), written by WeasyPrint off the GUI thread
    pdf = tmp_path / "run.pdf"
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(pdf), "PDF report (*.pdf)"))
    with qtbot.waitSignal(window.results_panel.report_written, timeout=120000) as blocker:
        window.report_action.trigger()
    assert blocker.args == [str(pdf)]
    assert pdf.read_bytes().startswith(b"%PDF-")
    words = subprocess.run(["pdftotext", str(pdf), "-"], capture_output=True, text=True, check=True).stdout
    assert "Quorrel" in words and "not for clinical decisions" in words  # the scenario name, the caution
