"""The start page, shown while no batch is open: what the program does, how to open
scans or a batch, and the recent batches (the caution about automatic reading is in
the status line, always shown)."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QHBoxLayout, QLabel, QListWidget, QListWidgetItem, QPushButton, QVBoxLayout, QWidget


__all__ = ["StartPage"]


class StartPage(QWidget):
    """Buttons to open scans, a folder or a batch, and the list of recent batches.

    Signals
    -------
    scans_wanted(), folder_wanted(), batch_wanted()
        A button was pressed (the window asks which files).
    recent_chosen(path)
        A recent batch was activated (Enter or double-click).
    """

    scans_wanted = Signal()
    folder_wanted = Signal()
    batch_wanted = Signal()
    recent_chosen = Signal(str)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        outer = QVBoxLayout(self)
        outer.addStretch(1)
        box = QVBoxLayout()
        title = QLabel("<h1>Inkcount</h1><p>Turn scanned forms with handwritten digits into a checked "
                       "spreadsheet. Drop scans, a folder or a batch file (.inkcount) on this window, or:</p>")
        title.setWordWrap(True)
        box.addWidget(title)
        for text, tip, signal in (
            ("Open scans…", "Ctrl+O", self.scans_wanted),
            ("Open a folder of scans…", "Ctrl+Shift+O", self.folder_wanted),
            ("Open a batch…", "Ctrl+Shift+B", self.batch_wanted),
        ):
            button = QPushButton(f"{text}  ({tip})")
            button.setAccessibleName(text.rstrip("…"))
            button.clicked.connect(lambda _=False, s=signal: s.emit())
            box.addWidget(button)
        box.addWidget(QLabel("<b>Recent batches</b> (Enter or double-click to open)"))
        self.recent_list = QListWidget()
        self.recent_list.setAccessibleName("Recent batches")
        self.recent_list.itemActivated.connect(lambda item: self.recent_chosen.emit(item.data(Qt.ItemDataRole.UserRole)))
        box.addWidget(self.recent_list)
        row = QHBoxLayout()
        row.addStretch(1)
        holder = QWidget()
        holder.setLayout(box)
        holder.setMaximumWidth(640)
        row.addWidget(holder, 4)
        row.addStretch(1)
        outer.addLayout(row)
        outer.addStretch(2)

    def show_recent(self, paths: list[str]) -> None:
        """List the recent batches (full paths, most recent first)."""
        self.recent_list.clear()
        for path in paths:
            item = QListWidgetItem(f"{Path(path).name}    —    {Path(path).parent}")
            item.setData(Qt.ItemDataRole.UserRole, path)
            item.setToolTip(path)
            self.recent_list.addItem(item)
