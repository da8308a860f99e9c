"""Review: which digits and fields a person must look at, and what they did about them.

States
------
Every written box (a *digit*) and every field is in one of five states:

``read``
    Accepted automatically: the model was sure enough (confidence at or above
    the batch threshold, and a digit, not "not a digit").
``to check``
    A person must look at it.
``corrected``
    A person gave a value different from the one read.
``confirmed``
    A person said the value read is right.
``unreadable``
    A person said it cannot be read; an unreadable field exports as empty.

Flagging rules
--------------
* A digit is ``to check`` when its confidence is below the batch threshold or
  the model reads it as "not a digit". The threshold is, by default,
  ``model.threshold_for(target)`` with a target residual error of 0.1 %
  (:data:`DEFAULT_TARGET_ERROR`); :func:`set_threshold` and
  :func:`set_target_error` change it and re-flag the digits still in ``read``
  or ``to check`` without reading anything again (digits a person has
  handled keep their state). A batch without a threshold flags everything.
* A field is flagged when one of its digits is, when there is an empty box
  between its written digits (a gap), when its own boxes were doubtful (boxes
  added at its ends from the neighbours' pitch), when its page had warnings
  while its boxes were found (faint lines, a skew beyond the limit), or when
  its page's layout differs from the batch's.
* A page's layout is its list of (field name, number of boxes). The batch's
  layout is the most common one among the pages read (on a tie, the one seen
  first); a page with another layout is flagged, i.e. all its fields are.
  A page whose boxes could not be found has no fields; its state is
  ``unreadable`` and it is listed with its problem.

Field state
-----------
Derived from the states of its digits (the written boxes, plus any empty box
a person gave a digit) and the field-level decision a person made (its
*resolution*: none, ``corrected``, ``confirmed`` or ``unreadable``), in this
order: resolution ``unreadable`` -> ``unreadable``; any digit ``to check``
-> ``to check``; any digit ``unreadable`` -> ``unreadable``; a field-level
reason (gap, doubtful boxes, page warnings, layout) not yet resolved by a field action ->
``to check``; resolution or any digit ``corrected`` -> ``corrected``;
resolution or any digit ``confirmed`` -> ``confirmed``; otherwise ``read``.
A page's state combines its fields' the same way (``to check`` first, then
``unreadable``, ``corrected``, ``confirmed``, ``read``).

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
too but are not undone by :func:`undo` (set the threshold again).
"""

from __future__ import annotations

import functools
import getpass
import json
import sqlite3
from collections import Counter, defaultdict
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from recognizer.page.boxes import Box
from recognizer.page.cells import cut_cells
from recognizer.digits.model import CLASSES, NOT_A_DIGIT, DigitModel, load_model, timestamp
from recognizer.reading.page import UNREADABLE_MARK, field_value
from recognizer.forms.template import Template, check_page, template_from_json

if TYPE_CHECKING:
    from recognizer.batch.store import Batch

__all__ = [
    "READ",
    "TO_CHECK",
    "CORRECTED",
    "CONFIRMED",
    "UNREADABLE",
    "STATES",
    "DEFAULT_TARGET_ERROR",
    "ORDERS",
    "Action",
    "Change",
    "ReviewError",
    "ReviewItem",
    "ReviewQueue",
    "RereadSummary",
    "digit_to_check",
    "field_state",
    "combine_states",
    "refresh_states",
    "recheck_rules",
    "refresh_layout",
    "default_reviewer",
    "find_field",
    "set_digit",
    "set_field",
    "confirm",
    "mark_unreadable",
    "undo",
    "actions",
    "set_threshold",
    "set_target_error",
    "reread_unchecked",
    "state_counts",
]

READ = "read"
TO_CHECK = "to check"
CORRECTED = "corrected"
CONFIRMED = "confirmed"
UNREADABLE = "unreadable"
#: All states, in the order they take precedence when combined.
STATES = (TO_CHECK, UNREADABLE, CORRECTED, CONFIRMED, READ)
#: Default wanted share of wrong digits among those accepted automatically (0.1 %).
DEFAULT_TARGET_ERROR = 0.001
#: Orders of the review queue.
ORDERS = ("page", "confidence", "digit")

_REVIEW_KINDS = ("set digit", "set field", "confirm digit", "confirm field", "unreadable digit", "unreadable field")


class ReviewError(ValueError):
    """A review action that was refused; the message says why."""


@dataclass(frozen=True)
class Change:
    """What a committed change touched, announced to a batch's observers.

    ``kind`` is ``"page"`` (a page read into the batch; ``page_ids`` also
    names pages whose layout flag changed), ``"review"`` (a review action or
    its undo; ``field_ids`` names its field first, then any other field whose
    rule problems or state the template rules checked again changed) or ``"flags"`` (threshold or model changed: any state may have
    changed).
    """

    kind: str
    page_ids: tuple[int, ...] = ()
    field_ids: tuple[int, ...] = ()
    digit_ids: tuple[int, ...] = ()


