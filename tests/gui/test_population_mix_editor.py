"""The population editor's initial state as one state, a mix of states, or a mix per sex (issue 11
item 1), worked as a user does: the form chosen in its combo box by keyboard, shares typed into the
table; each change is one undoable edit, the file gets an inline table the reader accepts, and shares
that do not add up to 1 mark the sum from the reader's own problem key paths."""

from __future__ import annotations

from pathlib import Path

import pytest
from PySide6.QtCore import QSettings, Qt
from PySide6.QtWidgets import QLineEdit

from gui.document import ScenarioDocument
from gui.editors import PopulationEditor
from gui.editors.fields import is_marked
from gui.editors.population import initial_for_mode, initial_mode

INITIAL = ("population", "initial_state")


@pytest.fixture
def doc(qtbot, tmp_path: Path) -> ScenarioDocument:
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
    d = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    d.new_from_demo("lanthic")  # states well, lanthic, dead (absorbing); sex mix female, male
    return d


@pytest.fixture
def editor(qtbot, doc: ScenarioDocument) -> PopulationEditor:
    ed = PopulationEditor(doc)
    qtbot.addWidget(ed)
    ed.resize(520, 640)
    ed.show()
    qtbot.waitExposed(ed)
    return ed


def pick_form(qtbot, ed: PopulationEditor, mode: str) -> None:
    """Choose the form in its combo box with the arrow keys, as from the keyboard."""
    combo = ed.initial_mode
    target = combo.findData(mode)
    key = Qt.Key.Key_Down if target > combo.currentIndex() else Qt.Key.Key_Up
    while combo.currentIndex() != target:
        qtbot.keyClick(combo, key)
    assert combo.currentData() == mode


def share(ed: PopulationEditor, *key: str) -> QLineEdit:
    w = ed.shares.widget_at((*INITIAL, *key))
    assert isinstance(w, QLineEdit), key
    return w


def type_share(qtbot, w: QLineEdit, text: str) -> None:
    """Select the field's text, type over it and press Enter."""
    w.setFocus()
    w.selectAll()
    qtbot.keyClicks(w, text)
    qtbot.keyClick(w, Qt.Key.Key_Return)


def test_single_state_keeps_its_look(editor: PopulationEditor, doc: ScenarioDocument) -> None:
    assert editor.initial_mode.currentData() == "one"
    assert editor.initial.isVisible() and editor.initial.currentData() == "well"
    assert [editor.initial.itemText(i) for i in range(editor.initial.count())] == ["well", "lanthic"]
    assert not editor.initial_box.isVisible()


def test_a_mix_typed_into_the_table(qtbot, editor: PopulationEditor, doc: ScenarioDocument) -> None:
    steps = doc.undo_stack.count()
    pick_form(qtbot, editor, "mix")
    assert doc.get(INITIAL) == {"well": 1.0}
    assert doc.undo_stack.count() == steps + 1
    assert "initial_state = {" in doc.text  # an inline table, as docs/scenario-format.md writes it
    assert editor.initial_box.isVisible() and not editor.initial.isVisible()
    # one row per living state: the absorbing "dead" is not offered
    assert share(editor, "well").text() == "1.0" and share(editor, "lanthic").text() == ""
    assert editor.shares.widget_at((*INITIAL, "dead")) is None
    assert doc.scenario is not None and doc.scenario.model.population.initial_shares("female") == {"well": 1.0}

    type_share(qtbot, share(editor, "lanthic"), "0.2")
    assert doc.undo_stack.count() == steps + 2
    assert doc.get(INITIAL) == {"well": 1.0, "lanthic": 0.2}
    total = editor.sum_labels[None]
    assert total.text() == "Sum 1.2"
    assert doc.scenario is None
    # the reader's problem at population.initial_state marks the sum, with its words as tooltip
    assert [e.key for e in doc.errors] == [INITIAL]
    assert is_marked(total) and "must sum to 1" in total.toolTip()
    assert editor.banner.isVisible()

    type_share(qtbot, share(editor, "well"), "0.8")
    assert doc.undo_stack.count() == steps + 3
    assert total.text() == "Sum 1" and not is_marked(total)
    assert doc.scenario is not None
    assert dict(doc.scenario.model.population.initial_shares("male")) == {"well": 0.8, "lanthic": 0.2}

    # a negative share: the reader's problem at population.initial_state.lanthic marks that field
    type_share(qtbot, share(editor, "lanthic"), "-0.2")
    assert [e.key for e in doc.errors] == [(*INITIAL, "lanthic")]
    assert is_marked(share(editor, "lanthic")) and not is_marked(share(editor, "well"))

    # each change is one undo step, undone in turn
    doc.undo_stack.undo()
    assert doc.get(INITIAL) == {"well": 0.8, "lanthic": 0.2} and share(editor, "lanthic").text() == "0.2"
    assert not is_marked(share(editor, "lanthic"))
    doc.undo_stack.undo()
    doc.undo_stack.undo()
    doc.undo_stack.undo()
    assert doc.get(INITIAL) == "well" and editor.initial_mode.currentData() == "one"
    assert editor.initial.isVisible() and not editor.initial_box.isVisible()


