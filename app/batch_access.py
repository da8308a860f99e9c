"""What the window needs of a batch beyond the library's views: change
notifications on the main thread, and page images as Qt images.

:class:`ChangeRelay` turns the batch's change notifications, which may come
from a worker thread, into a Qt signal handled on the main thread. The worker
and the window share one open batch (a batch has one writer at a time;
:class:`recognizer.batch.Batch` serialises the two threads' queries and
transactions). What the views show (page list counts, one field with its
boxes, the fields of a page) comes from :mod:`recognizer.batch.queries`.

:class:`ImageCache` keeps the decoded page images, their Qt copies and the box
crops in three :class:`LruCache` s, so moving between fields does not decode
the same image twice.

:class:`SwitchGuard` keeps the clerk's review actions and a model switch
(learning during the batch reading the unchecked digits again, in a worker)
apart: a digit checked while its page is being read again could otherwise be
given the new reading, and a field could be confirmed as it reads now rather
than as the clerk saw it.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Callable, Hashable, Iterator
from contextlib import contextmanager
from typing import Generic, TypeVar

import numpy as np
from PySide6.QtCore import QObject, Signal
from PySide6.QtGui import QImage

from recognizer.batch import Batch, Change
from recognizer.batch.queries import FieldView

__all__ = ["ChangeRelay", "SwitchGuard", "SWITCH_WORDS", "to_qimage", "LruCache", "ImageCache"]

K = TypeVar("K", bound=Hashable)
V = TypeVar("V")


class ChangeRelay(QObject):
    """Re-emits a batch's :class:`Change` notifications as a queued Qt signal."""

    changed = Signal(object)

    def __call__(self, change: Change) -> None:
        self.changed.emit(change)


class SwitchGuard:
    """Keeps review actions and a model switch apart.

    A worker switching the batch to another model holds :meth:`switching`
    for the whole switch; a view commits a review action inside
    :meth:`action`, which does not wait: it yields False while a switch is
    under way (say "one moment" and commit nothing). ``generation`` counts the
    switches done: a view that remembers it when it shows something knows
    afterwards whether what it showed may have been read again.
    """

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self.generation = 0

    @contextmanager
    def switching(self) -> Iterator[None]:
        """Held by the worker while it switches the model (blocks while an action is being committed)."""
        with self._lock:
            try:
                yield
            finally:
                self.generation += 1

    @contextmanager
    def action(self) -> Iterator[bool]:
        """Around one review action: True when it may be committed now, False while a switch is under way."""
        free = self._lock.acquire(blocking=False)
        try:
            yield free
        finally:
            if free:
                self._lock.release()

    @property
    def busy(self) -> bool:
        """Whether a switch is under way."""
        return self._lock.locked()


#: What a view says when a review action meets a model switch.
SWITCH_WORDS = ("One moment: the unchecked digits are being read again with what was learned from your "
                "corrections. Nothing was saved; try again in a few seconds.")


# --------------------------------------------------------------------------- images


def to_qimage(image: np.ndarray) -> QImage:
    """An (M, N) uint8 grayscale array as a QImage (a copy, so the array may go)."""
    a = np.ascontiguousarray(image, dtype=np.uint8)
    h, w = a.shape
    return QImage(a.data, w, h, w, QImage.Format.Format_Grayscale8).copy()


class LruCache(Generic[K, V]):
    """The ``size`` values last asked for, each made by ``load(key)`` the first time.

    A value of None is kept like any other (a page without an image is not
    asked for again).
    """

    def __init__(self, load: Callable[[K], V], size: int) -> None:
        self._load = load
        self._size = size
        self._items: OrderedDict[K, V] = OrderedDict()

    def get(self, key: K) -> V:
        if key in self._items:
            self._items.move_to_end(key)
            return self._items[key]
        value = self._load(key)
        self._items[key] = value
        while len(self._items) > self._size:
            self._items.popitem(last=False)
        return value

    def __contains__(self, key: object) -> bool:
        return key in self._items

    def __len__(self) -> int:
        return len(self._items)


class ImageCache:
    """Least-recently-used caches of decoded page images, their Qt images and box crops."""

    def __init__(self, batch: Batch, *, pages: int = 6, crops: int = 4000) -> None:
        self.batch = batch
        self._pages: LruCache[int, np.ndarray | None] = LruCache(batch.page_image, pages)
        self._qpages: LruCache[int, QImage | None] = LruCache(self._page_qimage, pages)
        self._crops: LruCache[int, QImage] = LruCache(lambda digit_id: to_qimage(batch.digit_crop(digit_id)), crops)

    def page(self, page_id: int) -> np.ndarray | None:
        return self._pages.get(page_id)

    def page_qimage(self, page_id: int) -> QImage | None:
        return self._qpages.get(page_id)

    def _page_qimage(self, page_id: int) -> QImage | None:
        image = self.page(page_id)
        return None if image is None else to_qimage(image)

    def crop(self, digit_id: int) -> QImage:
        return self._crops.get(digit_id)

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