# --------------------------------------------------------------------------- rules


def digit_to_check(prediction: str, confidence: float, threshold: float | None) -> bool:
    """Whether a written box must be checked: not a digit, or below the threshold."""
    return prediction == UNREADABLE_MARK or threshold is None or confidence < threshold


def field_state(digit_states: Iterable[str], *, flagged: bool, resolution: str | None) -> str:
    """State of a field from its digits' states (see the module docstring).

    Parameters
    ----------
    digit_states : iterable of str
        States of the written boxes.
    flagged : bool
        A field-level reason to check it: a gap, doubtful boxes, page warnings, an odd layout.
    resolution : str or None
        The field-level decision of a person, if any.
    """
    states = set(digit_states)
    if resolution == UNREADABLE:
        return UNREADABLE
    if TO_CHECK in states:
        return TO_CHECK
    if UNREADABLE in states:
        return UNREADABLE
    if flagged and resolution is None:
        return TO_CHECK
    for state in (CORRECTED, CONFIRMED):
        if resolution == state or state in states:
            return state
    return READ


def combine_states(states: Iterable[str]) -> str:
    """The state of a group (a page's fields): the first of :data:`STATES` present, else ``read``."""
    present = set(states)
    return next((s for s in STATES if s in present), READ)


def _as_read(prediction: str) -> str:
    """The value a box has when a person accepts the reading: a "not a digit" mark drops out."""
    return "" if prediction == UNREADABLE_MARK else prediction


def _counted(blank: int, state: str) -> bool:
    """Whether a box takes part in its field's state: written, or given a digit by a person."""
    return not blank or state != READ


# --------------------------------------------------------------------------- stored states


def _threshold(conn: sqlite3.Connection) -> float | None:
    row = conn.execute("SELECT value FROM settings WHERE key = 'threshold'").fetchone()
    return None if row is None else json.loads(row[0])


def _scope(page_ids: Sequence[int] | None, field_ids: Sequence[int] | None) -> tuple[str, list[int]]:
    if field_ids is not None:
        return f"f.id IN ({','.join('?' * len(field_ids))})", list(field_ids)
    if page_ids is not None:
        return f"f.page_id IN ({','.join('?' * len(page_ids))})", list(page_ids)
    return "1", []


def refresh_states(
    conn: sqlite3.Connection,
    *,
    page_ids: Sequence[int] | None = None,
    field_ids: Sequence[int] | None = None,
) -> list[int]:
    """Re-flag digits against the batch threshold, re-derive field values, check
    the template rules again and re-derive field states.

    Call inside a write transaction. Digits a person handled keep their
    state. Limited to the given pages or fields (all when both are None),
    except that the rules are checked on the whole page of each field in scope
    (a sum spans fields), see :func:`recheck_rules`.

    Returns
    -------
    list of int
        Ids of the fields whose value, typed value, rule problems or state changed.
    """
    where, params = _scope(page_ids, field_ids)
    threshold = _threshold(conn)
    conn.execute(
        f"""UPDATE digits SET state = CASE WHEN prediction = ? OR ? IS NULL OR confidence < ?
                                      THEN '{TO_CHECK}' ELSE '{READ}' END
            WHERE NOT blank AND state IN ('{READ}', '{TO_CHECK}')
              AND field_id IN (SELECT f.id FROM fields f WHERE {where})""",
        (UNREADABLE_MARK, threshold, threshold, *params),
    )
    boxes = _box_rows(conn, where, params)
    values = []
    for f in conn.execute(f"SELECT f.id, f.whole, f.value FROM fields f WHERE {where}", params):
        value = f["value"] if f["whole"] else field_value([d["value"] or "" for d in boxes[f["id"]]])[0]
        if value != f["value"]:
            values.append((value, f["id"]))
    conn.executemany("UPDATE fields SET value = ? WHERE id = ?", values)
    ruled = recheck_rules(conn, [r[0] for r in conn.execute(f"SELECT DISTINCT f.page_id FROM fields f WHERE {where}",
                                                             params)])
    if ruled:
        where = f"({where}) OR f.id IN ({','.join('?' * len(ruled))})"
        params = [*params, *ruled]
        boxes = _box_rows(conn, where, params)
    states = []
    for f in conn.execute(
        f"SELECT f.id, f.gap, f.doubts, f.rule_problems, f.resolution, f.state, p.warnings, p.odd_layout "
        f"FROM fields f JOIN pages p ON p.id = f.page_id WHERE {where}",
        params,
    ):
        digits = boxes[f["id"]]
        flagged = (bool(f["gap"]) or f["doubts"] != "[]" or f["rule_problems"] != "[]"
                   or f["warnings"] != "[]" or bool(f["odd_layout"]))
        state = field_state(
            (d["state"] for d in digits if _counted(d["blank"], d["state"])),
            flagged=flagged, resolution=f["resolution"],
        )
        if state != f["state"]:
            states.append((state, f["id"]))
    conn.executemany("UPDATE fields SET state = ? WHERE id = ?", states)
    return sorted({r[1] for r in values} | set(ruled) | {r[1] for r in states})


