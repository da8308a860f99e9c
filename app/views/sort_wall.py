"""The sort wall: every digit still to check as a small crop, grouped by the digit the
reader saw, each group led by the crops least like the group's typical shape.

Within a group the crops come in the order of :func:`recognizer.review.rank_group`:
the least like the group's typical shape first. Ranking cuts every crop again
the first time (about 1.5 ms a crop, seconds for a few thousand), so it runs in
a :class:`app.workers.RankWorker` started through ``start_job`` (set by the
window: the controller's, so the batch is not closed under it): the wall shows
every group at once in the review queue's order ("ordering…" in its title), and
each group takes its order, its odd marks and its typical shape when its
ranking arrives, keeping the clerk's selection. Without ``start_job`` (a wall
on its own) the ranking is done at once, as the wall is built. The typical shape itself (the
group's mean model input) is drawn beside the group, labelled "typical 7". The
crops far from it are marked *odd* without relying on colour: they come first,
with a thick frame, their rank in a badge and the word "odd" under them.

Select crops with the mouse (click, Shift+click, Ctrl+click) or the keyboard
(arrows, Shift+arrows, Ctrl+A), then::

    0-9          this is the right digit for every selected crop
    Delete       no digit here (a stray mark)
    Enter        the reading is right for the selected crops
    Ctrl+Enter   the reading is right for the whole group (asked first)

"All are 7" (or Ctrl+Enter) asks first, with the count ("Confirm 238 digits as
7?"), and leaves out every crop of the group the clerk has selected or changed
since the batch was opened: those are checked one by one. A crop handled
leaves its group; a group emptied leaves the wall. Selecting a crop emits
``crop_selected(page_id, field_id, box)`` so the window can show its page
with the field picked out.

Every action is one call of :mod:`recognizer.review`, committed at once,
inside the window's :class:`app.batch_access.SwitchGuard` (``guard``): nothing
is saved while learning reads the batch again, and "the reading is right" is
not saved for crops read again since the wall was built (it is built again
instead).
"""

from __future__ import annotations

import math
from collections.abc import Callable

from PySide6.QtCore import QItemSelectionModel, QSize, Qt, Signal, Slot
from PySide6.QtGui import QIcon
from PySide6.QtWidgets import (
    QAbstractItemView,
    QHBoxLayout,
    QLabel,
    QListView,
    QListWidget,
    QListWidgetItem,
    QMessageBox,
    QPushButton,
    QScrollArea,
    QVBoxLayout,
    QWidget,
)

from recognizer.batch import Batch, Change
from recognizer.batch.queries import digit_states, pages_of_fields
from recognizer.digits.model import CLASSES, NOT_A_DIGIT
from recognizer.review import (
    TO_CHECK,
    GroupRanking,
    RankedCrop,
    ReviewError,
    ReviewItem,
    ReviewQueue,
    confirm,
    rank_group,
    set_digit,
)
from recognizer.states import NOT_A_DIGIT_MARK

from ..batch_access import SWITCH_WORDS, ImageCache, SwitchGuard
from ..workers import Job, RankWorker, Worker
from .wall_tiles import TILE, crop_tile, typical_tile

__all__ = ["SortWall", "WALL_HELP"]

WALL_HELP = ("Select crops (click, Shift/Ctrl+click, arrows) · type 0-9 for the right digit · Del no digit · "
             "Enter reading is right · Ctrl+Enter whole group is right (asked first; crops you selected are "
             "left out) · odd crops (framed, numbered) come first")
_DIGIT = Qt.ItemDataRole.UserRole
_PLACE = Qt.ItemDataRole.UserRole + 1
_RANK = Qt.ItemDataRole.UserRole + 2
_WHERE = Qt.ItemDataRole.UserRole + 3
_TEXT_ROW = 16  # room for "odd" under a tile
_ORDERING = " · ordering…"


def _group_of(prediction: str) -> int:
    return NOT_A_DIGIT if prediction == NOT_A_DIGIT_MARK else int(prediction)


def _group_title(group: int, n: int) -> str:
    what = "not a digit" if group == NOT_A_DIGIT else f"read as {CLASSES[group]}"
    return f"{what.capitalize()} — {n} to check"


