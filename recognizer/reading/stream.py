"""Reading many scans: pages streamed through a :class:`~recognizer.reading.page.PageReader`,
in this process, in a pool of worker processes or on a Dask cluster
(:mod:`recognizer.reading.cluster`).

:func:`read_scans` is what the command line, the batch store and the window
all use. It yields one result per page, in the order of the input files and
their pages: a :class:`~recognizer.reading.page.PageRead`, or a
:class:`~recognizer.scans.files.ScanProblem` for a file or page that could not be
read. It never holds more than a few pages at a time: with ``workers=1``
pages are decoded and read one after the other; with more workers each
process loads its own pages by (file, page number) and at most two pages per
worker are in flight; on a cluster likewise, two pages per worker thread, the
pages read ahead waiting on the workers.

A damaged scan never stops the stream: every file is opened, counted and
decoded inside the per-file guard of :mod:`recognizer.scans.files`, and an
error of the reader itself on one page becomes that page's
:class:`~recognizer.scans.files.ScanProblem` too (worded as an error of the
program, to be reported), so the pages after it are still read.
"""

from __future__ import annotations

import multiprocessing
import os
import threading
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import Future, ProcessPoolExecutor
from dataclasses import dataclass
from queue import Empty, Full, Queue
from pathlib import Path

from recognizer.digits.model import DigitModel, load_model
from recognizer.page.boxes import PreparedPage
from recognizer.reading.memory import reuse_freed_blocks
from recognizer.reading.page import PageRead, PageReader, read_or_problem
from recognizer.scans.files import DEFAULT_MAX_PIXELS, DEFAULT_PDF_DPI, Page, ScanProblem, count_pages, iter_pages, load_page
from recognizer.scans.limits import MAX_PAGE_PROBLEMS_PER_FILE
from recognizer.forms.template_file import load_template

__all__ = ["ReadSettings", "read_scans", "PageJob", "page_jobs"]


@dataclass(frozen=True)
class ReadSettings:
    """How pages are loaded and read (plain values, so it can go to a worker).

    ``template_paths`` are form template files (:mod:`recognizer.forms.template_file`);
    with any, every page is read with the template it fits best. ``cluster``,
    when set, is a Dask scheduler address (``tcp://host:8786``) or
    ``local:N``: the pages are read there (:mod:`recognizer.reading.cluster`)
    instead of in this process or a pool, whatever ``workers`` says.
    """

    model_path: str | None = None
    pdf_dpi: float = DEFAULT_PDF_DPI
    max_pixels: int = DEFAULT_MAX_PIXELS
    keep_image: bool = False
    template_paths: tuple[str, ...] = ()
    cluster: str | None = None


@dataclass(frozen=True)
class PageJob:
    """One page to read: a file and a page number from 1."""

    source: Path
    page: int


def page_jobs(
    files: Iterable[str | os.PathLike],
    *,
    max_pixels: int = DEFAULT_MAX_PIXELS,
    skip: Callable[[Path, int], bool] | None = None,
) -> Iterator[PageJob | ScanProblem]:
    """List the pages of ``files`` without decoding them.

    The count is the guarded probe :func:`~recognizer.scans.files.count_pages`
    (headers only): a file it refuses is one problem here. ``skip(path, page)``
    may leave out pages already read (the batch store uses it when a batch is
    extended).
    """
    for raw in files:
        path = Path(raw)
        n = count_pages(path, max_pixels=max_pixels)
        if isinstance(n, ScanProblem):
            yield n
            continue
        for number in range(1, n + 1):
            if skip is None or not skip(path, number):
                yield PageJob(path, number)