def _box_rows(conn: sqlite3.Connection, where: str, params: Sequence[Any]) -> dict[int, list[sqlite3.Row]]:
    boxes: dict[int, list[sqlite3.Row]] = defaultdict(list)
    for row in conn.execute(
        f"SELECT d.field_id, d.blank, d.value, d.state FROM digits d JOIN fields f ON f.id = d.field_id "
        f"WHERE {where} ORDER BY d.field_id, d.box",
        params,
    ):
        boxes[row["field_id"]].append(row)
    return boxes


@functools.lru_cache(maxsize=8)
def _template(text: str) -> Template:
    return template_from_json(json.loads(text))


def recheck_rules(conn: sqlite3.Connection, page_ids: Sequence[int]) -> list[int]:
    """Type the fields of pages read with a template and test its rules on their values now.

    Call inside a write transaction, after the field values are up to date.
    The values checked are the reviewed ones: each box's value, or for a
    field set as a whole its digits right-aligned in its boxes (the way the
    cards are filled in); an ``unreadable`` field counts as unreadable (no
    rule is tested on it, sums skip it). Updates ``fields.typed`` and
    ``fields.rule_problems``; a field a person had confirmed or corrected that
    now breaks a rule it did not break before loses that decision, so it is to
    check again. Pages whose template is not kept in the batch are left alone.

    Returns
    -------
    list of int
        Ids of the fields whose typed value or rule problems changed.
    """
    if not page_ids:
        return []
    marks = ",".join("?" * len(page_ids))
    pages = conn.execute(
        f"SELECT p.id, t.json FROM pages p JOIN templates t ON p.template = t.name || ' v' || t.version "
        f"WHERE p.id IN ({marks})",
        list(page_ids),
    ).fetchall()
    changed: list[int] = []
    for page in pages:
        template = _template(page["json"])
        where = "f.page_id = ?"
        boxes = _box_rows(conn, where, [page["id"]])
        rows = {r["name"]: r for r in conn.execute(
            "SELECT f.id, f.name, f.value, f.whole, f.resolution, f.typed, f.rule_problems "
            f"FROM fields f WHERE {where}", [page["id"]])}
        if set(rows) != {f.name for f in template.fields}:
            continue  # not the template's fields (cannot happen for a page it read)
        texts = {f.name: _review_texts(rows[f.name], boxes[rows[f.name]["id"]], len(f.boxes))
                 for f in template.fields}
        for name, typed in check_page(template, texts).items():
            row = rows[name]
            n = len(template.field(name).boxes)
            if row["whole"] and len(row["value"]) > n and row["resolution"] != UNREADABLE:
                typed.text = row["value"]
                typed.problems = [f"length: {len(row['value'])} digits given, the field has {n} boxes"]
            old = json.loads(row["rule_problems"])
            if (typed.text, typed.problems) == (row["typed"], old):
                continue
            keep = row["resolution"] if set(typed.problems) <= set(old) or row["resolution"] == UNREADABLE else None
            conn.execute("UPDATE fields SET typed = ?, rule_problems = ?, resolution = ? WHERE id = ?",
                         (typed.text, json.dumps(typed.problems), keep, row["id"]))
            changed.append(row["id"])
    return changed


def _review_texts(field_row: sqlite3.Row, digits: Sequence[sqlite3.Row], n: int) -> list[str]:
    """The per-box texts of a field as reviewed (see :func:`recheck_rules`)."""
    if field_row["resolution"] == UNREADABLE or (field_row["whole"] and len(field_row["value"]) > n):
        return [UNREADABLE_MARK] + [""] * (n - 1)
    if field_row["whole"]:
        value = field_row["value"]
        return [""] * (n - len(value)) + list(value)
    return [d["value"] or "" for d in digits]


def refresh_layout(conn: sqlite3.Connection) -> list[int]:
    """Flag the pages whose layout differs from the batch's most common one.

    Call inside a write transaction. Returns the ids of the pages whose flag changed.
    """
    row = conn.execute(
        "SELECT layout FROM pages WHERE layout IS NOT NULL GROUP BY layout "
        "ORDER BY COUNT(*) DESC, MIN(id) LIMIT 1"
    ).fetchone()
    if row is None:
        return []
    common = row[0]
    changed = [r[0] for r in conn.execute(
        "SELECT id FROM pages WHERE layout IS NOT NULL AND odd_layout != (layout != ?)", (common,))]
    if changed:
        conn.executemany(
            "UPDATE pages SET odd_layout = (layout != ?) WHERE id = ?", [(common, i) for i in changed]
        )
        refresh_states(conn, page_ids=changed)
    return changed


