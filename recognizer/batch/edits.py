"""The writes a review makes, and its action log: typed SQL for :mod:`recognizer.review`.

Every function here takes the ``sqlite3.Connection`` of an open
:meth:`recognizer.batch.store.Batch.transaction` and reads or writes only what
its name says; what a correction, a confirmation or an undo *means* is decided
in :mod:`recognizer.review`, and the states a change leads to are re-derived
afterwards by :func:`recognizer.batch.flags.refresh_states`.

The action log
--------------
One row of ``actions`` per action (:class:`ActionRow`). Its ``before`` column
is a :class:`FieldSnapshot` as JSON, ``{"field": [value, whole, resolution],
"digits": [[id, value, state], ...]}`` (boxes in order); it is encoded and
decoded only here.
"""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from recognizer.states import State

__all__ = [
    "DigitSnapshot",
    "FieldSnapshot",
    "REVIEW_KINDS",
    "ActionRow",
    "BoxRow",
    "NewReading",
    "snapshot_field",
    "restore_field",
    "field_value",
    "field_boxes",
    "set_digits",
    "set_digit_state",
    "set_field_by_box",
    "set_field_whole",
    "set_resolution",
    "add_action",
    "last_action",
    "mark_undone",
    "store_readings",
]


# --------------------------------------------------------------------------- snapshots


class DigitSnapshot(NamedTuple):
    """One box of a :class:`FieldSnapshot`: its id, value and state."""

    digit_id: int
    value: str | None
    state: str


@dataclass(frozen=True)
class FieldSnapshot:
    """What a review action may change of one field: its value, ``whole`` flag,
    resolution, and each box's value and state (kept with the action, restored by undo)."""

    value: str
    whole: bool
    resolution: str | None
    digits: tuple[DigitSnapshot, ...]

    def to_json(self) -> str:
        """The ``actions.before`` text of this snapshot."""
        return json.dumps({"field": [self.value, int(self.whole), self.resolution],
                           "digits": [list(d) for d in self.digits]})

    @classmethod
    def from_json(cls, text: str) -> FieldSnapshot:
        """A snapshot back from :meth:`to_json` text."""
        data = json.loads(text)
        value, whole, resolution = data["field"]
        return cls(value, bool(whole), resolution, tuple(DigitSnapshot(*d) for d in data["digits"]))


def snapshot_field(conn: sqlite3.Connection, field_id: int) -> FieldSnapshot | None:
    """The field as it is now (None: no such field)."""
    f = conn.execute("SELECT value, whole, resolution FROM fields WHERE id = ?", (field_id,)).fetchone()
    if f is None:
        return None
    digits = conn.execute("SELECT id, value, state FROM digits WHERE field_id = ?", (field_id,)).fetchall()
    return FieldSnapshot(f["value"], bool(f["whole"]), f["resolution"], tuple(DigitSnapshot(*d) for d in digits))


def restore_field(conn: sqlite3.Connection, field_id: int, snapshot: FieldSnapshot) -> None:
    """Put a field back as ``snapshot`` has it (states are re-derived by the caller)."""
    conn.execute("UPDATE fields SET value = ?, whole = ?, resolution = ? WHERE id = ?",
                 (snapshot.value, int(snapshot.whole), snapshot.resolution, field_id))
    set_digits(conn, snapshot.digits)


def field_value(conn: sqlite3.Connection, field_id: int) -> str | None:
    """The field's value now (None: no such field)."""
    row = conn.execute("SELECT value FROM fields WHERE id = ?", (field_id,)).fetchone()
    return None if row is None else row[0]


# --------------------------------------------------------------------------- digits and fields


class BoxRow(NamedTuple):
    """One box of a field, as a review change needs it."""

    digit_id: int
    blank: bool
    prediction: str
    state: str


def field_boxes(conn: sqlite3.Connection, field_id: int) -> list[BoxRow]:
    """Every box of a field, empty ones included, in order."""
    return [BoxRow(r["id"], bool(r["blank"]), r["prediction"], r["state"]) for r in conn.execute(
        "SELECT id, blank, prediction, state FROM digits WHERE field_id = ? ORDER BY box", (field_id,))]


def set_digits(conn: sqlite3.Connection, values: Iterable[tuple[int, str | None, str]]) -> None:
    """Give boxes a value and a state: ``(digit id, value, state)`` each (value None: no per-box value)."""
    conn.executemany("UPDATE digits SET value = ?, state = ? WHERE id = ?",
                     [(value, state, digit_id) for digit_id, value, state in values])


def set_digit_state(conn: sqlite3.Connection, digit_id: int, state: str) -> None:
    """Change one box's state, keeping its value."""
    conn.execute("UPDATE digits SET state = ? WHERE id = ?", (state, digit_id))


