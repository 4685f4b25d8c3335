"""RunPanel and the run worker: defaults, a real run through the worker thread into the results,
cancel, failures, progress throttling, and a GUI thread that keeps running during a large run."""

from __future__ import annotations

import io
import time

import numpy as np
import pandas as pd
import pytest
from PySide6.QtCore import Qt, QTimer

from gui.results import ResultsPanel
from gui.run_panel import RunPanel
from gui.worker import RunWorker
from sim.io.demo import demo_scenario
from sim.engine.histories import SimulationError
from sim.cli import main as cli_main
from sim.pipeline import RunResults, run_scenario


# PySide6 6.12.0 on CPython 3.11 drops references to None/True/False; see gui.app.

@pytest.fixture(scope="module")
def scenario():
    return demo_scenario()


@pytest.fixture
def panel(qtbot, scenario):
    p = RunPanel(scenario)
    qtbot.addWidget(p)
    yield p
    p.shutdown()


def test_fields_take_the_scenario_run_settings(panel, scenario):
    run = scenario.run
    assert panel.patients.value() == run.patients
    assert panel.seed.text() == str(run.seed)
    assert panel.threads.value() == run.workers
    assert panel.run_button.isEnabled() and not panel.cancel_button.isEnabled()


def test_none_scenario_disables_run_and_shows_the_reason(panel, scenario):
    panel.set_scenario(None, "transitions[2].rate: must be > 0, got -1")
    assert not panel.run_button.isEnabled()
    assert panel.reason.text() == "transitions[2].rate: must be > 0, got -1"
    assert not panel.reason.isHidden()
    panel.patients.setValue(1234)  # the user's edit survives the scenario coming back unchanged
    panel.set_scenario(scenario)
    assert panel.run_button.isEnabled()
    assert panel.reason.text() == ""
    assert panel.patients.value() == 1234


def test_run_through_the_worker_thread_shows_results(qtbot, panel):
    results_panel = ResultsPanel()
    qtbot.addWidget(results_panel)
    panel.results_ready.connect(results_panel.show_results)
    panel.patients.setValue(2000)
    panel.seed.setText("7")
    panel.threads.setValue(2)
    got: list[RunResults] = []
    panel.results_ready.connect(got.append)
    with qtbot.waitSignal(results_panel.results_shown, timeout=60_000):
        qtbot.mouseClick(panel.run_button, Qt.MouseButton.LeftButton)
        assert panel.is_running() and panel.cancel_button.isEnabled() and not panel.run_button.isEnabled()
    assert len(got) == 1 and isinstance(got[0], RunResults)
    assert got[0].settings["patients"] == 2000 and got[0].settings["seed"] == 7
    assert got[0].simulation.seed == 7
    # the finished run's settings and seed are shown, in the run panel and with the results
    assert "2,000 patients per strategy" in panel.last_run.text() and "seed 7" in panel.last_run.text()
    assert "seed 7" in results_panel.title.text() and "2,000 patients" in results_panel.title.text()
    assert panel.run_button.isEnabled() and not panel.cancel_button.isEnabled()
    assert panel.stage.text() == "Done"
    results_panel.shutdown()


def test_the_window_runs_the_same_pipeline_as_the_command_line(qtbot, panel, scenario, tmp_path):
    """The worker runs sim.pipeline with the log kept in memory: the same results as run_scenario
    called directly, every stage timed, and the summary the command line writes for the same
    scenario, seed and patients (its means accumulated chunk by chunk, equal up to rounding)."""
    panel.patients.setValue(1500)
    panel.seed.setText("21")
    panel.threads.setValue(2)
    got: list[RunResults] = []
    panel.results_ready.connect(got.append)
    with qtbot.waitSignal(panel.results_ready, timeout=60_000):
        panel.start_run()
    window = got[0]
    assert window.simulation is not None and window.survival is not None and window.skipped == {}
    assert set(window.seconds) == {"simulation", "outcomes", "exact", "estimates", "study"}
    direct = run_scenario(scenario, patients=1500, seed=21, workers=2)
    pd.testing.assert_frame_equal(window.outcomes, direct.outcomes, check_exact=True)
    pd.testing.assert_frame_equal(window.simulation.events, direct.simulation.events, check_exact=True)
    pd.testing.assert_frame_equal(window.occupancy, direct.occupancy, check_exact=True)
    assert cli_main(["run", str(scenario.path), "--patients", "1500", "--seed", "21", "--threads", "2",
                     "--output", str(tmp_path / "cli"), "--format", "csv", "--no-study"], out=io.StringIO()) == 0
    cli = pd.read_csv(tmp_path / "cli" / "summary.csv", float_precision="round_trip")
    assert list(cli["outcome"]) == list(window.outcomes["outcome"]) and (cli["n"] == window.outcomes["n"]).all()
    np.testing.assert_allclose(cli["mean"], window.outcomes["mean"], rtol=1e-12)
    np.testing.assert_array_equal(cli["exact"], window.outcomes["exact"])


