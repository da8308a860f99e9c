"""States, reasons, and the one rule for what a person must check.

This module is the single home of the decision "to check". The batch
(:mod:`recognizer.batch.flags`) fetches the inputs with SQL and calls these
functions; the values CSV of ``inkcount read`` (:mod:`recognizer.reading.values_csv`)
calls them on the pages it has read; the window shows their results. Nothing
here touches a file or a database, and nothing is imported from the rest of
the library.

States
------
Every written box (a *digit*), every field and every page is in one of five
:class:`State` s: ``read`` (accepted automatically), ``to check``,
``corrected``, ``confirmed`` (a person said the reading is right) and
``unreadable`` (a person said it cannot be read; exported empty). They are
stored as these exact strings.

Flagging rule
-------------
``t`` is the batch threshold: set from the target residual error through the
model's calibration curve (``DigitModel.threshold_for``), or by hand.

* A digit is *to check* when the model reads it as "not a digit", when there
  is no threshold yet, or when its confidence is under ``t``
  (:func:`digit_to_check`). Digits keep this rule of their own (they are what
  the sort wall shows and what the strictness dialog counts).
* A field's *value* is to check when the chance that the whole value is wrong
  is more than one reading at the threshold may have: with ``c_i`` the
  calibrated confidences of its written boxes read as digits that no person
  has handled yet (a box a person corrected or confirmed counts as sure),

      S = prod(c_i)   (the chance the value is right),   to check when 1 - S > 1 - t, i.e. S < t

  (:func:`value_sureness`, :func:`value_to_check`). The per-field threshold is
  the per-digit one, applied to the whole value: a value is accepted only
  when it is at least as sure as a single digit the threshold lets through.
  Why this relation: ``t`` is the least sureness the target lets through for
  one reading, and a field's value is what gets exported and used, so it is
  the value that must meet it. A one-digit field is judged exactly as
  before; a field with a digit under ``t`` is still to check (``S <= c_i <
  t``), so digits flagged one by one always lie in fields to check; and a
  field whose digits are each just above ``t`` but together are not (eight
  digits at 99.7 %: 97.6 % sure as a value) is now to check, where the rule
  "every digit above ``t``" let values through that were up to ``k`` times
  less sure than one digit (``1 - t**k``). So, on confidence, the values let
  through are a subset of those the per-digit rule let through (no more
  wrong ones), and the fields to check grow by the fields of that last kind.
  What the relation does not give: the target is a share of *digits* (``t``
  is set on single digits), and a value of ``k`` digits accepted at ``t``
  carries about ``k`` times a digit's chance of being wrong, so the share of
  wrong values among the fields accepted stays above the target whenever
  fields hold several digits. A looser relation (``S >= t**k``, the
  *average* digit above ``t``) would flag fewer fields than the per-digit
  rule but let more wrong values through; a field-level target
  (``1 - S <= target`` for every value) meets the target for fields by
  itself but flags most fields with today's model, and would change what the
  target setting means. ``bench/bench_effort.py`` measures the choice.
* A field is *to check* when its value is, when one of its digits is, or for
  a field-level :class:`Reason`: an empty box between its written digits (a
  gap), doubtful boxes (boxes added at its ends from the neighbours' pitch),
  a broken template rule, a page warning that can affect its reading, or a
  layout that differs from the batch's where this field is concerned
  (:func:`field_reasons`, :func:`check_field`).

Page warnings and the fields they touch (:func:`warnings_touching`)
------------------------------------------------------------------
The warnings come from finding the boxes without a template
(:attr:`recognizer.page.boxes.BoxFinding.warnings`; a page read with a
template has none of these) and from the capture (a blurred photo, a page
small in the photo), which fall under "any other warning" below.

* ``"the printed lines are faint"`` (:data:`FAINT_LINES_WARNING`; the median
  darkness of the ruling lines is under 80 grey levels below the paper). Faint
  lines make the *boxes* hard to find: a line or a wall may be lost, so a
  field may get a box too many or too few, lose boxes at an end, or sit a
  little off its boxes. A box count or a field that changed shows as box
  doubts (boxes added from the neighbours' pitch) or as a layout differing
  from the batch's, and a box cut off its place leaves part of the digit
  out or a bit of line in, which lowers the digits' confidence. Cutting the
  cells does not depend on the lines' darkness (ink is judged against each
  crop's own paper, line remnants by their coverage). So the warning touches
  the fields with doubtful boxes and the fields whose value is *near the
  limit*: its chance of being wrong is more than half what the threshold
  allows, ``1 - S > (1 - t) / 2`` (:func:`near_limit`; the factor is our own
  choice, no source). A field whose boxes match the batch's and whose value
  is sure is not touched.
* ``"the page may be skewed by more than N degrees"`` (starts with
  :data:`SKEW_WARNING_START`): the skew found reached the limit, so the page
  was turned back by at most the limit and the angle measured past it is not
  reliable (the search stops half a degree beyond it). Every box of the page
  may then be cut off its place, far or near, with no sign in the field's
  own finding, so this warning cannot be tied to some fields: it touches
  all of them.
* Any other warning (none is made today) touches every field: nothing is
  known about what it can change.

Layout (:func:`layout_reasons`)
-------------------------------
A page's *layout* is its list of (field name, number of boxes)
(:func:`page_layout`). The batch's layout is the most common one among the
pages read with the same template (or without one), on a tie the one seen
first (:func:`common_layout`); pages read with a template all have the
template's layout, so only pages whose boxes were found can differ. Fields
are named ``f01``, ``f02``, ... in reading order, so a field missing or
added shifts the names of every field after it, while a box more or less
changes only its own field. Against the batch's layout:

* the same field names: the fields with another number of boxes are
  flagged, and the fields between the first and the last of them (a field
  missing and another added in between would shift the names there);
* other field names (fields missing or added): the fields from the first
  one that differs on, all possibly under another field's name (``layout
  differs``); when the page has the batch's first fields and then stops, its
  last field is flagged for the fields missing after it (``fields
  missing``).

The fields missing are also named (:func:`missing_fields`): the page's box
counts are aligned to the batch's in order (Needleman and Wunsch's global
alignment, 1970: the same count scores 2, another count -1, a field missing
or added -1; the scores are our own choice, no source), and each field of
the batch's layout left without a counterpart is named, with its number of
boxes, on the page's field that stands in its place (the next field found,
or the last one when the page stops early): a reason ``missing: f05 (4
boxes)`` beside ``layout differs`` or ``fields missing``. A run of fields
with the same box count leaves the alignment free to say which of them is
missing; it names the last of them (the longest same beginning is kept), which
shows where a field was lost, not which one for sure.

Field state
-----------
From the states of its digits (the written boxes, plus any empty box a person
gave a digit) and the field-level decision of a person (its *resolution*:
none, ``corrected``, ``confirmed`` or ``unreadable``), in this order:
resolution ``unreadable`` -> ``unreadable``; any digit ``to check`` -> ``to
check``; any digit ``unreadable`` -> ``unreadable``; a field-level reason not
yet resolved by a field action -> ``to check``; resolution or any digit
``corrected`` -> ``corrected``; resolution or any digit ``confirmed`` ->
``confirmed``; otherwise ``read`` (:func:`field_state`). A value not sure
enough while none of its digits is under the threshold is a field-level
reason (``value unsure``): confirming or correcting the field, or enough of
its digits, resolves it. A page's state combines its fields' the same way
(:func:`combine_states`).

The module is longer than 600 lines: the rule, its reasons and their words are one decision and
are kept in one place.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Sequence
from enum import StrEnum

__all__ = [
    "State",
    "STATES",
    "Reason",
    "TURNED_PAGE",
    "PAGE_NOTES",
    "REASON_WORDS",
    "DIGIT_REASONS",
    "NOT_A_DIGIT_MARK",
    "DEFAULT_TARGET_ERROR",
    "FAINT_LINES_WARNING",
    "SKEW_WARNING_START",
    "digit_to_check",
    "value_sureness",
    "value_to_check",
    "near_limit",
    "warnings_touching",
    "counted_box",
    "field_reasons",
    "check_field",
    "field_level",
    "field_state",
    "combine_states",
    "page_layout",
    "common_layout",
    "layout_reasons",
    "missing_fields",
    "MISSING_REASON",
    "reasons_in_words",
]

#: Default wanted share of wrong digits among those accepted automatically (0.1 %).
DEFAULT_TARGET_ERROR = 0.001

#: What a box read as "not a digit" shows as in values, before review.
NOT_A_DIGIT_MARK = "?"

#: The page warning of faint ruling lines (:func:`recognizer.page.ruling.line_warnings`).
FAINT_LINES_WARNING = "the printed lines are faint"

#: How the page warning of a skew beyond the limit begins (:func:`recognizer.page.boxes.find_fields`).
SKEW_WARNING_START = "the page may be skewed by more than"
#: A page fed upside down and turned by the reader (:mod:`recognizer.reading.orientation`): said on
#: the page, but it puts no field in doubt (the turned reading is the surer one).
TURNED_PAGE = "the page was upside down: it was turned and read the right way up"
#: Page warnings that are notes only: they touch no field.
PAGE_NOTES = frozenset({TURNED_PAGE})

#: A field on a page with faint lines is touched when its value's chance of being
#: wrong exceeds this share of what the threshold allows (our own choice, no source).
_NEAR_LIMIT = 0.5


class State(StrEnum):
    """Review state of a digit, a field or a page (stored as these strings)."""

    READ = "read"
    TO_CHECK = "to check"
    CORRECTED = "corrected"
    CONFIRMED = "confirmed"
    UNREADABLE = "unreadable"


#: All states, in the order they take precedence when combined.
STATES = (State.TO_CHECK, State.UNREADABLE, State.CORRECTED, State.CONFIRMED, State.READ)


class Reason(StrEnum):
    """Why a field is to check. A broken template rule is ``"rule <what>"``."""

    LOW_CONFIDENCE = "low confidence"
    NOT_A_DIGIT = "not a digit"
    VALUE_UNSURE = "value unsure"
    GAP = "gap"
    BOXES_DOUBTFUL = "boxes doubtful"
    FAINT_LINES = "faint lines"
    SKEWED_PAGE = "skewed page"
    PAGE_WARNINGS = "page warnings"
    LAYOUT_DIFFERS = "layout differs"
    FIELDS_MISSING = "fields missing"


#: Each reason in a clerk's words.
REASON_WORDS = {
    Reason.LOW_CONFIDENCE: "a digit the reader is unsure of",
    Reason.NOT_A_DIGIT: "a mark that may not be a digit",
    Reason.VALUE_UNSURE: "each digit is fairly sure, but the value as a whole is not sure enough",
    Reason.GAP: "an empty box between digits",
    Reason.BOXES_DOUBTFUL: "some boxes of this field were hard to find",
    Reason.FAINT_LINES: "the printed lines are faint, and this field's boxes or reading are in doubt",
    Reason.SKEWED_PAGE: "the page is more skewed than the reader straightens, so its boxes may be cut wrongly",
    Reason.PAGE_WARNINGS: "the page as a whole was hard to read (see its warnings), so every field of it is checked",
    Reason.LAYOUT_DIFFERS: "this field's boxes differ from the other pages', or a field before it was missed or added",
    Reason.FIELDS_MISSING: "the other pages have more fields after this one: one may have been missed",
}

#: The reasons that live on single digits (all others are field-level reasons).
DIGIT_REASONS = frozenset({Reason.LOW_CONFIDENCE.value, Reason.NOT_A_DIGIT.value})

_RULE = "rule "
#: How the reason naming the fields a page lacks begins (:func:`layout_reasons`).
MISSING_REASON = "missing: "


def digit_to_check(prediction: str, confidence: float, threshold: float | None) -> bool:
    """Whether a written box must be checked: not a digit, no threshold yet, or below it.

    >>> digit_to_check("7", 0.995, 0.99), digit_to_check("7", 0.98, 0.99), digit_to_check("?", 1.0, 0.5)
    (False, True, True)
    """
    return prediction == NOT_A_DIGIT_MARK or threshold is None or confidence < threshold


def value_sureness(confidences: Iterable[float]) -> float:
    """The chance a value is right: the product of its digits' confidences (1.0 for none).

    >>> round(value_sureness([0.99, 0.98]), 4)
    0.9702
    """
    return math.prod(float(c) for c in confidences)


def value_to_check(confidences: Sequence[float], threshold: float | None) -> bool:
    """Whether a value is less sure than the threshold (see the module docstring).

    ``confidences`` are those of its written boxes read as digits that no
    person has handled; a value without any is never to check for this reason.

    >>> value_to_check([0.999] * 8, 0.994), value_to_check([0.9999] * 8, 0.994), value_to_check([], None)
    (True, False, False)
    """
    if not confidences:
        return False
    return threshold is None or value_sureness(confidences) < threshold


def near_limit(confidences: Sequence[float], threshold: float | None) -> bool:
    """Whether a value's chance of being wrong is over half what the threshold allows.

    >>> near_limit([0.999], 0.994), near_limit([0.996], 0.994), near_limit([], 0.994)
    (False, True, False)
    """
    if not confidences:
        return False
    if threshold is None:
        return True
    return 1.0 - value_sureness(confidences) > _NEAR_LIMIT * (1.0 - threshold)


def _warning_reason(warning: str) -> Reason:
    if warning == FAINT_LINES_WARNING:
        return Reason.FAINT_LINES
    if warning.startswith(SKEW_WARNING_START):
        return Reason.SKEWED_PAGE
    return Reason.PAGE_WARNINGS


def warnings_touching(page_warnings: Sequence[str], *, box_doubts: Sequence[str] = (),
                      confidences: Sequence[float] = (), threshold: float | None = None) -> tuple[str, ...]:
    """The page warnings that can affect a field's reading (see the module docstring).

    Parameters
    ----------
    page_warnings : sequence of str
        The warnings of the field's page.
    box_doubts : sequence of str
        Doubts about the field's own boxes.
    confidences : sequence of float
        Confidences of its written boxes read as digits that no person has handled.
    threshold : float or None
        The batch threshold.

    >>> warnings_touching(["the printed lines are faint"], confidences=[0.9999, 0.9999], threshold=0.99)
    ()
    >>> warnings_touching(["the printed lines are faint"], confidences=[0.994], threshold=0.99)
    ('the printed lines are faint',)
    """
    touched = []
    for warning in page_warnings:
        if warning in PAGE_NOTES:
            continue
        if _warning_reason(warning) is not Reason.FAINT_LINES or box_doubts or near_limit(confidences, threshold):
            touched.append(warning)
    return tuple(touched)


def field_reasons(
    *,
    unsure_digits: int = 0,
    marks: int = 0,
    value_unsure: bool = False,
    gap: bool = False,
    box_doubts: Sequence[str] = (),
    rule_problems: Sequence[str] = (),
    page_warnings: Sequence[str] = (),
    odd_layout: bool = False,
    fields_missing: bool = False,
) -> tuple[str, ...]:
    """The reasons a field is to check, in a fixed order (empty: nothing to check).

    Parameters
    ----------
    unsure_digits, marks : int
        Written boxes still to check read as a digit (below the threshold),
        and read as "not a digit".
    value_unsure : bool
        The value is less sure than the threshold (:func:`value_to_check`);
        a reason of its own only while no digit is under the threshold.
    gap : bool
        An empty box between written digits.
    box_doubts, rule_problems : sequence of str
        Doubts about the field's boxes, broken template rules (``"<rule>: <what>"``).
    page_warnings : sequence of str
        The warnings of its page that can affect it (:func:`warnings_touching`).
    odd_layout, fields_missing : bool
        Its page's layout differs from the batch's where this field is
        concerned; the page lacks fields after this one (:func:`layout_reasons`).

    >>> field_reasons(unsure_digits=1, gap=True, rule_problems=["max: 12 > 9"])
    ('low confidence', 'gap', 'rule max: 12 > 9')
    """
    why: list[str] = []
    if unsure_digits:
        why.append(Reason.LOW_CONFIDENCE.value)
    if marks:
        why.append(Reason.NOT_A_DIGIT.value)
    if value_unsure and not unsure_digits:
        why.append(Reason.VALUE_UNSURE.value)
    if gap:
        why.append(Reason.GAP.value)
    if box_doubts:
        why.append(Reason.BOXES_DOUBTFUL.value)
    why.extend(f"{_RULE}{p}" for p in rule_problems)
    kinds = {_warning_reason(w) for w in page_warnings}
    why.extend(r.value for r in (Reason.FAINT_LINES, Reason.SKEWED_PAGE, Reason.PAGE_WARNINGS) if r in kinds)
    if odd_layout:
        why.append(Reason.LAYOUT_DIFFERS.value)
    if fields_missing:
        why.append(Reason.FIELDS_MISSING.value)
    return tuple(why)


def check_field(
    readings: Iterable[tuple[str, float]],
    threshold: float | None,
    *,
    gap: bool = False,
    box_doubts: Sequence[str] = (),
    rule_problems: Sequence[str] = (),
    page_warnings: Sequence[str] = (),
    layout: Sequence[str] = (),
) -> tuple[str, ...]:
    """The whole rule for one field: its reasons to be checked (empty: none).

    Parameters
    ----------
    readings : iterable of (prediction, confidence)
        Its written boxes that no person has handled yet (``?`` for "not a digit").
    threshold : float or None
        The batch threshold.
    gap, box_doubts, rule_problems : as in :func:`field_reasons`
    page_warnings : sequence of str
        All the warnings of its page; the rule keeps those that touch it
        (:func:`warnings_touching`).
    layout : sequence of str
        Its layout reasons from :func:`layout_reasons` (``"layout differs"``
        or ``"fields missing"``, then perhaps the fields missing there), empty
        when its page's layout does not concern it.

    >>> check_field([("1", 0.995), ("2", 0.995)], 0.994)
    ('value unsure',)
    >>> check_field([("1", 0.9999)], 0.994, page_warnings=["the printed lines are faint"])
    ()
    """
    readings = list(readings)
    digits = [float(c) for p, c in readings if p != NOT_A_DIGIT_MARK]
    marks = sum(p == NOT_A_DIGIT_MARK for p, _ in readings)
    unsure = sum(digit_to_check(p, c, threshold) for p, c in readings if p != NOT_A_DIGIT_MARK)
    return field_reasons(
        unsure_digits=unsure, marks=marks, value_unsure=value_to_check(digits, threshold), gap=gap,
        box_doubts=box_doubts, rule_problems=rule_problems,
        page_warnings=warnings_touching(page_warnings, box_doubts=box_doubts, confidences=digits,
                                        threshold=threshold),
        odd_layout=Reason.LAYOUT_DIFFERS in layout, fields_missing=Reason.FIELDS_MISSING in layout,
    ) + tuple(r for r in layout if r.startswith(MISSING_REASON))


def field_level(why: Iterable[str]) -> bool:
    """Whether reasons include a field-level one (any but the digits' own, :data:`DIGIT_REASONS`)."""
    return any(w not in DIGIT_REASONS for w in why)


def field_state(digit_states: Iterable[str], *, flagged: bool, resolution: str | None) -> State:
    """State of a field from its digits' states (see the module docstring).

    Parameters
    ----------
    digit_states : iterable of str
        States of the written boxes (and of empty boxes a person gave a digit).
    flagged : bool
        A field-level reason to check it (:func:`field_level`).
    resolution : str or None
        The field-level decision of a person, if any.
    """
    states = set(digit_states)
    if resolution == State.UNREADABLE:
        return State.UNREADABLE
    if State.TO_CHECK in states:
        return State.TO_CHECK
    if State.UNREADABLE in states:
        return State.UNREADABLE
    if flagged and resolution is None:
        return State.TO_CHECK
    for state in (State.CORRECTED, State.CONFIRMED):
        if resolution == state or state in states:
            return state
    return State.READ


def combine_states(states: Iterable[str]) -> State:
    """The state of a group (a page's fields): the first of :data:`STATES` present, else ``read``."""
    present = set(states)
    return next((s for s in STATES if s in present), State.READ)


def counted_box(blank: bool | int, state: str) -> bool:
    """Whether a box takes part in its field's state: written, or given a digit by a person."""
    return not blank or state != State.READ


def page_layout(fields: Iterable[tuple[str, int]]) -> str:
    """A page's layout, as stored in the batch: JSON of ``[[name, number of boxes], ...]``.

    >>> page_layout([("f01", 5), ("f02", 3)])
    '[["f01", 5], ["f02", 3]]'
    """
    return json.dumps([[name, int(n)] for name, n in fields])


def common_layout(tallies: Iterable[tuple[str, int, int]]) -> str | None:
    """The batch's layout: the most common, on a tie the one seen first.

    Parameters
    ----------
    tallies : iterable of (layout, pages, first seen)
        Each layout with how many pages have it and the position (or id) of
        its first page.

    >>> common_layout([("A", 2, 5), ("B", 2, 1), ("C", 1, 0)])
    'B'
    """
    best = min(tallies, key=lambda t: (-t[1], t[2]), default=None)
    return None if best is None else best[0]


def layout_reasons(layout: str | None, common: str | None) -> dict[str, tuple[str, ...]]:
    """The fields of a page that its layout puts in doubt, against the batch's layout.

    Returns ``{field name: reasons}``: ``"layout differs"`` or ``"fields
    missing"`` (see the module docstring), then, on the field standing where
    fields of the batch's layout were not found, ``"missing: <names>"``
    (:func:`missing_fields`); empty when the layouts are the same or either
    is unknown.

    >>> a = page_layout([("f01", 5), ("f02", 8), ("f03", 2), ("f04", 3)])
    >>> layout_reasons(page_layout([("f01", 5), ("f02", 8), ("f03", 1), ("f04", 3)]), a)
    {'f03': ('layout differs',)}
    >>> layout_reasons(page_layout([("f01", 5), ("f02", 2), ("f03", 3)]), a)
    {'f02': ('layout differs', 'missing: f02 (8 boxes)'), 'f03': ('layout differs',)}
    >>> layout_reasons(page_layout([("f01", 5), ("f02", 8)]), a)
    {'f02': ('fields missing', 'missing: f03 (2 boxes), f04 (3 boxes)')}
    """
    if layout is None or common is None or layout == common:
        return {}
    page = [(str(name), int(n)) for name, n in json.loads(layout)]
    batch = [(str(name), int(n)) for name, n in json.loads(common)]
    if not page:
        return {}
    if [name for name, _ in page] == [name for name, _ in batch]:
        differ = [i for i, (a, b) in enumerate(zip(page, batch)) if a != b]
        return {name: (Reason.LAYOUT_DIFFERS.value,) for name, _ in page[differ[0]:differ[-1] + 1]}
    first = next((i for i, (a, b) in enumerate(zip(page, batch)) if a != b), min(len(page), len(batch)))
    missing = _missing(page, batch)
    if first == len(page):
        reasons = {page[-1][0]: (Reason.FIELDS_MISSING.value,)}
    else:
        reasons = {name: (Reason.LAYOUT_DIFFERS.value,) for name, _ in page[first:]}
    for name, lost in missing.items():
        reasons[name] = reasons.get(name, (Reason.LAYOUT_DIFFERS.value,)) + (MISSING_REASON + lost,)
    return reasons


def missing_fields(layout: str, common: str) -> dict[str, str]:
    """The batch's fields not found on a page, named on the page's field standing in their place.

    The box counts of the page's fields are aligned to the batch's (see the
    module docstring); each run of the batch's fields left without a
    counterpart is named, ``"f05 (4 boxes)"``, on the page's next field, or
    on its last field when the run ends the batch's layout.

    >>> a = page_layout([("f01", 5), ("f02", 8), ("f03", 2), ("f04", 3)])
    >>> missing_fields(page_layout([("f01", 5), ("f02", 2), ("f03", 3)]), a)
    {'f02': 'f02 (8 boxes)'}
    >>> missing_fields(page_layout([("f01", 8), ("f02", 3)]), a)
    {'f01': 'f01 (5 boxes)', 'f02': 'f03 (2 boxes)'}
    """
    return _missing([(str(name), int(n)) for name, n in json.loads(layout)],
                    [(str(name), int(n)) for name, n in json.loads(common)])


def _missing(page_fields: list[tuple[str, int]], batch_fields: list[tuple[str, int]]) -> dict[str, str]:
    """:func:`missing_fields` on the parsed layouts: lists of (field name, number of boxes)."""
    if not page_fields:
        return {}
    page, batch = [n for _, n in page_fields], [n for _, n in batch_fields]
    rows, cols = len(page) + 1, len(batch) + 1
    score = [[-(i + j) if not (i and j) else 0 for j in range(cols)] for i in range(rows)]  # gaps at the start
    for i in range(1, rows):
        for j in range(1, cols):
            pair = 2 if page[i - 1] == batch[j - 1] else -1
            score[i][j] = max(score[i - 1][j - 1] + pair, score[i - 1][j] - 1, score[i][j - 1] - 1)
    lost_before: dict[int, list[int]] = {}  # page field index -> batch fields missing just before it
    i, j = len(page), len(batch)
    while i or j:
        # on a tie a field is taken as missing as late as possible: the longest same beginning is kept
        pair = 2 if i and j and page[i - 1] == batch[j - 1] else -1
        if j and score[i][j] == score[i][j - 1] - 1:
            lost_before.setdefault(i, []).insert(0, j - 1)
            j -= 1
        elif i and j and score[i][j] == score[i - 1][j - 1] + pair:
            i, j = i - 1, j - 1
        else:
            i -= 1
    out: dict[str, str] = {}
    for i, lost in sorted(lost_before.items()):
        at = page_fields[min(i, len(page_fields) - 1)][0]
        words = ", ".join(f"{name} ({n} box{'es' if n != 1 else ''})" for name, n in (batch_fields[k] for k in lost))
        out[at] = f"{out[at]}, {words}" if at in out else words
    return out


def reasons_in_words(why: Iterable[str]) -> str:
    """The reasons a field is flagged, in words; a broken template rule shows as the rule says it,
    and fields not found on the page by their names.

    A reason without words of its own (none is made) shows as "flagged" rather than as its key.
    """
    return "; ".join(f"a rule is broken — {w[len(_RULE):]}" if w.startswith(_RULE)
                     else f"not found on this page: {w[len(MISSING_REASON):]}" if w.startswith(MISSING_REASON)
                     else REASON_WORDS.get(w, "flagged") for w in why)