# --------------------------------------------------------------------------- the queue


@dataclass(frozen=True)
class ReviewItem:
    """A field or a digit to check.

    ``digit_id`` and ``box`` are None for a field. ``value`` is the current
    value, ``read`` the value as read (for a digit: the prediction, ``?`` for
    "not a digit"), ``confidence`` the digit's (for a field: the lowest of its
    written boxes, None if it has none), ``why`` the reasons it is flagged.
    """

    field_id: int
    digit_id: int | None
    file: str
    page: int
    field: str
    box: int | None
    value: str
    read: str
    confidence: float | None
    why: tuple[str, ...]
    sort_key: tuple = field(default=(), repr=False, compare=False)

    @property
    def ref(self) -> str:
        """``FILE:PAGE:FIELD``, as the ``inkcount review`` command takes it."""
        return f"{self.file}:{self.page}:{self.field}"


_FIELD_ITEMS = f"""
SELECT f.id, f.name, f.position, f.value, f.read_value, f.gap, f.doubts, f.rule_problems, p.page, p.warnings,
       p.odd_layout,
       fl.path, fl.id AS file_id,
       (SELECT MIN(d.confidence) FROM digits d WHERE d.field_id = f.id AND NOT d.blank) AS lowest,
       (SELECT COUNT(*) FROM digits d WHERE d.field_id = f.id AND d.state = '{TO_CHECK}'
            AND d.prediction = '{UNREADABLE_MARK}') AS marks,
       (SELECT COUNT(*) FROM digits d WHERE d.field_id = f.id AND d.state = '{TO_CHECK}'
            AND d.prediction != '{UNREADABLE_MARK}') AS doubtful
FROM fields f JOIN pages p ON p.id = f.page_id JOIN files fl ON fl.id = p.file_id
WHERE f.state = '{TO_CHECK}'
"""

_DIGIT_ITEMS = f"""
SELECT d.id AS digit_id, d.box, d.value, d.prediction, d.confidence, f.id, f.name, f.position,
       p.page, fl.path, fl.id AS file_id
FROM digits d JOIN fields f ON f.id = d.field_id JOIN pages p ON p.id = f.page_id
JOIN files fl ON fl.id = p.file_id
WHERE d.state = '{TO_CHECK}'
"""


def _field_reasons(row: sqlite3.Row) -> tuple[str, ...]:
    why = []
    if row["doubtful"]:
        why.append("low confidence")
    if row["marks"]:
        why.append("not a digit")
    if row["gap"]:
        why.append("gap")
    if row["doubts"] != "[]":
        why.append("boxes doubtful")
    why.extend(f"rule {p}" for p in json.loads(row["rule_problems"]))
    if row["warnings"] != "[]":
        why.append("page warnings")
    if row["odd_layout"]:
        why.append("layout differs")
    return tuple(why)


