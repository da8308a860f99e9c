"""Read-only rows the review works from: what is left to check, one box, the checked
values, the action log, and the boxes a new model reads again.

Typed SQL for :mod:`recognizer.review` (which decides what the rows mean):
JSON columns come back decoded, flags as ``bool``. Nothing here writes, and the
rule for "to check" is not here: these rows carry its inputs and the states
stored by :mod:`recognizer.batch.flags`.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

from recognizer.batch.edits import ActionRow
from recognizer.batch.flags import FieldCheck, field_checks
from recognizer.batch.queries import BoxEdges, decode_boxes
from recognizer.batch.store import Batch
from recognizer.states import NOT_A_DIGIT_MARK, State

__all__ = [
    "DigitRow",
    "FieldToCheck",
    "DigitToCheck",
    "CheckedField",
    "OpenBox",
    "digit_row",
    "fields_to_check",
    "digits_to_check",
    "checked_fields",
    "action_log",
    "pages_with_open_digits",
    "open_boxes",
]

_OPEN = (State.READ.value, State.TO_CHECK.value)


# --------------------------------------------------------------------------- one box


@dataclass(frozen=True)
class DigitRow:
    """One box with what a review action on it needs (``whole``: its field's value was set as a whole)."""

    digit_id: int
    field_id: int
    blank: bool
    prediction: str
    value: str | None
    state: str
    whole: bool


def digit_row(batch: Batch, digit_id: int) -> DigitRow | None:
    """One box (None: no such digit)."""
    rows = batch.rows(
        "SELECT d.id, d.field_id, d.blank, d.prediction, d.value, d.state, f.whole "
        "FROM digits d JOIN fields f ON f.id = d.field_id WHERE d.id = ?",
        (digit_id,),
    )
    if not rows:
        return None
    r = rows[0]
    return DigitRow(r["id"], r["field_id"], bool(r["blank"]), r["prediction"], r["value"], r["state"],
                    bool(r["whole"]))


# --------------------------------------------------------------------------- what is left to check


@dataclass(frozen=True)
class FieldToCheck:
    """A field in state ``to check``, with where it is and why.

    ``lowest`` is the lowest confidence of its written boxes (None: none);
    ``marks`` and ``unsure`` count its boxes in state ``to check`` read as
    "not a digit" and as a digit; ``box_doubts`` and ``rule_problems`` are
    the stored lists; ``page_warnings`` are the warnings of its page that can
    affect this field and ``odd_layout`` says whether its page's layout puts
    this field in doubt; ``why`` is the rule's list of reasons
    (:func:`recognizer.batch.flags.field_checks`, the call behind the stored
    state), read just after the rows (empty for a field another thread
    flagged in between).
    """

    field_id: int
    file_id: int
    file: str
    page: int
    name: str
    position: int
    value: str
    read_value: str
    gap: bool
    box_doubts: tuple[str, ...]
    rule_problems: tuple[str, ...]
    page_warnings: tuple[str, ...]
    odd_layout: bool
    lowest: float | None
    marks: int
    unsure: int
    why: tuple[str, ...] = ()


def fields_to_check(batch: Batch) -> list[FieldToCheck]:
    """Every field in state ``to check`` (in no particular order)."""
    to_check, mark = State.TO_CHECK.value, NOT_A_DIGIT_MARK
    rows = batch.rows(
        """
        SELECT f.id, f.name, f.position, f.value, f.read_value, f.gap, f.doubts, f.rule_problems, p.page,
               fl.path, fl.id AS file_id,
               (SELECT MIN(d.confidence) FROM digits d WHERE d.field_id = f.id AND NOT d.blank) AS lowest,
               (SELECT COUNT(*) FROM digits d WHERE d.field_id = f.id AND d.state = ?
                    AND d.prediction = ?) AS marks,
               (SELECT COUNT(*) FROM digits d WHERE d.field_id = f.id AND d.state = ?
                    AND d.prediction != ?) AS unsure
        FROM fields f JOIN pages p ON p.id = f.page_id JOIN files fl ON fl.id = p.file_id
        WHERE f.state = ?
        """,
        (to_check, mark, to_check, mark, to_check),
    )
    # the reasons are read right after the rows; a field another thread flagged in between has none yet
    checks = field_checks(batch.rows, "f.state = ?", (to_check,), threshold=batch.settings.threshold)
    none = FieldCheck((), (), ())
    return [
        FieldToCheck(
            r["id"], r["file_id"], r["path"], r["page"], r["name"], r["position"], r["value"], r["read_value"],
            bool(r["gap"]), tuple(json.loads(r["doubts"])), tuple(json.loads(r["rule_problems"])),
            checks.get(r["id"], none).page_warnings, bool(checks.get(r["id"], none).layout), r["lowest"],
            int(r["marks"]), int(r["unsure"]), checks.get(r["id"], none).why,
        )
        for r in rows
    ]


@dataclass(frozen=True)
class DigitToCheck:
    """A written box in state ``to check``, with its field and where it is."""

    digit_id: int
    box: int
    value: str | None
    prediction: str
    confidence: float
    field_id: int
    name: str
    position: int
    page: int
    file: str
    file_id: int


def digits_to_check(batch: Batch) -> list[DigitToCheck]:
    """Every box in state ``to check`` (in no particular order)."""
    rows = batch.rows(
        "SELECT d.id AS digit_id, d.box, d.value, d.prediction, d.confidence, f.id, f.name, f.position, "
        "p.page, fl.path, fl.id AS file_id "
        "FROM digits d JOIN fields f ON f.id = d.field_id JOIN pages p ON p.id = f.page_id "
        "JOIN files fl ON fl.id = p.file_id WHERE d.state = ?",
        (State.TO_CHECK.value,),
    )
    return [
        DigitToCheck(r["digit_id"], r["box"], r["value"], r["prediction"], r["confidence"], r["id"], r["name"],
                     r["position"], r["page"], r["path"], r["file_id"])
        for r in rows
    ]


# --------------------------------------------------------------------------- checked values


@dataclass(frozen=True)
class CheckedField:
    """A field as the checked CSV needs it: its value and typed value now, its state, its
    place on the page, its page's template (None: read without one) and its lowest confidence."""

    page_id: int
    name: str
    value: str
    typed: str | None
    state: str
    position: int
    template: str | None
    lowest: float | None


def checked_fields(batch: Batch) -> list[CheckedField]:
    """Every field of the batch (in no particular order)."""
    rows = batch.rows(
        """
        SELECT f.page_id, f.name, f.value, f.typed, f.state, f.position, p.template,
               (SELECT MIN(d.confidence) FROM digits d WHERE d.field_id = f.id AND NOT d.blank) AS lowest
        FROM fields f JOIN pages p ON p.id = f.page_id
        """
    )
    return [CheckedField(r["page_id"], r["name"], r["value"], r["typed"], r["state"], r["position"],
                         r["template"], r["lowest"]) for r in rows]


# --------------------------------------------------------------------------- the action log


def action_log(batch: Batch) -> list[ActionRow]:
    """Every recorded action, oldest first."""
    return [ActionRow.from_row(r) for r in batch.rows("SELECT * FROM actions ORDER BY id")]


# --------------------------------------------------------------------------- reading again


def pages_with_open_digits(batch: Batch) -> list[int]:
    """Ids of the pages with written boxes no person has handled (``read`` or ``to check``, in a field
    no person has resolved as a whole, for example as unreadable), in id order."""
    return [r[0] for r in batch.rows(
        "SELECT DISTINCT f.page_id FROM digits d JOIN fields f ON f.id = d.field_id "
        "WHERE NOT d.blank AND d.state IN (?, ?) AND f.resolution IS NULL ORDER BY f.page_id", _OPEN)]


@dataclass(frozen=True)
class OpenBox:
    """A written box no person has handled, with its field's box edges ``(x0, y0, x1, y1)`` on the page."""

    digit_id: int
    box: int
    prediction: str
    field_id: int
    field_boxes: tuple[BoxEdges, ...]


def open_boxes(batch: Batch, page_id: int) -> list[OpenBox]:
    """The written boxes of a page no person has handled (``read`` or ``to check``), leaving out the
    fields a person resolved as a whole (for example as unreadable): their value is the person's."""
    rows = batch.rows(
        "SELECT d.id, d.box, d.prediction, f.id AS field_id, f.boxes FROM digits d "
        "JOIN fields f ON f.id = d.field_id "
        "WHERE f.page_id = ? AND NOT d.blank AND d.state IN (?, ?) AND f.resolution IS NULL",
        (page_id, *_OPEN),
    )
    edges: dict[int, tuple[BoxEdges, ...]] = {}
    for r in rows:
        if r["field_id"] not in edges:
            edges[r["field_id"]] = decode_boxes(r["boxes"])
    return [OpenBox(r["id"], r["box"], r["prediction"], r["field_id"], edges[r["field_id"]]) for r in rows]
