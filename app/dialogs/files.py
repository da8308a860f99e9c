"""The file choosers of the window: scans, a folder, a batch, a form template, a new batch's name.

(Choosing the template for the scans being opened is :mod:`app.dialogs.template_choice`.)

Each asks with Qt's file dialog and returns the path(s) chosen, or None (or an
empty list) when the clerk cancels.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import QFileDialog, QWidget

from recognizer.batch import SUFFIX
from recognizer.scans.files import SCAN_SUFFIXES

__all__ = ["ask_scans", "ask_folder", "ask_batch", "ask_template", "ask_form_scan", "ask_new_batch"]

_SCAN_FILTER = "Scans (" + " ".join(f"*{s}" for s in sorted(SCAN_SUFFIXES)) + ");;All files (*)"
_TEMPLATE_FILTER = "Form templates (*.json)"


def ask_scans(parent: QWidget) -> list[Path]:
    names, _ = QFileDialog.getOpenFileNames(parent, "Open scans", "", _SCAN_FILTER)
    return [Path(n) for n in names]


def ask_folder(parent: QWidget) -> Path | None:
    name = QFileDialog.getExistingDirectory(parent, "Open a folder of scans")
    return Path(name) if name else None


def ask_batch(parent: QWidget) -> Path | None:
    name, _ = QFileDialog.getOpenFileName(parent, "Open a batch", "", f"Inkcount batches (*{SUFFIX});;All files (*)")
    return Path(name) if name else None


def ask_template(parent: QWidget, folder: Path | None = None) -> Path | None:
    """A form template file, looked for first in ``folder`` (e.g. the scans' folder, where the editor saves)."""
    name, _ = QFileDialog.getOpenFileName(parent, "Form template", str(folder or ""), _TEMPLATE_FILTER)
    return Path(name) if name else None


def ask_form_scan(parent: QWidget) -> Path | None:
    name, _ = QFileDialog.getOpenFileName(parent, "Scan of a blank (or filled) form", "", _SCAN_FILTER)
    return Path(name) if name else None


def ask_new_batch(parent: QWidget, scans: list[Path]) -> Path | None:
    """Name a new batch file for ``scans`` (default: next to them, named after their folder)."""
    first = scans[0]
    folder = first if first.is_dir() else first.parent
    default = folder / f"{folder.name or 'scans'}{SUFFIX}"
    name, _ = QFileDialog.getSaveFileName(parent, "Name the new batch file", str(default),
                                          f"Inkcount batches (*{SUFFIX})")
    if not name:
        return None
    path = Path(name)
    return path if path.suffix == SUFFIX else path.with_name(path.name + SUFFIX)
