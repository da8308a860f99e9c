"""Retrain from this batch's corrections: progress, the result in plain words,
saving the new model, and switching the batch to it.

The dialog runs :class:`app.workers.RetrainWorker`, then shows the figures
before and after (the batch's held-back checked digits, the 5,000 held-out
MNIST digits, how many digits it learned from). An accepted model can be
saved and used for the batch (:class:`app.workers.RereadWorker`: the
unchecked digits are read again; corrected and confirmed values stay). A
refused model is explained and offers nothing to save. The dialog asks first
(what it will do, how long it takes) and starts only on *Start*; while it
retrains, *Stop* (or Esc, or closing the dialog) stops it within a moment
(the library asks before every mini-batch) and nothing is written. Reading
the digits again with a new model is short and is not stopped. It grows to show its words whole each time they
change (a wrapped label does not make a shown dialog taller by itself); it is window-modal, so no review action lands in the
middle of a re-read. Its workers are started by ``start_job`` (the window
passes :meth:`app.controller.BatchController.start_job`, so the batch is not
closed under them).
"""

from __future__ import annotations

import math
from pathlib import Path

from collections.abc import Callable

from PySide6.QtCore import Signal
from PySide6.QtWidgets import QDialog, QDialogButtonBox, QFileDialog, QLabel, QProgressBar, QPushButton, QVBoxLayout

from recognizer.batch import Batch
from recognizer.digits.model import DigitModel
from recognizer.digits.retrain import RetrainResult, RetrainSettings
from recognizer.review import RereadSummary

from ..workers import Job, RereadWorker, RetrainWorker, Worker

__all__ = ["RetrainDialog", "result_in_words", "default_model_path"]


def _pct(x: float) -> str:
    return "–" if x is None or math.isnan(x) else f"{100 * x:.1f} %"


#: The library's words for its refusals, and a clerk's.
_PLAIN = (("held-out accuracy", "accuracy on the digits it never saw"),
          ("held-back new samples", "checked digits kept aside"), ("held-back", "kept aside"),
          ("held-out", "never seen"), ("new samples", "checked digits"))


def plain_reason(reason: str) -> str:
    """A refusal of the retraining library in a clerk's words (no "held-out", "samples")."""
    for words, plain in _PLAIN:
        reason = reason.replace(words, plain)
    return reason


def result_in_words(result: RetrainResult) -> str:
    """The before/after figures of a retraining as a short HTML text."""
    f = result.figures
    before, after = f["before"], f["after"]
    lines = [
        f"Learned from <b>{f['n_learned']:,}</b> digits a person corrected or confirmed in this batch; "
        f"<b>{f['n_held_back']:,}</b> more were kept aside to test it.",
        "<table cellspacing='6'><tr><th></th><th>before</th><th>after</th></tr>"
        f"<tr><td>Accuracy on this batch's checked digits kept aside ({f['n_held_back']:,})</td>"
        f"<td>{_pct(before['new_samples'])}</td><td><b>{_pct(after['new_samples'])}</b></td></tr>"
        f"<tr><td>Accuracy on {f['n_heldout']:,} handwritten digits it never saw (a standard test set)</td>"
        f"<td>{_pct(before['heldout'])}</td><td><b>{_pct(after['heldout'])}</b></td></tr></table>",
    ]
    if result.accepted:
        tolerance = result.model.metadata.get("retraining", {}).get("settings", {}).get("heldout_tolerance", 0.0)
        lines.append("The new model is not worse on this batch's digits kept aside, and on the digits it never "
                     f"saw it stays within {100 * tolerance:.1f} points of the old one, so it can be used.")
    else:
        lines.append("<b>The new model is not used: it is worse.</b> "
                     + " ".join(f"{r[0].upper()}{r[1:]}." for r in map(plain_reason, result.reasons))
                     + " Check more fields (more digits of more writers), then try again.")
    return "<p>" + "</p><p>".join(lines) + "</p>"


def default_model_path(batch_path: Path) -> Path:
    """``<batch>-retrained.npz`` next to the batch (``-2``, ``-3``… when taken)."""
    batch_path = Path(batch_path)
    path = batch_path.with_name(f"{batch_path.stem}-retrained.npz")
    n = 2
    while path.exists():
        path = batch_path.with_name(f"{batch_path.stem}-retrained-{n}.npz")
        n += 1
    return path


