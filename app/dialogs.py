"""The strictness dialog (how many digits go to a person) and the export dialog."""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import (
    QButtonGroup,
    QCheckBox,
    QDialog,
    QDialogButtonBox,
    QDoubleSpinBox,
    QFileDialog,
    QFormLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QRadioButton,
    QVBoxLayout,
)

from recognizer.batch.store import Batch
from recognizer.batch.queries import open_digits
from recognizer.review.checked_export import ExportResult, export_checked
from recognizer.digits.model import DigitModel
from recognizer.review.actions import TO_CHECK, ReviewError, set_target_error, set_threshold, state_counts

from .look import CAUTION

__all__ = ["StrictnessDialog", "ExportDialog", "caution_label"]


def caution_label() -> QLabel:
    label = QLabel("⚠ " + CAUTION)
    label.setWordWrap(True)
    label.setAccessibleName("Caution")
    label.setStyleSheet("QLabel { background: #FFF4D6; color: #4A3B00; border: 1px solid #E69F00; padding: 6px; }")
    return label


class StrictnessDialog(QDialog):
    """Set the target share of wrong digits (or a confidence threshold) with a live count."""

    def __init__(self, batch: Batch, model: DigitModel, parent=None) -> None:
        super().__init__(parent)
        self.setWindowTitle("How strict to be")
        self.batch, self.model = batch, model
        settings = batch.settings
        # Digits no person has handled yet: the ones a new setting can send to review or let through.
        self._open = open_digits(batch)
        self.now = self._open.to_check_now
        layout = QVBoxLayout(self)
        self.by_target = QRadioButton("&Target: share of wrong digits among those not checked")
        self.by_threshold = QRadioButton("&Confidence threshold: check every digit read less sure than")
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
        self.threshold.setAccessibleName("Confidence threshold")
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
        layout.addWidget(QLabel("Digits a person has already handled keep their values. Nothing is read again."))
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
        self.preview.setText(f"With this setting {n:,} of {len(self._open.predictions):,} digits go to a person "
                             f"(now {self.now:,}); threshold {100 * self.chosen_threshold():.2f} % sure.")

    def apply(self) -> None:
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


class ExportDialog(QDialog):
    """Export the checked CSV; warns with a count while fields are still to check."""

    def __init__(self, batch: Batch, parent=None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Export checked values")
        self.batch = batch
        self.result_info: ExportResult | None = None
        self.unchecked = state_counts(batch)["fields"][TO_CHECK]
        layout = QVBoxLayout(self)
        layout.addWidget(caution_label())
        row = QHBoxLayout()
        self.path = QLineEdit(str(Path(batch.path).with_suffix(".csv")))
        self.path.setAccessibleName("CSV file to write")
        row.addWidget(self.path, 1)
        browse = QPushButton("&Choose…")
        browse.setToolTip("Choose where to write the CSV (Alt+C)")
        browse.clicked.connect(self._browse)
        row.addWidget(browse)
        form = QFormLayout()
        file_label = QLabel("&File:")
        file_label.setBuddy(self.path)
        form.addRow(file_label, row)
        layout.addLayout(form)
        self.audit = QCheckBox("Add &audit columns (state and lowest confidence of every field)")
        layout.addWidget(self.audit)
        self.warning = QLabel()
        self.warning.setWordWrap(True)
        self.warning.setAccessibleName("Fields still to check")
        layout.addWidget(self.warning)
        self.buttons = QDialogButtonBox()
        if self.unchecked:
            self.warning.setText(
                f"<b>{self.unchecked} field{'s are' if self.unchecked != 1 else ' is'} still to check.</b> "
                "You can go back and check them, or export now: those fields are listed in an "
                "'unchecked_fields' column so nobody takes them for checked values.")
            self.export_button = self.buttons.addButton(
                f"&Export, marking {self.unchecked} unchecked", QDialogButtonBox.ButtonRole.AcceptRole)
            back = self.buttons.addButton("&Go back to checking", QDialogButtonBox.ButtonRole.RejectRole)
            back.setDefault(True)
        else:
            self.warning.setText("Every field has been checked or accepted.")
            self.export_button = self.buttons.addButton("&Export", QDialogButtonBox.ButtonRole.AcceptRole)
            self.buttons.addButton(QDialogButtonBox.StandardButton.Cancel)
        self.buttons.accepted.connect(self.do_export)
        self.buttons.rejected.connect(self.reject)
        layout.addWidget(self.buttons)
        self.resize(560, self.sizeHint().height())

    def _browse(self) -> None:
        name, _ = QFileDialog.getSaveFileName(self, "Export checked values", self.path.text(), "CSV files (*.csv)")
        if name:
            self.path.setText(name)

    def do_export(self) -> ExportResult | None:
        """Write the CSV named in the dialog (marking unchecked fields if any are left)."""
        text = self.path.text().strip()
        if not text:
            self.warning.setText("Give the name of the CSV file to write.")
            return None
        try:
            result = export_checked(self.batch, Path(text), allow_unchecked=self.unchecked > 0,
                                    audit=self.audit.isChecked())
        except OSError as exc:
            self.warning.setText(f"Could not write {text}: {exc.strerror or exc}")
            return None
        self.result_info = result
        if not result:
            self.warning.setText(result.problem or "Not exported.")
            return result
        self.accept()
        return result
