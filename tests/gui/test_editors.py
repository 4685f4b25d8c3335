"""Editor panels, the hazard preview and the diagram, both ways: work the widget and see the document
and model change; change the document and see the widgets. Numbers shown are compared with sim's."""

from __future__ import annotations

import gc
import math
from pathlib import Path

import numpy as np
import pytest
from PySide6.QtCore import QEvent, QSettings
from PySide6.QtWidgets import QComboBox, QLineEdit, QWidget

from gui.diagram import ModelDiagram, diagram_edges, layout_states
from gui.document import ScenarioDocument
from gui.editors import (BackgroundEditor, HorizonEditor, PopulationEditor, SourceEditor, StatesEditor,
                         StrategiesEditor, TransitionsEditor, ValuationEditor)
from gui.editors.fields import is_marked
from gui.preview import HazardPreview, preview_curves
from sim.io.lifetable import fit_gompertz, read_life_table
from sim.model.multistate import BACKGROUND
from sim.hazards.units import rate_from_risk, risk_from_rate




@pytest.fixture
def doc(qtbot, tmp_path: Path) -> ScenarioDocument:
    settings = QSettings(str(tmp_path / "settings.ini"), QSettings.Format.IniFormat)
    d = ScenarioDocument(recovery_dir=tmp_path / "recovery", settings=settings, autosave_ms=0)
    d.new_from_demo("lanthic")
    return d


def make(qtbot, cls, doc):
    widget = cls(doc)
    qtbot.addWidget(widget)
    return widget


def field(editor, key: tuple) -> QWidget:
    for fs in editor.field_sets():
        w = fs.widget_at(key)
        if w is not None:
            return w
    raise AssertionError(f"no widget for {key}")


def type_into(w: QLineEdit, text: str) -> None:
    w.setText(text)
    w.editingFinished.emit()


def choose(combo: QComboBox, value: str) -> None:
    idx = combo.findData(value)
    assert idx >= 0, value
    combo.setCurrentIndex(idx)
    combo.activated.emit(idx)


# ----------------------------------------------------------------------------- states
def test_states_editor_both_ways(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, StatesEditor, doc)
    assert field(ed, ("states", 1, "name")).text() == "lanthic"
    assert field(ed, ("states", 2, "absorbing")).isChecked()
    assert field(ed, ("name",)).text() == "Lanthic syndrome (invented demo)"
    type_into(field(ed, ("states", 1, "name")), "sick")
    assert doc.scenario.model.state_names == ("well", "sick", "dead")
    assert doc.scenario.model.transitions[1].source == "sick"  # references renamed too
    doc.undo_stack.undo()
    assert field(ed, ("states", 1, "name")).text() == "lanthic"  # document -> widget


def test_adding_a_state_marks_it_with_the_loaders_message(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, StatesEditor, doc)
    ed.add_button.click()
    assert len(doc.get(("states",))) == 4 and doc.scenario is None
    (err,) = doc.errors
    assert err.key[:2] == ("states", 3), err.message
    name = field(ed, ("states", 3, "name"))
    assert name.text() == "state 4"
    # a state just added has no exits yet: shown as unfinished (a hint), in the user's words
    assert err.incomplete and err.text == "Not finished yet: state 'state 4' cannot be reached from the initial state 'well'"
    assert is_marked(name) and name.toolTip() == err.text
    assert ed.banner.isVisibleTo(ed) and err.text in ed.banner.text()
    ed.remove_buttons[3].click()
    assert doc.scenario is not None and not ed.banner.isVisibleTo(ed)


# ----------------------------------------------------------------------------- transitions
def test_transitions_editor_shows_and_writes_parameters(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, TransitionsEditor, doc)
    assert ed.list.count() == 3
    assert field(ed, ("transitions", 0, "shape")).text() == "1.3"
    ed.select(1)
    rate = field(ed, ("transitions", 1, "rate"))
    assert rate.text() == "0.15"
    type_into(rate, "0.3")
    assert doc.get(("transitions", 1, "rate")) == 0.3
    assert doc.scenario.model.transitions[1].hazard.rate == pytest.approx(0.3)
    choose(field(ed, ("transitions", 1, "unit")), "months")  # 0.3 per month
    assert doc.scenario.model.transitions[1].hazard.rate == pytest.approx(3.6)
    assert "3.6 per year" in ed.form.conversion.text()
    choose(field(ed, ("transitions", 1, "clock")), "entry")
    assert doc.scenario.model.transitions[1].clock.value == "entry"


