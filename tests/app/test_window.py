"""The window driven as a clerk would: open, read, check by keys, sort wall, export, cancel, restore."""

from __future__ import annotations

import csv
from pathlib import Path

import pytest
from PySide6.QtCore import Qt

from recognizer.batch import Batch
from recognizer.review import CONFIRMED, CORRECTED, TO_CHECK, UNREADABLE, set_field, state_counts

from .conftest import SCANS, truth_values

READ_TIMEOUT = 90_000


def _field(path: Path, field_id: int):
    with Batch.open(path, read_only=True) as b:
        return b.rows("SELECT value, state, read_value FROM fields WHERE id = ?", (field_id,))[0]


def _page_rows(window):
    return [window.pages.topLevelItem(i) for i in range(window.pages.topLevelItemCount())]


def test_open_scans_reads_in_a_worker_and_lists_pages(window, qtbot, tmp_path):
    path = tmp_path / "new.inkcount"
    with qtbot.waitSignal(window.reading_done, timeout=READ_TIMEOUT) as done:
        assert window.open_scans([SCANS], batch_path=path)
        assert window.reading
    summary = done.args[0]
    assert window.thread is None
    n_pages = len(truth_values())
    assert summary.pages_read == n_pages
    rows = _page_rows(window)
    assert len(rows) == n_pages
    counts = state_counts(window.batch)
    assert sum(int(r.text(1) or 0) for r in rows) == counts["fields"][TO_CHECK]
    assert window.review.remaining == counts["fields"][TO_CHECK]
    assert window.review.view is not None  # the first field to check is on screen
    assert window.page_view.page_id is not None


def test_review_by_keys_correct_confirm_unreadable_undo(window, qtbot, sample_batch):
    assert window.open_batch(sample_batch)
    panel = window.review
    panel.setFocus()
    first = panel.view
    qtbot.keyClick(panel, Qt.Key.Key_Home)  # Home: the cursor to the first box
    assert panel.edit.cursor == 0
    slot = first.slots[0]
    shown = slot.value if slot.value not in (None, "?") else slot.read
    other = "7" if shown != "7" else "3"
    qtbot.keyClicks(panel, other)
    assert panel.typed_value()[0] == other
    qtbot.keyClick(panel, Qt.Key.Key_Return)
    row = _field(sample_batch, first.field_id)
    assert row["state"] == CORRECTED and row["value"].startswith(other)

    second = panel.view
    assert second.field_id != first.field_id
    qtbot.keyClick(panel, Qt.Key.Key_Return)
    assert _field(sample_batch, second.field_id)["state"] == CONFIRMED

    third = panel.view
    qtbot.keyClick(panel, Qt.Key.Key_U, Qt.KeyboardModifier.ControlModifier)
    assert _field(sample_batch, third.field_id)["state"] == UNREADABLE

    fourth = panel.view
    qtbot.keyClicks(panel, "*")
    assert _field(sample_batch, fourth.field_id)["state"] == UNREADABLE

    # Backspace steps back: typing then erasing leaves the value as read.
    fifth = panel.view
    qtbot.keyClicks(panel, "9")
    qtbot.keyClick(panel, Qt.Key.Key_Backspace)
    assert not panel.edit.touched

    qtbot.keyClick(panel, Qt.Key.Key_Z, Qt.KeyboardModifier.ControlModifier)
    assert _field(sample_batch, fourth.field_id)["state"] == TO_CHECK
    assert panel.view.field_id == fourth.field_id  # undo goes back to that field
    assert fifth.field_id != fourth.field_id
    assert window.review.remaining == state_counts(window.batch)["fields"][TO_CHECK]


def test_a_value_longer_than_the_boxes_found_can_be_typed_and_saved(window, qtbot, sample_batch):
    # a field whose wall was broken is found with a box too few: the clerk types on past the last box
    assert window.open_batch(sample_batch)
    panel = window.review
    panel.setFocus()
    field = panel.view
    n = len(panel.edit.typed)
    qtbot.keyClick(panel, Qt.Key.Key_Home)
    longer = "1234567890"[:n] + "5"
    qtbot.keyClicks(panel, longer)
    assert panel.edit.beyond == "5" and panel.typed_value() == longer
    assert "past the last box" in panel.value_label.text()
    qtbot.keyClicks(panel, "6")
    qtbot.keyClick(panel, Qt.Key.Key_Backspace)  # Backspace takes back the digit typed past the end first
    assert panel.typed_value() == longer
    qtbot.keyClick(panel, Qt.Key.Key_Return)
    row = _field(sample_batch, field.field_id)
    assert row["value"] == longer and row["state"] == CORRECTED
    assert panel.view.field_id != field.field_id


