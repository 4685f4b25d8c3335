"""ScenarioDocument: edits into the TOML document, validation, undo/redo, files, recovery, recent files."""

from __future__ import annotations

import gc
import os
import time
from dataclasses import replace
from pathlib import Path

import pytest
from PySide6.QtCore import QEvent, QSettings

import gui.document
from gui.document import ScenarioDocument, format_key
from sim.io.demo import demo_path
from sim.io.scenario import ScenarioError, parse_scenario

DEMO_TEXT = demo_path("lanthic").read_text(encoding="utf-8")


def comment_lines(text: str) -> list[str]:
    return [ln.split("#", 1)[1].strip() for ln in text.splitlines() if "#" in ln]




@pytest.fixture
def settings(tmp_path: Path) -> QSettings:
    return QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)


@pytest.fixture
def doc(qtbot, tmp_path: Path, settings: QSettings) -> ScenarioDocument:
    d = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    d.new_from_demo("lanthic")
    return d


def test_demo_opens_valid_and_clean(doc: ScenarioDocument) -> None:
    assert doc.text == DEMO_TEXT
    assert doc.scenario is not None and doc.errors == []
    assert not doc.dirty
    assert doc.path is None and doc.display_name == "Untitled (demo lanthic)"
    assert doc.suggested_name == "lanthic_syndrome.toml"


def test_edit_changes_text_and_model_and_keeps_comments(qtbot, doc: ScenarioDocument) -> None:
    with qtbot.waitSignals([doc.changed, doc.validated]):
        assert doc.set_value(("transitions", 1, "rate"), 0.2)
    assert "rate = 0.2              # per person-year" in doc.text
    assert doc.scenario.model.transitions[1].hazard.rate == pytest.approx(0.2)
    assert doc.dirty
    assert comment_lines(doc.text) == comment_lines(DEMO_TEXT)


def test_invalid_edit_is_kept_and_reported_with_the_loaders_message(qtbot, doc: ScenarioDocument) -> None:
    with qtbot.waitSignal(doc.validated) as blocker:
        doc.set_value(("transitions", 1, "rate"), "abc")
    scenario, errors = blocker.args
    assert scenario is None and doc.scenario is None
    assert 'rate = "abc"' in doc.text  # what the user typed stays in the document
    with pytest.raises(ScenarioError) as info:
        parse_scenario(doc.text)
    (err,) = errors
    assert err.key == ("transitions", 1, "rate")
    assert err.message == str(info.value)
    assert err.line == info.value.line
    assert "must be a number" in err.message


@pytest.mark.parametrize(("path", "value", "key"), [
    (("valuation", "utilities", "dead"), 0.5, ("valuation", "utilities", "dead")),  # model-level message
    (("population", "entry_age", "high"), 30.0, ("population", "entry_age", "high")),  # population rule
    (("transitions", 0, "shape"), -1.0, ("transitions", 0, "shape")),  # hazard parameter rule
    (("population", "initial_state"), "dead", ("population", "initial_state")),
])
def test_problems_are_located_at_the_field(doc: ScenarioDocument, path: tuple, value: object, key: tuple) -> None:
    doc.set_value(path, value)
    (err,) = doc.errors
    assert err.key == key, err.message


@pytest.mark.parametrize(("path", "value", "key"), [
    (("valuation", "utilities", "dead"), 0.5, ("valuation", "utilities", "dead")),  # a rule of the model
    (("population", "entry_age", "high"), 30.0, ("population", "entry_age", "high")),
    (("transitions", 0, "shape"), -1.0, ("transitions", 0, "shape")),  # a hazard family's rule
    (("strategies", 1, "hazard_ratios", "onset"), "x", ("strategies", 1, "hazard_ratios", "onset")),
])
def test_fields_come_from_the_problems_data_not_their_wording(monkeypatch, doc: ScenarioDocument, path: tuple,
                                                             value: object, key: tuple) -> None:
    # every rule reworded into text that names no field: the window still marks the right one
    real = gui.document.parse_scenario

    def reworded(text, file=None):
        try:
            return real(text, file)
        except ScenarioError as err:
            raise ScenarioError.of(replace(p, rule="is not acceptable here") for p in err.problems) from None

    monkeypatch.setattr(gui.document, "parse_scenario", reworded)
    doc.set_value(path, value)
    (err,) = doc.errors
    assert err.key == key and err.rule == "is not acceptable here", err.message
    assert err.line is not None and err.message.endswith(f"{format_key(key)}: is not acceptable here, got {value!r}")


def test_every_problem_is_located_at_its_field(doc: ScenarioDocument) -> None:
    # two independent problems typed one after the other are both reported, each at its field
    doc.set_value(("transitions", 0, "shape"), -1.0)
    doc.set_value(("population", "entry_age", "high"), 30.0)
    assert [e.key for e in doc.errors] == [("transitions", 0, "shape"), ("population", "entry_age", "high")]
    assert all(e.line is not None for e in doc.errors)
    doc.undo_stack.undo()
    assert [e.key for e in doc.errors] == [("transitions", 0, "shape")]


def test_undo_redo_restore_the_text(doc: ScenarioDocument) -> None:
    doc.set_value(("horizon", "value"), 90)
    after_first = doc.text
    doc.set_value(("valuation", "discount_costs"), 0.03)
    after_second = doc.text
    doc.undo_stack.undo()
    assert doc.text == after_first
    doc.undo_stack.undo()
    assert doc.text == DEMO_TEXT and not doc.dirty
    doc.undo_stack.redo()
    doc.undo_stack.redo()
    assert doc.text == after_second
    assert doc.scenario.model.valuation.discount_costs == pytest.approx(0.03)


