"""The one rule for "to check" (recognizer.states), alone and as every layer applies it.

The flag rule is invented here (our own policy, no outside source); the
contract checked at the end is that ``inkcount read --out`` and a batch flag
the same fields of the same pages, on the sample cards and on hand-made
pages with page warnings and other layouts.
"""

from __future__ import annotations

import csv
import sqlite3

import numpy as np
import pytest

from recognizer.cli.main import main
from recognizer.page import ruling
from recognizer.page.boxes import find_fields
from recognizer.reading.values_csv import ValuesTable
from recognizer.states import (
    FAINT_LINES_WARNING,
    REASON_WORDS,
    SKEW_WARNING_START,
    Reason,
    State,
    check_field,
    combine_states,
    common_layout,
    digit_to_check,
    field_level,
    field_reasons,
    field_state,
    layout_reasons,
    missing_fields,
    near_limit,
    page_layout,
    reasons_in_words,
    value_sureness,
    value_to_check,
    warnings_touching,
)
from recognizer.synth import forms as formgen
from tests.support import SAMPLES
from tests.support.batches import add_page, make_page, new_batch

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


# --------------------------------------------------------------------------- the value as a whole

T = 0.994  # about the shipped model's threshold at the default target


@pytest.mark.parametrize("confidence", [0.5, 0.99, 0.9939, 0.994, 0.995, 1.0])
def test_a_one_digit_value_is_judged_as_its_digit(confidence):
    assert value_to_check([confidence], T) is digit_to_check("7", confidence, T)


def test_a_digit_under_the_threshold_always_puts_its_value_to_check():
    # seven sure digits cannot make up for one under the threshold: the digit flags stay inside fields to check
    assert value_to_check([0.99999] * 7 + [0.99], T)
    assert check_field([("1", 0.99999)] * 7 + [("2", 0.99)], T) == ("low confidence",)


def test_a_value_of_digits_each_above_the_threshold_can_still_be_too_unsure():
    # eight digits at 99.7 %: 97.6 % sure as a value -- the per-digit rule let it through
    eight = [(str(d), 0.997) for d in range(8)]
    assert not any(digit_to_check(p, c, T) for p, c in eight)
    assert value_sureness(c for _, c in eight) == pytest.approx(0.997 ** 8)
    assert check_field(eight, T) == ("value unsure",)
    assert field_level(("value unsure",)) and not field_level(("low confidence", "not a digit"))
    assert check_field([(str(d), 0.9999) for d in range(8)], T) == ()  # 99.92 % sure: accepted


def test_an_accepted_value_is_never_less_sure_than_one_digit_at_the_threshold():
    """The residual bound of the rule: 1 - S <= 1 - t for every value let through (the per-digit
    rule allowed up to 1 - t**k for k digits)."""
    rng = np.random.default_rng(5)
    worst_before = 0.0
    for _ in range(2000):
        conf = list(1 - rng.uniform(0, 0.01, size=int(rng.integers(1, 9))))
        readings = [("4", c) for c in conf]
        if not check_field(readings, T):
            assert 1 - value_sureness(conf) <= 1 - T
        if all(c >= T for c in conf):
            worst_before = max(worst_before, 1 - value_sureness(conf))
    assert worst_before > 2 * (1 - T)


def test_marks_and_handled_boxes_are_not_part_of_the_value_sureness():
    assert check_field([("?", 0.99), ("3", 0.999)], T) == ("not a digit",)
    assert value_to_check([], T) is False and value_to_check([0.9999], None) is True


# --------------------------------------------------------------------------- page warnings


def test_the_warnings_the_page_finder_makes_are_the_ones_the_rule_knows():
    flat = np.full((40, 40), 250, np.uint8)
    lines = np.zeros_like(flat)
    flat[10:12, :], lines[10:12, :] = 200, 255  # lines 50 grey levels below the paper
    assert ruling.line_warnings(flat, lines, 250.0) == [FAINT_LINES_WARNING]
    layout = formgen.orchard_card()
    rng = np.random.default_rng(3)
    form = formgen.render_form(layout, formgen.random_values(layout, rng=rng), dpi=150, rng=rng)
    skewed = formgen.scan_distort(form, rng=rng, skew_deg=3.0)
    finding = find_fields(skewed.image, dpi=150, max_skew_deg=1.0)
    assert any(w.startswith(SKEW_WARNING_START) for w in finding.warnings)
    assert check_field([("5", 0.9999)], T, page_warnings=finding.warnings) == ("skewed page",)


