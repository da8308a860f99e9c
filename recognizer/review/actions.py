"""Review actions: a person sets, confirms or marks unreadable a digit or a field, and undoes.

The states and the flagging rule are in :mod:`recognizer.states`.

Values
------
A digit's value is ``"0"`` .. ``"9"``, ``""`` (no digit in this box: empty,
or a mark a person said is not a digit) or ``"?"`` (read as "not a digit" and
not reviewed yet). A field's value joins its digits' values left to right
(:func:`recognizer.reading.page.field_value`). :func:`set_field` with as many
digits as the field has written boxes gives each box its digit (so each one
becomes a labelled sample); with another number of digits the field's value
is set *as a whole* and its boxes carry no per-box label (digit value
``None``), until the field is set again.

Actions and undo
----------------
:func:`set_digit`, :func:`set_field`, :func:`confirm` (the value as it now
stands) and :func:`mark_unreadable` each commit one transaction and record an
action (kind, field, digit, old and new value, reviewer, time, and the rows
as they were before). :func:`undo` takes back the last action *of the given
reviewer* that is still in effect, restoring the field as it was, and records
an ``undo`` action; it refuses when someone changed the same field after
that action (undo theirs first). Threshold changes and re-reading are logged
too (:func:`record_action`) but are not undone by :func:`undo` (set the
threshold again).

The SQL behind these actions is in :mod:`recognizer.batch.edits` (writes and
the action log) and :mod:`recognizer.batch.review_rows`; this module decides
what each action does to a field.
"""

from __future__ import annotations

import getpass
import sqlite3
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from recognizer.batch import edits
from recognizer.batch.edits import FieldSnapshot
from recognizer.batch.flags import refresh_states
from recognizer.batch.queries import find_field_id, stored_files
from recognizer.batch.review_rows import DigitRow, action_log, digit_row
from recognizer.batch.store import Batch, Change
from recognizer.digits.model import timestamp
from recognizer.reading.page import UNREADABLE_MARK
from recognizer.review.errors import ReviewError
from recognizer.states import State, counted_box

__all__ = [
    "Action",
    "ReviewError",
    "default_reviewer",
    "find_field",
    "record_action",
    "set_digit",
    "set_field",
    "confirm",
    "mark_unreadable",
    "undo",
    "actions",
]

READ, TO_CHECK, CORRECTED, CONFIRMED, UNREADABLE = (
    State.READ.value, State.TO_CHECK.value, State.CORRECTED.value, State.CONFIRMED.value, State.UNREADABLE.value)
_REVIEW_KINDS = edits.REVIEW_KINDS

#: A change to one field, run inside the action's transaction with the field as it was before.
FieldChange = Callable[[sqlite3.Connection, FieldSnapshot], None]


def _as_read(prediction: str) -> str:
    """The value a box has when a person accepts the reading: a "not a digit" mark drops out."""
    return "" if prediction == UNREADABLE_MARK else prediction


@dataclass(frozen=True)
class Action:
    """One recorded action."""

    id: int
    time: str
    reviewer: str
    kind: str
    field_id: int | None
    digit_id: int | None
    old_value: str | None
    new_value: str | None
    undoes: int | None = None
    undone_by: int | None = None


def default_reviewer() -> str:
    """The operating system's user name (``"unknown"`` if there is none)."""
    try:
        return getpass.getuser() or "unknown"
    except (KeyError, OSError):
        return "unknown"


def find_field(batch: Batch, file: str, page: int, name: str) -> int:
    """Id of field ``name`` on page ``page`` of ``file``.

    ``file`` is matched against the stored path, then against its trailing
    components (``scan01.png`` matches ``cards/scan01.png``) when that is
    unambiguous.
    """
    files = [(f.file_id, f.path) for f in stored_files(batch)]
    matches = [fid for fid, path in files if path == file]
    if not matches:
        want = Path(file).parts
        matches = [fid for fid, path in files if Path(path).parts[-len(want):] == want] if want else []
    if not matches:
        raise ReviewError(f"no file {file!r} in this batch")
    if len(matches) > 1:
        raise ReviewError(f"{file!r} matches {len(matches)} files in this batch; give more of its path")
    found = find_field_id(batch, matches[0], page, name)
    if found is None:
        raise ReviewError(f"no field {name!r} on page {page} of {file!r}")
    return found


