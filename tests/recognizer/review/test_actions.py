"""Flagging rules, the review queue, review actions with undo, threshold changes,
re-reading with another model, and the ``review`` / ``status`` commands."""

from __future__ import annotations


import numpy as np
import pytest

from recognizer.batch.store import Batch
from recognizer.cli.batch import parse_ref
from recognizer.review import (
    CONFIRMED,
    CORRECTED,
    READ,
    TO_CHECK,
    UNREADABLE,
    actions,
    confirm,
    find_field,
    mark_unreadable,
    reread_unchecked,
    ReviewError,
    ReviewQueue,
    set_digit,
    set_field,
    set_target_error,
    set_threshold,
    state_counts,
    undo,
)
from recognizer.scans.files import ScanProblem
from tests.support.cli import run
from tests.support.batches import (
    CARD,
    FakeModel,
    add_page,
    digit_ids,
    field_id,
    field_row,
    new_batch,
)


@pytest.fixture
def batch(tmp_path):
    with new_batch(tmp_path / "b.inkcount") as b:
        yield b


def states(batch, fid):
    return [r[0] for r in batch.rows("SELECT state FROM digits WHERE field_id = ? ORDER BY box", (fid,))]


# --------------------------------------------------------------------------- stored flags


def test_digits_are_flagged_below_the_threshold_or_as_not_a_digit(batch):
    add_page(batch, "a.png", spec={"f01": [("3", 0.95), ("?", 0.99), ("8", 0.89), ("", 0.0)]})
    fid = field_id(batch, "a.png", 1, "f01")
    assert states(batch, fid) == [READ, TO_CHECK, TO_CHECK, READ]
    assert field_row(batch, fid)["value"] == "3?8"
    assert field_row(batch, fid)["state"] == TO_CHECK


@pytest.mark.parametrize(
    "spec, warnings, expected",
    [
        ({"f01": [("1", 0.99), ("", 0.0), ("2", 0.99)]}, (), TO_CHECK),   # gap
        ({"f01": [("", 0.0), ("1", 0.99), ("2", 0.99)]}, (), READ),       # leading empty box: no gap
        ({"f01": [("1", 0.99), ("2", 0.99)]}, ("lines faint",), TO_CHECK),
    ],
    ids=["gap", "right-aligned", "page warnings"],
)
def test_field_level_flags(batch, spec, warnings, expected):
    add_page(batch, "a.png", spec=spec, warnings=warnings)
    assert field_row(batch, field_id(batch, "a.png", 1, "f01"))["state"] == expected


def test_pages_with_another_layout_are_flagged_as_more_pages_come(batch):
    """Only the field whose number of boxes differs is flagged, not the whole page (recognizer.states)."""
    sure = {"f01": [("1", 0.99), ("2", 0.99)], "f02": [("3", 0.99)]}
    odd = {"f01": [("1", 0.99), ("2", 0.99), ("5", 0.99)], "f02": [("3", 0.99)]}
    heard = []
    batch.subscribe(heard.append)
    first = add_page(batch, "odd.png", spec=odd)
    assert state_counts(batch)["fields"] == {READ: 2}  # alone, it is the batch's layout
    second = add_page(batch, "a.png", spec=sure)
    assert state_counts(batch)["fields"] == {READ: 3, TO_CHECK: 1}  # a tie: the first layout seen wins
    assert field_row(batch, field_id(batch, "a.png", 1, "f01"))["state"] == TO_CHECK
    third = add_page(batch, "b.png", spec=sure)
    assert heard[-1].page_ids == (third, first, second)  # both changed their flag
    counts = state_counts(batch)
    assert counts["fields"] == {READ: 5, TO_CHECK: 1} and counts["pages"] == {READ: 2, TO_CHECK: 1}
    items = ReviewQueue(batch).items()
    assert {(i.file, i.field) for i in items} == {("odd.png", "f01")}  # f02 has the batch's single box
    assert all(i.why == ("layout differs",) for i in items)


