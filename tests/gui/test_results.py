"""ResultsPanel and its views: every view shows the run's data; the error study's safe-cycle table
follows the tolerance exactly as sim computes it; copying; the event log's columnar model."""

from __future__ import annotations

import dataclasses
import math
import time

import numpy as np
import pandas as pd
import pytest
from PySide6.QtCore import QItemSelection, QItemSelectionModel, Qt
from PySide6.QtGui import QGuiApplication
from PySide6.QtWidgets import QAbstractItemView

from gui.results import ResultsPanel
from gui.results.series import Series, cycle_label, same_curves, steps, survival_from_occupancy, thin_steps
from gui.results.study_data import coinciding, largest_safe_cycle
from gui.results.table_model import DataFrameModel, format_number
from gui.results.table_view import TableView
from sim.io.demo import demo_path, demo_scenario
from sim.pipeline.run import run_scenario
from sim.io.scenario import parse_scenario
from sim.reference.study import discretization_study

N = 2000


# PySide6 6.12.0 on CPython 3.11 drops references to None/True/False; see gui.app.

@pytest.fixture(scope="module")
def results():
    return run_scenario(demo_scenario(), patients=N, seed=11, workers=2)


@pytest.fixture
def panel(qtbot, results):
    p = ResultsPanel()
    qtbot.addWidget(p)
    p.resize(1400, 900)
    with qtbot.waitSignal(p.results_shown, timeout=60_000):
        p.show_results(results)
    yield p
    p.shutdown()


# ----------------------------------------------------------------------------- pure helpers
def test_cycle_labels():
    assert [cycle_label(h) for h in (7 / 365.25, 1 / 52, 1 / 12, 0.25, 0.5, 1.0, 2.0, 0.3)] == [
        "1 week", "1 week", "1 month", "3 months", "6 months", "1 year", "2 years", "0.3 years"]


def test_steps_and_thinning_keep_the_step_function():
    x, y = steps(np.array([0.0, 1.0, 3.0]), np.array([1.0, 0.5, 0.2]), 4.0)
    np.testing.assert_array_equal(x, [0, 1, 1, 3, 3, 4])
    np.testing.assert_array_equal(y, [1, 1, 0.5, 0.5, 0.2, 0.2])
    t = np.sort(np.random.default_rng(3).uniform(0, 10, 50_000))
    t[0] = 0.0
    s = np.linspace(1, 0, t.size)
    grid, (v,) = thin_steps(t, [s], 10.0, max_points=500)
    assert grid.size == 500
    idx = np.searchsorted(t, grid, side="right") - 1  # value of the step function at each grid time
    np.testing.assert_array_equal(v, s[idx])


def test_survival_from_occupancy_is_one_minus_absorbing(results):
    model = results.scenario.model
    e = results.exact_occupancy[results.exact_occupancy["strategy"] == "usual care"]
    surv = survival_from_occupancy(e, model)
    dead = e[e["state"] == "dead"].sort_values("time")["probability"].to_numpy()
    np.testing.assert_allclose(surv["survival"].to_numpy(), 1 - dead, rtol=0, atol=1e-15)


def test_format_number():
    assert format_number(31441.912403) == "31,441.9"
    assert format_number(0.283775123) == "0.283775"
    assert format_number(float("nan")) == ""
    assert format_number(12_000_000.4) == "12,000,000"
    assert format_number(2.5e-7) == "2.5000e-07"
    assert format_number(np.int64(5000)) == "5,000"


def test_largest_safe_cycle_reproduces_the_runs_study(results):
    study = results.study
    tolerance = results.settings["tolerance"]
    pd.testing.assert_frame_equal(largest_safe_cycle(study.table, tolerance, True), study.largest_cycle)