def test_a_mix_per_sex(qtbot, editor: PopulationEditor, doc: ScenarioDocument) -> None:
    doc.set_value(INITIAL, initial_for_mode("mix", {"well": 0.8, "lanthic": 0.2}, ["well", "lanthic"], []))
    steps = doc.undo_stack.count()
    pick_form(qtbot, editor, "sex")
    assert doc.undo_stack.count() == steps + 1
    # the mix is carried over to every sex of the sex mix
    assert doc.get(INITIAL) == {"female": {"well": 0.8, "lanthic": 0.2}, "male": {"well": 0.8, "lanthic": 0.2}}
    assert set(editor.sum_labels) == {"female", "male"}
    type_share(qtbot, share(editor, "male", "well"), "0.6")
    assert editor.sum_labels["male"].text() == "Sum 0.8" and editor.sum_labels["female"].text() == "Sum 1"
    # the problem is at population.initial_state.male: that column's sum is marked, not the other
    assert [e.key for e in doc.errors] == [(*INITIAL, "male")]
    assert is_marked(editor.sum_labels["male"]) and not is_marked(editor.sum_labels["female"])
    type_share(qtbot, share(editor, "male", "lanthic"), "0.4")
    assert doc.scenario is not None and not doc.errors
    pop = doc.scenario.model.population
    assert pop.initial_by_sex
    assert dict(pop.initial_shares("female")) == {"well": 0.8, "lanthic": 0.2}
    assert dict(pop.initial_shares("male")) == {"well": 0.6, "lanthic": 0.4}
    editor.grab().save("/tmp/mix_editor.png")

    # back to one state: the first sex's largest share
    pick_form(qtbot, editor, "one")
    assert doc.get(INITIAL) == "well" and editor.initial.isVisible() and editor.initial.currentData() == "well"
    assert doc.scenario is not None


def test_a_sex_missing_from_the_per_sex_table_marks_the_table(qtbot, editor: PopulationEditor,
                                                              doc: ScenarioDocument) -> None:
    pick_form(qtbot, editor, "sex")
    doc.remove((*INITIAL, "male"))  # e.g. from the scenario text
    assert [e.key for e in doc.errors] == [INITIAL]
    assert is_marked(editor.initial_box)
    # typing the missing sex's shares into its column creates its table
    type_share(qtbot, share(editor, "male", "well"), "1")
    assert doc.scenario is not None and not is_marked(editor.initial_box)


@pytest.mark.parametrize(("value", "mode"), [
    ("well", "one"), (None, "one"), (3, "one"), ({"well": 1.0}, "mix"), ({}, "mix"),
    ({"female": {"well": 1.0}}, "sex"), ({"female": {"well": 1.0}, "x": 0.5}, "mix"),
])
def test_initial_mode_reads_the_form_as_the_reader_does(value, mode) -> None:
    assert initial_mode(value) == mode


def test_initial_for_mode_carries_the_shares_over() -> None:
    living, sexes = ["well", "lanthic"], ["female", "male"]
    assert initial_for_mode("mix", "lanthic", living, sexes) == {"lanthic": 1.0}
    assert initial_for_mode("mix", None, living, sexes) == {"well": 1.0}
    assert initial_for_mode("sex", "well", living, sexes) == {"female": {"well": 1.0}, "male": {"well": 1.0}}
    per_sex = {"female": {"well": 0.3, "lanthic": 0.7}, "male": {"well": 0.9, "lanthic": 0.1}}
    assert initial_for_mode("mix", per_sex, living, sexes) == per_sex["female"]
    assert initial_for_mode("one", per_sex, living, sexes) == "lanthic"
    assert initial_for_mode("one", {"well": 0.5, "lanthic": 0.5}, living, sexes) == "well"
    assert initial_for_mode("mix", None, [], sexes) is None
