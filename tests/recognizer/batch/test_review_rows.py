"""The read-only rows the review works from (recognizer.batch.review_rows), and the
file and page views of recognizer.batch.queries, on tiny hand-made batches."""

from __future__ import annotations

from pathlib import Path

import pytest

from recognizer.batch import review_rows
from recognizer.batch.queries import (
    count_fields,
    field_place,
    find_field_id,
    page_dpi,
    stored_files,
    stored_pages,
)
from recognizer.review import CONFIRMED, CORRECTED, READ, TO_CHECK, set_field, set_threshold
from recognizer.scans.files import ScanProblem
from tests.support.batches import DPI, add_page, digit_ids, field_id, new_batch

SPEC = {
    "f01": [("0", 0.99), ("4", 0.97)],
    "f02": [("", 0.0), ("1", 0.5), ("?", 0.99)],
}


@pytest.fixture
def batch(tmp_path):
    """``a.png`` (f02 to check: one unsure digit and one mark), ``b.png`` with page warnings, a bad file."""
    with new_batch(tmp_path / "r.inkcount") as b:
        add_page(b, "a.png", spec=SPEC)
        add_page(b, "b.png", spec={"f01": [("5", 0.99)]}, warnings=["skewed 3 degrees"])
        b.add_result(b.add_file("c.png", None, None), ScanProblem(Path("c.png"), None, "not an image"),
                     model_version=None)
        yield b


def test_files_pages_and_where_a_field_is(batch):
    files = stored_files(batch)
    assert [(f.path, f.sha256, f.complete) for f in files] == [
        ("a.png", "sha-a.png", False), ("b.png", "sha-b.png", False), ("c.png", None, False)]
    pages = stored_pages(batch)
    assert [(p.file, p.page, p.problem, p.template) for p in pages] == [
        ("a.png", 1, None, None), ("b.png", 1, None, None), ("c.png", None, "not an image", None)]
    assert [p.file_id for p in pages] == [f.file_id for f in files]
    assert page_dpi(batch, pages[0].page_id) == DPI and page_dpi(batch, pages[2].page_id) is None
    with pytest.raises(KeyError):
        page_dpi(batch, 10_000)
    fid = field_id(batch, "a.png", 1, "f02")
    assert find_field_id(batch, files[0].file_id, 1, "f02") == fid
    assert find_field_id(batch, files[0].file_id, 2, "f02") is None
    assert field_place(batch, fid) == ("a.png", 1, "f02")
    with pytest.raises(KeyError):
        field_place(batch, 10_000)
    assert count_fields(batch, TO_CHECK) == 2 and count_fields(batch, READ) == 1


def test_fields_and_digits_to_check_carry_the_inputs_of_their_reasons(batch):
    fields = {f.name + f.file: f for f in review_rows.fields_to_check(batch)}
    assert set(fields) == {"f02a.png", "f01b.png"}
    f = fields["f02a.png"]
    assert (f.page, f.position, f.value, f.read_value, f.gap) == (1, 1, "1?", "1?", False)
    assert (f.marks, f.unsure, f.lowest) == (1, 1, 0.5)
    assert (f.box_doubts, f.rule_problems, f.page_warnings, f.odd_layout) == ((), (), (), False)
    assert fields["f01b.png"].page_warnings == ("skewed 3 degrees",)
    assert (fields["f01b.png"].marks, fields["f01b.png"].unsure) == (0, 0)
    ids = digit_ids(batch, f.field_id)
    digits = sorted(review_rows.digits_to_check(batch), key=lambda d: d.digit_id)
    assert [(d.digit_id, d.box, d.prediction, d.value, d.name, d.file) for d in digits] == [
        (ids[1], 1, "1", "1", "f02", "a.png"), (ids[2], 2, "?", "?", "f02", "a.png")]


def test_one_box_and_the_checked_values(batch):
    fid = field_id(batch, "a.png", 1, "f02")
    ids = digit_ids(batch, fid)
    row = review_rows.digit_row(batch, ids[0])
    assert (row.field_id, row.blank, row.prediction, row.value, row.state, row.whole) == (fid, True, "", "", READ,
                                                                                          False)
    assert review_rows.digit_row(batch, 10_000) is None
    set_field(batch, fid, "123", reviewer="ada")   # 3 digits for 2 written boxes: set as a whole
    assert review_rows.digit_row(batch, ids[1]).whole
    checked = {(c.name, c.page_id): c for c in review_rows.checked_fields(batch)}
    assert len(checked) == 3
    c = checked[("f02", stored_pages(batch)[0].page_id)]
    assert (c.value, c.typed, c.state, c.position, c.template, c.lowest) == ("123", None, CORRECTED, 1, None, 0.5)


def test_the_action_log_oldest_first_with_the_snapshot_decoded(batch):
    fid = field_id(batch, "a.png", 1, "f01")
    set_threshold(batch, 0.5, reviewer="ben")
    set_field(batch, fid, "04", reviewer="ada")
    log = review_rows.action_log(batch)
    assert [(a.kind, a.reviewer) for a in log] == [("threshold", "ben"), ("set field", "ada")]
    assert log[0].before is None
    assert (log[1].before.value, log[1].before.resolution) == ("04", None)
    assert [d.state for d in log[1].before.digits] == [READ, READ]
    assert (log[1].field_id, log[1].old_value, log[1].new_value) == (fid, "04", "04")
    assert review_rows.digit_row(batch, digit_ids(batch, fid)[0]).state == CONFIRMED


def test_the_boxes_a_new_model_reads_again(batch):
    a, b, _bad = (p.page_id for p in stored_pages(batch))
    assert review_rows.pages_with_open_digits(batch) == [a, b]
    fid = field_id(batch, "a.png", 1, "f02")
    boxes = review_rows.open_boxes(batch, a)
    assert len(boxes) == 4  # the written boxes of f01 and f02; the empty box is left out
    f02 = [o for o in boxes if o.field_id == fid]
    assert [(o.box, o.prediction) for o in f02] == [(1, "1"), (2, "?")]
    assert len(f02[0].field_boxes) == 3 and all(len(e) == 4 for e in f02[0].field_boxes)
    set_field(batch, field_id(batch, "b.png", 1, "f01"), "5", reviewer="ada")
    assert review_rows.pages_with_open_digits(batch) == [a]
    assert review_rows.open_boxes(batch, b) == []
