"""Reading scans into a batch in a worker thread.

:class:`ReadWorker` is a QObject moved to a QThread (see :func:`start_reading`).
It calls :func:`recognizer.batch.ingest_scans`, which commits every page as
soon as it is read, so a cancelled or killed run keeps what was read and the
next run reads only the missing pages. Its signals are delivered to the
window on the main thread.
"""

from __future__ import annotations

import threading
import traceback
from pathlib import Path

from PySide6.QtCore import QObject, Qt, QThread, Signal, Slot

from recognizer.batch import Batch, ingest_scans
from recognizer.model import DigitModel
from recognizer.pipeline import ReadSettings
from recognizer.scan import ScanProblem, count_pages

__all__ = ["ReadWorker", "start_reading"]


class ReadWorker(QObject):
    """Reads scan files into an open batch.

    Signals
    -------
    progress(done, total, text)
        After each page (``total`` counts every page of the files given,
        including pages already in the batch).
    finished(summary)
        An :class:`recognizer.batch.IngestSummary` (``stopped`` when cancelled).
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


def start_reading(worker: ReadWorker, parent: QObject) -> QThread:
    """Move ``worker`` to a new thread, wire the clean-up to both ends, and start it."""
    thread = QThread(parent)
    worker.moveToThread(thread)
    thread.started.connect(worker.run)
    # quit() is thread-safe; a direct call lets the window wait() for the thread without deadlock.
    worker.finished.connect(thread.quit, Qt.ConnectionType.DirectConnection)
    worker.failed.connect(thread.quit, Qt.ConnectionType.DirectConnection)
    thread.finished.connect(worker.deleteLater)
    thread.finished.connect(thread.deleteLater)
    thread.start()
    return thread
