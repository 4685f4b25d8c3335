"""The "Fit from data" window's evidence sources and its long work: a bad file shows the problem
with its line and column, a published curve is reconstructed (Guyot et al. 2012) and its digitised
points are drawn over the reconstructed Kaplan-Meier, fitting can be cancelled between families,
and the main window opens the window on its scenario. Data are invented (tests/data/evidence)."""

from __future__ import annotations

import os
import threading
from pathlib import Path

import numpy as np
import pytest
from PySide6.QtCore import Qt

import gui.evidence.window as evidence_window
from gui.document import ScenarioDocument
from gui.evidence import EvidenceWindow, FitRequest, FitWorker
from gui.evidence.fit_worker import run_fits
from gui.main_window import MainWindow
from sim.analysis import kaplan_meier
from sim.evidence import kaplan_meier_by_arm, read_at_risk, read_curves, read_survival_data, reconstruct

DATA = Path(__file__).resolve().parents[1] / "data" / "evidence"


@pytest.fixture
def doc(isolated_document) -> ScenarioDocument:
    return isolated_document(DATA / "scenario.toml")  # checks the scenario is valid


@pytest.fixture
def window(doc: ScenarioDocument, shown) -> EvidenceWindow:
    return shown(EvidenceWindow(doc))


def test_bad_file_names_line_column_value_and_rule(qtbot, window: EvidenceWindow) -> None:
    window.source.set_data_file(DATA / "bad_event_code.csv")  # line 4 holds the event code 2
    with qtbot.waitSignal(window.source.failed) as failed:
        qtbot.mouseClick(window.source.read_data_button, Qt.MouseButton.LeftButton)
    text = window.source.message.text()
    assert text == failed.args[0]
    assert text == "bad_event_code.csv, line 4, column 'death': 2 must be 0 (censored) or 1 (event)"
    assert not window.fit_button.isEnabled()  # nothing to fit
    # a column that is not in the file is named with the columns there are
    window.source.event_col.setCurrentText("status")
    qtbot.mouseClick(window.source.read_data_button, Qt.MouseButton.LeftButton)
    assert window.source.message.text() == ("bad_event_code.csv, column 'status': is not a column of the data "
                                            "(columns: months, death)")


def test_increasing_at_risk_is_refused_with_its_line(qtbot, window: EvidenceWindow, tmp_path: Path) -> None:
    risk = tmp_path / "at_risk_rising.csv"
    risk.write_text("time,at_risk\n0,100\n6,68\n12,70\n")  # invented: line 4 rises
    window.source.tabs.setCurrentIndex(1)
    window.source.km_path.setText(str(DATA / "km_points.csv"))
    window.source.risk_path.setText(str(risk))
    qtbot.mouseClick(window.source.read_curves_button, Qt.MouseButton.LeftButton)
    assert window.source.message.text() == ("at_risk_rising.csv, line 4, column 'at_risk': 70 must not increase "
                                            "(it was 68 at 6) in arm 'all'")


def test_reconstruction_draws_the_points_over_the_km(qtbot, window: EvidenceWindow, tmp_path: Path) -> None:
    km, risk = DATA / "km_points.csv", DATA / "at_risk.csv"
    window.source.tabs.setCurrentIndex(1)
    window.source.km_path.setText(str(km))
    window.source.risk_path.setText(str(risk))
    window.source.curve_unit.setCurrentText("months")
    with qtbot.waitSignal(window.source.loaded):
        qtbot.mouseClick(window.source.read_curves_button, Qt.MouseButton.LeftButton)
    curves = read_curves(km)
    rec = reconstruct(curves, read_at_risk(risk), unit="months", source=str(km))
    # the cleaned digitised points, as sim.evidence cleaned them
    x, y = window.survival_plot.points.items[0].getData()
    np.testing.assert_array_equal(x, curves["all"].time)
    np.testing.assert_array_equal(y, curves["all"].survival)
    # the Kaplan-Meier of the reconstructed patients (sim.analysis), as a step function
    patients = {"strategy": "all", "patient": np.arange(rec.data.n), "exit_time": rec.data.time,
                "exit_reason": np.where(rec.data.event, "absorbed", "censored")}
    import pandas as pd

    table = kaplan_meier(pd.DataFrame(patients))
    kx, ky = window.survival_plot.km.items[0].getData()
    np.testing.assert_array_equal(np.unique(kx), table["time"].to_numpy())
    np.testing.assert_array_equal(np.unique(ky)[::-1], np.unique(table["survival"].to_numpy())[::-1])
    assert "digitised points" in window.survival_plot.legend_labels()
    assert f"Reconstructed {rec.data.n} patients, {rec.data.n_events} events" in window.source.message.text()
    assert "point(s) added at the at-risk time(s) 6, 12, 18" in window.source.message.text()  # changes reported
    # numbers at risk under the plot: the reconstructed patients at the row's times
    counts = [int(t.toPlainText()) for t in window.survival_plot.risk_texts]
    assert counts[0] == 100
    qtbot.wait(100)
    folder = Path(os.environ.get("HAZARDTRACE_SCREENSHOTS", tmp_path))
    folder.mkdir(parents=True, exist_ok=True)
    assert window.grab().save(str(folder / "evidence_reconstruction.png"))