def test_error_study_progress_is_shown_as_a_fraction(panel):
    # sim.pipeline.run reports the study trace by trace; other stages without a fraction show a busy bar
    panel._on_progress("error study", 3, 12)
    assert (panel.progress.minimum(), panel.progress.maximum(), panel.progress.value()) == (0, 12, 3)
    assert panel.stage.text() == "Running the cycle-length error study: 3 of 12 cohort traces"
    panel._on_progress("estimates", 0, 1)
    assert panel.progress.maximum() == 0 and panel.stage.text().startswith("Estimating")


def test_cancel_returns_to_idle_and_the_gui_thread_keeps_running(qtbot, panel):
    panel.patients.setValue(5_000_000)
    panel.threads.setValue(2)
    ticks: list[float] = []
    timer = QTimer()
    timer.setInterval(20)
    timer.timeout.connect(lambda: ticks.append(time.monotonic()))
    timer.start()
    cancelled: list[bool] = []
    panel.run_cancelled.connect(lambda: cancelled.append(True))
    panel.start_run()
    qtbot.waitUntil(lambda: panel.stage.text().startswith("Simulating"), timeout=30_000)
    ticks.clear()
    qtbot.wait(1000)  # a second of simulating: the GUI thread's timer must keep firing
    gaps = [b - a for a, b in zip(ticks, ticks[1:])]
    assert len(ticks) >= 10, f"the GUI thread fired its 20 ms timer only {len(ticks)} times in 1 s"
    assert max(gaps) < 0.5, f"the GUI thread was blocked for {max(gaps):.2f} s"
    assert 0 < panel.progress.value() < panel.progress.maximum()
    with qtbot.waitSignal(panel.run_cancelled, timeout=30_000):
        qtbot.mouseClick(panel.cancel_button, Qt.MouseButton.LeftButton)
    timer.stop()
    assert cancelled == [True]
    assert not panel.is_running()
    assert panel.run_button.isEnabled() and not panel.cancel_button.isEnabled()
    assert panel.patients.isEnabled() and panel.stage.text() == "Cancelled"


def test_failures_surface_as_run_failed_with_the_message(qtbot, panel, monkeypatch):
    def broken(*args, **kwargs):
        raise SimulationError("state 'lanthic': more than 10000 transitions for patient 3 (runaway loop)")

    monkeypatch.setattr("gui.worker.run_scenario", broken)
    with qtbot.waitSignal(panel.run_failed, timeout=10_000) as blocker:
        panel.start_run()
    assert blocker.args == ["state 'lanthic': more than 10000 transitions for patient 3 (runaway loop)"]
    assert not panel.is_running() and panel.run_button.isEnabled()
    assert panel.stage.text().startswith("Failed: state 'lanthic'")


def test_progress_is_throttled_but_stage_changes_and_ends_always_reported(scenario):
    worker = RunWorker(scenario, patients=10, seed=1, workers=1, min_interval=10.0)
    seen: list[tuple[str, int, int]] = []
    worker.progress.connect(lambda *a: seen.append(a), Qt.ConnectionType.DirectConnection)
    for done in range(1, 10_001):
        worker._report("simulating", done, 10_000)
    worker._report("outcomes", 0, 1)
    assert seen == [("simulating", 1, 10_000), ("simulating", 10_000, 10_000), ("outcomes", 0, 1)]