# ----------------------------------------------------------------------------- curves
def test_curves_show_simulated_exact_and_cycle_based(panel, results):
    curves = panel.curves
    survival_legend, occupancy_legend = curves.legend_labels()
    # the demo's horizon is attained age 100 with entry ages 40-75: curves to the last horizon (60
    # years), each patient counted at min(t, own horizon) past the earliest one (25 years)
    horizon = "earliest horizon (25 years): past it, each patient counts in their state at their own horizon"
    assert survival_legend == [f"simulated (n = {N:,}), each patient at min(t, own horizon); band: 95% CI",
                               "exact (Kolmogorov equations)", "cycle-based: per-transition, 1 year",
                               "cycle-based: matrix-exponential, 1 year", horizon]
    assert occupancy_legend[0] == f"simulated (n = {N:,}), each patient at min(t, own horizon); band: 95% CI"
    assert occupancy_legend[-1] == horizon and curves._survival.horizon.value() == 25.0
    points = curves.curve_points()
    assert points["simulated"] > 100 and points["exact"] == len(results.grid)
    # 1-year cycles up to the last horizon (60 years): boundaries 0..60
    assert results.grid[-1] == 60.0
    assert points["matrix-exponential, 1 year"] == int(results.grid[-1]) + 1
    assert not curves.note.isVisibleTo(panel)
    # the band is drawn around the simulated curve
    layer = curves._survival
    assert np.all(layer.lower.yData <= layer.simulated.yData + 1e-12)
    assert np.all(layer.upper.yData >= layer.simulated.yData - 1e-12)


def test_ticking_an_approximation_adds_its_trace(qtbot, panel, results):
    curves = panel.curves
    with qtbot.waitSignal(curves.drawn, timeout=30_000):
        curves.set_option_checked("competing-exit", 0.5, True)
    assert "cycle-based: competing-exit, 6 months" in curves.legend_labels()[0]
    assert curves.curve_points()["competing-exit, 6 months"] == 2 * int(results.grid[-1]) + 1
    with qtbot.waitSignal(curves.drawn, timeout=30_000):
        curves.set_option_checked("per-transition", 1.0, False)
    assert "cycle-based: per-transition, 1 year" not in curves.legend_labels()[0]
    with qtbot.waitSignal(curves.drawn, timeout=30_000):
        curves.strategy.setCurrentText("new therapy")
    assert "new therapy" in curves.survival_panel.plot.titleLabel.text
    with qtbot.waitSignal(curves.drawn, timeout=30_000):
        curves.state.setCurrentText("well")
    assert "well" in curves.occupancy_panel.plot.titleLabel.text


def test_semi_markov_model_shows_the_exact_note_and_tunnelled_traces(qtbot):
    text = demo_path().read_text()
    old = 'family = "exponential"\nrate = 0.15              # per person-year'
    assert old in text
    scenario = parse_scenario(text.replace(old, 'family = "weibull"\nshape = 0.8\nscale = 6.0'))
    res = run_scenario(scenario, patients=500, seed=3, study=False)
    assert res.exact_occupancy is None and res.exact_note
    p = ResultsPanel()
    qtbot.addWidget(p)
    with qtbot.waitSignal(p.results_shown, timeout=60_000):
        p.show_results(res)
    survival_legend, _ = p.curves.legend_labels()
    assert not any(label.startswith("exact") for label in survival_legend)
    assert "cycle-based: matrix-exponential, 1 year" in survival_legend
    assert p.curves.note.text().startswith("No exact curve. ") and res.exact_note[1:] in p.curves.note.text()
    assert "exact" not in p.outcomes.outcomes.model().column_names()
    assert not p.study.empty.isHidden() and p.study.empty.text().startswith("This run did not include")
    assert p.study.largest is None
    p.shutdown()


# ----------------------------------------------------------------------------- error study
def test_error_study_plot_and_tables(panel, results):
    view = panel.study
    study = results.study
    labels = view.panel.legend_labels()
    assert len(labels) == 3 * 4 + 1 and labels[-1].startswith("tolerance (")
    visible = [item for item in view._curves.values() if item.isVisible()]
    assert visible and all(len(item.xData) > 0 for item in visible)
    assert view.panel.plot.getAxis("left").labelText.startswith("absolute error")
    outcome, strategy = view.outcome.currentData(), view.strategy.currentData()
    n_rows = ((study.table["outcome"] == outcome) & (study.table["strategy"] == strategy)).sum()
    assert view.errors.model().rowCount() == n_rows
    assert view.decisions.model().rowCount() == int(study.decisions["changes_decision"].sum())
    assert view.safe_table.model().rowCount() == 3