def test_changing_the_family_rebuilds_the_parameter_fields(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, TransitionsEditor, doc)
    ed.select(1)
    choose(field(ed, ("transitions", 1, "family")), "gompertz")
    hz = doc.scenario.model.transitions[1].hazard
    assert hz.family == "gompertz"
    assert doc.get(("transitions", 1, "rate")) is not None and doc.has(("transitions", 1, "shape"))
    type_into(field(ed, ("transitions", 1, "shape")), "-0.2")
    assert doc.scenario.model.transitions[1].hazard.shape == pytest.approx(-0.2)
    doc.undo_stack.undo()
    doc.undo_stack.undo()
    assert field(ed, ("transitions", 1, "rate")).text() == "0.15"
    assert doc.text == doc.scenario.text and doc.scenario.model.transitions[1].hazard.family == "exponential"


def test_constant_hazard_modes_show_sims_conversion(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, TransitionsEditor, doc)
    ed.select(2)  # disease death: 8 events per 100 person-years
    assert ed.form.mode == "events"
    assert "0.08 per year" in ed.form.conversion.text()
    ed.form.mode_combo.setCurrentIndex(2)
    ed.form.mode_combo.activated.emit(2)  # risk over a period
    assert ed.form.mode == "risk"
    risk, period = doc.get(("transitions", 2, "risk")), doc.get(("transitions", 2, "period"))
    assert doc.get(("transitions", 2, "events")) is None
    assert risk == pytest.approx(risk_from_rate(0.08, 1.0), rel=1e-5) and period == 1
    type_into(field(ed, ("transitions", 2, "risk")), "0.2")
    type_into(field(ed, ("transitions", 2, "period")), "5")
    conv = rate_from_risk(0.2, 5, "years")
    assert conv.note in ed.form.conversion.text()
    assert doc.scenario.model.transitions[2].hazard.rate == pytest.approx(conv.rate)
    assert any(conv.note in n for n in doc.scenario.conversions)


def test_invalid_parameter_is_marked_where_it_was_typed(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, TransitionsEditor, doc)
    ed.select(1)
    rate = field(ed, ("transitions", 1, "rate"))
    type_into(rate, "-1")
    assert rate.text() == "-1"  # kept, not rejected
    (err,) = doc.errors
    assert is_marked(rate) and rate.toolTip() == err.text
    assert err.text == "Transition 'recovery': rate must not be negative (got \u22121)" and not err.incomplete
    assert "transitions[1].rate: must be >= 0, got -1" in err.message  # file, line and key for the text view
    type_into(rate, "0.1")
    assert not is_marked(rate) and doc.errors == []


def test_add_and_remove_transition(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, TransitionsEditor, doc)
    ed.add_button.click()
    assert ed.current_index == 3 and ed.list.count() == 3 + 1
    new = doc.scenario.model.transitions[3]
    assert (new.source, new.target, new.hazard.family) == ("well", "dead", "exponential")
    type_into(field(ed, ("transitions", 3, "name")), "accident")
    assert doc.scenario.model.transitions[3].name == "accident"
    ed.remove_button.click()
    assert [t.name for t in doc.scenario.model.transitions] == ["onset", "recovery", "disease death"]


# ----------------------------------------------------------------------------- background
def test_background_hazards_per_sex(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, BackgroundEditor, doc)
    assert ed.mode_combo.currentData() == "hazard"
    assert field(ed, ("background", "female", "rate")).text() == "3.0e-5"
    type_into(field(ed, ("background", "male", "shape")), "0.09")
    assert doc.scenario.model.background.hazards["male"].shape == pytest.approx(0.09)
    assert "3e-05" in ed.forms["female"].resolved.text()


