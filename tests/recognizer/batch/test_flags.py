"""The rule of recognizer.states applied to stored fields (recognizer.batch.flags).

Hand-made pages with chosen confidences (tests/support/batches.py) in a batch
with the threshold 0.9: page warnings flag only the fields they can affect,
another layout only the fields it puts in doubt, and a field is flagged from
the chance that its whole value is wrong. The rule is our own (no outside
source).
"""

from __future__ import annotations

import pytest

from recognizer.batch.flags import field_checks, fields_to_check_at
from recognizer.batch.queries import count_fields
from recognizer.batch.store import FLAG_RULE, Batch
from recognizer.review import (
    CONFIRMED,
    READ,
    TO_CHECK,
    ReviewQueue,
    confirm,
    set_threshold,
)
from recognizer.states import FAINT_LINES_WARNING, REASON_WORDS, SKEW_WARNING_START, Reason
from tests.support.batches import add_page, digit_ids, field_id, field_row, new_batch

SURE = [("1", 0.999), ("2", 0.999)]       # 99.8 % sure as a value
NEAR = [("3", 0.95), ("4", 0.99)]         # 94 %: above the threshold 0.9, within half of it from the limit
UNSURE = [("5", 0.95), ("6", 0.95), ("7", 0.95)]  # every digit above 0.9, the value 85.7 % sure


@pytest.fixture
def batch(tmp_path):
    with new_batch(tmp_path / "b.inkcount") as b:
        yield b


def state(batch, file, name):
    return field_row(batch, field_id(batch, file, 1, name))["state"]


def states(batch, fid):
    return [r[0] for r in batch.rows("SELECT state FROM digits WHERE field_id = ? ORDER BY box", (fid,))]


def why(batch):
    return {(i.file, i.field): i.why for i in ReviewQueue(batch).items()}


# --------------------------------------------------------------------------- page warnings


def test_faint_lines_flag_only_the_fields_they_can_affect(batch):
    add_page(batch, "faint.png", spec={"f01": SURE, "f02": NEAR, "f03": SURE, "f04": []},
             warnings=[FAINT_LINES_WARNING], doubts={"f03": ("1 box at the end of the field added",)})
    assert [state(batch, "faint.png", n) for n in ("f01", "f02", "f03", "f04")] == [READ, TO_CHECK, TO_CHECK, READ]
    assert why(batch) == {("faint.png", "f02"): ("faint lines",),
                          ("faint.png", "f03"): ("boxes doubtful", "faint lines")}
    item = next(i for i in ReviewQueue(batch).items() if i.field == "f02")
    assert item.words == REASON_WORDS[Reason.FAINT_LINES]


def test_the_same_field_off_a_faint_page_is_not_flagged(batch):
    add_page(batch, "clear.png", spec={"f01": SURE, "f02": NEAR})
    assert [state(batch, "clear.png", n) for n in ("f01", "f02")] == [READ, READ]


@pytest.mark.parametrize("warning, reason", [
    (f"{SKEW_WARNING_START} 5 degrees", "skewed page"),
    ("the photo is blurred: digits may be misread; take it again in focus", "page warnings"),
])
def test_a_warning_that_cannot_be_tied_to_fields_flags_them_all(batch, warning, reason):
    add_page(batch, "p.png", spec={"f01": SURE, "f02": [("9", 1.0)]}, warnings=[warning])
    assert why(batch) == {("p.png", "f01"): (reason,), ("p.png", "f02"): (reason,)}
    confirm(batch, field=field_id(batch, "p.png", 1, "f01"))
    assert state(batch, "p.png", "f01") == CONFIRMED  # a field action resolves it


def test_a_stricter_threshold_widens_what_faint_lines_touch(batch):
    add_page(batch, "faint.png", spec={"f01": SURE}, warnings=[FAINT_LINES_WARNING])
    assert state(batch, "faint.png", "f01") == READ
    set_threshold(batch, 0.997)  # 99.8 % is now within half the allowed error of the limit
    assert state(batch, "faint.png", "f01") == TO_CHECK
    assert why(batch) == {("faint.png", "f01"): ("faint lines",)}


# --------------------------------------------------------------------------- layout


def test_a_missing_field_flags_the_fields_whose_names_it_shifted(batch):
    card = {"f01": SURE, "f02": [("8", 0.999)], "f03": SURE + [("3", 0.999)], "f04": SURE}
    for name in ("a.png", "b.png"):
        add_page(batch, name, spec=card)
    add_page(batch, "lost.png", spec={"f01": SURE, "f02": card["f03"], "f03": card["f04"]})  # f02 not found
    assert [state(batch, "lost.png", n) for n in ("f01", "f02", "f03")] == [READ, TO_CHECK, TO_CHECK]
    assert why(batch) == {("lost.png", "f02"): ("layout differs", "missing: f02 (1 box)"),
                          ("lost.png", "f03"): ("layout differs",)}
    assert "not found on this page: f02 (1 box)" in ReviewQueue(batch).items()[0].words