class RetrainDialog(QDialog):
    """Retrain the batch's model on its checked digits, then save and use the new model.

    Signals
    -------
    retrain_done(result)
        Retraining has ended and its thread has stopped: the :class:`RetrainResult`,
        or None when retraining failed (``problem`` says why).
    model_used(model, path, summary)
        The batch now uses the saved model (the re-reading thread has stopped);
        ``summary`` is the :class:`RereadSummary`.
    """

    retrain_done = Signal(object)
    model_used = Signal(object, object, object)

    def __init__(self, batch: Batch, model: DigitModel, *, settings: RetrainSettings = RetrainSettings(),
                 start_job: Callable[[Worker], Job] | None = None, parent=None) -> None:
        super().__init__(parent)
        self._start_job = start_job or (lambda worker: Job(worker, self))
        self.setWindowTitle("Retrain from this batch's corrections")
        self.setMinimumWidth(560)
        self.batch, self.model = batch, model
        self.result: RetrainResult | None = None
        self.problem: str | None = None
        self.saved_path: Path | None = None
        self.job: Job | None = None
        self.summary: RereadSummary | None = None
        self._then = lambda: None
        layout = QVBoxLayout(self)
        self.text = QLabel()
        self.text.setWordWrap(True)
        self.text.setAccessibleName("Retraining")
        layout.addWidget(self.text)
        self.busy = QProgressBar()
        self.busy.setRange(0, 0)
        self.busy.setAccessibleName("Retraining progress")
        layout.addWidget(self.busy)
        self.step = QLabel()
        self.step.setWordWrap(True)
        self.step.setAccessibleName("Retraining step")
        layout.addWidget(self.step)
        buttons = QDialogButtonBox()
        self.save_button = QPushButton("&Save the new model…")
        self.save_button.setToolTip("Write the new model file (default: next to the batch)")
        self.use_button = QPushButton("&Use it for this batch")
        self.use_button.setToolTip("Read this batch's unchecked digits again with the new model; "
                                   "corrected and confirmed values stay as they are")
        self.close_button = QPushButton("&Close")
        self.start_button = QPushButton("&Start")
        self.start_button.setToolTip("Train a new model from the digits checked in this batch")
        self.stop_button = QPushButton("S&top")
        self.stop_button.setToolTip("Stop retraining; nothing is written and the batch keeps its model")
        for b, role in ((self.start_button, QDialogButtonBox.ButtonRole.ActionRole),
                        (self.stop_button, QDialogButtonBox.ButtonRole.ActionRole),
                        (self.save_button, QDialogButtonBox.ButtonRole.ActionRole),
                        (self.use_button, QDialogButtonBox.ButtonRole.AcceptRole),
                        (self.close_button, QDialogButtonBox.ButtonRole.RejectRole)):
            buttons.addButton(b, role)
            b.setEnabled(False)
        self.save_button.hide()
        self.use_button.hide()
        self.stop_button.hide()
        self.start_button.setEnabled(True)
        self.start_button.setDefault(True)
        self.close_button.setEnabled(True)
        self.start_button.clicked.connect(self.start)
        self.stop_button.clicked.connect(self.stop)
        self.save_button.clicked.connect(lambda: self.save_model())
        self.use_button.clicked.connect(self.use_model)
        self.close_button.clicked.connect(self.reject)
        layout.addWidget(buttons)
        self._settings = settings
        self._retraining: RetrainWorker | None = None
        self.busy.hide()
        self.text.setText(f"Train a new model from the digits people checked in <b>{Path(batch.path).name}</b>, so "
                          "that it reads this office's handwriting better?<br><br>It takes a minute or two, and you "
                          "can stop it at any time. Nothing in the batch changes until you choose to use the new "
                          "model; it is used only if it reads at least as well as the one in use.")

    def start(self) -> None:
        """Start retraining (the *Start* button)."""
        if self.running or self.result is not None:
            return
        self.start_button.hide()
        self._start(self.batch, self.model, self._settings)

    def stop(self) -> None:
        """Stop a running retraining (the *Stop* button, Esc): nothing is written."""
        if self._retraining is not None and self.running:
            self._retraining.cancel()
            self.stop_button.setEnabled(False)
            self.step.setText("Stopping…")

    # ---- running

    @property
    def running(self) -> bool:
        return self.job is not None

    def wait(self) -> None:
        """Block until the running worker (if any) has ended."""
        if self.job is not None:
            self.job.wait()

    def _run(self, worker: RetrainWorker | RereadWorker, then) -> None:
        """Run ``worker`` in its thread; call ``then()`` once the thread has stopped."""
        self._then = then
        self.busy.show()
        self.close_button.setEnabled(False)
        self.job = self._start_job(worker)
        self.job.ended.connect(self._on_job_ended)

    def _on_job_ended(self, _job: Job) -> None:
        self.job = None
        self.busy.hide()
        self.close_button.setEnabled(True)
        self._then()

    def _start(self, batch: Batch, model: DigitModel, settings: RetrainSettings) -> None:
        self.text.setText(f"Training a new model from the digits checked in {Path(batch.path).name}. "
                          "This takes a minute or two; <b>Stop</b> ends it and nothing is written.")
        worker = RetrainWorker(batch, model, settings)
        self._retraining = worker
        self.stop_button.show()
        self.stop_button.setEnabled(True)
        worker.progress.connect(self.step.setText)
        worker.finished.connect(self._on_retrained)
        worker.failed.connect(self._on_failed)
        self._run(worker, self._retrain_ended)

    def _fit(self) -> None:
        """Grow (never beyond the screen) so the words are not cut off after they changed."""
        layout = self.layout()
        layout.activate()
        width = max(self.width(), self.minimumWidth())
        height = layout.totalHeightForWidth(width) if layout.hasHeightForWidth() else layout.sizeHint().height()
        screen = self.screen().availableGeometry() if self.screen() is not None else None
        if screen is not None:
            height = min(height, screen.height() - 60)
        self.setMinimumHeight(height)
        self.resize(width, max(self.height(), height))

    def _on_failed(self, message: str) -> None:
        self.problem = message
        self.text.setText(message.replace("\n", "<br>"))
        self.step.clear()
        self._fit()

    def _on_retrained(self, result: RetrainResult) -> None:
        self.result = result
        self.text.setText(result_in_words(result))
        self.step.setText(f"New model {result.model.version}, retrained in {result.figures.get('seconds', 0):.0f} s."
                          if result.accepted else "Nothing was written.")
        self._fit()

    def _retrain_ended(self) -> None:
        self._retraining = None
        self.stop_button.hide()
        accepted = self.result is not None and self.result.accepted
        for b in (self.save_button, self.use_button):
            b.setVisible(accepted)
            b.setEnabled(accepted)
        self._fit()
        self.retrain_done.emit(self.result)

    # ---- saving and using

    def save_model(self, path: Path | None = None) -> Path | None:
        """Write the accepted model to ``path`` (asked with a file dialog when None); return where."""
        if self.result is None or not self.result.accepted:
            return None
        if path is None:
            name, _ = QFileDialog.getSaveFileName(self, "Save the new model", str(default_model_path(self.batch.path)),
                                                  "Digit models (*.npz)")
            if not name:
                return None
            path = Path(name)
        path = Path(path)
        try:
            self.result.model.save(path)
        except OSError as exc:
            self.step.setText(f"Not saved: {exc.strerror or exc}.")
            return None
        self.saved_path = path
        self.step.setText(f"Saved as {path}.")
        return path

    def use_model(self) -> None:
        """Switch the batch to the new model (saving it first if needed) and re-read its unchecked digits."""
        if self.result is None or not self.result.accepted or self.running:
            return
        if self.saved_path is None and self.save_model() is None:
            return
        self.save_button.setEnabled(False)
        self.use_button.setEnabled(False)
        self.step.setText("Reading the unchecked digits again with the new model…")
        worker = RereadWorker(self.batch, self.result.model, self.saved_path)
        worker.finished.connect(self._on_reread)
        worker.failed.connect(self._on_failed)
        self._run(worker, self._reread_ended)

    def _on_reread(self, summary: RereadSummary) -> None:
        self.summary = summary
        missing = summary.missing
        gone = (f" {len(missing):,} scan file(s) needed for it were not found ({', '.join(sorted(map(str, missing))[:3])}"
                f"{'…' if len(missing) > 3 else ''}); their boxes keep their reading." if missing else "")
        self.step.setText(f"This batch now uses {self.result.model.version}: {summary.digits:,} unchecked digits "
                          f"read again, {summary.changed:,} of them differently.{gone}")
        self._fit()

    def _reread_ended(self) -> None:
        if self.summary is not None:
            self.model_used.emit(self.result.model, self.saved_path, self.summary)

    def reject(self) -> None:
        if self.running:
            if self._retraining is not None:
                self.stop()
            else:
                self.step.setText("Please wait: the unchecked digits are being read again (a few seconds).")
            return
        super().reject()
