"""The list of the batch's pages: file, page number, fields still to check (fields done and the
page's problem in its tooltip and in :meth:`PageList.describe`).

The rows come from :func:`recognizer.batch.queries.page_summaries`; the window
tells the list which pages a change touched (:meth:`PageList.update_pages`)
or to list them all again (:meth:`PageList.fill`, which keeps the current
row). File names are cut in the middle when the column is narrow, so the
ends that tell files apart (``…_10-12.pdf``) stay; the page number has its own
column; a problem is shown in full in the row's tooltip and by
:meth:`PageList.describe` (the window's line under the list).

:func:`legend_html` explains the marks and colours (one legend for the window).
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QAbstractItemView, QHeaderView, QTreeWidget, QTreeWidgetItem

from recognizer.batch import Batch
from recognizer.batch.queries import PageSummary, page_summaries
from recognizer.review import CONFIRMED, CORRECTED, READ, TO_CHECK, UNREADABLE

from ..look import STATE_MARKS, STATE_WORDS, colour

__all__ = ["PageList", "legend_html", "LEGEND"]

_PAGE_ID = Qt.ItemDataRole.UserRole

#: The marks of a page, a field or a box, and what each means (one legend for the window).
LEGEND = (
    (TO_CHECK, "to check"),
    (CORRECTED, "corrected"),
    (CONFIRMED, "confirmed"),
    (UNREADABLE, "unreadable or not read"),
    (READ, "read, not flagged"),
)


def legend_html(*, lines: bool = False) -> str:
    """The legend in the states' colours: ``? to check · ✎ corrected · …`` (``lines``: one a line)."""
    parts = [f"<span style='color:{colour(s).name()}'><b>{STATE_MARKS[s]}</b>&nbsp;{words.replace(' ', '&nbsp;')}"
             "</span>" for s, words in LEGEND]
    return "<br>".join(parts) if lines else " &nbsp; ".join(parts)