# --------------------------------------------------------------------------- actions


def test_set_digit_corrects_or_confirms_and_updates_the_field(batch):
    add_page(batch, "a.png")
    fid = field_id(batch, "a.png", 1, "f02")  # "", "1" (0.5), "7"
    d = digit_ids(batch, fid)
    set_digit(batch, d[1], "4", reviewer="ada")
    assert states(batch, fid) == [READ, CORRECTED, READ]
    assert (field_row(batch, fid)["value"], field_row(batch, fid)["state"]) == ("47", CORRECTED)
    set_digit(batch, d[0], "1", reviewer="ada")  # a digit the blank test missed
    assert field_row(batch, fid)["value"] == "147"
    with pytest.raises(ReviewError, match="0-9 or empty"):
        set_digit(batch, d[1], "42")


def test_set_digit_back_to_what_was_read_is_a_confirmation(batch):
    add_page(batch, "a.png")
    fid = field_id(batch, "a.png", 1, "f02")
    set_digit(batch, digit_ids(batch, fid)[1], "1")
    assert states(batch, fid)[1] == CONFIRMED and field_row(batch, fid)["state"] == CONFIRMED


def test_set_field_with_as_many_digits_labels_each_box(batch):
    add_page(batch, "a.png")
    fid = field_id(batch, "a.png", 1, "f02")
    action = set_field(batch, fid, "47", reviewer="ada")
    assert (action.old_value, action.new_value, action.kind) == ("17", "47", "set field")
    row = field_row(batch, fid)
    assert (row["value"], row["whole"], row["resolution"], row["state"]) == ("47", 0, CORRECTED, CORRECTED)
    assert states(batch, fid) == [READ, CORRECTED, CONFIRMED]


def test_set_field_with_another_number_of_digits_sets_it_as_a_whole(batch):
    add_page(batch, "a.png")
    fid = field_id(batch, "a.png", 1, "f02")
    set_field(batch, fid, "017")
    row = field_row(batch, fid)
    assert (row["value"], row["whole"], row["state"]) == ("017", 1, CORRECTED)
    values = [r[0] for r in batch.rows("SELECT value FROM digits WHERE field_id = ? ORDER BY box", (fid,))]
    assert values == ["", None, None]
    with pytest.raises(ReviewError, match="as a whole"):
        set_digit(batch, digit_ids(batch, fid)[1], "3")
    set_field(batch, fid, "")   # the field is empty after all
    assert field_row(batch, fid)["value"] == ""
    with pytest.raises(ReviewError, match="digits 0-9"):
        set_field(batch, fid, "4a")


def test_confirm_accepts_the_value_as_it_stands(batch):
    add_page(batch, "a.png", spec={"f01": [("5", 0.4), ("?", 0.9), ("6", 0.99)]})
    fid = field_id(batch, "a.png", 1, "f01")
    action = confirm(batch, field=fid)
    assert (action.old_value, action.new_value) == ("5?6", "56")  # the mark drops out
    assert states(batch, fid) == [CONFIRMED, CONFIRMED, CONFIRMED]
    assert field_row(batch, fid)["state"] == CONFIRMED


def test_confirming_a_gap_field_resolves_it_and_keeps_corrections(batch):
    add_page(batch, "a.png", spec={"f01": [("1", 0.99), ("", 0.0), ("2", 0.5)]})
    fid = field_id(batch, "a.png", 1, "f01")
    set_digit(batch, digit_ids(batch, fid)[2], "3")
    assert field_row(batch, fid)["state"] == TO_CHECK  # the gap is still unexplained
    confirm(batch, field=fid)
    assert states(batch, fid) == [CONFIRMED, READ, CORRECTED]
    assert (field_row(batch, fid)["value"], field_row(batch, fid)["state"]) == ("13", CORRECTED)


