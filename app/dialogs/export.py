"""Export the checked values as CSV, saying how many fields are still to check.

The CSV is written by :func:`recognizer.review.export_checked`; fields still to
check are listed in an ``unchecked_fields`` column so nobody takes them for
checked values. The dialog says in one line what is known of the wrong values
left (:func:`recognizer.review.residual_line`: the spot check's bound, or that
it was not measured), as the statement written beside the CSV says it.
"""

from __future__ import annotations

from pathlib import Path

from PySide6.QtWidgets import (
    QCheckBox,
    QDialog,
    QDialogButtonBox,
    QFileDialog,
    QFormLayout,
    QHBoxLayout,
    QLabel,
    QLineEdit,
    QPushButton,
    QVBoxLayout,
)

from recognizer.batch import Batch
from recognizer.review import TO_CHECK, ExportResult, export_checked, residual_figures, residual_line, state_counts

from ..look import caution_label

__all__ = ["ExportDialog"]


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
        self.residual = QLabel(residual_line(residual_figures(batch)))
        self.residual.setWordWrap(True)
        self.residual.setAccessibleName("Wrong values left")
        self.residual.setToolTip("Written in full beside the CSV, in <name>.residual.txt (Check > Spot check "
                                 "measures it)")
        layout.addWidget(self.residual)
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
