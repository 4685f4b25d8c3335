"""A parameter's distribution edited beside its field (issue 14 item 6): the "±" button opens the
editor, a family and a mean and SE typed by the user give the method-of-moments fit (checked against
the closed forms of Briggs, Claxton & Sculpher 2006, ch. 4) and a density preview whose mean and
95% interval are scipy.stats'; Apply writes the [[uncertainty]] entry into the text (comments kept)
as one undoable edit; impossible values are marked with the reader's rule."""

from __future__ import annotations

from pathlib import Path

import os

import numpy as np
import pytest
import tomllib
from PySide6.QtCore import QSettings, Qt
from PySide6.QtWidgets import QLabel, QLineEdit
from scipy import stats

from gui.document import ScenarioDocument
from gui.editors import TransitionsEditor, ValuationEditor
from gui.editors.fields import is_marked
from gui.main_window import MainWindow
from gui.uncertainty.button import DistributionButton
from gui.uncertainty.editor import DistributionEditor

ROOT = Path(__file__).resolve().parents[2]
QUORREL = ROOT / "scenarios" / "quorrel_psa.toml"
MILD_ENTRY = """[[uncertainty]]
parameter = "valuation.utilities.mild"
distribution = "beta"
mean = 0.72
se = 0.03

"""


@pytest.fixture
def window(qtbot, tmp_path: Path) -> MainWindow:
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
    doc = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    path = tmp_path / "quorrel_psa.toml"
    text = QUORREL.read_text(encoding="utf-8")
    assert MILD_ENTRY in text
    path.write_text(text.replace(MILD_ENTRY, ""), encoding="utf-8")  # the mild utility: no distribution yet
    w = MainWindow(doc)
    w.start(path)
    w.show()
    qtbot.waitExposed(w)
    yield w
    w.document.undo_stack.setClean()
    w.close()
    w.deleteLater()


def shots(tmp_path: Path) -> Path:
    """Where screenshots go (HAZARDTRACE_SCREENSHOTS to keep them for a look)."""
    folder = Path(os.environ.get("HAZARDTRACE_SCREENSHOTS", tmp_path))
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def button_of(fields, key) -> DistributionButton:
    return next(b for b in fields.distribution_buttons if b.key == key)


def open_editor(qtbot, window: MainWindow, button: DistributionButton) -> DistributionEditor:
    tool = button.button
    assert tool is not None and tool.isVisible()
    qtbot.mouseClick(tool, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: button.editor is not None and button.editor.isVisible(), timeout=3000)
    return button.editor


def choose(qtbot, combo, data) -> None:
    """Pick an item of a combo box with the keyboard, as a user would."""
    combo.setFocus()
    qtbot.keyClick(combo, Qt.Key.Key_Home)
    while combo.currentData() != data:
        before = combo.currentIndex()
        qtbot.keyClick(combo, Qt.Key.Key_Down)
        assert combo.currentIndex() != before, f"{data!r} not offered"


def type_into(qtbot, field: QLineEdit, text: str) -> None:
    field.setFocus()
    field.selectAll()
    qtbot.keyClicks(field, text)
    qtbot.keyClick(field, Qt.Key.Key_Tab)  # editing finished: checked now