def test_fields_missing_at_the_end_flag_the_last_field_found(batch):
    card = {"f01": SURE, "f02": SURE, "f03": SURE}
    for name in ("a.png", "b.png"):
        add_page(batch, name, spec=card)
    add_page(batch, "short.png", spec={"f01": SURE, "f02": SURE})
    assert why(batch) == {("short.png", "f02"): ("fields missing", "missing: f03 (2 boxes)")}
    assert "may have been missed" in ReviewQueue(batch).items()[0].words


def test_when_the_batch_layout_changes_the_fields_in_doubt_follow(batch):
    one = {"f01": SURE, "f02": SURE, "f03": SURE}
    other = {"f01": SURE + [("5", 0.999)], "f02": SURE, "f03": SURE}
    third = {"f01": SURE, "f02": SURE, "f03": SURE + [("5", 0.999)]}
    add_page(batch, "one.png", spec=one)
    add_page(batch, "third.png", spec=third)  # a tie: one.png's layout stays the batch's
    assert why(batch) == {("third.png", "f03"): ("layout differs",)}
    add_page(batch, "o1.png", spec=other)
    add_page(batch, "o2.png", spec=other)  # now the batch's layout: third.png differs in f01 and f03
    assert why(batch) == {("one.png", "f01"): ("layout differs",),
                          **{("third.png", n): ("layout differs",) for n in ("f01", "f02", "f03")}}


def test_pages_read_with_a_template_are_judged_among_themselves(batch):
    for name in ("a.png", "b.png"):
        add_page(batch, name, spec={"f01": SURE, "f02": SURE})
    add_page(batch, "card.png", spec={"grower": SURE + SURE}, template="card v1")
    assert why(batch) == {}


# --------------------------------------------------------------------------- the value as a whole


def test_a_value_less_sure_than_the_threshold_is_to_check_without_its_digits(batch):
    add_page(batch, "a.png", spec={"f01": UNSURE, "f02": SURE})
    fid = field_id(batch, "a.png", 1, "f01")
    assert states(batch, fid) == [READ, READ, READ]  # no digit goes to the sort wall ...
    assert field_row(batch, fid)["state"] == TO_CHECK  # ... but the value is 85.7 % sure
    assert why(batch) == {("a.png", "f01"): ("value unsure",)}
    checks = field_checks(batch.rows, "f.id = ?", (fid,), threshold=0.9)
    assert checks[fid].why == ("value unsure",) and checks[fid].layout == ()


def test_confirming_digits_until_the_rest_is_sure_enough_resolves_the_value(batch):
    add_page(batch, "a.png", spec={"f01": UNSURE})
    fid = field_id(batch, "a.png", 1, "f01")
    confirm(batch, digit=digit_ids(batch, fid)[0])  # the rest: 90.25 % sure
    assert field_row(batch, fid)["state"] == CONFIRMED


def test_the_threshold_moves_the_value_rule_too(batch):
    add_page(batch, "a.png", spec={"f01": UNSURE})
    fid = field_id(batch, "a.png", 1, "f01")
    set_threshold(batch, 0.85)
    assert field_row(batch, fid)["state"] == READ
    set_threshold(batch, 0.9)
    assert field_row(batch, fid)["state"] == TO_CHECK


# --------------------------------------------------------------------------- batches flagged by the older rule


def test_a_batch_flagged_by_the_older_rule_is_flagged_again_when_opened(tmp_path):
    path = tmp_path / "old.inkcount"
    with new_batch(path) as batch:
        add_page(batch, "faint.png", spec={"f01": SURE, "f02": NEAR}, warnings=[FAINT_LINES_WARNING])
        with batch.transaction() as conn:  # as the older rule left it: every field of the page
            conn.execute("UPDATE fields SET state = ?", (TO_CHECK,))
            batch.update_settings(conn, flag_rule=1)
    with Batch.open(path, read_only=True) as batch:
        assert batch.settings.flag_rule == 1  # reading only changes nothing
    with Batch.open(path) as batch:
        assert batch.settings.flag_rule == FLAG_RULE
        assert [state(batch, "faint.png", n) for n in ("f01", "f02")] == [READ, TO_CHECK]


@pytest.mark.parametrize("threshold", [0.0, 0.85, 0.9, 0.96, 0.9985, 1.0])
def test_the_field_preview_counts_what_a_threshold_would_flag(batch, threshold):
    add_page(batch, "a.png", spec={"f01": UNSURE, "f02": NEAR, "f03": SURE, "f04": [("?", 0.99)]},
             warnings=[FAINT_LINES_WARNING])
    add_page(batch, "b.png", spec={"f01": NEAR, "f02": SURE, "f03": UNSURE, "f04": []})
    confirm(batch, digit=digit_ids(batch, field_id(batch, "b.png", 1, "f01"))[0])
    predicted = fields_to_check_at(batch.rows, threshold)
    set_threshold(batch, threshold)
    assert count_fields(batch, TO_CHECK) == predicted
