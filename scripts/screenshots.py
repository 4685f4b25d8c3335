"""Screenshots of every results view for each bundled demo scenario, for a human look and the docs.

Runs each demo of ``sim.io.demo.DEMOS`` through the run panel (worker thread, as in the window) with a
modest number of patients, then saves a PNG of the run panel and of every results view to
``docs/screenshots/`` (``<demo>_<view>.png``).

    .venv/bin/python scripts/screenshots.py [--patients N] [--out DIR] [--offscreen]

By default it runs under a real X server, as a user's window does (fonts, window manager hints,
the xcb platform plugin): the one in ``DISPLAY``, or else it restarts itself under ``xvfb-run``
(Debian package xvfb). ``--offscreen`` uses Qt's offscreen platform instead.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from PySide6.QtCore import QEventLoop, QTimer  # noqa: E402
from PySide6.QtWidgets import QApplication, QHBoxLayout, QWidget  # noqa: E402

from sim.io.demo import DEMOS, demo_scenario  # noqa: E402


def _wait(ms: int, signal=None) -> bool:
    """Run the event loop until ``signal`` fires (True) or ``ms`` pass (False)."""
    loop = QEventLoop()
    fired: list[bool] = []
    if signal is not None:
        signal.connect(loop.quit)
        signal.connect(lambda *_: fired.append(True))
    QTimer.singleShot(ms, loop.quit)
    loop.exec()
    return bool(fired)


def shoot(name: str, patients: int, out: Path) -> list[Path]:
    """Run demo ``name`` and save its screenshots; returns the files written."""
    from gui.results import ResultsPanel
    from gui.run_panel import RunPanel

    window = QWidget()
    window.setWindowTitle(f"HazardTrace — {name}")
    run_panel = RunPanel(demo_scenario(name))
    results = ResultsPanel()
    layout = QHBoxLayout(window)
    layout.addWidget(run_panel)
    layout.addWidget(results, 1)
    run_panel.results_ready.connect(results.show_results)
    results.results_shown.connect(run_panel.mark_shown)
    run_panel.run_failed.connect(lambda message: print(f"{name}: run failed: {message}", file=sys.stderr))
    window.resize(1600, 1000)
    window.show()
    run_panel.patients.setValue(patients)
    QTimer.singleShot(0, run_panel.start_run)
    if not _wait(300_000, results.results_shown):
        raise RuntimeError(f"{name}: no results within 5 minutes")
    written = []

    def save(widget: QWidget, view: str) -> None:
        _wait(300)  # let layouts settle and the plots repaint
        path = out / f"{name}_{view}.png"
        if not widget.grab().save(str(path)):
            raise OSError(f"could not write {path}")
        written.append(path)

    save(window, "window")
    save(run_panel, "run_panel")
    for index, view in enumerate(("curves", "error_study", "outcomes", "event_log")):
        results.tabs.setCurrentIndex(index)
        save(results, view)
        if view == "error_study":
            for sub, label in ((1, "errors"), (2, "decisions")):
                results.study.tabs.setCurrentIndex(sub)
                save(results, f"{view}_{label}")
            results.study.tabs.setCurrentIndex(0)
        if view == "curves":  # a second state and strategy, more approximations
            results.curves.set_option_checked("competing-exit", 1.0, True)
            results.curves.strategy.setCurrentIndex(results.curves.strategy.count() - 1)
            results.curves.state.setCurrentIndex(0)
            _wait(60_000, results.curves.drawn)
            save(results, "curves_second_strategy")
    results.shutdown()
    run_panel.shutdown()
    window.close()
    window.deleteLater()
    return written


def _under_x_server(argv: list[str]) -> int | None:
    """Re-run this script under ``xvfb-run`` when there is no X display; None when not needed."""
    if os.environ.get("DISPLAY") or os.environ.get("HAZARDTRACE_UNDER_XVFB"):
        return None
    exe = shutil.which("xvfb-run")
    if exe is None:
        raise SystemExit("no X display and no xvfb-run: install the Debian package xvfb, or pass --offscreen")
    env = dict(os.environ, HAZARDTRACE_UNDER_XVFB="1", QT_QPA_PLATFORM="xcb")
    command = [exe, "--auto-servernum", "--server-args=-screen 0 1920x1200x24", sys.executable,
               str(Path(__file__).resolve()), *argv]
    import subprocess

    return subprocess.run(command, env=env, check=False).returncode


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--patients", type=int, default=20_000, help="patients per strategy (default 20,000)")
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "screenshots", help="output folder")
    parser.add_argument("--offscreen", action="store_true", help="use Qt's offscreen platform, no X server")
    args = parser.parse_args(argv)
    if args.offscreen:
        os.environ["QT_QPA_PLATFORM"] = "offscreen"
    elif os.environ.get("QT_QPA_PLATFORM") != "offscreen":
        code = _under_x_server(sys.argv[1:] if argv is None else list(argv))
        if code is not None:
            return code
    app = QApplication.instance() or QApplication(["hazardtrace-screenshots"])
    args.out.mkdir(parents=True, exist_ok=True)
    for name in DEMOS:
        for path in shoot(name, args.patients, args.out):
            print(path.relative_to(ROOT) if path.is_relative_to(ROOT) else path)
    return 0


if __name__ == "__main__":
    sys.exit(main())