def test_no_op_edit_pushes_nothing(doc: ScenarioDocument) -> None:
    assert not doc.set_value(("horizon", "scale"), "age")
    assert doc.undo_stack.count() == 0


def test_syntax_error_is_kept_and_located(doc: ScenarioDocument) -> None:
    doc.set_text(DEMO_TEXT + "\n[[[broken\n")
    assert doc.data is None and doc.scenario is None
    (err,) = doc.errors
    assert err.key == () and err.line is not None and "not valid TOML" in err.message
    assert not doc.set_value(("horizon", "value"), 80)  # forms cannot edit broken TOML
    doc.undo_stack.undo()
    assert doc.scenario is not None


def test_save_then_reopen_gives_the_same_scenario(doc: ScenarioDocument, tmp_path: Path, settings) -> None:
    doc.set_value(("transitions", 2, "per"), 1000)
    target = doc.save_as(tmp_path / "model.toml")
    assert not doc.dirty and doc.display_name == "model.toml"
    other = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    other.open(target)
    assert other.text == doc.text
    assert other.scenario.model == doc.scenario.model
    assert other.scenario.model.transitions[2].hazard.rate == pytest.approx(0.008)


def test_comments_survive_an_edit_and_save(doc: ScenarioDocument, tmp_path: Path) -> None:
    doc.set_value(("transitions", 0, "scale"), 25.0)
    doc.set_value(("strategies", 1, "hazard_ratios", "recovery"), 1.1)
    path = doc.save_as(tmp_path / "kept.toml")
    saved = path.read_text(encoding="utf-8")
    assert comment_lines(saved) == comment_lines(DEMO_TEXT)
    assert "scale = 25.0             # years" in saved


def test_adding_then_removing_a_table_restores_the_text(doc: ScenarioDocument) -> None:
    doc.append_table("transitions", {"name": "relapse", "from": "well", "to": "dead", "family": "exponential",
                                     "rate": 0.01})
    assert doc.scenario.model.transitions[-1].name == "relapse"
    # the comment introducing [background] still comes right before it
    text = doc.text
    assert text.index("# Death from other causes") > text.index('name = "relapse"')
    doc.remove_table("transitions", 3)
    assert doc.text == DEMO_TEXT


def test_renaming_a_state_renames_its_references(doc: ScenarioDocument) -> None:
    doc.rename_state(1, "sick")
    model = doc.scenario.model
    assert model.state_names == ("well", "sick", "dead")
    assert {t.source for t in model.transitions} == {"well", "sick"}
    assert model.valuation.utilities["sick"] == pytest.approx(0.58)
    assert model.strategy("new therapy").state_costs["sick"] == pytest.approx(1100.0)


def test_renaming_a_transition_renames_its_references(doc: ScenarioDocument) -> None:
    doc.rename_transition(0, "first onset")
    model = doc.scenario.model
    assert model.transitions[0].name == "first onset"
    assert model.strategy("new therapy").hazard_ratios["first onset"] == pytest.approx(0.7)
    assert model.valuation.transition_costs["first onset"] == pytest.approx(1500.0)


def test_autosave_and_recovery_offer(qtbot, tmp_path: Path, settings: QSettings) -> None:
    path = tmp_path / "work.toml"
    path.write_text(DEMO_TEXT, encoding="utf-8")
    old = time.time() - 60
    os.utime(path, (old, old))
    first = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=50)
    first.open(path)
    first.set_value(("horizon", "value"), 95)
    recovery = first.recovery_path()
    qtbot.waitUntil(recovery.exists, timeout=3000)  # the timer wrote it
    assert recovery.read_text(encoding="utf-8") == first.text
    edited = first.text
    # a new session (the first "crashed") finds the newer recovery file and restores it
    second = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    second.open(path)
    assert second.find_recovery() == recovery
    second.restore_recovery(recovery)
    assert second.text == edited and second.dirty
    second.undo_stack.undo()
    assert second.text == DEMO_TEXT
    second.undo_stack.redo()
    second.save()
    assert not recovery.exists() and path.read_text(encoding="utf-8") == edited


def test_recovery_older_than_the_file_is_not_offered(tmp_path: Path, settings: QSettings) -> None:
    path = tmp_path / "work.toml"
    path.write_text(DEMO_TEXT, encoding="utf-8")
    doc = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    rec = doc.recovery_path(path)
    rec.parent.mkdir(parents=True)
    rec.write_text(DEMO_TEXT.replace("value = 100", "value = 90"), encoding="utf-8")
    old = time.time() - 60
    os.utime(rec, (old, old))
    doc.open(path)
    assert doc.find_recovery() is None


def test_recent_files(doc: ScenarioDocument, tmp_path: Path) -> None:
    a = doc.save_as(tmp_path / "a.toml")
    b = doc.save_as(tmp_path / "b.toml")
    doc.open(a)
    assert doc.recent_files()[:2] == [a, b]
    doc.clear_recent()
    assert doc.recent_files() == []


def test_key_paths_as_text() -> None:
    assert format_key(("transitions", 0, "rate")) == "transitions[0].rate"
    assert format_key(("valuation", "utilities", "disease death")) == 'valuation.utilities."disease death"'
    assert format_key(("run", "cycle_lengths", 2)) == "run.cycle_lengths[2]"
