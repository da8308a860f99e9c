"""The typed writes of a review (recognizer.batch.edits): snapshots, box and field
updates, new readings and the action log, on tiny hand-made batches."""

from __future__ import annotations

import json

import numpy as np
import pytest

from recognizer.batch import edits
from recognizer.batch.edits import ActionRow, DigitSnapshot, FieldSnapshot, NewReading
from recognizer.states import State
from tests.support.batches import add_page, digit_ids, field_id, field_row, new_batch

SPEC = {"f01": [("", 0.0), ("4", 0.97), ("?", 0.99)]}


@pytest.fixture
def batch(tmp_path):
    with new_batch(tmp_path / "e.inkcount") as b:
        add_page(b, "a.png", spec=SPEC)
        yield b


def test_a_snapshot_is_the_field_and_its_boxes_and_round_trips_through_json(batch):
    fid = field_id(batch, "a.png", 1, "f01")
    ids = digit_ids(batch, fid)
    with batch.transaction() as conn:
        snap = edits.snapshot_field(conn, fid)
        assert edits.snapshot_field(conn, 10_000) is None
    assert snap == FieldSnapshot("4?", False, None, (DigitSnapshot(ids[0], "", State.READ),
                                                       DigitSnapshot(ids[1], "4", State.READ),
                                                       DigitSnapshot(ids[2], "?", State.TO_CHECK)))
    # the stored form of actions.before, as earlier versions wrote it
    assert json.loads(snap.to_json()) == {"field": ["4?", 0, None],
                                          "digits": [[ids[0], "", "read"], [ids[1], "4", "read"],
                                                     [ids[2], "?", "to check"]]}
    assert FieldSnapshot.from_json(snap.to_json()) == snap


def test_box_and_field_updates_then_restore_puts_everything_back(batch):
    fid = field_id(batch, "a.png", 1, "f01")
    ids = digit_ids(batch, fid)
    before_row = tuple(field_row(batch, fid))
    with batch.transaction() as conn:
        snap = edits.snapshot_field(conn, fid)
        assert [(b.digit_id, b.blank, b.prediction) for b in edits.field_boxes(conn, fid)] == [
            (ids[0], True, ""), (ids[1], False, "4"), (ids[2], False, "?")]
        edits.set_digits(conn, [(ids[1], "5", State.CORRECTED), (ids[2], None, State.CORRECTED)])
        edits.set_digit_state(conn, ids[0], State.UNREADABLE)
        edits.set_field_whole(conn, fid, "512", State.CORRECTED)
        assert edits.field_value(conn, fid) == "512"
        assert edits.field_value(conn, 10_000) is None
    row = field_row(batch, fid)
    assert (row["value"], row["whole"], row["resolution"]) == ("512", 1, State.CORRECTED)
    boxes = batch.rows("SELECT value, state FROM digits WHERE field_id = ? ORDER BY box", (fid,))
    assert [tuple(b) for b in boxes] == [("", State.UNREADABLE), ("5", State.CORRECTED), (None, State.CORRECTED)]
    with batch.transaction() as conn:
        edits.set_field_by_box(conn, fid, State.CONFIRMED)
        row = conn.execute("SELECT value, whole, resolution FROM fields WHERE id = ?", (fid,)).fetchone()
        assert tuple(row) == ("512", 0, State.CONFIRMED)  # the value is re-derived by refresh_states
        edits.set_resolution(conn, fid, State.UNREADABLE)
        assert conn.execute("SELECT resolution FROM fields WHERE id = ?", (fid,)).fetchone()[0] == State.UNREADABLE
        edits.restore_field(conn, fid, snap)
    assert tuple(field_row(batch, fid)) == before_row
    with batch.transaction() as conn:
        assert edits.snapshot_field(conn, fid) == snap


def test_new_readings_replace_prediction_value_probabilities_and_model(batch):
    fid = field_id(batch, "a.png", 1, "f01")
    ids = digit_ids(batch, fid)
    probs = np.linspace(0.0, 1.0, 11)
    with batch.transaction() as conn:
        edits.store_readings(conn, [NewReading(ids[2], probs, "7", 0.93)], model_version="fake-2")
    r = batch.rows("SELECT prediction, value, confidence, model_version FROM digits WHERE id = ?", (ids[2],))[0]
    assert tuple(r) == ("7", "7", pytest.approx(0.93), "fake-2")
    np.testing.assert_array_equal(batch.digit_probs(ids[2]), probs.astype(np.float32))


def test_new_readings_never_touch_a_box_a_person_handled_meanwhile(batch):
    # readings are computed outside the transaction that stores them: a box checked in
    # between, or a field resolved as a whole, keeps the person's value
    fid = field_id(batch, "a.png", 1, "f01")
    ids = digit_ids(batch, fid)
    probs = np.linspace(0.0, 1.0, 11)
    with batch.transaction() as conn:
        edits.set_digits(conn, [(ids[1], "5", State.CORRECTED)])
        edits.store_readings(conn, [NewReading(ids[1], probs, "7", 0.93), NewReading(ids[2], probs, "7", 0.93),
                                    NewReading(ids[0], probs, "7", 0.93)], model_version="fake-2")
    rows = batch.rows("SELECT value, state, model_version FROM digits WHERE field_id = ? ORDER BY box", (fid,))
    assert [r["value"] for r in rows] == ["", "5", "7"]  # a blank box is not a written box either
    assert rows[1]["state"] == State.CORRECTED and rows[1]["model_version"] != "fake-2"
    with batch.transaction() as conn:
        edits.set_resolution(conn, fid, State.UNREADABLE)
        edits.store_readings(conn, [NewReading(ids[2], probs, "3", 0.99)], model_version="fake-3")
    assert batch.rows("SELECT value FROM digits WHERE id = ?", (ids[2],))[0]["value"] == "7"


def test_the_action_log_finds_the_last_action_in_effect_by_reviewer_field_and_order(batch):
    fid = field_id(batch, "a.png", 1, "f01")
    kinds = ("set field", "confirm field")
    with batch.transaction() as conn:
        snap = edits.snapshot_field(conn, fid)
        first = edits.add_action(conn, time="t1", reviewer="ada", kind="set field", field_id=fid,
                                 old="4?", new="41", before=snap)
        second = edits.add_action(conn, time="t2", reviewer="ben", kind="confirm field", field_id=fid,
                                  old="41", new="41", before=snap)
        edits.add_action(conn, time="t3", reviewer="ada", kind="threshold", old="0.9", new="0.8")
        last = edits.last_action(conn, kinds, reviewer="ada")
        assert last == ActionRow(first, "t1", "ada", "set field", fid, None, "4?", "41", snap, None, None)
        assert edits.last_action(conn, kinds, field_id=fid, after=first).id == second
        assert edits.last_action(conn, kinds, field_id=fid, after=second) is None
        assert edits.last_action(conn, ("threshold",)).before is None
        edits.mark_undone(conn, second, first)
        assert edits.last_action(conn, kinds, field_id=fid).id == first
        assert edits.last_action(conn, kinds, reviewer="cyd") is None
    row = batch.rows("SELECT undone_by, before FROM actions WHERE id = ?", (second,))[0]
    assert row["undone_by"] == first and json.loads(row["before"])["field"] == ["4?", 0, None]