def record_action(conn: sqlite3.Connection, *, reviewer: str | None, kind: str, field_id: int | None = None,
                  digit_id: int | None = None, old: str | None = None, new: str | None = None,
                  before: FieldSnapshot | None = None, undoes: int | None = None) -> Action:
    """Log an action inside an open transaction, at the current time; ``reviewer``
    defaults to :func:`default_reviewer`. ``before`` is the field as it was (what undo restores)."""
    time = timestamp()
    reviewer = reviewer or default_reviewer()
    action_id = edits.add_action(conn, time=time, reviewer=reviewer, kind=kind, field_id=field_id,
                                 digit_id=digit_id, old=old, new=new, before=before, undoes=undoes)
    return Action(action_id, time, reviewer, kind, field_id, digit_id, old, new, undoes)


def _digit_row(batch: Batch, digit_id: int) -> DigitRow:
    row = digit_row(batch, digit_id)
    if row is None:
        raise ReviewError(f"no digit {digit_id} in this batch")
    return row


def _snapshot(conn: sqlite3.Connection, field_id: int) -> FieldSnapshot:
    snapshot = edits.snapshot_field(conn, field_id)
    if snapshot is None:
        raise ReviewError(f"no field {field_id} in this batch")
    return snapshot


def _field_action(batch: Batch, kind: str, field_id: int, reviewer: str | None, change: FieldChange,
                  *, digit_id: int | None = None, old: str | None = None, new: str | None = None) -> Action:
    """Run ``change(conn, before)`` on one field in one transaction, re-derive it and record the action."""
    with batch.transaction() as conn:
        before = _snapshot(conn, field_id)
        change(conn, before)
        touched = refresh_states(conn, field_ids=[field_id])
        if digit_id is None:
            old, new = before.value, edits.field_value(conn, field_id)
        action = record_action(conn, reviewer=reviewer, kind=kind, field_id=field_id,
                               digit_id=digit_id, old=old, new=new, before=before)
    batch.notify(Change("review", field_ids=_with_others(field_id, touched),
                        digit_ids=() if digit_id is None else (digit_id,)))
    return action


def set_digit(batch: Batch, digit_id: int, value: str, *, reviewer: str | None = None) -> Action:
    """Give one box its value: ``"0"`` .. ``"9"``, or ``""`` for "no digit here".

    The box becomes ``confirmed`` if that is what was read, else ``corrected``.
    Refused for a field whose value was set as a whole (set the field again).
    """
    if not (value == "" or (len(value) == 1 and value in "0123456789")):
        raise ReviewError(f"a digit is one of 0-9 or empty, not {value!r}")
    row = _digit_row(batch, digit_id)
    if row.whole:
        raise ReviewError("this field's value was set as a whole; set the whole field again")
    state = (READ if row.blank else CONFIRMED) if value == _as_read(row.prediction) else CORRECTED

    def change(conn, before):
        edits.set_digits(conn, [(digit_id, value, state)])

    return _field_action(batch, "set digit", row.field_id, reviewer, change,
                         digit_id=digit_id, old=row.value, new=value)


def set_field(batch: Batch, field_id: int, value: str, *, reviewer: str | None = None) -> Action:
    """Give a whole field its value (digits only; ``""`` for an empty field).

    With as many digits as the field has written boxes, each box gets its
    digit (``confirmed`` where it was read so, ``corrected`` elsewhere);
    otherwise the value is set as a whole (see the module docstring).
    """
    if value and not (value.isascii() and value.isdigit()):
        raise ReviewError(f"a field value is made of digits 0-9, not {value!r}")

    def change(conn, before):
        boxes = [d for d in edits.field_boxes(conn, field_id) if counted_box(d.blank, d.state)]
        if len(boxes) == len(value):
            states = [CONFIRMED if ch == _as_read(d.prediction) else CORRECTED for ch, d in zip(value, boxes)]
            edits.set_digits(conn, [(d.digit_id, ch, s) for ch, s, d in zip(value, states, boxes)])
            edits.set_field_by_box(conn, field_id, CORRECTED if CORRECTED in states else CONFIRMED)
        else:
            edits.set_digits(conn, [(d.digit_id, None, CORRECTED) for d in boxes])
            edits.set_field_whole(conn, field_id, value, CORRECTED)

    return _field_action(batch, "set field", field_id, reviewer, change)


