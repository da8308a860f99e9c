"""The window's status bar: messages, the reading progress with its Cancel button, a
note while the model learns from the clerk's corrections, and the short caution about
automatic reading (always shown)."""

from __future__ import annotations

from PySide6.QtWidgets import QLabel, QProgressBar, QPushButton, QStatusBar

from ..look import CAUTION, SHORT_CAUTION

__all__ = ["StatusBar"]


class StatusBar(QStatusBar):
    """Messages, reading progress and the caution. ``cancel_button.clicked`` asks to stop reading."""

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.progress = QProgressBar()
        self.progress.setAccessibleName("Reading progress")
        self.progress.setMaximumWidth(260)
        self.progress.setFormat("%v of %m pages")
        self.cancel_button = QPushButton("Cancel reading")
        self.cancel_button.setToolTip("Stop reading after the current page (Esc); pages read so far are kept")
        self.cancel_button.setAccessibleName("Cancel reading")
        self.progress.hide()
        self.cancel_button.hide()
        self.addWidget(self.progress)
        self.addWidget(self.cancel_button)
        self.learning = QLabel("Learning from your corrections…")
        self.learning.setAccessibleName("Learning")
        self.learning.setToolTip("The model learns from the digits you checked, in the background; keep checking. "
                                 "Model tab (F4) to follow it or stop it.")
        self.learning.setStyleSheet("color: #0072B2;")
        self.learning.hide()
        self.addPermanentWidget(self.learning)
        caution = QLabel("⚠ " + SHORT_CAUTION)
        caution.setToolTip(CAUTION)
        caution.setAccessibleName("Caution")
        caution.setStyleSheet("color: #8A5A00;")
        self.addPermanentWidget(caution)

    def reading_started(self) -> None:
        """Show a busy bar and the Cancel button."""
        self.progress.setRange(0, 0)
        self.progress.show()
        self.cancel_button.show()
        self.cancel_button.setEnabled(True)

    def reading_progress(self, done: int, total: int) -> None:
        self.progress.setRange(0, max(total, done))
        self.progress.setValue(done)

    def reading_cancelled(self) -> None:
        self.cancel_button.setEnabled(False)

    def learning_started(self) -> None:
        self.learning.show()

    def learning_ended(self) -> None:
        self.learning.hide()

    def reading_ended(self) -> None:
        self.progress.hide()
        self.cancel_button.hide()
