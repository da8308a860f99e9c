"""The reading library stays free of Qt, so it runs headless and its tests need no display."""

from __future__ import annotations

import ast
import pkgutil
import subprocess
import sys
from pathlib import Path

import recognizer

PACKAGE = Path(recognizer.__file__).parent


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module.split(".")[0])
    return names


def test_no_module_of_recognizer_imports_qt_or_app():
    for path in sorted(PACKAGE.rglob("*.py")):
        bad = _imports(path) & {"PySide6", "PyQt5", "PyQt6", "shiboken6", "app"}
        assert not bad, f"{path.name} imports {sorted(bad)}"


def test_importing_every_module_loads_no_qt():
    modules = [f"recognizer.{m.name}" for m in pkgutil.iter_modules([str(PACKAGE)])]
    code = (
        "import importlib, sys\n"
        f"for name in {modules!r}: importlib.import_module(name)\n"
        "print(sorted(m for m in sys.modules if m.startswith(('PySide6', 'shiboken6'))))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
