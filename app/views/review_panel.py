"""Checking fields one at a time, keyboard first.

The panel shows one flagged field large: each box's crop, the value read (or
typed) under it and a bar for the reader's confidence, with a strip of the
page around the field for context.

Keys (the panel has the focus)::

    0-9         overwrite the box under the cursor and move on (the first key
                replaces the value read in that box)
    Delete      "no digit in this box"
    Backspace   back to the previous box, restoring what was there
    (past the last box, digits typed make the value longer than the boxes
    found: a box the reader missed, a broken wall; Backspace takes them back)
    Left/Right  move the cursor without changing anything (Home/End: first/last box)
    Enter       save (confirm as it stands, or the value typed) and go to the next field
    Ctrl+U, *   the field cannot be read
    Ctrl+Z      undo the last action and go back to that field
    PgDn/PgUp   next / previous field without saving
    Esc         forget what was typed

The cursor starts on the first box the reader was unsure of (if none, the
first written box), so typing the one wrong digit replaces that digit. The
boxes scale down to fit the panel's width instead of widening it; where they
would grow too small to read (an 8-box date on a narrow panel) they go on two
rows instead. Enter on a
field a person already handled (shown again from the page, or restored on
reopening) writes nothing and goes on; a restored place that is done goes on
to the next field still to check.

Every action goes through :mod:`recognizer.review` and is committed at once.
The next fields' crops and page strips are prepared while the clerk looks at
the current one, so moving on never waits for the disk.

When learning during the batch reads the unchecked digits again (a
``"flags"`` change), the field shown stays on screen, even if it is no
longer to check, and the queue goes on from it. If its reading changed, it
is drawn again and the next Enter only says so (look again, then Enter).
Actions are committed inside the window's :class:`app.batch_access.SwitchGuard`
(``guard``): while a switch is under way nothing is saved, and a field
read again since it was drawn is drawn again instead of being saved.

Spot check (:meth:`ReviewPanel.start_spot_check`): the panel walks the
latest spot check's drawn fields instead (:func:`recognizer.review.audit_status`),
titled "Spot check: 40 of 50 left", each field marked as a spot check. The
keys are the same: Enter says the value accepted is right, typing corrects
it (which fixes the value and counts as an error found). When every drawn
field is answered the panel says what the spot check found and goes back to
the fields to check.

This module is longer than 600 lines: the panel's keys, drawing, queue
place and guarded actions share one field-shown state and are kept together.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass

from PySide6.QtCore import QRectF, QSize, Qt, QTimer, Signal
from PySide6.QtGui import QColor, QFont, QPainter, QPen, QPixmap
from PySide6.QtWidgets import (
    QComboBox,
    QFrame,
    QGridLayout,
    QHBoxLayout,
    QLabel,
    QSizePolicy,
    QVBoxLayout,
    QWidget,
)

from recognizer.batch import Batch, Change
from recognizer.batch.queries import FieldView, field_states, load_field, page_summaries
from recognizer.review import (
    CONFIRMED,
    CORRECTED,
    TO_CHECK,
    UNREADABLE,
    ReviewError,
    ReviewItem,
    ReviewQueue,
    audit_status,
    confirm,
    mark_unreadable,
    residual_figures,
    residual_line,
    set_field,
    undo,
)
from recognizer.states import NOT_A_DIGIT_MARK, reasons_in_words

from ..batch_access import ImageCache, SwitchGuard
from ..look import STATE_MARKS, STATE_WORDS

__all__ = ["ReviewPanel", "BoxTile", "ORDER_CHOICES", "KEY_HELP"]

#: Review orders offered, with their words.
ORDER_CHOICES = (("page", "Page by page"), ("confidence", "Least sure first"))
KEY_HELP = ("0-9: replace the digit in the blue box · ←/→, Home/End: move the blue box · Enter: save and go to the next field · "
            "Delete: no digit in this box · Backspace: previous box · past the last box: more digits · "
            "Ctrl+U or *: field unreadable · "
            "Ctrl+Z: undo · PgDn/PgUp: next/previous field without saving · Esc: forget what you typed")
#: States a person set: Enter on such a field writes nothing again.
_HANDLED = (CONFIRMED, CORRECTED, UNREADABLE)
_PREFETCH = 4
_LOW = QColor("#D55E00")
_GOOD = QColor("#009E73")
_CURSOR = QColor("#0072B2")
#: Said when learning changed the reading of the field shown.
CHANGED_WORDS = ("Learning from your corrections changed the reading of this field: look again before saving "
                 "(what you typed is kept).")
#: Said over a field of a spot check.
SPOT_WORDS = ("<b>Spot check</b>: this value was accepted without a person. Enter if it is right; "
              "type the right value if it is not.")
#: Said when an action waits for a model switch to end.
WAIT_WORDS = ("One moment: the unchecked digits are being read again with what was learned from your "
              "corrections; this is saved as soon as that ends (any other key: not saved).")
#: Said when Enter meets a field whose reading changed since the clerk last looked.
SAVE_AGAIN_WORDS = "This field's reading changed (learning); it is shown as it reads now. Enter again saves it."
#: Said when a digit is typed past the last box found (a broken wall can hide a box).
BEYOND_WORDS = ("Typed past the last box found: the value now has more digits than boxes "
                "(for a box the reader missed). Backspace takes it back.")


def _more(n: int) -> str:
    """The value label's note on digits typed past the last box."""
    return "" if not n else f"{n} past the last box, "