def set_field_by_box(conn: sqlite3.Connection, field_id: int, resolution: str) -> None:
    """The field's value comes from its boxes again (``whole`` off), with a person's ``resolution``."""
    conn.execute("UPDATE fields SET whole = 0, resolution = ? WHERE id = ?", (resolution, field_id))


def set_field_whole(conn: sqlite3.Connection, field_id: int, value: str, resolution: str) -> None:
    """Set the field's value as a whole (``whole`` on), with a person's ``resolution``."""
    conn.execute("UPDATE fields SET whole = 1, value = ?, resolution = ? WHERE id = ?",
                 (value, resolution, field_id))


def set_resolution(conn: sqlite3.Connection, field_id: int, resolution: str | None) -> None:
    """Record a person's decision on the whole field (its value stays)."""
    conn.execute("UPDATE fields SET resolution = ? WHERE id = ?", (resolution, field_id))


class NewReading(NamedTuple):
    """A box read again: its class probabilities (11, any float dtype), the text read and its confidence."""

    digit_id: int
    probs: np.ndarray
    prediction: str
    confidence: float


def store_readings(conn: sqlite3.Connection, readings: Iterable[NewReading], *, model_version: str) -> None:
    """Store new readings of boxes no person has handled: each box's value becomes
    the text read, its probabilities are kept as little-endian float32.

    A box that a person handled after the readings were made (its state is no
    longer ``read`` or ``to check``, or its field was resolved as a whole) is
    left as it is: readings are computed outside the transaction that stores
    them, and a person's decision always wins.
    """
    conn.executemany(
        "UPDATE digits SET probs = ?, prediction = ?, confidence = ?, model_version = ?, value = ? "
        "WHERE id = ? AND NOT blank AND state IN (?, ?) "
        "AND field_id IN (SELECT id FROM fields WHERE resolution IS NULL)",
        [(np.asarray(r.probs, "<f4").tobytes(), r.prediction, float(r.confidence), model_version, r.prediction,
          r.digit_id, State.READ.value, State.TO_CHECK.value) for r in readings],
    )


# --------------------------------------------------------------------------- the action log


@dataclass(frozen=True)
class ActionRow:
    """One row of the action log, ``before`` decoded (None for actions that keep no snapshot)."""

    id: int
    time: str
    reviewer: str
    kind: str
    field_id: int | None
    digit_id: int | None
    old_value: str | None
    new_value: str | None
    before: FieldSnapshot | None
    undoes: int | None
    undone_by: int | None

    @classmethod
    def from_row(cls, r: sqlite3.Row) -> ActionRow:
        """From a ``SELECT * FROM actions`` row."""
        return cls(r["id"], r["time"], r["reviewer"], r["kind"], r["field_id"], r["digit_id"], r["old_value"],
                   r["new_value"], None if r["before"] is None else FieldSnapshot.from_json(r["before"]),
                   r["undoes"], r["undone_by"])


#: The kinds of action a person takes on a field (what :func:`recognizer.review.actions.undo` takes back).
REVIEW_KINDS = ("set digit", "set field", "confirm digit", "confirm field", "unreadable digit", "unreadable field")


def add_action(conn: sqlite3.Connection, *, time: str, reviewer: str, kind: str, field_id: int | None = None,
               digit_id: int | None = None, old: str | None = None, new: str | None = None,
               before: FieldSnapshot | None = None, undoes: int | None = None) -> int:
    """Append an action to the log; return its id."""
    cur = conn.execute(
        "INSERT INTO actions (time, reviewer, kind, field_id, digit_id, old_value, new_value, before, undoes) "
        "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (time, reviewer, kind, field_id, digit_id, old, new, None if before is None else before.to_json(), undoes),
    )
    return int(cur.lastrowid)


def last_action(conn: sqlite3.Connection, kinds: Sequence[str], *, reviewer: str | None = None,
                field_id: int | None = None, after: int | None = None) -> ActionRow | None:
    """The latest action of one of ``kinds`` not undone yet (None if there is none).

    Limited to the actions of ``reviewer``, on field ``field_id``, and logged
    after action ``after``, for those given.
    """
    where, params = [f"kind IN ({','.join('?' * len(kinds))})", "undone_by IS NULL"], list(kinds)
    for clause, value in (("reviewer = ?", reviewer), ("field_id = ?", field_id), ("id > ?", after)):
        if value is not None:
            where.append(clause)
            params.append(value)
    row = conn.execute(f"SELECT * FROM actions WHERE {' AND '.join(where)} ORDER BY id DESC LIMIT 1",
                       params).fetchone()
    return None if row is None else ActionRow.from_row(row)


def mark_undone(conn: sqlite3.Connection, action_id: int, undone_by: int) -> None:
    """Record that action ``undone_by`` took back action ``action_id``."""
    conn.execute("UPDATE actions SET undone_by = ? WHERE id = ?", (undone_by, action_id))
