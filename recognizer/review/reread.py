"""Reading again, with another model, every written box no person has handled."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from recognizer.batch.edits import NewReading, store_readings
from recognizer.batch.flags import refresh_states
from recognizer.batch.review_rows import open_boxes, pages_with_open_digits
from recognizer.batch.samples import StoredPages
from recognizer.batch.store import Batch, Change
from recognizer.digits.model import DigitModel
from recognizer.reading.page import reading_of
from recognizer.review.actions import record_action

__all__ = ["RereadSummary", "reread_unchecked"]


@dataclass
class RereadSummary:
    """What :func:`reread_unchecked` did: digits read again, and how many changed their reading.

    ``missing`` names the scan files (path as given -> why: "not found", "changed since it was
    read", ...) that were needed to cut boxes again and could not be used; ``kept`` counts the boxes
    that therefore kept their stored reading (their pages are otherwise read again as usual).
    ``moved`` names the scan files used from another place than the one recorded (path as given ->
    where they are now); the batch keeps the new place as their location.
    """

    digits: int = 0
    changed: int = 0
    threshold: float | None = None
    missing: dict[str, str] = field(default_factory=dict)
    kept: int = 0
    moved: dict[str, str] = field(default_factory=dict)

    def missing_lines(self) -> list[str]:
        """One line per missing scan file, for the command line and the window."""
        return [f"{path}: {reason}; the boxes it was needed for keep their reading"
                for path, reason in sorted(self.missing.items())]


def reread_unchecked(batch: Batch, model: DigitModel, *, model_path: str | None = None,
                     reviewer: str | None = None) -> RereadSummary:
    """Read again, with ``model``, every written box no person has handled.

    Boxes ``corrected``, ``confirmed`` or ``unreadable`` keep their values.
    The cells are cut again as the reader cut them (:class:`recognizer.batch.samples.StoredPages`:
    from the stored crops, else from the original scan); a box that cannot be
    cut again keeps its stored reading, and the scan files that were needed but
    not found (or changed) are named in the summary's ``missing``; a scan file
    found (its content unchanged) somewhere other than its recorded location
    gets its new place recorded (``files.location``; ``moved`` in the summary). Each box re-read
    records ``model.version``; the batch's model becomes ``model`` (and
    ``model_path`` if given), and a threshold that follows a target residual
    error is recomputed from the new model's calibration. One transaction per
    page, so an interrupted run can simply be started again.
    """
    current = batch.settings
    summary = RereadSummary(threshold=current.threshold)
    with batch.transaction() as conn:
        values: dict[str, Any] = {"model_version": model.version}
        if model_path is not None:
            values["model_path"] = model_path
        summary.threshold = current.threshold_with(model)
        if summary.threshold != current.threshold:
            values["threshold"] = summary.threshold
        batch.update_settings(conn, **values)
        record_action(conn, reviewer=reviewer, kind="reread", old=current.model_version, new=model.version)
    pages = StoredPages(batch, keep=1)
    for page_id in pages_with_open_digits(batch):
        _reread_page(batch, model, pages, page_id, summary)
    summary.missing = dict(pages.missing)
    for sha256, (given, now) in pages.moved.items():
        batch.set_location(sha256, now)
        summary.moved[given] = str(now)
    with batch.transaction() as conn:
        refresh_states(conn)
    batch.notify(Change("flags"))
    return summary


def _reread_page(batch: Batch, model: DigitModel, pages: StoredPages, page_id: int,
                 summary: RereadSummary) -> None:
    boxes = open_boxes(batch, page_id)
    cells = {b.digit_id: pages.cell(page_id, b.field_boxes[b.box]) for b in boxes}
    summary.kept += sum(1 for c in cells.values() if c is None)
    wanted = [b for b in boxes if cells[b.digit_id] is not None and not cells[b.digit_id].blank]
    if not wanted:
        return
    probs = model.predict_proba(np.stack([cells[b.digit_id].mnist for b in wanted]))
    readings = []
    for b, p in zip(wanted, probs):
        text, confidence = reading_of(p)
        summary.changed += text != b.prediction
        readings.append(NewReading(b.digit_id, p, text, confidence))
    with batch.transaction() as conn:
        store_readings(conn, readings, model_version=model.version)
        refresh_states(conn, page_ids=[page_id])
    summary.digits += len(readings)