def test_mark_unreadable_field_and_digit(batch):
    add_page(batch, "a.png")
    f01, f02 = field_id(batch, "a.png", 1, "f01"), field_id(batch, "a.png", 1, "f02")
    mark_unreadable(batch, field=f01)
    mark_unreadable(batch, digit=digit_ids(batch, f02)[1])
    assert field_row(batch, f01)["state"] == UNREADABLE and field_row(batch, f02)["state"] == UNREADABLE
    set_field(batch, f01, "041")  # a second look
    assert field_row(batch, f01)["state"] == CONFIRMED
    with pytest.raises(TypeError):
        confirm(batch, field=f01, digit=digit_ids(batch, f02)[1])


def test_actions_are_logged_with_reviewer_time_and_values(batch):
    add_page(batch, "a.png")
    fid = field_id(batch, "a.png", 1, "f02")
    set_field(batch, fid, "47", reviewer="ada")
    confirm(batch, field=field_id(batch, "a.png", 1, "f01"), reviewer="ben")
    log = actions(batch)
    assert [(a.reviewer, a.kind, a.old_value, a.new_value) for a in log] == [
        ("ada", "set field", "17", "47"), ("ben", "confirm field", "041", "041")]
    assert all(a.time.endswith("+00:00") for a in log)


def test_undo_restores_the_field_step_by_step(batch):
    add_page(batch, "a.png")
    fid = field_id(batch, "a.png", 1, "f02")
    before = (states(batch, fid), tuple(field_row(batch, fid)))
    set_field(batch, fid, "47", reviewer="ada")
    set_field(batch, fid, "123", reviewer="ada")
    first = undo(batch, reviewer="ada")
    assert (first.old_value, first.new_value) == ("123", "47")
    assert field_row(batch, fid)["value"] == "47" and field_row(batch, fid)["whole"] == 0
    undo(batch, reviewer="ada")
    assert (states(batch, fid), tuple(field_row(batch, fid))) == before
    assert undo(batch, reviewer="ada") is None
    assert [a.undone_by is not None for a in actions(batch) if a.kind != "undo"] == [True, True]


def test_undo_is_per_reviewer_and_never_clobbers_a_later_change(batch):
    add_page(batch, "a.png")
    f01, f02 = field_id(batch, "a.png", 1, "f01"), field_id(batch, "a.png", 1, "f02")
    set_field(batch, f02, "47", reviewer="ada")
    set_field(batch, f01, "042", reviewer="ben")
    undo(batch, reviewer="ada")  # ada's change, although ben acted last
    assert field_row(batch, f02)["value"] == "17" and field_row(batch, f01)["value"] == "042"
    set_field(batch, f01, "043", reviewer="ada")
    set_field(batch, f01, "044", reviewer="ben")
    with pytest.raises(ReviewError, match="ben changed the same field"):
        undo(batch, reviewer="ada")
    assert field_row(batch, f01)["value"] == "044"


def test_undo_re_flags_with_the_current_threshold(batch):
    add_page(batch, "a.png")
    fid = field_id(batch, "a.png", 1, "f02")
    confirm(batch, field=fid, reviewer="ada")
    set_threshold(batch, 0.3, reviewer="ada")
    undo(batch, reviewer="ada")  # threshold changes are not undone; the confirmation is
    assert states(batch, fid) == [READ, READ, READ] and field_row(batch, fid)["state"] == READ


def test_review_actions_notify_observers(batch):
    add_page(batch, "a.png")
    fid = field_id(batch, "a.png", 1, "f02")
    heard = []
    batch.subscribe(heard.append)
    d = digit_ids(batch, fid)[1]
    set_digit(batch, d, "4")
    undo(batch)
    set_threshold(batch, 0.2)
    assert [(c.kind, c.field_ids, c.digit_ids) for c in heard] == [
        ("review", (fid,), (d,)), ("review", (fid,), ()), ("flags", (), ())]


# --------------------------------------------------------------------------- threshold


