"""The list of the batch's pages: each page's state, fields still to check, fields done, problem.

The rows come from :func:`recognizer.batch.queries.page_summaries`; the window
tells the list which pages a change touched (:meth:`PageList.update_pages`)
or to list them all again (:meth:`PageList.fill`).
"""

from __future__ import annotations

from collections.abc import Iterable

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QAbstractItemView, QHeaderView, QTreeWidget, QTreeWidgetItem

from recognizer.batch import Batch
from recognizer.batch.queries import PageSummary, page_summaries

from ..look import STATE_MARKS, STATE_WORDS, colour

__all__ = ["PageList"]

_PAGE_ID = Qt.ItemDataRole.UserRole


class PageList(QTreeWidget):
    """One row per page of the batch.

    Signals
    -------
    page_chosen(page_id)
        The clerk made another page the current one.
    """

    page_chosen = Signal(int)

    def __init__(self, parent=None) -> None:
        super().__init__(parent)
        self.batch: Batch | None = None
        self.setHeaderLabels(["Page", "To check", "Done", "Problem"])
        self.setRootIsDecorated(False)
        self.setUniformRowHeights(True)
        self.setAccessibleName("Pages")
        self.setToolTip("Pages of the batch (F6): fields still to check, fields done, problems")
        header = self.header()
        header.setStretchLastSection(False)
        header.setSectionResizeMode(0, QHeaderView.ResizeMode.Stretch)
        for column in (1, 2, 3):
            header.setSectionResizeMode(column, QHeaderView.ResizeMode.ResizeToContents)
        self.setSelectionMode(QAbstractItemView.SelectionMode.SingleSelection)
        self.currentItemChanged.connect(self._current_changed)
        self._items: dict[int, QTreeWidgetItem] = {}

    def set_batch(self, batch: Batch | None) -> None:
        """List the pages of ``batch`` (none for None)."""
        self.batch = batch
        if batch is None:
            self.clear()
            self._items.clear()
        else:
            self.fill()

    @property
    def page_ids(self) -> list[int]:
        return list(self._items)

    def fill(self) -> None:
        """List every page again."""
        self.clear()
        self._items.clear()
        self._add_rows(page_summaries(self.batch))

    def update_pages(self, page_ids: Iterable[int]) -> None:
        """Count these pages again, adding the ones not listed yet."""
        summaries = page_summaries(self.batch, page_ids)
        new = [s for s in summaries if s.page_id not in self._items]
        for s in summaries:
            if s.page_id in self._items:
                self._set_row(self._items[s.page_id], s)
        self._add_rows(new)

    def _add_rows(self, summaries: Iterable[PageSummary]) -> None:
        items = []
        for s in summaries:
            item = QTreeWidgetItem()
            item.setData(0, _PAGE_ID, s.page_id)
            self._set_row(item, s)
            self._items[s.page_id] = item
            items.append(item)
        self.addTopLevelItems(items)

    @staticmethod
    def _set_row(item: QTreeWidgetItem, s: PageSummary) -> None:
        item.setText(0, f"{STATE_MARKS[s.state]}  {s.label}")
        item.setForeground(0, colour(s.state))
        item.setText(1, str(s.to_check) if not s.problem else "")
        item.setText(2, f"{s.done}" if not s.problem else "")
        item.setText(3, s.problem or "")
        item.setToolTip(0, f"{s.file}: {STATE_WORDS.get(s.state, s.state)}")
        item.setToolTip(3, s.problem or "")

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

    def _current_changed(self, item, _previous=None) -> None:
        if item is not None:
            self.page_chosen.emit(item.data(0, _PAGE_ID))
