"""Exports: event log, patient table and long format as Parquet and CSV (through sim.io.export), any
shown table as CSV, and plots as PNG and SVG; file dialogs are monkeypatched."""

from __future__ import annotations

import dataclasses
import os
import stat
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PySide6.QtGui import QImage
from PySide6.QtWidgets import QFileDialog

from gui.export_plot import ask_save_path, save_png, save_svg
from gui.results import ResultsPanel
from gui.results.exports import data_table, write_data
from sim.io.demo import demo_scenario
from sim.io.export import LONG_FORMAT_COLUMNS
from sim.pipeline.run import run_scenario

SVG = "{http://www.w3.org/2000/svg}"


# PySide6 6.12.0 on CPython 3.11 drops references to None/True/False; see gui.app.

@pytest.fixture(scope="module")
def results():
    scenario = demo_scenario()
    scenario = dataclasses.replace(scenario, run=dataclasses.replace(scenario.run, cycle_lengths=(0.5, 1.0, 2.0)))
    return run_scenario(scenario, patients=300, seed=5, workers=1)


@pytest.fixture
def panel(qtbot, results):
    p = ResultsPanel()
    qtbot.addWidget(p)
    p.resize(1300, 850)
    p.show()
    with qtbot.waitSignal(p.results_shown, timeout=60_000):
        p.show_results(results)
    yield p
    p.shutdown()


def _answer(monkeypatch, path: Path, chosen_filter: str = "") -> list[tuple]:
    """Make QFileDialog.getSaveFileName return ``path``; returns the calls it received."""
    calls: list[tuple] = []

    def fake(parent, caption, directory, filters, *args, **kwargs):
        calls.append((caption, directory, filters))
        return str(path), chosen_filter

    monkeypatch.setattr(QFileDialog, "getSaveFileName", staticmethod(fake))
    return calls


@pytest.mark.parametrize("kind", ["events", "patients", "long"])
@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_write_data_round_trips(tmp_path, results, kind, fmt):
    path = write_data(results, kind, tmp_path / f"{kind}.{fmt}")
    expected = data_table(results, kind)
    back = pd.read_parquet(path) if fmt == "parquet" else pd.read_csv(path, float_precision="round_trip")
    assert len(back) == len(expected) > 0
    assert list(back.columns) == list(expected.columns)
    if fmt == "parquet":
        pd.testing.assert_frame_equal(back, expected.reset_index(drop=True))
    else:
        np.testing.assert_array_equal(back["patient"].to_numpy(), expected["patient"].to_numpy())
        assert back["strategy"].tolist() == expected["strategy"].astype(str).tolist()
    if kind == "long":
        assert tuple(back.columns) == LONG_FORMAT_COLUMNS
        assert int(back["status"].sum()) == len(results.simulation.events)


def test_ask_save_path_adds_the_chosen_suffix(qtbot, monkeypatch, tmp_path):
    filters = {"parquet": "Parquet table (*.parquet)", "csv": "CSV table (*.csv)"}
    _answer(monkeypatch, tmp_path / "log", "CSV table (*.csv)")
    assert ask_save_path(None, "t", "", filters) == (tmp_path / "log.csv", "csv")
    _answer(monkeypatch, tmp_path / "log.parquet", "CSV table (*.csv)")  # a typed suffix wins
    assert ask_save_path(None, "t", "", filters) == (tmp_path / "log.parquet", "parquet")
    monkeypatch.setattr(QFileDialog, "getSaveFileName", staticmethod(lambda *a, **k: ("", "")))
    assert ask_save_path(None, "t", "", filters) is None


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_event_log_export_through_the_panel(qtbot, monkeypatch, tmp_path, panel, results, fmt):
    target = tmp_path / f"events.{fmt}"
    calls = _answer(monkeypatch, target)
    with qtbot.waitSignal(panel.exporter.saved, timeout=30_000) as blocker:
        panel.event_log.export_requested.emit("events")
    assert blocker.args == [str(target)]
    assert calls and calls[0][1].endswith("lanthic_syndrome_events.parquet")  # suggested name
    back = pd.read_parquet(target) if fmt == "parquet" else pd.read_csv(target)
    assert len(back) == len(results.simulation.events)
    assert panel.status.text() == f"Saved {target}"


def test_long_format_export_through_the_save_menu(qtbot, monkeypatch, tmp_path, panel, results):
    target = tmp_path / "long.parquet"
    _answer(monkeypatch, target)
    action = next(a for a in panel.save_menu.actions() if a.text().startswith("Long format"))
    with qtbot.waitSignal(panel.exporter.saved, timeout=30_000):
        action.trigger()
    back = pd.read_parquet(target)
    assert tuple(back.columns) == LONG_FORMAT_COLUMNS and int(back["status"].sum()) == len(results.simulation.events)