class ReviewQueue:
    """What is left to check in a batch, in a chosen order.

    Parameters
    ----------
    batch : Batch
    order : {"page", "confidence", "digit"}
        ``"page"``: by file, page and field position; ``"confidence"``: lowest
        confidence first; ``"digit"``: grouped by the digit read (all the 7s
        together, "not a digit" last), lowest confidence first in each group.
    unit : {"field", "digit"}, optional
        Items are fields (default) or single digits; ``order="digit"`` always
        lists digits. The digit queue holds digits to check only: fields
        flagged for a gap, doubtful boxes, page warnings or their layout are in the field queue.

    The queue reads the batch each time it is asked, so it follows changes.
    Iterating it goes on from the last item handed out, skipping anything
    resolved meanwhile.
    """

    def __init__(self, batch: Batch, *, order: str = "page", unit: str | None = None) -> None:
        if order not in ORDERS:
            raise ValueError(f"order must be one of {ORDERS}, got {order!r}")
        unit = unit or ("digit" if order == "digit" else "field")
        if unit not in ("field", "digit") or (order == "digit" and unit != "digit"):
            raise ValueError(f"unit must be 'field' or 'digit' ('digit' for order='digit'), got {unit!r}")
        self.batch = batch
        self.order = order
        self.unit = unit

    def items(self) -> list[ReviewItem]:
        """Everything left to check, in order."""
        items = self._field_items() if self.unit == "field" else self._digit_items()
        return sorted(items, key=lambda item: item.sort_key)

    def __len__(self) -> int:
        return len(self.items())

    def next(self, after: ReviewItem | None = None) -> ReviewItem | None:
        """The first item to check, or the first one coming after ``after`` in the order."""
        for item in self.items():
            if after is None or item.sort_key > after.sort_key:
                return item
        return None

    def __iter__(self) -> Iterator[ReviewItem]:
        item = self.next()
        while item is not None:
            yield item
            item = self.next(after=item)

    def _key(self, row: sqlite3.Row, confidence: float | None, box: int) -> tuple:
        where = (row["file_id"], row["page"], row["position"], box)
        rank = 2.0 if confidence is None else confidence
        if self.order == "page":
            return where
        if self.order == "confidence":
            return (rank, *where)
        group = NOT_A_DIGIT if row["prediction"] == UNREADABLE_MARK else int(row["prediction"])
        return (group, rank, *where)

    def _field_items(self) -> list[ReviewItem]:
        return [
            ReviewItem(
                r["id"], None, r["path"], r["page"], r["name"], None, r["value"], r["read_value"],
                r["lowest"], _field_reasons(r), self._key(r, r["lowest"], -1),
            )
            for r in self.batch.rows(_FIELD_ITEMS)
        ]

    def _digit_items(self) -> list[ReviewItem]:
        return [
            ReviewItem(
                r["id"], r["digit_id"], r["path"], r["page"], r["name"], r["box"], r["value"] or "",
                r["prediction"], r["confidence"],
                ("not a digit",) if r["prediction"] == UNREADABLE_MARK else ("low confidence",),
                self._key(r, r["confidence"], r["box"]),
            )
            for r in self.batch.rows(_DIGIT_ITEMS)
        ]


# --------------------------------------------------------------------------- actions


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
    files = [(r["id"], r["path"]) for r in batch.rows("SELECT id, path FROM files")]
    matches = [fid for fid, path in files if path == file]
    if not matches:
        want = Path(file).parts
        matches = [fid for fid, path in files if Path(path).parts[-len(want):] == want] if want else []
    if not matches:
        raise ReviewError(f"no file {file!r} in this batch")
    if len(matches) > 1:
        raise ReviewError(f"{file!r} matches {len(matches)} files in this batch; give more of its path")
    rows = batch.rows(
        "SELECT f.id FROM fields f JOIN pages p ON p.id = f.page_id "
        "WHERE p.file_id = ? AND p.page = ? AND f.name = ?",
        (matches[0], page, name),
    )
    if not rows:
        raise ReviewError(f"no field {name!r} on page {page} of {file!r}")
    return int(rows[0][0])


def _snapshot(conn: sqlite3.Connection, field_id: int) -> dict[str, Any]:
    f = conn.execute("SELECT value, whole, resolution FROM fields WHERE id = ?", (field_id,)).fetchone()
    digits = conn.execute("SELECT id, value, state FROM digits WHERE field_id = ?", (field_id,)).fetchall()
    return {"field": [f["value"], f["whole"], f["resolution"]], "digits": [list(d) for d in digits]}


def _restore(conn: sqlite3.Connection, field_id: int, snapshot: dict[str, Any]) -> None:
    value, whole, resolution = snapshot["field"]
    conn.execute("UPDATE fields SET value = ?, whole = ?, resolution = ? WHERE id = ?",
                 (value, whole, resolution, field_id))
    conn.executemany("UPDATE digits SET value = ?, state = ? WHERE id = ?",
                     [(v, s, i) for i, v, s in snapshot["digits"]])


def _record(conn, *, reviewer: str | None, kind, field_id=None, digit_id=None, old=None, new=None,
            before=None, undoes=None) -> Action:
    time = timestamp()
    reviewer = reviewer or default_reviewer()
    cur = conn.execute(
        "INSERT INTO actions (time, reviewer, kind, field_id, digit_id, old_value, new_value, before, undoes) "
        "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (time, reviewer, kind, field_id, digit_id, old, new,
         None if before is None else json.dumps(before), undoes),
    )
    return Action(int(cur.lastrowid), time, reviewer, kind, field_id, digit_id, old, new, undoes)


def _digit_row(batch: Batch, digit_id: int) -> sqlite3.Row:
    rows = batch.rows(
        "SELECT d.id, d.field_id, d.blank, d.prediction, d.value, d.state, f.whole "
        "FROM digits d JOIN fields f ON f.id = d.field_id WHERE d.id = ?",
        (digit_id,),
    )
    if not rows:
        raise ReviewError(f"no digit {digit_id} in this batch")
    return rows[0]


def _field_value(conn: sqlite3.Connection, field_id: int) -> str:
    row = conn.execute("SELECT value FROM fields WHERE id = ?", (field_id,)).fetchone()
    if row is None:
        raise ReviewError(f"no field {field_id} in this batch")
    return row[0]