def write_life_table(path: Path) -> Path:
    """Five-year q table from a Gompertz law with b = 3e-5 and 5e-5, g = 0.085 (invented)."""
    ages = np.arange(0, 105, 5.0)
    rows = ["age,q_female,q_male"]
    for a in ages:
        qs = []
        for b in (3e-5, 5e-5):
            q = 1.0 if a == ages[-1] else -math.expm1(-(b / 0.085) * (math.exp(0.085 * (a + 5)) - math.exp(0.085 * a)))
            qs.append(f"{q:.10g}")
        rows.append(f"{a:g},{qs[0]},{qs[1]}")
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def test_life_table_import_with_gompertz_fit(qtbot, doc: ScenarioDocument, tmp_path: Path) -> None:
    table_path = write_life_table(tmp_path / "table.csv")
    ed = make(qtbot, BackgroundEditor, doc)
    ed.mode_combo.setCurrentIndex(2)
    ed.mode_combo.activated.emit(2)
    assert ed.mode() == "life_table" and doc.scenario is None  # no file yet: marked, not rejected
    type_into(field(ed, ("background", "life_table", "file")), str(table_path))
    type_into(field(ed, ("background", "life_table", "columns", "female")), "q_female")
    type_into(field(ed, ("background", "life_table", "columns", "male")), "q_male")
    choose(field(ed, ("background", "life_table", "kind")), "q")
    assert doc.scenario is not None, doc.errors
    table = read_life_table(table_path, kind="q", value_columns={"female": "q_female", "male": "q_male"})
    assert table.conversion_note("female") in ed.lt_text.text()
    choose(field(ed, ("background", "life_table", "fit")), "gompertz")
    type_into(field(ed, ("background", "life_table", "fit_ages")), "40, 90")
    assert doc.get(("background", "life_table", "fit_ages")) == [40, 90]
    fit = fit_gompertz(table, sex="male", age_range=(40, 90))
    assert f"b = {fit.b:.4g}" in ed.lt_text.text() and f"doubling time {fit.doubling_time:.3g} years" in ed.lt_text.text()
    assert fit.g == pytest.approx(0.085, rel=1e-3)
    steps, line = ed.lt_curves["male"]
    x, y = steps.getOriginalDataset()
    np.testing.assert_allclose(y, table.to_hazard("male").hazard(x))
    x, y = line.getOriginalDataset()
    np.testing.assert_allclose(y, fit.to_hazard().hazard(x))
    assert doc.scenario.model.background.hazards["male"].rate == pytest.approx(fit.b)


# ----------------------------------------------------------------------------- population
def test_population_editor_both_ways(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, PopulationEditor, doc)
    assert field(ed, ("population", "entry_age", "mean")).text() == "55.0"
    assert field(ed, ("population", "sex_mix", "female")).text() == "0.5"
    type_into(field(ed, ("population", "entry_age", "mean")), "60")
    assert doc.scenario.model.population.entry_age.mu == 60
    choose(field(ed, ("population", "entry_age", "distribution")), "uniform")
    ea = doc.scenario.model.population.entry_age
    assert (ea.low, ea.high) == (40.0, 75.0)
    assert field(ed, ("population", "entry_age", "low")).text() == "40.0"
    type_into(field(ed, ("population", "sex_mix", "female")), "0.7")
    assert doc.scenario is None and is_marked(ed.mix_box)
    assert ed.mix_box.toolTip() == doc.errors[0].text
    type_into(field(ed, ("population", "sex_mix", "male")), "0.3")
    assert doc.scenario.model.population.sex_mix == {"female": 0.7, "male": 0.3}


# ----------------------------------------------------------------------------- strategies
def test_strategies_editor_both_ways(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, StrategiesEditor, doc)
    ed.select(1)
    assert field(ed, ("strategies", 1, "hazard_ratios", "onset")).text() == "0.7"
    assert field(ed, ("strategies", 1, "state_costs", "well")).text() == "1100.0"
    type_into(field(ed, ("strategies", 1, "hazard_ratios", "recovery")), "1.2")
    type_into(field(ed, ("strategies", 1, "hazard_ratios", "onset")), "")
    st = doc.scenario.model.strategy("new therapy")
    assert st.hazard_ratios == {"disease death": 0.8, "recovery": 1.2}
    ed.add_button.click()
    assert doc.scenario.model.strategy_names == ("usual care", "new therapy", "strategy 3")
    type_into(field(ed, ("strategies", 2, "transition_costs", BACKGROUND)), "500")
    assert doc.scenario.model.strategy("strategy 3").transition_costs == {BACKGROUND: 500}