def test_run_fits_stops_between_families() -> None:
    data = read_survival_data(DATA / "two_arm_trial.csv", time="months", event="death", unit="months")
    cancel = threading.Event()
    seen = []

    def progress(family: str, done: int, total: int) -> None:
        seen.append((family, done, total))
        if done == 1:  # the user presses Cancel while the second family is being fitted
            cancel.set()

    outcome = run_fits(data, FitRequest(("exponential", "weibull", "gompertz", "lognormal")), cancel, progress)
    assert outcome.cancelled and outcome.total == 4
    assert [f.family for f in outcome.fits] == ["exponential", "weibull"]
    assert seen == [("exponential", 0, 4), ("weibull", 1, 4)]


def test_cancel_in_the_window_keeps_the_fits_done(qtbot, window: EvidenceWindow, monkeypatch) -> None:
    class CancelledAfterFirst(FitWorker):
        """As if Cancel were pressed while the second family is fitted (deterministic, in the thread)."""

        def _emit_progress(self, family: str, done: int, total: int) -> None:
            super()._emit_progress(family, done, total)
            if done == 1:
                self.cancel()

    monkeypatch.setattr(evidence_window, "FitWorker", CancelledAfterFirst)
    window.source.set_data_file(DATA / "two_arm_trial.csv")
    window.source.group_col.setCurrentText("(none)")
    window.source.data_unit.setCurrentText("months")
    window.source.read_data()
    with qtbot.waitSignal(window.fits_shown, timeout=30_000):
        qtbot.mouseClick(window.fit_button, Qt.MouseButton.LeftButton)
        assert window.cancel_button.isEnabled() and not window.fit_button.isEnabled()
    qtbot.waitUntil(lambda: not window.is_fitting())
    assert [f.family for f in window.fits] == ["exponential", "weibull"]
    assert window.proxy.rowCount() == 2
    assert window.apply_message.text().startswith("Cancelled: 2 of 7 families fitted.")
    assert window.fit_button.isEnabled() and not window.cancel_button.isEnabled()


def test_cancel_button_sets_the_flag(qtbot, window: EvidenceWindow) -> None:
    window.source.set_data_file(DATA / "two_arm_trial.csv")
    window.source.read_data()
    window.start_fits()
    job = window._job
    qtbot.mouseClick(window.cancel_button, Qt.MouseButton.LeftButton)
    assert job.worker.cancel_requested
    qtbot.waitUntil(lambda: not window.is_fitting(), timeout=30_000)


def test_main_window_menu_opens_the_window_on_its_scenario(qtbot, doc: ScenarioDocument) -> None:
    main = MainWindow(doc)
    qtbot.addWidget(main)
    titles = [a.text() for a in main.menuBar().actions()]
    assert "E&vidence" in titles
    main.fit_data_action.trigger()
    shown = main.evidence_window
    assert shown.isVisible() and shown.document is doc
    assert [shown.transition.itemText(i) for i in range(shown.transition.count())] == ["disease death"]
    main.fit_data_action.trigger()
    assert main.evidence_window is shown  # one window, reused


@pytest.mark.parametrize("suffix", [".parquet", ".xlsx"])
def test_parquet_and_xlsx_columns_offered_and_read(qtbot, window: EvidenceWindow, tmp_path: Path, suffix: str) -> None:
    import pandas as pd

    path = tmp_path / f"trial{suffix}"
    frame = pd.read_csv(DATA / "two_arm_trial.csv")
    frame.to_parquet(path) if suffix == ".parquet" else frame.to_excel(path, index=False)
    window.source.set_data_file(path)
    boxes = window.source
    assert [boxes.time_col.itemText(i) for i in range(boxes.time_col.count())] == ["arm", "months", "death"]
    assert (boxes.time_col.currentText(), boxes.event_col.currentText(), boxes.group_col.currentText(),
            boxes.entry_col.currentText()) == ("months", "death", "arm", "(none)")
    boxes.data_unit.setCurrentText("months")
    evidence = boxes.read_data()
    assert evidence is not None and evidence.data.groups == ("control", "treated") and evidence.data.n == 120
    assert window.arm.count() == 2 and window.arm.currentData() == "reference"