def test_clicking_a_field_on_the_page_jumps_the_review(window, qtbot, sample_batch):
    assert window.open_batch(sample_batch)
    view = window.page_view
    target = [fid for fid in view.field_ids() if fid != window.review.view.field_id][0]
    point = view.mapFromScene(view.outline_rect(target).center())
    qtbot.mouseClick(view.viewport(), Qt.MouseButton.LeftButton, pos=point)
    assert window.review.view.field_id == target


def test_sort_wall_correction_leaves_its_group(window, qtbot, sample_batch):
    assert window.open_batch(sample_batch)
    window.show_tab(1)  # the sort wall
    wall = window.wall
    group = max((g for g in wall.groups if g < 10), key=wall.count)
    before = wall.count(group)
    lst = wall.groups[group]
    digit_id = wall.digit_ids(group)[0]
    lst.setFocus()
    lst.setCurrentRow(0)
    other = str((group + 1) % 10)
    qtbot.keyClicks(lst, other)
    assert wall.count(group) == before - 1
    assert digit_id not in wall.digit_ids(group)
    with Batch.open(sample_batch, read_only=True) as b:
        state, value = b.rows("SELECT state, value FROM digits WHERE id = ?", (digit_id,))[0]
    assert (state, value) == (CORRECTED, other)

    # Several at once, then a whole group confirmed.
    lst.setCurrentRow(0)
    lst.item(1).setSelected(True)
    qtbot.keyClick(lst, Qt.Key.Key_Return)
    assert wall.count(group) == before - 3
    wall.confirm_group(group)
    assert wall.count(group) == 0