def _as_read(group: int) -> str:
    return "not a digit" if group == NOT_A_DIGIT else CLASSES[group]


def _ordinal(n: int) -> str:
    return f"{n}{'th' if 10 <= n % 100 <= 20 else {1: 'st', 2: 'nd', 3: 'rd'}.get(n % 10, 'th')}"


class _GroupList(QListWidget):
    """One group's crops."""

    def __init__(self, wall: SortWall, group: int) -> None:
        super().__init__()
        self.wall, self.group = wall, group
        self.setViewMode(QListView.ViewMode.IconMode)
        self.setIconSize(TILE)
        self.setGridSize(QSize(TILE.width() + 8, TILE.height() + 8 + _TEXT_ROW))
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
                self.wall.ask_confirm_group(self.group)
            else:
                self.wall.confirm_selected(self)
        else:
            super().keyPressEvent(event)


class _Group(QWidget):
    """A group on the wall: its typical shape, title and "All are" button above its crops."""

    def __init__(self, wall: SortWall, group: int) -> None:
        super().__init__()
        self.group = group
        #: Whether the group's ranking has arrived (its order, odd marks and typical shape shown).
        self.ranked = False
        layout = QVBoxLayout(self)
        layout.setContentsMargins(0, 6, 0, 0)
        header = QHBoxLayout()
        self.typical = QLabel()
        self.typical_caption = QLabel()
        shape = QVBoxLayout()
        shape.addWidget(self.typical, 0, Qt.AlignmentFlag.AlignHCenter)
        shape.addWidget(self.typical_caption, 0, Qt.AlignmentFlag.AlignHCenter)
        header.addLayout(shape)
        self.title = QLabel()
        f = self.title.font()
        f.setBold(True)
        self.title.setFont(f)
        header.addWidget(self.title, 1)
        self.button = QPushButton("All right as read" if group == NOT_A_DIGIT else f"All are {CLASSES[group]}")
        self.button.setToolTip("The reading is right for every crop of this group you have not selected or "
                               "changed; asks first (Ctrl+Enter in the group)")
        self.button.setAccessibleName(f"Confirm group {CLASSES[group]}")
        self.button.clicked.connect(lambda _=False, g=group: wall.ask_confirm_group(g))
        header.addWidget(self.button)
        layout.addLayout(header)
        self.list = _GroupList(wall, group)
        layout.addWidget(self.list)

    def show_typical(self, ranking: GroupRanking) -> None:
        self.ranked = True
        if ranking.typical is not None:
            self.typical.setPixmap(typical_tile(ranking.typical))
            self.typical_caption.setText(f"typical {_as_read(self.group)}")
            self.typical.setToolTip(f"The typical {_as_read(self.group)} of this group (the mean of its crops, as "
                                    f"the model sees them); the crops least like it come first")
            self.typical.setAccessibleName(f"Typical {_as_read(self.group)}")


