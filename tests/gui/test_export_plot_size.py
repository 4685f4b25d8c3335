"""PNG export at a chosen size (issue 12, friction item "PNG export at screen size only"): the save bar's
size box (presets and a typed width x height in cm, inches or pixels) with its resolution box, driven
by keyboard and clicks as a user does; the file dialog is monkeypatched."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pytest
from PySide6.QtCore import Qt
from PySide6.QtGui import QImage
from PySide6.QtWidgets import QApplication, QFileDialog

import gui.export_plot as export_plot
from gui.export_plot import CUSTOM_SIZE, PNG_SIZES, fitted_size
from gui.results import ResultsPanel
from sim.io.demo import demo_scenario
from sim.pipeline.run import run_scenario

CM = 1 / 2.54


@pytest.fixture(scope="module")
def results():
    scenario = demo_scenario()
    scenario = dataclasses.replace(scenario, run=dataclasses.replace(scenario.run, cycle_lengths=(1.0,)))
    return run_scenario(scenario, patients=300, seed=5, workers=1)


@pytest.fixture
def plot(qtbot, results):
    panel = ResultsPanel()
    qtbot.addWidget(panel)
    panel.resize(1300, 850)
    panel.show()
    with qtbot.waitSignal(panel.results_shown, timeout=60_000):
        panel.show_results(results)
    qtbot.wait(300)  # the layouts settle, as before any click of the user
    yield panel.curves.survival_panel
    panel.shutdown()


@pytest.fixture
def laid_out(monkeypatch) -> list[tuple[int, int]]:
    """The size the plot widget had each time it was drawn for a saved image (logical pixels)."""
    sizes: list[tuple[int, int]] = []
    real = export_plot.svg_bytes

    def spy(widget, title=""):
        sizes.append((widget.width(), widget.height()))
        return real(widget, title)

    monkeypatch.setattr(export_plot, "svg_bytes", spy)
    return sizes


def _answer(monkeypatch, path: Path) -> None:
    monkeypatch.setattr(QFileDialog, "getSaveFileName", staticmethod(lambda *args, **kwargs: (str(path), "")))


def _choose(qtbot, combo, text: str) -> None:
    """Pick ``text`` in a combo box from the keyboard (focus, type its first letters; after a pause,
    so that the letters do not join those typed just before into one search)."""
    qtbot.wait(QApplication.keyboardInputInterval() + 50)
    combo.setFocus()
    qtbot.keyClicks(combo, text)
    assert combo.currentText().startswith(text)


def _type(qtbot, box, value: str) -> None:
    """Replace a spin box's text by typing, then Enter."""
    box.setFocus()
    box.lineEdit().selectAll()
    qtbot.keyClicks(box.lineEdit(), value)
    qtbot.keyClick(box.lineEdit(), Qt.Key.Key_Return)


def _save(qtbot, monkeypatch, plot, path: Path) -> QImage:
    _answer(monkeypatch, path)
    with qtbot.waitSignal(plot.save_bar.saved, timeout=20_000):
        qtbot.mouseClick(plot.save_bar.png_button, Qt.MouseButton.LeftButton)
    image = QImage(str(path))
    assert not image.isNull()
    return image


def _gray(image: QImage) -> np.ndarray:
    image = image.convertToFormat(QImage.Format.Format_Grayscale8)
    rows = np.frombuffer(image.constBits(), np.uint8).reshape(image.height(), image.bytesPerLine())
    return rows[:, : image.width()].astype(float)


def _assert_drawn(image: QImage) -> None:
    """Not blank: a white page with dark text and lines, and coloured curves."""
    gray = _gray(image)
    assert (gray > 245).mean() > 0.3  # the white background
    assert (gray < 80).mean() > 0.002  # text, axes
    rgb = image.convertToFormat(QImage.Format.Format_RGB888)
    px = np.frombuffer(rgb.constBits(), np.uint8).reshape(rgb.height(), rgb.bytesPerLine())[:, : 3 * rgb.width()]
    px = px.reshape(rgb.height(), rgb.width(), 3).astype(int)
    assert ((px.max(axis=2) - px.min(axis=2)) > 80).mean() > 0.002  # saturated colour: the curves


def _title_height(image: QImage) -> int:
    """Height in pixels of the first run of rows holding dark pixels from the top (the plot's title)."""
    dark = (_gray(image) < 110).any(axis=1)
    start = int(np.argmax(dark))
    return int(np.argmax(~dark[start:]))


def test_png_at_a_journal_column_width_and_300_dpi(qtbot, monkeypatch, tmp_path, plot, laid_out):
    bar = plot.save_bar
    screen = (plot.graphics.width(), plot.graphics.height())
    _choose(qtbot, bar.resolution, "300")
    _choose(qtbot, bar.size_choice, "journal column")
    assert not bar.width_box.isVisible()  # presets need no typing
    image = _save(qtbot, monkeypatch, plot, tmp_path / "column.png")
    width, height = fitted_size(PNG_SIZES[bar.size_choice.currentText()], screen[0] / screen[1])
    assert width == pytest.approx(8.5 * CM)
    assert (image.width(), image.height()) == (round(width * 300), round(height * 300))  # 1004 px wide
    assert image.dotsPerMeterX() == round(300 / 0.0254)  # prints 8.5 cm wide
    _assert_drawn(image)
    # drawn once, laid out at 8.5 cm of logical pixels, or larger where the legend needs it, always
    # with the image's aspect; the window's plot is back at its size afterwards
    assert len(laid_out) == 1
    w, h = laid_out[0]
    assert w >= round(width * plot.graphics.logicalDpiX()) - 1 and w / h == pytest.approx(width / height, rel=0.01)
    assert (plot.graphics.width(), plot.graphics.height()) == screen


