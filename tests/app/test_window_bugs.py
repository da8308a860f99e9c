"""Bugs a new clerk met (issue 13), each driven as the clerk met it, offscreen."""

from __future__ import annotations

import json
from types import SimpleNamespace

from PySide6.QtCore import QEvent, QObject, QPointF, Qt, Signal
from PySide6.QtGui import QColor, QFocusEvent, QImage
from PySide6.QtWidgets import QApplication

from recognizer.batch import Batch
from recognizer.batch.queries import page_summaries
from recognizer.forms.template_file import load_template
from recognizer.review import CONFIRMED, TO_CHECK, confirm, set_field



def _actions(path_or_batch, field_id: int) -> int:
    batch = path_or_batch
    return batch.rows("SELECT COUNT(*) FROM actions WHERE field_id = ?", (field_id,))[0][0]


# ---------------------------------------------------------------- 1. template editor keeps edits


def test_a_sum_rule_typed_is_kept_when_another_field_is_clicked(editor, qtbot, tmp_path):
    editor.select("crates_1")
    editor.sums.setPlainText("total_crates = crates_1 + crates_2")
    editor._clicked(QPointF(*editor.template.field("row_number").boxes[0].centre))
    assert editor.selected == "row_number"
    assert editor.sums.toPlainText().strip() == "total_crates = crates_1 + crates_2"
    assert editor.save()
    rules = json.loads(editor.path.read_text(encoding="utf-8"))["rules"]
    assert rules == [{"rule": "sum", "total": "total_crates", "parts": ["crates_1", "crates_2"]}]


def test_name_and_type_edits_are_kept_when_another_field_is_clicked(editor, qtbot, tmp_path):
    editor.select("grower_number")
    editor.name_edit.setText("member")
    editor.type_box.setCurrentIndex(editor.type_box.findData("code"))
    editor.check_digit.setCurrentIndex(editor.check_digit.findData("luhn"))
    editor._clicked(QPointF(*editor.template.field("row_number").boxes[0].centre))  # no "Apply to field"
    assert editor.selected == "row_number"
    editor.maximum.setText("150")
    editor._step(1)  # Ctrl+Down to the next field keeps this one too
    assert editor.save()
    saved = load_template(editor.path)
    assert saved.field("member").type == "code"
    assert saved.field("row_number").maximum == 150


def test_a_refused_edit_keeps_the_field_and_says_why(editor, qtbot, tmp_path):
    editor.select("row_number")
    editor.name_edit.setText("block_number")  # used twice
    editor.select("crates_1")
    assert editor.selected == "row_number" and editor.name_edit.text() == "block_number"
    assert "used twice" in editor.message.text()
    editor.select("row_number")  # choosing the field again puts it back as it was
    assert editor.name_edit.text() == "row_number"
    editor.select("crates_1")
    assert editor.selected == "crates_1"


# ---------------------------------------------------------------- 2. strictness: list and page follow


def test_after_a_strictness_change_the_list_and_the_page_follow_the_check_panel(window, qtbot, sample_batch):
    assert window.open_batch(sample_batch)
    for _ in range(4):
        qtbot.keyClick(window.review, Qt.Key.Key_PageDown)
    page = window.review.view.page_id
    assert page != window.pages.page_ids[0]
    dialog = window.strictness_dialog()
    dialog.by_target.setChecked(True)
    dialog.target.setValue(5.0)
    dialog.apply()
    shown = [window.pages.topLevelItem(i).text(getattr(window.pages, "TO_CHECK", 1)) for i in range(window.pages.topLevelItemCount())]
    assert shown == [str(s.to_check) if not s.problem else "" for s in page_summaries(window.batch)]
    # the focus comes back to the page list when the dialog closes (a real display does that)
    QApplication.sendEvent(window.pages, QFocusEvent(QEvent.Type.FocusIn, Qt.FocusReason.ActiveWindowFocusReason))
    qtbot.keyClick(window, Qt.Key.Key_F2)
    assert window.page_view.page_id == window.review.view.page_id == page
    assert window.pages.currentItem() is not None
    assert window.pages.currentItem().data(0, Qt.ItemDataRole.UserRole) == page


# ---------------------------------------------------------------- 3. reopening on a field already done


