"""The library's layers, checked: no Qt, no cycles, stages in order, generators kept apart.

The layer contracts live in ``pyproject.toml`` (``[tool.importlinter]``) and are
checked here with import-linter, as the napari project checks its own.
"""

from __future__ import annotations

import ast
import pkgutil
import subprocess
import sys
from pathlib import Path

import grimp
import pytest
from importlinter.cli import lint_imports

import recognizer
from tests.support import REPO

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


def _every_module() -> list[str]:
    return sorted(m.name for m in pkgutil.walk_packages([str(PACKAGE)], prefix="recognizer.")
                  if not m.name.endswith("__main__"))


def test_every_sub_package_is_walked():
    modules = _every_module()
    for package in ("scans", "page", "digits", "forms", "reading", "batch", "review", "cli", "synth"):
        assert any(m.startswith(f"recognizer.{package}.") for m in modules), package


def test_importing_every_module_loads_no_qt():
    code = (
        "import importlib, sys\n"
        f"for name in {_every_module()!r}: importlib.import_module(name)\n"
        "print(sorted(m for m in sys.modules if m.startswith(('PySide6', 'shiboken6'))))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_layer_contracts_hold():
    """scans/states < digits < page < forms < reading < batch < review < ingest < cli; synth apart."""
    code = lint_imports(config_filename=str(REPO / "pyproject.toml"), no_cache=True, no_logo=True)
    assert code == 0, "an import-linter contract of pyproject.toml is broken (run lint-imports to see which)"


def _cycles(graph: grimp.ImportGraph, modules: set[str]) -> list[list[str]]:
    """Strongly connected groups of more than one module (Tarjan's algorithm)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []

    def visit(m: str) -> None:
        index[m] = low[m] = len(index)
        stack.append(m)
        on_stack.add(m)
        for n in graph.find_modules_directly_imported_by(m) & modules:
            if n not in index:
                visit(n)
                low[m] = min(low[m], low[n])
            elif n in on_stack:
                low[m] = min(low[m], index[n])
        if low[m] == index[m]:
            group = []
            while True:
                n = stack.pop()
                on_stack.discard(n)
                group.append(n)
                if n == m:
                    break
            if len(group) > 1:
                found.append(sorted(group))

    sys.setrecursionlimit(max(sys.getrecursionlimit(), 10_000))
    for m in sorted(modules):
        if m not in index:
            visit(m)
    return found


def test_no_import_cycle_between_modules():
    graph = grimp.build_graph("recognizer")
    # a package's __init__ re-exporting its own modules is not a cycle between stages
    modules = {m for m in graph.modules if not graph.find_children(m)}
    assert _cycles(graph, modules) == []


@pytest.mark.parametrize("limit", [600])
def test_no_module_is_over_the_size_limit_without_a_reason(limit):
    for path in sorted(PACKAGE.rglob("*.py")):
        lines = path.read_text(encoding="utf-8").count("\n")
        if lines > limit:
            doc = ast.get_docstring(ast.parse(path.read_text(encoding="utf-8"))) or ""
            assert "longer than" in doc, f"{path.relative_to(PACKAGE)} has {lines} lines and no reason"