def _field_action(batch: Batch, kind: str, field_id: int, reviewer: str | None, change,
                  *, digit_id: int | None = None, old: str | None = None, new: str | None = None) -> Action:
    """Run ``change(conn)`` on one field in one transaction, re-derive it and record the action."""
    with batch.transaction() as conn:
        before_value = _field_value(conn, field_id)
        before = _snapshot(conn, field_id)
        change(conn)
        touched = refresh_states(conn, field_ids=[field_id])
        if digit_id is None:
            old, new = before_value, _field_value(conn, field_id)
        action = _record(conn, reviewer=reviewer, kind=kind, field_id=field_id,
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
    if row["whole"]:
        raise ReviewError("this field's value was set as a whole; set the whole field again")
    state = (READ if row["blank"] else CONFIRMED) if value == _as_read(row["prediction"]) else CORRECTED

    def change(conn):
        conn.execute("UPDATE digits SET value = ?, state = ? WHERE id = ?", (value, state, digit_id))

    return _field_action(batch, "set digit", row["field_id"], reviewer, change,
                         digit_id=digit_id, old=row["value"], new=value)


def set_field(batch: Batch, field_id: int, value: str, *, reviewer: str | None = None) -> Action:
    """Give a whole field its value (digits only; ``""`` for an empty field).

    With as many digits as the field has written boxes, each box gets its
    digit (``confirmed`` where it was read so, ``corrected`` elsewhere);
    otherwise the value is set as a whole (see the module docstring).
    """
    if value and not (value.isascii() and value.isdigit()):
        raise ReviewError(f"a field value is made of digits 0-9, not {value!r}")

    def change(conn):
        boxes = [d for d in conn.execute(
            "SELECT id, blank, prediction, state FROM digits WHERE field_id = ? ORDER BY box", (field_id,))
            if _counted(d["blank"], d["state"])]
        if len(boxes) == len(value):
            states = [CONFIRMED if ch == _as_read(d["prediction"]) else CORRECTED for ch, d in zip(value, boxes)]
            conn.executemany("UPDATE digits SET value = ?, state = ? WHERE id = ?",
                             [(ch, s, d["id"]) for ch, s, d in zip(value, states, boxes)])
            resolution = CORRECTED if CORRECTED in states else CONFIRMED
            conn.execute("UPDATE fields SET whole = 0, resolution = ? WHERE id = ?", (resolution, field_id))
        else:
            conn.executemany("UPDATE digits SET value = NULL, state = ? WHERE id = ?",
                             [(CORRECTED, d["id"]) for d in boxes])
            conn.execute("UPDATE fields SET whole = 1, value = ?, resolution = ? WHERE id = ?",
                         (value, CORRECTED, field_id))

    return _field_action(batch, "set field", field_id, reviewer, change)


def _one_target(field: int | None, digit: int | None) -> None:
    if (field is None) == (digit is None):
        raise TypeError("give exactly one of field= or digit=")


def confirm(batch: Batch, *, field: int | None = None, digit: int | None = None,
            reviewer: str | None = None) -> Action:
    """Say the value of a field or a digit, as it now stands, is right.

    A box read as "not a digit" and confirmed drops out of the value (its
    value becomes ``""``). Boxes a person corrected stay ``corrected``.
    """
    _one_target(field, digit)
    if digit is not None:
        row = _digit_row(batch, digit)

        def change_digit(conn):
            if row["state"] != CORRECTED and not (row["blank"] and row["state"] == READ):
                conn.execute("UPDATE digits SET value = ?, state = ? WHERE id = ?",
                             (_as_read(row["prediction"]), CONFIRMED, digit))

        return _field_action(batch, "confirm digit", row["field_id"], reviewer, change_digit,
                             digit_id=digit, old=row["value"], new=_as_read(row["prediction"]))

    def change_field(conn):
        for d in conn.execute("SELECT id, blank, prediction, state FROM digits WHERE field_id = ?", (field,)):
            if _counted(d["blank"], d["state"]) and d["state"] != CORRECTED:
                conn.execute("UPDATE digits SET value = ?, state = ? WHERE id = ?",
                             (_as_read(d["prediction"]), CONFIRMED, d["id"]))
        conn.execute(
            "UPDATE fields SET resolution = CASE WHEN resolution = ? THEN ? ELSE ? END WHERE id = ?",
            (CORRECTED, CORRECTED, CONFIRMED, field),
        )

    return _field_action(batch, "confirm field", field, reviewer, change_field)


def mark_unreadable(batch: Batch, *, field: int | None = None, digit: int | None = None,
                    reviewer: str | None = None) -> Action:
    """Say a field or a digit cannot be read (an unreadable field exports as empty)."""
    _one_target(field, digit)
    if digit is not None:
        row = _digit_row(batch, digit)
        return _field_action(
            batch, "unreadable digit", row["field_id"], reviewer,
            lambda conn: conn.execute("UPDATE digits SET state = ? WHERE id = ?", (UNREADABLE, digit)),
            digit_id=digit, old=row["value"], new=row["value"],
        )
    return _field_action(
        batch, "unreadable field", field, reviewer,
        lambda conn: conn.execute("UPDATE fields SET resolution = ? WHERE id = ?", (UNREADABLE, field)),
    )


def undo(batch: Batch, *, reviewer: str | None = None) -> Action | None:
    """Take back the last action of ``reviewer`` still in effect; None if there is none.

    Raises
    ------
    ReviewError
        Someone changed the same field after that action.
    """
    reviewer = reviewer or default_reviewer()
    kinds = ",".join("?" * len(_REVIEW_KINDS))
    with batch.transaction() as conn:
        target = conn.execute(
            f"SELECT * FROM actions WHERE reviewer = ? AND kind IN ({kinds}) AND undone_by IS NULL "
            "ORDER BY id DESC LIMIT 1",
            (reviewer, *_REVIEW_KINDS),
        ).fetchone()
        if target is None:
            return None
        later = conn.execute(
            f"SELECT reviewer, kind, time FROM actions WHERE id > ? AND field_id = ? AND kind IN ({kinds}) "
            "AND undone_by IS NULL ORDER BY id DESC LIMIT 1",
            (target["id"], target["field_id"], *_REVIEW_KINDS),
        ).fetchone()
        if later is not None:
            raise ReviewError(
                f"cannot undo {target['kind']!r} of {target['time']}: {later['reviewer']} changed the same "
                f"field after it ({later['kind']!r} at {later['time']}); that must be undone first"
            )
        field_id = target["field_id"]
        old = _field_value(conn, field_id)
        before = _snapshot(conn, field_id)
        _restore(conn, field_id, json.loads(target["before"]))
        touched = refresh_states(conn, field_ids=[field_id])
        action = _record(conn, reviewer=reviewer, kind="undo", field_id=field_id, digit_id=target["digit_id"],
                         old=old, new=_field_value(conn, field_id), before=before, undoes=target["id"])
        conn.execute("UPDATE actions SET undone_by = ? WHERE id = ?", (action.id, target["id"]))
    batch.notify(Change("review", field_ids=_with_others(field_id, touched)))
    return action


def _with_others(field_id: int, touched: Sequence[int]) -> tuple[int, ...]:
    """The action's field first, then the other fields its re-checked rules changed (a sum's)."""
    return (field_id, *(i for i in touched if i != field_id))


def actions(batch: Batch) -> list[Action]:
    """Every recorded action, oldest first."""
    return [
        Action(r["id"], r["time"], r["reviewer"], r["kind"], r["field_id"], r["digit_id"],
               r["old_value"], r["new_value"], r["undoes"], r["undone_by"])
        for r in batch.rows("SELECT * FROM actions ORDER BY id")
    ]


# --------------------------------------------------------------------------- threshold and model


def _reflag_all(batch: Batch, conn: sqlite3.Connection, *, reviewer: str | None, kind: str,
                old: Any, new: Any, **settings: Any) -> None:
    batch.update_settings(conn, **settings)
    _record(conn, reviewer=reviewer, kind=kind, old=json.dumps(old), new=json.dumps(new))
    refresh_states(conn)


def _to_check_count(batch: Batch) -> int:
    return int(batch.rows("SELECT COUNT(*) FROM fields WHERE state = ?", (TO_CHECK,))[0][0])


def set_threshold(batch: Batch, threshold: float, *, reviewer: str | None = None) -> int:
    """Use a fixed confidence threshold (0..1) and re-flag; return the fields now to check."""
    if not 0.0 <= threshold <= 1.0:
        raise ReviewError(f"the threshold is between 0 and 1, not {threshold}")
    with batch.transaction() as conn:
        _reflag_all(batch, conn, reviewer=reviewer, kind="threshold", old=batch.settings.threshold,
                    new=float(threshold), threshold=float(threshold), threshold_source="manual")
    batch.notify(Change("flags"))
    return _to_check_count(batch)


def set_target_error(batch: Batch, target: float, *, model: DigitModel | None = None,
                     reviewer: str | None = None) -> float:
    """Set the threshold from the model's calibration for ``target`` (e.g. 0.001); return it.

    ``model`` defaults to the batch's model file; it must be the model that read
    the batch (its threshold curve is what the target is read from).
    """
    if not 0.0 < target < 1.0:
        raise ReviewError(f"the target residual error is a share between 0 and 1, not {target}")
    current = batch.settings
    model = model or load_model(current.model_path)
    if current.model_version is not None and model.version != current.model_version:
        raise ReviewError(
            f"model {model.version} did not read this batch ({current.model_version}); "
            "re-read the batch with it first"
        )
    threshold = float(model.threshold_for(target))
    with batch.transaction() as conn:
        _reflag_all(batch, conn, reviewer=reviewer, kind="target error", old=current.target_error,
                    new=float(target), threshold=threshold, target_error=float(target),
                    threshold_source="target")
    batch.notify(Change("flags"))
    return threshold


@dataclass
class RereadSummary:
    """What :func:`reread_unchecked` did: digits read again, and how many changed their reading."""

    digits: int = 0
    changed: int = 0
    threshold: float | None = None


def reread_unchecked(batch: Batch, model: DigitModel, *, model_path: str | None = None,
                     reviewer: str | None = None) -> RereadSummary:
    """Read again, with ``model``, every written box no person has handled.

    Boxes ``corrected``, ``confirmed`` or ``unreadable`` keep their values.
    The cells are cut again from the stored page images. Each box re-read
    records ``model.version``; the batch's model becomes ``model`` (and
    ``model_path`` if given), and a threshold that follows a target residual
    error is recomputed from the new model's calibration. One transaction per
    page, so an interrupted run can simply be started again.
    """
    current = batch.settings
    summary = RereadSummary(threshold=current.threshold)
    with batch.transaction() as conn:
        values: dict[str, Any] = {"model_version": model.version}
        if model_path is not None:
            values["model_path"] = model_path
        if current.threshold_source == "target":
            summary.threshold = float(model.threshold_for(current.target_error))
            values["threshold"] = summary.threshold
        batch.update_settings(conn, **values)
        _record(conn, reviewer=reviewer, kind="reread",
                old=current.model_version, new=model.version)
    pages = batch.rows(
        f"SELECT DISTINCT f.page_id FROM digits d JOIN fields f ON f.id = d.field_id "
        f"WHERE NOT d.blank AND d.state IN ('{READ}', '{TO_CHECK}') ORDER BY f.page_id"
    )
    for (page_id,) in pages:
        _reread_page(batch, model, page_id, summary)
    with batch.transaction() as conn:
        refresh_states(conn)
    batch.notify(Change("flags"))
    return summary


def _reread_page(batch: Batch, model: DigitModel, page_id: int, summary: RereadSummary) -> None:
    image = batch.page_image(page_id)
    dpi = batch.rows("SELECT dpi FROM pages WHERE id = ?", (page_id,))[0][0]
    rows = batch.rows(
        f"SELECT d.id, d.box, d.prediction, f.id AS field_id, f.boxes FROM digits d "
        f"JOIN fields f ON f.id = d.field_id "
        f"WHERE f.page_id = ? AND NOT d.blank AND d.state IN ('{READ}', '{TO_CHECK}')",
        (page_id,),
    )
    cells: dict[int, list] = {}
    for r in rows:
        if r["field_id"] not in cells:
            boxes = [Box(*b) for b in json.loads(r["boxes"])]
            cells[r["field_id"]] = cut_cells(image, boxes, dpi=dpi)
    wanted = [r for r in rows if not cells[r["field_id"]][r["box"]].blank]
    if not wanted:
        return
    probs = model.predict_proba(np.stack([cells[r["field_id"]][r["box"]].mnist for r in wanted]))
    updates = []
    for r, p in zip(wanted, probs):
        best = int(np.argmax(p))
        text = UNREADABLE_MARK if best == NOT_A_DIGIT else CLASSES[best]
        summary.changed += text != r["prediction"]
        updates.append((np.asarray(p, "<f4").tobytes(), text, float(p[best]), model.version, text, r["id"]))
    with batch.transaction() as conn:
        conn.executemany(
            "UPDATE digits SET probs = ?, prediction = ?, confidence = ?, model_version = ?, value = ? "
            "WHERE id = ?",
            updates,
        )
        refresh_states(conn, page_ids=[page_id])
    summary.digits += len(updates)


# --------------------------------------------------------------------------- counts


def state_counts(batch: Batch) -> dict[str, Counter]:
    """Pages, fields and digits counted by state: ``{"pages": Counter, "fields": ..., "digits": ...}``."""
    fields = batch.rows("SELECT page_id, state FROM fields")
    by_page: dict[int, list[str]] = defaultdict(list)
    for r in fields:
        by_page[r["page_id"]].append(r["state"])
    pages = Counter(
        UNREADABLE if r["problem"] else combine_states(by_page[r["id"]])
        for r in batch.rows("SELECT id, problem FROM pages")
    )
    digits = Counter(
        r[0] for r in batch.rows(f"SELECT state FROM digits WHERE NOT blank OR state != '{READ}'")
    )
    return {"pages": pages, "fields": Counter(r["state"] for r in fields), "digits": digits}
