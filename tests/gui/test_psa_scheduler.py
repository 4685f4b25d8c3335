"""The probabilistic analysis on a Dask scheduler from the window (issue 14 item 6 and "Bad input"):
the "Dask scheduler" field (empty: this machine) and the workers count go to
sim.distributed.run_psa; an address that is not one, or where no scheduler answers, is marked on the
field with sim's own rule while the window stays responsive; Cancel while the scheduler is being
reached ends as cancelled; a run on a scheduler started inside the test (loopback only) gives the
same per-draw table, bit for bit, as the same analysis run inline by sim, and a longer one on it is
cancelled while it runs."""

from __future__ import annotations

import json
import socket
from pathlib import Path

import pytest
from PySide6.QtCore import Qt

import sim.distributed.cluster as cluster_module
from gui.editors.fields import is_marked
from gui.main_window import MainWindow
from gui.uncertainty.page import CANCELLING_TEXT
from sim.distributed import run_psa
from sim.psa import table_hash

ROOT = Path(__file__).resolve().parents[2]
QUORREL = ROOT / "scenarios" / "quorrel_psa.toml"


@pytest.fixture
def window(main_window) -> MainWindow:
    return main_window(QUORREL, size=(1400, 900))


def page_of(qtbot, window: MainWindow):
    window.tabs.setCurrentWidget(window.psa_page)
    qtbot.waitUntil(window.psa_page.isVisible, timeout=3000)
    return window.psa_page


def free_port() -> int:
    """A loopback port nothing listens on (bound, then released)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def type_address(qtbot, field, text: str) -> None:
    field.setFocus()
    field.selectAll()
    qtbot.keyClicks(field, text)


def test_bad_and_unreachable_addresses_are_marked_and_cancel_works(qtbot, window: MainWindow, monkeypatch,
                                                                   set_spin, screenshots: Path) -> None:
    # Dask's connection attempt lasts sim.distributed.cluster.CONNECT_TIMEOUT (10 s); 1 s here keeps
    # the test short (the same code path)
    monkeypatch.setattr(cluster_module, "CONNECT_TIMEOUT", "1s")
    page = page_of(qtbot, window)
    c = page.controls
    assert c.scheduler.text() == "" and "this machine" in c.scheduler.placeholderText()
    set_spin(c.draws, 4)
    set_spin(c.patients, 20)

    type_address(qtbot, c.scheduler, "localhost:8786")  # not an address (no tcp://)
    qtbot.mouseClick(c.run_button, Qt.MouseButton.LeftButton)
    qtbot.waitUntil(lambda: not c.is_running(), timeout=10000)
    assert is_marked(c.scheduler)
    assert "tcp://host:8786" in c.scheduler.toolTip() and "localhost:8786" in c.scheduler.toolTip()
    assert c.status.text().startswith("Failed: ") and c.run_button.isEnabled() and c.scheduler.isEnabled()
    qtbot.keyClicks(c.scheduler, "x")  # typing clears the mark
    assert not is_marked(c.scheduler) and c.scheduler.toolTip().startswith("The address of a running Dask")

    address = f"tcp://127.0.0.1:{free_port()}"  # nothing listens there
    type_address(qtbot, c.scheduler, address)
    qtbot.mouseClick(c.run_button, Qt.MouseButton.LeftButton)
    assert c.is_running() and c.status.text() == f"Connecting to the scheduler at {address}…"
    assert not c.scheduler.isEnabled() and c.cancel_button.isEnabled()
    window.tabs.setCurrentIndex(0)  # the window answers while the connection is tried
    window.tabs.setCurrentWidget(page)
    qtbot.waitUntil(lambda: not c.is_running(), timeout=15000)
    assert is_marked(c.scheduler)
    tip = c.scheduler.toolTip()
    assert "running Dask scheduler" in tip and address in tip  # sim's rule and the value given
    assert c.status.text().startswith("Failed: ") and page.outcome is None
    assert window.grab().save(str(screenshots / "psa_scheduler_unreachable.png"))

    qtbot.mouseClick(c.run_button, Qt.MouseButton.LeftButton)  # again, cancelled while connecting
    assert not is_marked(c.scheduler)
    qtbot.mouseClick(c.cancel_button, Qt.MouseButton.LeftButton)
    assert c.status.text() == CANCELLING_TEXT
    qtbot.waitUntil(lambda: not c.is_running(), timeout=15000)
    assert c.status.text().startswith("Cancelled") and not is_marked(c.scheduler)
    assert c.run_button.isEnabled() and page.outcome is None


def test_a_run_on_a_loopback_scheduler_equals_sims_inline_run(qtbot, window: MainWindow, set_spin,
                                                             tmp_path: Path) -> None:
    from dask.distributed import LocalCluster

    page = page_of(qtbot, window)
    c = page.controls
    set_spin(c.draws, 6)
    set_spin(c.patients, 40)
    set_spin(c.workers, 2)
    c.conversions["competing-exit"].setChecked(False)
    # loopback only; the scheduler's HTTP server on a free port (the default 8787 may be taken)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, protocol="tcp", host="127.0.0.1",
                      dashboard_address="127.0.0.1:0", worker_dashboard_address=None) as cluster:
        type_address(qtbot, c.scheduler, cluster.scheduler_address)
        request = c.request()
        assert request.scheduler == cluster.scheduler_address and request.workers == 2
        with qtbot.waitSignal(page.results_shown, timeout=60000):
            qtbot.mouseClick(c.run_button, Qt.MouseButton.LeftButton)
        outcome = page.outcome

        set_spin(c.draws, 400)  # a longer analysis on the same scheduler, cancelled while it runs
        set_spin(c.patients, 2000)
        qtbot.mouseClick(c.run_button, Qt.MouseButton.LeftButton)
        qtbot.waitUntil(lambda: "of 400 draws" in c.status.text(), timeout=20000)
        qtbot.mouseClick(c.cancel_button, Qt.MouseButton.LeftButton)
        qtbot.waitUntil(lambda: not c.is_running(), timeout=30000)
        assert c.status.text().startswith("Cancelled") and page.outcome is outcome  # the finished one stays
        assert c.run_button.isEnabled()
    assert outcome.request.scheduler == cluster.scheduler_address
    assert outcome.result.settings["scheduler"] == cluster.scheduler_address
    inline = run_psa(window.document.scenario, 6, 40, workers=1, cycle_methods=request.cycle_methods)
    assert table_hash(outcome.result.table) == table_hash(inline.table)  # same bits on the cluster

    folder = tmp_path / "analysis"
    assert page.save_analysis_folder(str(folder))
    qtbot.waitUntil(lambda: page.status.text() == f"Saved {folder}", timeout=20000)
    meta = json.loads((folder / "metadata.json").read_text(encoding="utf-8"))
    assert meta["scheduler"] == cluster.scheduler_address and meta["workers"] == 2
