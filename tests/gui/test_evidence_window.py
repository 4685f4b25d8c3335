"""The "Fit from data" window driven as a user would (pytest-qt, headless): read a small invented
trial, fit, read the AIC/BIC table, choose a fit, put it into a transition of the open scenario,
undo. The window shows what sim.evidence computes; the numbers are checked against sim.evidence's
own table (the widget must not compute) and the covariance group against lifelines."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import tomlkit
from PySide6.QtCore import QPoint, Qt

from gui.document import ScenarioDocument
from gui.evidence import EvidenceWindow
from gui.results.table_model import RAW_ROLE
from sim.evidence import below_background, fit_families, fit_table, read_survival_data
from sim.io import load_scenario

DATA = Path(__file__).resolve().parents[1] / "data" / "evidence"
TRIAL = DATA / "two_arm_trial.csv"  # invented (tests/data/evidence/README.md)
SCENARIO = DATA / "scenario.toml"  # invented
FAMILIES = ("exponential", "weibull", "gompertz", "loglogistic", "lognormal", "gamma", "gengamma")


@pytest.fixture
def doc(isolated_document) -> ScenarioDocument:
    return isolated_document(SCENARIO)  # checks the scenario is valid


@pytest.fixture
def window(doc: ScenarioDocument, shown) -> EvidenceWindow:
    return shown(EvidenceWindow(doc))


def read_and_fit(qtbot, w: EvidenceWindow, group: bool = True, families=FAMILIES) -> None:
    w.source.data_path.setText(str(TRIAL))
    w.source.data_path.editingFinished.emit()  # as leaving the field does: the columns are offered
    assert w.source.time_col.currentText() == "months"
    assert w.source.event_col.currentText() == "death"
    assert w.source.group_col.currentText() == "arm"
    if not group:
        w.source.group_col.setCurrentText("(none)")
    w.source.data_unit.setCurrentText("months")
    qtbot.mouseClick(w.source.read_data_button, Qt.MouseButton.LeftButton)
    assert w.fit_button.isEnabled()
    for name, box in w.family_checks.items():
        box.setChecked(name in families)
    with qtbot.waitSignal(w.fits_shown, timeout=30_000):
        qtbot.mouseClick(w.fit_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: not w.is_fitting())


def drawn(items) -> list:
    """The curves that hold data."""
    return [i for i in items if i.getData()[0] is not None and len(i.getData()[0])]


def shown_table(w: EvidenceWindow) -> dict[str, dict[str, object]]:
    model = w.proxy
    headers = [model.headerData(c, Qt.Orientation.Horizontal) for c in range(model.columnCount())]
    rows = {}
    for r in range(model.rowCount()):
        row = {h: model.index(r, c).data(RAW_ROLE) for c, h in enumerate(headers)}
        rows[row["family"]] = row
    return rows


def test_the_table_is_sim_evidence_fit_table(qtbot, window: EvidenceWindow, screenshots: Path) -> None:
    read_and_fit(qtbot, window)
    data = read_survival_data(TRIAL, time="months", event="death", group="arm", unit="months")
    expected = fit_table(fit_families(data, FAMILIES))
    shown = shown_table(window)
    assert set(shown) == set(expected["family"])
    for _, row in expected.iterrows():
        got = shown[row["family"]]
        for col in ("AIC", "BIC", "loglik", "dAIC", "dBIC"):
            assert got[col] == pytest.approx(row[col], rel=1e-12, abs=1e-12), (row["family"], col)
        for col in ("k", "converged", "parameters", "effect"):
            assert got[col] == row[col]
    # sorted by AIC as sim gives it; the best converged fit is selected and drawn bold
    assert window.proxy.index(0, 0).data(RAW_ROLE) == expected["family"][0]
    assert window.selected_fit().label == expected["family"][0]
    # a click on the BIC header sorts by BIC
    bic = [window.proxy.headerData(c, Qt.Orientation.Horizontal) for c in range(window.proxy.columnCount())].index("BIC")
    header = window.table.horizontalHeader()
    qtbot.mouseClick(header.viewport(), Qt.MouseButton.LeftButton,
                     pos=QPoint(header.sectionViewportPosition(bic) + 5, 5))
    first = window.proxy.index(0, bic).data(RAW_ROLE)
    assert first == pytest.approx(expected["BIC"].min(), rel=1e-12)
    # two arms: each converged fit drawn for each arm on the survival, hazard and diagnostic plots
    for plot in (window.survival_plot, window.hazard_plot, window.diagnostic_plot):
        assert len(drawn(plot.fits.items)) == 2 * len(FAMILIES)
    assert window.survival_plot.plot.titleLabel.text.startswith("fits: solid control, dashed treated")
    qtbot.wait(100)  # let the plots lay out (legend under the axes) before the picture
    assert window.grab().save(str(screenshots / "evidence_survival.png"))
    window.plot_tabs.setCurrentIndex(2)
    qtbot.wait(100)  # let the plots lay out (legend under the axes) before the picture
    assert window.grab().save(str(screenshots / "evidence_log_cumhazard.png"))


def test_apply_fit_to_transition_then_undo(qtbot, window: EvidenceWindow, doc: ScenarioDocument,
                                           screenshots: Path) -> None:
    read_and_fit(qtbot, window, group=False, families=("exponential", "weibull", "loglogistic"))
    before = doc.text
    window.select_fit("weibull")
    window.transition.setCurrentText("disease death")
    assert window.covariance.isEnabled() and window.covariance.isChecked()
    qtbot.mouseClick(window.apply_button, Qt.MouseButton.LeftButton)
    after = doc.text
    assert after != before
    fit = window.selected_fit()
    t = tomlkit.parse(after)["transitions"][0]
    assert (t["family"], t["unit"]) == ("weibull", "months")
    assert (t["shape"], t["scale"]) == (fit.parameters["shape"], fit.parameters["scale"])
    assert "rate" not in t and t["clock"] == "entry" and t["name"] == "disease death"
    assert 'name = "disease death"   # the fit goes here' in after  # comments kept
    assert "# Background mortality: a Gompertz law with invented levels." in after
    assert after.index("scale =") < after.index("# Background mortality")  # the section's comment stays its own
    assert doc.scenario is not None, doc.errors  # the scenario reader accepts the edit, group included
    # the old hazard's distribution is gone, the fit's group is there
    groups = tomlkit.parse(after)["uncertainty"]
    assert len(groups) == 1
    group = groups[0]
    assert group["parameters"] == ["transitions[0].shape", "transitions[0].scale"]
    assert group["distribution"] == "multivariate_normal" and group["transform"] == ["log", "log"]
    # against lifelines' Weibull fit on the same data (S = exp(-(t/lambda)^rho): rho = shape,
    # lambda = scale): log-scale covariance = V / (v v') at the maximum (the observed information
    # transforms with the Jacobian there)
    lifelines = pytest.importorskip("lifelines")
    data = read_survival_data(TRIAL, time="months", event="death", unit="months")
    wf = lifelines.WeibullFitter().fit(data.time, data.event)
    v = np.array([wf.rho_, wf.lambda_])
    V = wf.variance_matrix_.loc[["rho_", "lambda_"], ["rho_", "lambda_"]].to_numpy()
    np.testing.assert_allclose(group["mean"], np.log(v), rtol=1e-5)
    np.testing.assert_allclose(np.array(group["covariance"]), V / np.outer(v, v), rtol=2e-3)
    qtbot.wait(100)  # let the plots lay out (legend under the axes) before the picture
    assert window.grab().save(str(screenshots / "evidence_applied.png"))
    # undo from the window's own Edit menu restores the text exactly; redo brings the fit back
    window.undo_action.trigger()
    assert doc.text == before
    window.redo_action.trigger()
    assert doc.text == after


def test_below_background_shown_and_offered(qtbot, window: EvidenceWindow, doc: ScenarioDocument,
                                             screenshots: Path) -> None:
    read_and_fit(qtbot, window, group=False, families=("weibull", "loglogistic"))
    window.select_fit("loglogistic")
    assert window.entry_age.value() == 60.0  # the scenario's entry age
    assert window.horizon.value() == pytest.approx(40 * 12)  # the model's horizon in the data's unit
    scenario = load_scenario(SCENARIO)
    fit = window.selected_fit()
    found = below_background(fit.hazard(), scenario.model.background, entry_age=60.0, horizon=40.0, unit="months")
    intervals = [iv for f in found for iv in f.intervals]
    assert intervals  # this invented fit does fall below the background (late in the horizon)
    shaded = [r.getRegion() for r in window.hazard_plot.regions]
    np.testing.assert_allclose(shaded, [(a * 12, b * 12) for a, b in intervals], rtol=1e-12)
    assert found[0].describe() in window.floor_note.text()
    assert window.floor.isEnabled() and not window.floor.isChecked()  # offered, never ticked silently
    window.plot_tabs.setCurrentIndex(1)
    window.view.setCurrentText("whole horizon")
    qtbot.wait(100)  # let the plots lay out (legend under the axes) before the picture
    assert window.grab().save(str(screenshots / "evidence_hazard_background.png"))
    window.transition.setCurrentText("disease death")
    qtbot.mouseClick(window.floor, Qt.MouseButton.LeftButton)
    assert window.floor.isChecked()
    window.covariance.setChecked(False)
    before = doc.text
    assert window.apply_fit()
    table = tomlkit.parse(doc.text)["transitions"][0]
    assert table["at_least_background"] is True and table["family"] == "loglogistic"
    assert "uncertainty" not in tomlkit.parse(doc.text)  # the old hazard's distribution went with it
    assert doc.scenario is not None, doc.errors
    assert doc.scenario.model.transitions[0].at_least_background
    doc.undo_stack.undo()
    assert doc.text == before
    assert math.isfinite(fit.aic)


def test_piecewise_and_spline_fits(qtbot, window: EvidenceWindow, doc: ScenarioDocument) -> None:
    window.breaks.setText("0, 12 ; x")
    window.family_checks["piecewise"].setChecked(True)
    window.source.set_data_file(TRIAL)
    window.source.group_col.setCurrentText("(none)")
    window.source.data_unit.setCurrentText("months")
    window.source.read_data()
    qtbot.mouseClick(window.fit_button, Qt.MouseButton.LeftButton)
    assert not window.is_fitting()
    assert window.apply_message.text() == "breaks: '0, 12 ; x' must be numbers separated by commas"
    window.breaks.setText("0, 12")
    window.knots.setText("1, 2")
    for name, box in window.family_checks.items():
        box.setChecked(name in ("piecewise", "spline"))
    with qtbot.waitSignal(window.fits_shown, timeout=30_000):
        qtbot.mouseClick(window.fit_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: not window.is_fitting())
    assert set(shown_table(window)) == {"piecewise", "spline_1", "spline_2"}
    window.select_fit("spline_1")  # not a scenario family: compared, not applied
    assert not window.apply_button.isEnabled()
    window.select_fit("piecewise")
    assert window.apply_button.isEnabled()
    assert window.apply_fit()
    t = tomlkit.parse(doc.text)["transitions"][0]
    fit = window.selected_fit()
    assert (t["family"], list(t["breaks"]), list(t["rates"])) == ("piecewise", [0.0, 12.0],
                                                                  list(fit.parameters["rates"]))
    group = tomlkit.parse(doc.text)["uncertainty"][0]
    assert group["parameters"] == ["transitions[0].rates[0]", "transitions[0].rates[1]"]
    # piecewise rates: closed-form maximum likelihood, events / time at risk in each band (common
    # practice, no source); the log-rate variance is 1 / events (delta method, from memory)
    data = read_survival_data(TRIAL, time="months", event="death", unit="months")
    lo, hi = np.array([0.0, 12.0]), np.array([12.0, np.inf])
    exposure = np.clip(np.minimum(data.time[:, None], hi) - lo, 0.0, None).sum(0)
    band = (data.time[data.event] >= 12.0).astype(int)
    events = np.bincount(band, minlength=2)
    np.testing.assert_allclose(np.exp(group["mean"]), events / exposure, rtol=1e-5)
    np.testing.assert_allclose(np.diag(np.array(group["covariance"])), 1.0 / events, rtol=1e-3)
    assert doc.scenario is not None, doc.errors


def test_waning_times_follow_the_fits_unit(qtbot, window: EvidenceWindow, doc: ScenarioDocument) -> None:
    text = doc.text.replace('rate = 0.05              # per year, invented',
                            'rate = 0.05              # per year, invented\nhazard_ratio = 0.8\n'
                            'waning = { start = 1.5, end = 3, scale = "log" }')
    doc.set_text(text)
    assert doc.scenario is not None, doc.errors
    read_and_fit(qtbot, window, group=False, families=("weibull",))
    window.covariance.setChecked(False)
    assert window.apply_fit()
    t = tomlkit.parse(doc.text)["transitions"][0]
    assert t["unit"] == "months" and t["hazard_ratio"] == 0.8
    # 1.5 and 3 years in months (12 months a year, docs/scenario-format.md)
    assert (t["waning"]["start"], t["waning"]["end"], t["waning"]["scale"]) == (18.0, 36.0, "log")
    assert window.apply_message.text().endswith("waning times rewritten from years to months (Edit > Undo takes it back).")
    assert doc.scenario is not None, doc.errors
    # another scenario opened: its entry age and horizon are taken
    doc.new_from_demo("lanthic")
    assert window.entry_age.value() == pytest.approx(doc.scenario.model.population.entry_age.mean, abs=0.05)  # 1 decimal
    h = doc.scenario.model.horizon
    years = h.value - window.entry_age.value() if h.scale == "age" else h.value
    assert window.horizon.value() == pytest.approx(years * 12, abs=0.01)
    assert [window.transition.itemText(i) for i in range(window.transition.count())] == doc.names("transitions")