class PageList(QTreeWidget):
    """One row per page of the batch: File, Page, To check (Done and Problem kept, hidden).

    The logical columns are :attr:`FILE`, :attr:`TO_CHECK`, :attr:`DONE`,
    :attr:`PROBLEM` and :attr:`PAGE`; the Page column is shown second.

    Signals
    -------
    page_chosen(page_id)
        The clerk made another page the current one.
    current_described(text)
        The current row in words (file, page, state, problem in full), for
        the line under the list; empty when there is none.
    """

    FILE, TO_CHECK, DONE, PROBLEM, PAGE = range(5)
    page_chosen = Signal(int)
    current_described = Signal(str)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.batch: Batch | None = None
        self.setHeaderLabels(["File", "To check", "Done", "Problem", "Page"])
        self.setRootIsDecorated(False)
        self.setUniformRowHeights(True)
        self.setTextElideMode(Qt.TextElideMode.ElideMiddle)
        self.setAccessibleName("Pages")
        self.setToolTip("Pages of the batch (F6): file, page, fields still to check, fields done, problem")
        header = self.header()
        header.setStretchLastSection(False)
        header.moveSection(header.visualIndex(self.PAGE), 1)  # File, Page, To check, Done, Problem
        header.setSectionResizeMode(self.FILE, QHeaderView.ResizeMode.Stretch)
        for column in (self.PAGE, self.TO_CHECK, self.DONE):
            header.setSectionResizeMode(column, QHeaderView.ResizeMode.ResizeToContents)
        # A problem is long: it is in the row's tooltip and, in full, in the line under the list
        # (the row's ✗ mark says there is one), not in a column too narrow to read it.
        self.setColumnHidden(self.PROBLEM, True)
        # Fields done are counted in the tooltip and that line: the File column needs the room more.
        self.setColumnHidden(self.DONE, True)
        header.setMinimumSectionSize(30)
        self.headerItem().setToolTip(self.TO_CHECK, "Fields of the page still to check")
        self.headerItem().setToolTip(self.DONE, "Fields of the page corrected, confirmed or marked unreadable")
        for column in (self.PAGE, self.TO_CHECK, self.DONE):
            self.headerItem().setTextAlignment(column, Qt.AlignmentFlag.AlignRight)
        self.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.currentItemChanged.connect(self._current_changed)
        self._items: dict[int, QTreeWidgetItem] = {}
        self._summaries: dict[int, PageSummary] = {}

    def set_batch(self, batch: Batch | None) -> None:
        """List the pages of ``batch`` (none for None)."""
        self.batch = batch
        if batch is None:
            self.clear()
            self._items.clear()
            self._summaries.clear()
            self.current_described.emit("")
        else:
            self.fill()

    @property
    def page_ids(self) -> list[int]:
        return list(self._items)

    def current_page(self) -> int | None:
        """The page of the current row (None: no row)."""
        item = self.currentItem()
        return None if item is None else item.data(0, _PAGE_ID)

    def fill(self) -> None:
        """List every page again, keeping the current row (without announcing it)."""
        current = self.current_page()
        self.blockSignals(True)
        try:
            self.clear()
            self._items.clear()
            self._summaries.clear()
            self._add_rows(page_summaries(self.batch))
        finally:
            self.blockSignals(False)
        if current is not None:
            self.follow(current)

    def update_pages(self, page_ids: Iterable[int]) -> None:
        """Count these pages again, adding the ones not listed yet."""
        summaries = page_summaries(self.batch, page_ids)
        new = [s for s in summaries if s.page_id not in self._items]
        for s in summaries:
            if s.page_id in self._items:
                self._summaries[s.page_id] = s
                self._set_row(self._items[s.page_id], s)
        self._add_rows(new)
        current = self.current_page()
        if current is not None and current in {s.page_id for s in summaries}:
            self.current_described.emit(self.describe(current))

    def _add_rows(self, summaries: Iterable[PageSummary]) -> None:
        items = []
        for s in summaries:
            item = QTreeWidgetItem()
            item.setData(0, _PAGE_ID, s.page_id)
            self._set_row(item, s)
            self._items[s.page_id] = item
            self._summaries[s.page_id] = s
            items.append(item)
        self.addTopLevelItems(items)

    def _set_row(self, item: QTreeWidgetItem, s: PageSummary) -> None:
        item.setText(self.FILE, f"{STATE_MARKS[s.state]}  {Path(s.file).name}")
        item.setForeground(self.FILE, colour(s.state))
        item.setText(self.PAGE, str(s.page) if s.page is not None else "")
        item.setText(self.TO_CHECK, str(s.to_check) if not s.problem else "")
        item.setText(self.DONE, f"{s.done}" if not s.problem else "")
        item.setText(self.PROBLEM, s.problem or "")
        for column in (self.PAGE, self.TO_CHECK, self.DONE):
            item.setTextAlignment(column, Qt.AlignmentFlag.AlignRight | Qt.AlignmentFlag.AlignVCenter)
        tip = self._words(s, s.file)
        for column in range(self.columnCount()):
            item.setToolTip(column, tip)

    @staticmethod
    def _words(s: PageSummary, name: str) -> str:
        page = f", page {s.page}" if s.page is not None else ""
        if s.problem:
            return f"{name}{page} could not be read: {s.problem}"
        counts = f"{s.fields} field{'s' if s.fields != 1 else ''}: {s.to_check} to check, {s.done} done"
        return f"{name}{page} — {STATE_WORDS.get(s.state, s.state)} ({counts})"

    def describe(self, page_id: int | None) -> str:
        """A page in words: file name, page, state, or its problem in full (empty for None or an unknown page)."""
        s = self._summaries.get(page_id) if page_id is not None else None
        return "" if s is None else self._words(s, Path(s.file).name)

    def select_first(self) -> None:
        """Make the first page the current one (``page_chosen`` follows)."""
        if self._items:
            self.setCurrentItem(self.topLevelItem(0))

    def follow(self, page_id: int) -> None:
        """Make ``page_id`` the current row without announcing it (the window already shows it)."""
        item = self._items.get(page_id)
        if item is not None and self.currentItem() is not item:
            self.blockSignals(True)
            self.setCurrentItem(item)
            self.blockSignals(False)
            self.scrollToItem(item)
        self.current_described.emit(self.describe(page_id))

    def _current_changed(self, item, _previous=None) -> None:
        if item is not None:
            page_id = item.data(0, _PAGE_ID)
            self.current_described.emit(self.describe(page_id))
            self.page_chosen.emit(page_id)
