"""The step of File > Open scans (and Open a folder of scans) that chooses the form template.

A form template (made with File > New template from a blank form, or opened
with File > Form template) names and types the fields of one form design and
checks their rules. When scans are opened the clerk chooses here: read them
with the template used or saved last (offered first, when its file is still
there), with another template file, or without a template (the boxes are
found on each page and the fields are named f01, f02, ...).

The dialog opens without blocking the window (:meth:`QDialog.open`); when the
clerk presses "Read", ``chosen(template)`` gives the template file, or None
to read without one. The window then reads the scans with it
(:meth:`app.controller.BatchController.read_scans`).
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import Signal
from PySide6.QtWidgets import (
    QButtonGroup,
    QDialog,
    QDialogButtonBox,
    QHBoxLayout,
    QLabel,
    QPushButton,
    QRadioButton,
    QVBoxLayout,
    QWidget,
)

from recognizer.forms.template_file import TemplateFileError, load_template

from .files import ask_template

__all__ = ["TemplateChoice", "template_words"]


def template_words(path: Path) -> str:
    """A template file in words: its form's name and version, and the file's name (or why it cannot be used)."""
    try:
        template = load_template(path)
    except TemplateFileError as exc:
        return f"{path.name} (cannot be used: {exc})"
    except OSError as exc:
        return f"{path.name} (cannot be read: {exc.strerror or exc})"
    return f"{template.label}, {len(template.fields)} fields ({path.name})"


class TemplateChoice(QDialog):
    """Choose how the scans being opened are read: with a form template, or without one.

    Parameters
    ----------
    scans : list of Path
        The files and folders being opened (their count and folder are shown).
    last : Path, optional
        The form template used or saved last: offered, and chosen, first.
    parent : QWidget, optional

    Signals
    -------
    chosen(template)
        "Read" was pressed: the template file (a Path), or None for no template.
    """

    chosen = Signal(object)

    def __init__(self, scans: list[Path], last: Path | None = None, parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Read the scans")
        self.setAccessibleName("How to read the scans")
        self.scans = [Path(p) for p in scans]
        first = self.scans[0] if self.scans else Path(".")
        self.folder = first if first.is_dir() else first.parent
        #: The template offered first (the last one used or saved), if its file is still there.
        self.offered: Path | None = Path(last) if last is not None and Path(last).is_file() else None
        self._other: Path | None = None
        layout = QVBoxLayout(self)
        what = (f"these {len(self.scans)} scans" if len(self.scans) > 1 else "this scan") if not first.is_dir() \
            else f"the scans in the folder “{first.name}”"
        intro = QLabel(f"<b>Read {what} with a form template?</b><br>A form template names the fields of "
                       "your form, says what each holds (a date, a weight with decimals) and checks their "
                       "rules. Without one, the boxes are found on each page and the fields are numbered.")
        intro.setWordWrap(True)
        layout.addWidget(intro)
        self.group = QButtonGroup(self)
        self.last_button = QRadioButton()
        self.last_button.setAccessibleName("The last form template")
        self.other_button = QRadioButton("Another form template: none chosen yet")
        self.other_button.setAccessibleName("Another form template")
        self.plain_button = QRadioButton("No template: find the boxes on each page (fields f01, f02, …)")
        self.plain_button.setAccessibleName("No form template")
        for button in (self.last_button, self.other_button, self.plain_button):
            self.group.addButton(button)
        if self.offered is not None:
            self.last_button.setText(f"The last form template: {template_words(self.offered)}")
            self.last_button.setToolTip(str(self.offered))
            layout.addWidget(self.last_button)
            self.last_button.setChecked(True)
        else:
            self.plain_button.setChecked(True)
        other_row = QHBoxLayout()
        other_row.addWidget(self.other_button, 1)
        self.browse = QPushButton("Choose a template file…")
        self.browse.setToolTip("Pick a form template file (.json) made with File > New template from a blank form")
        self.browse.clicked.connect(self.choose_other)
        other_row.addWidget(self.browse)
        layout.addLayout(other_row)
        layout.addWidget(self.plain_button)
        self.other_button.setEnabled(False)
        buttons = QDialogButtonBox()
        self.read_button = buttons.addButton("Read", QDialogButtonBox.ButtonRole.AcceptRole)
        buttons.addButton(QDialogButtonBox.StandardButton.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        layout.addWidget(buttons)
        self.read_button.setDefault(True)
        self.resize(620, self.sizeHint().height())

    def choose_other(self) -> None:
        path = ask_template(self, self.folder)
        if path is not None:
            self.set_other(path)

    def set_other(self, path: Path) -> None:
        """Read with the template file ``path`` (what "Choose a template file…" does once a file is picked)."""
        self._other = Path(path)
        self.other_button.setEnabled(True)
        self.other_button.setText(f"Another form template: {template_words(self._other)}")
        self.other_button.setToolTip(str(self._other))
        self.other_button.setChecked(True)

    @property
    def template(self) -> Path | None:
        """The template file chosen now, or None (no template)."""
        if self.last_button.isChecked():
            return self.offered
        if self.other_button.isChecked():
            return self._other
        return None

    def accept(self) -> None:
        super().accept()
        self.chosen.emit(self.template)