def test_changing_the_threshold_re_flags_without_touching_handled_digits(batch):
    add_page(batch, "a.png", spec={"f01": [("1", 0.6), ("2", 0.7), ("3", 0.8), ("?", 0.99)]})
    fid = field_id(batch, "a.png", 1, "f01")
    d = digit_ids(batch, fid)
    set_digit(batch, d[0], "7")
    assert states(batch, fid) == [CORRECTED, TO_CHECK, TO_CHECK, TO_CHECK]
    assert set_threshold(batch, 0.75) == 1
    assert states(batch, fid) == [CORRECTED, TO_CHECK, READ, TO_CHECK]
    set_threshold(batch, 0.0)
    assert states(batch, fid) == [CORRECTED, READ, READ, TO_CHECK]  # not a digit: always checked
    settings = batch.settings
    assert (settings.threshold, settings.threshold_source) == (0.0, "manual")
    with pytest.raises(ReviewError):
        set_threshold(batch, 1.5)


def test_target_error_sets_the_threshold_from_the_model(batch):
    add_page(batch, "a.png", spec={"f01": [("1", 0.6), ("2", 0.92)]})
    fid = field_id(batch, "a.png", 1, "f01")
    assert set_target_error(batch, 0.005, model=FakeModel()) == pytest.approx(0.5)
    assert states(batch, fid) == [READ, READ]
    assert set_target_error(batch, 0.0001, model=FakeModel()) == pytest.approx(0.99)
    assert states(batch, fid) == [TO_CHECK, TO_CHECK]
    assert batch.settings.threshold_source == "target"
    with pytest.raises(ReviewError, match="did not read this batch"):
        set_target_error(batch, 0.001, model=FakeModel("other"))


# --------------------------------------------------------------------------- queue


@pytest.fixture
def queue_batch(batch):
    add_page(batch, "b.png", spec={"f01": [("7", 0.3), ("1", 0.99)], "f02": [("?", 0.95)]})
    add_page(batch, "a.png", spec={"f01": [("7", 0.6), ("2", 0.2)], "f02": [("7", 0.8)]})
    return batch


def test_queue_by_page(queue_batch):
    items = ReviewQueue(queue_batch, order="page").items()
    assert [i.ref for i in items] == ["b.png:1:f01", "b.png:1:f02", "a.png:1:f01", "a.png:1:f02"]
    assert [i.why for i in items[:2]] == [("low confidence",), ("not a digit",)]
    assert items[2].confidence == pytest.approx(0.2) and items[2].read == "72"


def test_queue_by_confidence(queue_batch):
    assert [i.ref for i in ReviewQueue(queue_batch, order="confidence")] == [
        "a.png:1:f01", "b.png:1:f01", "a.png:1:f02", "b.png:1:f02"]


def test_queue_by_digit_groups_what_was_read(queue_batch):
    items = ReviewQueue(queue_batch, order="digit").items()
    assert [(i.read, i.confidence) for i in items] == [
        ("2", pytest.approx(0.2)), ("7", pytest.approx(0.3)), ("7", pytest.approx(0.6)),
        ("7", pytest.approx(0.8)), ("?", pytest.approx(0.95))]
    assert all(i.digit_id is not None for i in items)
    with pytest.raises(ValueError):
        ReviewQueue(queue_batch, order="digit", unit="field")


def test_iterating_the_queue_follows_actions(queue_batch):
    queue = ReviewQueue(queue_batch, order="page")
    seen = []
    for item in queue:
        seen.append(item.ref)
        if item.ref == "b.png:1:f01":
            # resolving an item further on removes it from the rest of the run
            confirm(queue_batch, field=find_field(queue_batch, "a.png", 1, "f01"))
        elif item.ref == "b.png:1:f02":
            pass  # skipped, not handled: stays in the queue, not handed out again
        else:
            confirm(queue_batch, field=item.field_id)
    assert seen == ["b.png:1:f01", "b.png:1:f02", "a.png:1:f02"]
    assert [i.ref for i in queue.items()] == ["b.png:1:f01", "b.png:1:f02"]
    assert len(queue) == 2