def test_xlsx_worksheet_chosen_offers_its_columns_and_is_read(qtbot, window: EvidenceWindow, tmp_path: Path) -> None:
    import pandas as pd

    path = tmp_path / "trial.xlsx"
    frame = pd.read_csv(DATA / "two_arm_trial.csv")
    with pd.ExcelWriter(path, engine="openpyxl") as book:  # invented: a notes sheet first, the patients second
        pd.DataFrame({"note": ["invented data"]}).to_excel(book, sheet_name="notes", index=False)
        frame.rename(columns={"months": "futime"}).to_excel(book, sheet_name="patients", index=False)
    boxes = window.source
    boxes.set_data_file(path)
    assert boxes.sheet.isEnabled()
    assert [boxes.sheet.itemText(i) for i in range(boxes.sheet.count())] == ["notes", "patients"]
    assert [boxes.time_col.itemText(i) for i in range(boxes.time_col.count())] == ["note"]
    boxes.sheet.setCurrentText("patients")
    assert [boxes.time_col.itemText(i) for i in range(boxes.time_col.count())] == ["arm", "futime", "death"]
    assert boxes.time_col.currentText() == "futime"
    evidence = boxes.read_data()
    assert evidence is not None and evidence.data.n == 120
    boxes.set_data_file(DATA / "two_arm_trial.csv")  # a CSV has no worksheets
    assert not boxes.sheet.isEnabled() and boxes.sheet.count() == 0


def test_each_plot_saves_png_and_svg(qtbot, window: EvidenceWindow, tmp_path: Path, monkeypatch) -> None:
    from PySide6.QtGui import QImage
    from PySide6.QtSvg import QSvgRenderer
    from PySide6.QtWidgets import QFileDialog

    window.source.set_data_file(DATA / "two_arm_trial.csv")
    window.source.read_data()
    for name, box in window.family_checks.items():
        box.setChecked(name in ("exponential", "weibull"))
    with qtbot.waitSignal(window.fits_shown, timeout=30_000):
        window.start_fits()
    qtbot.waitUntil(lambda: not window.is_fitting())
    for index, plot in enumerate((window.survival_plot, window.hazard_plot, window.diagnostic_plot)):
        window.plot_tabs.setCurrentIndex(index)
        qtbot.wait(50)
        for kind, button in (("png", plot.save_bar.png_button), ("svg", plot.save_bar.svg_button)):
            path = tmp_path / f"{plot.save_bar.name}.{kind}"
            monkeypatch.setattr(QFileDialog, "getSaveFileName",
                                staticmethod(lambda *a, p=path, **k: (str(p), "")))
            with qtbot.waitSignal(plot.save_bar.saved, timeout=20_000):
                qtbot.mouseClick(button, Qt.MouseButton.LeftButton)
            if kind == "png":
                image = QImage(str(path))
                assert not image.isNull() and image.width() >= plot.graphics.width()
            else:
                assert QSvgRenderer(str(path)).isValid()


def test_delayed_entry_is_read_and_said(qtbot, window: EvidenceWindow, tmp_path: Path) -> None:
    import pandas as pd

    frame = pd.read_csv(DATA / "two_arm_trial.csv")
    frame["start"] = np.where(np.arange(len(frame)) % 3 == 0, np.round(0.5 * frame["months"], 2), 0.0)  # invented
    path = tmp_path / "delayed.csv"
    frame.to_csv(path, index=False)
    window.source.set_data_file(path)
    assert window.source.entry_col.currentText() == "start"
    window.source.group_col.setCurrentText("(none)")
    window.source.data_unit.setCurrentText("months")
    evidence = window.source.read_data()
    assert evidence is not None and evidence.data.delayed
    assert "delayed entry" in window.source.message.text()
    assert "count each patient from entry to exit" in window.data_note.text()
    # the Kaplan-Meier drawn is sim's, with the entry times (its risk sets: entry < t <= exit)
    km = kaplan_meier_by_arm(evidence.data)[0]
    kx, ky = window.survival_plot.km.items[0].getData()
    np.testing.assert_array_equal(np.unique(kx), km.time)
    np.testing.assert_array_equal(np.unique(ky), np.unique(km.survival))
    lx, ly = window.survival_plot.lower.items[0].getData()
    np.testing.assert_array_equal(np.unique(ly), np.unique(km.lower))
    # at risk at t: entered before t and not yet exited (counted from the file directly)
    ticks = [float(t.pos().x()) for t in window.survival_plot.risk_texts]
    counts = [int(t.toPlainText()) for t in window.survival_plot.risk_texts]
    for t, n in zip(ticks, counts):
        entered = (frame["start"] < t) | (frame["start"] == 0.0)
        assert n == int(((frame["months"] >= t) & entered).sum())


def test_new_data_while_fitting_drops_the_old_run(qtbot, window: EvidenceWindow) -> None:
    window.source.set_data_file(DATA / "two_arm_trial.csv")
    window.source.read_data()
    window.start_fits()
    old = window._job
    window.source.group_col.setCurrentText("(none)")
    window.source.read_data()  # other data while the first run is going
    assert old.worker.cancel_requested
    qtbot.waitUntil(lambda: not window.is_fitting(), timeout=30_000)
    assert window.fits == [] and window.proxy.rowCount() == 0  # the old run's fits are not shown
    assert window.fit_button.isEnabled()