def test_largest_safe_cycle_table_saves_at_the_current_tolerance(qtbot, monkeypatch, tmp_path, panel):
    panel.study.set_tolerance(0.004, relative=True)
    target = tmp_path / "largest.csv"
    _answer(monkeypatch, target)
    action = next(a for a in panel.save_menu.actions() if a.text().startswith("Largest safe cycle"))
    with qtbot.waitSignal(panel.exporter.saved, timeout=30_000):
        action.trigger()
    back = pd.read_csv(target)
    assert len(back) == len(panel.study.largest) and set(back["tolerance"]) == {0.004}


def test_export_failure_is_reported(qtbot, monkeypatch, tmp_path, panel):
    _answer(monkeypatch, tmp_path / "missing-folder" / "events.csv")
    with qtbot.waitSignal(panel.exporter.failed, timeout=30_000) as blocker:
        panel.event_log.export_requested.emit("events")
    assert "missing-folder" in blocker.args[0]
    assert panel.status.text().startswith("Not saved: ")


def test_any_shown_table_saves_as_csv(qtbot, monkeypatch, tmp_path, panel):
    for table in panel.tables():
        target = tmp_path / f"{table.name}.csv"
        _answer(monkeypatch, target)
        shown = table.model().frame()
        with qtbot.waitSignal(panel.exporter.saved, timeout=30_000):
            table.save_requested.emit(shown, table.name)
        back = pd.read_csv(target)
        assert list(back.columns) == [str(c) for c in shown.columns]
        assert len(back) == len(shown)
    # the filtered event log saves the rows shown
    panel.event_log.set_filter(strategy="new therapy", patient=0)
    shown = panel.event_log.table.model().frame()
    target = tmp_path / "filtered.csv"
    _answer(monkeypatch, target)
    with qtbot.waitSignal(panel.exporter.saved, timeout=30_000):
        panel.event_log.table.save_requested.emit(shown, "events")
    back = pd.read_csv(target)
    assert len(back) == len(shown) > 0 and set(back["strategy"]) == {"new therapy"}


@pytest.mark.parametrize("kind", ["png", "svg"])
def test_every_plot_saves_as_png_and_svg(qtbot, monkeypatch, tmp_path, panel, kind):
    for i, plot in enumerate(panel.plots()):
        target = tmp_path / f"plot{i}.{kind}"
        _answer(monkeypatch, target)
        with qtbot.waitSignal(plot.save_bar.saved, timeout=10_000):
            (plot.save_bar.png_button if kind == "png" else plot.save_bar.svg_button).click()
        assert target.stat().st_size > 0
        size = plot.graphics.size()
        if kind == "png":
            image = QImage(str(target))
            assert not image.isNull()
            ratio = plot.graphics.devicePixelRatioF()
            assert (image.width(), image.height()) == (round(size.width() * ratio), round(size.height() * ratio))
        else:
            root = ET.parse(target).getroot()
            assert root.tag == f"{SVG}svg"
            view_box = [float(v) for v in root.get("viewBox").split()]
            assert view_box[2:] == [size.width(), size.height()] and view_box[2] > 0 and view_box[3] > 0
            assert float(root.get("width").removesuffix("mm")) > 0
            assert len(list(root.iter(f"{SVG}path")) + list(root.iter(f"{SVG}polyline"))) > 0
            texts = "".join(t.text or "" for t in root.iter(f"{SVG}text"))
            assert plot.legend_labels()[0] in texts  # the legend is part of the saved image


def test_save_svg_reports_a_missing_folder(qtbot, tmp_path, panel):
    with pytest.raises(OSError, match="does not exist"):
        save_svg(panel.curves.survival_panel.graphics, tmp_path / "nope" / "plot.svg")


@pytest.mark.skipif(os.name != "posix", reason="file modes and umask are POSIX")
@pytest.mark.parametrize("kind", ["png", "svg"])
def test_saved_plot_gets_the_mode_of_a_plain_open(qtbot, tmp_path, panel, kind):
    """A saved image is readable by others under umask 022 (0644), like any file the user creates
    (it used to keep the 0600 of its temporary file); written atomically, no temporary left."""
    graphics = panel.curves.survival_panel.graphics
    old = os.umask(0o022)
    try:
        out = (save_png if kind == "png" else save_svg)(graphics, tmp_path / f"plot.{kind}")
    finally:
        os.umask(old)
    assert stat.S_IMODE(out.stat().st_mode) == 0o644
    assert [p.name for p in tmp_path.iterdir()] == [f"plot.{kind}"]


def test_save_png_refuses_a_folder_as_file_name(qtbot, tmp_path, panel):
    with pytest.raises(OSError, match="is a folder"):
        save_png(panel.curves.survival_panel.graphics, tmp_path)