def test_find_field_matches_trailing_path_parts(batch):
    add_page(batch, "cards/june/a.png")
    add_page(batch, "cards/july/a.png")
    fid = field_id(batch, "cards/june/a.png", 1, "f02")
    assert find_field(batch, "june/a.png", 1, "f02") == fid
    assert find_field(batch, "cards/june/a.png", 1, "f02") == fid
    with pytest.raises(ReviewError, match="matches 2 files"):
        find_field(batch, "a.png", 1, "f02")
    with pytest.raises(ReviewError, match="no field"):
        find_field(batch, "june/a.png", 2, "f02")
    with pytest.raises(ReviewError, match="no file"):
        find_field(batch, "b.png", 1, "f02")


# --------------------------------------------------------------------------- re-reading


def test_reread_unchecked_keeps_what_people_handled(batch):
    add_page(batch, "a.png")
    f01, f02 = field_id(batch, "a.png", 1, "f01"), field_id(batch, "a.png", 1, "f02")
    set_field(batch, f01, "941", reviewer="ada")
    mark_unreadable(batch, digit=digit_ids(batch, f02)[2])
    before = {r["id"]: tuple(r) for r in batch.rows("SELECT * FROM digits")}
    summary = reread_unchecked(batch, FakeModel("fake-2"), model_path="models/fake-2.npz")
    after = {r["id"]: r for r in batch.rows("SELECT * FROM digits")}
    reread = {i for i, r in after.items() if r["model_version"] == "fake-2"}
    untouched = set(digit_ids(batch, f01)) | {digit_ids(batch, f02)[2]}
    assert reread == {i for i, r in after.items() if not r["blank"]} - untouched
    assert summary.digits == len(reread) == 3
    for i in untouched | {i for i, r in after.items() if r["blank"]}:
        assert tuple(after[i]) == before[i]
    for i in reread:
        probs = batch.digit_probs(i)
        assert after[i]["prediction"] == str(int(np.argmax(probs)))  # the fake reads digits from ink
        assert after[i]["confidence"] == pytest.approx(0.9, abs=1e-6)
    assert field_row(batch, f01)["value"] == "941"
    settings = batch.settings
    assert (settings.model_version, settings.model_path) == ("fake-2", "models/fake-2.npz")


def test_reread_recomputes_a_target_threshold(batch):
    add_page(batch, "a.png")
    with batch.transaction() as conn:
        batch.update_settings(conn, target_error=0.002, threshold_source="target")

    class Stricter(FakeModel):
        def threshold_for(self, target):
            return 0.95

    summary = reread_unchecked(batch, Stricter("fake-3"))
    assert summary.threshold == batch.settings.threshold == 0.95
    assert state_counts(batch)["digits"] == {TO_CHECK: 7}  # the fake is only 0.9 sure


# --------------------------------------------------------------------------- commands


@pytest.fixture
def batch_path(tmp_path):
    path = tmp_path / "june.inkcount"
    with new_batch(path) as b:
        add_page(b, "cards/a.png")
        add_page(b, "cards/b.png", spec={"f01": [("3", 0.2), ("?", 0.9), ("", 0.0)],
                                         "f02": [("", 0.0), ("", 0.0), ("5", 0.99)], "f03": CARD["f03"]})
        b.add_result(b.add_file("cards/c.pdf", None, None), ScanProblem("cards/c.pdf", None, "encrypted PDF"),
                     model_version=None)
    return path


def test_review_list_shows_what_is_left(batch_path, capsys):
    assert run("review", str(batch_path)) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0] == "2 field(s) to check on 2 page(s); 1 page(s) or file(s) not read."
    assert out[1].split() == ["file", "page", "field", "value", "read", "lowest", "confidence", "why"]
    # why, in words (recognizer.states.REASON_WORDS), never as the reasons' keys
    assert out[2].split() == ["cards/a.png", "1", "f02", "17", "0.500", *"a digit the reader is unsure of".split()]
    assert out[3].split() == ["cards/b.png", "1", "f01", "3?", "0.200",
                              *"a digit the reader is unsure of; a mark that may not be a digit".split()]
    assert out[4] == "not read: cards/c.pdf: encrypted PDF"


