"""Issue 12 on the results side, driven as a user would: one colour per conversion method (and one
line style per correction) in every plot and legend, probability axes at [0, 1] while curves compute,
picking and hovering error-study curves, the time from Run to results shown, a cancel message that
fits the run panel."""

from __future__ import annotations

import time

import pytest
from PySide6.QtCore import QPointF, Qt
from PySide6.QtGui import QColor

from gui import palette
from gui.results import ResultsPanel
from gui.run_panel import CANCELLING_TEXT, RunPanel, timing_text
from sim.io.demo import demo_scenario
from sim.pipeline.run import run_scenario
from sim.reference.cohort import Conversion, Correction


@pytest.fixture(scope="module")
def results():
    return run_scenario(demo_scenario(), patients=1000, seed=3, workers=1)


@pytest.fixture
def panel(qtbot, results):
    p = ResultsPanel()
    qtbot.addWidget(p)
    p.resize(1400, 900)
    p.show()
    with qtbot.waitSignal(p.results_shown, timeout=60_000):
        p.show_results(results)
    yield p
    p.shutdown()


def _colour(pen) -> str:
    return QColor(pen.color()).name().lower()


def test_a_methods_colour_is_the_same_in_the_curves_and_the_error_study(qtbot, panel):
    """Item 6: tick every method at one cycle length, in an order that is not the method order; each
    curve's pen (and its legend sample) has the method's colour in both views."""
    curves = panel.curves
    h = curves._options[0][1]
    for method in reversed([c.value for c in Conversion]):  # display order differs from method order
        with qtbot.waitSignal(curves.drawn, timeout=30_000):
            curves.set_option_checked(method, h, True)
    for method in (c.value for c in Conversion):
        want = palette.method_colour(method).lower()
        for layer in (curves._survival, curves._occupancy):
            item = layer.cohort[(method, h)]
            assert item.isVisible() and _colour(item.opts["pen"]) == want
        for correction in (c.value for c in Correction):
            item = panel.study._curves[(method, correction)]
            assert _colour(item.opts["pen"]) == want
            assert item.opts["pen"].style() == palette.correction_style(correction)
    # legends: the sample drawn beside "cycle-based: <method>, ..." is the method's curve item
    for legend_panel in (curves.survival_panel, curves.occupancy_panel):
        for sample, label in legend_panel.legend.items:
            if label.text.startswith("cycle-based: "):
                method = label.text.removeprefix("cycle-based: ").split(",")[0]
                assert _colour(sample.item.opts["pen"]) == palette.method_colour(method).lower()
    assert len(set(palette.METHOD_COLOURS.values()) | {palette.colour(palette.SIMULATED),
                                                        palette.colour(palette.EXACT)}) == 5


def test_probability_axes_stay_at_0_1_while_curves_compute(qtbot, results):
    """Item 10: before the curves arrive, the plots say so on a [0, 1] axis (not -0.4 to 0.4)."""
    p = ResultsPanel()
    qtbot.addWidget(p)
    p.resize(1200, 800)
    p.show()
    with qtbot.waitSignal(p.results_shown, timeout=60_000):
        p.show_results(results)
        for plot_panel in (p.curves.survival_panel, p.curves.occupancy_panel):
            lo, hi = plot_panel.plot.viewRange()[1]
            assert lo == pytest.approx(-0.02, abs=0.01) and hi == pytest.approx(1.02, abs=0.01)
            assert plot_panel.plot.titleLabel.text == "Computing curves…"
    assert p.curves.survival_panel.plot.titleLabel.text.startswith("Survival")
    p.shutdown()


def test_error_study_picks_methods_and_corrections_and_highlights_on_hover(qtbot, panel):
    """Friction item: untick a conversion and a correction (their curves and legend entries go), and
    point at a curve: it is drawn wider and named."""
    study = panel.study
    panel.tabs.setCurrentWidget(study)
    qtbot.wait(200)
    all_shown = study.shown_curves()
    assert len(all_shown) == len(Conversion) * len(Correction)
    study.show_methods["competing-exit"].click()
    study.show_corrections["simpson"].click()
    shown = study.shown_curves()
    assert shown and all(m != "competing-exit" and c != "simpson" for m, c in shown)
    assert len(shown) == (len(Conversion) - 1) * (len(Correction) - 1)
    assert not any(text.startswith("competing-exit") for text in study.panel.legend_labels())
    # hover: a point of one curve, in scene coordinates, as the mouse reports it
    key = shown[0]
    item = study._curves[key]
    x, y = item.curve.getData()
    scene_pos = item.curve.mapToScene(QPointF(float(x[1]), float(y[1])))
    study.panel.plot.scene().sigMouseMoved.emit(scene_pos)
    assert study.hovered is not None
    hovered = study._curves[study.hovered]
    assert hovered.opts["pen"].widthF() > 4 and study.hover_label.text() == ", ".join(study.hovered)
    others = [study._curves[k].opts["pen"].widthF() for k in shown if k != study.hovered]
    assert max(others) == pytest.approx(2.0)
    study.panel.plot.scene().sigMouseMoved.emit(QPointF(-1000, -1000))
    assert study.hovered is None and study.hover_label.text() == ""


def test_timing_text_names_the_wait_and_the_stages():
    text = timing_text(6.0, {"simulation": 3.0, "exact": 1.5}, shown=8.25)
    assert text.startswith("8.2 s from Run to results shown")
    assert "simulation 3.0 s" in text and "exact 1.5 s" in text and "window (start, tables and curves) 3.8 s" in text


def test_run_panel_reports_the_time_from_run_to_results_shown(qtbot):
    """Item 7: the reported time is the user's wait (Run clicked to curves on screen), at least the
    sum of the pipeline's stages, and the stages are listed."""
    panel = RunPanel(demo_scenario())
    results_panel = ResultsPanel()
    for w in (panel, results_panel):
        qtbot.addWidget(w)
    panel.results_ready.connect(results_panel.show_results)
    results_panel.results_shown.connect(panel.mark_shown)
    panel.patients.setValue(1500)
    with qtbot.waitSignal(results_panel.results_shown, timeout=60_000):
        qtbot.mouseClick(panel.run_button, Qt.MouseButton.LeftButton)
        t0 = time.monotonic()
    waited = time.monotonic() - t0
    text = panel.last_run.text()
    assert "from Run to results shown" in text
    reported = float(text.split("· ")[-1].split(" s from Run")[0])
    stages = results_panel.results.seconds
    assert reported >= sum(stages.values()) - 0.05
    assert reported <= waited + 0.5
    for name in stages:
        assert f"{name} " in text
    results_panel.shutdown()
    panel.shutdown()


def test_cancel_message_fits_the_narrow_run_panel(qtbot):
    """Item 11: the cancelling text is short enough to show whole at the panel's narrowest width."""
    panel = RunPanel(demo_scenario())
    qtbot.addWidget(panel)
    panel.patients.setValue(2_000_000)
    panel.show()
    panel.resize(panel.minimumSizeHint().width(), 600)
    with qtbot.waitSignal(panel.run_cancelled, timeout=60_000):
        qtbot.mouseClick(panel.run_button, Qt.MouseButton.LeftButton)
        qtbot.mouseClick(panel.cancel_button, Qt.MouseButton.LeftButton)
        assert panel.stage.text() == CANCELLING_TEXT
        metrics = panel.stage.fontMetrics()
        assert panel.stage.wordWrap() or metrics.horizontalAdvance(CANCELLING_TEXT) <= panel.stage.width()
        assert metrics.horizontalAdvance(CANCELLING_TEXT) <= panel.stage.width()
    panel.shutdown()
