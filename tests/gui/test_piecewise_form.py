"""A piecewise-constant hazard edited in the form (issue 14 item 6): its bands in a two-column table
(where each band starts, its rate) with "Add band" and a remove button per row; each cell is written
into the scenario text as an undoable edit (the list's comment kept) and the validated model's hazard
takes the values; a break out of order is marked at its cell with the loader's rule; a band's rate
takes a distribution through its "±" button; removing a band renumbers the [[uncertainty]] names of
the later bands and drops the removed band's own distribution."""

from __future__ import annotations

from pathlib import Path

import pytest
import tomllib
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QLabel

from gui.editors import TransitionsEditor
from gui.editors.fields import is_marked
from gui.main_window import MainWindow
from gui.uncertainty.groups import find_data

ROOT = Path(__file__).resolve().parents[2]
QUORREL = ROOT / "scenarios" / "quorrel_psa.toml"
ONSET = 'family = "exponential"\nrate = 0.08              # per person-year\n'
PIECEWISE = 'family = "piecewise"\nbreaks = [0.0, 5.0]      # years since entry\nrates = [0.05, 0.1]\n'
ONSET_ENTRY = 'parameter = "transitions[0].rate"          # onset\ndistribution = "gamma"\nmean = 0.08\nse = 0.012\n'
BAND_ENTRY = ('parameter = "transitions[0].rates[1]"      # onset after 5 years\n'
              'distribution = "gamma"\nmean = 0.1\nse = 0.015\n')


@pytest.fixture
def window(main_window, tmp_path: Path) -> MainWindow:
    text = QUORREL.read_text(encoding="utf-8")
    assert ONSET in text and ONSET_ENTRY in text
    path = tmp_path / "quorrel_piecewise.toml"  # the onset hazard in two bands, the second one uncertain
    path.write_text(text.replace(ONSET, PIECEWISE).replace(ONSET_ENTRY, BAND_ENTRY), encoding="utf-8")
    return main_window(path, size=(1300, 900))


def type_into(qtbot, field, text: str) -> None:
    field.setFocus()
    field.selectAll()
    qtbot.keyClicks(field, text)
    qtbot.keyClick(field, Qt.Key.Key_Tab)


def bands_of(qtbot, transitions):
    """The bands table of the selected transition, once laid out (a rebuilt form is placed on the next
    turn of the event loop)."""
    bands = transitions.form.bands
    qtbot.waitUntil(lambda: bands.add_button.height() > 0 and bands.table.cellWidget(0, 2).height() > 0,
                    timeout=3000)
    return bands


def hazard(window: MainWindow):
    return window.document.scenario.model.transitions[0].hazard.params()


