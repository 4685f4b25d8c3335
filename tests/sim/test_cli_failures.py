"""The command line when things go wrong (issue 13, items 3 and 5): output that cannot be written,
a later stage that fails, a bug, and Ctrl-C at start-up and mid-run. Each ends with the documented
exit code and a short message, no traceback and no half-written output."""

from __future__ import annotations

import errno
import io
import os
import signal
import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path

import pandas as pd
import pytest

import sim.io.export.run_writer as run_writer
import sim.pipeline.run as run_module
import sim.pipeline.stages as stages
from sim.cli.commands import main
from sim.io.demo import SCENARIO_DIR

SCENARIO = SCENARIO_DIR / "constant_hazard_risk_vs_rate.toml"
ROOT = Path(__file__).resolve().parents[2]
HAZARDTRACE = [sys.executable, "-c", "import sys; from gui.launcher import main; sys.exit(main())"]


def _run(args: list[str], capsys) -> tuple[int, str, str]:
    out = io.StringIO()
    code = main(args, out=out)
    return code, out.getvalue(), capsys.readouterr().err


def _lines(err: str) -> list[str]:
    """stderr without the progress bars."""
    return [line for line in err.splitlines() if line.strip() and not line.startswith(("simulating", "error study"))]


def _fail_stage(monkeypatch, stage: str, exc: BaseException) -> None:
    def raise_it(state):
        raise exc

    monkeypatch.setattr(run_module, "STAGES", tuple(replace(s, run=raise_it) if s.name == stage else s
                                                    for s in stages.STAGES))


def test_an_output_folder_that_cannot_be_created_is_one_line_exit_2(tmp_path, capsys) -> None:
    if os.geteuid() == 0:  # root ignores permissions: a folder in /proc cannot be created by anyone
        folder = Path("/proc") / f"hazardtrace-test-{os.getpid()}"
    else:
        parent = tmp_path / "read-only"
        parent.mkdir()
        parent.chmod(0o500)
        folder = parent / "out"
    try:
        code, out, err = _run(["run", str(SCENARIO), "--patients", "200", "--no-study", "--output", str(folder)],
                              capsys)
    finally:
        if os.geteuid() != 0:
            folder.parent.chmod(0o700)
    assert code == 2
    lines = _lines(err)
    assert len(lines) == 1 and "Traceback" not in err, err
    assert lines[0].startswith(f"hazardtrace: error: {folder}: cannot write the output: ")
    assert not folder.exists()
    if os.geteuid() != 0:
        assert list(folder.parent.iterdir()) == []


def test_an_output_path_under_a_file_is_one_line_exit_2(tmp_path, capsys) -> None:
    (tmp_path / "a-file").write_text("not a folder")
    code, _, err = _run(["run", str(SCENARIO), "--patients", "200", "--no-study",
                         "--output", str(tmp_path / "a-file" / "out")], capsys)
    assert code == 2 and len(_lines(err)) == 1 and "Traceback" not in err, err
    assert "a-file" in err and "not a folder" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a-file"]


def test_a_full_disk_leaves_nothing_and_says_where(tmp_path, capsys, monkeypatch) -> None:
    writes = []

    def full(self, df):
        writes.append(self)
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(self.path))

    monkeypatch.setattr(run_writer._Sink, "write", full)
    folder = tmp_path / "out"
    code, out, err = _run(["run", str(SCENARIO), "--patients", "200", "--no-study", "--format", "csv",
                           "--output", str(folder)], capsys)
    assert writes, "the writer's sink was not used; the test no longer simulates a full disk"
    assert code == 2
    lines = _lines(err)
    assert len(lines) == 1 and "Traceback" not in err, err
    assert lines[0].startswith(f"hazardtrace: error: {folder}: cannot write the output: No space left on device")
    assert "no partial output was left behind" in lines[0]
    assert list(tmp_path.iterdir()) == []  # neither the folder nor its temporary sibling


def test_a_failed_later_stage_still_writes_the_folder_and_exits_1(tmp_path, capsys, monkeypatch) -> None:
    _fail_stage(monkeypatch, "exact", RuntimeError("solver exploded"))
    folder = tmp_path / "out"
    code, out, err = _run(["run", str(SCENARIO), "--patients", "300", "--format", "csv", "--output", str(folder)],
                          capsys)
    assert code == 1
    assert "hazardtrace: exact failed: RuntimeError: solver exploded" in _lines(err)
    assert "Traceback" not in err and "report" in err
    assert "no exact solution: the exact stage failed (RuntimeError: solver exploded)" in out
    events = pd.read_csv(folder / "events.csv")
    summary = pd.read_csv(folder / "summary.csv")
    assert len(events) > 0 and summary["exact"].isna().all()
    assert (folder / "error_study.csv").exists()  # the stages after the failed one still ran


