"""What the window reads from a batch, and a batch that two threads can share.

The reading worker and the window use the same open batch (one writer per
batch file, so a second connection cannot be opened): :class:`SharedBatch`
takes a lock around every query and write transaction. :class:`ChangeRelay`
turns the batch's change notifications, which may come from the worker
thread, into a Qt signal handled on the main thread.

The other functions fetch what the views show (page list counts, one field
with its boxes, page images as Qt images); all of it is plain reading of the
stored results, no recognition.
"""

from __future__ import annotations

import json
import threading
from collections import OrderedDict, defaultdict
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from PySide6.QtCore import QObject, Signal
from PySide6.QtGui import QImage

from recognizer.batch import Batch, Change
from recognizer.review import CONFIRMED, CORRECTED, READ, TO_CHECK, UNREADABLE, combine_states

__all__ = [
    "SharedBatch",
    "ChangeRelay",
    "PageSummary",
    "DigitView",
    "FieldView",
    "page_summaries",
    "load_field",
    "field_states",
    "to_qimage",
    "ImageCache",
]


class SharedBatch(Batch):
    """A :class:`recognizer.batch.Batch` whose queries and transactions are serialised by a lock."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._guard = threading.RLock()

    @contextmanager
    def transaction(self) -> Iterator[Any]:
        with self._guard, super().transaction() as conn:
            yield conn

    def rows(self, sql: str, params: Iterable[Any] = ()) -> list:
        with self._guard:
            return super().rows(sql, params)

    def close(self) -> None:
        with self._guard:
            super().close()


class ChangeRelay(QObject):
    """Re-emits a batch's :class:`Change` notifications as a queued Qt signal."""

    changed = Signal(object)

    def __call__(self, change: Change) -> None:
        self.changed.emit(change)


# --------------------------------------------------------------------------- pages


@dataclass(frozen=True)
class PageSummary:
    """One row of the page list."""

    page_id: int
    file: str
    page: int | None
    to_check: int
    done: int
    fields: int
    problem: str | None
    state: str
    label: str


def page_summaries(batch: Batch, page_ids: Iterable[int] | None = None) -> list[PageSummary]:
    """Per-page counts of fields to check and done, in file and page order."""
    where, params = "", []
    if page_ids is not None:
        ids = list(page_ids)
        if not ids:
            return []
        where, params = f"WHERE p.id IN ({','.join('?' * len(ids))})", ids
    states: dict[int, list[str]] = defaultdict(list)
    field_where = where.replace("p.id", "page_id")
    for r in batch.rows(f"SELECT page_id, state FROM fields {field_where}", params):
        states[r[0]].append(r[1])
    pages_per_file = {r[0]: r[1] for r in batch.rows("SELECT file_id, COUNT(*) FROM pages GROUP BY file_id")}
    out = []
    for r in batch.rows(
        f"SELECT p.id, p.page, p.problem, p.file_id, fl.path FROM pages p JOIN files fl ON fl.id = p.file_id {where} "
        "ORDER BY fl.id, p.page", params,
    ):
        s = states.get(r["id"], [])
        done = sum(1 for x in s if x in (CORRECTED, CONFIRMED, UNREADABLE))
        state = UNREADABLE if r["problem"] else combine_states(s)
        label = Path(r["path"]).name
        if r["page"] is not None and pages_per_file.get(r["file_id"], 1) > 1:
            label += f", page {r['page']}"
        out.append(PageSummary(r["id"], r["path"], r["page"], s.count(TO_CHECK), done, len(s), r["problem"],
                               state, label))
    return out


def field_states(batch: Batch, field_ids: Iterable[int] | None = None) -> dict[int, str]:
    """``{field id: state}`` for the given fields (all when None)."""
    if field_ids is None:
        rows = batch.rows("SELECT id, state FROM fields")
    else:
        ids = list(field_ids)
        if not ids:
            return {}
        rows = batch.rows(f"SELECT id, state FROM fields WHERE id IN ({','.join('?' * len(ids))})", ids)
    return {r[0]: r[1] for r in rows}


# --------------------------------------------------------------------------- one field


@dataclass(frozen=True)
class DigitView:
    """One box of a field as the window shows it."""

    digit_id: int
    box: int
    blank: bool
    read: str
    value: str | None
    confidence: float
    state: str

    @property
    def counted(self) -> bool:
        """Written, or given a digit by a person: the boxes a clerk types into."""
        return not self.blank or self.state != READ


