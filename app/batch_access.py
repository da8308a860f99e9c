"""What the window needs of a batch beyond the library's views: change
notifications on the main thread, and page images as Qt images.

:class:`ChangeRelay` turns the batch's change notifications, which may come
from a worker thread, into a Qt signal handled on the main thread. The worker
and the window share one open batch (a batch has one writer at a time;
:class:`recognizer.batch.store.Batch` serialises the two threads' queries and
transactions). What the views show (page list counts, one field with its
boxes, the fields of a page) comes from :mod:`recognizer.batch.queries`.
"""

from __future__ import annotations

from collections import OrderedDict

import numpy as np
from PySide6.QtCore import QObject, Signal
from PySide6.QtGui import QImage

from recognizer.batch.store import Batch, Change
from recognizer.batch.queries import FieldView

__all__ = ["ChangeRelay", "to_qimage", "ImageCache"]


class ChangeRelay(QObject):
    """Re-emits a batch's :class:`Change` notifications as a queued Qt signal."""

    changed = Signal(object)

    def __call__(self, change: Change) -> None:
        self.changed.emit(change)


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
