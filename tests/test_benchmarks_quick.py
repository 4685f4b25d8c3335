"""The benchmark suite still runs: ``benchmarks/run.py --quick`` exits 0 and prints its table.

The figures themselves are not checked (speed goals live in benchmarks/, run by hand; quick mode's
sizes are too small for the targets to apply). Quick mode writes no file.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_quick_benchmarks_run_and_print_the_table(tmp_path):
    results = ROOT / "benchmarks" / "RESULTS.md"
    before = results.read_bytes() if results.exists() else None
    env = dict(os.environ, PYTHONWARNINGS="error::RuntimeWarning")
    proc = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "run.py"), "--quick"], cwd=tmp_path, env=env,
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-3000:]
    out = proc.stdout
    assert "| Figure | Value | Target | Met | How measured |" in out
    for figure in ("Engine / floor", "per-patient Python loop", "cycle-based microsimulation, monthly",
                   "simpy process-based DES", "Two threads vs one", "Batches:", "Peak memory per patient",
                   "Scaling:", "Discretization-error study", "Cohort trace", "GUI event-loop gap"):
        assert figure in out, f"row {figure!r} missing from the quick table"
    assert (results.read_bytes() if results.exists() else None) == before, "--quick must not write RESULTS.md"


def test_quick_profiles_run_and_group_the_engine_time(tmp_path):
    """benchmarks/profile_engine.py --quick (the profiles behind RESULTS.md's notes) still runs; it
    writes no file in quick mode."""
    profiles = ROOT / "benchmarks" / "PROFILES.md"
    before = profiles.read_bytes() if profiles.exists() else None
    proc = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "profile_engine.py"), "--quick"], cwd=tmp_path,
                          capture_output=True, text=True, timeout=180)
    assert proc.returncode == 0, proc.stderr[-3000:]
    for text in ("| Work (inside the round loop, `_run_strategy`) | ms | share |", "draws (counter-based generator",
                 "hazards (conditional times)", "## batches", "## pipeline", "run_scenario"):
        assert text in proc.stdout, f"{text!r} missing from the quick profiles"
    assert (profiles.read_bytes() if profiles.exists() else None) == before, "--quick must not write PROFILES.md"
