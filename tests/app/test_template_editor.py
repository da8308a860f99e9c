"""Template editor: select, rename, retype, split, join, delete, draw, move, sums, save and reload."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from PySide6.QtCore import QPointF, QRectF, Qt

from recognizer.forms.template_file import load_template

ROOT = Path(__file__).resolve().parents[2]
CARD = ROOT / "sample_forms" / "orchard_card.json"
BLANK = ROOT / "sample_forms" / "blank_card.png"


def _fields(path: Path) -> dict[str, dict]:
    return {f["name"]: f for f in json.loads(path.read_text(encoding="utf-8"))["fields"]}


def test_rename_and_set_type_then_save_and_reload(editor):
    editor.select("grower_number")
    editor.name_edit.setText("member")
    editor.type_box.setCurrentIndex(editor.type_box.findData("code"))
    editor.check_digit.setCurrentIndex(editor.check_digit.findData("luhn"))
    editor.lengths.setText("5")
    assert editor.apply_field()
    editor.select("row_number")
    editor.maximum.setText("150")
    assert editor.apply_field()
    assert editor.save()
    saved = load_template(editor.path)
    original = load_template(CARD)
    assert saved.version == original.version + 1
    member = saved.field("member")
    assert (member.type, member.check_digit, member.lengths) == ("code", "luhn", (5,))
    assert member.boxes == original.field("grower_number").boxes
    assert saved.field("row_number").maximum == 150
    assert "Saved" in editor.message.text()


def test_decimal_and_date_types(editor):
    editor.select("crates_1")
    editor.type_box.setCurrentIndex(editor.type_box.findData("date"))
    editor.date_order.setCurrentText("DDMMYY")
    assert not editor.apply_field()  # three boxes cannot hold DDMMYY, and crates_1 is in the sum
    assert "Not changed" in editor.message.text()
    editor.select("crates_1")  # choosing the field again puts it back as it was
    editor.select("picking_date")
    editor.date_order.setCurrentText("YYYYMMDD")
    assert editor.apply_field()
    editor.select("net_weight")
    editor.decimals.setValue(2)
    assert editor.apply_field()
    assert editor.save()
    saved = _fields(editor.path)
    assert saved["picking_date"]["date_order"] == "YYYYMMDD" and saved["net_weight"]["decimals"] == 2


def test_bad_input_gives_a_clear_message(editor):
    editor.select("row_number")
    editor.minimum.setText("ten")
    assert not editor.apply_field()
    assert "must be a number" in editor.message.text()
    editor.minimum.setText("")
    editor.name_edit.setText("block_number")
    assert not editor.apply_field()
    assert "used twice" in editor.message.text()
    editor.name_edit.setText("row_number")
    editor.sums.setPlainText("total_crates crates_1")
    assert not editor.save()
    assert "total = part" in editor.message.text()


def test_split_join_delete_draw_and_save(editor):
    editor.select("net_weight")
    editor.split_at.setValue(4)
    assert editor.split_selected()
    assert [f.name for f in editor.template.fields][-2:] == ["net_weight", "net_weight_2"]
    editor.select("net_weight")
    assert editor.join_right()
    assert len(editor.template.field("net_weight").boxes) == 5
    editor.select("crates_3")
    assert editor.delete_selected()
    editor.run_count.setValue(4)
    editor.start_drawing()
    assert editor.draw_run(QRectF(1400, 300, 300, 90))
    assert editor.selected == "field_9"
    editor.name_edit.setText("bin_number")
    assert editor.apply_field()
    assert editor.save()
    fields = _fields(editor.path)
    assert "crates_3" not in fields and len(fields["bin_number"]["boxes"]) == 4
    assert len(fields["net_weight"]["boxes"]) == 5 and fields["net_weight"]["type"] == "decimal"
    rules = json.loads(editor.path.read_text(encoding="utf-8"))["rules"]
    assert rules == []  # the sum lost a part with crates_3


def test_move_by_keys_and_by_dragging(editor, qtbot):
    editor.select("block_number")
    before = editor.template.field("block_number").boxes[0]
    editor.canvas.setFocus()
    qtbot.keyClick(editor.canvas, Qt.Key.Key_Right)
    qtbot.keyClick(editor.canvas, Qt.Key.Key_Down, Qt.KeyboardModifier.ShiftModifier)
    moved = editor.template.field("block_number").boxes[0]
    assert (moved.x0 - before.x0, moved.y0 - before.y0) == (1, 10)
    start = QPointF(*moved.centre)
    editor._dragged(start, start + QPointF(20, -5))
    dragged = editor.template.field("block_number").boxes[0]
    assert (dragged.x0 - moved.x0, dragged.y0 - moved.y0) == (20, -5)


def test_click_selects_the_field_under_the_pointer(editor):
    box = editor.template.field("total_crates").boxes[1]
    editor._clicked(QPointF(*box.centre))
    assert editor.selected == "total_crates" and editor.name_edit.text() == "total_crates"
    assert editor.fields.currentItem().text() == "total_crates"


def test_new_template_from_the_blank_card(qtbot, tmp_path):
    from app.views.template_editor import TemplateEditor, draft_from_scan

    draft = draft_from_scan(BLANK, name="card")
    assert not isinstance(draft, str)
    assert len(draft.fields) == 10 and draft.version == 1
    e = TemplateEditor(draft, tmp_path / "new.json")
    qtbot.addWidget(e)
    assert e.save()
    assert load_template(tmp_path / "new.json").version == 1
    assert isinstance(draft_from_scan(tmp_path / "missing.png"), str)


def test_buttons_say_their_keys_and_have_names(editor):
    from PySide6.QtWidgets import QPushButton

    buttons = editor.findChildren(QPushButton)
    assert {b.accessibleName() for b in buttons} >= {"Save", "Split", "Delete field", "Draw a new run"}
    assert all("(" in b.toolTip() and ")" in b.toolTip() for b in buttons)


def test_window_reads_with_a_template_and_shows_the_broken_rule(window, qtbot, tmp_path):
    from recognizer.review import find_field, set_field

    scans = ROOT / "sample_forms" / "scans" / "card_01.png"
    with qtbot.waitSignal(window.reading_done, timeout=60_000):
        assert window.open_scans([scans], batch_path=tmp_path / "one.inkcount", template=CARD)
    batch = window.batch
    assert [r[0] for r in batch.rows("SELECT template FROM pages")] == ["orchard_card v1"]
    total = find_field(batch, "card_01.png", 1, "total_crates")
    value = batch.rows("SELECT value FROM fields WHERE id = ?", (total,))[0][0]
    set_field(batch, total, str(int(value) + 1))  # a total that no longer adds up
    crates = find_field(batch, "card_01.png", 1, "crates_1")

    def shown() -> bool:
        window.review.show_field(crates)
        return "a rule is broken — sum: total_crates" in window.review.place.text()

    qtbot.waitUntil(shown, timeout=5000)  # the panel hears of the change through the event loop
    assert "≠" in window.review.place.text()


def test_window_menu_opens_the_editor(window, qtbot):
    actions = {a.text().replace("&", ""): a for a in window.actions()}
    assert actions["Form template…"].shortcut().toString() == "Ctrl+Shift+T"
    assert actions["New template from a blank form…"].shortcut().toString() == "Ctrl+Shift+N"
    editor = window.edit_template(CARD)
    qtbot.addWidget(editor)
    assert editor.template.name == "orchard_card" and editor.isVisible()
    assert window.edit_template(scan=ROOT / "sample_forms" / "blank_card.png").template.version == 1