def test_tolerance_change_updates_the_safe_cycle_table_as_sim_would(qtbot, panel, results):
    view = panel.study
    settings = results.settings
    for tolerance, relative in ((0.002, True), (0.05, False)):
        with qtbot.waitSignal(view.safe_cycles_changed, timeout=5000):
            view.set_tolerance(tolerance, relative)
        expected = discretization_study(results.scenario.model, cycle_lengths=settings["cycle_lengths"],
                                        tolerance=tolerance, relative=relative).largest_cycle
        pd.testing.assert_frame_equal(view.largest, expected)
        outcome, strategy = view.outcome.currentData(), view.strategy.currentData()
        row = expected[(expected["outcome"] == outcome) & (expected["strategy"] == strategy)
                       & (expected["method"] == "matrix-exponential") & (expected["correction"] == "start")]
        h = float(row["largest_cycle_length"].iloc[0])
        model = view.safe_table.model()
        method_row = [model.cell_text(r, 0) for r in range(model.rowCount())].index("matrix-exponential")
        shown = model.cell_text(method_row, model.column_names().index("start"))
        assert shown == ("none (shortest fails)" if math.isnan(h) else cycle_label(h))


# ----------------------------------------------------------------------------- outcomes and copy
def test_outcomes_tables_and_copy_to_clipboard(qtbot, panel, results):
    view = panel.outcomes
    assert view.outcomes.model().rowCount() == len(results.outcomes)
    assert view.increments.model().rowCount() == len(results.increments) == 4
    quantities = [view.increments.model().cell_text(r, 2) for r in range(4)]
    assert quantities[2].startswith("ICER") and quantities[3].startswith("NMB")
    table = view.outcomes
    panel.tabs.setCurrentWidget(view)
    table.setFocus()
    sel = table.selectionModel()
    first, last = table.model().index(0, 3), table.model().index(2, 5)  # 3 rows x (mean, MCSE, exact)
    sel.select(QItemSelection(first, last), QItemSelectionModel.SelectionFlag.ClearAndSelect)
    QGuiApplication.clipboard().clear()
    qtbot.keyClick(table, Qt.Key.Key_C, Qt.KeyboardModifier.ControlModifier)
    lines = QGuiApplication.clipboard().text().rstrip("\n").split("\n")
    cells = [line.split("\t") for line in lines]
    assert len(cells) == 3 and all(len(c) == 3 for c in cells)
    o = results.outcomes
    np.testing.assert_array_equal([float(c[0]) for c in cells], o["mean"].to_numpy()[:3])  # full precision
    np.testing.assert_array_equal([float(c[1]) for c in cells], o["mcse"].to_numpy()[:3])
    np.testing.assert_array_equal([float(c[2]) for c in cells], o["exact"].to_numpy()[:3])
    with_names = table.copy_selection(headers=True).split("\n")[0].split("\t")
    assert with_names == ["simulated mean", "MCSE", "exact"]


# ----------------------------------------------------------------------------- event log
def test_event_log_filters_by_patient_and_strategy(qtbot, panel, results):
    view = panel.event_log
    events = results.simulation.events
    model = view.table.model()
    assert model.rowCount() == len(events)
    view.set_filter(strategy="new therapy")
    assert model.rowCount() == int((events["strategy"] == "new therapy").sum())
    pid = int(events["patient"].iloc[0])
    view.set_filter(strategy="new therapy", patient=pid)
    expected = events[(events["strategy"] == "new therapy") & (events["patient"] == pid)]
    assert model.rowCount() == len(expected) > 0
    assert [model.cell_text(r, 6) for r in range(model.rowCount())] == expected["transition"].astype(str).tolist()
    view.set_filter(patient=pid)
    assert model.rowCount() == int((events["patient"] == pid).sum())
    assert view.count.text().startswith(f"{model.rowCount():,} of {len(events):,}")
    view.table_choice.setCurrentIndex(1)  # the patient table
    assert view.table.model().rowCount() == int((results.simulation.patients["patient"] == pid).sum()) == 2
    view.set_filter()
    assert view.table.model().rowCount() == len(results.simulation.patients) == 2 * N


