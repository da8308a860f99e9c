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
* A digit is *to check* when the model reads it as "not a digit", when there
  is no threshold yet, or when its confidence is under the threshold
  (:func:`digit_to_check`).
* A field is *to check* when one of its digits is, or for a field-level
  :class:`Reason`: an empty box between its written digits (a gap), doubtful
  boxes (boxes added at its ends from the neighbours' pitch), a broken template
  rule, warnings on its page while its boxes were found (faint lines, a skew
  beyond the limit), or a page layout that differs from the batch's
  (:func:`field_reasons`).
* A page's *layout* is its list of (field name, number of boxes)
  (:func:`page_layout`). The batch's layout is the most common one among the
  pages read, on a tie the one seen first (:func:`common_layout`); a page with
  another layout has all its fields flagged.

Field state
-----------
From the states of its digits (the written boxes, plus any empty box a person
gave a digit) and the field-level decision of a person (its *resolution*:
none, ``corrected``, ``confirmed`` or ``unreadable``), in this order:
resolution ``unreadable`` -> ``unreadable``; any digit ``to check`` -> ``to
check``; any digit ``unreadable`` -> ``unreadable``; a field-level reason not
yet resolved by a field action -> ``to check``; resolution or any digit
``corrected`` -> ``corrected``; resolution or any digit ``confirmed`` ->
``confirmed``; otherwise ``read`` (:func:`field_state`). A page's state
combines its fields' the same way (:func:`combine_states`).
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Sequence
from enum import StrEnum

__all__ = [
    "State",
    "STATES",
    "Reason",
    "REASON_WORDS",
    "NOT_A_DIGIT_MARK",
    "DEFAULT_TARGET_ERROR",
    "digit_to_check",
    "counted_box",
    "field_reasons",
    "field_state",
    "combine_states",
    "page_layout",
    "common_layout",
    "reasons_in_words",
]

#: Default wanted share of wrong digits among those accepted automatically (0.1 %).
DEFAULT_TARGET_ERROR = 0.001

#: What a box read as "not a digit" shows as in values, before review.
NOT_A_DIGIT_MARK = "?"


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
    GAP = "gap"
    BOXES_DOUBTFUL = "boxes doubtful"
    PAGE_WARNINGS = "page warnings"
    LAYOUT_DIFFERS = "layout differs"


#: Each reason in a clerk's words.
REASON_WORDS = {
    Reason.LOW_CONFIDENCE: "a digit the reader is unsure of",
    Reason.NOT_A_DIGIT: "a mark that may not be a digit",
    Reason.GAP: "an empty box between digits",
    Reason.BOXES_DOUBTFUL: "some boxes of this field were hard to find",
    Reason.PAGE_WARNINGS: "the page was hard to line up",
    Reason.LAYOUT_DIFFERS: "this page's boxes differ from the other pages",
}

_RULE = "rule "


def digit_to_check(prediction: str, confidence: float, threshold: float | None) -> bool:
    """Whether a written box must be checked: not a digit, no threshold yet, or below it.

    >>> digit_to_check("7", 0.995, 0.99), digit_to_check("7", 0.98, 0.99), digit_to_check("?", 1.0, 0.5)
    (False, True, True)
    """
    return prediction == NOT_A_DIGIT_MARK or threshold is None or confidence < threshold


def field_reasons(
    *,
    unsure_digits: int = 0,
    marks: int = 0,
    gap: bool = False,
    box_doubts: Sequence[str] = (),
    rule_problems: Sequence[str] = (),
    page_warnings: Sequence[str] = (),
    odd_layout: bool = False,
) -> tuple[str, ...]:
    """The reasons a field is to check, in a fixed order (empty: nothing to check).

    Parameters
    ----------
    unsure_digits, marks : int
        Written boxes still to check read as a digit (below the threshold),
        and read as "not a digit".
    gap : bool
        An empty box between written digits.
    box_doubts, rule_problems, page_warnings : sequence of str
        Doubts about the field's boxes, broken template rules (``"<rule>: <what>"``),
        warnings about its page.
    odd_layout : bool
        Its page's layout differs from the batch's.

    >>> field_reasons(unsure_digits=1, gap=True, rule_problems=["max: 12 > 9"])
    ('low confidence', 'gap', 'rule max: 12 > 9')
    """
    why: list[str] = []
    if unsure_digits:
        why.append(Reason.LOW_CONFIDENCE.value)
    if marks:
        why.append(Reason.NOT_A_DIGIT.value)
    if gap:
        why.append(Reason.GAP.value)
    if box_doubts:
        why.append(Reason.BOXES_DOUBTFUL.value)
    why.extend(f"{_RULE}{p}" for p in rule_problems)
    if page_warnings:
        why.append(Reason.PAGE_WARNINGS.value)
    if odd_layout:
        why.append(Reason.LAYOUT_DIFFERS.value)
    return tuple(why)


def field_state(digit_states: Iterable[str], *, flagged: bool, resolution: str | None) -> State:
    """State of a field from its digits' states (see the module docstring).

    Parameters
    ----------
    digit_states : iterable of str
        States of the written boxes (and of empty boxes a person gave a digit).
    flagged : bool
        A field-level reason to check it (:func:`field_reasons` without the digit reasons).
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


def reasons_in_words(why: Iterable[str]) -> str:
    """The reasons a field is flagged, in words; a broken template rule shows as the rule says it."""
    return "; ".join(f"a rule is broken — {w[len(_RULE):]}" if w.startswith(_RULE) else REASON_WORDS.get(w, w)
                     for w in why)