def test_strategy_replacement_hazards_are_edited_in_the_form(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, StrategiesEditor, doc)
    ed.select(1)
    base_onset = doc.scenario.model.transitions[0].hazard
    ed.replace_buttons["onset"].click()
    # one undoable step: the hazard ratio for onset goes, a copy of the model's hazard comes
    st = doc.scenario.model.strategy("new therapy")
    assert "onset" not in st.hazard_ratios and st.replacements["onset"] == base_onset
    form = ed.replacement_forms["onset"]
    assert "shape = 1.3" in form.resolved.text()  # the parameters the model uses, shown under the form
    type_into(field(ed, ("strategies", 1, "replacements", "onset", "shape")), "1.1")
    assert doc.scenario.model.strategy("new therapy").replacements["onset"].shape == 1.1
    # the family can change like a transition's; the strategy's resolved hazard follows
    choose(field(ed, ("strategies", 1, "replacements", "onset", "family")), "exponential")
    assert doc.scenario.model.strategy("new therapy").replacements["onset"].family == "exponential"
    assert "onset" in ed.replacement_forms and ed.replacement_forms["onset"].family == "exponential"
    # the simulation uses it: the resolved exits of the strategy carry the replacement
    (onset,) = [e for per in doc.scenario.model.resolve("new therapy") for e in per if e.name == "onset"]
    assert onset.hazards[0] == doc.scenario.model.strategy("new therapy").replacements["onset"]
    ed.restore_buttons["onset"].click()
    assert doc.scenario.model.strategy("new therapy").replacements == {}
    assert "onset" in ed.replace_buttons
    for _ in range(4):  # restore, family, shape, replace
        doc.undo_stack.undo()
    assert doc.scenario.model.strategy("new therapy").hazard_ratios["onset"] == 0.7
    assert field(ed, ("strategies", 1, "hazard_ratios", "onset")).text() == "0.7"


# ----------------------------------------------------------------------------- valuation and horizon
def test_valuation_editor_both_ways(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, ValuationEditor, doc)
    assert field(ed, ("valuation", "utilities", "well")).text() == "0.86"
    type_into(field(ed, ("valuation", "discount_costs")), "0.03")
    assert doc.scenario.model.valuation.discount_costs == 0.03
    dead = field(ed, ("valuation", "utilities", "dead"))
    type_into(dead, "0.5")
    assert is_marked(dead) and dead.toolTip() == doc.errors[0].text
    assert "must be 0 for an absorbing state" in dead.toolTip()
    doc.undo_stack.undo()
    assert dead.text() == "" and not is_marked(dead)


def test_horizon_and_run_settings(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, HorizonEditor, doc)
    assert field(ed, ("horizon", "value")).text() == "100"
    assert field(ed, ("run", "cycle_lengths")).text().startswith("1 week, 1 month")
    type_into(field(ed, ("horizon", "value")), "90")
    assert doc.scenario.model.horizon.value == 90
    type_into(field(ed, ("run", "cycle_lengths")), "1 month, 1")
    assert doc.scenario.run.cycle_lengths == pytest.approx((1 / 12, 1.0))
    choose(field(ed, ("horizon", "scale")), "time")
    assert doc.scenario.model.horizon.scale == "time"


def test_source_editor_both_ways(qtbot, doc: ScenarioDocument) -> None:
    ed = make(qtbot, SourceEditor, doc)
    assert ed.editor.toPlainText() == doc.text
    ed.editor.setPlainText(doc.text.replace("value = 100", "value = 85"))
    ed.commit()
    assert doc.scenario.model.horizon.value == 85
    doc.set_value(("horizon", "value"), 80)
    assert "value = 80" in ed.editor.toPlainText()
    ed.editor.setPlainText(doc.text + "\n[[[")
    ed.commit()
    assert doc.data is None and ed.editor.extraSelections() and ed.banner.isVisibleTo(ed)


# ----------------------------------------------------------------------------- preview
def test_preview_probability_equals_sims_conditional_probability(qtbot, doc: ScenarioDocument) -> None:
    pv = make(qtbot, HazardPreview, doc)
    pv.select_exit(BACKGROUND)
    pv.sex_combo.setCurrentText("male")
    pv.cycle_combo.setCurrentText("1 month")
    pv.reference.setValue(70.0)
    hz = doc.scenario.model.background.hazards["male"]
    h = 1 / 12
    expected = 1 - hz.sf(70 + h) / hz.sf(70)
    assert pv.point.probability == pytest.approx(expected, rel=1e-9)
    assert f"{pv.point.probability:.6g}" in pv.info.text()
    c = pv.curves
    assert c.t[0] == 40.0 and c.t[-1] == 100.0  # entry ages to the horizon age
    np.testing.assert_allclose(c.p_cycle, 1 - hz.sf(c.t + h) / hz.sf(c.t), rtol=1e-9)
    np.testing.assert_allclose(pv.p_curve.getData()[1], c.p_cycle)
    np.testing.assert_allclose(pv.hazard_curve.getData()[1], hz.hazard(c.t))


