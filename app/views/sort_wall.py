"""The sort wall: every digit still to check as a small crop, grouped by the digit the
reader saw, so that a wrong one stands out among its neighbours.

Select crops with the mouse (click, Shift+click, Ctrl+click) or the keyboard
(arrows, Shift+arrows, Ctrl+A), then::

    0-9          this is the right digit for every selected crop
    Delete       no digit here (a stray mark)
    Enter        the reading is right for the selected crops
    Ctrl+Enter   the reading is right for the whole group

A crop handled leaves its group. Every action is one call of
:mod:`recognizer.review`, committed at once, inside the window's
:class:`app.batch_access.SwitchGuard` (``guard``): nothing is saved while
learning reads the batch again, and "the reading is right" is not saved for
crops read again since the wall was built (it is built again instead).
"""

from __future__ import annotations

import math

from PySide6.QtCore import QSize, Qt, Signal
from PySide6.QtGui import QIcon, QPixmap
from PySide6.QtWidgets import (
    QAbstractItemView,
    QHBoxLayout,
    QLabel,
    QListView,
    QListWidget,
    QListWidgetItem,
    QPushButton,
    QScrollArea,
    QVBoxLayout,
    QWidget,
)

from recognizer.batch import Batch, Change
from recognizer.batch.queries import digit_states
from recognizer.digits.model import CLASSES, NOT_A_DIGIT
from recognizer.review import TO_CHECK, ReviewError, ReviewItem, ReviewQueue, confirm, set_digit
from recognizer.states import NOT_A_DIGIT_MARK

from ..batch_access import SWITCH_WORDS, ImageCache, SwitchGuard

__all__ = ["SortWall", "WALL_HELP"]

WALL_HELP = ("Select crops (click, Shift/Ctrl+click, arrows) · type 0-9 for the right digit · Del no digit · "
             "Enter reading is right · Ctrl+Enter whole group is right")
_ICON = QSize(44, 52)
_DIGIT = Qt.ItemDataRole.UserRole


def _group_of(prediction: str) -> int:
    return NOT_A_DIGIT if prediction == NOT_A_DIGIT_MARK else int(prediction)


def _group_title(group: int, n: int) -> str:
    what = "not a digit" if group == NOT_A_DIGIT else f"read as {CLASSES[group]}"
    return f"{what.capitalize()} — {n} to check"


