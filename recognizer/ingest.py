"""Reading scans into a batch: the reading stream, the batch store and the flags together.

:func:`ingest_scans` reads scan files into the batch, one transaction per
page. A file whose content (sha256) is already in the batch is not read again,
even under another name; a file interrupted part-way is resumed from the
first page not yet stored.

Each page read is stored and flagged (:meth:`recognizer.batch.store.Batch.add_result`)
in one transaction as soon as it arrives, so a crash loses at most the page
being read.
"""

from __future__ import annotations

import dataclasses
import hashlib
import os
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from recognizer.batch.queries import StoredFile, digit_states, page_fields, stored_files, stored_pages
from recognizer.batch.store import Batch
from recognizer.digits.model import DigitModel, load_model
from recognizer.forms.template_file import load_template
from recognizer.reading.page import PageRead
from recognizer.reading.stream import ReadSettings, read_scans
from recognizer.scans.files import ScanProblem
from recognizer.states import State

__all__ = ["IngestSummary", "ReadSettings", "ingest_scans"]


@dataclass
class IngestSummary:
    """What :func:`ingest_scans` did.

    ``known`` lists ``(path, path already in the batch)`` for files skipped
    because their content is already in the batch; ``stopped`` is True when
    ``should_stop`` ended the run early.
    """

    files_added: int = 0
    known: list[tuple[str, str]] = field(default_factory=list)
    pages_read: int = 0
    pages_with_problems: int = 0
    problems: list[ScanProblem] = field(default_factory=list)
    fields: int = 0
    fields_to_check: int = 0
    digits: int = 0
    digits_to_check: int = 0
    stopped: bool = False


def _sha256(path: Path) -> tuple[str, int] | ScanProblem:
    h = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for chunk in iter(lambda: fh.read(1 << 20), b""):
                h.update(chunk)
    except OSError as exc:
        return ScanProblem(path, None, f"cannot read the file ({exc.strerror or exc})")
    return h.hexdigest(), path.stat().st_size


def ingest_scans(
    batch: Batch,
    files: Iterable[str | os.PathLike],
    *,
    settings: ReadSettings = ReadSettings(),
    workers: int = 1,
    model: DigitModel | None = None,
    problems: Iterable[ScanProblem] = (),
    on_result: Callable[[PageRead | ScanProblem], None] | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> IngestSummary:
    """Read scan files into ``batch``, committing each page as soon as it is read.

    Parameters
    ----------
    batch : Batch
        Open for writing.
    files : iterable of paths
        Scan files (e.g. from :func:`recognizer.scans.files.list_scans`). A file whose
        content is already in the batch (same sha256, under any name) is not
        read again; one interrupted earlier is resumed where it stopped.
    settings : ReadSettings
        How to load and read pages (page images are always kept).
    workers : int
        Reading processes (see :func:`recognizer.reading.stream.read_scans`).
    model : DigitModel, optional
        An already loaded model (only with ``workers=1``); otherwise the model
        of ``settings.model_path`` is loaded.
    problems : iterable of ScanProblem
        Problems met while listing the files (e.g. from ``list_scans``), stored
        with the batch like the problems met while reading.
    on_result : callable, optional
        Called with each page read or problem, after it is committed.
    should_stop : callable, optional
        Asked after each page; returning True ends the run (the pages read so
        far stay in the batch, the rest is read by the next run).

    Returns
    -------
    IngestSummary
    """
    if model is not None and workers > 1:
        raise ValueError("a loaded model can only be used with workers=1; give settings.model_path instead")
    summary = IngestSummary()
    for problem in problems:
        _store_problem(batch, problem, summary)
    todo, file_ids = _files_to_read(batch, files, summary)
    if not todo:
        return summary
    model = model or load_model(settings.model_path)
    batch.add_templates(load_template(p) for p in settings.template_paths)
    _settle_threshold(batch, model, settings)
    stored = {(p.file_id, p.page) for p in stored_pages(batch) if p.page is not None}
    order = {path: i for i, path in enumerate(todo)}
    results = read_scans(
        todo,
        settings=dataclasses.replace(settings, keep_image=True),
        workers=workers,
        model=model if workers == 1 else None,
        skip=lambda path, page: (file_ids[path], page) in stored,
    )
    finished = 0
    try:
        for result in results:
            current = order[Path(result.source)]
            batch.mark_complete(file_ids[p] for p in todo[finished:current])
            finished = max(finished, current)
            page_id = batch.add_result(file_ids[Path(result.source)], result, model_version=model.version)
            _count(batch, summary, result, page_id)
            if on_result is not None:
                on_result(result)
            if should_stop is not None and should_stop():
                summary.stopped = True
                break
        else:
            batch.mark_complete(file_ids[p] for p in todo[finished:])
    finally:
        results.close()
    return summary


def _files_to_read(batch: Batch, files: Iterable[str | os.PathLike], summary: IngestSummary):
    """Hash the files; return those to read (new or unfinished) and their file ids."""
    known = {f.sha256: f for f in stored_files(batch) if f.sha256 is not None}
    todo: list[Path] = []
    file_ids: dict[Path, int] = {}
    for raw in files:
        path = Path(raw)
        digest = _sha256(path)
        if isinstance(digest, ScanProblem):
            _store_problem(batch, digest, summary)
            continue
        sha, size = digest
        row = known.get(sha)
        if row is not None and (row.complete or row.file_id in file_ids.values()):
            summary.known.append((str(path), row.path))
            continue
        if row is None:
            file_id = batch.add_file(path, sha, size)
            summary.files_added += 1
            known[sha] = StoredFile(file_id, str(path), sha, False)
        else:
            file_id = row.file_id
        todo.append(path)
        file_ids[path] = file_id
    return todo, file_ids


def _store_problem(batch: Batch, problem: ScanProblem, summary: IngestSummary) -> None:
    file_id = batch.add_file(problem.source, None, None)
    batch.add_result(file_id, problem, model_version=None)
    batch.mark_complete([file_id])
    summary.problems.append(problem)


def _settle_threshold(batch: Batch, model: DigitModel, settings: ReadSettings) -> None:
    """Set the threshold from the model's calibration if the batch has none yet."""
    current = batch.settings
    with batch.transaction() as conn:
        values: dict[str, Any] = {"model_version": model.version, "pdf_dpi": settings.pdf_dpi,
                                  "model_path": settings.model_path}
        if current.threshold is None:
            values.update(threshold=float(model.threshold_for(current.target_error)),
                          target_error=current.target_error, threshold_source="target")
        batch.update_settings(conn, **values)


def _count(batch: Batch, summary: IngestSummary, result: PageRead | ScanProblem, page_id: int) -> None:
    if isinstance(result, ScanProblem):
        summary.problems.append(result)
        return
    if result.problem:
        summary.pages_with_problems += 1
        return
    summary.pages_read += 1
    fields = page_fields(batch, page_id)
    digits = digit_states(batch, [f.field_id for f in fields]).values()
    summary.fields += len(fields)
    summary.fields_to_check += sum(1 for f in fields if f.state != State.READ)
    summary.digits += len(digits)
    summary.digits_to_check += sum(1 for state in digits if state != State.READ)