def test_utility_beta_from_mean_and_se_previewed_written_and_undone(qtbot, window: MainWindow, tmp_path: Path
                                                                    ) -> None:
    doc = window.document
    valuation = window.editor(ValuationEditor)
    window.show_editor(valuation)
    key = ("valuation", "utilities", "mild")
    button = button_of(valuation.rows, key)
    assert button.state == "none"
    editor = open_editor(qtbot, window, button)
    assert editor.preview.distribution is None
    choose(qtbot, editor.family, "beta")
    assert editor.form.currentData() == ("mean", "se")
    assert editor.inputs["mean"].text() == "0.72"  # starts from the point value
    type_into(qtbot, editor.inputs["se"], "0.03")
    qtbot.waitUntil(lambda: editor.preview.distribution is not None, timeout=3000)

    # the method of moments (Briggs, Claxton & Sculpher 2006, ch. 4): alpha + beta = m(1-m)/se^2 - 1
    m, se = 0.72, 0.03
    total = m * (1 - m) / se**2 - 1
    a, b = m * total, (1 - m) * total
    ref = stats.beta(a, b)
    d = editor.preview.distribution
    assert d.parameters()["alpha"] == pytest.approx(a, rel=1e-12)
    assert d.parameters()["beta"] == pytest.approx(b, rel=1e-12)
    assert editor.preview.mean == pytest.approx(ref.mean(), rel=1e-12)
    assert editor.preview.interval == pytest.approx(ref.interval(0.95), rel=1e-9)
    x, y = editor.preview.curve.getData()
    np.testing.assert_allclose(y, ref.pdf(x), rtol=1e-9)
    assert "alpha = " in editor.fitted.text() and editor.fitted.isVisible()
    assert "95% interval" in editor.preview.summary.text()
    assert editor.grab().save(str(shots(tmp_path) / "psa_distribution_editor.png"))

    before = doc.text
    qtbot.mouseClick(editor.apply_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: not editor.isVisible(), timeout=3000)
    entries = tomllib.loads(doc.text)["uncertainty"]
    assert entries[-1] == {"parameter": "valuation.utilities.mild", "distribution": "beta", "mean": 0.72, "se": 0.03}
    assert "# Parameter names as `hazardtrace check` lists them." in doc.text  # comments kept
    assert doc.scenario is not None and button.state == "set"
    assert "beta(alpha=" in button.action.toolTip()

    window.undo_action.trigger()  # one undo takes the whole entry out
    assert doc.text == before
    assert button.state == "none"


def test_impossible_se_is_marked_with_the_rule_and_not_applied(qtbot, window: MainWindow, tmp_path: Path) -> None:
    doc = window.document
    valuation = window.editor(ValuationEditor)
    window.show_editor(valuation)
    editor = open_editor(qtbot, window, button_of(valuation.rows, ("valuation", "utilities", "severe")))
    choose(qtbot, editor.family, "beta")
    type_into(qtbot, editor.inputs["se"], "0.6")  # above sqrt(m(1-m)) = 0.497 for m = 0.45
    qtbot.waitUntil(lambda: is_marked(editor.inputs["se"]), timeout=3000)
    assert "sqrt" in editor.inputs["se"].toolTip() or "at most" in editor.inputs["se"].toolTip()
    assert editor.message.isVisible() and editor.message.text()
    assert editor.preview.distribution is None
    assert not editor.apply_button.isEnabled()
    assert editor.grab().save(str(shots(tmp_path) / "psa_distribution_editor_bad_se.png"))
    before = doc.text
    qtbot.keyClick(editor.inputs["se"], Qt.Key.Key_Return)  # Enter does not write a bad entry
    assert doc.text == before and editor.isVisible()
    type_into(qtbot, editor.inputs["se"], "0.05")
    qtbot.waitUntil(lambda: not is_marked(editor.inputs["se"]), timeout=3000)
    assert editor.apply_button.isEnabled() and editor.preview.distribution is not None
    assert valuation.grab().save(str(shots(tmp_path) / "psa_valuation_buttons.png"))
    editor.reject()