def _one_target(field: int | None, digit: int | None) -> None:
    if (field is None) == (digit is None):
        raise TypeError("give exactly one of field= or digit=")


def confirm(batch: Batch, *, field: int | None = None, digit: int | None = None,
            reviewer: str | None = None) -> Action:
    """Say the value of a field or a digit, as it now stands, is right.

    A box read as "not a digit" and confirmed drops out of the value (its
    value becomes ``""``). Boxes a person corrected stay ``corrected``, and so
    does a field a person corrected.
    """
    _one_target(field, digit)
    if digit is not None:
        row = _digit_row(batch, digit)

        def change_digit(conn, before):
            if row.state != CORRECTED and not (row.blank and row.state == READ):
                edits.set_digits(conn, [(digit, _as_read(row.prediction), CONFIRMED)])

        return _field_action(batch, "confirm digit", row.field_id, reviewer, change_digit,
                             digit_id=digit, old=row.value, new=_as_read(row.prediction))

    def change_field(conn, before):
        edits.set_digits(conn, [(d.digit_id, _as_read(d.prediction), CONFIRMED) for d in edits.field_boxes(conn, field)
                                if counted_box(d.blank, d.state) and d.state != CORRECTED])
        edits.set_resolution(conn, field, CORRECTED if before.resolution == CORRECTED else CONFIRMED)

    return _field_action(batch, "confirm field", field, reviewer, change_field)


def mark_unreadable(batch: Batch, *, field: int | None = None, digit: int | None = None,
                    reviewer: str | None = None) -> Action:
    """Say a field or a digit cannot be read (an unreadable field exports as empty)."""
    _one_target(field, digit)
    if digit is not None:
        row = _digit_row(batch, digit)
        return _field_action(
            batch, "unreadable digit", row.field_id, reviewer,
            lambda conn, before: edits.set_digit_state(conn, digit, UNREADABLE),
            digit_id=digit, old=row.value, new=row.value,
        )
    return _field_action(
        batch, "unreadable field", field, reviewer,
        lambda conn, before: edits.set_resolution(conn, field, UNREADABLE),
    )


def undo(batch: Batch, *, reviewer: str | None = None) -> Action | None:
    """Take back the last action of ``reviewer`` still in effect; None if there is none.

    Raises
    ------
    ReviewError
        Someone changed the same field after that action.
    """
    reviewer = reviewer or default_reviewer()
    with batch.transaction() as conn:
        target = edits.last_action(conn, _REVIEW_KINDS, reviewer=reviewer)
        if target is None:
            return None
        later = edits.last_action(conn, _REVIEW_KINDS, field_id=target.field_id, after=target.id)
        if later is not None:
            raise ReviewError(
                f"cannot undo {target.kind!r} of {target.time}: {later.reviewer} changed the same "
                f"field after it ({later.kind!r} at {later.time}); that must be undone first"
            )
        field_id = target.field_id
        before = _snapshot(conn, field_id)
        edits.restore_field(conn, field_id, target.before)
        touched = refresh_states(conn, field_ids=[field_id])
        action = record_action(conn, reviewer=reviewer, kind="undo", field_id=field_id, digit_id=target.digit_id,
                               old=before.value, new=edits.field_value(conn, field_id), before=before,
                               undoes=target.id)
        edits.mark_undone(conn, target.id, action.id)
    batch.notify(Change("review", field_ids=_with_others(field_id, touched)))
    return action


def _with_others(field_id: int, touched: Sequence[int]) -> tuple[int, ...]:
    """The action's field first, then the other fields its re-checked rules changed (a sum's)."""
    return (field_id, *(i for i in touched if i != field_id))


def actions(batch: Batch) -> list[Action]:
    """Every recorded action, oldest first."""
    return [Action(r.id, r.time, r.reviewer, r.kind, r.field_id, r.digit_id, r.old_value, r.new_value,
                   r.undoes, r.undone_by)
            for r in action_log(batch)]
