"""The evidence window's two-arm action (pytest-qt, headless): with "Also put the other arm's hazard
ratio into a strategy" the fit of the reference arm goes into the transition, the other arm's hazard
ratio into the chosen strategy and, with the covariance option, one compared-arm covariance group.
The scenario text and the model read back are checked against sim.evidence (the widget computes
nothing) and the hazard ratio against lifelines' Weibull AFT fit (for a Weibull, a PH model with
HR = exp(-a rho), a the AFT coefficient and rho the shape; Collett 2015, Modelling Survival Data in
Medical Research, 3rd ed., section 6.4, from memory). An accelerated-failure-time fit is written as
the other arm's own hazard, said so in the window. Data: tests/data/evidence (invented)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import tomlkit
from PySide6.QtCore import Qt
from PySide6.QtWidgets import QScrollArea

from gui.document import ScenarioDocument
from gui.evidence import EvidenceWindow
from sim.evidence import compared_arm_group, read_survival_data

DATA = Path(__file__).resolve().parents[1] / "data" / "evidence"
TRIAL = DATA / "two_arm_trial.csv"  # invented (tests/data/evidence/README.md)
SCENARIO = DATA / "scenario.toml"  # invented: one strategy, "usual care"


def read_and_fit(qtbot, w: EvidenceWindow, families: tuple[str, ...]) -> None:
    w.source.set_data_file(TRIAL)
    assert w.source.group_col.currentText() == "arm"
    w.source.data_unit.setCurrentText("months")
    qtbot.mouseClick(w.source.read_data_button, Qt.MouseButton.LeftButton)
    for name, box in w.family_checks.items():
        box.setChecked(name in families)
    with qtbot.waitSignal(w.fits_shown, timeout=30_000):
        qtbot.mouseClick(w.fit_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: not w.is_fitting())


def test_ratio_into_a_new_strategy_with_the_joint_group(qtbot, isolated_document, shown, screenshots: Path) -> None:
    doc: ScenarioDocument = isolated_document(SCENARIO)
    w = shown(EvidenceWindow(doc))
    read_and_fit(qtbot, w, ("exponential", "weibull", "loglogistic"))
    w.select_fit("weibull")
    w.transition.setCurrentText("disease death")
    assert w.ratio.isEnabled() and not w.ratio.isChecked()  # offered, never ticked silently
    qtbot.mouseClick(w.ratio, Qt.MouseButton.LeftButton)
    assert w.ratio.isChecked() and w.strategy.isEnabled()
    assert w.strategy.currentText() == "new strategy 'treated'"  # the scenario has no strategy for that arm
    assert w.ratio_note.text().startswith("Hazard ratio ")
    assert "of arm 'treated' against 'control'" in w.ratio_note.text()
    assert w.covariance.isEnabled() and w.covariance.isChecked()
    before = doc.text
    qtbot.mouseClick(w.apply_button, Qt.MouseButton.LeftButton)
    fit = w.selected_fit()
    hr = float(np.exp(fit.theta[-1]))
    assert ("the hazard ratio of arm 'treated' to strategy 'treated' (new) with the joint covariance"
            in w.apply_message.text())
    text = doc.text
    parsed = tomlkit.parse(text)
    t = parsed["transitions"][0]
    assert (t["family"], t["unit"], t["shape"], t["scale"]) == ("weibull", "months", fit.parameters["shape"],
                                                                fit.parameters["scale"])
    strategies = parsed["strategies"]
    assert [s["name"] for s in strategies] == ["usual care", "treated"]
    assert strategies[1]["hazard_ratios"]["disease death"] == hr
    assert text.index('name = "treated"') < text.index("[valuation]")  # the strategies stay together
    groups = parsed["uncertainty"]
    assert len(groups) == 1  # the old hazard's gamma went with it
    group = groups[0].unwrap()
    assert group == compared_arm_group(fit, transition=0, transition_name="disease death", strategy=1)
    assert group["parameters"] == ["transitions[0].shape", "transitions[0].scale",
                                   'strategies[1].hazard_ratios."disease death"']
    np.testing.assert_array_equal(np.array(group["covariance"]), fit.theta_covariance)
    # the model read back: the ratio exp(log HR) in the new strategy, the group with the fit's covariance
    assert doc.scenario is not None, doc.errors
    model = doc.scenario.model
    assert model.strategies[1].hazard_ratios["disease death"] == hr
    (spec,) = doc.scenario.uncertainty
    np.testing.assert_array_equal(np.array(spec.distribution.covariance), fit.theta_covariance)
    # against lifelines' Weibull AFT regression on the same data: HR = exp(-a rho)
    lifelines = pytest.importorskip("lifelines")
    data = read_survival_data(TRIAL, time="months", event="death", group="arm", unit="months")
    frame = {"t": data.time, "e": data.event.astype(int), "treated": (data.group == "treated").astype(float)}
    import pandas as pd

    aft = lifelines.WeibullAFTFitter().fit(pd.DataFrame(frame), "t", "e")
    a = aft.params_.loc[("lambda_", "treated")]
    rho = float(np.exp(aft.params_.loc[("rho_", "Intercept")]))
    assert hr == pytest.approx(float(np.exp(-a * rho)), rel=1e-4)
    w.plot_tabs.setCurrentIndex(1)
    qtbot.wait(100)  # let the plots and the notes lay out before the picture
    w.findChild(QScrollArea).ensureWidgetVisible(w.apply_message)  # the "Into the scenario" box in view
    qtbot.wait(50)
    assert w.grab().save(str(screenshots / "evidence_ratio_applied.png"))
    # one undoable step
    w.undo_action.trigger()
    assert doc.text == before


def test_acceleration_factor_goes_in_as_a_replacement(qtbot, isolated_document, shown, tmp_path,
                                                       screenshots: Path) -> None:
    """An existing strategy named after the other arm, with a hazard ratio, its waning and its
    distribution on that transition: a log-logistic fit replaces all three by the arm's own hazard."""
    text = SCENARIO.read_text().replace('[[strategies]]\nname = "usual care"\n', '''[[strategies]]
name = "usual care"

[[strategies]]
name = "treated"
hazard_ratios = { "disease death" = 0.8 }
waning = { "disease death" = { start = 2.0, end = 5.0 } }
''') + '''
[[uncertainty]]
parameter = 'strategies[1].hazard_ratios."disease death"'
distribution = "lognormal"
mean = 0.8
se = 0.1
'''
    path = tmp_path / "two_strategies.toml"
    path.write_text(text)
    doc: ScenarioDocument = isolated_document(path)
    w = shown(EvidenceWindow(doc))
    read_and_fit(qtbot, w, ("weibull", "loglogistic"))
    w.select_fit("loglogistic")
    w.transition.setCurrentText("disease death")
    w.ratio.setChecked(True)
    assert w.strategy.currentText() == "treated"  # the strategy named after the other arm
    note = w.ratio_note.text()
    assert "acceleration factor" in note and "not a hazard ratio" in note and "replacements" in note
    # the compared arm's hazard in the transition leaves nothing for a strategy
    w.arm.setCurrentIndex(1)
    assert not w.ratio.isEnabled() and w.ratio_note.text() == ""
    w.arm.setCurrentIndex(0)
    assert w.ratio.isEnabled()
    qtbot.wait(100)  # let the notes lay out before the picture
    w.findChild(QScrollArea).ensureWidgetVisible(w.ratio_note)
    qtbot.wait(50)
    assert w.grab().save(str(screenshots / "evidence_acceleration_factor.png"))
    assert w.apply_fit()
    assert "the own hazard (a replacement: the fit's effect is an acceleration factor) of arm 'treated'" in (
        w.apply_message.text())
    fit = w.selected_fit()
    parsed = tomlkit.parse(doc.text)
    treated = parsed["strategies"][1].unwrap()
    assert "hazard_ratios" not in treated and "waning" not in treated
    assert treated["replacements"] == {"disease death": {"family": "loglogistic", "unit": "months",
                                                         **fit.compared_parameters()}}
    groups = [g.unwrap() for g in parsed["uncertainty"]]
    assert groups == [compared_arm_group(fit, transition=0, transition_name="disease death", strategy=1)]
    assert doc.scenario is not None, doc.errors
    model = doc.scenario.model
    t = np.array([0.5, 2.0, 10.0])  # years: S_1(t) = S_0(t / AF)
    np.testing.assert_allclose(model.strategies[1].replacements["disease death"].cumhazard(t),
                               model.transitions[0].hazard.cumhazard(t / fit.effect.estimate), rtol=1e-10)