@dataclass(frozen=True)
class FieldView:
    """One field: where it is, its boxes and their readings, its current value and state."""

    field_id: int
    page_id: int
    file: str
    page: int
    name: str
    position: int
    boxes: tuple[tuple[int, int, int, int], ...]
    value: str
    read_value: str
    whole: bool
    state: str
    digits: tuple[DigitView, ...]

    @property
    def slots(self) -> list[DigitView]:
        return [d for d in self.digits if d.counted]

    @property
    def place(self) -> str:
        return f"{Path(self.file).name}, page {self.page}, field {self.name}"


def load_field(batch: Batch, field_id: int) -> FieldView:
    """Everything the check panel shows about one field (no images; reasons come from the review queue)."""
    rows = batch.rows(
        "SELECT f.id, f.page_id, f.name, f.position, f.boxes, f.value, f.read_value, f.whole, f.state, "
        "p.page, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
        "JOIN files fl ON fl.id = p.file_id WHERE f.id = ?", (field_id,),
    )
    if not rows:
        raise KeyError(f"no field {field_id}")
    r = rows[0]
    digits = [
        DigitView(d["id"], d["box"], bool(d["blank"]), d["prediction"], d["value"], float(d["confidence"]), d["state"])
        for d in batch.rows(
            "SELECT id, box, blank, prediction, value, confidence, state FROM digits WHERE field_id = ? ORDER BY box",
            (field_id,),
        )
    ]
    return FieldView(
        r["id"], r["page_id"], r["path"], r["page"], r["name"], r["position"],
        tuple(tuple(b) for b in json.loads(r["boxes"])), r["value"], r["read_value"], bool(r["whole"]),
        r["state"], tuple(digits),
    )


def page_fields(batch: Batch, page_id: int) -> list[tuple[int, str, str, tuple[tuple[int, int, int, int], ...]]]:
    """``(field id, name, state, boxes)`` of every field of a page, for the outlines."""
    return [
        (r["id"], r["name"], r["state"], tuple(tuple(b) for b in json.loads(r["boxes"])))
        for r in batch.rows("SELECT id, name, state, boxes FROM fields WHERE page_id = ? ORDER BY position", (page_id,))
    ]


# --------------------------------------------------------------------------- images


def to_qimage(image: np.ndarray) -> QImage:
    """An (M, N) uint8 grayscale array as a QImage (a copy, so the array may go)."""
    a = np.ascontiguousarray(image, dtype=np.uint8)
    h, w = a.shape
    return QImage(a.data, w, h, w, QImage.Format.Format_Grayscale8).copy()


class ImageCache:
    """Least-recently-used cache of decoded page images and box crops."""

    def __init__(self, batch: Batch, *, pages: int = 6, crops: int = 4000) -> None:
        self.batch = batch
        self._pages: OrderedDict[int, np.ndarray | None] = OrderedDict()
        self._crops: OrderedDict[int, QImage] = OrderedDict()
        self._max_pages = pages
        self._max_crops = crops
        self._qpages: OrderedDict[int, QImage | None] = OrderedDict()

    def page(self, page_id: int) -> np.ndarray | None:
        if page_id in self._pages:
            self._pages.move_to_end(page_id)
            return self._pages[page_id]
        image = self.batch.page_image(page_id)
        self._pages[page_id] = image
        while len(self._pages) > self._max_pages:
            self._pages.popitem(last=False)
        return image

    def page_qimage(self, page_id: int) -> QImage | None:
        if page_id in self._qpages:
            self._qpages.move_to_end(page_id)
            return self._qpages[page_id]
        image = self.page(page_id)
        q = None if image is None else to_qimage(image)
        self._qpages[page_id] = q
        while len(self._qpages) > self._max_pages:
            self._qpages.popitem(last=False)
        return q

    def crop(self, digit_id: int) -> QImage:
        if digit_id in self._crops:
            self._crops.move_to_end(digit_id)
            return self._crops[digit_id]
        q = to_qimage(self.batch.digit_crop(digit_id))
        self._crops[digit_id] = q
        while len(self._crops) > self._max_crops:
            self._crops.popitem(last=False)
        return q

    def strip(self, view: FieldView, *, margin: int = 60) -> tuple[QImage, tuple[int, int]] | None:
        """The part of the page around a field, and where its top-left corner is on the page."""
        image = self.page(view.page_id)
        if image is None or not view.boxes:
            return None
        x0 = min(b[0] for b in view.boxes)
        y0 = min(b[1] for b in view.boxes)
        x1 = max(b[2] for b in view.boxes)
        y1 = max(b[3] for b in view.boxes)
        h = y1 - y0
        top, bottom = max(0, y0 - max(margin, h)), min(image.shape[0], y1 + max(margin, h) // 2)
        left, right = max(0, x0 - 4 * margin), min(image.shape[1], x1 + 4 * margin)
        return to_qimage(image[top:bottom, left:right]), (left, top)
