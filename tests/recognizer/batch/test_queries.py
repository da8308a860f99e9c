"""Read-only views of a batch: page counts, one field, a page's fields, digit states,
what a threshold would flag, and the count of labelled samples."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from recognizer.batch.samples import labelled_samples
from recognizer.batch.queries import (
    digit_states,
    field_states,
    labelled_count,
    load_field,
    open_digits,
    page_fields,
    page_summaries,
    pages_of_fields,
)
from recognizer.review import (
    CONFIRMED,
    CORRECTED,
    READ,
    TO_CHECK,
    UNREADABLE,
    set_digit,
    set_field,
    set_threshold,
)
from recognizer.scans.files import ScanProblem
from tests.support.batches import CARD, add_page, digit_ids, field_id, make_page, new_batch


@pytest.fixture
def batch(tmp_path):
    """Two pages of ``a.pdf`` and one of ``b.png`` (each a CARD: f02 to check at threshold 0.9), and a bad file."""
    with new_batch(tmp_path / "b.inkcount") as b:
        add_page(b, "a.pdf", 1)
        add_page(b, "a.pdf", 2)
        add_page(b, "b.png", 1)
        b.add_result(b.add_file("c.png", None, None), ScanProblem(Path("c.png"), None, "not an image"),
                     model_version=None)
        yield b


def test_page_summaries_count_fields_to_check_and_done(batch):
    set_field(batch, field_id(batch, "a.pdf", 2, "f02"), "18", reviewer="ada")
    s = page_summaries(batch)
    assert [(p.label, p.to_check, p.done, p.fields, p.state) for p in s] == [
        ("a.pdf, page 1", 1, 0, 3, TO_CHECK),
        ("a.pdf, page 2", 0, 1, 3, CORRECTED),
        ("b.png", 1, 0, 3, TO_CHECK),
        ("c.png", 0, 0, 0, UNREADABLE),
    ]
    assert s[3].problem == "not an image" and s[3].page is None
    again = page_summaries(batch, [s[2].page_id, s[0].page_id])
    assert [p.page_id for p in again] == [s[0].page_id, s[2].page_id]  # file and page order, not the ids'
    assert page_summaries(batch, []) == []


def test_a_field_whatever_its_state_with_all_its_boxes(batch):
    fid = field_id(batch, "b.png", 1, "f02")
    set_digit(batch, digit_ids(batch, fid)[1], "4", reviewer="ada")
    view = load_field(batch, fid)
    stored = batch.rows("SELECT * FROM fields WHERE id = ?", (fid,))[0]
    assert (view.name, view.file, view.page, view.position) == ("f02", "b.png", 1, 1)
    assert view.boxes == tuple(tuple(b) for b in json.loads(stored["boxes"]))
    assert (view.value, view.read_value, view.state) == (stored["value"], "17", stored["state"])
    assert [(d.box, d.blank, d.read, d.value, d.state) for d in view.digits] == [
        (0, True, "", "", READ), (1, False, "1", "4", CORRECTED), (2, False, "7", "7", READ)]
    assert [d.box for d in view.slots] == [1, 2]
    assert view.place == "b.png, page 1, field f02"
    with pytest.raises(KeyError):
        load_field(batch, 10_000)


def test_page_fields_states_and_pages_of_fields(batch):
    page_id = page_summaries(batch)[2].page_id
    outline = page_fields(batch, page_id)
    assert [(f.name, f.state) for f in outline] == [("f01", READ), ("f02", TO_CHECK), ("f03", READ)]
    fid, name, state, boxes = outline[1]  # unpacks as (id, name, state, boxes)
    assert len(boxes) == len(CARD["f02"]) and all(len(b) == 4 for b in boxes)
    assert pages_of_fields(batch, [fid, outline[0].field_id]) == {page_id}
    assert pages_of_fields(batch, []) == set()
    assert field_states(batch, [fid]) == {fid: TO_CHECK}
    assert len(field_states(batch)) == 9 and field_states(batch, []) == {}
    ids = digit_ids(batch, fid)
    assert digit_states(batch, [fid]) == {ids[1]: TO_CHECK, ids[2]: READ}  # the empty box is left out


@pytest.mark.parametrize("threshold", [0.0, 0.96, 0.985, 1.0])
def test_open_digits_count_what_a_threshold_would_flag_without_applying_it(batch, threshold):
    confirm_id = digit_ids(batch, field_id(batch, "a.pdf", 1, "f01"))[2]  # 0.98: handled, never re-flagged
    set_digit(batch, confirm_id, "1", reviewer="ada")
    before = batch.rows("SELECT COUNT(*) FROM digits WHERE state = ?", (TO_CHECK,))[0][0]
    open_ = open_digits(batch)
    assert open_.to_check_now == before
    assert len(open_.predictions) == 3 * 7 - 1  # 7 written boxes a card
    predicted = open_.to_check_at(threshold)
    assert batch.rows("SELECT COUNT(*) FROM digits WHERE state = ?", (TO_CHECK,))[0][0] == before  # nothing applied
    set_threshold(batch, threshold)
    assert batch.rows("SELECT COUNT(*) FROM digits WHERE state = ? AND id != ?",
                      (TO_CHECK, confirm_id))[0][0] == predicted


def test_labelled_count_matches_the_labelled_samples(batch):
    assert labelled_count(batch) == 0
    set_field(batch, field_id(batch, "a.pdf", 1, "f02"), "47", reviewer="ada")    # corrected + confirmed
    set_field(batch, field_id(batch, "a.pdf", 2, "f03"), "123", reviewer="ada")   # no per-box labels
    set_digit(batch, digit_ids(batch, field_id(batch, "b.png", 1, "f01"))[0], "", reviewer="ben")
    states = [r.state for r in labelled_samples(batch)[3]]
    assert labelled_count(batch) == len(states) == 3 and set(states) == {CORRECTED, CONFIRMED}


def test_a_page_without_fields_counts_nothing(tmp_path):
    with new_batch(tmp_path / "p.inkcount") as b:
        b.add_result(b.add_file("x.png", "x", 1), make_page("x.png", 1, {}, problem="no digit boxes found"),
                     model_version=None)
        [s] = page_summaries(b)
        assert (s.fields, s.state, s.problem) == (0, UNREADABLE, "no digit boxes found")
