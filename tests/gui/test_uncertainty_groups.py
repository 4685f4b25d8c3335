"""Parameters drawn together, edited in the window (issue 14 item 6 and "Bad input"): a correlated
group (multivariate normal) started from a parameter's "±" editor and a group of shares (Dirichlet)
started from the "Probabilistic analysis" page are written into the scenario text as [[uncertainty]]
entries (comments kept, one undoable edit each) and read back by the scenario reader into the model's
distributions (checked against numpy's covariance diag(se) R diag(se) and scipy.stats.dirichlet's
means); a matrix that is not positive semi-definite, a name that is no parameter and shares that do
not belong together are marked at their cells with the reader's own rule (the eigenvalue checked with
numpy.linalg.eigvalsh)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import tomllib
from PySide6.QtCore import Qt
from scipy import stats

from gui.editors import TransitionsEditor
from gui.editors.fields import is_marked
from gui.main_window import MainWindow
from gui.uncertainty.groups import GroupEditor, find_data
from sim.uncertainty import Dirichlet, MultivariateNormal

ROOT = Path(__file__).resolve().parents[2]
QUORREL = ROOT / "scenarios" / "quorrel_psa.toml"


@pytest.fixture
def window(main_window) -> MainWindow:
    return main_window(QUORREL, size=(1300, 860))


def type_into(qtbot, field, text: str) -> None:
    """Type ``text`` into a line edit (or an editable combo box) as a user would, then leave it."""
    line = field.lineEdit() if hasattr(field, "lineEdit") and field.lineEdit() is not None else field
    line.setFocus()
    line.selectAll()
    qtbot.keyClicks(line, text)
    qtbot.keyClick(line, Qt.Key.Key_Tab)


def choose(combo, data) -> None:
    combo.setCurrentIndex(find_data(combo, data))
    assert combo.currentData() == data
    combo.activated.emit(combo.currentIndex())


def spec_of(document, names):
    return next(s for s in document.scenario.uncertainty if list(s.keys) == list(names))


def test_correlated_group_from_the_distribution_editor_written_read_back_and_undone(
        qtbot, window: MainWindow, screenshots: Path) -> None:
    doc = window.document
    before = doc.text
    transitions = window.editor(TransitionsEditor)
    window.show_editor(transitions)
    transitions.select(0)
    button = next(b for b in transitions.detail_fields.distribution_buttons if b.key == ("transitions", 0, "rate"))
    qtbot.mouseClick(button.button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: button.editor is not None and button.editor.isVisible(), timeout=3000)
    qtbot.mouseClick(button.editor.group_button, Qt.MouseButton.LeftButton)  # "Part of a correlated group…"
    editor: GroupEditor = button.editor.group_editor
    qtbot.waitUntil(editor.isVisible, timeout=3000)
    assert not button.editor.isVisible()
    assert editor.family.currentData() == "multivariate_normal" and editor.index is None
    assert editor.cells[("parameters", 0)].currentText() == "transitions[0].rate"
    assert editor.cells[("mean", 0)].text() == "0.08"  # starts from the point value
    assert "uncertainty[0]" in editor.note.text() and "replaces" in editor.note.text()

    qtbot.mouseClick(editor.add_button, Qt.MouseButton.LeftButton)
    assert editor.params.rowCount() == 2 and editor.matrix.rowCount() == 2
    type_into(qtbot, editor.cells[("parameters", 1)], "strategies[1].hazard_ratios.progression")
    assert editor.cells[("mean", 1)].text() == "0.65"
    choose(editor.form, ("mean", "se", "correlation"))
    assert editor.matrix_key == "correlation" and editor.cells[("correlation", 0, 0)].text() == "1"
    for j, (mean, se) in enumerate(((-2.5257, 0.15), (-0.4308, 0.14))):
        choose(editor.cells[("transform", j)], "log")
        type_into(qtbot, editor.cells[("mean", j)], str(mean))
        type_into(qtbot, editor.cells[("se", j)], str(se))
    type_into(qtbot, editor.cells[("correlation", 0, 1)], "-0.3")
    assert editor.cells[("correlation", 1, 0)].text() == "-0.3"  # the symmetric cell follows
    qtbot.waitUntil(lambda: editor.check.spec is not None, timeout=3000)
    assert not editor.message.isVisible() and editor.apply_button.isEnabled()
    d = editor.check.spec.distribution
    # a log element's mean is exp(m + v/2) (log-normal mean, from memory) and its 95% interval exp(m -+ 1.96 s)
    assert d.means()[0] == pytest.approx(np.exp(-2.5257 + 0.15**2 / 2), rel=1e-12)
    assert editor.results[0].text().startswith(f"{np.exp(-2.5257 + 0.15**2 / 2):.4g} (")
    assert editor.grab().save(str(screenshots / "uncertainty_group_correlated.png"))

    qtbot.mouseClick(editor.apply_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: not editor.isVisible(), timeout=3000)
    entries = tomllib.loads(doc.text)["uncertainty"]
    assert entries[-1] == {"parameters": ["transitions[0].rate", "strategies[1].hazard_ratios.progression"],
                           "distribution": "multivariate_normal", "mean": [-2.5257, -0.4308], "se": [0.15, 0.14],
                           "correlation": [[1, -0.3], [-0.3, 1]], "transform": ["log", "log"]}
    names = [e.get("parameter") for e in entries]
    assert "transitions[0].rate" not in names and "strategies[1].hazard_ratios.progression" not in names
    assert "# Parameter names as `hazardtrace check` lists them." in doc.text  # comments kept
    spec = spec_of(doc, entries[-1]["parameters"])
    assert isinstance(spec.distribution, MultivariateNormal)
    se, r = np.array([0.15, 0.14]), np.array([[1, -0.3], [-0.3, 1]])
    np.testing.assert_allclose(spec.distribution.covariance, np.diag(se) @ r @ np.diag(se), rtol=1e-15)
    assert spec.distribution.transforms == ("log", "log")
    assert button.state == "set" and "a group" in button.action.toolTip()

    window.undo_action.trigger()  # one undo restores the text as it was
    assert doc.text == before and doc.scenario is not None


def test_bad_matrix_and_unknown_parameter_are_marked_with_the_readers_rule(qtbot, window: MainWindow,
                                                                           screenshots: Path) -> None:
    doc = window.document
    page = window.psa_page
    window.tabs.setCurrentWidget(page)
    groups = page.groups
    assert [groups.list.item(i).data(Qt.ItemDataRole.UserRole) for i in range(groups.list.count())] == [1, 5]
    groups.list.setCurrentRow(0)
    qtbot.mouseClick(groups.edit_button, Qt.MouseButton.LeftButton)
    editor = groups.editor
    qtbot.waitUntil(editor.isVisible, timeout=3000)
    # read back from the file as written
    assert [editor.cells[("parameters", j)].currentText() for j in range(2)] == ["transitions[1].rate",
                                                                                 "transitions[3].rate"]
    assert editor.cells[("covariance", 0, 1)].text() == "0.0060" and editor.cells[("mean", 1)].text() == "-1.3863"
    assert editor.cells[("transform", 0)].currentData() == "log" and editor.check.spec is not None

    type_into(qtbot, editor.cells[("covariance", 0, 1)], "0.06")  # |correlation| = 0.06 / 0.03 = 2 > 1
    qtbot.waitUntil(lambda: is_marked(editor.matrix), timeout=3000)
    smallest = np.linalg.eigvalsh([[0.0225, 0.06], [0.06, 0.04]])[0]
    assert "positive semi-definite" in editor.matrix.toolTip() and f"{smallest:.4g}" in editor.matrix.toolTip()
    assert editor.message.isVisible() and "positive semi-definite" in editor.message.text()
    assert not editor.apply_button.isEnabled() and editor.check.spec is None
    assert editor.grab().save(str(screenshots / "uncertainty_group_not_psd.png"))
    text = doc.text
    qtbot.keyClick(editor.cells[("covariance", 0, 1)], Qt.Key.Key_Return)
    assert doc.text == text and editor.isVisible()  # nothing written
    type_into(qtbot, editor.cells[("covariance", 0, 1)], "0.0060")
    qtbot.waitUntil(lambda: not is_marked(editor.matrix), timeout=3000)

    type_into(qtbot, editor.cells[("parameters", 1)], "transitions[9].rate")
    qtbot.waitUntil(lambda: is_marked(editor.cells[("parameters", 1)]), timeout=3000)
    assert "must name a numeric model parameter" in editor.cells[("parameters", 1)].toolTip()
    assert "transitions[9].rate" in editor.cells[("parameters", 1)].toolTip()
    assert not editor.apply_button.isEnabled()
    assert editor.grab().save(str(screenshots / "uncertainty_group_unknown_parameter.png"))
    type_into(qtbot, editor.cells[("parameters", 1)], "transitions[3].rate")
    qtbot.waitUntil(lambda: editor.apply_button.isEnabled(), timeout=3000)
    type_into(qtbot, editor.cells[("mean", 1)], "-1.4")
    qtbot.mouseClick(editor.apply_button, Qt.MouseButton.LeftButton)
    assert "mean = [-2.1203, -1.4]                  # log rates: ln 0.12, ln 0.25" in doc.text  # comment kept
    assert 'description = "invented joint fit of the two rates on the log scale"' in doc.text
    assert spec_of(doc, ["transitions[1].rate", "transitions[3].rate"]).distribution.mean == (-2.1203, -1.4)
    window.undo_action.trigger()
    assert doc.text == text
    # the same matrix typed in the scenario text: the list of groups shows the reader's rule
    doc.set_text(text.replace("covariance = [[0.0225, 0.0060], [0.0060, 0.0400]]",
                              "covariance = [[0.0225, 0.0600], [0.0600, 0.0400]]"))
    assert doc.scenario is None and "positive semi-definite" in groups.list.item(0).toolTip()
    assert "positive semi-definite" not in groups.list.item(1).toolTip()


def test_shares_group_created_checked_removed_and_undone(qtbot, window: MainWindow, screenshots: Path) -> None:
    doc = window.document
    page = window.psa_page
    window.tabs.setCurrentWidget(page)
    before = doc.text
    qtbot.mouseClick(page.groups.new_shares, Qt.MouseButton.LeftButton)
    editor = page.groups.editor
    qtbot.waitUntil(editor.isVisible, timeout=3000)
    assert editor.family.currentData() == "dirichlet" and editor.form.currentData() == ("alpha",)
    for j, (name, count) in enumerate((("population.sex_mix.female", "52"), ("valuation.utilities.well", "48"))):
        qtbot.mouseClick(editor.add_button, Qt.MouseButton.LeftButton)
        type_into(qtbot, editor.cells[("parameters", j)], name)
        type_into(qtbot, editor.cells[("alpha", j)], count)
    qtbot.waitUntil(lambda: is_marked(editor.params), timeout=3000)
    assert "do not belong together" in editor.params.toolTip() and not editor.apply_button.isEnabled()
    assert editor.grab().save(str(screenshots / "uncertainty_group_shares_apart.png"))
    type_into(qtbot, editor.cells[("parameters", 1)], "population.sex_mix.male")
    qtbot.waitUntil(lambda: editor.check.spec is not None, timeout=3000)
    assert not is_marked(editor.params)
    ref = stats.dirichlet([52, 48]).mean()
    assert editor.results[1].text().startswith(f"{ref[1]:.4g} (")
    assert editor.grab().save(str(screenshots / "uncertainty_group_shares.png"))
    qtbot.mouseClick(editor.apply_button, Qt.MouseButton.LeftButton)
    entry = tomllib.loads(doc.text)["uncertainty"][-1]
    assert entry == {"parameters": ["population.sex_mix.female", "population.sex_mix.male"],
                     "distribution": "dirichlet", "alpha": [52, 48]}
    d = spec_of(doc, entry["parameters"]).distribution
    assert isinstance(d, Dirichlet)
    np.testing.assert_allclose(d.means(), ref, rtol=1e-15)
    assert page.groups.list.count() == 3
    assert page.grab().save(str(screenshots / "uncertainty_group_list.png"))

    page.groups.list.setCurrentRow(2)
    qtbot.mouseClick(page.groups.remove_button, Qt.MouseButton.LeftButton)
    # the text as before, but for the blank line that separated the group from the entry above it
    assert doc.text.rstrip() == before.rstrip() and page.groups.list.count() == 2
    window.undo_action.trigger()  # the removal undone: the group is back
    assert tomllib.loads(doc.text)["uncertainty"][-1] == entry and page.groups.list.count() == 3


def test_a_share_starts_a_dirichlet_on_its_whole_table_given_by_mean_shares(qtbot, window: MainWindow) -> None:
    from gui.editors import PopulationEditor

    doc = window.document
    population = window.editor(PopulationEditor)
    window.show_editor(population)
    button = next(b for b in population.rows.distribution_buttons if b.key == ("population", "sex_mix", "female"))
    button.open_editor()
    qtbot.waitUntil(lambda: button.editor is not None and button.editor.isVisible(), timeout=3000)
    assert button.editor.group_button.text() == "Drawn with the other shares…"
    qtbot.mouseClick(button.editor.group_button, Qt.MouseButton.LeftButton)
    editor = button.editor.group_editor
    qtbot.waitUntil(editor.isVisible, timeout=3000)
    assert editor.family.currentData() == "dirichlet"
    assert [editor.cells[("parameters", j)].currentText() for j in range(2)] == ["population.sex_mix.female",
                                                                                 "population.sex_mix.male"]
    choose(editor.form, ("mean", "sample_size"))
    assert editor.sample_size.isVisible()
    type_into(qtbot, editor.cells[("mean", 0)], "0.55")
    type_into(qtbot, editor.cells[("mean", 1)], "0.5")  # the shares sum to 1.05
    type_into(qtbot, editor.sample_size, "200")
    qtbot.waitUntil(lambda: is_marked(editor.params), timeout=3000)
    assert "must sum to 1" in editor.params.toolTip() and "1.05" in editor.params.toolTip()
    type_into(qtbot, editor.cells[("mean", 1)], "0.45")
    qtbot.waitUntil(lambda: editor.check.spec is not None, timeout=3000)
    editor.apply()
    entry = tomllib.loads(doc.text)["uncertainty"][-1]
    assert entry == {"parameters": ["population.sex_mix.female", "population.sex_mix.male"],
                     "distribution": "dirichlet", "mean": [0.55, 0.45], "sample_size": 200}
    # alpha = mean x sample size (docs/scenario-format.md)
    d = spec_of(doc, entry["parameters"]).distribution
    np.testing.assert_allclose(d.alpha, [110.0, 90.0], rtol=1e-15)