def _big_log(n: int) -> pd.DataFrame:
    rng = np.random.default_rng(5)
    states = ["well", "lanthic", "dead"]
    return pd.DataFrame({
        "strategy": pd.Categorical.from_codes(rng.integers(0, 2, n), ["usual care", "new therapy"]),
        "patient": np.sort(rng.integers(0, n // 3, n)),
        "time": rng.uniform(0, 40, n),
        "age": rng.uniform(40, 100, n),
        "from_state": pd.Categorical.from_codes(rng.integers(0, 2, n), states),
        "to_state": pd.Categorical.from_codes(rng.integers(1, 3, n), states),
        "transition": pd.Categorical.from_codes(rng.integers(0, 3, n), ["onset", "recovery", "disease death"]),
    })


class _CountingModel(DataFrameModel):
    calls = 0

    def data(self, index, role=Qt.ItemDataRole.DisplayRole):
        type(self).calls += 1
        return super().data(index, role)


def test_two_million_row_log_loads_scrolls_and_filters_without_per_row_work(qtbot):
    frame = _big_log(2_000_000)
    view = TableView("events", row_numbers=True)
    qtbot.addWidget(view)
    view.resize(900, 600)
    view.show()
    t0 = time.perf_counter()
    model = _CountingModel(frame)
    view.setModel(model)
    view.scrollToBottom()
    view.scrollTo(model.index(1_000_000, 2), QAbstractItemView.ScrollHint.PositionAtCenter)
    view.viewport().grab()  # paint the visible rows
    load_and_scroll = time.perf_counter() - t0
    assert model.rowCount() == 2_000_000
    # only visible cells are asked for (plus Qt's column sizing sample): no per-row Python work
    assert _CountingModel.calls < 50_000, _CountingModel.calls
    assert load_and_scroll < 3.0, f"{load_and_scroll:.2f} s to load and scroll 2 million rows"
    t0 = time.perf_counter()
    mask = model.column_equals("strategy", "new therapy") & (frame["patient"].to_numpy() < 1000)
    model.set_mask(mask)
    assert time.perf_counter() - t0 < 1.0
    assert model.rowCount() == int(((frame["strategy"] == "new therapy") & (frame["patient"] < 1000)).sum())
    assert model.cell_text(0, 0) == "new therapy"
    sub = model.frame()
    assert len(sub) == model.rowCount() and (sub["patient"] < 1000).all()


def test_results_shown_waits_for_every_view_of_a_replaced_run(qtbot, panel, results):
    other = dataclasses.replace(results, settings={**results.settings, "seed": 99})
    with qtbot.waitSignal(panel.results_shown, timeout=60_000):
        panel.show_results(other)
    assert "seed 99" in panel.title.text()
    assert not panel.curves.is_busy()
    assert panel.curves.curve_points()["simulated"] > 100


def test_coinciding_error_curves_are_named():
    h = np.array([0.5, 1.0])
    a, b = np.array([0.1, 0.2]), np.array([0.3, 0.4])
    same_everywhere = {("m1", "start"): (h, a), ("m2", "start"): (h, a), ("m3", "start"): (h, b),
                       ("m1", "end"): (h, b), ("m2", "end"): (h, b), ("m3", "end"): (h, a)}
    assert coinciding(same_everywhere) == ["m1 = m2 (every correction)"]
    partly = {("m1", "start"): (h, a), ("m2", "start"): (h, a), ("m1", "end"): (h, a), ("m2", "end"): (h, b)}
    assert coinciding(partly) == ["m1 = m2 (start)"]
    assert coinciding({("m1", "start"): (h, a), ("m2", "start"): (h, b)}) == []


def test_same_curves_groups_identical_series():
    x = np.arange(3.0)
    a, b = Series(x, np.array([1.0, 0.8, 0.6])), Series(x, np.array([1.0, 0.7, 0.5]))
    assert same_curves({"p": a, "q": b, "r": Series(x.copy(), a.y.copy())}) == [["p", "r"]]
    assert same_curves({"p": a, "q": b}) == []


def test_fitted_columns_are_never_narrower_than_qts_own_fit(qtbot):
    # TableView measures the sampled cells' text itself (fast); the widths must hold the text as
    # Qt's item-by-item fit does
    from PySide6.QtWidgets import QTableView

    frame = pd.DataFrame({"strategy": pd.Categorical(["usual care", "new therapy"] * 150),
                          "value": np.linspace(-1e6, 2.5e7, 300), "tiny": np.geomspace(1e-9, 1.0, 300),
                          "count": np.arange(300) * 1001, "note": ["a longer free-text note"] * 300})
    view = TableView("t")
    qtbot.addWidget(view)
    view.set_frame(frame)
    for c in range(len(frame.columns)):
        assert view.sizeHintForColumn(c) >= QTableView.sizeHintForColumn(view, c)
        assert view.columnWidth(c) >= QTableView.sizeHintForColumn(view, c)