def test_a_bug_is_exit_1_with_a_hint_and_no_traceback(tmp_path, capsys, monkeypatch) -> None:
    _fail_stage(monkeypatch, "outcomes", KeyError("no such column"))
    folder = tmp_path / "out"
    code, _, err = _run(["run", str(SCENARIO), "--patients", "200", "--no-study", "--output", str(folder)], capsys)
    assert code == 1
    lines = _lines(err)
    assert lines[0] == "hazardtrace: internal error: KeyError: 'no such column'"
    assert "please report" in lines[1] and "HAZARDTRACE_DEBUG=1" in lines[1]
    assert "Traceback" not in err and not folder.exists()
    monkeypatch.setenv("HAZARDTRACE_DEBUG", "1")
    code, _, err = _run(["run", str(SCENARIO), "--patients", "200", "--no-study", "--output", str(folder)], capsys)
    assert code == 1 and "Traceback" in err and "KeyError" in err


def test_input_errors_are_exit_2_and_name_the_key(tmp_path, capsys) -> None:
    bad = tmp_path / "bad.toml"
    bad.write_text(SCENARIO.read_text().replace('"1 week", ', '"1e-300 years", '))
    code, _, err = _run(["check", str(bad)], capsys)
    assert code == 2 and "run.cycle_lengths[0]" in err and "cycles" in err


def _start(args: list[str], env_extra: dict | None = None, code: str | None = None) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT), **(env_extra or {})}
    cmd = [sys.executable, "-c", code] if code else HAZARDTRACE
    return subprocess.Popen(cmd + args, cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True)


# Ctrl-C while pandas is being imported: a real SIGINT, sent by the process to itself when the import
# starts, so the test does not depend on timing
_INTERRUPT_AT_IMPORT = """
import builtins, os, signal, sys
real = builtins.__import__
def interrupting(name, *args, **kwargs):
    if name == "pandas":
        builtins.__import__ = real
        os.kill(os.getpid(), signal.SIGINT)
    return real(name, *args, **kwargs)
builtins.__import__ = interrupting
from gui.launcher import main
sys.exit(main(sys.argv[1:]))
"""


def test_ctrl_c_during_start_up_exits_130_quietly(tmp_path) -> None:
    folder = tmp_path / "out"
    proc = _start(["run", str(SCENARIO), "--patients", "200", "--output", str(folder)], code=_INTERRUPT_AT_IMPORT)
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "Traceback" not in err and "interrupted" in err
    assert not folder.exists()


def test_ctrl_c_mid_run_exits_130_and_leaves_nothing(tmp_path) -> None:
    folder = tmp_path / "out"
    proc = _start(["run", str(SCENARIO), "--patients", "3000000", "--threads", "1", "--format", "csv",
                   "--output", str(folder)])
    assert proc.stderr is not None
    seen = ""
    deadline = time.monotonic() + 120
    while "simulating" not in seen and time.monotonic() < deadline:  # the first chunk is done
        seen += proc.stderr.read(1)
    assert "simulating" in seen, seen
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, seen + err
    assert "Traceback" not in err and "interrupted" in err
    assert not folder.exists() and list(tmp_path.iterdir()) == []


def test_a_later_stage_failed_by_the_input_is_one_line_exit_2(tmp_path, capsys, monkeypatch) -> None:
    """The input caused it (here a ValidationError naming its key): exit 2, one line naming the cause,
    and the simulation's output is written all the same."""
    from sim.problems import ValidationError

    problem = ValidationError(("run", "cycle_lengths", 0), "must give at most 100,000 cycles", 1e-300)
    _fail_stage(monkeypatch, "study", problem)
    folder = tmp_path / "out"
    code, out, err = _run(["run", str(SCENARIO), "--patients", "300", "--format", "csv", "--output", str(folder)],
                          capsys)
    assert code == 2
    lines = _lines(err)
    assert lines == [f"hazardtrace: error: study failed: {problem} (the simulation and the other results are "
                     f"in {folder}/)"], err
    assert "run.cycle_lengths[0]" in lines[0] and "Traceback" not in err and "report" not in err
    assert len(pd.read_csv(folder / "events.csv")) > 0 and (folder / "summary.csv").exists()
    assert "Simulated (mean, Monte Carlo standard error)" in out
