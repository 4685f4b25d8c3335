"""Layer contract: the numerical core ``sim`` never imports PySide6, pyqtgraph or ``gui``."""

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_import_linter_contract_holds():
    # import-linter reads the "forbidden" contract from pyproject.toml.
    exe = Path(sys.executable).with_name("lint-imports")
    proc = subprocess.run([str(exe)], cwd=ROOT, capture_output=True, text=True,
                          env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "1 kept, 0 broken" in proc.stdout


def test_sim_imports_without_qt():
    code = ("import sys, importlib, pkgutil, sim\n"
            "for m in pkgutil.iter_modules(sim.__path__):\n"
            "    importlib.import_module('sim.' + m.name)\n"
            "bad = [m for m in sys.modules if m.split('.')[0] in ('PySide6', 'pyqtgraph', 'gui', 'shiboken6')]\n"
            "assert not bad, bad\n")
    proc = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
