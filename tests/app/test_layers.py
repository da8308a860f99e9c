"""Contracts between the window and the library, and between the window's own layers.

* ``app`` uses the library only through its stable homes (listed below), so
  the library can move its insides without breaking the window.
* Views and dialogs do not reach up to the main window or the controller:
  they get a batch and report through signals; the window routes.
"""

from __future__ import annotations

import ast
from pathlib import Path

import app

APP = Path(app.__file__).parent

#: The library modules the window may import.
HOMES = {
    "recognizer.batch",
    "recognizer.batch.queries",
    "recognizer.batch.samples",
    "recognizer.ingest",
    "recognizer.learning",
    "recognizer.review",
    "recognizer.states",
    "recognizer.digits.model",
    "recognizer.digits.retrain",
    "recognizer.scans.files",
    "recognizer.page.boxes",
    # Form templates: the modules their names live in now (template.py was split
    # into template / editing / template_file, drafting.py is new).
    "recognizer.forms.template",
    "recognizer.forms.editing",
    "recognizer.forms.template_file",
    "recognizer.forms.checkdigits",
    "recognizer.forms.drafting",
}
#: Names the window may take from the top-level package.
TOP_LEVEL_NAMES = {"CAUTION", "__version__"}

#: Imports the library has no stable home for yet: (importing file, module) -> why.
#: Remove an entry once the library offers the names in one of the HOMES.
NO_HOME_YET: dict[tuple[str, str], str] = {}


def _library_imports(path: Path) -> list[str]:
    """Every ``recognizer...`` module (or top-level name) imported by ``path``, inside functions too."""
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found += [a.name for a in node.names if a.name.split(".")[0] == "recognizer"]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            if node.module == "recognizer":
                found += [f"recognizer.{a.name}" for a in node.names if a.name not in TOP_LEVEL_NAMES]
            elif node.module.startswith("recognizer."):
                found.append(node.module)
    return found


def _app_modules() -> list[Path]:
    return sorted(APP.rglob("*.py"))


def test_app_imports_the_library_only_through_its_homes():
    outside, used_exceptions = [], set()
    for path in _app_modules():
        name = path.relative_to(APP).as_posix()
        for module in _library_imports(path):
            if module in HOMES:
                continue
            if (name, module) in NO_HOME_YET:
                used_exceptions.add((name, module))
                continue
            outside.append(f"app/{name}: {module}")
    assert outside == [], "imports outside the library's stable homes:\n" + "\n".join(outside)
    assert used_exceptions == set(NO_HOME_YET), f"no longer needed: {set(NO_HOME_YET) - used_exceptions}"


def test_the_homes_exist():
    import importlib

    for module in sorted(HOMES | {m for _, m in NO_HOME_YET}):
        importlib.import_module(module)


def test_views_and_dialogs_do_not_reach_up_to_the_window_or_the_controller():
    upward = {"main_window", "controller"}
    bad = []
    for package in ("views", "dialogs"):
        for path in sorted((APP / package).glob("*.py")):
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
                if isinstance(node, ast.ImportFrom):
                    parts = (node.module or "").split(".")
                    names = {a.name for a in node.names}
                    if (node.level and (upward & set(parts) or (not node.module and upward & names))) or \
                            (node.level == 0 and parts[0] == "app" and upward & set(parts)):
                        bad.append(f"app/{package}/{path.name}: {'.' * node.level}{node.module or ''}")
    assert bad == []
