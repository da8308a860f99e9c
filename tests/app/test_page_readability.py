"""The page a clerk reads all day (issue 13): a page large enough to read, zoom by keys, pages
told apart in the list, the cursor where the wrong digit is, stable widths, one legend, one caution."""

from __future__ import annotations

import re

import pytest
from PySide6.QtCore import QPoint, QPointF, Qt
from PySide6.QtGui import QWheelEvent
from PySide6.QtWidgets import QApplication, QLabel

from recognizer.review import TO_CHECK

from .conftest import SCANS

READ_TIMEOUT = 90_000


def _open(window, sample_batch, qtbot):
    window.resize(1440, 900)
    assert window.open_batch(sample_batch)
    qtbot.wait(50)


def test_the_page_fills_the_width_of_its_view_and_zooms_by_keys(window, qtbot, sample_batch):
    _open(window, sample_batch, qtbot)
    view = window.page_view
    width = view.scene().sceneRect().width() * view.zoom()
    assert width == pytest.approx(view.viewport().width(), abs=4)
    fitted = view.zoom()
    qtbot.keyClick(window, Qt.Key.Key_Plus, Qt.KeyboardModifier.ControlModifier)
    assert view.zoom() > fitted * 1.2
    qtbot.keyClick(window, Qt.Key.Key_Minus, Qt.KeyboardModifier.ControlModifier)
    qtbot.keyClick(window, Qt.Key.Key_Minus, Qt.KeyboardModifier.ControlModifier)
    assert view.zoom() < fitted
    qtbot.keyClick(window, Qt.Key.Key_0, Qt.KeyboardModifier.ControlModifier)
    assert view.fitted and view.zoom() == pytest.approx(fitted)


def test_ctrl_wheel_zooms_and_the_wheel_scrolls(window, qtbot, sample_batch):
    _open(window, sample_batch, qtbot)
    view = window.page_view
    fitted = view.zoom()

    def wheel(mods):
        centre = QPointF(view.viewport().rect().center())
        event = QWheelEvent(centre, view.viewport().mapToGlobal(centre), QPoint(0, 0), QPoint(0, 120),
                            Qt.MouseButton.NoButton, mods, Qt.ScrollPhase.NoScrollPhase, False)
        QApplication.sendEvent(view.viewport(), event)

    wheel(Qt.KeyboardModifier.NoModifier)
    assert view.zoom() == fitted
    wheel(Qt.KeyboardModifier.ControlModifier)
    assert view.zoom() > fitted


def test_the_field_being_checked_stays_in_view_when_zoomed(window, qtbot, sample_batch):
    _open(window, sample_batch, qtbot)
    view = window.page_view
    for _ in range(3):
        qtbot.keyClick(window, Qt.Key.Key_Plus, Qt.KeyboardModifier.ControlModifier)
    for _ in range(6):
        qtbot.keyClick(window.review, Qt.Key.Key_PageDown)
        field = window.review.view.field_id
        shown = view.mapToScene(view.viewport().rect()).boundingRect()
        assert shown.contains(view.outline_rect(field)), window.review.view.place


def test_pages_are_told_apart_and_a_problem_is_shown_in_full(window, qtbot, tmp_path):
    broken = tmp_path / "cards_10-12_broken.png"
    broken.write_bytes(b"\x89PNG\r\n\x1a\n not really")
    pdf = next(SCANS.glob("*.pdf"))
    with qtbot.waitSignal(window.reading_done, timeout=READ_TIMEOUT):
        window.open_scans([broken, pdf], batch_path=tmp_path / "mixed.inkcount")
    pages = window.pages
    rows = [pages.topLevelItem(i) for i in range(pages.topLevelItemCount())]
    assert pages.textElideMode() == Qt.TextElideMode.ElideMiddle
    numbers = [r.text(pages.PAGE) for r in rows if pdf.name in r.text(pages.FILE)]
    assert numbers == [str(n) for n in range(1, len(numbers) + 1)] and len(numbers) > 1
    bad = next(r for r in rows if broken.name in r.text(pages.FILE))
    problem = bad.text(pages.PROBLEM)
    assert problem and problem in bad.toolTip(pages.FILE)
    pages.setCurrentItem(bad)
    assert problem in window.page_detail.text() and broken.name in window.page_detail.text()
    assert window.page_detail.isVisible()