def _typing_slots(view: FieldView) -> list:
    """The boxes the clerk types into: the written ones (and those a person gave a digit); all of them
    for a field read as empty, so that a value the reader missed can be typed (a spot check draws such fields)."""
    return view.slots or list(view.digits)


def _first_cursor(view: FieldView) -> int:
    """Where typing starts: the first box the reader was unsure of, else the first written box, else 0."""
    slots = _typing_slots(view)
    for k, d in enumerate(slots):
        if d.state == TO_CHECK:
            return k
    return next((k for k, d in enumerate(slots) if not d.blank), 0)


def _readings(view: FieldView) -> tuple:
    """What the clerk sees of a field's values: the value, and each box's reading and value."""
    return view.value, view.whole, tuple((d.digit_id, d.blank, d.read, d.value) for d in view.digits)


class BoxTile(QWidget):
    """One box of the field: crop, value and confidence bar, painted."""

    SIZE = QSize(86, 150)
    #: The smallest crop side when many boxes share the panel's width.
    MIN_SIDE = 40
    #: Below this crop side a field's boxes go on two rows (or more) rather than shrink further.
    LEGIBLE_SIDE = 64

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setFixedSize(self.SIZE)
        self.pixmap: QPixmap | None = None
        self.text = ""
        self.typed = False
        self.cursor = False
        self.flagged = False
        self.blank = False
        self.confidence: float | None = None

    def set_side(self, side: int) -> None:
        """Make the crop ``side`` pixels wide (the value and bar keep their height under it)."""
        side = max(self.MIN_SIDE, min(self.SIZE.width(), side))
        if side != self.width():
            self.setFixedSize(side, side + self.SIZE.height() - self.SIZE.width())

    def paintEvent(self, event) -> None:  # noqa: N802 (Qt name)
        p = QPainter(self)
        p.setRenderHint(QPainter.RenderHint.Antialiasing)
        w = self.width()
        crop_rect = QRectF(3, 3, w - 6, w - 6)
        p.fillRect(crop_rect, QColor("white"))
        if self.pixmap is not None:
            scaled = self.pixmap.scaled(crop_rect.size().toSize(), Qt.AspectRatioMode.KeepAspectRatio,
                                        Qt.TransformationMode.SmoothTransformation)
            p.drawPixmap(int(crop_rect.center().x() - scaled.width() / 2),
                         int(crop_rect.center().y() - scaled.height() / 2), scaled)
        if self.cursor:
            p.setPen(QPen(_CURSOR, 4))
        elif self.flagged:
            p.setPen(QPen(_LOW, 3, Qt.PenStyle.DashLine))
        else:
            p.setPen(QPen(QColor("#999999"), 1))
        p.drawRect(crop_rect)
        if self.flagged:
            p.setPen(_LOW)
            f = QFont()
            f.setBold(True)
            f.setPixelSize(14)
            p.setFont(f)
            p.drawText(QRectF(crop_rect.right() - 16, crop_rect.top() + 1, 14, 16), Qt.AlignmentFlag.AlignCenter, "?")
        f = QFont()
        f.setPixelSize(30 if w >= 60 else 22)
        f.setBold(self.typed)
        p.setFont(f)
        p.setPen(_CURSOR if self.typed else self.palette().text().color())
        text_rect = QRectF(0, w, w, 36)
        p.drawText(text_rect, Qt.AlignmentFlag.AlignCenter, self.text if self.text else "–")
        if self.confidence is not None and not self.blank:
            bar = QRectF(6, w + 40, w - 12, 8)
            p.setPen(QPen(QColor("#777777"), 1))
            p.setBrush(Qt.BrushStyle.NoBrush)
            p.drawRect(bar)
            p.fillRect(QRectF(bar.left(), bar.top(), bar.width() * max(0.0, min(1.0, self.confidence)), bar.height()),
                       _LOW if self.flagged else _GOOD)
            f.setPixelSize(11 if w >= 70 else 9)
            f.setBold(False)
            p.setFont(f)
            p.setPen(self.palette().text().color())
            words = f"sure {100 * self.confidence:.1f} %" if w >= 70 else f"{100 * self.confidence:.0f} %"
            p.drawText(QRectF(0, w + 48, w, 14), Qt.AlignmentFlag.AlignCenter, words)
        p.end()


