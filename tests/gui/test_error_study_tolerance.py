"""The error study's Tolerance box, typed into as a user does (issue 12 item 17): text that is not a
positive number in range ("-1", "0", "abc", too large) is not used: the previous tolerance stays,
the safe-cycle table is not recomputed, and a message beside the box says what was typed and why.
A valid tolerance then clears the message and recomputes the table as sim does."""

from __future__ import annotations

import pandas as pd
import pytest
from PySide6.QtCore import Qt

from gui.results.error_study import ErrorStudyView
from gui.results.study_data import largest_safe_cycle
from sim.io.demo import demo_scenario
from sim.pipeline.run import run_scenario


@pytest.fixture(scope="module")
def results():
    return run_scenario(demo_scenario(), patients=500, seed=5, workers=1)


@pytest.fixture
def view(qtbot, results) -> ErrorStudyView:
    v = ErrorStudyView()
    qtbot.addWidget(v)
    v.resize(1300, 800)
    v.show()
    qtbot.waitExposed(v)
    v.show_results(results)
    return v


def type_tolerance(qtbot, view: ErrorStudyView, text: str, finish: str = "enter") -> None:
    """Select the box's text, type ``text``, then press Enter or move the focus away (Tab)."""
    box = view.tolerance
    box.setFocus()
    qtbot.keyClick(box, Qt.Key.Key_A, Qt.KeyboardModifier.ControlModifier)
    qtbot.keyClicks(box, text)
    assert box.lineEdit().text() == text  # nothing typed is silently dropped ("-1" is not "1")
    qtbot.keyClick(box, Qt.Key.Key_Return if finish == "enter" else Qt.Key.Key_Tab)


@pytest.mark.parametrize(("typed", "why", "finish"), [
    ("-1", "must be positive", "enter"),
    ("0", "must be positive", "enter"),
    ("abc", "not a number", "enter"),
    ("-0.5", "must be positive", "tab"),
    ("1e13", "must be at most 1e+12", "enter"),
])
def test_invalid_tolerance_is_refused_visibly(qtbot, view: ErrorStudyView, results, typed, why, finish) -> None:
    before = view.tolerance.value()
    assert before == pytest.approx(results.settings["tolerance"])
    largest = view.largest.copy()
    emitted = []
    view.safe_cycles_changed.connect(lambda: emitted.append(1))
    type_tolerance(qtbot, view, typed, finish)
    assert view.tolerance.value() == before  # the previous valid value is kept
    assert view.tolerance.lineEdit().text() == view.tolerance.textFromValue(before)
    assert view.tolerance_message.isVisible()
    message = view.tolerance_message.text()
    assert f"“{typed}”" in message and why in message and f"kept {before:g}" in message
    assert not emitted
    pd.testing.assert_frame_equal(view.largest, largest)


def test_a_valid_tolerance_after_a_refused_one_is_used(qtbot, view: ErrorStudyView, results) -> None:
    type_tolerance(qtbot, view, "-1")
    assert view.tolerance_message.isVisible()
    with qtbot.waitSignal(view.safe_cycles_changed, timeout=5000):
        type_tolerance(qtbot, view, "0.02")
    assert view.tolerance.value() == pytest.approx(0.02)
    assert not view.tolerance_message.isVisible()
    expected = largest_safe_cycle(results.study.table, 0.02, view.relative())
    pd.testing.assert_frame_equal(view.largest, expected)


def test_retyping_the_same_valid_value_clears_the_message(qtbot, view: ErrorStudyView) -> None:
    before = view.tolerance.value()
    type_tolerance(qtbot, view, "abc")
    assert view.tolerance_message.isVisible()
    type_tolerance(qtbot, view, view.tolerance.textFromValue(before))
    assert view.tolerance.value() == before and not view.tolerance_message.isVisible()


def test_why_not_names_each_rule(qtbot) -> None:
    view = ErrorStudyView()
    qtbot.addWidget(view)
    box = view.tolerance
    assert box.why_not("x1") == "not a number"
    assert box.why_not("nan") == "not a finite number"
    assert box.why_not("-2") == "must be positive"
    assert box.why_not("0.0000001") == "must be at least 1e-06"