class SortWall(QScrollArea):
    """All digits to check, grouped by the digit read, the oddest of each group first.

    Signals
    -------
    message(text)
        What was done, in words (for the status line).
    crop_selected(page_id, field_id, box)
        A crop became the current one: the window shows its page with the field picked out.
    """

    message = Signal(str)
    crop_selected = Signal(int, int, int)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.setWidgetResizable(True)
        self.setAccessibleName("Sort wall")
        self.setToolTip(WALL_HELP)
        self.batch: Batch | None = None
        self.cache: ImageCache | None = None
        self.groups: dict[int, _GroupList] = {}
        self._boxes: dict[int, _Group] = {}
        self._items: dict[int, QListWidgetItem] = {}
        self._odd: dict[int, int] = {}
        #: Model inputs of the crops cut so far (a crop never changes): the wall is built again often.
        self._cells: dict = {}
        self._stale = True
        #: Crops the clerk selected or changed since the batch was opened: never swept into "All are".
        self.touched: set[int] = set()
        self._auto = False
        #: Set by the window: keeps actions away from a model switch.
        self.guard: SwitchGuard | None = None
        #: Set by the window (the controller's): runs the ranking in a worker. None: rank while building.
        self.start_job: Callable[[Worker], Job] | None = None
        self._ranker: RankWorker | None = None
        self._build = 0
        #: Asks (title, question, details) -> yes; a question box by default (tests may replace it).
        self.ask: Callable[[str, str, str], bool] = self._ask_box
        self.question_box: QMessageBox | None = None
        self._seen = 0
        self._body = QWidget()
        self._layout = QVBoxLayout(self._body)
        self._empty: QLabel | None = None
        self.setWidget(self._body)

    def set_batch(self, batch: Batch | None, cache: ImageCache | None) -> None:
        if batch is not self.batch:
            self._stop_ranking()
            self.touched, self._cells = set(), {}
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
        """Build the wall from the review queue (digits to check, grouped by the digit read), then order
        each group, the oddest first (in a worker when ``start_job`` is set)."""
        self._stale = False
        self._stop_ranking()
        self._build += 1
        self._seen = -1 if self.guard is None or self.guard.busy else self.guard.generation
        body = QWidget()
        self._layout = QVBoxLayout(body)
        help_label = QLabel(WALL_HELP)
        help_label.setWordWrap(True)
        self._layout.addWidget(help_label)
        self.groups, self._boxes, self._items, self._odd = {}, {}, {}, {}
        items = ReviewQueue(self.batch, order="digit").items() if self.batch is not None else []
        by_group: dict[int, list[ReviewItem]] = {}
        for item in items:
            by_group.setdefault(_group_of(item.read), []).append(item)
        for group in sorted(by_group):  # digit order, "not a digit" last
            box = _Group(self, group)
            self._layout.addWidget(box)
            self._boxes[group], self.groups[group] = box, box.list
            box.list.itemSelectionChanged.connect(lambda lst=box.list: self._selection_changed(lst))
            box.list.currentItemChanged.connect(self._current_changed)
            for item in by_group[group]:
                self._add(box.list, item)
        self._empty = QLabel("No single digits left to check.")
        self._empty.setVisible(not self.groups)
        self._layout.addWidget(self._empty)
        self._layout.addStretch(1)
        self.setWidget(body)
        self._body = body
        self._retitle()
        self._fit()
        places = {g: [(i.digit_id, i.field_id, i.box) for i in members] for g, members in by_group.items()}
        if not places:
            return
        if self.start_job is None:
            for group, digits in places.items():
                self._ranked(self._build, group, rank_group(self.batch, digits, cells=self._cells))
            return
        self._ranker = RankWorker(self.batch, places, self._cells, tag=self._build)
        self._ranker.ranked.connect(self._ranked)
        self._ranker.failed.connect(self._rank_failed)
        self.start_job(self._ranker)

    @property
    def ordering(self) -> bool:
        """Whether some group still waits for its ranking."""
        return any(not box.ranked for box in self._boxes.values())

    def _stop_ranking(self) -> None:
        if self._ranker is not None:
            self._ranker.cancel()
            self._ranker = None

    @Slot(int, int, object)
    def _ranked(self, tag: int, group: int, ranking: GroupRanking) -> None:
        """A group's ranking: put its crops in that order and mark the odd ones, keeping the selection."""
        box, lst = self._boxes.get(group), self.groups.get(group)
        if tag != self._build or box is None or lst is None:
            return  # a ranking of an older build of the wall
        box.show_typical(ranking)
        selected = set(self._selected(lst))
        current = lst.currentItem().data(_DIGIT) if lst.currentItem() is not None else None
        entries = {}
        self._auto = True
        try:
            while lst.count():
                entry = lst.takeItem(0)
                entries[entry.data(_DIGIT)] = entry
            for crop in ranking.crops:
                entry = entries.pop(crop.digit_id, None)
                if entry is None:
                    continue  # handled since the wall was built
                self._mark(entry, crop, group)
                lst.addItem(entry)
            for entry in entries.values():  # not in the ranking (cannot happen; kept rather than lost)
                lst.addItem(entry)
            for row in range(lst.count()):
                entry = lst.item(row)
                digit_id = entry.data(_DIGIT)
                if digit_id in selected:
                    entry.setSelected(True)
                if digit_id == current:
                    lst.setCurrentItem(entry, QItemSelectionModel.SelectionFlag.NoUpdate)
        finally:
            self._auto = False
        self._retitle()

    def _rank_failed(self, message: str) -> None:
        self._ranker = None
        self.message.emit("The sort wall could not find the odd crops; it shows them in reading order. "
                          + message.splitlines()[0])
        for box in self._boxes.values():
            box.ranked = True
        self._retitle()

    def _add(self, lst: _GroupList, item: ReviewItem) -> None:
        image = self.cache.crop(item.digit_id) if self.cache else None
        entry = QListWidgetItem(QIcon(crop_tile(image)), "")
        entry.setData(_DIGIT, item.digit_id)
        entry.setData(_PLACE, (item.field_id, item.box))
        entry.setData(_RANK, 0)
        where = (f"{item.file.rsplit('/', 1)[-1]}, page {item.page}, field {item.field}, box {item.box + 1}: "
                 f"sure {100 * (item.confidence or 0):.1f} %")
        entry.setToolTip(where)
        entry.setData(_WHERE, where)
        lst.addItem(entry)
        self._items[item.digit_id] = entry

    def _mark(self, entry: QListWidgetItem, crop: RankedCrop, group: int) -> None:
        """Mark a crop odd (frame, rank badge, the word "odd", its tooltip) or plain, as its ranking says."""
        was = entry.data(_RANK)
        rank = crop.rank if crop.odd else 0
        if rank != was:
            image = self.cache.crop(crop.digit_id) if self.cache else None
            entry.setIcon(QIcon(crop_tile(image, rank=rank)))
            entry.setData(_RANK, rank)
        entry.setText("odd" if crop.odd else "")
        where = entry.data(_WHERE)
        if crop.odd:
            where = (f"Odd, {_ordinal(crop.rank)} least like the typical {_as_read(group)} "
                     f"({crop.score:.1f} times the usual distance). " + where)
            self._odd[crop.digit_id] = crop.rank
        else:
            self._odd.pop(crop.digit_id, None)
        entry.setToolTip(where)

    def _retitle(self) -> None:
        for group, lst in self.groups.items():
            odd = sum(1 for i in range(lst.count()) if lst.item(i).data(_RANK))
            title = _group_title(group, lst.count()) + (f" · {odd} odd first" if odd else "")
            if not self._boxes[group].ranked:
                title += _ORDERING
            self._boxes[group].title.setText(title)
            lst.setAccessibleName(title)

    def _fit(self) -> None:
        width = self.viewport().width()
        for lst in self.groups.values():
            lst.fit_height(width)

    def _drop_empty(self) -> None:
        """Take every emptied group off the wall."""
        for group in [g for g, lst in self.groups.items() if lst.count() == 0]:
            box = self._boxes.pop(group)
            del self.groups[group]
            self._layout.removeWidget(box)
            box.hide()
            box.deleteLater()
        if self._empty is not None:
            self._empty.setVisible(not self.groups)

    def count(self, group: int) -> int:
        return self.groups[group].count() if group in self.groups else 0

    def digit_ids(self, group: int) -> list[int]:
        """The crops of a group in the order shown (the oddest first)."""
        lst = self.groups.get(group)
        return [] if lst is None else [lst.item(i).data(_DIGIT) for i in range(lst.count())]

    def odd_ids(self, group: int) -> list[int]:
        """The crops of a group marked odd, the oddest first."""
        return [d for d in self.digit_ids(group) if d in self._odd]

    def sweep_ids(self, group: int) -> list[int]:
        """What "All are" confirms: the group's crops the clerk has not selected or changed."""
        return [d for d in self.digit_ids(group) if d not in self.touched]

    def typical_caption(self, group: int) -> str:
        box = self._boxes.get(group)
        return "" if box is None else box.typical_caption.text()

    # ---- following the clerk and the batch

    def _selection_changed(self, lst: _GroupList) -> None:
        if not self._auto:
            self.touched.update(self._selected(lst))

    def _current_changed(self, current: QListWidgetItem | None, _previous=None) -> None:
        if current is not None and current.data(_PLACE) is not None and self.batch is not None:
            field_id, box = current.data(_PLACE)
            pages = pages_of_fields(self.batch, [field_id])
            if pages:
                self.crop_selected.emit(next(iter(pages)), field_id, box)

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
                self._auto = True
                try:
                    lst.takeItem(lst.row(entry))
                finally:
                    self._auto = False
                del self._items[digit_id]
                self._odd.pop(digit_id, None)
            elif state == TO_CHECK and entry is None:
                self._stale = True
        if self._stale and self.isVisible():
            self.load()
            return
        self._drop_empty()
        self._retitle()
        self._fit()

    # ---- actions

    def _selected(self, lst: QListWidget) -> list[int]:
        return [entry.data(_DIGIT) for entry in lst.selectedItems()]

    def set_selected(self, lst: QListWidget, value: str) -> None:
        """Give every selected crop of ``lst`` the digit ``value`` ("" = no digit)."""
        ids = self._selected(lst)
        row = min((lst.row(e) for e in lst.selectedItems()), default=0)
        self.touched.update(ids)
        self._apply(ids, lambda d: set_digit(self.batch, d, value),
                    f"Set {len(ids)} crop{'s' if len(ids) != 1 else ''} to {value or 'no digit'}.")
        self._select_row(lst, row)

    def confirm_selected(self, lst: QListWidget) -> None:
        ids = self._selected(lst)
        row = min((lst.row(e) for e in lst.selectedItems()), default=0)
        self.touched.update(ids)
        self._apply(ids, lambda d: confirm(self.batch, digit=d), f"Confirmed {len(ids)} digit{'' if len(ids) == 1 else 's'} as read.", as_read=True)
        self._select_row(lst, row)

    def ask_confirm_group(self, group: int) -> bool:
        """"All are": ask, with the count, then confirm the crops not selected or changed. True if confirmed."""
        ids = self.sweep_ids(group)
        left_out = self.count(group) - len(ids)
        if not ids:
            if left_out:
                self.message.emit(f"Nothing confirmed: you selected or changed each of the {left_out} crops left "
                                  f"in this group; check them one by one.")
            return False
        noun = "marks" if group == NOT_A_DIGIT else "digits"
        what = "not a digit" if group == NOT_A_DIGIT else CLASSES[group]
        question = f"Confirm {len(ids):,} {noun if len(ids) != 1 else noun[:-1]} as {what}?"
        details = [f"Each is saved as read ({what}), at once."]
        if left_out:
            details.append(f"{left_out:,} crop{'s' if left_out != 1 else ''} you selected or changed "
                           f"{'are' if left_out != 1 else 'is'} left out: check {'them' if left_out != 1 else 'it'} "
                           f"one by one.")
        odd = sum(1 for d in ids if d in self._odd)
        if odd:
            details.append(f"{odd:,} of them look{'s' if odd == 1 else ''} unlike the typical {what} (framed and "
                           f"numbered, first in the group): look at those before you say yes.")
        if not self.ask("Confirm the whole group", question, " ".join(details)):
            return False
        self.confirm_group(group, ids=ids)
        return True

    def confirm_group(self, group: int, *, ids: list[int] | None = None) -> None:
        """Confirm ``ids`` (default: :meth:`sweep_ids`) as read, without asking (:meth:`ask_confirm_group` asks)."""
        ids = self.sweep_ids(group) if ids is None else ids
        self._apply(ids, lambda d: confirm(self.batch, digit=d), f"Confirmed {len(ids)} digit{'' if len(ids) == 1 else 's'} as read.", as_read=True)

    def _ask_box(self, title: str, question: str, details: str) -> bool:
        box = QMessageBox(QMessageBox.Icon.Question, title, question, parent=self)
        box.setInformativeText(details)
        yes = box.addButton("Confirm", QMessageBox.ButtonRole.AcceptRole)
        no = box.addButton(QMessageBox.StandardButton.Cancel)
        box.setDefaultButton(no)
        box.setEscapeButton(no)
        self.question_box = box
        try:
            box.exec()
            return box.clickedButton() is yes
        finally:
            self.question_box = None
            box.deleteLater()

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

    def _select_row(self, lst: QListWidget, row: int) -> None:
        """After an action: the crop now at ``row`` becomes the current one (not a choice of the clerk's)."""
        if lst.count():
            self._auto = True
            try:
                lst.setCurrentRow(min(row, lst.count() - 1))
            finally:
                self._auto = False