def test_a_scenario_without_strategies_gets_a_comparator_first() -> None:
    """No [[strategies]] means one implicit strategy: the other arm's strategy comes after a comparator
    named after the reference arm, so the base case stays the reference arm's (scenario_edit, no Qt)."""
    from sim.evidence import fit_family
    from sim.io.scenario import parse_scenario

    from gui.evidence.scenario_edit import FitChoice, fit_edit

    text = SCENARIO.read_text().replace('[[strategies]]\nname = "usual care"\n', "")
    doc = tomlkit.parse(text)
    assert "strategies" not in doc
    data = read_survival_data(TRIAL, time="months", event="death", group="arm", unit="months")
    fit = fit_family(data, "weibull")
    change, label = fit_edit(fit, FitChoice(0, covariance=True, strategy=1, new_strategy="treated"), "disease death")
    change(doc)
    scenario = parse_scenario(tomlkit.dumps(doc), file="edited.toml")
    assert [s.name for s in scenario.model.strategies] == ["control", "treated"]
    assert dict(scenario.model.strategies[0].hazard_ratios) == {}
    assert scenario.model.strategies[1].hazard_ratios["disease death"] == float(np.exp(fit.theta[-1]))
    assert scenario.uncertainty[0].keys[-1] == 'strategies[1].hazard_ratios."disease death"'