def test_preview_small_rate_error_and_strategy(qtbot, doc: ScenarioDocument) -> None:
    pv = make(qtbot, HazardPreview, doc)
    pv.select_exit("recovery")
    pv.cycle_combo.setCurrentText("1 year")
    p = pv.point
    assert p.small == pytest.approx(0.15) and p.probability == pytest.approx(risk_from_rate(0.15, 1.0))
    assert p.error == pytest.approx(0.15 - risk_from_rate(0.15, 1.0))
    pv.select_exit("onset")
    pv.strategy_combo.setCurrentText("new therapy")
    base = doc.scenario.model.transitions[0].hazard
    np.testing.assert_allclose(pv.curves.hazard, 0.7 * base.hazard(pv.curves.t), rtol=1e-12)


def test_preview_shows_the_never_happens_mass(qtbot, doc: ScenarioDocument) -> None:
    pv = make(qtbot, HazardPreview, doc)
    pv.select_exit("onset")
    doc.set_values([(("transitions", 0, k), None) for k in ("shape", "scale")]
                   + [(("transitions", 0, "family"), "gompertz"), (("transitions", 0, "rate"), 0.05),
                      (("transitions", 0, "shape"), -0.1)], "improper onset")
    hz = doc.scenario.model.transitions[0].hazard
    assert pv.curves.never == pytest.approx(hz.never_probability, rel=1e-12)  # entry clock: from t = 0
    assert pv.never_line.isVisible() and pv.never_line.value() == pytest.approx(hz.never_probability)
    assert "may never happen" in pv.info.text()
    ref = preview_curves(hz, 0.0, 10.0, 1.0)
    assert ref.survival[-1] == pytest.approx(float(hz.sf(10.0)))


# ----------------------------------------------------------------------------- diagram
def test_diagram_layout_and_updates(qtbot, doc: ScenarioDocument) -> None:
    states, edges, initial = diagram_edges(doc.data.unwrap())
    pos = layout_states(states, edges, initial)
    assert pos == {"well": (0, 0), "lanthic": (1, 0), "dead": (2, 0)}
    view = make(qtbot, ModelDiagram, doc)
    assert set(view.arrows) == {"onset", "recovery", "disease death", BACKGROUND}
    assert len(view.arrows[BACKGROUND]) == 2  # from each living state
    from PySide6.QtCore import Qt
    assert all(a.pen().style() == Qt.PenStyle.DashLine for a in view.arrows[BACKGROUND])
    assert view.arrows["onset"][0].pen().style() == Qt.PenStyle.SolidLine
    doc.append_table("transitions", {"name": "relapse", "from": "well", "to": "dead", "family": "exponential",
                                     "rate": 0.01})
    assert "relapse" in view.arrows and view.labels["relapse"][0].text() == "relapse"


def test_diagram_click_selects_a_transition(qtbot, doc: ScenarioDocument) -> None:
    from PySide6.QtCore import Qt
    view = make(qtbot, ModelDiagram, doc)
    view.resize(800, 400)
    view.show()
    qtbot.waitExposed(view)
    label = view.labels["recovery"][0]
    point = view.mapFromScene(label.mapToScene(label.boundingRect().center()))
    with qtbot.waitSignal(view.transition_clicked) as blocker:
        qtbot.mouseClick(view.viewport(), Qt.MouseButton.LeftButton, pos=point)
    assert blocker.args == ["recovery"]


@pytest.mark.parametrize("edit", [
    ("population", "entry_age"), ("background", "female"), ("states",), ("transitions", 0, "family"),
    ("strategies", 1, "hazard_ratios"), ("valuation", "utilities"), ("run", "cycle_lengths"), ("horizon",),
])
def test_panels_survive_any_typed_value(qtbot, doc: ScenarioDocument, edit: tuple) -> None:
    """Whatever shape a value has in the file (a number where a table belongs, a list of numbers),
    every panel still shows and the loader's message is listed."""
    views = [make(qtbot, cls, doc) for cls in (StatesEditor, TransitionsEditor, BackgroundEditor, PopulationEditor,
                                               StrategiesEditor, ValuationEditor, HorizonEditor, SourceEditor)]
    views += [make(qtbot, HazardPreview, doc), make(qtbot, ModelDiagram, doc)]
    for value in (3, [1, 2], "text", {"x": 1}):
        doc.set_value(edit, value)
        if doc.scenario is None:  # [1, 2] is a valid list of cycle lengths
            assert doc.errors
            for err in doc.errors:
                assert any(err.message in v.banner.text() for v in views[:8])
        doc.undo_stack.undo()
        assert doc.scenario is not None
