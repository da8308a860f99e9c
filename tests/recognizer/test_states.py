"""The one rule for "to check" (recognizer.states), alone and as every layer applies it.

The flag rule is invented here (our own policy, no outside source); the
contract checked at the end is that ``inkcount read --out`` and a batch flag
the same fields of the same pages.
"""

from __future__ import annotations

import csv
import sqlite3

import pytest

from recognizer.cli.main import main
from recognizer.states import (
    REASON_WORDS,
    Reason,
    State,
    combine_states,
    common_layout,
    digit_to_check,
    field_reasons,
    field_state,
    page_layout,
    reasons_in_words,
)
from tests.support import SAMPLES

READ, TO_CHECK, CORRECTED, CONFIRMED, UNREADABLE = (
    State.READ, State.TO_CHECK, State.CORRECTED, State.CONFIRMED, State.UNREADABLE)


# --------------------------------------------------------------------------- digits


@pytest.mark.parametrize("prediction, confidence, threshold, expected", [
    ("7", 0.995, 0.994, False),
    ("7", 0.994, 0.994, False),     # at the threshold: accepted
    ("7", 0.9939, 0.994, True),
    ("?", 0.999, 0.5, True),        # not a digit: always checked
    ("3", 1.0, None, True),         # no threshold yet: everything is checked
])
def test_digit_to_check(prediction, confidence, threshold, expected):
    assert digit_to_check(prediction, confidence, threshold) is expected


# --------------------------------------------------------------------------- reasons


def test_no_reason_means_nothing_to_check():
    assert field_reasons() == ()


def test_reasons_come_in_a_fixed_order_with_words_for_each():
    why = field_reasons(unsure_digits=2, marks=1, gap=True, box_doubts=["added at the left"],
                        rule_problems=["max: 12 > 9"], page_warnings=["faint lines"], odd_layout=True)
    assert why == ("low confidence", "not a digit", "gap", "boxes doubtful", "rule max: 12 > 9",
                   "page warnings", "layout differs")
    assert set(REASON_WORDS) == set(Reason)
    words = reasons_in_words(why)
    assert "boxes doubtful" not in words and "hard to find" in words
    assert "a rule is broken — max: 12 > 9" in words


def test_layout_is_the_most_common_and_on_a_tie_the_first_seen():
    a, b = page_layout([("f01", 5)]), page_layout([("f01", 4)])
    assert common_layout([(a, 3, 0), (b, 1, 1)]) == a
    assert common_layout([(b, 2, 4), (a, 2, 2)]) == a
    assert common_layout([]) is None


# --------------------------------------------------------------------------- field and page state


@pytest.mark.parametrize(
    "digits, flagged, resolution, expected",
    [
        ([READ, READ], False, None, READ),
        ([READ, TO_CHECK], False, None, TO_CHECK),
        ([READ, READ], True, None, TO_CHECK),            # gap, page warnings or layout
        ([READ, READ], True, CONFIRMED, CONFIRMED),      # ... resolved by a field action
        ([CONFIRMED, TO_CHECK], True, CONFIRMED, TO_CHECK),
        ([UNREADABLE, TO_CHECK], False, None, TO_CHECK),
        ([UNREADABLE, CORRECTED], False, None, UNREADABLE),
        ([READ, READ], False, UNREADABLE, UNREADABLE),
        ([CONFIRMED, CORRECTED], False, None, CORRECTED),
        ([CONFIRMED, READ], False, None, CONFIRMED),
        ([CORRECTED], True, CORRECTED, CORRECTED),
        ([], False, None, READ),
        ([], True, None, TO_CHECK),
    ],
)
def test_field_state_rule(digits, flagged, resolution, expected):
    assert field_state(digits, flagged=flagged, resolution=resolution) == expected


@pytest.mark.parametrize(
    "fields, expected",
    [([READ, CONFIRMED], CONFIRMED), ([CORRECTED, TO_CHECK], TO_CHECK), ([UNREADABLE, CORRECTED], UNREADABLE),
     ([], READ)],
)
def test_page_state_combines_fields(fields, expected):
    assert combine_states(fields) == expected


# --------------------------------------------------------------------------- one rule everywhere


def test_values_csv_and_batch_flag_the_same_fields(tmp_path, capsys):
    """The sample cards read once into a values CSV and a batch: the same fields are to check."""
    out, batch = tmp_path / "values.csv", tmp_path / "cards.inkcount"
    assert main(["read", str(SAMPLES / "scans"), "--out", str(out), "--batch", str(batch), "--quiet"]) == 0
    with open(out, newline="", encoding="utf-8") as fh:
        from_csv = {(r["file"], r["page"]): set(r["to_check"].split()) for r in csv.DictReader(fh)}
    conn = sqlite3.connect(batch)
    from_batch: dict[tuple[str, str], set[str]] = {key: set() for key in from_csv}
    for path, page, name in conn.execute(
            "SELECT fl.path, p.page, f.name FROM fields f JOIN pages p ON p.id = f.page_id "
            "JOIN files fl ON fl.id = p.file_id WHERE f.state = ?", (State.TO_CHECK.value,)):
        from_batch[(path, str(page))].add(name)
    conn.close()
    assert from_csv == from_batch
    assert any(from_csv.values())  # the check means something: some fields are flagged ...
    assert sum(map(len, from_csv.values())) < 12 * 10  # ... and not all of them
