"""The probabilistic analysis in the window (issue 14 item 6): run from the "Probabilistic analysis"
tab with progress and cancel, off the GUI thread; the views show what sim computes on the same
per-draw table (the acceptability curve, frontier, EVPI and convergence recomputed here with
sim.uncertainty's functions on the analysis' table must equal the plotted data), and their exports."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QFileDialog

from gui.main_window import MainWindow
from gui.uncertainty.page import CANCELLING_TEXT
from gui.uncertainty.views import Z95
from sim.psa import EXACT, SIMULATED, table_hash, wtp_grid_for
from sim.uncertainty import (acceptability_curve, acceptability_frontier, ce_plane, evpi, inb_convergence,
                             population_evpi)

ROOT = Path(__file__).resolve().parents[2]
QUORREL = ROOT / "scenarios" / "quorrel_psa.toml"


@pytest.fixture
def window(main_window) -> MainWindow:
    return main_window(QUORREL, size=(1500, 950))


def open_page(qtbot, window: MainWindow):
    page = window.psa_page
    window.tabs.setCurrentWidget(page)
    qtbot.waitUntil(page.isVisible, timeout=3000)
    return page


def test_cancel_leaves_the_window_responsive_and_keeps_nothing(qtbot, window: MainWindow, set_spin) -> None:
    page = open_page(qtbot, window)
    c = page.controls
    set_spin(c.draws, 400)
    set_spin(c.patients, 2000)
    set_spin(c.workers, 1)
    qtbot.mouseClick(c.run_button, Qt.MouseButton.LeftButton)
    assert c.is_running() and c.job.worker.thread() != window.thread()  # off the GUI thread
    assert not c.run_button.isEnabled() and c.cancel_button.isEnabled() and not c.draws.isEnabled()
    qtbot.waitUntil(lambda: "draws" in c.status.text(), timeout=20000)  # progress arrives while it runs
    assert "of 400 draws" in c.status.text()
    window.tabs.setCurrentIndex(0)  # the window answers while the analysis runs
    window.tabs.setCurrentWidget(page)
    qtbot.mouseClick(c.cancel_button, Qt.MouseButton.LeftButton)
    assert c.status.text() == CANCELLING_TEXT and not c.cancel_button.isEnabled()
    qtbot.waitUntil(lambda: not c.is_running(), timeout=30000)
    assert c.status.text().startswith("Cancelled")
    assert page.outcome is None and page.stack.currentWidget() is not page.tabs
    assert c.run_button.isEnabled()


def test_finished_analysis_plots_what_sim_computes(qtbot, window: MainWindow, tmp_path: Path, monkeypatch, set_spin,
                                                   screenshots: Path) -> None:
    page = open_page(qtbot, window)
    c = page.controls
    set_spin(c.draws, 20)
    set_spin(c.patients, 200)
    set_spin(c.workers, 1)
    box = c.conversions["competing-exit"]  # two of the three approximations
    box.setFocus()
    qtbot.keyClick(box, Qt.Key.Key_Space)
    assert not box.isChecked()
    with qtbot.waitSignal(page.results_shown, timeout=60000):
        qtbot.mouseClick(c.run_button, Qt.MouseButton.LeftButton)
    o = page.outcome
    assert o is not None and c.status.text().startswith("Done: 20 draws")
    table, model = o.result.table, o.scenario.model
    methods = list(pd.unique(table["method"]))
    assert methods[:2] == [SIMULATED, EXACT] and len(methods) == 4
    assert [m.conversion for m in o.request.cycle_methods] == ["per-transition", "matrix-exponential"]
    grid = wtp_grid_for(model)
    comparator, new = model.strategy_names

    # the CE plane: each draw's increments and their mean, for the method chosen (exact by default)
    assert page.ce_plane.method.currentData() == EXACT
    ref = ce_plane(table[table["method"] == EXACT], comparator)
    x, y = page.ce_plane.scatters[new].getData()
    draws = ref[(ref["strategy"] == new) & (ref["point"] == "draw")]
    np.testing.assert_array_equal(x, draws["delta_effects"].to_numpy())
    np.testing.assert_array_equal(y, draws["delta_costs"].to_numpy())
    mx, my = page.ce_plane.means[new].getData()
    assert mx[0] == pytest.approx(draws["delta_effects"].mean(), rel=1e-12)
    assert my[0] == pytest.approx(draws["delta_costs"].mean(), rel=1e-12)

    # acceptability per method and the frontier of the exact rows
    assert page.acceptability.strategy.currentData() == new
    for method, item in page.acceptability.curves.items():
        curve = acceptability_curve(table[table["method"] == method], grid)
        curve = curve[curve["strategy"] == new]
        cx, cy = item.getOriginalDataset()
        np.testing.assert_array_equal(cx, grid)
        np.testing.assert_array_equal(cy, curve["probability"].to_numpy())
    front = acceptability_frontier(table[table["method"] == EXACT], grid)
    np.testing.assert_array_equal(page.acceptability.frontier.getOriginalDataset()[1], front["probability"].to_numpy())

    # EVPI per method
    for method, item in page.evpi.curves.items():
        ev = evpi(table[table["method"] == method], grid)
        np.testing.assert_array_equal(item.getOriginalDataset()[1], ev["evpi"].to_numpy())
    assert set(page.evpi.curves) == set(methods)
    set_spin(page.evpi.population, 5000)  # for a population: 5,000 patients a year over 10 years
    for method, item in page.evpi.curves.items():
        ev = population_evpi(evpi(table[table["method"] == method], grid), 5000, 10, model.valuation.discount_costs)
        np.testing.assert_array_equal(item.getOriginalDataset()[1], ev["population_evpi"].to_numpy())
    assert "discounted patients" in page.evpi.note.text()

    # convergence of the simulated rows' INB at the scenario's willingness to pay, with its band
    conv = inb_convergence(table[table["method"] == SIMULATED], comparator, model.valuation.willingness_to_pay)
    line = page.convergence.curves[new]
    np.testing.assert_array_equal(line.getOriginalDataset()[1], conv["mean"].to_numpy())
    lo, hi = page.convergence.bands[new]
    ok = conv["mcse"].notna().to_numpy()
    np.testing.assert_allclose(hi.getOriginalDataset()[1], (conv["mean"] + Z95 * conv["mcse"]).to_numpy()[ok], rtol=1e-15)
    np.testing.assert_allclose(lo.getOriginalDataset()[1], (conv["mean"] - Z95 * conv["mcse"]).to_numpy()[ok], rtol=1e-15)

    # one colour per method, the same in every view (the palette's)
    colours = {m: page.acceptability.curves[m].opts["pen"].color().name() for m in methods}
    assert colours[SIMULATED] == "#0072b2" and colours[EXACT] == "#d55e00"
    assert len(set(colours.values())) == len(methods)
    assert all(page.evpi.curves[m].opts["pen"].color().name() == colours[m] for m in methods)

    for i, name in enumerate(["ce_plane", "acceptability", "evpi_population", "convergence"]):
        page.tabs.setCurrentIndex(i)
        qtbot.wait(100)  # laid out as the user sees it
        assert window.grab().save(str(screenshots / f"psa_{name}.png"))

    # exports: the plot as SVG through its save bar, a table as CSV
    svg = tmp_path / "ceac.svg"
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(svg), "SVG vector image (*.svg)"))
    page.tabs.setCurrentWidget(page.acceptability)
    with qtbot.waitSignal(page.acceptability.panel.save_bar.saved, timeout=10000):
        qtbot.mouseClick(page.acceptability.panel.save_bar.svg_button, Qt.MouseButton.LeftButton)
    assert svg.read_text(encoding="utf-8").lstrip().startswith("<?xml")
    csv = tmp_path / "evpi.csv"
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(csv), "CSV table (*.csv)"))
    page.tabs.setCurrentWidget(page.tables)
    combo = page.tables.choice
    combo.setCurrentIndex(combo.findData("psa_evpi"))
    combo.activated.emit(combo.currentIndex())
    with qtbot.waitSignal(page.exporter.saved, timeout=10000):
        qtbot.mouseClick(page.tables.save, Qt.MouseButton.LeftButton)
    back = pd.read_csv(csv)
    pd.testing.assert_frame_equal(back[["wtp", "evpi"]].reset_index(drop=True),
                                  o.summaries["evpi"][["wtp", "evpi"]].reset_index(drop=True), rtol=1e-12)
    assert "Saved" in page.status.text()

    # the whole analysis as a folder, as `hazardtrace psa` writes it
    folder = tmp_path / "quorrel-psa"
    monkeypatch.setattr(QFileDialog, "getSaveFileName", lambda *a, **k: (str(folder), "Folder (*)"))
    qtbot.mouseClick(page.save_folder, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: page.status.text() == f"Saved {folder}", timeout=20000)
    back = pd.read_parquet(folder / "draws.parquet")
    pd.testing.assert_frame_equal(back, table.reset_index(drop=True), check_dtype=False)
    meta = json.loads((folder / "metadata.json").read_text(encoding="utf-8"))
    assert meta["draws"] == 20 and meta["patients"] == 200 and meta["seed"] == 14
    assert meta["draws_table_sha256"] == table_hash(table)
    assert (folder / "ceac.csv").exists() and (folder / "parameters.csv").exists()


def test_a_failed_analysis_says_why_and_the_controls_come_back(qtbot, window: MainWindow, monkeypatch) -> None:
    import gui.uncertainty.worker as worker_module
    from sim.problems import ValidationError

    def refuse(*_args, **_kwargs):
        raise ValidationError(("workers",), "must be a positive integer", 0)
    monkeypatch.setattr(worker_module, "run_psa", refuse)
    page = open_page(qtbot, window)
    c = page.controls
    qtbot.mouseClick(c.run_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: not c.is_running(), timeout=10000)
    assert c.status.text().startswith("Failed: ") and "workers" in c.status.text() and "positive" in c.status.text()
    assert c.run_button.isEnabled() and c.draws.isEnabled() and page.outcome is None