def test_review_actions_from_the_command_line(batch_path, capsys):
    assert run("review", str(batch_path), "--set", "a.png:1:f02=47", "--unreadable", "b.png:1:f01",
               "--confirm", "cards/a.png:1:f03", "--reviewer", "clem", "--list") == 0
    out = capsys.readouterr().out.splitlines()
    assert out[:3] == ["set a.png:1:f02 = '47' (was '17')", "marked b.png:1:f01 unreadable",
                       "confirmed cards/a.png:1:f03 = '23'"]
    assert out[3].startswith("0 field(s) to check")
    assert run("review", str(batch_path), "--undo", "--undo", "--reviewer", "clem") == 0
    out = capsys.readouterr().out.splitlines()
    assert out[:2] == ["undone: cards/a.png:1:f03 is '23' again (was '23')",
                       "undone: cards/b.png:1:f01 is '3?' again (was '3?')"]
    with Batch.open(batch_path, read_only=True) as b:
        assert [(a.reviewer, a.kind) for a in actions(b)][-2:] == [("clem", "undo"), ("clem", "undo")]
        assert state_counts(b)["fields"][TO_CHECK] == 1


@pytest.mark.parametrize(
    "argv, message",
    [
        (["--set", "a.png:1:f02"], "FILE:PAGE:FIELD=VALUE"),
        (["--confirm", "a.png:x:f02"], "page a number"),
        (["--set", "a.png:1:f02=47", "--confirm", "z.png:1:f01"], "no file 'z.png'"),
        (["--set", "a.png:1:f09=4"], "no field 'f09'"),
    ],
)
def test_review_refuses_bad_references_before_changing_anything(batch_path, capsys, argv, message):
    assert run("review", str(batch_path), *argv) == 2
    err = capsys.readouterr().err
    assert message in err and "nothing was changed" in err
    with Batch.open(batch_path, read_only=True) as b:
        assert actions(b) == []


def test_review_reports_a_refused_action(batch_path, capsys):
    assert run("review", str(batch_path), "--set", "a.png:1:f02=4x") == 1
    assert "digits 0-9" in capsys.readouterr().err


def test_parse_ref_splits_from_the_right():
    assert parse_ref(r"C:\scans\a.png:3:f02=0041", with_value=True) == (r"C:\scans\a.png", 3, "f02", "0041")
    assert parse_ref("a.png:12:f10") == ("a.png", 12, "f10", None)


def test_status_counts_by_state(batch_path, capsys):
    assert run("status", str(batch_path)) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[1] == "threshold 0.9000 (from a target residual error of 0.1 %); model fake-1"
    table = {line.split()[0]: line.split()[1:] for line in out[3:6]}
    assert out[2].split() == ["to", "check", "unreadable", "corrected", "confirmed", "read", "total"]
    assert table["pages"] == ["2", "1", "0", "0", "0", "3"]
    assert table["fields"] == ["2", "0", "0", "0", "4", "6"]
    assert table["digits"] == ["3", "0", "0", "0", "9", "12"]
    assert out[6] == "2 field(s) still to check."


def test_commands_report_unusable_batch_files(tmp_path, capsys):
    path = tmp_path / "notes.inkcount"
    path.write_text("hello")
    for command in ("review", "status"):
        assert run(command, str(path)) == 2
        assert "not an SQLite database" in capsys.readouterr().err


def test_actions_on_unknown_ids_are_refused(batch):
    add_page(batch, "a.png")
    with pytest.raises(ReviewError, match="no field 999"):
        set_field(batch, 999, "1")
    with pytest.raises(ReviewError, match="no field 999"):
        confirm(batch, field=999)
    with pytest.raises(ReviewError, match="no digit 999"):
        set_digit(batch, 999, "1")
    assert actions(batch) == []