def read_scans(
    files: Iterable[str | os.PathLike],
    *,
    settings: ReadSettings = ReadSettings(),
    workers: int = 1,
    model: DigitModel | None = None,
    skip: Callable[[Path, int], bool] | None = None,
) -> Iterator[PageRead | ScanProblem]:
    """Read every page of ``files``; yield results in input order.

    Parameters
    ----------
    files : iterable of paths
        Scan files (see :func:`recognizer.scans.files.list_scans` for folders).
    settings : ReadSettings
        Model file, PDF resolution, pixel limit, whether to keep page images.
    workers : int
        1 reads in this process; more starts that many worker processes.
        Unused when ``settings.cluster`` is set.
    model : DigitModel, optional
        An already loaded model for ``workers=1`` or a cluster, which gets
        this very model (otherwise loaded from ``settings.model_path``; pool
        workers always load their own).
    skip : callable, optional
        ``skip(path, page) -> bool`` leaves out pages already read.
    """
    if workers < 1:
        raise ValueError(f"workers must be at least 1, got {workers}")
    reuse_freed_blocks()
    if settings.cluster:
        from recognizer.reading.cluster import read_on_cluster  # Dask only when asked for

        jobs = page_jobs(files, max_pixels=settings.max_pixels, skip=skip)
        yield from _few_problems_per_file(read_on_cluster(jobs, settings, model=model))
        return
    if workers == 1:
        reader = _reader(model or load_model(settings.model_path), settings)
        if skip is None:
            pages = iter_pages(files, pdf_dpi=settings.pdf_dpi, max_pixels=settings.max_pixels)
        else:
            pages = _few_problems_per_file(
                job if isinstance(job, ScanProblem)
                else load_page(job.source, job.page, pdf_dpi=settings.pdf_dpi, max_pixels=settings.max_pixels)
                for job in page_jobs(files, max_pixels=settings.max_pixels, skip=skip)
            )
        for item in _decoded_ahead(_prepared(pages, reader)):
            yield item if isinstance(item, ScanProblem) else _read_page(reader, *item)
        return
    yield from _few_problems_per_file(_read_in_pool(files, settings, workers, skip))


def _read_page(reader: PageReader, page: Page, prepared: PreparedPage | None = None) -> PageRead | ScanProblem:
    """``reader.read(page)``, an error of the reader on this page made its problem line."""
    return read_or_problem(reader, page, prepared)


def _prepared(pages: Iterator[Page | ScanProblem], reader: PageReader
              ) -> Iterator[tuple[Page, PreparedPage | None] | ScanProblem]:
    """Each page with :meth:`PageReader.prepare` of it (run where this is iterated: the decoding thread).

    An error while preparing leaves the page unprepared: the reader then
    meets it again on this page alone, where it becomes the page's problem.
    """
    try:
        for item in pages:
            if isinstance(item, ScanProblem):
                yield item
                continue
            try:
                prepared = reader.prepare(item)
            except Exception:  # met again by reader.read, on this page alone
                prepared = None
            yield item, prepared
    finally:
        if hasattr(pages, "close"):
            pages.close()


def _few_problems_per_file(results: Iterable) -> Iterator:
    """Pass ``results`` on, with at most :data:`MAX_PAGE_PROBLEMS_PER_FILE` page problems per file.

    The pages of a file are listed before they are loaded when they are read
    by page number (a pool, or a batch being extended); a file whose pages
    are all damaged would otherwise give one line per page. The lines past
    the limit become one line per file; the pages read well all pass.
    """
    counts: dict[Path, int] = {}
    hidden: dict[Path, int] = {}
    last: Path | None = None

    def summary(source: Path) -> ScanProblem:
        return ScanProblem(source, None, f"{hidden.pop(source)} more damaged pages of this file are not "
                           f"listed one by one (the first {MAX_PAGE_PROBLEMS_PER_FILE} are)")

    try:
        for item in results:
            source = Path(item.source)
            if last in hidden and source != last:
                yield summary(last)
            last = source
            if isinstance(item, ScanProblem) and item.page is not None:
                counts[source] = counts.get(source, 0) + 1
                if counts[source] > MAX_PAGE_PROBLEMS_PER_FILE:
                    hidden[source] = hidden.get(source, 0) + 1
                    continue
            yield item
        if last in hidden:
            yield summary(last)
    finally:
        if hasattr(results, "close"):
            results.close()