def test_reopening_goes_to_a_field_still_to_check_and_enter_on_a_done_field_writes_nothing(
        qtbot, window_settings, sample_batch):
    from app.main_window import MainWindow
    from app.settings import WindowSettings

    first = MainWindow(window_settings)
    qtbot.addWidget(first)
    first.show()
    first.open_batch(sample_batch)
    qtbot.keyClick(first.review, Qt.Key.Key_PageDown)
    place = first.review.view.field_id
    first.close()
    with Batch.open(sample_batch) as b:  # done elsewhere (the sort wall, inkcount review) before reopening
        confirm(b, field=place)

    second = MainWindow(WindowSettings(window_settings.path))
    qtbot.addWidget(second)
    second.show()
    second.start([])
    view = second.review.view
    assert view.field_id != place and view.state == TO_CHECK
    assert second.review.remaining == len(second.review._open)

    actions = _actions(second.batch, place)
    second.review.show_field(place)  # clicked on the page: shown, already done
    second.review.setFocus()
    qtbot.keyClick(second.review, Qt.Key.Key_Return)
    assert _actions(second.batch, place) == actions
    assert second.review.view.field_id != place
    second.close()


# ---------------------------------------------------------------- 4. retrain result not cut


class _NoJob(QObject):
    ended = Signal(object)

    def wait(self) -> None:
        pass


def test_the_retrain_result_is_not_cut_off(window, qtbot, sample_batch):
    from app.dialogs.retrain import RetrainDialog

    assert window.open_batch(sample_batch)
    jobs = []
    box = RetrainDialog(window.batch, window.model, start_job=lambda w: jobs.append(_NoJob()) or jobs[-1],
                        parent=window)
    box.show()
    box.start()  # it asks first
    qtbot.wait(20)
    figures = {"n_learned": 1234, "n_held_back": 321, "n_heldout": 5000, "seconds": 12,
               "before": {"new_samples": 0.91, "heldout": 0.987}, "after": {"new_samples": 0.95, "heldout": 0.985}}
    model = SimpleNamespace(version="base-retrained-1", metadata={"retraining": {"settings": {"heldout_tolerance": 0.005}}})
    box._on_retrained(SimpleNamespace(figures=figures, accepted=True, model=model, reasons=()))
    box._on_job_ended(jobs[0])
    qtbot.wait(20)
    for label in (box.text, box.step):
        assert label.height() >= label.heightForWidth(label.width()), label.text()
    assert box.height() <= box.screen().availableGeometry().height()
    box.job = None
    box.close()


# ---------------------------------------------------------------- 5. "no image" readable


def test_no_image_words_are_readable_after_a_large_page(qtbot):
    from app.views.page_view import PageView

    view = PageView()
    qtbot.addWidget(view)
    view.resize(500, 600)
    view.show()
    big = QImage(2480, 3508, QImage.Format.Format_Grayscale8)
    big.fill(QColor("white"))
    view.show_page(1, big, [])
    view.show_page(2, None, [])
    text = [i for i in view.scene().items()][0]
    height = view.mapFromScene(text.sceneBoundingRect()).boundingRect().height()
    assert height >= 14


# ---------------------------------------------------------------- 6. model panel after reopening


def test_checked_digits_are_counted_after_reopening(qtbot, window_settings, sample_batch):
    from app.main_window import TAB_MODEL, MainWindow
    from app.settings import WindowSettings

    with Batch.open(sample_batch) as b:
        fid, value = b.rows("SELECT id, value FROM fields WHERE state = ? AND value != '' ORDER BY id",
                            (TO_CHECK,))[0]
        set_field(b, fid, "1" * len(value))
    first = MainWindow(window_settings)
    qtbot.addWidget(first)
    first.show()
    first.open_batch(sample_batch)
    first.show_tab(TAB_MODEL)
    first.close()
    second = MainWindow(WindowSettings(window_settings.path))
    qtbot.addWidget(second)
    second.show()
    second.start([])
    assert second.model_panel.samples.text() not in ("–", "")
    assert int(second.model_panel.samples.text().replace(",", "")) >= 1
    second.close()


# ---------------------------------------------------------------- 7b. a batch opens on the check panel


def test_a_batch_opens_on_the_check_panel(window, qtbot, sample_batch):
    from app.main_window import TAB_CHECK, TAB_WALL

    window.tabs.setCurrentIndex(TAB_WALL)  # the last tab used
    assert window.open_batch(sample_batch)
    assert window.tabs.currentIndex() == TAB_CHECK
    assert window.review.view is not None and window.review.view.state in (TO_CHECK, CONFIRMED)
