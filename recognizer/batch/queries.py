"""Read-only views of a batch for a program showing it: per-page counts, one
field with its boxes, the fields of a page, and what a threshold would do.

Everything here only reads what is stored (no recognition, no writes); the
meaning of the states is in :mod:`recognizer.review.actions`, the tables in
:mod:`recognizer.batch.store`. Functions taking ``field_ids`` or ``page_ids``
return nothing for an empty list.
"""

from __future__ import annotations

import json
from collections import defaultdict
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import NamedTuple

import numpy as np

from recognizer.batch.store import Batch
from recognizer.review.actions import CONFIRMED, CORRECTED, READ, TO_CHECK, UNREADABLE, combine_states, digit_to_check

__all__ = [
    "PageSummary",
    "DigitView",
    "FieldView",
    "PageField",
    "OpenDigits",
    "page_summaries",
    "field_states",
    "load_field",
    "page_fields",
    "pages_of_fields",
    "digit_states",
    "open_digits",
    "labelled_count",
]

BoxEdges = tuple[int, int, int, int]


def _marks(ids: list[int]) -> str:
    return ",".join("?" * len(ids))


def _boxes(text: str) -> tuple[BoxEdges, ...]:
    return tuple(tuple(b) for b in json.loads(text))


# --------------------------------------------------------------------------- pages


@dataclass(frozen=True)
class PageSummary:
    """One page of the batch, counted.

    ``to_check`` and ``done`` count fields (done = corrected, confirmed or
    unreadable); ``state`` is the page's combined state (``unreadable`` for a
    page or file that could not be read, whose ``problem`` says why);
    ``label`` is the file name, with ``, page N`` when its file has several pages.
    """

    page_id: int
    file: str
    page: int | None
    to_check: int
    done: int
    fields: int
    problem: str | None
    state: str
    label: str


def page_summaries(batch: Batch, page_ids: Iterable[int] | None = None) -> list[PageSummary]:
    """Per-page counts of fields to check and done, in file and page order (all pages when None)."""
    where, params = "", []
    if page_ids is not None:
        ids = list(page_ids)
        if not ids:
            return []
        where, params = f"WHERE p.id IN ({_marks(ids)})", ids
    states: dict[int, list[str]] = defaultdict(list)
    for r in batch.rows(f"SELECT f.page_id, f.state FROM fields f JOIN pages p ON p.id = f.page_id {where}", params):
        states[r[0]].append(r[1])
    pages_per_file = {r[0]: r[1] for r in batch.rows("SELECT file_id, COUNT(*) FROM pages GROUP BY file_id")}
    out = []
    for r in batch.rows(
        f"SELECT p.id, p.page, p.problem, p.file_id, fl.path FROM pages p JOIN files fl ON fl.id = p.file_id {where} "
        "ORDER BY fl.id, p.page", params,
    ):
        s = states.get(r["id"], [])
        done = sum(1 for x in s if x in (CORRECTED, CONFIRMED, UNREADABLE))
        state = UNREADABLE if r["problem"] else combine_states(s)
        label = Path(r["path"]).name
        if r["page"] is not None and pages_per_file.get(r["file_id"], 1) > 1:
            label += f", page {r['page']}"
        out.append(PageSummary(r["id"], r["path"], r["page"], s.count(TO_CHECK), done, len(s), r["problem"],
                               state, label))
    return out


def pages_of_fields(batch: Batch, field_ids: Iterable[int]) -> set[int]:
    """Ids of the pages the given fields are on."""
    ids = list(field_ids)
    if not ids:
        return set()
    return {r[0] for r in batch.rows(f"SELECT DISTINCT page_id FROM fields WHERE id IN ({_marks(ids)})", ids)}


# --------------------------------------------------------------------------- fields


def field_states(batch: Batch, field_ids: Iterable[int] | None = None) -> dict[int, str]:
    """``{field id: state}`` for the given fields (all when None)."""
    if field_ids is None:
        rows = batch.rows("SELECT id, state FROM fields")
    else:
        ids = list(field_ids)
        if not ids:
            return {}
        rows = batch.rows(f"SELECT id, state FROM fields WHERE id IN ({_marks(ids)})", ids)
    return {r[0]: r[1] for r in rows}


@dataclass(frozen=True)
class DigitView:
    """One box of a field: what the model read (``read``), its value now and its state."""

    digit_id: int
    box: int
    blank: bool
    read: str
    value: str | None
    confidence: float
    state: str

    @property
    def counted(self) -> bool:
        """Written, or given a digit by a person: the boxes a clerk types into."""
        return not self.blank or self.state != READ