def test_bands_edited_added_checked_given_a_distribution_and_removed(qtbot, window: MainWindow,
                                                                    screenshots: Path) -> None:
    doc = window.document
    original = doc.text
    transitions = window.editor(TransitionsEditor)
    window.show_editor(transitions)
    transitions.select(0)
    bands = bands_of(qtbot, transitions)
    assert bands.table.rowCount() == 2
    assert [bands.cells[("breaks", j)].text() for j in range(2)] == ["0.0", "5.0"]
    assert [bands.cells[("rates", j)].text() for j in range(2)] == ["0.05", "0.1"]
    assert bands.table.horizontalHeaderItem(0).text() == "Band starts at (years)"
    assert hazard(window) == {"breaks": (0.0, 5.0), "rates": (0.05, 0.1)}

    type_into(qtbot, bands.cells[("rates", 0)], "0.04")
    qtbot.waitUntil(lambda: hazard(window)["rates"] == (0.04, 0.1), timeout=3000)
    assert "breaks = [0.0, 5.0]      # years since entry\nrates = [0.04, 0.1]\n" in doc.text  # comment kept

    qtbot.mouseClick(bands.add_button, Qt.MouseButton.LeftButton)
    bands = bands_of(qtbot, transitions)  # rebuilt with a row more
    assert bands.table.rowCount() == 3 and hazard(window) == {"breaks": (0.0, 5.0, 6.0), "rates": (0.04, 0.1, 0.1)}
    type_into(qtbot, bands.cells[("breaks", 2)], "3")  # before the band above it
    qtbot.waitUntil(lambda: is_marked(bands.cells[("breaks", 2)]), timeout=3000)
    tip = bands.cells[("breaks", 2)].toolTip()
    assert "strictly increasing" in tip and "3" in tip and doc.scenario is None
    assert transitions.grab().save(str(screenshots / "piecewise_band_out_of_order.png"))
    type_into(qtbot, bands.cells[("breaks", 2)], "10")
    qtbot.waitUntil(lambda: doc.scenario is not None, timeout=3000)
    assert not is_marked(bands.cells[("breaks", 2)])
    assert hazard(window) == {"breaks": (0.0, 5.0, 10.0), "rates": (0.04, 0.1, 0.1)}

    # a distribution on the third band's rate through the same "±" button as any parameter
    button = next(b for b in transitions.detail_fields.distribution_buttons if b.key == ("transitions", 0, "rates", 2))
    assert button.line is bands.cells[("rates", 2)] and button.state == "none"
    qtbot.mouseClick(button.button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: button.editor is not None and button.editor.isVisible(), timeout=3000)
    editor = button.editor
    editor.family.setCurrentIndex(find_data(editor.family, "gamma"))
    editor.family.activated.emit(editor.family.currentIndex())
    assert editor.inputs["mean"].text() == "0.1"  # the band's point value
    assert "hazard table's unit: years" in editor.findChild(QLabel).text()
    type_into(qtbot, editor.inputs["se"], "0.02")
    qtbot.waitUntil(lambda: editor.preview.distribution is not None, timeout=3000)
    editor.apply()
    assert button.state == "set"
    assert transitions.grab().save(str(screenshots / "piecewise_bands.png"))
    names = [e.get("parameter") for e in tomllib.loads(doc.text)["uncertainty"]]
    assert "transitions[0].rates[1]" in names and names[-1] == "transitions[0].rates[2]"
    spec = next(s for s in doc.scenario.uncertainty if s.keys == ("transitions[0].rates[2]",))
    # gamma by moments (Briggs, Claxton & Sculpher 2006, ch. 4): shape = m^2/se^2
    assert spec.distribution.parameters()["shape"] == pytest.approx(0.1**2 / 0.02**2, rel=1e-12)

    before_removal = doc.text
    qtbot.mouseClick(bands_of(qtbot, transitions).table.cellWidget(1, 2), Qt.MouseButton.LeftButton)  # band 2 out
    bands = bands_of(qtbot, transitions)
    assert bands.table.rowCount() == 2 and hazard(window) == {"breaks": (0.0, 10.0), "rates": (0.04, 0.1)}
    entries = tomllib.loads(doc.text)["uncertainty"]
    names = [e.get("parameter") for e in entries]
    assert "transitions[0].rates[2]" not in names  # the later band's distribution follows its band
    assert entries[-1] == {"parameter": "transitions[0].rates[1]", "distribution": "gamma", "mean": 0.1, "se": 0.02}
    assert names.count("transitions[0].rates[1]") == 1  # the removed band's own distribution went with it
    assert doc.scenario is not None

    window.undo_action.trigger()  # one undo brings the band and both distributions back
    assert doc.text == before_removal
    while doc.undo_stack.canUndo():
        window.undo_action.trigger()
    assert doc.text == original


def test_a_band_in_a_group_is_not_removed_and_the_reason_is_shown(qtbot, window: MainWindow) -> None:
    doc = window.document
    text = doc.text.replace('parameters = ["transitions[1].rate", "transitions[3].rate"]',
                            'parameters = ["transitions[0].rates[0]", "transitions[3].rate"]')
    doc.set_text(text)
    assert doc.scenario is not None
    transitions = window.editor(TransitionsEditor)
    window.show_editor(transitions)
    transitions.select(0)
    notices = []
    doc.notice.connect(notices.append)
    qtbot.mouseClick(bands_of(qtbot, transitions).table.cellWidget(0, 2), Qt.MouseButton.LeftButton)
    assert doc.text == text and notices and "uncertainty[1]" in notices[0]