class _GroupList(QListWidget):
    """One group's crops."""

    def __init__(self, wall: SortWall, group: int) -> None:
        super().__init__()
        self.wall, self.group = wall, group
        self.setViewMode(QListView.ViewMode.IconMode)
        self.setIconSize(_ICON)
        self.setGridSize(QSize(_ICON.width() + 8, _ICON.height() + 8))
        self.setMovement(QListView.Movement.Static)
        self.setResizeMode(QListView.ResizeMode.Adjust)
        self.setWrapping(True)
        self.setUniformItemSizes(True)
        self.setSelectionMode(QAbstractItemView.SelectionMode.ExtendedSelection)
        self.setVerticalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.setHorizontalScrollBarPolicy(Qt.ScrollBarPolicy.ScrollBarAlwaysOff)
        self.setAccessibleName(_group_title(group, 0))

    def fit_height(self, width: int) -> None:
        per_row = max(1, (width - 12) // self.gridSize().width())
        rows = max(1, math.ceil(self.count() / per_row))
        self.setFixedHeight(rows * self.gridSize().height() + 8)

    def keyPressEvent(self, event) -> None:  # noqa: N802 (Qt name)
        text, key = event.text(), event.key()
        ctrl = bool(event.modifiers() & Qt.KeyboardModifier.ControlModifier)
        if text and text in "0123456789" and not ctrl:
            self.wall.set_selected(self, text)
        elif key == Qt.Key.Key_Delete:
            self.wall.set_selected(self, "")
        elif key in (Qt.Key.Key_Return, Qt.Key.Key_Enter):
            if ctrl:
                self.wall.confirm_group(self.group)
            else:
                self.wall.confirm_selected(self)
        else:
            super().keyPressEvent(event)


class SortWall(QScrollArea):
    """All digits to check, grouped by the digit read."""

    message = Signal(str)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setWidgetResizable(True)
        self.setAccessibleName("Sort wall")
        self.setToolTip(WALL_HELP)
        self.batch: Batch | None = None
        self.cache: ImageCache | None = None
        self.groups: dict[int, _GroupList] = {}
        self._titles: dict[int, QLabel] = {}
        self._items: dict[int, QListWidgetItem] = {}
        self._stale = True
        #: Set by the window: keeps actions away from a model switch.
        self.guard: SwitchGuard | None = None
        self._seen = 0
        self._body = QWidget()
        self._layout = QVBoxLayout(self._body)
        self.setWidget(self._body)

    def set_batch(self, batch: Batch | None, cache: ImageCache | None) -> None:
        self.batch, self.cache = batch, cache
        self._stale = True
        if self.isVisible():
            self.load()

    def showEvent(self, event) -> None:  # noqa: N802
        super().showEvent(event)
        if self._stale:
            self.load()

    def resizeEvent(self, event) -> None:  # noqa: N802
        super().resizeEvent(event)
        self._fit()

    # ---- building

    def load(self) -> None:
        """Build the wall from the review queue (digits to check, grouped by the digit read)."""
        self._stale = False
        self._seen = -1 if self.guard is None or self.guard.busy else self.guard.generation
        body = QWidget()
        self._layout = QVBoxLayout(body)
        help_label = QLabel(WALL_HELP)
        help_label.setWordWrap(True)
        self._layout.addWidget(help_label)
        self.groups, self._titles, self._items = {}, {}, {}
        items = ReviewQueue(self.batch, order="digit").items() if self.batch is not None else []
        for item in items:
            self._add(item)
        if not items:
            self._layout.addWidget(QLabel("No single digits left to check."))
        self._layout.addStretch(1)
        self.setWidget(body)
        self._body = body
        self._retitle()
        self._fit()

    def _group(self, group: int) -> _GroupList:
        if group not in self.groups:
            header = QHBoxLayout()
            title = QLabel()
            f = title.font()
            f.setBold(True)
            title.setFont(f)
            header.addWidget(title, 1)
            button = QPushButton("All right as read" if group == NOT_A_DIGIT else f"All are {CLASSES[group]}")
            button.setToolTip("The reading is right for every crop of this group (Ctrl+Enter in the group)")
            button.setAccessibleName(f"Confirm group {CLASSES[group]}")
            button.clicked.connect(lambda _=False, g=group: self.confirm_group(g))
            header.addWidget(button)
            lst = _GroupList(self, group)
            # Groups in digit order, "not a digit" last.
            position = sum(1 for g in self.groups if g < group)
            self._layout.insertLayout(1 + 2 * position, header)
            self._layout.insertWidget(2 + 2 * position, lst)
            self.groups[group], self._titles[group] = lst, title
        return self.groups[group]

    def _add(self, item: ReviewItem) -> None:
        lst = self._group(_group_of(item.read))
        icon = QIcon(QPixmap.fromImage(self.cache.crop(item.digit_id))) if self.cache else QIcon()
        entry = QListWidgetItem(icon, "")
        entry.setData(_DIGIT, item.digit_id)
        entry.setToolTip(f"{item.file.rsplit('/', 1)[-1]}, page {item.page}, field {item.field}, box {item.box + 1}: "
                         f"sure {100 * (item.confidence or 0):.1f} %")
        lst.addItem(entry)
        self._items[item.digit_id] = entry

    def _retitle(self) -> None:
        for group, lst in self.groups.items():
            title = _group_title(group, lst.count())
            self._titles[group].setText(title)
            lst.setAccessibleName(title)

    def _fit(self) -> None:
        width = self.viewport().width()
        for lst in self.groups.values():
            lst.fit_height(width)

    def count(self, group: int) -> int:
        return self.groups[group].count() if group in self.groups else 0

    def digit_ids(self, group: int) -> list[int]:
        lst = self.groups.get(group)
        return [] if lst is None else [lst.item(i).data(_DIGIT) for i in range(lst.count())]

    # ---- following the batch

    def on_change(self, change: Change) -> None:
        if self.batch is None:
            return
        if change.kind != "review":
            self._stale = True
            if self.isVisible():
                self.load()
            return
        if self._stale or not change.field_ids:
            return
        for digit_id, state in digit_states(self.batch, change.field_ids).items():
            entry = self._items.get(digit_id)
            if state != TO_CHECK and entry is not None:
                lst = entry.listWidget()
                lst.takeItem(lst.row(entry))
                del self._items[digit_id]
            elif state == TO_CHECK and entry is None:
                self._stale = True
        if self._stale and self.isVisible():
            self.load()
            return
        self._retitle()
        self._fit()

    # ---- actions

    def _selected(self, lst: QListWidget) -> list[int]:
        return [entry.data(_DIGIT) for entry in lst.selectedItems()]

    def set_selected(self, lst: QListWidget, value: str) -> None:
        """Give every selected crop of ``lst`` the digit ``value`` ("" = no digit)."""
        ids = self._selected(lst)
        row = min((lst.row(e) for e in lst.selectedItems()), default=0)
        self._apply(ids, lambda d: set_digit(self.batch, d, value),
                    f"Set {len(ids)} crop{'s' if len(ids) != 1 else ''} to {value or 'no digit'}.")
        self._select_row(lst, row)

    def confirm_selected(self, lst: QListWidget) -> None:
        ids = self._selected(lst)
        row = min((lst.row(e) for e in lst.selectedItems()), default=0)
        self._apply(ids, lambda d: confirm(self.batch, digit=d), f"Confirmed {len(ids)} as read.", as_read=True)
        self._select_row(lst, row)

    def confirm_group(self, group: int) -> None:
        ids = self.digit_ids(group)
        self._apply(ids, lambda d: confirm(self.batch, digit=d), f"Confirmed {len(ids)} as read.", as_read=True)

    def _apply(self, ids: list[int], action, done: str, *, as_read: bool = False) -> None:
        """``action(digit_id)`` for each of ``ids`` inside the guard; ``as_read``: it accepts the reading shown."""
        if self.batch is None or not ids:
            return
        if self.guard is None:
            self._commit(ids, action, done)
            return
        with self.guard.action() as free:
            if not free:
                self.message.emit(SWITCH_WORDS)
            elif as_read and self.guard.generation != self._seen:
                self.load()
                self.message.emit("Learning from your corrections read these digits again: the wall now shows "
                                  "them as they read now. Look again; nothing was saved.")
            else:
                self._commit(ids, action, done)

    def _commit(self, ids: list[int], action, done: str) -> None:
        refused = []
        for digit_id in ids:
            try:
                action(digit_id)
            except ReviewError as exc:
                refused.append(str(exc))
        self.message.emit(done if not refused else f"{done} {len(refused)} refused: {refused[0]}")

    @staticmethod
    def _select_row(lst: QListWidget, row: int) -> None:
        if lst.count():
            lst.setCurrentRow(min(row, lst.count() - 1))