def test_faint_lines_touch_only_fields_with_doubtful_boxes_or_a_value_near_the_limit():
    faint = [FAINT_LINES_WARNING]
    assert warnings_touching(faint, confidences=[0.9999, 0.9998], threshold=T) == ()
    assert warnings_touching(faint, confidences=[0.998, 0.998], threshold=T) == (FAINT_LINES_WARNING,)
    assert warnings_touching(faint, box_doubts=["1 box added"], confidences=[0.9999], threshold=T) == tuple(faint)
    assert warnings_touching(faint, confidences=[], threshold=T) == ()  # an empty field: nothing to misread
    assert near_limit([1 - 0.4 * (1 - T)], T) is False and near_limit([1 - 0.6 * (1 - T)], T) is True
    assert check_field([("1", 0.998), ("2", 0.998)], T, page_warnings=faint) == ("faint lines",)
    assert check_field([("1", 0.9999)], T, page_warnings=faint) == ()


def test_a_turned_page_is_a_note_that_touches_no_field():
    from recognizer.states import TURNED_PAGE

    assert warnings_touching([TURNED_PAGE], confidences=[0.995], threshold=T) == ()
    assert check_field([("5", 0.9999)], T, page_warnings=[TURNED_PAGE]) == ()


@pytest.mark.parametrize("warning", [f"{SKEW_WARNING_START} 5 degrees", "the photo is blurred", "lines faint"])
def test_warnings_that_cannot_be_tied_to_fields_touch_every_field(warning):
    assert warnings_touching([warning], confidences=[1.0], threshold=T) == (warning,)
    assert warnings_touching([warning]) == (warning,)  # even an empty field


# --------------------------------------------------------------------------- layout

CARD = page_layout([("f01", 5), ("f02", 8), ("f03", 2), ("f04", 3), ("f05", 3)])


LD, FM = ("layout differs",), ("fields missing",)


@pytest.mark.parametrize("fields, expected", [
    ([("f01", 5), ("f02", 8), ("f03", 2), ("f04", 3), ("f05", 3)], {}),
    ([("f01", 5), ("f02", 8), ("f03", 1), ("f04", 3), ("f05", 3)], {"f03": LD}),                  # a box lost
    ([("f01", 5), ("f02", 9), ("f03", 2), ("f04", 4), ("f05", 3)],                             # two fields: and
     {"f02": LD, "f03": LD, "f04": LD}),                                                       # those between
    ([("f01", 5), ("f02", 2), ("f03", 3), ("f04", 3)],                                          # f02 missed: the
     {"f02": LD + ("missing: f02 (8 boxes)",), "f03": LD, "f04": LD}),                         # names after shift
    ([("f01", 5), ("f02", 8), ("f03", 2)], {"f03": FM + ("missing: f04 (3 boxes), f05 (3 boxes)",)}),  # the end
    ([("f01", 5), ("f02", 8), ("f03", 2), ("f04", 3), ("f05", 3), ("f06", 1)], {"f06": LD}),      # one added
    ([("f01", 8), ("f02", 2), ("f03", 3), ("f04", 3)],                                          # the first missed
     {"f01": LD + ("missing: f01 (5 boxes)",), "f02": LD, "f03": LD, "f04": LD}),
])
def test_another_layout_flags_only_the_fields_it_puts_in_doubt(fields, expected):
    assert layout_reasons(page_layout(fields), CARD) == expected


def test_the_fields_missing_are_named_where_they_were_lost():
    # two fields lost at two places: each named on the page's field now standing in its place (of
    # f04 and f05, both of 3 boxes, the alignment cannot tell which was lost: it names the last)
    page = page_layout([("f01", 5), ("f02", 2), ("f03", 3)])
    assert missing_fields(page, CARD) == {"f02": "f02 (8 boxes)", "f03": "f05 (3 boxes)"}
    why = check_field([("1", 0.9999)], 0.99, layout=layout_reasons(page, CARD)["f02"])
    assert why == ("layout differs", "missing: f02 (8 boxes)")
    words = reasons_in_words(why)
    assert "not found on this page: f02 (8 boxes)" in words and "missing:" not in words


