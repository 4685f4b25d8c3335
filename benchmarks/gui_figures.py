"""Child process of the suite: the GUI figures, offscreen, printed as one JSON line.

1. Longest gap between ticks of a 10 ms QTimer on the GUI thread while a run of N_BIG patients of
   the reference workload goes on in the worker (from Run until the panel emits ``results_ready``;
   the time the results views then take to draw on the GUI thread is reported separately).
2. Time from Run to ``ResultsPanel.results_shown`` (every view drawn) for N_SMALL patients, median
   of ROUNDS runs.

Uses gui.run_panel.RunPanel and gui.results.ResultsPanel as the window composes them, with the
panels' default options (error study on) and 2 threads.

    QT_QPA_PLATFORM=offscreen .venv/bin/python benchmarks/gui_figures.py N_BIG N_SMALL ROUNDS
"""

from __future__ import annotations

import json
import os
import statistics
import sys
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
sys.path.insert(0, str(Path(__file__).resolve().parent))


def main() -> None:
    n_big, n_small, rounds = int(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3])
    from PySide6.QtCore import QEventLoop, QTimer
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance() or QApplication([])
    from gui.results import ResultsPanel
    from gui.run_panel import RunPanel
    from sim.io.scenario import RunSettings, document_from_model, parse_scenario, scenario_text
    from workloads import reference_model

    text = scenario_text(document_from_model(reference_model(), RunSettings(patients=n_small, seed=1, workers=2)),
                         header="Benchmark reference workload (invented numbers).")
    scenario = parse_scenario(text)
    run_panel = RunPanel(scenario)
    results_panel = ResultsPanel()
    run_panel.resize(400, 600)
    results_panel.resize(1200, 800)
    run_panel.show()
    results_panel.show()

    marks: dict[str, float] = {}
    failures: list[str] = []
    stages: list[dict] = []
    run_panel.results_ready.connect(lambda _r: marks.__setitem__("ready", time.perf_counter()))
    run_panel.results_ready.connect(lambda r: stages.append(dict(getattr(r, "seconds", {}) or {})))
    run_panel.results_ready.connect(results_panel.show_results)
    run_panel.run_failed.connect(failures.append)
    results_panel.results_shown.connect(lambda: marks.__setitem__("shown", time.perf_counter()))

    def run_once(n: int, timeout_s: float = 900.0) -> dict[str, float]:
        ticks: list[float] = []
        timer = QTimer()
        timer.setInterval(10)
        timer.timeout.connect(lambda: ticks.append(time.perf_counter()))
        loop = QEventLoop()
        results_panel.results_shown.connect(loop.quit)
        run_panel.run_failed.connect(lambda _m: loop.quit())
        guard = QTimer()
        guard.setSingleShot(True)
        guard.timeout.connect(loop.quit)
        marks.clear()
        run_panel.patients.setValue(n)
        timer.start()
        guard.start(int(timeout_s * 1000))
        t0 = time.perf_counter()
        ticks.append(t0)
        run_panel.start_run()
        loop.exec()
        timer.stop()
        results_panel.results_shown.disconnect(loop.quit)
        if failures:
            raise RuntimeError(f"run failed: {failures[-1]}")
        if "shown" not in marks:
            raise RuntimeError(f"no results shown within {timeout_s:.0f} s")
        ready = marks["ready"]
        during = [b - a for a, b in zip(ticks, ticks[1:]) if b <= ready]
        after = [b - a for a, b in zip(ticks, ticks[1:]) if b > ready]
        # the gap spanning "ready" belongs to the run if it started before it
        return {"run_to_shown": marks["shown"] - t0, "run_to_ready": ready - t0, "stages": stages[-1] if stages else {},
                "max_gap_running": max(during) if during else float("nan"),
                "max_gap_drawing": max(after) if after else float("nan"), "ticks": len(ticks)}

    run_once(min(n_small, 2000))  # warm-up (imports, first paint)
    small = [run_once(n_small) for _ in range(rounds)]
    big = run_once(n_big)
    run_panel.shutdown()
    results_panel.shutdown()
    print(json.dumps({
        "n_big": n_big, "big": big, "n_small": n_small,
        "run_to_shown_median": statistics.median(r["run_to_shown"] for r in small),
        "run_to_shown_all": [r["run_to_shown"] for r in small],
        "run_to_ready_median": statistics.median(r["run_to_ready"] for r in small),
        "stages_small": {k: statistics.median(r["stages"].get(k, 0.0) for r in small) for k in small[0]["stages"]},
        "max_gap_small": max(r["max_gap_running"] for r in small),
    }))


if __name__ == "__main__":
    main()
