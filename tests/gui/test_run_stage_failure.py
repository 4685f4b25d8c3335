"""The window keeps a finished simulation when a later stage fails (issue 13, item 3): the results
are shown and the run panel names the failed stage."""

from __future__ import annotations

from dataclasses import replace

import pytest

import sim.pipeline.run as run_module
import sim.pipeline.stages as stages
from gui.results import ResultsPanel
from gui.run_panel import RunPanel
from sim.io.demo import demo_scenario
from sim.pipeline import RunResults


@pytest.fixture
def panel(qtbot):
    p = RunPanel(demo_scenario())
    qtbot.addWidget(p)
    yield p
    p.shutdown()


def test_a_failed_error_study_still_shows_the_results_with_a_note(qtbot, panel, monkeypatch) -> None:
    def boom(state):
        raise MemoryError

    monkeypatch.setattr(run_module, "STAGES", tuple(replace(s, run=boom) if s.name == "study" else s
                                                    for s in stages.STAGES))
    results_panel = ResultsPanel()
    qtbot.addWidget(results_panel)
    panel.results_ready.connect(results_panel.show_results)
    got: list[RunResults] = []
    panel.results_ready.connect(got.append)
    panel.patients.setValue(500)
    with qtbot.waitSignal(results_panel.results_shown, timeout=60_000):
        panel.start_run()
    assert len(got) == 1 and got[0].failed == {"study": "MemoryError"}
    assert got[0].simulation is not None and got[0].survival is not None
    assert panel.stage.text() == "Done; study failed: MemoryError"
    results_panel.shutdown()