def test_no_layout_reasons_without_a_batch_layout():
    assert layout_reasons(CARD, None) == {} and layout_reasons(None, CARD) == {}


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


def test_every_reason_shows_in_words_never_as_its_key():
    why = field_reasons(value_unsure=True, page_warnings=[FAINT_LINES_WARNING, f"{SKEW_WARNING_START} 5 degrees",
                                                          "the photo is blurred"], fields_missing=True)
    assert why == ("value unsure", "faint lines", "skewed page", "page warnings", "fields missing")
    for reason in Reason:
        words = reasons_in_words([reason.value])
        assert words == REASON_WORDS[reason] and reason.value not in words
    assert reasons_in_words(["no such key"]) == "flagged"
    assert field_reasons(unsure_digits=1, value_unsure=True) == ("low confidence",)  # said once


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
    said = capsys.readouterr().out
    assert "Why fields are to check" in said and REASON_WORDS[Reason.LOW_CONFIDENCE] in said
    assert not any(f"  {r.value}" in said for r in Reason)  # words, not keys
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


#: Hand-made pages (file -> (spec, warnings, doubts, template)) covering every page-level reason.
_SURE, _NEAR, _UNSURE = [("1", 0.999), ("2", 0.999)], [("3", 0.95), ("4", 0.99)], [("5", 0.93), ("6", 0.95)]
_PAGES = {
    "a.png": ({"f01": _SURE, "f02": _NEAR, "f03": _SURE}, (), {}, None),
    "b.png": ({"f01": _SURE, "f02": _SURE, "f03": _SURE}, (), {}, None),
    "faint.png": ({"f01": _SURE, "f02": _NEAR, "f03": _SURE}, (FAINT_LINES_WARNING,), {"f03": ("1 box added",)}, None),
    "skew.png": ({"f01": _SURE, "f02": _SURE, "f03": _SURE}, (f"{SKEW_WARNING_START} 5 degrees",), {}, None),
    "lost.png": ({"f01": _SURE, "f02": _SURE + [("7", 0.999)]}, (), {}, None),
    "short.png": ({"f01": _SURE, "f02": _SURE}, (), {}, None),
    "unsure.png": ({"f01": _SURE, "f02": _UNSURE, "f03": _SURE}, (), {}, None),
    "card.png": ({"n": _SURE, "m": [("8", 0.999)]}, (), {}, "card v1"),  # a template: its own layout
}


def test_values_csv_and_batch_flag_the_same_fields_of_hand_made_pages(tmp_path):
    table = ValuesTable()
    with new_batch(tmp_path / "h.inkcount") as batch:
        for name, (spec, warnings, doubts, template) in _PAGES.items():
            add_page(batch, name, spec=spec, warnings=warnings, doubts=doubts, template=template)
            table.add_page(make_page(name, 1, spec, warnings=warnings, doubts=doubts, template=template),
                           threshold=0.9)
        from_batch: dict[str, set[str]] = {name: set() for name in _PAGES}
        for path, field in batch.rows(
                "SELECT fl.path, f.name FROM fields f JOIN pages p ON p.id = f.page_id JOIN files fl "
                "ON fl.id = p.file_id WHERE f.state = ?", (State.TO_CHECK.value,)):
            from_batch[path].add(field)
    from_csv = {row.file: set(check) for row, check in zip(table.rows, table.to_check())}
    assert from_csv == from_batch
    assert from_csv == {
        "a.png": set(), "b.png": set(),          # f02 of a.png is 94 % sure: above the threshold 0.9
        "faint.png": {"f02", "f03"},             # near the limit; doubtful boxes -- not the sure f01
        "skew.png": {"f01", "f02", "f03"},       # cannot be tied to fields
        "lost.png": {"f02"}, "short.png": {"f02"},  # a box more; the last field before the missing one
        "unsure.png": {"f02"},                   # digits at 93 and 95 %: 88 % sure as a value
        "card.png": set(),                       # read with a template: never another layout
    }
    assert table.reason_counts() == {"faint lines": 2, "boxes doubtful": 1, "skewed page": 3,
                                     "layout differs": 1, "fields missing": 1, "value unsure": 1,
                                     "missing: f03 (2 boxes)": 2}  # lost.png's and short.png's
