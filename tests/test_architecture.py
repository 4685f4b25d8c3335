"""Architecture: the numerical core ``sim`` never imports PySide6, pyqtgraph or ``gui``; inside ``sim``
sub-packages import only the layers below them (import-linter contracts in pyproject.toml); no module
reaches for another sub-package's private names; modules stay small."""

import ast
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
    assert "3 kept, 0 broken" in proc.stdout


def test_sim_imports_without_qt():
    code = ("import sys, importlib, pkgutil, sim\n"
            "for m in pkgutil.walk_packages(sim.__path__, 'sim.'):\n"
            "    importlib.import_module(m.name)\n"
            "bad = [m for m in sys.modules if m.split('.')[0] in ('PySide6', 'pyqtgraph', 'gui', 'shiboken6')]\n"
            "assert not bad, bad\n")
    proc = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr


def _sub_package(module: str) -> str:
    """``sim.engine.rng`` -> ``sim.engine``; a top-level module is its own unit."""
    return ".".join(module.split(".")[:2])


def _imports(path: Path):
    """(imported module, names) for every ``from X import names`` in a file, resolved to absolute."""
    module = ".".join(path.relative_to(ROOT).with_suffix("").parts)
    package = module.rsplit(".", 1)[0] if path.name != "__init__.py" else module.removesuffix(".__init__")
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            yield module, target, [a.name for a in node.names]


def test_no_private_imports_across_sub_packages():
    """A name starting with '_' is private to its sub-package: other sub-packages (and gui/) use the
    public names their ``__init__`` lists."""
    bad = []
    for folder in ("sim", "gui"):
        for path in (ROOT / folder).rglob("*.py"):
            for module, target, names in _imports(path):
                if not target.startswith("sim"):
                    continue
                if _sub_package(module) == _sub_package(target):
                    continue
                private = [n for n in names if n.startswith("_") and n != "__version__"]
                private_module = [p for p in target.split(".") if p.startswith("_")]
                if private or private_module:
                    bad.append(f"{module} imports {private or private_module} from {target}")
    assert not bad, "\n".join(bad)


def test_modules_stay_small():
    """No module of the core over ~600 lines (one idea per module)."""
    big = {str(p.relative_to(ROOT)): n for p in (ROOT / "sim").rglob("*.py")
           if (n := len(p.read_text(encoding="utf-8").splitlines())) > 650}
    assert not big, big