def _decoded_ahead(pages: Iterator, depth: int = 1) -> Iterator:
    """Yield from ``pages`` while a thread decodes (and prepares, :func:`_prepared`) the next ``depth`` pages.

    Decoding (Pillow, pypdfium2) and reading (OpenCV, numpy) both release the
    interpreter lock for most of their work, so on two cores the next page is
    decoded and its lighting worked out while this one is read
    (``bench/bench_read.py``). At most ``depth + 1`` pages are held. An
    exception met while decoding is raised here, in the caller's thread; when
    the caller stops early the thread stops too.
    """
    done = object()
    queue: Queue = Queue(maxsize=depth)
    stop = threading.Event()

    def produce() -> None:
        try:
            for item in pages:
                while not stop.is_set():
                    try:
                        queue.put((item, None), timeout=0.1)
                        break
                    except Full:
                        continue
                if stop.is_set():
                    return
            queue.put((done, None))
        except BaseException as exc:  # handed to the consumer
            queue.put((done, exc))

    thread = threading.Thread(target=produce, name="inkcount-decode", daemon=True)
    thread.start()
    try:
        while True:
            item, error = queue.get()
            if item is done:
                if error is not None:
                    raise error
                return
            yield item
    finally:
        stop.set()
        while thread.is_alive():
            try:
                queue.get_nowait()
            except Empty:
                thread.join(timeout=0.05)
        if hasattr(pages, "close"):
            pages.close()


def _reader(model: DigitModel, settings: ReadSettings) -> PageReader:
    templates = [load_template(p) for p in settings.template_paths]
    return PageReader(model, keep_image=settings.keep_image, templates=templates)


def _read_job(reader: PageReader, job: PageJob, settings: ReadSettings) -> PageRead | ScanProblem:
    page = load_page(job.source, job.page, pdf_dpi=settings.pdf_dpi, max_pixels=settings.max_pixels)
    return page if isinstance(page, ScanProblem) else _read_page(reader, page)


# Worker processes: one reader per process, built once.
_worker_reader: PageReader | None = None
_worker_settings: ReadSettings | None = None


def _init_worker(settings: ReadSettings) -> None:
    global _worker_reader, _worker_settings
    import cv2

    cv2.setNumThreads(1)  # one page at a time on one core per worker process
    reuse_freed_blocks()
    _worker_settings = settings
    _worker_reader = _reader(load_model(settings.model_path), settings)


def _worker_read(job: PageJob) -> PageRead | ScanProblem:
    assert _worker_reader is not None and _worker_settings is not None
    return _read_job(_worker_reader, job, _worker_settings)


def _read_in_pool(files, settings: ReadSettings, workers: int, skip) -> Iterator[PageRead | ScanProblem]:
    # Load the model and templates once here first so that a bad file is one
    # clear error, not one per worker.
    load_model(settings.model_path)
    for path in settings.template_paths:
        load_template(path)
    pending: deque[Future | ScanProblem] = deque()
    # Workers are started from a fresh server process, never forked from this one: a fork copies
    # the locks other threads hold (the decoding thread, the window's, a Dask client's) and can hang.
    context = multiprocessing.get_context("forkserver" if "forkserver" in multiprocessing.get_all_start_methods()
                                          else "spawn")
    with ProcessPoolExecutor(max_workers=workers, mp_context=context, initializer=_init_worker,
                             initargs=(settings,)) as pool:
        try:
            for job in page_jobs(files, max_pixels=settings.max_pixels, skip=skip):
                pending.append(job if isinstance(job, ScanProblem) else pool.submit(_worker_read, job))
                while len(pending) > 2 * workers:
                    yield _result(pending.popleft())
            while pending:
                yield _result(pending.popleft())
        finally:
            for item in pending:
                if isinstance(item, Future):
                    item.cancel()


def _result(item: Future | ScanProblem) -> PageRead | ScanProblem:
    return item if isinstance(item, ScanProblem) else item.result()