def test_export_dialog_against_the_truth(window, qtbot, sample_batch, tmp_path):
    assert window.open_batch(sample_batch)
    dialog = window.export_dialog()
    assert dialog.unchecked > 0 and str(dialog.unchecked) in dialog.export_button.text()
    assert any("mistakes" in label.text() for label in dialog.findChildren(type(dialog.warning)))
    dialog.reject()

    truth = truth_values()
    batch = window.batch
    flagged = batch.rows(
        "SELECT f.id, f.name, f.value, p.page, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
        "JOIN files fl ON fl.id = p.file_id WHERE f.state = ?", (TO_CHECK,))
    corrected = set()
    for r in flagged:
        want = truth.get((Path(r["path"]).name, r["page"]), {}).get(r["name"])
        if want is not None:  # a field the truth file knows
            set_field(batch, r["id"], want)
            corrected.add((Path(r["path"]).name, r["page"], r["name"]))
    out = tmp_path / "checked.csv"
    dialog = window.export_dialog()
    dialog.path.setText(str(out))
    result = dialog.do_export()
    assert result, result
    with open(out, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == len(truth)
    wrong_flagged, wrong_unflagged, compared = [], [], 0
    for row in rows:
        key = (Path(row["file"]).name, int(row["page"]))
        for name, want in truth[key].items():
            got = row.get(name)
            compared += 1
            if got != want:
                (wrong_flagged if (*key, name) in corrected else wrong_unflagged).append((*key, name, got, want))
    # Misreads the reader was sure of are the library's figures, reported, not failed on.
    print(f"compared {compared} fields: {len(corrected)} checked, {len(wrong_unflagged)} misread unflagged")
    assert wrong_flagged == []
    assert len(wrong_unflagged) < compared


def test_cancel_half_way_keeps_a_sound_batch_that_resumes(window, qtbot, tmp_path):
    path = tmp_path / "cancelled.inkcount"
    stop_after = 3

    def on_progress(done, total, text):
        if done >= stop_after:
            window.cancel_reading()

    with qtbot.waitSignal(window.reading_done, timeout=READ_TIMEOUT) as done:
        window.open_scans([SCANS], batch_path=path)
        window.worker.progress.connect(on_progress)
    assert done.args[0].stopped
    assert window.batch.integrity_check() == []
    pages_before = window.batch.rows("SELECT COUNT(*) FROM pages")[0][0]
    n_pages = len(truth_values())
    assert stop_after <= pages_before < n_pages
    assert window.pages.topLevelItemCount() == pages_before
    with qtbot.waitSignal(window.reading_done, timeout=READ_TIMEOUT) as again:
        window.open_scans([SCANS])
    assert again.args[0].pages_read == n_pages - pages_before
    assert window.batch.rows("SELECT COUNT(*) FROM pages")[0][0] == n_pages
    assert window.pages.topLevelItemCount() == n_pages


def test_reopening_restores_batch_and_place(qtbot, window_settings, sample_batch):
    from app.main_window import MainWindow
    from app.settings import WindowSettings

    first = MainWindow(window_settings)
    qtbot.addWidget(first)
    first.show()
    first.open_batch(sample_batch)
    qtbot.keyClick(first.review, Qt.Key.Key_PageDown)
    qtbot.keyClick(first.review, Qt.Key.Key_PageDown)
    place = first.review.view.field_id
    first.resize(780, 560)  # fits the small offscreen screen
    first.splitter.setSizes([231, 200, 400])
    sizes = first.splitter.sizes()
    first.close()
    assert first.batch is None

    second = MainWindow(WindowSettings(window_settings.path))
    qtbot.addWidget(second)
    second.show()
    second.start([])
    assert second.batch is not None and Path(second.batch.path) == sample_batch
    assert second.review.view.field_id == place
    # The offscreen screen is small, so the restored window may be smaller: the page list and the
    # check panel keep their widths, the page image takes what is left.
    restored = second.splitter.sizes()
    assert restored[0] == pytest.approx(sizes[0], abs=4)
    assert str(sample_batch.absolute()) in second.settings.get("recent_batches")
    assert second.recent_list.count() == 1
    second.close()


def _other_programs_database(path: Path) -> None:
    import sqlite3

    with sqlite3.connect(path) as conn:
        conn.execute("CREATE TABLE orders (id INTEGER PRIMARY KEY, item TEXT)")
        conn.execute("INSERT INTO orders (item) VALUES ('apples')")
    conn.close()


@pytest.mark.parametrize("content, reason", [
    (b"this is not a batch", "not an Inkcount batch file"),
    (_other_programs_database, "not an Inkcount batch file"),
])
def test_damaged_batch_file_is_named_with_the_reason(window, tmp_path, content, reason):
    # (an empty file is what a batch killed while being created by an older Inkcount left:
    # it is made afresh, see tests/recognizer/batch/test_kill_create.py)
    bad = tmp_path / "bad.inkcount"
    bad.write_bytes(content) if isinstance(content, bytes) else content(bad)
    assert not window.open_batch(bad)
    assert str(bad) in window.last_message and reason in window.last_message
    assert window.batch is None


def test_batch_in_use_is_refused_clearly(window, sample_batch):
    with Batch.open(sample_batch):
        assert not window.open_batch(sample_batch)
    assert "in use" in window.last_message and str(sample_batch) in window.last_message
    assert window.open_batch(sample_batch)  # free again once the other holder closed it


def test_unreadable_scan_is_named_and_the_rest_is_read(window, qtbot, tmp_path):
    broken = tmp_path / "broken.png"
    broken.write_bytes(b"\x89PNG\r\n\x1a\n not really")
    good = SCANS / "card_01.png"
    with qtbot.waitSignal(window.reading_done, timeout=READ_TIMEOUT) as done:
        window.open_scans([broken, good], batch_path=tmp_path / "mixed.inkcount")
    summary = done.args[0]
    assert summary.pages_read == 1 and len(summary.problems) == 1
    assert "broken.png" in window._problem_box.text()
    problems = [r.text(3) for r in _page_rows(window) if r.text(3)]
    assert len(problems) == 1


def test_strictness_preview_and_apply(window, sample_batch):
    assert window.open_batch(sample_batch)
    dialog = window.strictness_dialog()
    dialog.by_target.setChecked(True)
    dialog.target.setValue(0.05)
    strict = dialog.preview_count()
    dialog.target.setValue(2.0)
    lenient = dialog.preview_count()
    assert lenient <= strict
    assert f"{lenient:,}" in dialog.preview.text()
    dialog.apply()
    assert window.batch.settings.target_error == pytest.approx(0.02)
    assert window.review.remaining == state_counts(window.batch)["fields"][TO_CHECK]


def test_failed_settings_write_is_reported(qtbot, tmp_path):
    from app.main_window import MainWindow
    from app.settings import WindowSettings

    blocker = tmp_path / "a_file"
    blocker.write_text("x")
    w = MainWindow(WindowSettings(blocker / "window.json"))
    qtbot.addWidget(w)
    problem = w.save_settings()
    assert problem and "could not save the window settings" in w.last_message


def test_window_command_is_added_to_inkcount():
    from recognizer.cli.main import build_parser

    from app.cli import run_window

    args = build_parser().parse_args(["window", "cards.inkcount"])
    assert args.func is run_window and args.paths == [Path("cards.inkcount")]