def test_png_at_a_typed_size_in_pixels_is_laid_out_not_stretched(qtbot, monkeypatch, tmp_path, plot, laid_out):
    # A wide, low picture typed in pixels at 150 dpi: exactly 1600 x 500 pixels, laid out at that
    # shape (1024 x 320 logical pixels at 96 dpi), so the title has the height of the same title in a
    # 150 dpi image of the on-screen size (text keeps its point size), not that height squeezed by
    # the change of aspect as in a stretched copy of the screen.
    bar = plot.save_bar
    screen = (plot.graphics.width(), plot.graphics.height())
    _choose(qtbot, bar.resolution, "150")
    same_shape = _save(qtbot, monkeypatch, plot, tmp_path / "screen150.png")
    _choose(qtbot, bar.size_choice, "custom")
    assert bar.size_choice.currentText() == CUSTOM_SIZE and bar.width_box.isVisible()
    _choose(qtbot, bar.unit, "px")
    _type(qtbot, bar.width_box, "1600")
    _type(qtbot, bar.height_box, "500")
    assert bar.png_pixels() == (1600, 500)
    qtbot.wait(100)
    screen = (plot.graphics.width(), plot.graphics.height())  # the typed size's row took some height
    image = _save(qtbot, monkeypatch, plot, tmp_path / "wide.png")
    assert (image.width(), image.height()) == (1600, 500)
    assert image.dotsPerMeterX() == round(150 / 0.0254)
    _assert_drawn(image)
    logical = plot.graphics.logicalDpiX()
    assert laid_out[-1] == (round(1600 / 150 * logical), round(500 / 150 * logical))
    squeeze = 500 / same_shape.height()  # what stretching the on-screen picture would do to text heights
    assert squeeze < 0.75
    assert abs(_title_height(image) - _title_height(same_shape)) <= 2
    assert (plot.graphics.width(), plot.graphics.height()) == screen


def test_typed_size_keeps_its_length_when_the_unit_changes(qtbot, plot):
    bar = plot.save_bar
    screen = (plot.graphics.width(), plot.graphics.height())
    _choose(qtbot, bar.size_choice, "custom")
    # the boxes start from the on-screen size (in the default unit, cm to 0.01)
    assert bar.png_size() == pytest.approx(tuple(v / plot.graphics.logicalDpiX() for v in screen), abs=0.003)
    _choose(qtbot, bar.unit, "cm")
    _type(qtbot, bar.width_box, "20")
    _type(qtbot, bar.height_box, "10")
    _choose(qtbot, bar.unit, "in")
    assert (bar.width_box.value(), bar.height_box.value()) == (pytest.approx(7.87), pytest.approx(3.94))
    assert bar.png_size() == pytest.approx((20 * CM, 10 * CM), abs=0.005)


def test_too_large_a_png_is_refused_with_a_message(qtbot, monkeypatch, tmp_path, plot):
    bar = plot.save_bar
    _choose(qtbot, bar.resolution, "600")
    _choose(qtbot, bar.size_choice, "custom")
    _choose(qtbot, bar.unit, "cm")
    _type(qtbot, bar.width_box, "150")
    _type(qtbot, bar.height_box, "150")
    target = tmp_path / "huge.png"
    _answer(monkeypatch, target)
    with qtbot.waitSignal(bar.failed, timeout=10_000) as failed:
        qtbot.mouseClick(bar.png_button, Qt.MouseButton.LeftButton)
    assert "too large" in failed.args[0]
    assert not target.exists()


def test_png_at_another_size_keeps_the_zoom_and_the_window(qtbot, monkeypatch, tmp_path, plot):
    # Zoomed in, then saved for a slide: the saved plot shows the same data range (the axes are laid
    # out again for the new shape), and the window's plot keeps its range and size.
    plot.plot.setXRange(10.0, 30.0, padding=0)
    plot.plot.setYRange(0.3, 0.9, padding=0)
    qtbot.wait(100)
    before = (plot.plot.viewRange(), plot.graphics.size())
    shown_during = []
    real = export_plot.svg_bytes

    def spy(widget, title=""):
        shown_during.append(plot.plot.viewRange())
        return real(widget, title)

    monkeypatch.setattr(export_plot, "svg_bytes", spy)
    _choose(qtbot, plot.save_bar.size_choice, "slide")
    image = _save(qtbot, monkeypatch, plot, tmp_path / "slide.png")
    _assert_drawn(image)
    assert shown_during == [before[0]]
    assert (plot.plot.viewRange(), plot.graphics.size()) == before
    assert image.width() / image.height() == pytest.approx(before[1].width() / before[1].height(), rel=0.01)