@dataclass
class _Edit:
    """What the clerk typed into the field shown: one entry per box (None = untouched), and the
    digits typed past the last box (a field found with fewer boxes than it has, a wall broken)."""

    typed: list[str | None]
    cursor: int = 0
    beyond: str = ""

    @property
    def touched(self) -> bool:
        return bool(self.beyond) or any(t is not None for t in self.typed)


class ReviewPanel(QFrame):
    """The check panel. Call :meth:`set_batch`; it then follows the batch's changes.

    Signals
    -------
    field_shown(field_id, page_id)
        A field came on screen (the window shows its page).
    message(text)
        Something to tell the clerk (saved, refused, nothing left).
    remaining_changed(count)
        Fields still to check.
    """

    field_shown = Signal(int, int)
    message = Signal(str)
    remaining_changed = Signal(int)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        self.setAccessibleName("Check fields")
        self.setAccessibleDescription(KEY_HELP)
        self.batch: Batch | None = None
        self.cache: ImageCache | None = None
        self.order = "page"
        self.items: list[ReviewItem] = []
        self._item_index: dict[int, int] = {}
        self._open: set[int] = set()
        self.index = -1
        self.view: FieldView | None = None
        self.edit = _Edit([])
        self._strips: dict[int, QPixmap] = {}
        #: Set by the window: keeps actions away from a model switch.
        self.guard: SwitchGuard | None = None
        self._seen = 0
        #: Walking a spot check's drawn fields instead of the fields to check.
        self.spot = False
        self._look_again = False
        self._pending = None
        self._retry = QTimer(self)
        self._retry.setInterval(150)
        self._retry.timeout.connect(self._retry_pending)
        self._build()

    # ---- layout

    def _build(self) -> None:
        layout = QVBoxLayout(self)
        top = QHBoxLayout()
        self.counter = QLabel("Nothing to check")
        self.counter.setAccessibleName("Fields left to check")
        f = self.counter.font()
        f.setBold(True)
        f.setPointSize(f.pointSize() + 2)
        self.counter.setFont(f)
        self.counter.setWordWrap(True)
        top.addWidget(self.counter, 1)
        top.addWidget(QLabel("Order:"))
        self.order_box = QComboBox()
        for key, words in ORDER_CHOICES:
            self.order_box.addItem(words, key)
        self.order_box.setAccessibleName("Review order")
        self.order_box.setToolTip("Which field comes next: page by page, or the ones the reader is least sure of first")
        self.order_box.currentIndexChanged.connect(lambda _: self.set_order(self.order_box.currentData()))
        top.addWidget(self.order_box)
        layout.addLayout(top)

        self.place = QLabel("")
        self.place.setWordWrap(True)
        self.place.setAccessibleName("Field shown")
        layout.addWidget(self.place)
        self.strip = QLabel()
        self.strip.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.strip.setMinimumHeight(90)
        self.strip.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Preferred)
        self.strip.setAccessibleName("The page around this field")
        layout.addWidget(self.strip)
        self.tiles_box = QWidget()  # its width follows the panel's, never the other way round
        self.tiles_box.setSizePolicy(QSizePolicy.Policy.Ignored, QSizePolicy.Policy.Fixed)
        self.tiles_row = QGridLayout(self.tiles_box)  # one row, or more when the boxes would be too small
        self.tiles_row.setContentsMargins(0, 0, 0, 0)
        self.tiles_row.setSpacing(6)
        self._tile_rows = (0, 0)  # (boxes, per row) as laid out now
        layout.addWidget(self.tiles_box)
        self.tiles: list[BoxTile] = []
        self.value_label = QLabel("")
        self.value_label.setAlignment(Qt.AlignmentFlag.AlignCenter)
        self.value_label.setWordWrap(True)  # the note on digits typed past the last box goes on a second line
        self.value_label.setAccessibleName("Value")
        layout.addWidget(self.value_label)
        keys = QLabel(KEY_HELP)
        keys.setWordWrap(True)
        keys.setStyleSheet("color: #505050;")
        keys.setAccessibleName("Keys")
        self.keys = keys
        layout.addWidget(keys)
        layout.addStretch(1)

    # ---- batch and queue

    def set_batch(self, batch: Batch | None, cache: ImageCache | None, *, order: str = "page",
                  field_id: int | None = None) -> None:
        """Follow ``batch``; start at ``field_id`` (restored place) or the first field to check."""
        self.batch, self.cache = batch, cache
        self.spot = False
        self._strips.clear()
        self.order = order
        self.order_box.blockSignals(True)
        keys = [k for k, _ in ORDER_CHOICES]
        self.order_box.setCurrentIndex(keys.index(order) if order in keys else 0)
        self.order_box.blockSignals(False)
        self.view, self.index = None, -1
        self.reload_queue()
        if batch is None:
            self._show(None)
        elif field_id is not None and field_states(batch, [field_id]).get(field_id) == TO_CHECK:
            self.show_field(field_id)
        elif field_id is not None and field_states(batch, [field_id]):
            self.index = self._index_before(field_id)  # done meanwhile: go on from where it was
            self.next_field()
        else:
            self.next_field(from_start=True)

    def _index_before(self, field_id: int) -> int:
        """By page, the index of the last field to check before ``field_id`` (any state); otherwise -1."""
        if self.order != "page" or not self.items:
            return -1
        rank = {(s.file, s.page): k for k, s in enumerate(page_summaries(self.batch))}
        done = load_field(self.batch, field_id)
        here = (rank.get((done.file, done.page), -1), done.position)
        before = [i for i, it in enumerate(self.items)
                  if (rank.get((it.file, it.page), -1), it.sort_key[2]) < here]
        return before[-1] if before else -1

    def reload_queue(self) -> None:
        """Read the review queue again (after reading pages, a change of strictness or a new model).

        The place in the queue stays with the field shown: if it is no longer
        to check, the next field is the one that came after it.
        """
        old_items, old_index = self.items, self.index
        status = audit_status(self.batch) if self.spot and self.batch is not None else None
        self.spot = status is not None
        if self.batch is None:
            self.items, self._item_index, self._open = [], {}, set()
        elif status is not None:
            self.items = status.items()
            self._item_index = {it.field_id: i for i, it in enumerate(self.items)}
            self._open = set(status.open_ids)
        else:
            self.items = ReviewQueue(self.batch, order=self.order).items()
            self._item_index = {it.field_id: i for i, it in enumerate(self.items)}
            self._open = set(self._item_index)
        if self.view is not None:
            self.index = self._item_index.get(self.view.field_id, self._place_after(old_items, old_index))
        self._update_counter()

    def _place_after(self, old_items: list[ReviewItem], old_index: int) -> int:
        """The new index from which "next" goes on, for a field shown that left the queue.

        By page, the last field before it in page order; otherwise the
        nearest field before it in the old order that is still in the queue.
        """
        if not 0 <= old_index < len(old_items):
            return -1
        here = old_items[old_index]
        if self.order == "page" and self.view is not None and here.field_id == self.view.field_id:
            before = [i for i, it in enumerate(self.items) if it.sort_key < here.sort_key]
            return before[-1] if before else -1
        for item in reversed(old_items[:old_index + 1]):
            if item.field_id in self._item_index:
                return self._item_index[item.field_id]
        return -1

    def start_spot_check(self) -> None:
        """Walk the latest spot check's drawn fields not answered yet (drawn with :func:`recognizer.review.draw_audit`)."""
        if self.batch is None or audit_status(self.batch) is None:
            return
        self.spot = True
        self.view, self.index = None, -1
        self.reload_queue()
        self.next_field(from_start=True)
        self.setFocus()

    def leave_spot_check(self, words: str | None = None) -> None:
        """Back to the fields to check (saying ``words``, if given)."""
        if not self.spot:
            return
        self.spot = False
        self.view, self.index = None, -1
        self.reload_queue()
        if words:
            self.message.emit(words)
        self.next_field(from_start=True)

    def set_order(self, order: str) -> None:
        if self.spot:
            self.leave_spot_check()
        if order == self.order or self.batch is None:
            self.order = order
            return
        self.order = order
        current = self.view.field_id if self.view else None
        self.reload_queue()
        if current is not None:
            self.index = self._item_index.get(current, -1)
        self.setFocus()

    @property
    def remaining(self) -> int:
        return len(self._open)

    def _update_counter(self) -> None:
        n = self.remaining
        if self.spot:
            self.counter.setText(f"Spot check: {n} of {len(self.items)} left")
            return
        self.counter.setText("Nothing left to check" if n == 0 else f"{n} field{'s' if n != 1 else ''} left to check")
        self.remaining_changed.emit(n)

    def on_change(self, change: Change) -> None:
        """Follow a committed change (from this panel, the sort wall or the reading worker)."""
        if self.batch is None:
            return
        if self.spot:  # the drawn fields answered are those a person acted on since the draw
            self.reload_queue()
            if self.view is not None and self.view.field_id in change.field_ids and not self.edit.touched:
                self._show(load_field(self.batch, self.view.field_id), seen=self._generation())
            return
        if change.kind in ("flags", "page"):
            self.reload_queue()
            if self.view is None:
                self.next_field(from_start=True)
            elif change.kind == "flags":
                self._redraw_if_read_again()
            return
        if len(change.field_ids) > 1:  # the template rules checked again changed other fields too
            self.reload_queue()
        for fid, state in field_states(self.batch, change.field_ids).items():
            if state == TO_CHECK and fid in self._item_index:
                self._open.add(fid)
            else:
                self._open.discard(fid)
        self._strips_keep()
        self._update_counter()
        if self.view is not None and self.view.field_id in change.field_ids and not self.edit.touched:
            seen = self._generation()
            self._show(load_field(self.batch, self.view.field_id), seen=seen)

    def _strips_keep(self) -> None:
        if len(self._strips) > 64:
            self._strips.clear()

    # ---- moving

    def next_field(self, *, from_start: bool = False, step: int = 1) -> None:
        """Show the next field still to check after the current one (wrapping round)."""
        if self.batch is None:
            return
        n = len(self.items)
        if self.spot and not self._open:
            self.leave_spot_check("Spot check done. " + residual_line(residual_figures(self.batch)))
            return
        if not self._open or n == 0:
            seen = self._generation()
            self._show(None if self.view is None or self.view.field_id in self._open else
                       load_field(self.batch, self.view.field_id), seen=seen)
            self.message.emit("Nothing left to check in this batch.")
            return
        start = -1 if from_start and step > 0 else self.index
        if from_start and step < 0:
            start = n
        for k in range(1, n + 1):
            i = (start + step * k) % n
            if self.items[i].field_id in self._open:
                self.index = i
                self.show_field(self.items[i].field_id)
                return

    def previous_field(self) -> None:
        self.next_field(step=-1)

    def show_field(self, field_id: int) -> None:
        """Show any field (clicked on the page, or given back by undo)."""
        if self.batch is None:
            return
        self.index = self._item_index.get(field_id, self.index)
        seen = self._generation()
        self._show(load_field(self.batch, field_id), seen=seen)
        QTimer.singleShot(0, self._prefetch)

    def _generation(self) -> int:
        """The model switches done so far, before loading a field to show (-1 during a switch: the field
        loaded may be half read again, so it is checked again before saving)."""
        if self.guard is None:
            return 0
        return -1 if self.guard.busy else self.guard.generation

    def _show(self, view: FieldView | None, *, seen: int | None = None) -> None:
        """Show ``view`` (loaded when the guard's generation was ``seen``; None: the field shown again)."""
        if view is None or self.view is None or view.field_id != self.view.field_id:
            self._drop_pending()
        self.view = view
        self.edit = _Edit([None] * (len(_typing_slots(view)) if view else 0))
        if view is not None:
            self.edit.cursor = _first_cursor(view)
        if seen is not None:
            self._seen = seen
            self._look_again = False
        self._render()
        if view is not None:
            self.field_shown.emit(view.field_id, view.page_id)

    def _redraw_if_read_again(self, seen: int | None = None) -> bool:
        """Draw the field shown again as it is stored now; True (and a word to the clerk) if its reading changed.

        What the clerk typed stays when the field still has as many boxes.
        """
        if self.batch is None or self.view is None:
            return False
        self._seen = self._generation() if seen is None else seen
        fresh = load_field(self.batch, self.view.field_id)
        changed = _readings(fresh) != _readings(self.view)
        self.view = fresh
        if len(self.edit.typed) != len(_typing_slots(fresh)):
            self.edit = _Edit([None] * len(_typing_slots(fresh)))
        if changed:
            self._look_again = True
            self.message.emit(CHANGED_WORDS)
        self._render()
        return changed

    def _still_as_shown(self) -> bool:
        """Inside the guard, before saving: whether the field shown has not been read again since it was drawn."""
        if self._look_again:
            self._look_again = False
            self.message.emit(SAVE_AGAIN_WORDS)
            return False
        if self.guard is None or self.guard.generation == self._seen:
            return True
        if not self._redraw_if_read_again(self.guard.generation):  # the guard is held: no switch now
            return True
        self._look_again = False
        self.message.emit(SAVE_AGAIN_WORDS)
        return False

    # ---- drawing

    def _render(self) -> None:
        view = self.view
        while len(self.tiles) < (len(view.digits) if view else 0):
            tile = BoxTile(self)
            self.tiles.append(tile)
            self._tile_rows = (0, 0)  # placed by _fit_tiles
        for i, tile in enumerate(self.tiles):
            tile.setVisible(view is not None and i < len(view.digits))
        if view is None:
            self.place.setText("")
            self.strip.clear()
            self.value_label.setText("")
            return
        item = self.items[self._item_index[view.field_id]] if view.field_id in self._item_index else None
        why = reasons_in_words(item.why) if item is not None and view.state == TO_CHECK else ""
        state = f"{STATE_MARKS[view.state]} {STATE_WORDS[view.state]}"
        handled = " (Enter goes on; type to change it)" if view.state in _HANDLED else ""
        spot = f"<br>{SPOT_WORDS}" if self.spot and view.field_id in self._open else ""
        self.place.setText(f"<b>{view.place}</b> — {state}{handled}" + (f"<br>Flagged because: {why}." if why else "")
                           + spot)
        self._fit_tiles()
        self.strip.setPixmap(self._strip(view).scaled(
            max(200, self.strip.width() - 8), 110, Qt.AspectRatioMode.KeepAspectRatio,
            Qt.TransformationMode.SmoothTransformation))
        slots = {d.digit_id: k for k, d in enumerate(_typing_slots(view))}
        for tile, d in zip(self.tiles, view.digits):
            tile.pixmap = QPixmap.fromImage(self.cache.crop(d.digit_id)) if self.cache else None
            k = slots.get(d.digit_id)
            typed = None if k is None else self.edit.typed[k]
            tile.typed = typed is not None
            tile.text = typed if typed is not None else self._shown_value(view, d)
            tile.cursor = k is not None and k == self.edit.cursor and self.hasFocus()
            tile.flagged = d.state == TO_CHECK
            tile.blank = d.blank
            tile.confidence = None if d.blank else d.confidence
            tile.setToolTip("empty box" if d.blank else f"read as {d.read}, {STATE_WORDS.get(d.state, d.state)}")
            tile.update()
        value = self.typed_value() if self.edit.touched else view.value
        self.value_label.setText(f"<span style='font-size:18pt'>Value: <b>{value or '(empty)'}</b></span>"
                                 + (f"  <i>(typed, {_more(len(self.edit.beyond))}Enter saves)</i>"
                                    if self.edit.touched else ""))

    def _fit_tiles(self) -> None:
        """Fit the field's boxes to the panel's width: scaled down on one row while they stay legible
        (:attr:`BoxTile.LEGIBLE_SIDE`), else on two rows or more (an 8-box date: DDMM over YYYY)."""
        n = len(self.view.digits) if self.view is not None else 0
        if not n:
            return
        spacing = self.tiles_row.spacing()
        width = self.tiles_box.width()
        for rows in range(1, n + 1):
            per_row = math.ceil(n / rows)
            side = (width - spacing * (per_row + 1)) // per_row
            if side >= BoxTile.LEGIBLE_SIDE or per_row == 1:
                break
        if self._tile_rows != (n, per_row):
            self._place_tiles(n, per_row)
        for tile in self.tiles:
            tile.set_side(side)
        rows = math.ceil(n / per_row)
        height = rows * self.tiles[0].height() + (rows - 1) * spacing
        if self.tiles_box.height() != height or self.tiles_box.minimumHeight() != height:
            self.tiles_box.setFixedHeight(height)  # every row in full, never drawn over the next

    def _place_tiles(self, n: int, per_row: int) -> None:
        """Put the first ``n`` tiles on rows of ``per_row``, centred (stretches either side)."""
        grid = self.tiles_row
        for tile in self.tiles:
            grid.removeWidget(tile)
        for column in range(grid.columnCount()):
            grid.setColumnStretch(column, 0)
        for i, tile in enumerate(self.tiles[:n]):
            grid.addWidget(tile, i // per_row, 1 + i % per_row)
        grid.setColumnStretch(0, 1)
        grid.setColumnStretch(per_row + 1, 1)
        self._tile_rows = (n, per_row)

    def resizeEvent(self, event) -> None:  # noqa: N802 (Qt name)
        super().resizeEvent(event)
        self._fit_tiles()

    @staticmethod
    def _shown_value(view: FieldView, d) -> str:
        if view.whole:
            return ""
        return d.value if d.value is not None else d.read

    def _strip(self, view: FieldView) -> QPixmap:
        if view.field_id in self._strips:
            return self._strips[view.field_id]
        image = self.cache.strip(view) if self.cache else None
        pixmap = QPixmap(10, 10) if image is None else QPixmap.fromImage(image[0])
        if image is not None:
            left, top = image[1]
            p = QPainter(pixmap)
            p.setPen(QPen(_CURSOR, 4))
            x0 = min(b[0] for b in view.boxes) - left
            y0 = min(b[1] for b in view.boxes) - top
            x1 = max(b[2] for b in view.boxes) - left
            y1 = max(b[3] for b in view.boxes) - top
            p.drawRect(QRectF(x0 - 5, y0 - 5, x1 - x0 + 10, y1 - y0 + 10))
            p.end()
        self._strips[view.field_id] = pixmap
        return pixmap

    def _prefetch(self) -> None:
        """Decode the crops and page strips of the next fields while the clerk reads this one."""
        if self.batch is None or not self.items:
            return
        n, done = len(self.items), 0
        for k in range(1, n):
            item = self.items[(self.index + k) % n]
            if item.field_id not in self._open:
                continue
            view = load_field(self.batch, item.field_id)
            for d in view.digits:
                self.cache.crop(d.digit_id)
            self._strip(view)
            done += 1
            if done >= _PREFETCH:
                break

    # ---- typing

    def typed_value(self) -> str:
        """The field's value as typed: typed boxes, the others as they stand; "not a digit" marks drop out."""
        assert self.view is not None
        out = []
        for t, d in zip(self.edit.typed, _typing_slots(self.view)):
            v = t if t is not None else self._shown_value(self.view, d)
            out.append("" if v in (NOT_A_DIGIT_MARK, None) else v)
        return "".join(out) + self.edit.beyond

    def type_digit(self, ch: str) -> None:
        if self.view is None or not self.edit.typed:
            return
        if self.edit.cursor >= len(self.edit.typed):
            if not ch:
                self.message.emit("That was the last box: Enter saves, Backspace goes back to the previous box.")
                return
            self.edit.beyond += ch
            self.message.emit(BEYOND_WORDS)
            self._render()
            return
        self.edit.typed[self.edit.cursor] = ch
        self.edit.cursor += 1
        self._render()

    def step_back(self) -> None:
        if self.view is not None and self.edit.beyond:
            self.edit.beyond = self.edit.beyond[:-1]
            self._render()
            return
        if self.view is None or self.edit.cursor == 0:
            return
        self.edit.cursor -= 1
        self.edit.typed[self.edit.cursor] = None
        self._render()

    def move_cursor(self, step: int) -> None:
        if self.view is not None and self.edit.typed:
            self.edit.cursor = max(0, min(len(self.edit.typed) - 1, self.edit.cursor + step))
            self._render()

    def keyPressEvent(self, event) -> None:  # noqa: N802 (Qt name)
        key, mods, text = event.key(), event.modifiers(), event.text()
        ctrl = bool(mods & Qt.KeyboardModifier.ControlModifier)
        if self._pending is not None and text and key not in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self._drop_pending()
            self.message.emit("Not saved: you went on before the digits were read again.")
        if ctrl and key == Qt.Key.Key_Z:
            self.undo_last()
        elif ctrl and key == Qt.Key.Key_U or text == "*":
            self.mark_unreadable()
        elif not ctrl and text and text in "0123456789":
            self.type_digit(text)
        elif key in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            self.save()
        elif key == Qt.Key.Key_Backspace:
            self.step_back()
        elif key in (Qt.Key.Key_Delete, Qt.Key.Key_Minus) and self.view is not None:
            self.type_digit("")
        elif key == Qt.Key.Key_Left:
            self.move_cursor(-1)
        elif key == Qt.Key.Key_Right:
            self.move_cursor(1)
        elif key == Qt.Key.Key_Home:
            self.move_cursor(-len(self.edit.typed))
        elif key == Qt.Key.Key_End:
            self.move_cursor(len(self.edit.typed))
        elif key == Qt.Key.Key_PageDown:
            self.next_field()
        elif key == Qt.Key.Key_PageUp:
            self.previous_field()
        elif key == Qt.Key.Key_Escape:
            self._show(self.view)
        else:
            super().keyPressEvent(event)

    def focusInEvent(self, event) -> None:  # noqa: N802
        super().focusInEvent(event)
        self._render()

    def focusOutEvent(self, event) -> None:  # noqa: N802
        super().focusOutEvent(event)
        self._render()

    # ---- actions (each one committed by the library at once)

    @contextmanager
    def _guarded(self, action, *, as_shown: bool = True) -> Iterator[bool]:
        """Around ``action``: True when it may be committed now; with ``as_shown``, only if the
        field shown has not been read again since it was drawn. While a model switch is under
        way, False, and ``action`` runs again once the switch has ended."""
        self._drop_pending()
        if self.guard is None:
            yield True
            return
        with self.guard.action() as free:
            if not free:
                self._pending = action
                self._retry.start()
                self.message.emit(WAIT_WORDS)
                yield False
            else:
                yield not as_shown or self._still_as_shown()

    @property
    def waiting(self) -> bool:
        """Whether an action waits for a model switch to end."""
        return self._pending is not None

    def _retry_pending(self) -> None:
        if self.guard is not None and self.guard.busy:
            return
        action = self._pending
        self._drop_pending()
        if action is not None and self.batch is not None:
            action()

    def _drop_pending(self) -> None:
        self._retry.stop()
        self._pending = None

    def save(self) -> None:
        """Enter: confirm the field as it stands, or save what was typed; then go on."""
        if self.batch is None or self.view is None:
            return
        with self._guarded(self.save) as go:
            if not go:
                return
            fid = self.view.field_id
            if not self.edit.touched and self.view.state in _HANDLED:
                self.message.emit(f"{self.view.name} is already {STATE_WORDS[self.view.state]}; nothing saved again.")
                self.edit = _Edit([])
                self.next_field()
                return
            try:
                if self.edit.touched:
                    value = self.typed_value()
                    set_field(self.batch, fid, value)
                    self.message.emit(f"Saved {self.view.name} = {value or '(empty)'}.")
                else:
                    confirm(self.batch, field=fid)
                    self.message.emit(f"Confirmed {self.view.name} = {self.view.value or '(empty)'}.")
            except ReviewError as exc:
                self.message.emit(f"Not saved: {exc}")
                return
        self.edit = _Edit([])
        self.next_field()

    def mark_unreadable(self) -> None:
        """Ctrl+U or *: the field cannot be read (it exports empty); then go on."""
        if self.batch is None or self.view is None:
            return
        with self._guarded(self.mark_unreadable, as_shown=False) as go:
            if not go:
                return
            try:
                mark_unreadable(self.batch, field=self.view.field_id)
            except ReviewError as exc:
                self.message.emit(f"Not saved: {exc}")
                return
        self.message.emit(f"Marked {self.view.name} unreadable.")
        self.edit = _Edit([])
        self.next_field()

    def undo_last(self) -> None:
        """Ctrl+Z: take back the last action and show that field again."""
        if self.batch is None:
            return
        with self._guarded(self.undo_last, as_shown=False) as go:
            if not go:
                return
            try:
                action = undo(self.batch)
            except ReviewError as exc:
                self.message.emit(f"Cannot undo: {exc}")
                return
        if action is None:
            self.message.emit("Nothing to undo.")
            return
        self.message.emit("Undone.")
        self.show_field(action.field_id)

