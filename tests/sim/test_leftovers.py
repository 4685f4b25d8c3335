"""A run killed outright leaves its hidden temporary folder; the next run into the same place removes
it, and only such folders of this program whose writer has ended (issue: file hygiene)."""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from sim.io.export import RunWriter
from sim.io.export.leftovers import OWNER_FILE, remove_leftovers, temporary_folder_for

ROOT = Path(__file__).resolve().parents[2]


def _chunk() -> tuple[pd.DataFrame, pd.DataFrame]:
    ev = pd.DataFrame({"strategy": ["a"], "patient": [0], "time": [1.0], "age": [41.0], "from_state": ["s"],
                       "to_state": ["d"], "transition": ["t"]})
    pt = pd.DataFrame({"strategy": ["a"], "patient": [0], "entry_age": [40.0], "sex": ["f"], "initial_state": ["s"],
                       "exit_time": [1.0], "final_state": ["d"], "exit_reason": ["absorbed"]})
    return ev, pt


def _ended_pid() -> int:
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def _fake_leftover(out: Path, owner: dict | None) -> Path:
    folder = temporary_folder_for(out)
    folder.mkdir()
    (folder / "events.parquet").write_bytes(b"partial")
    if owner is not None:
        (folder / OWNER_FILE).write_text(json.dumps(owner))
    return folder


def test_a_run_killed_with_sigkill_is_cleaned_up_by_the_next_run(tmp_path):
    out = tmp_path / "run"
    code = ("import sys, time; sys.path.insert(0, %r)\n"
            "from tests.sim.test_leftovers import _chunk\n"
            "from sim.io.export import RunWriter\n"
            "w = RunWriter(%r, metadata={}); w.open(); w.write_chunk(*_chunk())\n"
            "print('open', flush=True); time.sleep(60)\n") % (str(ROOT), str(out))
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        assert proc.stdout.readline().strip() == "open"
        left = [p for p in tmp_path.iterdir() if p.name.startswith(".run.tmp-")]
        assert len(left) == 1 and (left[0] / OWNER_FILE).exists()
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    assert left[0].exists()  # SIGKILL: nothing could clean up
    with RunWriter(out, metadata={}) as writer:
        writer.write_chunk(*_chunk())
    assert writer.leftovers_removed == left
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run"]
    assert not (out / OWNER_FILE).exists()  # the owner file never reaches the output


def test_only_this_programs_folders_of_ended_writers_are_removed(tmp_path):
    out = tmp_path / "run"
    host = socket.gethostname()
    gone = _fake_leftover(out, {"program": "hazardtrace", "host": host, "pid": _ended_pid(), "start": None})
    alive = _fake_leftover(out, {"program": "hazardtrace", "host": host, "pid": os.getppid(), "start": None})
    no_owner = _fake_leftover(out, None)
    other_host = _fake_leftover(out, {"program": "hazardtrace", "host": host + "-elsewhere", "pid": _ended_pid()})
    other_program = _fake_leftover(out, {"program": "something-else", "host": host, "pid": _ended_pid()})
    other_output = _fake_leftover(tmp_path / "run2", {"program": "hazardtrace", "host": host, "pid": _ended_pid()})
    garbled = _fake_leftover(out, None)
    (garbled / OWNER_FILE).write_text("{not json")
    assert remove_leftovers(out) == [gone]
    for kept in (alive, no_owner, other_host, other_program, other_output, garbled):
        assert kept.exists()


def test_a_reused_pid_counts_as_ended(tmp_path):
    """Same pid, different start time (Linux /proc): the recorded writer has ended."""
    out = tmp_path / "run"
    me = os.getppid()
    stat = Path(f"/proc/{me}/stat")
    if not stat.exists():
        pytest.skip("no /proc on this system")
    folder = _fake_leftover(out, {"program": "hazardtrace", "host": socket.gethostname(), "pid": me, "start": "1"})
    assert remove_leftovers(out) == [folder]