def test_typing_starts_on_the_box_the_reader_was_unsure_of(window, qtbot, sample_batch):
    _open(window, sample_batch, qtbot)
    panel = window.review
    panel.setFocus()
    seen = 0
    for _ in range(len(panel.items)):
        view = panel.view
        slots = view.slots
        unsure = [k for k, d in enumerate(slots) if d.state == TO_CHECK]
        written = [k for k, d in enumerate(slots) if not d.blank]
        expected = unsure[0] if unsure else (written[0] if written else 0)
        assert panel.edit.cursor == expected, view.place
        seen += bool(unsure and unsure[0] > 0)
        qtbot.keyClick(panel, Qt.Key.Key_PageDown)
    assert seen, "no field with its first unsure box after the first one in the sample"
    assert "←/→" in panel.keys.text() and "Backspace: previous box" in panel.keys.text()


def test_many_boxes_scale_down_instead_of_widening_the_panel(window, qtbot, sample_batch):
    _open(window, sample_batch, qtbot)
    panel = window.review
    sizes = window.splitter.sizes()
    for _ in range(len(panel.items)):
        qtbot.keyClick(panel, Qt.Key.Key_PageDown)
        qtbot.wait(1)
        assert window.splitter.sizes() == sizes
        tiles = [t for t in panel.tiles if t.isVisible()]
        right = max(t.geometry().right() for t in tiles)
        assert right <= panel.tiles_box.width(), panel.view.place


def test_one_legend_and_one_caution_on_the_batch_screen(window, qtbot, sample_batch):
    _open(window, sample_batch, qtbot)
    shown = [label for label in window.findChildren(QLabel) if label.isVisible()]
    cautions = [label for label in shown if "mistakes" in label.text()]
    assert len(cautions) == 1  # the status line's
    words = [re.sub(r"<[^>]+>", "", label.text()).replace("&nbsp;", " ") for label in shown]
    legends = [t for t in words if "? to check" in t and "✎ corrected" in t]
    assert len(legends) == 1 and "✓ confirmed" in legends[0] and "✗ unreadable" in legends[0]


def test_the_strictness_does_not_say_every_digit_is_checked_while_reading(window, qtbot, tmp_path):
    with qtbot.waitSignal(window.reading_done, timeout=READ_TIMEOUT):
        window.open_scans([SCANS / "card_01.png"], batch_path=tmp_path / "one.inkcount")
        assert "every digit" not in window.model_panel.strictness.text()
    assert "%" in window.model_panel.strictness.text()


def test_an_eight_box_date_stays_legible_on_a_narrow_check_panel(window, qtbot, sample_batch):
    """Issue 13: on a 460 px check panel the 8 boxes of the picking date (DD MM YYYY) shrank to about
    45 px; they go on two rows instead, each crop at least BoxTile.LEGIBLE_SIDE wide, inside the panel."""
    from app.views.review_panel import BoxTile

    _open(window, sample_batch, qtbot)
    sizes = window.splitter.sizes()
    window.splitter.setSizes([sizes[0], sizes[1] + sizes[2] - 460, 460])
    qtbot.wait(20)
    panel = window.review
    seen = 0
    for _ in range(len(panel.items)):
        tiles = [t for t in panel.tiles if t.isVisible()]
        assert max(t.geometry().right() for t in tiles) <= panel.tiles_box.width(), panel.view.place
        if len(tiles) == 8:
            seen += 1
            assert min(t.width() for t in tiles) >= BoxTile.LEGIBLE_SIDE, panel.view.place
            rows = sorted({t.geometry().top() for t in tiles})
            assert len(rows) == 2, panel.view.place
            first_row = [t for t in tiles if t.geometry().top() == rows[0]]
            assert first_row == tiles[:4]  # read in order: DDMM over YYYY
            assert rows[1] >= rows[0] + tiles[0].height()  # the second row under the first, not over it
            assert max(t.geometry().bottom() for t in tiles) < panel.tiles_box.height()
        qtbot.keyClick(panel, Qt.Key.Key_PageDown)
        qtbot.wait(1)
    assert seen, "no 8-box field in the sample"
    window.splitter.setSizes([sizes[0], sizes[1] + sizes[2] - 900, 900])
    qtbot.wait(20)
    panel.show_field(panel.view.field_id)
    tiles = [t for t in panel.tiles if t.isVisible()]
    assert len({t.geometry().top() for t in tiles}) == 1  # a wide panel keeps one row