def test_existing_entry_edited_in_place_and_removed(qtbot, window: MainWindow) -> None:
    doc = window.document
    transitions = window.editor(TransitionsEditor)
    window.show_editor(transitions)
    transitions.select(0)
    button = button_of(transitions.detail_fields, ("transitions", 0, "rate"))
    assert button.state == "set" and "gamma(" in button.action.toolTip()
    editor = open_editor(qtbot, window, button)
    assert editor.family.currentData() == "gamma"
    assert "hazard table's unit: years" in editor.findChild(QLabel).text()
    assert editor.inputs["mean"].text() == "0.08" and editor.inputs["se"].text() == "0.012"
    qtbot.waitUntil(lambda: editor.preview.distribution is not None, timeout=3000)
    # gamma by moments: shape = m^2/se^2, scale = se^2/m
    ref = stats.gamma(0.08**2 / 0.012**2, scale=0.012**2 / 0.08)
    assert editor.preview.interval == pytest.approx(ref.interval(0.95), rel=1e-9)
    choose(qtbot, editor.family, "lognormal")
    type_into(qtbot, editor.inputs["se"], "0.02")
    qtbot.waitUntil(lambda: editor.preview.distribution is not None
                    and editor.preview.distribution.family == "lognormal", timeout=3000)
    s2 = np.log(1 + 0.02**2 / 0.08**2)
    ref = stats.lognorm(np.sqrt(s2), scale=np.exp(np.log(0.08) - s2 / 2))
    assert editor.preview.mean == pytest.approx(ref.mean(), rel=1e-12)
    editor.apply()
    entries = tomllib.loads(doc.text)["uncertainty"]
    assert entries[0] == {"parameter": "transitions[0].rate", "distribution": "lognormal", "mean": 0.08, "se": 0.02,
                          "description": "invented cohort: 96 onsets in 1,200 person-years"}
    field = transitions.detail_fields.widget_at(("transitions", 0, "rate"))
    field.setFocus()
    qtbot.waitUntil(field.hasFocus, timeout=3000)
    old = button.editor
    qtbot.keyClick(field, Qt.Key.Key_D, Qt.KeyboardModifier.ControlModifier | Qt.KeyboardModifier.ShiftModifier)
    qtbot.waitUntil(lambda: button.editor is not old and button.editor.isVisible(), timeout=3000)  # from the keyboard
    editor = button.editor
    assert editor.family.currentData() == "lognormal"
    qtbot.mouseClick(editor.remove_button, Qt.MouseButton.LeftButton)
    assert all(e.get("parameter") != "transitions[0].rate" for e in tomllib.loads(doc.text)["uncertainty"])
    assert doc.scenario is not None and button.state == "none"


def test_group_member_says_where_to_edit_and_no_button_for_settings(qtbot, window: MainWindow) -> None:
    transitions = window.editor(TransitionsEditor)
    window.show_editor(transitions)
    transitions.select(1)
    button = button_of(transitions.detail_fields, ("transitions", 1, "rate"))
    editor = open_editor(qtbot, window, button)
    assert "uncertainty[1]" in editor.group_note.text() and not editor.apply_button.isEnabled()
    editor.reject()
    valuation = window.editor(ValuationEditor)
    assert all(b.key != ("valuation", "willingness_to_pay") for b in valuation.fields.distribution_buttons)
    assert all(b.key[-1] != "currency" for b in valuation.fields.distribution_buttons)


def test_a_bad_entry_typed_in_the_text_marks_the_parameters_button(qtbot, window: MainWindow) -> None:
    doc = window.document
    valuation = window.editor(ValuationEditor)
    button = button_of(valuation.rows, ("valuation", "utilities", "severe"))
    assert button.state == "set"
    bad = 'parameter = "valuation.utilities.severe"\ndistribution = "beta"\nmean = 0.45\nse = 0.6\n'
    good = 'parameter = "valuation.utilities.severe"\ndistribution = "beta"\nmean = 0.45\nse = 0.05\n'
    assert good in doc.text
    doc.set_text(doc.text.replace(good, bad))  # as typed in the scenario text view
    assert doc.scenario is None and button.state == "problem"
    tip = button.action.toolTip()
    assert "se" in tip and "0.6" in tip and "beta" in tip  # the key, the value and the rule
    window.undo_action.trigger()
    assert doc.scenario is not None and button.state == "set"