@dataclass(frozen=True)
class FieldView:
    """One field whatever its state: where it is, its boxes (pixel edges
    ``(x0, y0, x1, y1)`` on the stored page) and their readings, its value and state."""

    field_id: int
    page_id: int
    file: str
    page: int
    name: str
    position: int
    boxes: tuple[BoxEdges, ...]
    value: str
    read_value: str
    whole: bool
    state: str
    digits: tuple[DigitView, ...]

    @property
    def slots(self) -> list[DigitView]:
        """The counted boxes (see :attr:`DigitView.counted`), in order."""
        return [d for d in self.digits if d.counted]

    @property
    def place(self) -> str:
        return f"{Path(self.file).name}, page {self.page}, field {self.name}"


def load_field(batch: Batch, field_id: int) -> FieldView:
    """One field with all its boxes (no images).

    Raises
    ------
    KeyError
        No field of that id.
    """
    rows = batch.rows(
        "SELECT f.id, f.page_id, f.name, f.position, f.boxes, f.value, f.read_value, f.whole, f.state, "
        "p.page, fl.path FROM fields f JOIN pages p ON p.id = f.page_id "
        "JOIN files fl ON fl.id = p.file_id WHERE f.id = ?", (field_id,),
    )
    if not rows:
        raise KeyError(f"no field {field_id}")
    r = rows[0]
    digits = [
        DigitView(d["id"], d["box"], bool(d["blank"]), d["prediction"], d["value"], float(d["confidence"]), d["state"])
        for d in batch.rows(
            "SELECT id, box, blank, prediction, value, confidence, state FROM digits WHERE field_id = ? ORDER BY box",
            (field_id,),
        )
    ]
    return FieldView(
        r["id"], r["page_id"], r["path"], r["page"], r["name"], r["position"], _boxes(r["boxes"]), r["value"],
        r["read_value"], bool(r["whole"]), r["state"], tuple(digits),
    )


class PageField(NamedTuple):
    """A field as a page outline shows it (unpacks as ``field_id, name, state, boxes``)."""

    field_id: int
    name: str
    state: str
    boxes: tuple[BoxEdges, ...]


def page_fields(batch: Batch, page_id: int) -> list[PageField]:
    """Every field of a page, in reading order."""
    return [
        PageField(r["id"], r["name"], r["state"], _boxes(r["boxes"]))
        for r in batch.rows("SELECT id, name, state, boxes FROM fields WHERE page_id = ? ORDER BY position", (page_id,))
    ]


# --------------------------------------------------------------------------- digits


def digit_states(batch: Batch, field_ids: Iterable[int]) -> dict[int, str]:
    """``{digit id: state}`` of the written boxes of the given fields."""
    ids = list(field_ids)
    if not ids:
        return {}
    return {r[0]: r[1] for r in
            batch.rows(f"SELECT id, state FROM digits WHERE field_id IN ({_marks(ids)}) AND NOT blank", ids)}


@dataclass(frozen=True)
class OpenDigits:
    """The written digits no person has handled yet (state ``read`` or ``to check``):
    the ones another threshold can send to a person or let through.

    Attributes
    ----------
    predictions : tuple of str
        What the model read, per digit (``?`` for not a digit).
    confidences : ndarray, float64, shape (n,), 0..1
    to_check_now : int
        Digits in state ``to check`` now (any digit, handled or not).
    """

    predictions: tuple[str, ...]
    confidences: np.ndarray
    to_check_now: int

    def to_check_at(self, threshold: float | None) -> int:
        """How many of them a ``threshold`` (0..1) would send to a person, without applying it."""
        return sum(digit_to_check(p, float(c), threshold) for p, c in zip(self.predictions, self.confidences))


def open_digits(batch: Batch) -> OpenDigits:
    """The digits a new threshold can re-flag (see :class:`OpenDigits`)."""
    rows = batch.rows(f"SELECT prediction, confidence FROM digits WHERE NOT blank AND state IN ('{READ}', '{TO_CHECK}')")
    now = int(batch.rows(f"SELECT COUNT(*) FROM digits WHERE state = '{TO_CHECK}'")[0][0])
    return OpenDigits(tuple(r[0] for r in rows), np.array([r[1] for r in rows], np.float64), now)


def labelled_count(batch: Batch) -> int:
    """How many boxes a person corrected or confirmed to a per-box value (a quick count of
    :func:`recognizer.batch.store.labelled_samples`, without cutting any cell)."""
    return int(batch.rows(
        f"SELECT COUNT(*) FROM digits WHERE state IN ('{CORRECTED}', '{CONFIRMED}') AND NOT blank AND value IS NOT NULL"
    )[0][0])
