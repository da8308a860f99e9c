"""How many values to check: the share of wrong digits accepted (or a confidence limit), with a live count.

The count comes from :func:`recognizer.batch.queries.open_digits` (the digits
no person has handled yet); Apply calls :func:`recognizer.review.set_target_error`
or :func:`recognizer.review.set_threshold`, which re-flag the batch.
"""

from __future__ import annotations

from PySide6.QtWidgets import (
    QButtonGroup,
    QDialog,
    QDialogButtonBox,
    QDoubleSpinBox,
    QFormLayout,
    QLabel,
    QRadioButton,
    QVBoxLayout,
)

from recognizer.batch import Batch
from recognizer.batch.queries import open_digits
from recognizer.digits.model import DigitModel
from recognizer.review import ReviewError, set_target_error, set_threshold

from ..batch_access import SwitchGuard

__all__ = ["StrictnessDialog"]


class StrictnessDialog(QDialog):
    """Set the target share of wrong digits (or a confidence threshold) with a live count."""

    def __init__(self, batch: Batch, model: DigitModel, parent=None, *, guard: SwitchGuard | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("How many values to check")
        self.batch, self.model = batch, model
        self.guard = guard
        self._seen = -1 if guard is None or guard.busy else guard.generation
        settings = batch.settings
        # Digits no person has handled yet: the ones a new setting can send to review or let through.
        self._open = open_digits(batch)
        self.now = self._open.to_check_now
        layout = QVBoxLayout(self)
        self.by_target = QRadioButton("&Target: at most this share of wrong digits among those not checked")
        self.by_threshold = QRadioButton("&Confidence limit: check every digit read less sure than")
        group = QButtonGroup(self)
        group.addButton(self.by_target)
        group.addButton(self.by_threshold)
        self.target = QDoubleSpinBox()
        self.target.setRange(0.01, 10.0)
        self.target.setDecimals(2)
        self.target.setSingleStep(0.05)
        self.target.setSuffix(" %")
        self.target.setValue(100 * settings.target_error)
        self.target.setAccessibleName("Target share of wrong digits")
        self.threshold = QDoubleSpinBox()
        self.threshold.setRange(0.0, 100.0)
        self.threshold.setDecimals(2)
        self.threshold.setSuffix(" % sure")
        self.threshold.setValue(100 * (settings.threshold if settings.threshold is not None else 0.999))
        self.threshold.setAccessibleName("Confidence limit")
        form = QFormLayout()
        form.addRow(self.by_target, self.target)
        form.addRow(self.by_threshold, self.threshold)
        layout.addLayout(form)
        self.preview = QLabel()
        self.preview.setAccessibleName("Digits to check with this setting")
        f = self.preview.font()
        f.setBold(True)
        self.preview.setFont(f)
        layout.addWidget(self.preview)
        layout.addWidget(QLabel("Digits a person has already checked keep their values. Nothing is read again."))
        buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Cancel)
        self.apply_button = buttons.addButton("&Apply", QDialogButtonBox.ButtonRole.AcceptRole)
        buttons.accepted.connect(self.apply)
        buttons.rejected.connect(self.reject)
        layout.addWidget(buttons)
        (self.by_target if settings.threshold_source == "target" else self.by_threshold).setChecked(True)
        for w in (self.target, self.threshold):
            w.valueChanged.connect(self.update_preview)
        self.by_target.toggled.connect(self.update_preview)
        self.problem: str | None = None
        self.update_preview()

    def chosen_threshold(self) -> float:
        if self.by_target.isChecked():
            return float(self.model.threshold_for(self.target.value() / 100))
        return self.threshold.value() / 100

    def preview_count(self) -> int:
        """Digits that would be to check with the chosen setting."""
        return self._open.to_check_at(self.chosen_threshold())

    def update_preview(self) -> None:
        self.target.setEnabled(self.by_target.isChecked())
        self.threshold.setEnabled(self.by_threshold.isChecked())
        n = self.preview_count()
        total = len(self._open.predictions)
        self.preview.setText(f"With this setting, {n:,} of the {total:,} digits nobody has checked yet go to a person "
                             f"(now {self.now:,}): every digit read less than {100 * self.chosen_threshold():.2f} % "
                             "sure.")

    def apply(self) -> None:
        if self.guard is None:
            self._apply()
            return
        with self.guard.action() as free:
            if not free or self.guard.generation != self._seen:
                self.problem = ("the model changed while this was open (learning from your corrections); "
                                "close this and open it again")
                self.preview.setText(f"Not applied: {self.problem}.")
                return
            self._apply()

    def _apply(self) -> None:
        try:
            if self.by_target.isChecked():
                set_target_error(self.batch, self.target.value() / 100, model=self.model)
            else:
                set_threshold(self.batch, self.threshold.value() / 100)
        except ReviewError as exc:
            self.problem = str(exc)
            self.preview.setText(f"Not applied: {exc}")
            return
        self.accept()
